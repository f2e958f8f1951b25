"""The compiled sweep: the best cut along each of many directions, one direction per core.

For the points at one node, a direction's projection is sorted once; walking the sorted
points, running sums give each leaf below the node its weight per class on both sides of
every cut, and a cut costs the weight outside the leaves' majority classes. A cut is valid
when the gap between its two neighbouring projections is at least ``min_gap``, when every
non-empty leaf keeps at least ``min_leaf`` rows, and when it does not split a must-link
group. Directions are independent, so they run in parallel (numba ``prange``); each one's
arithmetic is sequential and the same on any number of cores, so results never depend on
the cores used.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True, parallel=True)
def best_cuts(V, left_code, right_code, w, left_leaf, right_leaf, count, n_sub, K, min_gap,
              min_leaf, gid, n_groups):  # pragma: no cover - compiled
    """Cost and offset of the best valid cut per column of ``V`` (n points x m directions).

    ``left_code[i] = left_leaf[i] * K + y[i]`` (the code the point counts under when it goes
    left), the same on the right; ``gid[i]`` the must-link group of point i among groups
    with two or more points here, -1 for none. Invalid everywhere: cost inf.
    """
    n, m = V.shape
    codes = n_sub * K
    cost = np.full(m, np.inf)
    off = np.zeros(m)
    if n < 2:
        return cost, off
    totR = np.zeros(codes)
    totCR = np.zeros(n_sub)
    for i in range(n):
        totR[right_code[i]] += w[i]
        totCR[right_leaf[i]] += count[i]
    need_count = min_leaf > 1
    for d in numba.prange(m):
        v = V[:, d]
        order = np.argsort(v, kind="mergesort")
        PL = np.zeros(codes)
        PR = totR.copy()
        CL = np.zeros(n_sub)
        CR = totCR.copy()
        cut_ok = np.ones(n, dtype=np.bool_)
        if n_groups > 0:
            lo = np.full(n_groups, n)
            hi = np.full(n_groups, -1)
            for r in range(n):
                g = gid[order[r]]
                if g >= 0:
                    if r < lo[g]:
                        lo[g] = r
                    if r > hi[g]:
                        hi[g] = r
            split = np.zeros(n + 1, dtype=np.int64)
            for g in range(n_groups):
                if hi[g] > lo[g]:
                    split[lo[g]] += 1
                    split[hi[g]] -= 1
            run = 0
            for r in range(n):
                run += split[r]
                if run > 0:
                    cut_ok[r] = False
        best = np.inf
        best_r = 0
        for r in range(n - 1):
            i = order[r]
            PL[left_code[i]] += w[i]
            PR[right_code[i]] -= w[i]
            if need_count:
                CL[left_leaf[i]] += count[i]
                CR[right_leaf[i]] -= count[i]
            if v[order[r + 1]] - v[i] < min_gap or not cut_ok[r]:
                continue
            if need_count:
                bad = False
                for s in range(n_sub):
                    if (CL[s] > 1e-9 and CL[s] < min_leaf - 1e-9) or \
                            (CR[s] > 1e-9 and CR[s] < min_leaf - 1e-9):
                        bad = True
                        break
                if bad:
                    continue
            c = 0.0
            for s in range(n_sub):
                tl = 0.0
                ml = PL[s * K]
                tr = 0.0
                mr = PR[s * K]
                for k in range(K):
                    a = PL[s * K + k]
                    b = PR[s * K + k]
                    tl += a
                    tr += b
                    if a > ml:
                        ml = a
                    if b > mr:
                        mr = b
                c += (tl - ml) + (tr - mr)
            if c < best:
                best = c
                best_r = r
        cost[d] = best
        rr = min(best_r + 1, n - 1)
        off[d] = 0.5 * (v[order[best_r]] + v[order[rr]])
    return cost, off


def warm_up() -> None:
    """Compile (or load from numba's cache) the sweep on a tiny input, so that the first
    surrogate fit does not spend its time limit compiling. Safe to call from any thread."""
    V = np.array([[0.0], [1.0], [2.0]])
    z = np.zeros(3, dtype=np.int64)
    best_cuts(V, z, z, np.ones(3), z, z, np.ones(3), 1, 1, 1e-9, 1.0, np.full(3, -1), 0)
