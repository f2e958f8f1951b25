"""The best line on two features for the points at one node, found exactly.

Each point ``i`` costs ``delta[i]`` more on the left side than on the right (its weight if
it disagrees with the left side's class and agrees with the right side's, and so on), so a
split's cost is ``sum(delta[left]) + constant``. Over every line ``u . p < b`` in the plane
of two features, the least cost is found by a rotating sweep: the order of the points by
``u . p`` changes only at the angles where ``u`` is perpendicular to the difference of two
points, so the points are ordered once, and at each such angle (in increasing order) the
points that tie there are re-ordered; a segment tree over the positions keeps the least and
the largest prefix sum of ``delta``, so after each angle the best cut of the current order
is read from its root. A prefix is a left side with ``u``; a suffix is a left side with
``-u``, whose cost is the total less the prefix sum. Every partition of the points by a line
is a prefix or suffix of the order in some open interval between two such angles, so the
minimum is exact. There are ``m (m - 1) / 2`` angles for ``m`` distinct points, each costing
``O(log m)``: ``O(m^2 log m)`` in all (the classic duality of lines and point orders; see
Edelsbrunner, "Algorithms in Combinatorial Geometry", Springer 1987, cited from memory).

The answer is re-scored directly (projection, comparison, sum) before it is returned, so a
rounding slip in the angles can cost optimality, never correctness of the stated cost.
Identical points are merged first (a line cannot separate them). Both sides are kept
non-empty; a minimum leaf size is not enforced here (the caller scores the line it proposes
with its own rules).
"""

from __future__ import annotations

import numba
import numpy as np

_INF = np.inf


@numba.njit(cache=True, nogil=True)
def _combine(tree_sum, tree_min, tree_arg_min, tree_max, tree_arg_max, node):
    left, right = 2 * node, 2 * node + 1
    s = tree_sum[left]
    tree_sum[node] = s + tree_sum[right]
    if tree_min[left] <= s + tree_min[right]:
        tree_min[node] = tree_min[left]
        tree_arg_min[node] = tree_arg_min[left]
    else:
        tree_min[node] = s + tree_min[right]
        tree_arg_min[node] = tree_arg_min[right]
    if tree_max[left] >= s + tree_max[right]:
        tree_max[node] = tree_max[left]
        tree_arg_max[node] = tree_arg_max[left]
    else:
        tree_max[node] = s + tree_max[right]
        tree_arg_max[node] = tree_arg_max[right]


@numba.njit(cache=True, nogil=True)
def _set(tree_sum, tree_min, tree_arg_min, tree_max, tree_arg_max, size, pos, value, usable):
    node = size + pos
    tree_sum[node] = value
    if usable:
        tree_min[node] = value
        tree_max[node] = value
    else:  # the prefix ending here is the whole set: not a split
        tree_min[node] = _INF
        tree_max[node] = -_INF
    tree_arg_min[node] = pos
    tree_arg_max[node] = pos
    node //= 2
    while node >= 1:
        _combine(tree_sum, tree_min, tree_arg_min, tree_max, tree_arg_max, node)
        node //= 2


