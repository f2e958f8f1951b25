"""Threshold profiles: every cut point the ensemble uses on each feature, on the review data.

A cut is placed on the review data's distribution by the share of the feature's observed
(non-missing) values that the split sends left, under the model's own comparison rule
(scikit-learn: ``float32(x) <= t``; XGBoost: ``float32(x) < t``). For ``<=`` this is the
empirical CDF of the data at the cut. A cut that sends every observed value the same way
(share 0 or 1) lies outside the observed range: the data never tests it. An infinite cut
(scikit-learn writes one when a split separates missing values from all others) is marked
as such and not placed.

A categorical feature has no cut points: its splits send sets of categories each way. Its
profile lists the distinct sets with their counts and, per category, how many of the
feature's splits send that category left (``category_sets``, ``left_counts``), in the
categories' names.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..forest import COMPARE_LT_FLOAT32, Forest
from .usage import split_nodes

BELOW, INSIDE, ABOVE = -1, 0, 1
MISSING_ONLY = 2  # an infinite cut: it separates missing values from all observed ones
RULES = {"le": "x <= cut goes left", "lt": "x < cut goes left"}


@dataclass
class FeatureCuts:
    """The cuts one feature gets, in ascending order.

    Attributes
    ----------
    feature : str
    index : int
        Column of the feature.
    cuts : ndarray
        Distinct thresholds (as the model compares them).
    counts : ndarray of int
        Split nodes using each cut.
    quantiles : ndarray
        Share of the observed review values sent left by each cut (NaN without data).
    side : ndarray of int
        -1 below the observed range (sends every value right), +1 above (every value left),
        0 inside, 2 an infinite cut that only separates missing values (quantile NaN).
        Without data: 0, or 2 for infinite cuts.
    n_observed, n_missing : int
        Review values present and missing for the feature (0 and 0 without data).
    data_summary : dict
        ``min``, ``q25``, ``median``, ``q75``, ``max`` of the observed values (empty without
        data or when every value is missing).
    categories : list of str
        A categorical feature's category names in code order (empty for a numeric feature,
        whose ``cuts`` then hold everything).
    category_sets : list of dict
        A categorical feature's distinct splits, most used first: ``left`` and ``right`` (the
        category names each side), ``other_left`` (where any other category goes),
        ``count`` (split nodes) and ``share_left`` (share of the observed review values sent
        left, None without data).
    left_counts : ndarray of int
        Per category, the feature's split nodes that send it left.
    """

    feature: str
    index: int
    cuts: np.ndarray
    counts: np.ndarray
    quantiles: np.ndarray
    side: np.ndarray
    n_observed: int = 0
    n_missing: int = 0
    data_summary: dict = field(default_factory=dict)
    categories: list = field(default_factory=list)
    category_sets: list = field(default_factory=list)
    left_counts: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def is_categorical(self) -> bool:
        return bool(self.categories)

    @property
    def outside(self) -> np.ndarray:
        """True for cuts outside the observed range."""
        return (self.side == BELOW) | (self.side == ABOVE)

    @property
    def placed(self) -> np.ndarray:
        """True for cuts inside the observed range (or every finite cut without data)."""
        return self.side == INSIDE

    @property
    def n_missing_only(self) -> int:
        """Split nodes whose (infinite) cut only separates missing values."""
        return int(self.counts[self.side == MISSING_ONLY].sum())

    @property
    def n_splits(self) -> int:
        return int(self.counts.sum()) + sum(int(s["count"]) for s in self.category_sets)

    def to_dict(self) -> dict:
        return {"feature": self.feature, "index": self.index, "cuts": self.cuts.tolist(),
                "categories": list(self.categories), "category_sets": list(self.category_sets),
                "left_counts": self.left_counts.tolist(),
                "counts": self.counts.tolist(),
                "quantiles": [None if np.isnan(q) else float(q) for q in self.quantiles],
                "side": self.side.tolist(), "outside": self.outside.tolist(),
                "n_observed": self.n_observed, "n_missing": self.n_missing,
                "data_summary": dict(self.data_summary)}


@dataclass
class ThresholdProfiles:
    """Cut points per feature (see :func:`threshold_profiles`).

    Attributes
    ----------
    features : list of FeatureCuts
        One per model feature, in the model's column order (features without splits have
        empty arrays).
    rule : str
        How a split compares (``"x <= cut goes left"`` or ``"x < cut goes left"``).
    has_data : bool
        Whether review data placed the cuts.
    n_rows : int
        Review rows (0 without data).
    """

    features: list[FeatureCuts]
    rule: str
    has_data: bool
    n_rows: int = 0

    @property
    def feature_names(self) -> list[str]:
        return [f.feature for f in self.features]

    def __getitem__(self, name: str) -> FeatureCuts:
        for f in self.features:
            if f.feature == name:
                return f
        raise KeyError(name)

    def n_outside(self) -> dict[str, int]:
        """Split nodes (not distinct cuts) outside the observed range, per feature."""
        return {f.feature: int(f.counts[f.outside].sum()) for f in self.features}

    def to_dict(self) -> dict:
        return {"kind": "threshold_profiles", "rule": self.rule, "has_data": self.has_data,
                "n_rows": self.n_rows, "features": [f.to_dict() for f in self.features]}

    def to_rows(self) -> list[dict]:
        """One row per (feature, cut) for a CSV table; a categorical feature's sets as text."""
        rows = [{"feature": f.feature, "cut": float(c), "splits": int(n),
                 "quantile": "" if np.isnan(q) else float(q),
                 "outside_range": {BELOW: "below", ABOVE: "above"}.get(int(s), ""),
                 "missing_only": int(s) == MISSING_ONLY}
                for f in self.features
                for c, n, q, s in zip(f.cuts, f.counts, f.quantiles, f.side)]
        rows += [{"feature": f.feature, "cut": set_text(s), "splits": int(s["count"]),
                  "quantile": "" if s["share_left"] is None else float(s["share_left"]),
                  "outside_range": "", "missing_only": False}
                 for f in self.features for s in f.category_sets]
        return rows


