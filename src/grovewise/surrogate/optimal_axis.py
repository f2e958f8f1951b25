"""Exact optimal axis-aligned classification trees of depth 1 and 2.

The tree minimises the weighted misclassification (the weight of the rows whose leaf's
class, the leaf's weighted majority, differs from the row's class) over *every* tree of the
depth whose splits are ``x[f] <= t``, ``t`` between two consecutive distinct values of ``f``
among the rows reaching the node, with every feature admissible at the node's depth and
every leaf that holds rows keeping at least ``min_leaf`` of them. As in the program
(SURROGATE_MILP.md) a node may also not split (every row then goes right), so the search
also covers a single leaf, a root split above leaves, and, at depth 2, a root that does not
split above a right child that does (a depth-1 tree over the features admissible at depth 1).

It is an exact search, not a solver with a time limit: every admissible root cut is either
evaluated exactly, with the best split (or none) of both children, or lies in an interval
of root cuts whose lower bound exceeds the best tree found. ``optimal=True`` says that all
of them were settled; ``lower_bound`` is then the objective. A ``deadline`` stops the search
between sweeps; the answer is then the best tree so far, ``optimal=False``, and
``lower_bound`` still bounds every tree (the least of the unsettled intervals' bounds).
Costs are float sums: a child splits only when that beats a leaf by more than ``_REL_TOL``
of the total weight, and an interval is discarded only when its bound exceeds the best cost
by more than that, so the objective is the minimum to within that share.

Design (depth 2), three steps:

1. Grid (the bound of Quant-BnB: Mazumder, Meng, Wang, "Quant-BnB: A scalable
   branch-and-bound method for optimal decision trees with continuous features", ICML
   2022). For every root feature f, a few root cuts spread evenly over f's admissible cuts,
   plus f's best depth-1 cut, are evaluated in one pass per child feature g: along g's
   sorted rows, the class weights of every grid cut's left and right child are kept per
   cut, and each child's best single split is read at every candidate child cut. With
   ``min_leaf == 1`` this is the exact cost of each grid cut's tree (the first incumbents).
2. Bounds. A root cut i between grid cuts a < i < b has a left child holding a's left
   child and a right child holding b's right child; the least cost of a depth-1 tree never
   falls when rows are added (and never falls when ``min_leaf`` rises), so
   ``best1(left of a) + best1(right of b)`` bounds every cut in between. Intervals whose
   bound exceeds the incumbent are discarded.
3. Sweeps of the remaining intervals, most promising first, on the two cores (Python
   threads running numba kernels that release the GIL; the incumbent falls as results come
   in, and later intervals are checked against it before they start; neighbouring intervals
   of one root feature are swept together). A sweep moves the rows of the interval into the
   left child one at a time, in f's order. Per child feature g, a segment tree over g's
   sorted positions holds, per node, the class weights of the left and of the right child's
   rows there and, per ordered class pair (a, b), the maximum over prefixes of (class-a
   weight - class-b weight). A child's best split along g with its left part predicting a
   and its right part b costs ``T - T_b - max_s (P_a(s) - P_b(s))`` (T the child's weight,
   P prefix weights along g), so the tree's root gives the child's best split along g in
   O(K^2) and moving one row updates one leaf-to-root path in O(K^2 log n). K = 2 has its
   own kernel with one signed weight per row. With ``min_leaf > 1`` the admissible prefixes
   of a child form an interval of positions (row counts grow along g), found by descending
   the counts, and the maximum is taken over that interval; it is computed only when the
   unrestricted best could beat the child's best so far.

A full sweep of every root feature costs O(p^2 n K^2 log n); the bounds usually leave a
small share of it. The deciding order is deterministic: the least cost wins, then the lowest
root feature and cut, whatever the order in which the threads finish.

Only class-change boundaries can hold the optimal threshold of a *last-level* split: along a
run of rows of one class, ``P_a - P_b`` is monotone, so its maximum lies at an end of the
run. The child cuts tried (grid and sweeps) are therefore the boundaries between blocks of
g's sorted distinct values, a block being a run of consecutive values whose rows all have
one class (a value shared by rows of two classes is its own block). The argument holds for
every subset of the rows, so for every child. (With ``min_leaf > 1`` the admissible interval
can end inside a block, so the sweeps there use every distinct value.) The root cut gets no
such pruning: at depth 2 the best root threshold can lie inside a run of one class, so every
distinct value of the root feature is settled.

The overall scheme is the depth-two search of MurTree (Demirovic, Lukina, Hebrard, Chan,
Bailey, Leckie, Ramamohanarao, Stuckey, "MurTree: optimal decision trees via dynamic
programming and search", JMLR 23(26), 2022) carried out directly on continuous features, as
ConTree does (Brita, van der Linden, Demirovic, "Optimal classification trees for continuous
feature data using dynamic programming with branch-and-bound", AAAI 2025), with the best
child split kept by a segment tree instead of their counts. The cut-point argument is the
one for continuous attributes of Fayyad & Irani ("On the handling of continuous-valued
attributes in decision tree generation", Machine Learning 8, 1992; cited from memory, shown
there for entropy; for misclassification the monotonicity above is the whole proof).

Measured (tests/bench/test_optimal_axis_bench.py: 10,000 rows x 30 features, classes and
weights from a random forest, compiled code loaded from numba's disk cache), on 2 cores of
which another process held one: 0.4 s for 2 classes and 0.6-0.85 s for 3, 0.5 s and 0.85 s
with min_leaf 5, against a 2 s target. Labels with no structure (random classes) leave the
bounds little to discard: 0.9 s of CPU for 2 classes, 3.1 s for 3. The work grows as K^2.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
from dataclasses import dataclass, field

import numba
import numpy as np

from .tree import ObliqueTree, Scaling, fill_empty_leaves, n_branch_nodes, n_leaves

# A child splits only when that beats a leaf by more than this share of the total weight,
# and an interval of root cuts is discarded only when its bound exceeds the best cost by more
# than it: it absorbs the rounding of float sums (about n * 1e-16 of the weight).
_REL_TOL = 1e-9
# Root cuts per root feature evaluated before the sweeps (step 1).
_GRID_POINTS = 6


@dataclass(eq=False)
class AxisTreeResult:
    """An axis-aligned tree of depth 1 or 2 and the certificate of its search.

    ``features[t]`` is the feature of branch node t (heap order), -1 where the node does not
    split (every row goes right). ``thresholds[t]`` sends ``x[f] <= t`` left (NaN where the
    node does not split): the midpoint of ``left_max[t]``, the largest training value going
    left at the node, and ``right_min[t]``, the smallest going right. ``leaf_class`` is each
    leaf's weighted majority (an empty leaf takes its nearest non-empty ancestor's), and
    ``leaf_weight`` the training weight per (leaf, class).

    ``objective`` is the weighted misclassification of this tree on the training rows as a
    share of the total weight, scored by routing the rows (not taken from the search).
    ``optimal`` is True when the search settled every admissible root cut: then no tree of
    the depth does better than ``objective`` by more than ``tolerance`` (a share of the
    weight). ``lower_bound`` (a share) holds for every tree in any case; it equals the
    objective when the search completed. ``counters`` says how the root cuts were settled.
    """

    depth: int
    features: np.ndarray
    thresholds: np.ndarray
    left_max: np.ndarray
    right_min: np.ndarray
    leaf_class: np.ndarray
    leaf_weight: np.ndarray
    n_classes: int
    n_features: int
    objective: float
    lower_bound: float
    weighted_error: float
    total_weight: float
    optimal: bool
    seconds: float
    tolerance: float = _REL_TOL
    counters: dict = field(default_factory=dict)

    def route(self, X: np.ndarray) -> np.ndarray:
        """Leaf index (0 .. 2**depth - 1) of every row of ``X`` (original units)."""
        X = np.asarray(X, dtype=np.float64)
        node = np.zeros(X.shape[0], dtype=np.int64)
        rows = np.arange(X.shape[0])
        for _ in range(self.depth):
            f = self.features[node]
            split = f >= 0
            left = np.zeros(X.shape[0], dtype=bool)
            left[split] = X[rows[split], f[split]] <= self.thresholds[node[split]]
            node = np.where(left, 2 * node + 1, 2 * node + 2)
        return node - n_branch_nodes(self.depth)

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Class index of every row of ``X``."""
        return self.leaf_class[self.route(X)]

    def to_oblique(self, scaling: Scaling) -> ObliqueTree:
        """The same tree as an :class:`ObliqueTree` (coefficient 1 on the node's feature).

        The oblique tree sends ``xs < b`` left in scaled space. ``b`` is the midpoint of the
        node's two neighbouring training values after scaling (``left_max`` and
        ``right_min``), moved up to the right one should the midpoint round onto the left
        one, so every training row goes where :meth:`predict` sends it. (A ``scaling`` that
        maps the two values onto one float leaves no offset between them.)
        """
        nb = n_branch_nodes(self.depth)
        coef = np.zeros((nb, scaling.low.shape[0]))
        offset = np.zeros(nb)
        for t in range(nb):
            f = int(self.features[t])
            if f < 0:
                continue
            s_lo = (self.left_max[t] - scaling.low[f]) / scaling.span[f]
            s_hi = (self.right_min[t] - scaling.low[f]) / scaling.span[f]
            b = 0.5 * s_lo + 0.5 * s_hi
            if not s_lo < b:
                b = s_hi
            coef[t, f] = 1.0
            offset[t] = b
        return ObliqueTree(depth=self.depth, coef=coef, offset=offset,
                           leaf_class=self.leaf_class.copy(), scaling=scaling,
                           leaf_weight=self.leaf_weight.copy())


