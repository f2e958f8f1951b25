"""Two models over the same features (e.g. a model and its retrained version), side by side.

What changed in how they use the features: the difference of their depth-usage shares,
their importance ranks, and the features one uses and the other does not.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import DataError
from ..forest import Forest
from .importance import impurity_importance, importance_ranks
from .usage import depth_usage


@dataclass
class ModelComparison:
    """How model B's use of the features differs from model A's.

    Attributes
    ----------
    labels : tuple of str
        Names of the two models (A, B).
    feature_names : list of str
        In model A's column order.
    weight : str
        Depth-usage weight compared.
    depths : ndarray of int
        0 .. the deeper model's deepest split.
    shares_a, shares_b : ndarray of shape (n_features, n_depths)
        Depth-usage shares (columns sum to 1; zero columns past a model's deepest split).
    share_difference : ndarray
        ``shares_b - shares_a``.
    overall_a, overall_b : ndarray of shape (n_features,)
        Each feature's share of all splits (by ``weight``).
    importance_a, importance_b, rank_a, rank_b : ndarray
        Impurity importance and its rank (1 = most important).
    appeared, vanished : list of str
        Features B uses and A does not, and the reverse.
    importance_methods : tuple of str
    """

    labels: tuple[str, str]
    feature_names: list[str]
    weight: str
    depths: np.ndarray
    shares_a: np.ndarray
    shares_b: np.ndarray
    overall_a: np.ndarray
    overall_b: np.ndarray
    importance_a: np.ndarray
    importance_b: np.ndarray
    appeared: list[str]
    vanished: list[str]
    importance_methods: tuple[str, str]

    @property
    def share_difference(self) -> np.ndarray:
        return self.shares_b - self.shares_a

    @property
    def rank_a(self) -> np.ndarray:
        return importance_ranks(self.importance_a)

    @property
    def rank_b(self) -> np.ndarray:
        return importance_ranks(self.importance_b)

    @property
    def rank_change(self) -> np.ndarray:
        """``rank_a - rank_b``: positive where the feature moved up in model B."""
        return self.rank_a - self.rank_b

    def status(self, name: str) -> str:
        return "appeared" if name in self.appeared else "vanished" if name in self.vanished else ""

    def to_dict(self) -> dict:
        return {"kind": "model_comparison", "labels": list(self.labels),
                "feature_names": list(self.feature_names), "weight": self.weight,
                "depths": self.depths.tolist(), "shares_a": self.shares_a.tolist(),
                "shares_b": self.shares_b.tolist(),
                "share_difference": self.share_difference.tolist(),
                "overall_a": self.overall_a.tolist(), "overall_b": self.overall_b.tolist(),
                "importance_a": self.importance_a.tolist(),
                "importance_b": self.importance_b.tolist(), "rank_a": self.rank_a.tolist(),
                "rank_b": self.rank_b.tolist(), "appeared": list(self.appeared),
                "vanished": list(self.vanished),
                "importance_methods": list(self.importance_methods)}

    def to_rows(self) -> list[dict]:
        """One row per feature: overall shares, importances, ranks and status."""
        ra, rb = self.rank_a, self.rank_b
        return [{"feature": n, "share_a": float(self.overall_a[j]),
                 "share_b": float(self.overall_b[j]),
                 "share_difference": float(self.overall_b[j] - self.overall_a[j]),
                 "importance_a": float(self.importance_a[j]),
                 "importance_b": float(self.importance_b[j]), "rank_a": int(ra[j]),
                 "rank_b": int(rb[j]), "status": self.status(n)}
                for j, n in enumerate(self.feature_names)]

    def depth_rows(self) -> list[dict]:
        """One row per (feature, depth) with both shares and their difference."""
        d = self.share_difference
        return [{"feature": n, "depth": int(k), "share_a": float(self.shares_a[j, c]),
                 "share_b": float(self.shares_b[j, c]), "difference": float(d[j, c])}
                for j, n in enumerate(self.feature_names) for c, k in enumerate(self.depths)]


def feature_order(a: Forest, b: Forest) -> np.ndarray:
    """Column of each of A's features in B, or a DataError naming what differs."""
    if a.n_features != b.n_features or set(a.feature_names) != set(b.feature_names):
        only_a = sorted(set(a.feature_names) - set(b.feature_names))
        only_b = sorted(set(b.feature_names) - set(a.feature_names))
        raise DataError("the two models do not have the same features "
                        f"(only in the first: {', '.join(only_a) or 'none'}; only in the second: "
                        f"{', '.join(only_b) or 'none'}; or repeated names); compare models "
                        "trained on the same columns")
    index = {name: k for k, name in enumerate(b.feature_names)}
    return np.array([index[name] for name in a.feature_names], dtype=np.int64)


def _pad(matrix: np.ndarray, n_columns: int) -> np.ndarray:
    out = np.zeros((matrix.shape[0], n_columns))
    out[:, : matrix.shape[1]] = matrix
    return out


def compare_models(a: Forest, b: Forest, weight: str = "count",
                   labels: tuple[str, str] = ("model A", "model B")) -> ModelComparison:
    """Compare how two models over the same features use them.

    Features are matched by name (B's columns may be in another order).

    Parameters
    ----------
    a, b : Forest
    weight : {"count", "gain", "cover"}
        Depth-usage weight.
    labels : tuple of str
        Names shown for the two models.

    Returns
    -------
    ModelComparison

    Raises
    ------
    DataError
        When the models' feature names differ.
    """
    order = feature_order(a, b)
    ua, ub = depth_usage(a, weight), depth_usage(b, weight)
    n_depths = max(ua.depths.shape[0], ub.depths.shape[0])
    used_a = ua.split_counts.sum(axis=1) > 0
    used_b = ub.split_counts.sum(axis=1)[order] > 0
    ia, ib = impurity_importance(a), impurity_importance(b)
    names = list(a.feature_names)
    return ModelComparison(
        labels=(str(labels[0]), str(labels[1])), feature_names=names, weight=weight,
        depths=np.arange(n_depths), shares_a=_pad(ua.shares, n_depths),
        shares_b=_pad(ub.shares[order], n_depths), overall_a=ua.overall_share,
        overall_b=ub.overall_share[order], importance_a=ia.values,
        importance_b=ib.values[order],
        appeared=[n for n, x, y in zip(names, used_a, used_b) if y and not x],
        vanished=[n for n, x, y in zip(names, used_a, used_b) if x and not y],
        importance_methods=(ia.method, ib.method))
