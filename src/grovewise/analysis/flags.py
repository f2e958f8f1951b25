"""Features the reviewer flags, and where the ensemble uses each of them.

A reviewer marks features as ``protected`` (e.g. a characteristic the model must not
decide on, which should therefore appear little or not at all) or ``forbidden`` (must not be
used). :func:`flag_report` states for each flagged feature where it appears: how many
trees and splits, at which depths and node positions, and its importance rank.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import SettingError
from ..forest import Forest
from .importance import ImportanceComparison, ImpurityImportance, impurity_importance
from .usage import depth_usage, position_usage, split_nodes

FLAG_KINDS = ("protected", "forbidden")


def check_flags(feature_names: Sequence[str], flags: Mapping[str, str] | None) -> dict[str, str]:
    """``flags`` as ``{feature name: kind}``, checked against the model's features.

    Raises
    ------
    SettingError
        For a name the model does not have or a kind other than protected / forbidden.
    """
    if not flags:
        return {}
    if not isinstance(flags, Mapping):
        raise SettingError("flags must map feature names to 'protected' or 'forbidden', "
                           "e.g. {'age_years': 'protected'}")
    names = set(feature_names)
    out = {}
    for name, kind in flags.items():
        if name not in names:
            raise SettingError(f"flagged feature {name!r} is not a feature of the model; the "
                               f"model's features are: {', '.join(feature_names)}")
        kind = str(kind).strip().lower()
        if kind not in FLAG_KINDS:
            raise SettingError(f"flag {kind!r} for feature {name!r} is not known; use "
                               f"{' or '.join(FLAG_KINDS)}")
        out[str(name)] = kind
    return out


@dataclass
class FlaggedFeature:
    """Where one flagged feature appears in the ensemble.

    Attributes
    ----------
    feature, flag : str
    n_trees_using : int
        Trees with at least one split on the feature (of ``n_trees``).
    n_splits : int
        Split nodes on the feature.
    share_of_splits : float
        ``n_splits`` over all split nodes of the ensemble.
    share_of_gain : float
        The feature's share of the ensemble's total split gain.
    depths, depth_counts, depth_shares : ndarray
        The depths where it splits, its splits there, and its share of that depth's splits.
    positions, position_counts : ndarray
        Heap positions (top ``position_depth + 1`` levels) where it splits, and how often.
    n_root : int
        Trees that split on it first (position 0).
    impurity_rank, permutation_rank : int or None
        Rank (1 = most important) among ``n_features``.
    """

    feature: str
    flag: str
    n_trees: int
    n_trees_using: int
    n_splits: int
    share_of_splits: float
    share_of_gain: float
    depths: np.ndarray
    depth_counts: np.ndarray
    depth_shares: np.ndarray
    positions: np.ndarray
    position_counts: np.ndarray
    n_root: int
    n_features: int
    impurity_rank: int | None = None
    permutation_rank: int | None = None

    @property
    def used(self) -> bool:
        return self.n_splits > 0

    def statement(self) -> str:
        """One plain sentence a report can print."""
        head = f"{self.feature} ({self.flag})"
        if not self.used:
            text = f"{head} is not used by any of the {self.n_trees} trees"
        else:
            d0, d1 = int(self.depths.min()), int(self.depths.max())
            where = f"depth {d0}" if d0 == d1 else f"depths {d0} to {d1}"
            first = (f"the first split in {self.n_root} trees" if self.n_root
                     else "never the first split")
            text = (f"{head} is used in {self.n_trees_using} of {self.n_trees} trees: "
                    f"{self.n_splits} splits ({100 * self.share_of_splits:.1f}% of all), at "
                    f"{where}, {first}")
        ranks = []
        if self.impurity_rank is not None:
            ranks.append(f"impurity rank {self.impurity_rank}")
        if self.permutation_rank is not None:
            ranks.append(f"permutation rank {self.permutation_rank}")
        if ranks:
            text += f"; {' and '.join(ranks)} of {self.n_features}"
        return text + "."

    def to_dict(self) -> dict:
        return {"feature": self.feature, "flag": self.flag, "used": self.used,
                "n_trees": self.n_trees, "n_trees_using": self.n_trees_using,
                "n_splits": self.n_splits, "share_of_splits": self.share_of_splits,
                "share_of_gain": self.share_of_gain, "depths": self.depths.tolist(),
                "depth_counts": self.depth_counts.tolist(),
                "depth_shares": self.depth_shares.tolist(), "positions": self.positions.tolist(),
                "position_counts": self.position_counts.tolist(), "n_root": self.n_root,
                "impurity_rank": self.impurity_rank, "permutation_rank": self.permutation_rank,
                "n_features": self.n_features, "statement": self.statement()}


@dataclass
class FlagReport:
    """One :class:`FlaggedFeature` per flagged feature, in the order the flags were given."""

    features: list[FlaggedFeature] = field(default_factory=list)
    position_depth: int = 3

    @property
    def flags(self) -> dict[str, str]:
        return {f.feature: f.flag for f in self.features}

    def __getitem__(self, name: str) -> FlaggedFeature:
        for f in self.features:
            if f.feature == name:
                return f
        raise KeyError(name)

    def to_dict(self) -> dict:
        return {"kind": "flag_report", "position_depth": self.position_depth,
                "features": [f.to_dict() for f in self.features]}

    def to_rows(self) -> list[dict]:
        return [{"feature": f.feature, "flag": f.flag, "trees_using": f.n_trees_using,
                 "trees": f.n_trees, "splits": f.n_splits,
                 "share_of_splits": f.share_of_splits, "share_of_gain": f.share_of_gain,
                 "depths": " ".join(str(int(d)) for d in f.depths),
                 "positions": " ".join(str(int(p)) for p in f.positions),
                 "first_split_in": f.n_root,
                 "impurity_rank": f.impurity_rank if f.impurity_rank is not None else "",
                 "permutation_rank": f.permutation_rank if f.permutation_rank is not None else "",
                 "statement": f.statement()} for f in self.features]


def _ranks(importance) -> tuple[np.ndarray | None, np.ndarray | None]:
    if isinstance(importance, ImportanceComparison):
        return importance.impurity_rank, importance.permutation_rank
    if isinstance(importance, ImpurityImportance):
        return importance.ranks, None
    return None, None


def flag_report(forest: Forest, flags: Mapping[str, str] | None,
                importance: ImpurityImportance | ImportanceComparison | None = None,
                position_depth: int = 3) -> FlagReport:
    """State for each flagged feature where the ensemble uses it.

    Parameters
    ----------
    forest : Forest
    flags : mapping of feature name to ``"protected"`` or ``"forbidden"``
    importance : ImpurityImportance or ImportanceComparison, optional
        Ranks to report; the impurity importance of ``forest`` is computed when not given.
    position_depth : int
        Deepest level (root 0) of the node positions reported.

    Returns
    -------
    FlagReport
    """
    flags = check_flags(forest.feature_names, flags)
    report = FlagReport(position_depth=int(position_depth))
    if not flags:
        return report
    counts = depth_usage(forest, "count")
    gains = depth_usage(forest, "gain").overall_share
    positions = position_usage(forest, position_depth, "count")
    nodes = split_nodes(forest)
    tree_feature = np.unique(nodes.tree * forest.n_features + nodes.feature) % forest.n_features
    trees_using = np.bincount(tree_feature, minlength=forest.n_features)
    imp_rank, perm_rank = _ranks(importance if importance is not None
                                 else impurity_importance(forest))
    total_splits = max(int(counts.split_counts.sum()), 1)
    depth_totals = counts.split_counts.sum(axis=0)
    for name, kind in flags.items():
        j = forest.feature_names.index(name)
        row = counts.split_counts[j]
        at = np.flatnonzero(row)
        prow = positions.split_counts[j]
        pat = np.flatnonzero(prow)
        report.features.append(FlaggedFeature(
            feature=name, flag=kind, n_trees=forest.n_trees, n_trees_using=int(trees_using[j]),
            n_splits=int(row.sum()), share_of_splits=float(row.sum() / total_splits),
            share_of_gain=float(gains[j]), depths=counts.depths[at], depth_counts=row[at],
            depth_shares=row[at] / depth_totals[at], positions=positions.positions[pat],
            position_counts=prow[pat], n_root=int(prow[0]), n_features=forest.n_features,
            impurity_rank=None if imp_rank is None else int(imp_rank[j]),
            permutation_rank=None if perm_rank is None else int(perm_rank[j])))
    return report