# ---------------------------------------------------------------------------- kernels
# Segment-tree layouts (one row per node, heap order from 1, leaves at size .. 2 size - 1).
# Any K: columns [0, K) class weights of the left child's rows, [K, 2K) of the right child's,
# [2K, 2K+Q) per ordered class pair q = (a, b) the maximum over prefixes of (class-a weight -
# class-b weight) among the left child's rows, [2K+Q, 2K+2Q) the same among the right child's,
# then the left child's row count and every row's count. K = 2: one signed weight D (+w for
# class 1, -w for class 0) and columns D left, D right, max and min prefix of D left, max and
# min prefix of D right, row counts left and all.


@numba.njit(cache=True, nogil=True)
def _class_pairs(K):  # pragma: no cover - compiled
    """Every ordered pair (a, b) of distinct classes."""
    Q = K * (K - 1)
    qa = np.empty(Q, dtype=np.int64)
    qb = np.empty(Q, dtype=np.int64)
    q = 0
    for a in range(K):
        for b in range(K):
            if a != b:
                qa[q] = a
                qb[q] = b
                q += 1
    return qa, qb


@numba.njit(cache=True, nogil=True)
def _first_reaching(T, size, need, ccol, left):  # pragma: no cover - compiled
    """First leaf position whose prefix row count (of the left child's rows if ``left``, else
    of the right child's) reaches ``need`` (>= 1), by descending the counts."""
    node = 1
    while node < size:
        lc = 2 * node
        c = T[lc, ccol] if left else T[lc, ccol + 1] - T[lc, ccol]
        if c >= need:
            node = lc
        else:
            need -= c
            node = lc + 1
    return node - size


@numba.njit(cache=True, nogil=True)
def _cover(size, s_lo, s_hi, nodes):  # pragma: no cover - compiled
    """The canonical nodes of leaf positions [s_lo, s_hi], left to right, into ``nodes``;
    returns their number."""
    n_left = 0
    n_right = 0
    half = nodes.shape[0] // 2
    lo = size + s_lo
    hi = size + s_hi + 1
    while lo < hi:
        if lo & 1:
            nodes[n_left] = lo
            n_left += 1
            lo += 1
        if hi & 1:
            hi -= 1
            nodes[half + n_right] = hi
            n_right += 1
        lo >>= 1
        hi >>= 1
    for j in range(n_right):
        nodes[n_left + j] = nodes[half + n_right - 1 - j]
    return n_left + n_right


@numba.njit(cache=True, nogil=True)
def _ranged_cost(T, size, K, Q, qa, qb, left, total_count, m, nodes, run, best):
    # pragma: no cover - compiled
    """Any K: the best split cost of one child along the tree's feature with both parts
    keeping at least ``m`` rows; inf when none can."""
    if total_count < 2 * m:
        return np.inf
    so = 0 if left else K
    mo = 2 * K if left else 2 * K + Q
    cc = 2 * K + 2 * Q
    s_lo = _first_reaching(T, size, m, cc, left)
    s_hi = _first_reaching(T, size, total_count - m + 1, cc, left) - 1
    if s_lo > s_hi:
        return np.inf
    for k in range(K):
        run[k] = 0.0
    if s_lo > 0:
        c = _cover(size, 0, s_lo - 1, nodes)
        for j in range(c):
            for k in range(K):
                run[k] += T[nodes[j], so + k]
    for q in range(Q):
        best[q] = -np.inf
    c = _cover(size, s_lo, s_hi, nodes)
    for j in range(c):
        nd = nodes[j]
        for q in range(Q):
            v = run[qa[q]] - run[qb[q]] + T[nd, mo + q]
            if v > best[q]:
                best[q] = v
        for k in range(K):
            run[k] += T[nd, so + k]
    tot = 0.0
    for k in range(K):
        tot += T[1, so + k]
    top = -np.inf
    for q in range(Q):
        v = T[1, so + qb[q]] + best[q]
        if v > top:
            top = v
    return tot - top


