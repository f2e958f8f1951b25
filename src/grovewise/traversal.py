"""Compiled walk of many trees at once: the leaf each row reaches in each tree.

A plain numpy walk is about ten times slower than scikit-learn's compiled one on deep
forests, so the walk is compiled with numba. It keeps the library's comparison rule exactly:
the caller passes inputs and thresholds already in the comparison's float type (as float64
values) and says whether the rule is ``<`` (XGBoost) or ``<=`` (scikit-learn).
"""

from __future__ import annotations

import numba
import numpy as np


# The rule code of a node (``Tree.missing_rule`` for a numeric split; ``forest.py`` re-exports
# these). Where a numeric split sends a missing value:
MISSING_NAN = 0  # NaN goes the node's missing side; every number is compared
MISSING_ZERO = 1  # NaN and zero (|x| <= 1e-35, LightGBM's zero_as_missing) go the missing side
MISSING_NONE = 2  # no missing side: NaN is compared as 0.0 (LightGBM's missing_type None)
ZERO_AS_MISSING = float(np.float32(1e-35))  # LightGBM's kZeroThreshold (a float32)
# and the two kinds of categorical split:
RULE_CATEGORY = 3  # a negative value is no category
RULE_CATEGORY_TRUNCATED = 4  # the value is truncated to a whole number first (LightGBM)


@numba.njit(cache=True, nogil=True, inline="always")
def goes_left(x, k, dec, strict):  # pragma: no cover - compiled
    """Whether value ``x`` goes left at global node ``k``: the one decision rule of every walk.

    ``dec`` is ``Forest.decision_arrays``: thresholds, missing sides, rule codes, the other
    side of categorical splits, and their code sets as bit words (left words, then right).
    """
    threshold, missing_left, rule, other_left, cat_ptr, cat_words, cat_bits = dec
    r = rule[k]
    if r >= RULE_CATEGORY:
        if np.isnan(x):
            return missing_left[k]
        w = cat_words[k]
        # A negative number is no category; LightGBM truncates first, so -0.5 reads as 0.
        negative = x <= -1.0 if r == RULE_CATEGORY_TRUNCATED else x < 0.0
        if negative or x >= 64.0 * w:
            return other_left[k]
        c = np.int64(x)
        word = c >> 6
        bit = np.uint64(1) << np.uint64(c & 63)
        start = cat_ptr[k]
        if cat_bits[start + word] & bit:
            return True
        if cat_bits[start + w + word] & bit:
            return False
        return other_left[k]
    if np.isnan(x):
        if r != MISSING_NONE:
            return missing_left[k]
        x = 0.0
    elif r == MISSING_ZERO and -ZERO_AS_MISSING <= x <= ZERO_AS_MISSING:
        return missing_left[k]
    if strict:
        return x < threshold[k]
    return x <= threshold[k]


@numba.njit(cache=True, nogil=True, parallel=True)
def leaf_nodes(X, feature, dec, left, right, roots, strict):  # pragma: no cover
    """Global index of the leaf that row i reaches in tree t, as an (n, n_trees) array.

    ``left[k] < 0`` marks a leaf; :func:`goes_left` decides every split.
    """
    n = X.shape[0]
    n_trees = roots.shape[0]
    out = np.empty((n_trees, n), dtype=np.int64)
    # Tree by tree, so that one tree's nodes stay in cache while every row walks it.
    for t in numba.prange(n_trees):
        for i in range(n):
            k = roots[t]
            while left[k] >= 0:
                k = left[k] if goes_left(X[i, feature[k]], k, dec, strict) else right[k]
            out[t, i] = k
    return out.T


def use_threads(jobs: int | None) -> int:
    """Let the compiled walks of this thread use ``jobs`` cores (None or 0: all). The walk's
    results do not depend on it. Returns the number used."""
    cores = numba.config.NUMBA_NUM_THREADS
    n = cores if not jobs else max(1, min(int(jobs), cores))
    numba.set_num_threads(n)
    return n


@numba.njit(cache=True, nogil=True)
def decide_many(values, nodes, dec, strict):  # pragma: no cover - compiled
    """``goes_left`` of ``values[i]`` at global node ``nodes[i]``, for every i (values already
    in the comparison's float type)."""
    out = np.empty(values.shape[0], dtype=np.bool_)
    for i in range(values.shape[0]):
        out[i] = goes_left(values[i], nodes[i], dec, strict)
    return out
