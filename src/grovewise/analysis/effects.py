"""Effect curves of the ensemble itself: partial dependence, individual curves, accumulated
local effects, and per-category effects, all in predicted probabilities.

- Partial dependence (Friedman 2001, Ann. Statist. 29(5)): at each grid value ``v`` of feature
  ``j``, the mean over the rows of the ensemble's ``predict_proba`` with column ``j`` set to
  ``v``. Computed by that definition (every row, every grid value, the Forest's own exact
  prediction), so it equals scikit-learn's ``partial_dependence(method="brute")`` on the same
  grid.
- Individual conditional expectation (Goldstein, Kapelner, Bleich, Pitkin 2015, JCGS 24(1)):
  the same curves row by row, before the mean.
- Accumulated local effects (Apley & Zhu 2020, JRSS-B 82(4)): the feature's range is cut at
  quantiles of its values; within each interval, the rows that fall in it are moved to the
  interval's two ends and the mean change of the prediction is taken; the changes are summed
  from the left and centred so that their mean over the rows is zero. Only rows inside an
  interval move, so a correlated feature's effect is not read off rows that never occur.
- A categorical feature has no order: its partial dependence is taken at each category, and
  no accumulated local effects are computed for it.

The default grid is ``DEFAULT_GRID`` (20) quantiles of the feature's observed values, from
the 5th to the 95th percentile, with duplicates removed; ALE uses ``DEFAULT_BINS`` (20)
quantile intervals over the whole range. A missing value is left missing in the rows that
hold one for another feature, and rows missing the curve's own feature are left out of ALE.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SettingError
from ..forest import Forest

DEFAULT_GRID = 20
DEFAULT_BINS = 20
KINDS = ("average", "individual", "both")
OUTPUTS = ("probability", "margin")


def _predictor(forest: Forest, output: str):
    """The function the curves average: ``predict_proba``, or for a boosted model its raw
    margin (``decision_function``, in which a model of single-split trees is additive)."""
    if output not in OUTPUTS:
        raise SettingError(f"output={output!r} is not known; use one of {', '.join(OUTPUTS)}")
    if output == "margin":
        if forest.link == "mean":
            raise SettingError("output='margin' is for boosted models; an averaging forest's "
                               "output is its probability")
        return forest.decision_function
    return forest.predict_proba


@dataclass
class PartialDependence:
    """Partial dependence of one feature.

    Attributes
    ----------
    feature : str
    index : int
    grid : ndarray (n_grid,)
        The feature's values (category codes for a categorical feature).
    average : ndarray (n_grid, n_classes)
        Mean predicted probability per class at each grid value.
    individual : ndarray (n_rows, n_grid, n_classes) or None
        Each row's curve (``kind="individual"`` or ``"both"``).
    classes : list
    categories : list of str or None
        The grid's category names, for a categorical feature.
    n_rows : int
        Rows averaged.
    """

    feature: str
    index: int
    grid: np.ndarray
    average: np.ndarray
    individual: np.ndarray | None
    classes: list
    categories: list | None = None
    n_rows: int = 0

    def to_dict(self) -> dict:
        return {"kind": "partial_dependence", "feature": self.feature, "index": self.index,
                "grid": self.grid.tolist(), "average": self.average.tolist(),
                "classes": [str(c) for c in self.classes], "categories": self.categories,
                "n_rows": self.n_rows}


@dataclass
class AccumulatedEffects:
    """Accumulated local effects of one numeric feature.

    Attributes
    ----------
    edges : ndarray (n_bins + 1,)
        The interval ends (quantiles of the feature's values).
    effect : ndarray (n_bins + 1, n_classes)
        The centred accumulated effect at each edge (probability per class).
    counts : ndarray (n_bins,)
        Rows in each interval.
    """

    feature: str
    index: int
    edges: np.ndarray
    effect: np.ndarray
    counts: np.ndarray
    classes: list

    def to_dict(self) -> dict:
        return {"kind": "accumulated_local_effects", "feature": self.feature,
                "index": self.index, "edges": self.edges.tolist(),
                "effect": self.effect.tolist(), "counts": self.counts.tolist(),
                "classes": [str(c) for c in self.classes]}


def _feature_index(forest: Forest, feature) -> int:
    if isinstance(feature, (int, np.integer)) and not isinstance(feature, bool):
        j = int(feature)
        if not 0 <= j < forest.n_features:
            raise SettingError(f"feature={feature} is outside 0..{forest.n_features - 1}")
        return j
    if feature in forest.feature_names:
        return forest.feature_names.index(feature)
    raise SettingError(f"feature={feature!r} is not one of the model's features "
                       f"({', '.join(forest.feature_names[:8])}"
                       f"{', ...' if forest.n_features > 8 else ''})")


def default_grid(forest: Forest, X: np.ndarray, j: int, size: int = DEFAULT_GRID) -> np.ndarray:
    """The feature's grid: its categories present in ``X`` (categorical), else ``size``
    quantiles of its observed values from the 5th to the 95th percentile, without repeats."""
    col = X[:, j]
    seen = col[~np.isnan(col)]
    if seen.size == 0:
        raise SettingError(f"feature {forest.feature_names[j]!r} has no values in the data; "
                           "give a grid or data with values")
    if forest.is_categorical(j):
        return np.unique(seen)
    return np.unique(np.quantile(seen, np.linspace(0.05, 0.95, size)))


def partial_dependence(forest: Forest, X, feature, grid=None, kind: str = "average",
                       chunk_cells: int = 2_000_000, output: str = "probability"
                       ) -> PartialDependence:
    """Partial dependence (and individual curves) of ``feature`` on the rows ``X``.

    Parameters
    ----------
    forest : Forest
    X : array-like (n, n_features)
        The rows to average over (the caller samples large data).
    feature : str or int
    grid : array-like, optional
        Values of the feature (category codes for a categorical one); default
        :func:`default_grid`.
    kind : str
        ``"average"``, ``"individual"`` or ``"both"``.
    chunk_cells : int
        Rows x grid values predicted at once (memory stays flat in n).
    output : str
        ``"probability"`` (``average`` per class) or, for a boosted model, ``"margin"``
        (per margin column).
    """
    predict = _predictor(forest, output)
    if kind not in KINDS:
        raise SettingError(f"kind={kind!r} is not known; use one of {', '.join(KINDS)}")
    X = forest.check_X(X)
    j = _feature_index(forest, feature)
    grid = default_grid(forest, X, j) if grid is None else np.asarray(grid, dtype=np.float64)
    grid = grid.reshape(-1)
    n, g = X.shape[0], grid.shape[0]
    K = forest.n_classes if output == "probability" else forest.n_outputs
    total = np.zeros((g, K))
    individual = np.empty((n, g, K)) if kind != "average" else None
    rows = max(1, chunk_cells // max(g, 1))
    for s in range(0, n, rows):
        block = X[s:s + rows]
        m = block.shape[0]
        tiled = np.repeat(block, g, axis=0)
        tiled[:, j] = np.tile(grid, m)
        proba = predict(tiled).reshape(m, g, K)
        total += proba.sum(axis=0)
        if individual is not None:
            individual[s:s + m] = proba
    categories = ([forest.category_name(j, v) for v in grid] if forest.is_categorical(j)
                  else None)
    return PartialDependence(feature=forest.feature_names[j], index=j, grid=grid,
                             average=total / max(n, 1), individual=individual,
                             classes=list(forest.classes_), categories=categories, n_rows=n)


def accumulated_local_effects(forest: Forest, X, feature, bins: int = DEFAULT_BINS,
                              output: str = "probability") -> AccumulatedEffects:
    """Accumulated local effects of numeric ``feature`` on the rows ``X`` (see the module);
    ``output`` as for :func:`partial_dependence`."""
    predict = _predictor(forest, output)
    X = forest.check_X(X)
    j = _feature_index(forest, feature)
    if forest.is_categorical(j):
        raise SettingError(f"{forest.feature_names[j]!r} is categorical: its categories have no "
                           "order, so it has per-category partial dependence, not accumulated "
                           "local effects")
    rows = X[~np.isnan(X[:, j])]
    if rows.shape[0] < 2:
        raise SettingError(f"feature {forest.feature_names[j]!r} has fewer than 2 values in the "
                           "data; accumulated local effects need more")
    col = rows[:, j]
    edges = np.unique(np.quantile(col, np.linspace(0.0, 1.0, bins + 1)))
    if edges.size < 2:
        edges = np.array([col.min(), col.max() + 1.0])
    # interval k holds (edges[k], edges[k+1]]; the smallest value joins the first interval
    which = np.clip(np.searchsorted(edges, col, side="left") - 1, 0, edges.size - 2)
    lo, hi = rows.copy(), rows.copy()
    lo[:, j], hi[:, j] = edges[which], edges[which + 1]
    step = predict(hi) - predict(lo)
    K = step.shape[1]
    counts = np.bincount(which, minlength=edges.size - 1)
    sums = np.zeros((edges.size - 1, K))
    np.add.at(sums, which, step)
    mean_step = sums / np.maximum(counts, 1)[:, None]
    acc = np.vstack([np.zeros((1, K)), np.cumsum(mean_step, axis=0)])
    # centre: the mean over the rows of the effect at their interval (midpoint of its ends)
    mid = 0.5 * (acc[:-1] + acc[1:])
    centre = (counts[:, None] * mid).sum(axis=0) / counts.sum()
    return AccumulatedEffects(feature=forest.feature_names[j], index=j, edges=edges,
                              effect=acc - centre[None, :], counts=counts,
                              classes=list(forest.classes_))