@numba.njit(cache=True, nogil=True)
def _ranged_cost2(T, size, left, t0, t1, total_count, m, nodes):  # pragma: no cover - compiled
    """K = 2: as :func:`_ranged_cost`; ``t0``, ``t1`` the child's class weights."""
    if total_count < 2 * m:
        return np.inf
    s_lo = _first_reaching(T, size, m, 6, left)
    s_hi = _first_reaching(T, size, total_count - m + 1, 6, left) - 1
    if s_lo > s_hi:
        return np.inf
    dc = 0 if left else 1
    xc = 2 if left else 4
    run = 0.0
    if s_lo > 0:
        c = _cover(size, 0, s_lo - 1, nodes)
        for j in range(c):
            run += T[nodes[j], dc]
    mx = -np.inf
    mn = np.inf
    c = _cover(size, s_lo, s_hi, nodes)
    for j in range(c):
        nd = nodes[j]
        v = run + T[nd, xc]
        if v > mx:
            mx = v
        v = run + T[nd, xc + 1]
        if v < mn:
            mn = v
        run += T[nd, dc]
    return min(t1 - mx, t0 + mn)


@numba.njit(cache=True, nogil=True)
def _interval_setup(f, a, b, order, cut_ok, y, w, tot, K, min_leaf):
    # pragma: no cover - compiled
    """For the root cuts a+1 .. b-1 of feature f: which are admissible, the cost of each child
    left as a leaf, and the left child's class weights."""
    n = y.shape[0]
    of = order[f]
    pre = np.zeros(K)
    for i in range(a + 1):
        pre[y[of[i]]] += w[of[i]]
    L = b - a - 1
    valid = np.zeros(L, dtype=np.bool_)
    leafL = np.empty(L)
    leafR = np.empty(L)
    preL = np.empty((L, K))
    for j in range(L):
        i = a + 1 + j
        r = of[i]
        pre[y[r]] += w[r]
        sl = 0.0
        ml = 0.0
        sr = 0.0
        mr = 0.0
        for k in range(K):
            u = pre[k]
            v = tot[k] - u
            preL[j, k] = u
            sl += u
            sr += v
            if u > ml:
                ml = u
            if v > mr:
                mr = v
        leafL[j] = sl - ml
        leafR[j] = sr - mr
        valid[j] = cut_ok[f, i] and i + 1 >= min_leaf and n - i - 1 >= min_leaf
    return valid, leafL, leafR, preL


@numba.njit(cache=True, nogil=True)
def _interval_best(a, valid, leafL, leafR, splitL, splitR, tol):  # pragma: no cover - compiled
    """The least tree cost over the admissible cuts (a child splits only when that beats the
    leaf by more than ``tol``) and its position; the first on ties."""
    bc = np.inf
    bi = -1
    for j in range(valid.shape[0]):
        if not valid[j]:
            continue
        cl = splitL[j] if splitL[j] < leafL[j] - tol else leafL[j]
        cr = splitR[j] if splitR[j] < leafR[j] - tol else leafR[j]
        if cl + cr < bc:
            bc = cl + cr
            bi = a + 1 + j
    return bc, bi


@numba.njit(cache=True, nogil=True)
def _sweep_interval(f, a, b, child_feats, order, rank, cut_ok, leafpos, y, w, tot, K,
                    min_leaf, tol, T):  # pragma: no cover - compiled
    """Any K. The least cost of a depth-2 tree whose root cuts feature f after position i of
    its order, a < i < b (children split over ``child_feats`` or stay leaves), that i (-1:
    no admissible cut) and the number of admissible cuts. ``T`` is scratch space, shape
    (2 size, 2K + 2K(K-1) + 2), size a power of two at least every child feature's number of
    leaf positions."""
    n = y.shape[0]
    size = T.shape[0] // 2
    qa, qb = _class_pairs(K)
    Q = qa.shape[0]
    cc = 2 * K + 2 * Q
    counting = min_leaf > 1
    of = order[f]
    rf = rank[f]
    valid, leafL, leafR, preL = _interval_setup(f, a, b, order, cut_ok, y, w, tot, K, min_leaf)
    L = valid.shape[0]
    nv = 0
    for j in range(L):
        if valid[j]:
            nv += 1
    if nv == 0:
        return np.inf, -1, 0
    splitL = np.full(L, np.inf)
    splitR = np.full(L, np.inf)
    nodes = np.zeros(128, dtype=np.int64)
    run = np.zeros(K)
    bq = np.zeros(Q)
    for g in child_feats:
        lp = leafpos[g]
        # build: rows up to position a in the left child, the others in the right child
        T[size:, :] = 0.0
        for r in range(n):
            nd = size + lp[r]
            if rf[r] <= a:
                T[nd, y[r]] += w[r]
                T[nd, cc] += 1.0
            else:
                T[nd, K + y[r]] += w[r]
            T[nd, cc + 1] += 1.0
        for nd in range(size, 2 * size):
            for q in range(Q):
                T[nd, 2 * K + q] = T[nd, qa[q]] - T[nd, qb[q]]
                T[nd, 2 * K + Q + q] = T[nd, K + qa[q]] - T[nd, K + qb[q]]
        for nd in range(size - 1, 0, -1):
            lc = 2 * nd
            rc = lc + 1
            for k in range(2 * K):
                T[nd, k] = T[lc, k] + T[rc, k]
            T[nd, cc] = T[lc, cc] + T[rc, cc]
            T[nd, cc + 1] = T[lc, cc + 1] + T[rc, cc + 1]
            for q in range(Q):
                T[nd, 2 * K + q] = max(T[lc, 2 * K + q],
                                       T[lc, qa[q]] - T[lc, qb[q]] + T[rc, 2 * K + q])
                T[nd, 2 * K + Q + q] = max(
                    T[lc, 2 * K + Q + q],
                    T[lc, K + qa[q]] - T[lc, K + qb[q]] + T[rc, 2 * K + Q + q])
        # sweep: move the rows a+1 .. b-1 to the left child one at a time
        for j in range(L):
            r = of[a + 1 + j]
            c = y[r]
            wt = w[r]
            nd = size + lp[r]
            T[nd, c] += wt
            T[nd, K + c] -= wt
            T[nd, cc] += 1.0
            for q in range(Q):
                T[nd, 2 * K + q] = T[nd, qa[q]] - T[nd, qb[q]]
                T[nd, 2 * K + Q + q] = T[nd, K + qa[q]] - T[nd, K + qb[q]]
            nd >>= 1
            while nd >= 1:
                lc = 2 * nd
                rc = lc + 1
                T[nd, c] += wt
                T[nd, K + c] -= wt
                T[nd, cc] += 1.0
                for q in range(Q):
                    qa_ = qa[q]
                    qb_ = qb[q]
                    T[nd, 2 * K + q] = max(T[lc, 2 * K + q],
                                           T[lc, qa_] - T[lc, qb_] + T[rc, 2 * K + q])
                    T[nd, 2 * K + Q + q] = max(
                        T[lc, 2 * K + Q + q],
                        T[lc, K + qa_] - T[lc, K + qb_] + T[rc, 2 * K + Q + q])
                nd >>= 1
            if not valid[j]:
                continue
            i = a + 1 + j
            sl = 0.0
            sr = 0.0
            for k in range(K):
                sl += T[1, k]
                sr += T[1, K + k]
            vl = -np.inf
            vr = -np.inf
            for q in range(Q):
                v = T[1, qb[q]] + T[1, 2 * K + q]
                if v > vl:
                    vl = v
                v = T[1, K + qb[q]] + T[1, 2 * K + Q + q]
                if v > vr:
                    vr = v
            # the best split over every prefix; with min_leaf it bounds the admissible ones
            # from below, so the ranged query runs only when it could change the answer
            cl = sl - vl
            cr = sr - vr
            if counting:
                if cl < splitL[j] and cl < leafL[j] - tol:
                    cl = _ranged_cost(T, size, K, Q, qa, qb, True, i + 1, min_leaf, nodes,
                                      run, bq)
                else:
                    cl = np.inf
                if cr < splitR[j] and cr < leafR[j] - tol:
                    cr = _ranged_cost(T, size, K, Q, qa, qb, False, n - i - 1, min_leaf,
                                      nodes, run, bq)
                else:
                    cr = np.inf
            if cl < splitL[j]:
                splitL[j] = cl
            if cr < splitR[j]:
                splitR[j] = cr
    bc, bi = _interval_best(a, valid, leafL, leafR, splitL, splitR, tol)
    return bc, bi, nv