def set_text(split: dict, at_most: int = 6) -> str:
    """A categorical split in words: ``in {a, b} (left) | {c} (right)``."""
    def names(side: list[str]) -> str:
        shown = ", ".join(side[:at_most])
        return "{" + shown + (f", … {len(side) - at_most} more" if len(side) > at_most else "") + "}"
    other = "others left" if split["other_left"] else "others right"
    return f"{names(split['left'])} left | {names(split['right'])} right; {other}"


def _distinct_cuts(forest: Forest) -> list[tuple[np.ndarray, np.ndarray]]:
    """(cuts, counts) per feature, from all numeric split nodes at once."""
    nodes = split_nodes(forest)
    numeric = ~nodes.categorical
    nodes = type(nodes)(**{k: getattr(nodes, k)[numeric] for k in nodes.__dataclass_fields__})
    order = np.lexsort((nodes.threshold, nodes.feature))
    feat, thr = nodes.feature[order], nodes.threshold[order]
    new = np.ones(feat.shape[0], dtype=bool)
    new[1:] = (feat[1:] != feat[:-1]) | (thr[1:] != thr[:-1])
    starts = np.flatnonzero(new)
    counts = np.diff(np.append(starts, feat.shape[0]))
    u_feat, u_thr = feat[starts], thr[starts]
    out = []
    for j in range(forest.n_features):
        sel = u_feat == j
        out.append((u_thr[sel], counts[sel].astype(np.int64)))
    return out


