"""Categorical features for the surrogate: categories put in order, codes replaced by ranks.

A categorical column holds a category code (0 .. K-1). The code's number means nothing, so
the surrogate never compares it. Instead the categories of each categorical feature are put
in one order, by the ensemble's mean predicted probability over the training rows of each
category, and the column is replaced by the rank of its category in that order. A split
``rank < 3.5`` on such a column alone is then a set of categories (the ranks below the cut
go left), and reads ``region in {north, east}``. Splits that mix a categorical feature with
another feature are not allowed anywhere (see ``SearchSettings.solo`` and the program's
``solo`` rows), so every split on it stays such a set.

Ordering categories by the mean response before looking for the best split between them
is the classical reduction for two classes (Breiman, Friedman, Olshen, Stone,
"Classification and Regression Trees", 1984; cited from memory): for two classes and one
split, the best partition of the categories is among the cuts of the ordered list. Here the order
is fixed once, from the ensemble's probabilities on the training rows, and every node of the
surrogate uses it, so a set that is not contiguous in that order cannot be expressed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

UNKNOWN = "other codes"  # what a code outside the known categories is called in the rules


@dataclass
class CategoryOrder:
    """The order of the categories of each categorical feature, and their names.

    Categories are ordered by the ensemble's mean predicted probability over the training
    rows that hold them, ascending: for two classes, the probability of the second class;
    for more classes, of the class whose per-category means vary most (variance of the
    means over the categories with training rows, each weighted by its rows). Categories
    with equal means keep their code order; categories with no training row come after
    every category that has one, in code order. A code that names no category (beyond the
    known ones, negative, or not a whole number) gets the rank after the last category.

    Only plain lists and numpy arrays are held, so the order is stored with the results.

    Attributes
    ----------
    features : list of int
        The categorical features, ascending.
    names : list of list of str
        Per categorical feature, its category names in code order.
    ranks : list of ndarray of int
        Per categorical feature, the rank (0 .. K-1) of every code.
    means : list of ndarray
        Per categorical feature, the mean probability the order was made from, per code
        (NaN for a category without training rows).
    rows : list of ndarray of int
        Per categorical feature, training rows per code.
    by_class : list of int
        Per categorical feature, the index of the class whose probability orders it.
    """

    features: list
    names: list
    ranks: list
    means: list
    rows: list
    by_class: list

    # ------------------------------------------------------------------ look-up
    def position(self, j: int) -> int | None:
        """Where feature ``j`` sits in ``features`` (None when it is not categorical)."""
        j = int(j)
        return self.features.index(j) if j in self.features else None

    def is_categorical(self, j: int) -> bool:
        return self.position(j) is not None

    def mask(self, n_features: int) -> np.ndarray:
        """Boolean mask over ``n_features`` features: True for a categorical one."""
        out = np.zeros(n_features, dtype=bool)
        out[[j for j in self.features if j < n_features]] = True
        return out

    def n_categories(self, j: int) -> int:
        return len(self.names[self._pos(j)])

    def unknown_rank(self, j: int) -> int:
        """The rank a code outside the known categories gets (after the last category)."""
        return self.n_categories(j)

    def in_order(self, j: int) -> list[str]:
        """The category names of feature ``j`` by rank."""
        k = self._pos(j)
        return [self.names[k][c] for c in np.argsort(self.ranks[k], kind="stable")]

    def category_name(self, j: int, code: float) -> str:
        """The name of code ``code`` of feature ``j`` ("missing" for NaN)."""
        if code != code:
            return "missing"
        names = self.names[self._pos(j)]
        c = int(code) if np.isfinite(code) else -1
        return names[c] if 0 <= c < len(names) and c == code else f"code {code:g}"

    def _pos(self, j: int) -> int:
        k = self.position(j)
        if k is None:
            raise KeyError(f"feature {j} is not categorical")
        return k

    # ------------------------------------------------------------------ encoding
    def rank_of_codes(self, j: int, codes) -> np.ndarray:
        """The rank of each code of feature ``j``; NaN stays NaN."""
        k = self._pos(j)
        ranks = np.asarray(self.ranks[k], dtype=np.float64)
        v = np.asarray(codes, dtype=np.float64)
        out = np.full(v.shape, float(ranks.size))
        known = np.isfinite(v) & (v >= 0) & (v < ranks.size) & (v == np.floor(v))
        out[known] = ranks[v[known].astype(np.int64)]
        out[np.isnan(v)] = np.nan
        return out

    def encode(self, X) -> np.ndarray:
        """``X`` (codes in the categorical columns) with each categorical column replaced
        by the rank of its code; other columns are unchanged."""
        X = np.array(X, dtype=np.float64, copy=True)
        one = X.ndim == 1
        X2 = X.reshape(1, -1) if one else X
        for j in self.features:
            if j < X2.shape[1]:
                X2[:, j] = self.rank_of_codes(j, X2[:, j])
        return X2.reshape(-1) if one else X2

    # ------------------------------------------------------------------ splits
    def names_below(self, j: int, cut: float) -> list[str]:
        """Names (in code order) of the categories whose rank is below ``cut``."""
        return self.split_sets(j, cut, "<")[0]

    def split_sets(self, j: int, cut: float, op: str = "<") -> tuple[list[str], list[str], bool]:
        """A split ``rank op cut`` on feature ``j`` alone (op one of ``<``, ``<=``, ``>``,
        ``>=``; true goes left) as (names going left, names going right, whether a code
        outside the known categories goes left), the names in code order."""
        k = self._pos(j)
        r = np.asarray(self.ranks[k], dtype=np.float64)
        tests = {"<": np.less, "<=": np.less_equal, ">": np.greater, ">=": np.greater_equal}
        if op not in tests:
            raise ValueError(f"unknown comparison {op!r}")
        left = tests[op](r, cut)
        names = self.names[k]
        unknown_left = bool(tests[op](float(r.size), cut))
        return ([names[c] for c in np.flatnonzero(left)],
                [names[c] for c in np.flatnonzero(~left)], unknown_left)

    def to_dict(self) -> dict:
        out = []
        for k, j in enumerate(self.features):
            means = [None if not np.isfinite(m) else float(m) for m in self.means[k]]
            out.append({"feature_index": int(j), "categories": list(self.names[k]),
                        "rank": [int(r) for r in self.ranks[k]], "in_order": self.in_order(j),
                        "mean_probability": means, "rows": [int(n) for n in self.rows[k]],
                        "by_class": int(self.by_class[k])})
        return {"features": out}


def order_categories(forest_or_categories, X_codes, proba) -> CategoryOrder | None:
    """The :class:`CategoryOrder` of the categorical features, from the training rows.

    ``forest_or_categories``: a Forest (its ``categories``) or a mapping feature index ->
    category names in code order. ``X_codes``: the training rows (codes in the categorical
    columns, NaN for missing). ``proba``: the ensemble's class probabilities on those rows,
    shape (n, n_classes). Returns None when there is no categorical feature.
    """
    cats = getattr(forest_or_categories, "categories", forest_or_categories) or {}
    if not cats:
        return None
    X = np.asarray(X_codes, dtype=np.float64)
    P = np.asarray(proba, dtype=np.float64)
    if P.ndim == 1:
        P = np.column_stack([1.0 - P, P])
    if X.ndim != 2 or P.shape[0] != X.shape[0]:
        raise ValueError(f"order_categories needs rows and probabilities of the same rows; "
                         f"got {X.shape} and {P.shape}")
    features, names, ranks, means, rows, by_class = [], [], [], [], [], []
    for j in sorted(int(j) for j in cats):
        if j >= X.shape[1]:
            continue
        nm = [str(v) for v in cats[j]]
        K = len(nm)
        v = X[:, j]
        known = np.isfinite(v) & (v >= 0) & (v < K) & (v == np.floor(v))
        code = v[known].astype(np.int64)
        cnt = np.bincount(code, minlength=K).astype(np.int64)
        sums = np.zeros((K, P.shape[1]))
        np.add.at(sums, code, P[known])
        seen = cnt > 0
        mean = np.full((K, P.shape[1]), np.nan)
        mean[seen] = sums[seen] / cnt[seen, None]
        k = _ordering_class(mean, cnt)
        score = mean[:, k]
        seen_codes = np.flatnonzero(seen)
        # ascending mean, ties by code (lexsort: last key first)
        order = seen_codes[np.lexsort((seen_codes, score[seen_codes]))]
        order = np.concatenate([order, np.flatnonzero(~seen)])
        rank = np.empty(K, dtype=np.int64)
        rank[order] = np.arange(K)
        features.append(j)
        names.append(nm)
        ranks.append(rank)
        means.append(score)
        rows.append(cnt)
        by_class.append(int(k))
    if not features:
        return None
    return CategoryOrder(features=features, names=names, ranks=ranks, means=means, rows=rows,
                         by_class=by_class)


def _ordering_class(mean: np.ndarray, cnt: np.ndarray) -> int:
    """The class whose probability orders the categories: the second of two; of more, the
    one whose per-category means vary most (row-weighted variance; first on a tie)."""
    n_classes = mean.shape[1]
    if n_classes <= 2:
        return n_classes - 1
    seen = cnt > 0
    if not seen.any():
        return 0
    m, w = mean[seen], cnt[seen].astype(np.float64)
    centre = (w[:, None] * m).sum(axis=0) / w.sum()
    var = (w[:, None] * (m - centre) ** 2).sum(axis=0) / w.sum()
    return int(np.argmax(var))


def solo_mask(solo_features, n_features: int) -> np.ndarray | None:
    """``solo_features`` (feature indices or a boolean mask) as a boolean mask, or None."""
    if solo_features is None:
        return None
    arr = np.asarray(solo_features)
    if arr.dtype == bool:
        if arr.shape != (n_features,):
            raise ValueError(f"solo_features has {arr.shape[0] if arr.ndim else 1} entries "
                             f"for {n_features} features")
        return arr.copy() if arr.any() else None
    idx = arr.astype(np.int64).reshape(-1)
    if idx.size and (idx.min() < 0 or idx.max() >= n_features):
        raise ValueError(f"solo_features lists feature indices outside 0..{n_features - 1}")
    mask = np.zeros(n_features, dtype=bool)
    mask[idx] = True
    return mask if mask.any() else None


class EncodedTree:
    """A fitted tree of scikit-learn that was fit on ranks, used with codes.

    The greedy baseline of a surrogate with categorical features is fit on the data with
    each category code replaced by its rank (:meth:`CategoryOrder.encode`); this wrapper
    encodes the codes it is given before ``predict``, ``predict_proba``, ``apply`` and
    ``decision_path``, so callers keep passing codes. Every other attribute (``tree_``,
    ``classes_``, ``get_depth``, ...) is the tree's own.
    """

    def __init__(self, estimator, category_order: CategoryOrder) -> None:
        self.estimator = estimator
        self.category_order = category_order

    def __getattr__(self, name: str):
        # only reached for attributes not set on the wrapper itself
        if name.startswith("__") or name in ("estimator", "category_order"):
            raise AttributeError(name)
        try:
            inner = self.__dict__["estimator"]
        except KeyError:
            raise AttributeError(name) from None
        return getattr(inner, name)

    def _encoded(self, X) -> np.ndarray:
        return self.category_order.encode(np.asarray(X, dtype=np.float64))

    def predict(self, X):
        return self.estimator.predict(self._encoded(X))

    def predict_proba(self, X):
        return self.estimator.predict_proba(self._encoded(X))

    def apply(self, X):
        return self.estimator.apply(self._encoded(X))

    def decision_path(self, X):
        return self.estimator.decision_path(self._encoded(X))

    def __repr__(self) -> str:
        return (f"EncodedTree({self.estimator!r}, categorical features "
                f"{self.category_order.features})")