@numba.njit(cache=True, nogil=True)
def _sweep_interval2(f, a, b, child_feats, order, rank, cut_ok, leafpos, y, w, tot, min_leaf,
                     tol, T):  # pragma: no cover - compiled
    """K = 2: as :func:`_sweep_interval`, with one signed weight per row; ``T`` has 8
    columns."""
    n = y.shape[0]
    size = T.shape[0] // 2
    counting = min_leaf > 1
    of = order[f]
    rf = rank[f]
    valid, leafL, leafR, preL = _interval_setup(f, a, b, order, cut_ok, y, w, tot, 2, min_leaf)
    L = valid.shape[0]
    nv = 0
    for j in range(L):
        if valid[j]:
            nv += 1
    if nv == 0:
        return np.inf, -1, 0
    splitL = np.full(L, np.inf)
    splitR = np.full(L, np.inf)
    nodes = np.zeros(128, dtype=np.int64)
    for g in child_feats:
        lp = leafpos[g]
        T[size:, :] = 0.0
        for r in range(n):
            nd = size + lp[r]
            d = w[r] if y[r] == 1 else -w[r]
            if rf[r] <= a:
                T[nd, 0] += d
                T[nd, 6] += 1.0
            else:
                T[nd, 1] += d
            T[nd, 7] += 1.0
        for nd in range(size, 2 * size):
            T[nd, 2] = T[nd, 0]
            T[nd, 3] = T[nd, 0]
            T[nd, 4] = T[nd, 1]
            T[nd, 5] = T[nd, 1]
        for nd in range(size - 1, 0, -1):
            lc = 2 * nd
            rc = lc + 1
            dl = T[lc, 0]
            dr = T[lc, 1]
            T[nd, 0] = dl + T[rc, 0]
            T[nd, 1] = dr + T[rc, 1]
            T[nd, 2] = max(T[lc, 2], dl + T[rc, 2])
            T[nd, 3] = min(T[lc, 3], dl + T[rc, 3])
            T[nd, 4] = max(T[lc, 4], dr + T[rc, 4])
            T[nd, 5] = min(T[lc, 5], dr + T[rc, 5])
            T[nd, 6] = T[lc, 6] + T[rc, 6]
            T[nd, 7] = T[lc, 7] + T[rc, 7]
        for j in range(L):
            r = of[a + 1 + j]
            d = w[r] if y[r] == 1 else -w[r]
            nd = size + lp[r]
            v0 = T[nd, 0] + d
            v1 = T[nd, 1] - d
            T[nd, 0] = v0
            T[nd, 1] = v1
            T[nd, 2] = v0
            T[nd, 3] = v0
            T[nd, 4] = v1
            T[nd, 5] = v1
            T[nd, 6] += 1.0
            nd >>= 1
            while nd >= 1:
                lc = 2 * nd
                rc = lc + 1
                dl = T[lc, 0]
                dr = T[lc, 1]
                T[nd, 0] += d
                T[nd, 1] -= d
                T[nd, 2] = max(T[lc, 2], dl + T[rc, 2])
                T[nd, 3] = min(T[lc, 3], dl + T[rc, 3])
                T[nd, 4] = max(T[lc, 4], dr + T[rc, 4])
                T[nd, 5] = min(T[lc, 5], dr + T[rc, 5])
                T[nd, 6] += 1.0
                nd >>= 1
            if not valid[j]:
                continue
            i = a + 1 + j
            l0 = preL[j, 0]
            l1 = preL[j, 1]
            r0 = tot[0] - l0
            r1 = tot[1] - l1
            # the best split over every prefix; with min_leaf it bounds the admissible ones
            # from below, so the ranged query runs only when it could change the answer
            cl = min(l1 - T[1, 2], l0 + T[1, 3])
            cr = min(r1 - T[1, 4], r0 + T[1, 5])
            if counting:
                if cl < splitL[j] and cl < leafL[j] - tol:
                    cl = _ranged_cost2(T, size, True, l0, l1, i + 1, min_leaf, nodes)
                else:
                    cl = np.inf
                if cr < splitR[j] and cr < leafR[j] - tol:
                    cr = _ranged_cost2(T, size, False, r0, r1, n - i - 1, min_leaf, nodes)
                else:
                    cr = np.inf
            if cl < splitL[j]:
                splitL[j] = cl
            if cr < splitR[j]:
                splitR[j] = cr
    bc, bi = _interval_best(a, valid, leafL, leafR, splitL, splitR, tol)
    return bc, bi, nv


@numba.njit(cache=True, nogil=True)
def _grid_setup(f, cuts, order, y, w, K):  # pragma: no cover - compiled
    """For the root cuts ``cuts`` (increasing positions in f's order): each row's bucket (the
    first grid cut whose left child holds it; q if none) and the left children's class
    weights, shape (K, q)."""
    n = y.shape[0]
    q = cuts.shape[0]
    of = order[f]
    bucket = np.empty(n, dtype=np.int64)
    TL = np.zeros((K, q))
    pre = np.zeros(K)
    k = 0
    for i in range(n):
        r = of[i]
        while k < q and cuts[k] < i:
            k += 1
        bucket[r] = k
        pre[y[r]] += w[r]
        if k < q and cuts[k] == i:
            for c in range(K):
                TL[c, k] = pre[c]
    return bucket, TL