def _category_sets(forest: Forest, j: int, codes: np.ndarray | None):
    """The distinct splits on categorical feature ``j`` (most used first) and, per category,
    the splits that send it left."""
    names = forest.categories[j]
    found: dict = {}
    for t in forest.trees:
        for k, split in (t.categorical or {}).items():
            if t.feature[k] != j:
                continue
            key = (tuple(int(c) for c in split.left), tuple(int(c) for c in split.right),
                   bool(split.other_left))
            found[key] = found.get(key, 0) + 1
    left_counts = np.zeros(len(names), dtype=np.int64)
    sets = []
    observed = None if codes is None else codes[~np.isnan(codes)]
    for (left, right, other), count in sorted(found.items(), key=lambda kv: -kv[1]):
        in_range = [c for c in left if c < len(names)]
        left_counts[in_range] += count
        if other:
            mentioned = set(left) | set(right)
            left_counts[[c for c in range(len(names)) if c not in mentioned]] += count
        share = None
        if observed is not None and observed.size:
            goes = np.isin(observed, left) | (other & ~np.isin(observed, right))
            share = float(goes.mean())
        sets.append({"left": [forest.category_name(j, c) for c in left],
                     "right": [forest.category_name(j, c) for c in right],
                     "other_left": other, "count": int(count), "share_left": share})
    return sets, left_counts


def _summary(values: np.ndarray) -> dict:
    if values.size == 0:
        return {}
    q = np.quantile(values, [0.0, 0.25, 0.5, 0.75, 1.0])
    return dict(zip(("min", "q25", "median", "q75", "max"), (float(v) for v in q)))


def threshold_profiles(forest: Forest, X=None) -> ThresholdProfiles:
    """Every cut point per feature, with counts, placed on the review data ``X``.

    Parameters
    ----------
    forest : Forest
    X : array-like of shape (n, n_features), optional
        Review data (NaN for missing). Without it, cuts and counts only.

    Returns
    -------
    ThresholdProfiles
    """
    strict = forest.compare == COMPARE_LT_FLOAT32
    per_feature = _distinct_cuts(forest)
    # The model's own rounding of inputs (float32 for scikit-learn trees and XGBoost), so a
    # cut's share is exactly the share of rows the split would send left.
    Xr = None if X is None else forest.check_X(X)
    Xc = None if X is None else forest.compare_input(Xr)
    features = []
    for j, (cuts, counts) in enumerate(per_feature):
        name = forest.feature_names[j]
        if forest.is_categorical(j):
            codes = None if Xr is None else Xr[:, j]
            sets, left_counts = _category_sets(forest, j, codes)
            n_obs = 0 if codes is None else int(np.count_nonzero(~np.isnan(codes)))
            features.append(FeatureCuts(
                name, j, cuts, counts, np.full(cuts.shape, np.nan),
                np.full(cuts.shape, INSIDE, dtype=np.int64), n_obs,
                0 if codes is None else int(codes.shape[0] - n_obs), {},
                categories=list(forest.categories[j]), category_sets=sets,
                left_counts=left_counts))
            continue
        infinite = ~np.isfinite(cuts)
        if Xc is None:
            features.append(FeatureCuts(name, j, cuts, counts, np.full(cuts.shape, np.nan),
                                        np.where(infinite, MISSING_ONLY, INSIDE)))
            continue
        col = Xc[:, j]
        observed = np.sort(col[~np.isnan(col)])
        n_obs = observed.shape[0]
        if n_obs == 0:
            q = np.full(cuts.shape, np.nan)
            side = np.full(cuts.shape, BELOW, dtype=np.int64)
        else:
            left = np.searchsorted(observed, cuts, side="left" if strict else "right")
            q = left / n_obs
            side = np.where(left == 0, BELOW, np.where(left == n_obs, ABOVE, INSIDE))
        q = np.where(infinite, np.nan, q)
        side = np.where(infinite, MISSING_ONLY, side)
        raw = Xr[:, j]
        features.append(FeatureCuts(name, j, cuts, counts, q, side.astype(np.int64), n_obs,
                                    int(col.shape[0] - n_obs), _summary(raw[~np.isnan(raw)])))
    return ThresholdProfiles(features=features, rule=RULES["lt" if strict else "le"],
                             has_data=Xc is not None, n_rows=0 if Xc is None else Xc.shape[0])
