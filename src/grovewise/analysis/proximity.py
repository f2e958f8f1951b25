"""Breiman's proximity: which samples the ensemble treats alike.

The proximity of two samples is the share of trees in which both reach the same leaf
(Breiman 2001, "Random Forests", Machine Learning 45:5-32). For boosted models the same
definition is used over all trees, every class's trees counted alike (a multi-class
boosted model has one tree per class and round).

Co-occurrence counts come from a sparse leaf-indicator matrix ``A`` (one row per sample, one
column per leaf, a 1 where the sample lands): ``A @ A.T`` counts the shared leaves. It is
formed block by block over rows and only for pairs ``j >= i``, so :func:`proximity_pairs`
and :func:`pairs_above_thresholds` never hold more than one block of ``n`` columns; the
dense :func:`proximity` fills an ``n x n`` matrix from the same blocks.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import sparse

from ..errors import SettingError
from ..forest import LINK_MEAN, Forest

DEFAULT_BLOCK_ENTRIES = 2_000_000  # pair counts held at once (one block of rows x n)
MAX_DENSE_ROWS = 20_000  # 3.2 GB of float64; beyond this use proximity_pairs


def definition(forest: Forest) -> str:
    """The proximity definition used for ``forest``, in words (for results and reports)."""
    text = (f"share of the {forest.n_trees} trees in which both samples reach the same leaf "
            "(Breiman 2001)")
    if forest.link != LINK_MEAN:
        text += ("; boosted model: the same definition over all trees, every class's trees "
                 "counted alike")
    return text


def leaf_matrix(forest: Forest, X) -> sparse.csr_matrix:
    """Sparse (n, total leaves) indicator: row i has a 1 at each leaf sample i reaches."""
    leaves = forest.apply(X)
    n, n_trees = leaves.shape
    sizes = np.array([t.n_nodes for t in forest.trees], dtype=np.int64)
    leaves += np.concatenate([[0], np.cumsum(sizes)[:-1]])[None, :]
    cols = leaves.astype(np.int32).reshape(-1)
    del leaves
    indptr = np.arange(0, n * n_trees + 1, n_trees, dtype=np.int32)
    data = np.ones(n * n_trees, dtype=np.int32)
    return sparse.csr_matrix((data, cols, indptr), shape=(n, int(sizes.sum())))


def _block_rows(n: int, max_block_entries: int) -> int:
    """Rows per block so that a block's pair counts (rows x n) stay within the bound."""
    ok = isinstance(max_block_entries, (int, np.integer)) and not isinstance(
        max_block_entries, bool) and max_block_entries >= 1
    if not ok:
        raise SettingError(f"max_block_entries={max_block_entries!r} must be a whole number "
                           "of at least 1")
    return max(1, min(n, int(max_block_entries) // max(n, 1)))


def _blocks(A: sparse.csr_matrix, max_block_entries: int
            ) -> Iterator[tuple[int, int, sparse.csr_matrix]]:
    """(s, e, C) per block of samples s..e-1: ``C[r, c]`` = leaves shared by samples ``s + r``
    and ``s + c``, for every later-or-equal sample ``s + r`` (shape (n - s, e - s)); pairs
    with an earlier sample were counted in an earlier block."""
    n = A.shape[0]
    b = _block_rows(n, max_block_entries)
    for s in range(0, n, b):
        e = min(n, s + b)
        yield s, e, (A[s:] @ A[s:e].T).tocsr()


def _min_shared(threshold: float, n_trees: int) -> int:
    """Fewest shared leaves c with ``c / n_trees >= threshold``, in the same float arithmetic
    as the proximity itself, so filtering counts equals filtering proximities."""
    return int(np.argmax(np.arange(n_trees + 1) / n_trees >= threshold))


def _upper_pairs(s: int, C: sparse.csr_matrix, min_shared: int
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(i, j, shared leaves) with i < j and at least ``min_shared`` shared leaves, from one
    block. Entries are filtered on their count first, so only passing pairs get indices."""
    hit = np.flatnonzero(C.data >= min_shared)
    rows = np.searchsorted(C.indptr, hit, side="right") - 1
    cols = C.indices[hit]
    keep = rows > cols
    return (s + cols[keep].astype(np.int64), s + rows[keep].astype(np.int64),
            C.data[hit[keep]])


def _upper_histogram(C: sparse.csr_matrix, n_trees: int) -> np.ndarray:
    """Pairs (i < j) of one block by number of shared leaves (pairs sharing none not counted)."""
    rows = np.repeat(np.arange(C.shape[0], dtype=np.int32), np.diff(C.indptr))
    return np.bincount(C.data[rows > C.indices], minlength=n_trees + 1)


@dataclass
class ProximityPairs:
    """Sample pairs with proximity at or above a threshold.

    Attributes
    ----------
    i, j : ndarray of int
        Row indices into the data, ``i < j``, sorted by ``i`` then ``j``.
    p : ndarray of float
        Their proximity.
    threshold : float
    n_samples, n_trees : int
    definition : str
    """

    i: np.ndarray
    j: np.ndarray
    p: np.ndarray
    threshold: float
    n_samples: int
    n_trees: int
    definition: str

    def __len__(self) -> int:
        return int(self.i.shape[0])

    def __iter__(self):
        return iter((self.i, self.j, self.p))

    def to_dict(self) -> dict:
        return {"kind": "proximity_pairs", "threshold": self.threshold,
                "n_samples": self.n_samples, "n_trees": self.n_trees,
                "definition": self.definition, "i": self.i.tolist(), "j": self.j.tolist(),
                "p": self.p.tolist()}

    def to_rows(self) -> list[dict]:
        return [{"i": int(a), "j": int(b), "proximity": float(c)}
                for a, b, c in zip(self.i, self.j, self.p)]


@dataclass
class PairCounts:
    """How many sample pairs (i < j) reach each proximity threshold.

    ``n_pairs[k]`` counts pairs with proximity >= ``thresholds[k]``; ``n_total_pairs`` is
    ``n (n - 1) / 2``; ``histogram[c]`` counts pairs sharing a leaf in exactly c trees.
    """

    thresholds: np.ndarray
    n_pairs: np.ndarray
    n_total_pairs: int
    histogram: np.ndarray
    n_samples: int
    n_trees: int
    definition: str

    def to_dict(self) -> dict:
        return {"kind": "proximity_pair_counts", "thresholds": self.thresholds.tolist(),
                "n_pairs": self.n_pairs.tolist(), "n_total_pairs": self.n_total_pairs,
                "histogram": self.histogram.tolist(), "n_samples": self.n_samples,
                "n_trees": self.n_trees, "definition": self.definition}

    def to_rows(self) -> list[dict]:
        total = max(self.n_total_pairs, 1)
        return [{"threshold": float(t), "pairs": int(c), "share_of_pairs": int(c) / total}
                for t, c in zip(self.thresholds, self.n_pairs)]


@dataclass
class SimilarSamples:
    """The samples most like one given sample (highest proximity first; ties by row)."""

    index: int
    neighbours: np.ndarray
    proximity: np.ndarray
    n_trees: int
    definition: str

    def to_dict(self) -> dict:
        return {"kind": "most_similar", "index": self.index,
                "neighbours": self.neighbours.tolist(), "proximity": self.proximity.tolist(),
                "n_trees": self.n_trees, "definition": self.definition}

    def to_rows(self) -> list[dict]:
        return [{"index": self.index, "neighbour": int(a), "proximity": float(b)}
                for a, b in zip(self.neighbours, self.proximity)]


def _check_threshold(threshold) -> float:
    try:
        t = float(threshold)
    except (TypeError, ValueError):
        t = np.nan
    if not 0.0 <= t <= 1.0:
        raise SettingError(f"proximity threshold {threshold!r} must be a number from 0 to 1")
    return t


def proximity(forest: Forest, X, *, max_block_entries: int = DEFAULT_BLOCK_ENTRIES
              ) -> np.ndarray:
    """Dense proximity matrix (n, n): ``P[i, j]`` = share of trees where i and j share a leaf.

    For small n (it holds n * n floats); for large data use :func:`proximity_pairs`.
    Boosted models: the same definition over all trees (see :func:`definition`).

    Raises
    ------
    SettingError
        When n exceeds :data:`MAX_DENSE_ROWS`.
    """
    X = forest.check_X(X)
    n, n_trees = X.shape[0], forest.n_trees
    if n > MAX_DENSE_ROWS:
        raise SettingError(f"the dense proximity matrix for {n} rows would need "
                           f"{n * n * 8 / 1e9:.1f} GB; use proximity_pairs with a threshold, or "
                           f"at most {MAX_DENSE_ROWS} rows")
    A = leaf_matrix(forest, X)
    P = np.empty((n, n), dtype=np.float64)
    for s, e, C in _blocks(A, max_block_entries):
        lower = C.toarray() / n_trees
        P[s:, s:e] = lower
        P[s:e, s:] = lower.T
    return P


def proximity_pairs(forest: Forest, X, threshold: float, *,
                    max_block_entries: int = DEFAULT_BLOCK_ENTRIES) -> ProximityPairs:
    """Pairs (i < j) with proximity >= ``threshold``, without any n x n matrix.

    Works block by block over rows (at most ``max_block_entries`` pair counts at a time) and
    keeps only the pairs that pass. Equals thresholding :func:`proximity`'s upper triangle.

    Parameters
    ----------
    forest : Forest
    X : array-like of shape (n, n_features)
    threshold : float in [0, 1]
    max_block_entries : int
        Bound on the pair counts formed at once (memory: a few bytes each).

    Returns
    -------
    ProximityPairs
        Unpacks as ``i, j, p = proximity_pairs(...)``.
    """
    t = _check_threshold(threshold)
    A = leaf_matrix(forest, X)
    n, n_trees = A.shape[0], forest.n_trees
    need = _min_shared(t, n_trees)
    parts_i, parts_j, parts_p = [], [], []
    for s, _e, C in _blocks(A, max_block_entries):
        i, j, shared = _upper_pairs(s, C, need)
        parts_i.append(i)
        parts_j.append(j)
        parts_p.append(shared / n_trees)
    if t == 0.0:
        # Pairs that share no leaf at all have proximity 0 and pass a zero threshold too.
        return _all_pairs(forest, X, n, parts_i, parts_j, parts_p)
    return _sorted_pairs(parts_i, parts_j, parts_p, t, n, forest)


def _sorted_pairs(parts_i, parts_j, parts_p, t, n, forest) -> ProximityPairs:
    i = np.concatenate(parts_i) if parts_i else np.zeros(0, dtype=np.int64)
    j = np.concatenate(parts_j) if parts_j else np.zeros(0, dtype=np.int64)
    p = np.concatenate(parts_p) if parts_p else np.zeros(0)
    order = np.lexsort((j, i))
    return ProximityPairs(i[order], j[order], p[order], t, n, forest.n_trees, definition(forest))


def _all_pairs(forest, X, n, parts_i, parts_j, parts_p) -> ProximityPairs:
    """Threshold 0: every pair, with the zero-proximity ones filled in."""
    i, j = np.triu_indices(n, k=1)
    p = np.zeros(i.shape[0])
    found = _sorted_pairs(parts_i, parts_j, parts_p, 0.0, n, forest)
    # Position of (a, b) in triu order: a*n - a*(a+1)/2 + (b - a - 1).
    a, b = found.i, found.j
    p[a * n - a * (a + 1) // 2 + (b - a - 1)] = found.p
    return ProximityPairs(i.astype(np.int64), j.astype(np.int64), p, 0.0, n, forest.n_trees,
                          definition(forest))


def pairs_above_thresholds(forest: Forest, X, thresholds: Sequence[float] = (
        0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 0.99, 1.0), *,
        max_block_entries: int = DEFAULT_BLOCK_ENTRIES) -> PairCounts:
    """Number of sample pairs (i < j) with proximity at or above each threshold.

    One pass over the blocks gives the histogram of shared-leaf counts, from which every
    threshold's count follows, so a reviewer can pick a threshold before listing pairs.
    """
    ts = np.array([_check_threshold(t) for t in thresholds], dtype=np.float64)
    A = leaf_matrix(forest, X)
    n, n_trees = A.shape[0], forest.n_trees
    hist = np.zeros(n_trees + 1, dtype=np.int64)
    for s, _e, C in _blocks(A, max_block_entries):
        hist += _upper_histogram(C, n_trees)
    total = n * (n - 1) // 2
    hist[0] = total - int(hist[1:].sum())
    levels = np.arange(n_trees + 1) / n_trees
    n_pairs = np.array([int(hist[levels >= t].sum()) for t in ts], dtype=np.int64)
    return PairCounts(ts, n_pairs, total, hist, n, n_trees, definition(forest))


def most_similar(forest: Forest, X, index: int, k: int = 10) -> SimilarSamples:
    """The ``k`` rows of ``X`` with the highest proximity to row ``index`` (itself excluded).

    Ties are broken by row order.
    """
    leaves = forest.apply(X)
    n = leaves.shape[0]
    if isinstance(index, bool) or not isinstance(index, (int, np.integer)) or not 0 <= index < n:
        raise SettingError(f"sample index {index!r} must be a row number from 0 to {n - 1}")
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise SettingError(f"k={k!r} must be a whole number of at least 1")
    p = np.count_nonzero(leaves == leaves[index], axis=1) / forest.n_trees
    p[index] = -1.0
    order = np.lexsort((np.arange(n), -p))[: min(int(k), n - 1)]
    return SimilarSamples(int(index), order.astype(np.int64), p[order], forest.n_trees,
                          definition(forest))