@numba.njit(cache=True, nogil=True)
def _grid_feature(f, cuts, child_feats, order, posS, yS, wS, y, w, tot, K):
    # pragma: no cover - compiled
    """Any K. For each grid cut of root feature f (increasing positions ``cuts``): the least
    cost of each child over every single split along ``child_feats``, one row per part at
    least (``lbL``, ``lbR``: also a lower bound for any superset of the child's rows, and for
    any larger minimum leaf size), and the cost of each child as a leaf. One pass per child
    feature serves every grid cut: a row is in grid cut k's left child when its bucket is
    <= k. The child cuts tried are the changes of block along g (``posS``: the blocks of g's
    sorted rows)."""
    n = y.shape[0]
    q = cuts.shape[0]
    bucket, TL = _grid_setup(f, cuts, order, y, w, K)
    TR = np.empty((K, q))
    leafL = np.empty(q)
    leafR = np.empty(q)
    for k in range(q):
        sl = 0.0
        ml = 0.0
        sr = 0.0
        mr = 0.0
        for c in range(K):
            TR[c, k] = tot[c] - TL[c, k]
            sl += TL[c, k]
            sr += TR[c, k]
            ml = max(ml, TL[c, k])
            mr = max(mr, TR[c, k])
        leafL[k] = sl - ml
        leafR[k] = sr - mr
    lbL = leafL.copy()
    lbR = leafR.copy()
    CL = np.zeros((K, q))
    PA = np.zeros(K)
    for g in child_feats:
        og = order[g]
        ps = posS[g]
        ys = yS[g]
        ws = wS[g]
        CL[:, :] = 0.0
        PA[:] = 0.0
        for idx in range(n):
            if idx > 0 and ps[idx] != ps[idx - 1]:
                for k in range(q):
                    sl = 0.0
                    ml = 0.0
                    sl2 = 0.0
                    ml2 = 0.0
                    sr = 0.0
                    mr = 0.0
                    sr2 = 0.0
                    mr2 = 0.0
                    for c in range(K):
                        u = CL[c, k]
                        v = TL[c, k] - u
                        sl += u
                        ml = max(ml, u)
                        sl2 += v
                        ml2 = max(ml2, v)
                        u = PA[c] - CL[c, k]
                        v = TR[c, k] - u
                        sr += u
                        mr = max(mr, u)
                        sr2 += v
                        mr2 = max(mr2, v)
                    lbL[k] = min(lbL[k], (sl - ml) + (sl2 - ml2))
                    lbR[k] = min(lbR[k], (sr - mr) + (sr2 - mr2))
            b = bucket[og[idx]]
            c = ys[idx]
            wt = ws[idx]
            for k in range(b, q):
                CL[c, k] += wt
            PA[c] += wt
    return lbL, lbR, leafL, leafR


@numba.njit(cache=True, nogil=True)
def _grid_feature2(f, cuts, child_feats, order, posS, yS, wS, y, w, tot):
    # pragma: no cover - compiled
    """K = 2: as :func:`_grid_feature`."""
    n = y.shape[0]
    q = cuts.shape[0]
    bucket, TL = _grid_setup(f, cuts, order, y, w, 2)
    TL0 = TL[0].copy()
    TL1 = TL[1].copy()
    TR0 = tot[0] - TL0
    TR1 = tot[1] - TL1
    leafL = np.minimum(TL0, TL1)
    leafR = np.minimum(TR0, TR1)
    lbL = leafL.copy()
    lbR = leafR.copy()
    C = np.zeros((2, q))
    A = np.zeros(2)
    for g in child_feats:
        og = order[g]
        ps = posS[g]
        ys = yS[g]
        ws = wS[g]
        C[:, :] = 0.0
        A[:] = 0.0
        for idx in range(n):
            if idx > 0 and ps[idx] != ps[idx - 1]:
                A0 = A[0]
                A1 = A[1]
                for k in range(q):
                    x0 = C[0, k]
                    x1 = C[1, k]
                    z0 = A0 - x0
                    z1 = A1 - x1
                    lbL[k] = min(lbL[k], min(x0, x1) + min(TL0[k] - x0, TL1[k] - x1))
                    lbR[k] = min(lbR[k], min(z0, z1) + min(TR0[k] - z0, TR1[k] - z1))
            b = bucket[og[idx]]
            c = ys[idx]
            wt = ws[idx]
            for k in range(b, q):
                C[c, k] += wt
            A[c] += wt
    return lbL, lbR, leafL, leafR


@numba.njit(cache=True, nogil=True)
def _best_splits(feats, order, X, y, w, in_set, K, min_leaf):  # pragma: no cover - compiled
    """Best single split of the rows ``in_set`` along each feature of ``feats``: cost (inf
    when none is admissible), and the largest value going left and smallest going right."""
    n = y.shape[0]
    tot = np.zeros(K)
    cnt = 0
    for r in range(n):
        if in_set[r]:
            tot[y[r]] += w[r]
            cnt += 1
    m = feats.shape[0]
    cost = np.full(m, np.inf)
    lo = np.zeros(m)
    hi = np.zeros(m)
    pre = np.zeros(K)
    for j in range(m):
        g = feats[j]
        og = order[g]
        pre[:] = 0.0
        seen = 0
        last = 0.0
        best = np.inf
        bl = 0.0
        bh = 0.0
        for idx in range(n):
            r = og[idx]
            if not in_set[r]:
                continue
            v = X[r, g]
            if seen > 0 and v > last and seen >= min_leaf and cnt - seen >= min_leaf:
                sl = 0.0
                ml = 0.0
                sr = 0.0
                mr = 0.0
                for k in range(K):
                    a = pre[k]
                    b = tot[k] - a
                    sl += a
                    sr += b
                    if a > ml:
                        ml = a
                    if b > mr:
                        mr = b
                c = (sl - ml) + (sr - mr)
                if c < best:
                    best = c
                    bl = last
                    bh = v
            pre[y[r]] += w[r]
            seen += 1
            last = v
        cost[j] = best
        lo[j] = bl
        hi[j] = bh
    return cost, lo, hi


def _workers() -> int:
    """Threads for the search: numba's thread count (NUMBA_NUM_THREADS, else the cores)."""
    return max(1, int(numba.get_num_threads()))


def warm_up() -> None:
    """Compile (or load from numba's disk cache) every kernel on a tiny input, so that the
    first search measures the search."""
    X = np.array([[0.0, 1.0], [1.0, 0.0], [2.0, 2.0], [3.0, 1.5], [4.0, 3.0]])
    for K, y in ((2, np.array([0, 1, 1, 0, 1])), (3, np.array([0, 1, 2, 0, 1]))):
        for m in (1, 2):
            optimal_axis_tree(X, y, depth=2, n_classes=K, min_leaf=m)
            n, p = X.shape
            order = np.argsort(np.ascontiguousarray(X.T), axis=1, kind="stable")
            rank = np.empty((p, n), dtype=np.int64)
            rank[np.arange(p)[:, None], order] = np.arange(n)[None, :]
            cut_ok = np.ones((p, n - 1), dtype=bool)
            leafpos = rank.copy()
            w = np.ones(n)
            tot = np.bincount(y, minlength=K).astype(np.float64)
            feats = np.arange(p, dtype=np.int64)
            cuts = np.array([1, 2], dtype=np.int64)
            posS, yS, wS = _sorted_by_feature(order, leafpos, y, w)
            if K == 2:
                _grid_feature2(0, cuts, feats, order, posS, yS, wS, y, w, tot)
                _sweep_interval2(0, -1, n - 1, feats, order, rank, cut_ok, leafpos, y, w, tot,
                                 m, 1e-9, np.zeros((16, 8)))
            else:
                _grid_feature(0, cuts, feats, order, posS, yS, wS, y, w, tot, K)
                _sweep_interval(0, -1, n - 1, feats, order, rank, cut_ok, leafpos, y, w, tot,
                                K, m, 1e-9, np.zeros((16, 2 * K + 2 * K * (K - 1) + 2)))