@numba.njit(cache=True, nogil=True)
def _sweep(px, py, delta, theta, first, last):
    """The best prefix/suffix over every order; returns (value, angle, position, suffix)."""
    m = px.shape[0]
    size = 1
    while size < m:
        size *= 2
    tree_sum = np.zeros(2 * size)
    tree_min = np.full(2 * size, _INF)
    tree_max = np.full(2 * size, -_INF)
    tree_arg_min = np.zeros(2 * size, dtype=np.int64)
    tree_arg_max = np.zeros(2 * size, dtype=np.int64)
    total = delta.sum()
    n_ev = theta.shape[0]
    # start just before the first angle (angles are taken modulo pi)
    start = 0.5 * (theta[n_ev - 1] - np.pi + theta[0]) if n_ev else 0.0
    proj = px * np.cos(start) + py * np.sin(start)
    order = np.argsort(proj, kind="mergesort")
    pos = np.empty(m, dtype=np.int64)
    for r in range(m):
        pos[order[r]] = r
        _set(tree_sum, tree_min, tree_arg_min, tree_max, tree_arg_max, size, r,
             delta[order[r]], r < m - 1)
    best_v = tree_min[1]
    best_angle = start
    best_pos = tree_arg_min[1]
    best_suffix = False
    if total - tree_max[1] < best_v:
        best_v = total - tree_max[1]
        best_pos = tree_arg_max[1]
        best_suffix = True
    touched = np.empty(m, dtype=np.int64)
    mark = np.zeros(m, dtype=np.bool_)
    e = 0
    while e < n_ev:
        f = e
        angle = theta[e]
        while f < n_ev and theta[f] - angle <= 1e-12:
            f += 1
        nxt = theta[f] if f < n_ev else theta[0] + np.pi
        mid = 0.5 * (angle + nxt)
        c, s = np.cos(mid), np.sin(mid)
        # the positions of every point that ties with another at this angle
        k = 0
        for g in range(e, f):
            for q in (first[g], last[g]):
                if not mark[q]:
                    mark[q] = True
                    touched[k] = pos[q]
                    k += 1
        tp = np.sort(touched[:k])
        # re-order each run of consecutive positions by the projection just past the angle
        r0 = 0
        while r0 < k:
            r1 = r0
            while r1 + 1 < k and tp[r1 + 1] == tp[r1] + 1:
                r1 += 1
            lo, hi = tp[r0], tp[r1]
            seg = order[lo:hi + 1].copy()
            vals = np.empty(seg.shape[0])
            for t in range(seg.shape[0]):
                vals[t] = px[seg[t]] * c + py[seg[t]] * s
            srt = np.argsort(vals, kind="mergesort")
            for t in range(seg.shape[0]):
                point = seg[srt[t]]
                order[lo + t] = point
                pos[point] = lo + t
                mark[point] = False
                _set(tree_sum, tree_min, tree_arg_min, tree_max, tree_arg_max, size, lo + t,
                     delta[point], lo + t < m - 1)
            r0 = r1 + 1
        if tree_min[1] < best_v:
            best_v, best_angle, best_pos, best_suffix = tree_min[1], mid, tree_arg_min[1], False
        if total - tree_max[1] < best_v:
            best_v, best_angle, best_pos, best_suffix = (total - tree_max[1], mid,
                                                         tree_arg_max[1], True)
        e = f
    return best_v, best_angle, best_pos, best_suffix


def best_pair_line(P: np.ndarray, delta: np.ndarray) -> tuple[float, np.ndarray, float] | None:
    """The line ``u . p < b`` on the 2-column points ``P`` minimising ``sum(delta[left])``.

    Returns ``(cost, u, b)`` with ``u`` of unit 1-norm (as the program's budget), or None
    when fewer than two distinct points exist. ``cost`` is computed directly from the line.
    """
    P = np.asarray(P, dtype=np.float64)
    delta = np.asarray(delta, dtype=np.float64)
    uniq, inv = np.unique(P, axis=0, return_inverse=True)
    inv = inv.reshape(-1)
    m = uniq.shape[0]
    if m < 2:
        return None
    dsum = np.bincount(inv, weights=delta, minlength=m)
    i, j = np.triu_indices(m, 1)
    dx = uniq[j, 0] - uniq[i, 0]
    dy = uniq[j, 1] - uniq[i, 1]
    theta = np.mod(np.arctan2(dy, dx) + np.pi / 2, np.pi)
    # one direction can come out as 0 for one pair and as pi less a rounding for another
    theta[theta > np.pi - 1e-12] -= np.pi
    o = np.argsort(theta, kind="stable")
    v, angle, cut, suffix = _sweep(np.ascontiguousarray(uniq[:, 0]),
                                   np.ascontiguousarray(uniq[:, 1]), dsum,
                                   np.ascontiguousarray(theta[o]),
                                   np.ascontiguousarray(i[o]), np.ascontiguousarray(j[o]))
    u = np.array([np.cos(angle), np.sin(angle)])
    proj = np.sort(uniq @ u)
    b = 0.5 * (proj[cut] + proj[min(cut + 1, m - 1)])
    if suffix:
        u, b = -u, -b
    norm = np.abs(u).sum()
    u, b = u / norm, b / norm
    left = P @ u < b
    return float(delta[left].sum()), u, float(b)


def warm_up() -> None:
    """Compile (or load from numba's disk cache) the sweep on a tiny input."""
    best_pair_line(np.array([[0.0, 0.0], [1.0, 0.5], [0.3, 1.0]]), np.array([1.0, -1.0, 0.5]))