# ---------------------------------------------------------------------------- driver
def _leaf_positions(X: np.ndarray, y: np.ndarray, order: np.ndarray, cut_ok: np.ndarray,
                    merge: bool) -> tuple[np.ndarray, np.ndarray]:
    """Per feature, every row's leaf position in that feature's segment tree: its distinct
    value's rank, or (``merge``) its block's rank, a block being a run of consecutive
    distinct values whose rows all have one class."""
    p, n = order.shape
    leafpos = np.empty((p, n), dtype=np.int64)
    n_pos = np.empty(p, dtype=np.int64)
    for g in range(p):
        og = order[g]
        new_value = np.concatenate(([True], cut_ok[g]))
        gid = np.cumsum(new_value) - 1
        if merge:
            starts = np.flatnonzero(new_value)
            ys = y[og]
            cmin = np.minimum.reduceat(ys, starts)
            cmax = np.maximum.reduceat(ys, starts)
            pure = cmin == cmax
            same = np.zeros(starts.shape[0], dtype=bool)
            same[1:] = pure[1:] & pure[:-1] & (cmin[1:] == cmin[:-1])
            bid = np.cumsum(~same) - 1
            pos = bid[gid]
        else:
            pos = gid
        leafpos[g, og] = pos
        n_pos[g] = int(pos[-1]) + 1
    return leafpos, n_pos


def _check(X, y, sample_weight, depth, n_classes, admissible, min_leaf):
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2 or X.shape[0] == 0 or X.shape[1] == 0:
        raise ValueError(f"X must be a non-empty 2-D array of rows x features, got shape {X.shape}")
    if not np.all(np.isfinite(X)):
        raise ValueError("X holds NaN or infinite values; impute or drop them before the "
                         "optimal axis tree")
    n, p = X.shape
    y = np.asarray(y)
    if y.shape != (n,) or not np.issubdtype(y.dtype, np.integer) and not np.all(y == np.round(y)):
        raise ValueError("y must hold one class index (0 .. K-1) per row of X")
    y = y.astype(np.int64)
    if y.min() < 0:
        raise ValueError("y must hold class indices 0 .. K-1; found a negative one")
    K = int(y.max()) + 1 if n_classes is None else int(n_classes)
    K = max(K, 2)
    if y.max() >= K:
        raise ValueError(f"y holds class index {int(y.max())} but n_classes is {K}")
    w = np.ones(n) if sample_weight is None else np.asarray(sample_weight, dtype=np.float64)
    if w.shape != (n,) or not np.all(np.isfinite(w)) or np.any(w < 0):
        raise ValueError("sample_weight must hold one finite, non-negative weight per row")
    if not w.sum() > 0:
        raise ValueError("sample_weight sums to zero: there is nothing to classify")
    if depth not in (1, 2):
        raise ValueError(f"depth must be 1 or 2 for the optimal axis tree, got {depth}")
    if admissible is None:
        adm = np.ones((depth, p), dtype=bool)
    else:
        adm = np.asarray(admissible, dtype=bool)
        if adm.shape != (depth, p):
            raise ValueError(f"admissible must be a ({depth}, {p}) mask (depth x features), "
                             f"got shape {adm.shape}")
    min_leaf = int(min_leaf)
    if min_leaf < 1:
        raise ValueError(f"min_leaf must be at least 1, got {min_leaf}")
    return np.ascontiguousarray(X), y, np.ascontiguousarray(w), K, adm, min_leaf


def _leaf_cost(y, w, rows, K):
    cw = np.bincount(y[rows], weights=w[rows], minlength=K)
    return float(cw.sum() - cw.max())


def _sorted_by_feature(order: np.ndarray, leafpos: np.ndarray, y: np.ndarray, w: np.ndarray):
    """Per feature, its sorted rows' leaf positions, classes and weights (contiguous)."""
    posS = np.ascontiguousarray(np.take_along_axis(leafpos, order, axis=1))
    return posS, np.ascontiguousarray(y[order]), np.ascontiguousarray(w[order])


def _search_depth2(X, y, w, K, roots, child, min_leaf, tol, deadline, order, cut_ok, bound,
                   counters, q, workers):
    """Best depth-2 tree whose root splits: (cost, root feature, cut position) or None, and
    whether the search completed. ``bound``: the cost of a tree already in hand."""
    n, p = X.shape
    tot = np.bincount(y, weights=w, minlength=K).astype(np.float64)
    rank = np.empty((p, n), dtype=np.int64)
    rank[np.arange(p)[:, None], order] = np.arange(n)[None, :]
    blocks, n_blocks = _leaf_positions(X, y, order, cut_ok, merge=True)
    # the sweeps' leaf positions: blocks, or distinct values when parts must keep min_leaf
    # rows (the admissible interval of prefixes can end inside a block)
    leafpos, n_pos = (blocks, n_blocks) if min_leaf == 1 else \
        _leaf_positions(X, y, order, cut_ok, merge=False)
    posS, yS, wS = _sorted_by_feature(order, blocks, y, w)
    size = 1 << int(np.ceil(np.log2(max(2, int(n_pos[child].max())))))
    width = 8 if K == 2 else 2 * K + 2 * K * (K - 1) + 2
    counters["segment_tree_leaves_mean"] = float(n_pos[child].mean())
    idx = np.arange(n - 1)
    ok = cut_ok[roots] & ((idx + 1 >= min_leaf) & (n - idx - 1 >= min_leaf))[None, :]
    counters["root_cuts"] = int(ok.sum())

    # 1. grid: q cuts per root feature evenly spaced over its admissible cuts, and its best
    #    depth-1 cut. Each gives a bound for the cuts around it and, with one row per leaf
    #    at least, the exact cost of its tree (the first incumbents)
    d1_cost, d1_lo, _ = _best_splits(roots, order, X, y, w, np.ones(n, dtype=bool), K,
                                     min_leaf)
    grid = []
    for j, f in enumerate(roots):
        vp = np.flatnonzero(ok[j])
        pts = set()
        if vp.size:
            pick = np.unique(np.round(np.linspace(0, vp.size - 1, q + 2)[1:-1]).astype(np.int64))
            pts = set(vp[pick].tolist())
            if np.isfinite(d1_cost[j]):
                pos = int(np.searchsorted(X[order[f], f], d1_lo[j], side="right")) - 1
                if 0 <= pos < n - 1 and ok[j, pos]:
                    pts.add(pos)
        grid.append(np.array(sorted(pts), dtype=np.int64))

    def grid_task(j):
        f, cuts = int(roots[j]), grid[j]
        if cuts.size == 0:
            return np.zeros((4, 0))
        if K == 2:
            return np.array(_grid_feature2(f, cuts, child, order, posS, yS, wS, y, w, tot))
        return np.array(_grid_feature(f, cuts, child, order, posS, yS, wS, y, w, tot, K))

    scratch = threading.local()

    def sweep_task(f, a, b):
        T = getattr(scratch, "T", None)
        if T is None:
            T = scratch.T = np.zeros((2 * size, width))
        if K == 2:
            return _sweep_interval2(f, a, b, child, order, rank, cut_ok, leafpos, y, w, tot,
                                    min_leaf, tol, T)
        return _sweep_interval(f, a, b, child, order, rank, cut_ok, leafpos, y, w, tot, K,
                               min_leaf, tol, T)

    best = None  # (cost, f, i): the least cost, then the lowest feature and cut (deterministic)
    complete = True

    def upper():
        return min(bound, np.inf if best is None else best[0])

    t_grid = time.perf_counter()
    with ThreadPoolExecutor(max_workers=workers) as pool:
        evals = list(pool.map(grid_task, range(roots.size)))
        counters["seconds_grid"] = time.perf_counter() - t_grid
        counters["grid_cuts"] = int(sum(g.size for g in grid))
        if min_leaf == 1:  # the grid cuts' trees, exactly (a child splits if that beats a leaf)
            for j, f in enumerate(roots):
                lbL, lbR, leafL, leafR = evals[j]
                cost = (np.where(lbL < leafL - tol, lbL, leafL)
                        + np.where(lbR < leafR - tol, lbR, leafR))
                for k, c in enumerate(grid[j]):
                    cand = (float(cost[k]), int(f), int(c))
                    if best is None or cand < best:
                        best = cand

        # 2. intervals between grid cuts, bounded below: every cut inside has a left child
        #    that holds the left end's left child and a right child that holds the right
        #    end's right child, and a child's least cost never falls when rows are added.
        #    With min_leaf > 1 the grid cuts were not evaluated: each interval takes its
        #    right end (the bound holds there too).
        take_end = min_leaf > 1
        intervals = []
        for j, f in enumerate(roots):
            cnt = np.concatenate(([0], np.cumsum(ok[j]), [ok[j].sum()]))
            ends = [-1] + grid[j].tolist() + [n - 1]
            run = []  # consecutive intervals of this feature, to be swept together
            for k in range(len(ends) - 1):
                a, b = ends[k], ends[k + 1]
                stop = b + 1 if take_end and b < n - 1 else b  # cuts a < i < stop
                if cnt[stop] - cnt[a + 1] <= 0:
                    continue
                lb = float((evals[j][0, k - 1] if a >= 0 else 0.0)
                           + (evals[j][1, k] if b < n - 1 else 0.0))
                # with min_leaf == 1 the grid already gave an incumbent: neighbouring
                # intervals that both pass it become one sweep (one segment-tree build per
                # child feature instead of two). Decided here, before any sweep, so that the
                # answer never depends on the order in which the threads finish.
                if (not take_end and run and run[-1][3] == a and lb <= upper() + tol
                        and run[-1][0] <= upper() + tol):
                    lb0, _, a0, _, _ = run.pop()
                    lb, a = min(lb0, lb), a0
                run.append((lb, int(f), a, b, int(cnt[stop] - cnt[a + 1])))
            intervals += run
        intervals.sort()
        counters["intervals"] = len(intervals)

        # 3. sweep the intervals whose bound does not exceed the incumbent, most promising
        #    first; the incumbent falls as results come in and is checked before each start
        pending = deque(intervals)
        running = {}
        swept = swept_cuts = 0
        while pending or running:
            while pending and len(running) < workers:
                lb, f, a, b, _ = pending[0]
                if lb > upper() + tol:  # sorted: every later one is discarded too
                    break
                if deadline is not None and time.perf_counter() > deadline:
                    complete = False
                    break
                pending.popleft()
                stop = b + 1 if take_end and b < n - 1 else b
                running[pool.submit(sweep_task, f, a, stop)] = f
            if not running:
                break
            done, _ = wait(running, return_when=FIRST_COMPLETED)
            for fut in done:
                f = running.pop(fut)
                c, i, nv = fut.result()
                swept += 1
                swept_cuts += int(nv)
                if i >= 0:
                    cand = (float(c), int(f), int(i))
                    if best is None or cand < best:
                        best = cand
    # every root cut not evaluated lies in an interval left unswept: their least bound bounds
    # every such tree (and exceeds the incumbent when the search completed)
    rest = list(pending)
    counters["seconds_sweep"] = time.perf_counter() - t_grid - counters["seconds_grid"]
    counters["sweeps"] = swept
    counters["cuts_swept"] = swept_cuts
    counters["cuts_bounded"] = int(sum(iv[4] for iv in rest))
    counters["root_features"] = int(roots.size)
    counters["child_features"] = int(child.size)
    return best, complete, min((iv[0] for iv in rest), default=np.inf)


def optimal_axis_tree(X, y, sample_weight=None, depth: int = 2, n_classes: int | None = None,
                      admissible=None, min_leaf: int = 1, deadline: float | None = None,
                      grid_points: int = _GRID_POINTS) -> AxisTreeResult:
    """The axis-aligned tree of ``depth`` (1 or 2) with the least weighted misclassification.

    Parameters
    ----------
    X : (n, p) float array without NaN or infinity.
    y : class index per row (0 .. K-1).
    sample_weight : non-negative weight per row (default 1 each).
    n_classes : K (default ``max(y) + 1``, at least 2).
    admissible : (depth, p) bool mask of the features a node at each depth may split on
        (row 0: the root; row 1: its children). Default: every feature everywhere.
    min_leaf : every leaf that holds rows keeps at least this many rows.
    deadline : ``time.perf_counter()`` value after which no further sweep starts; the
        answer is then the best tree so far with ``optimal=False``.
    grid_points : root cuts per root feature evaluated before the sweeps (speed only).
    """
    t0 = time.perf_counter()
    X, y, w, K, adm, min_leaf = _check(X, y, sample_weight, depth, n_classes, admissible,
                                       min_leaf)
    n, p = X.shape
    total = float(w.sum())
    tol = _REL_TOL * total
    order = np.argsort(np.ascontiguousarray(X.T), axis=1, kind="stable")
    xs = np.take_along_axis(X.T, order, axis=1)
    cut_ok = np.ascontiguousarray(xs[:, 1:] > xs[:, :-1])
    everyone = np.ones(n, dtype=bool)
    counters = {"n_rows": n, "n_features": p, "n_classes": K}

    def single_split(feats_mask, rows_mask):
        feats = np.flatnonzero(feats_mask).astype(np.int64)
        if feats.size == 0:
            return np.inf, -1, 0.0, 0.0
        cost, lo, hi = _best_splits(feats, order, X, y, w, rows_mask, K, min_leaf)
        j = int(np.argmin(cost))
        return float(cost[j]), int(feats[j]), float(lo[j]), float(hi[j])

    # candidates in order of preference; a later one must beat the incumbent by more than tol
    best_cost = _leaf_cost(y, w, np.arange(n), K)
    best = ("leaf", None)
    optimal, unsettled = True, np.inf
    if depth == 1:
        c, f, lo, hi = single_split(adm[0], everyone)
        counters["root_features"] = int(adm[0].sum())
        if c < best_cost - tol:
            best_cost, best = c, ("root", (f, lo, hi))
    else:
        roots = np.flatnonzero(adm[0]).astype(np.int64)
        child = np.flatnonzero(adm[1]).astype(np.int64)
        # a root that does not split above a right child that does: preferred last (a root
        # split of equal cost reads better) but its cost bounds the search from the start
        ro_cost, ro = np.inf, None
        if child.size:
            ro_cost, f, lo, hi = single_split(adm[1], everyone)
            ro = (f, lo, hi)
        if roots.size and child.size and n > 1:
            found, optimal, unsettled = _search_depth2(
                X, y, w, K, roots, child, min_leaf, tol, deadline, order, cut_ok,
                min(best_cost, ro_cost), counters, max(1, int(grid_points)), _workers())
            if found is not None and found[0] < best_cost - tol:
                best_cost, best = found[0], ("root2", found[1:])
        elif roots.size:  # children may not split: a depth-1 tree over the root features
            c, f, lo, hi = single_split(adm[0], everyone)
            counters["root_features"] = int(roots.size)
            if c < best_cost - tol:
                best_cost, best = c, ("root", (f, lo, hi))
        if ro is not None and ro_cost < best_cost - tol:
            best_cost, best = ro_cost, ("right_only", ro)

    # ---- read the tree back: the children of the best root cut are found again directly
    nb = n_branch_nodes(depth)
    features = np.full(nb, -1, dtype=np.int64)
    gaps = np.full((nb, 2), np.nan)
    kind, data = best
    if kind == "root":
        f, lo, hi = data
        features[0], gaps[0] = f, (lo, hi)
    elif kind == "right_only":
        f, lo, hi = data
        features[2], gaps[2] = f, (lo, hi)
    elif kind == "root2":
        f, i = data
        of = order[f]
        features[0], gaps[0] = f, (X[of[i], f], X[of[i + 1], f])
        rebuilt = 0.0
        for node, rows in ((1, of[:i + 1]), (2, of[i + 1:])):
            mask = np.zeros(n, dtype=bool)
            mask[rows] = True
            leaf = _leaf_cost(y, w, rows, K)
            c, g, lo, hi = single_split(adm[1], mask)
            if c < leaf - tol:
                features[node], gaps[node] = g, (lo, hi)
                rebuilt += c
            else:
                rebuilt += leaf
        if abs(rebuilt - best_cost) > 4 * tol:  # the search and the direct read must agree
            raise RuntimeError(f"optimal axis tree: the tree read back costs {rebuilt}, the "
                               f"search found {best_cost}")
    thresholds = np.where(features >= 0, 0.5 * gaps[:, 0] + 0.5 * gaps[:, 1], np.nan)
    for t in np.flatnonzero(features >= 0):  # keep left_max <= threshold < right_min
        if not thresholds[t] < gaps[t, 1]:
            thresholds[t] = gaps[t, 0]
    result = AxisTreeResult(
        depth=depth, features=features, thresholds=thresholds, left_max=gaps[:, 0].copy(),
        right_min=gaps[:, 1].copy(), leaf_class=np.zeros(n_leaves(depth), dtype=np.int64),
        leaf_weight=np.zeros((n_leaves(depth), K)), n_classes=K, n_features=p,
        objective=np.nan, lower_bound=np.nan, weighted_error=np.nan, total_weight=total,
        optimal=optimal, seconds=0.0, counters=counters)
    leaf = result.route(X)
    lw = np.zeros((n_leaves(depth), K))
    np.add.at(lw, (leaf, y), w)
    result.leaf_weight = lw
    result.leaf_class = np.argmax(fill_empty_leaves(lw, depth), axis=1).astype(np.int64)
    err = float(w[result.leaf_class[leaf] != y].sum())
    if abs(err - best_cost) > 4 * tol:
        raise RuntimeError(f"optimal axis tree: the tree scores {err}, the search found "
                           f"{best_cost}")
    result.weighted_error = err
    result.objective = err / total
    result.lower_bound = min(err, float(unsettled)) / total if not optimal else err / total
    result.seconds = time.perf_counter() - t0
    return result


class AxisTree:
    """The proven-optimal axis-aligned tree, with the labels it was fit on.

    ``predict(X)`` gives labels; ``objective_`` is the weighted misclassification share
    (weights normalised to sum 1); ``optimal_`` says the search settled every root cut,
    ``lower_bound_`` holds for every tree of the depth in any case; ``result_`` is the
    search's :class:`AxisTreeResult`. With a ``category_order`` (a surrogate's categorical
    features), ``X`` holds category codes, encoded before routing like the surrogate's."""

    def __init__(self, result: AxisTreeResult, classes: np.ndarray, category_order=None):
        self.result_ = result
        self.classes_ = np.asarray(classes)
        self.category_order = category_order
        self.objective_ = float(result.objective)
        self.optimal_ = bool(result.optimal)
        self.lower_bound_ = float(result.lower_bound)
        self.depth = int(result.depth)

    def _encoded(self, X) -> np.ndarray:
        X = np.asarray(X, dtype=np.float64)
        return X if self.category_order is None else self.category_order.encode(X)

    def apply(self, X) -> np.ndarray:
        return self.result_.route(self._encoded(X))

    def predict(self, X) -> np.ndarray:
        return self.classes_[self.result_.predict(self._encoded(X))]


def fit_axis_tree(X, y, depth: int = 2, sample_weight=None, *, admissible=None,
                  min_leaf: int = 1, deadline: float | None = None) -> AxisTree:
    """:func:`optimal_axis_tree` on any labels (``gw.optimal_axis_tree``)."""
    classes, idx = np.unique(np.asarray(y), return_inverse=True)
    res = optimal_axis_tree(np.asarray(X, dtype=np.float64), idx.reshape(-1), sample_weight,
                            depth=depth, n_classes=max(len(classes), 2), admissible=admissible,
                            min_leaf=min_leaf, deadline=deadline)
    return AxisTree(res, classes)
