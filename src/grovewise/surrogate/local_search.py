"""Fast better starting points: top-down re-optimisation of one node's hyperplane at a time.

With every other node fixed, the best split of node t along a given direction is found
exactly by a sweep: sort the points reaching t by their projection, and for every cut count,
with prefix sums, the weight each leaf below t would get per class; the leaves then predict
their weighted-majority class, so the cost of a cut is the weight outside the majorities.
Directions tried at a node: the axis of every admissible feature, two-feature directions
at evenly spaced angles over the most useful features (when k >= 2), the node's current
direction, and coordinate moves from the best direction found (when k >= 3). A "solo"
feature (a categorical one, ``SearchSettings.solo``) is tried on its own axis only: no
two-feature direction or coordinate move mixes it with another feature. Nodes are
visited top-down, and passes repeat while the objective falls; the objective never rises,
since each node's current split is among the candidates.

This is coordinate descent on the tree, in the spirit of the node-by-node alternating
optimisation of oblique trees (Carreira-Perpinan & Tavallali, "Alternating optimization of
decision trees", NeurIPS 2018; cited from memory), with exact sweeps in place of their
per-node classifier.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from .program import MIN_MARGIN
from .pair_split import best_pair_line
from .sweep_kernel import best_cuts
from .tree import (ObliqueTree, n_branch_nodes, node_depth, objective, subtree_branch_nodes,
                   with_majority_classes)

# Projections held at once per sweep chunk: points x directions.
_CHUNK_CELLS = 2_000_000


@dataclass
class SearchSettings:
    """What the local search may use and how long it may take."""

    admissible: np.ndarray  # (depth, p) bool
    penalty: np.ndarray  # (depth, p)
    alpha: float = 0.0
    max_features: int | None = None
    min_leaf_size: int = 1
    pair_features: int = 10
    angles: int = 16
    # The exact two-feature line (``pair_split``) is searched on the pairs of this many of
    # the best single features, on at most ``exact_pair_rows`` of the node's points (a
    # seeded sample beyond); the line found is then scored on every point of the node.
    exact_pair_features: int = 8
    exact_pair_rows: int = 300
    seed: int = 0
    max_passes: int = 6
    min_gap: float = 2 * MIN_MARGIN
    # Features that may only split alone (bool per feature, None: none): a categorical
    # feature, whose splits must stay sets of categories. No two-feature direction or
    # coordinate move mixes one of them with another feature.
    solo: np.ndarray | None = None

    def is_solo(self, feats: np.ndarray) -> np.ndarray:
        """Per feature index in ``feats``: may it only split alone?"""
        if self.solo is None:
            return np.zeros(np.asarray(feats).shape, dtype=bool)
        return np.asarray(self.solo, dtype=bool)[feats]


def improve(tree: ObliqueTree, Xs: np.ndarray, y: np.ndarray, w: np.ndarray, n_classes: int,
            settings: SearchSettings, count: np.ndarray | None = None,
            group: np.ndarray | None = None, deadline: float | None = None,
            should_stop=None) -> tuple[ObliqueTree, float]:
    """Coordinate descent over the nodes of ``tree``; returns (tree, objective).

    ``w`` are normalized fidelity weights (sum 1) and ``count`` the rows each point stands
    for (for the minimum leaf size; 1 each by default). ``group`` (one id per point) marks
    points that must share a leaf: no cut may separate a group, and a start that separates
    some is repaired first (fewer separated groups wins over a lower objective).
    """
    count = np.ones(Xs.shape[0]) if count is None else count
    end = deadline if deadline is not None else np.inf  # None: passes alone bound the work
    best = with_majority_classes(tree, Xs, y, w, n_classes)
    score = objective(best, Xs, y, w, settings.alpha, settings.penalty)
    viol = separated_groups(best, Xs, group)
    for _ in range(settings.max_passes):
        improved = False
        for t in range(n_branch_nodes(tree.depth)):
            if time.perf_counter() > end or (should_stop is not None and should_stop()):
                return best, score
            cand = _improve_node(best, t, Xs, y, w, count, n_classes, settings, group=group,
                                 deadline=deadline, should_stop=should_stop)
            if cand is None:
                continue
            cand, cs, cv = _scored(cand, Xs, y, w, n_classes, settings, group)
            if cv < viol or (cv == viol and cs < score - 1e-12):
                best, score, viol, improved = cand, cs, cv, True
        if not improved:
            break
    return best, score


def separated_groups(tree: ObliqueTree, Xs: np.ndarray, group: np.ndarray | None) -> int:
    """Number of groups whose points the tree sends to more than one leaf."""
    if group is None or group.size == 0:
        return 0
    leaf = tree.route_scaled(Xs)
    pairs = np.unique(np.stack([group, leaf], axis=1), axis=0)
    per_group = np.bincount(pairs[:, 0])
    return int(np.count_nonzero(per_group > 1))


def refit_offsets(tree: ObliqueTree, Xs: np.ndarray, y: np.ndarray, w: np.ndarray,
                  n_classes: int, settings: SearchSettings, count: np.ndarray | None = None,
                  group: np.ndarray | None = None) -> tuple[ObliqueTree, float]:
    """Polish: re-fit each node's offset along its own direction on (Xs, y, w), top-down."""
    count = np.ones(Xs.shape[0]) if count is None else count
    best = with_majority_classes(tree, Xs, y, w, n_classes)
    score = objective(best, Xs, y, w, settings.alpha, settings.penalty)
    viol = separated_groups(best, Xs, group)
    for t in range(n_branch_nodes(tree.depth)):
        if not best.splits[t]:
            continue
        cand = _improve_node(best, t, Xs, y, w, count, n_classes, settings, only_current=True,
                             group=group)
        if cand is None:
            continue
        cand, cs, cv = _scored(cand, Xs, y, w, n_classes, settings, group)
        if cv < viol or (cv == viol and cs < score - 1e-12):
            best, score, viol = cand, cs, cv
    return best, score


# ---------------------------------------------------------------------------- one node
def _scored(cand: ObliqueTree, Xs, y, w, n_classes: int, settings, group):
    """A candidate with its leaves' majority classes, its objective and its broken groups."""
    cand = with_majority_classes(cand, Xs, y, w, n_classes)
    return (cand, objective(cand, Xs, y, w, settings.alpha, settings.penalty),
            separated_groups(cand, Xs, group))


def _reach(tree: ObliqueTree, Xs: np.ndarray, t: int) -> np.ndarray:
    """Mask of the points that reach node t."""
    proj = Xs @ tree.coef.T
    node = np.zeros(Xs.shape[0], dtype=np.int64)
    rows = np.arange(Xs.shape[0])
    for _ in range(node_depth(t)):
        left = proj[rows, node] < tree.offset[node]
        node = np.where(left, 2 * node + 1, 2 * node + 2)
    return node == t


def _local_leaf(tree: ObliqueTree, Xs: np.ndarray, start: int) -> tuple[np.ndarray, int]:
    """Leaf (numbered within the subtree of heap node ``start``) each point reaches from there."""
    nb = n_branch_nodes(tree.depth)
    node = np.full(Xs.shape[0], start, dtype=np.int64)
    if start >= nb:
        return np.zeros(Xs.shape[0], dtype=np.int64), 1
    proj = Xs @ tree.coef.T
    rows = np.arange(Xs.shape[0])
    levels = tree.depth - node_depth(start)
    for _ in range(levels):
        left = proj[rows, node] < tree.offset[node]
        node = np.where(left, 2 * node + 1, 2 * node + 2)
    first = start
    for _ in range(levels):
        first = 2 * first + 1
    return node - first, 2 ** levels


def _improve_node(tree: ObliqueTree, t: int, Xs: np.ndarray, y: np.ndarray, w: np.ndarray,
                  count: np.ndarray, K: int, st: SearchSettings,
                  only_current: bool = False, group: np.ndarray | None = None,
                  deadline: float | None = None, should_stop=None) -> ObliqueTree | None:
    """The best split of node t with the rest of the tree fixed (None if nothing changes).

    Past ``deadline``, or once ``should_stop()`` says so, the directions not yet swept are
    skipped (the node's current direction always is swept, so the result is never worse
    than the current split)."""
    here = _reach(tree, Xs, t)
    if not here.any():
        return None
    Xt, yt, wt, ct = Xs[here], y[here], w[here], count[here]
    d = node_depth(t)
    feats = np.flatnonzero(st.admissible[d] & ~tree.scaling.constant)
    left_leaf, n_sub = _local_leaf(tree, Xt, 2 * t + 1)
    right_leaf, _ = _local_leaf(tree, Xt, 2 * t + 2)
    sweep = _Sweep(Xt, yt, wt, ct, left_leaf, right_leaf, n_sub, K, st,
                   None if group is None else group[here], deadline=deadline,
                   should_stop=should_stop)
    pen_row = st.alpha * st.penalty[d]
    cands: list[np.ndarray] = []
    if tree.splits[t]:
        cands.append(tree.coef[t].copy())
    if not only_current and feats.size:
        cands.extend(_axis(feats, Xs.shape[1]))
    if not cands:
        return None
    A = _unit(np.array(cands))
    cost, offs = sweep.run(A)
    cost = cost + (A != 0) @ pen_row
    if not only_current and feats.size and (st.max_features is None or st.max_features >= 2):
        axis_cost = cost[-feats.size:]
        mixable = ~st.is_solo(feats)  # a solo feature never joins a pair
        top = feats[mixable][np.argsort(axis_cost[mixable], kind="stable")[: st.pair_features]]
        P = _pairs(top, Xs.shape[1], st.angles)
        exact = _exact_pair_lines(tree, t, Xt, yt, wt, left_leaf, right_leaf, n_sub, K,
                                  top[: st.exact_pair_features], st)
        P = _unit(np.vstack([P, exact]))
        if P.size:
            pc, po = sweep.run(P)
            A, cost = np.vstack([A, P]), np.concatenate([cost, pc + (P != 0) @ pen_row])
            offs = np.concatenate([offs, po])
    if not only_current and feats.size and (st.max_features is None or st.max_features >= 3):
        A, cost, offs = _coordinate_moves(A, cost, offs, feats, sweep, pen_row, st)
    i = int(np.argmin(cost))
    best_cost = cost[i]
    # not splitting here: every point goes right, the left subtree is unreachable
    none_cost = sweep.all_right_cost()
    new = tree.copy()
    if none_cost <= best_cost + 1e-12 and t > 0:
        new.coef[t] = 0.0
        new.offset[t] = 0.0
        _clear_subtree(new, 2 * t + 1)
    elif np.isfinite(best_cost):
        new.coef[t] = A[i]
        new.offset[t] = offs[i]
    else:
        return None
    return new


def _clear_subtree(tree: ObliqueTree, node: int) -> None:
    if node < n_branch_nodes(tree.depth):
        below = subtree_branch_nodes(node, tree.depth)
        tree.coef[below] = 0.0
        tree.offset[below] = 0.0


def _unit(A: np.ndarray) -> np.ndarray:
    """Rows scaled to ``sum |a| = 1`` (the program's budget), so gaps compare across rows."""
    if A.size == 0:
        return A
    norm = np.abs(A).sum(axis=1, keepdims=True)
    return A / np.where(norm > 0, norm, 1.0)


def _axis(feats: np.ndarray, p: int) -> list[np.ndarray]:
    out = []
    for j in feats:
        e = np.zeros(p)
        e[j] = 1.0
        out.append(e)
    return out


def _pairs(feats: np.ndarray, p: int, angles: int) -> np.ndarray:
    """Two-feature directions (cos, sin) at ``angles`` evenly spaced angles in (0, pi)."""
    th = np.pi * np.arange(1, angles) / angles
    th = th[np.abs(th - np.pi / 2) > 1e-9]
    rows = []
    for a in range(feats.size):
        for b in range(a + 1, feats.size):
            blk = np.zeros((th.size, p))
            blk[:, feats[a]] = np.cos(th)
            blk[:, feats[b]] = np.sin(th)
            rows.append(blk)
    return np.vstack(rows) if rows else np.zeros((0, p))


def _exact_pair_lines(tree: ObliqueTree, t: int, Xt, yt, wt, left_leaf, right_leaf, n_sub: int,
                      K: int, feats: np.ndarray, st: SearchSettings) -> np.ndarray:
    """For every pair of ``feats``, the best line on that pair for the points at node t.

    A point's cost on each side is fixed first: at a node above leaves, by each ordered pair
    of the (up to three) heaviest classes there as the two leaves' classes; higher up, by the
    classes the leaves it would reach now predict. The line is then exact for those costs
    (:func:`~grovewise.surrogate.pair_split.best_pair_line`)."""
    p = Xt.shape[1]
    if feats.size < 2 or Xt.shape[0] < 2:
        return np.zeros((0, p))
    if Xt.shape[0] > st.exact_pair_rows:
        rng = np.random.default_rng([st.seed, t])
        rows = np.sort(rng.choice(Xt.shape[0], st.exact_pair_rows, replace=False))
        Xt, yt, wt = Xt[rows], yt[rows], wt[rows]
        left_leaf, right_leaf = left_leaf[rows], right_leaf[rows]
    deltas = []
    if n_sub == 1:
        heavy = np.argsort(-np.bincount(yt, weights=wt, minlength=K), kind="stable")[:3]
        for a in heavy:
            for b in heavy:
                if a != b:
                    deltas.append(wt * ((yt != a).astype(float) - (yt != b)))
    else:
        first = t
        for _ in range(tree.depth - node_depth(t) - 1):
            first = 2 * first + 1
        left_first = 2 * first + 1 - n_branch_nodes(tree.depth)
        right_first = left_first + n_sub
        miss_left = yt != tree.leaf_class[left_first + left_leaf]
        miss_right = yt != tree.leaf_class[right_first + right_leaf]
        deltas.append(wt * (miss_left.astype(float) - miss_right))
    out = []
    for a in range(feats.size):
        for b in range(a + 1, feats.size):
            pts = Xt[:, [feats[a], feats[b]]]
            for delta in deltas:
                line = best_pair_line(pts, delta)
                if line is not None:
                    row = np.zeros(p)
                    row[[feats[a], feats[b]]] = line[1]
                    out.append(row)
    return np.array(out) if out else np.zeros((0, p))


def _coordinate_moves(A, cost, offs, feats, sweep, pen_row, st: SearchSettings, rounds: int = 3):
    """From the best direction, try adding +-step of one more feature (or changing one).

    Solo features take no part: the moves start from the best direction without one, and
    never add one."""
    steps = np.array([-0.5, -0.2, -0.05, 0.05, 0.2, 0.5])
    solo = None if st.solo is None else np.asarray(st.solo, dtype=bool)
    mixable = feats if solo is None else feats[~solo[feats]]
    for _ in range(rounds):
        base = cost if solo is None else np.where((A[:, solo] != 0).any(axis=1), np.inf, cost)
        i = int(np.argmin(base))
        if solo is not None and not np.isfinite(base[i]):
            break  # no direction without a solo feature to start from
        a = A[i]
        support = np.flatnonzero(a)
        allowed = mixable if (st.max_features is None or support.size < st.max_features) \
            else support
        moves = []
        for j in allowed:
            for s in steps:
                b = a.copy()
                b[j] += s
                if np.any(b != 0):
                    moves.append(b)
        if not moves:
            break
        M = _unit(np.array(moves))
        mc, mo = sweep.run(M)
        mc = mc + (M != 0) @ pen_row
        if mc.min() >= cost[i] - 1e-12:
            break
        A, cost, offs = np.vstack([A, M]), np.concatenate([cost, mc]), np.concatenate([offs, mo])
    return A, cost, offs


class _Sweep:
    """Exact best cut per direction for the points at one node (classes free in the leaves).

    The sweep itself is compiled (:mod:`.sweep_kernel`), one direction per core."""

    def __init__(self, X, y, w, count, left_leaf, right_leaf, n_sub, K, st: SearchSettings,
                 group: np.ndarray | None = None, deadline: float | None = None,
                 should_stop=None):
        self.X, self.n_sub, self.K, self.st = X, n_sub, K, st
        self.deadline, self.should_stop = deadline, should_stop
        n = X.shape[0]
        self.gid = np.full(n, -1, dtype=np.int64)
        self.n_groups = 0
        if group is not None:
            # only groups with two or more points here can be separated by a cut
            _, inv, cnt = np.unique(group, return_inverse=True, return_counts=True)
            multi = cnt[inv] > 1
            if multi.any():
                _, ids = np.unique(inv[multi], return_inverse=True)
                self.gid[multi] = ids
                self.n_groups = int(ids.max()) + 1
        self.left_leaf = np.ascontiguousarray(left_leaf, dtype=np.int64)
        self.right_leaf = np.ascontiguousarray(right_leaf, dtype=np.int64)
        self.left_code = self.left_leaf * K + y
        self.right_code = self.right_leaf * K + y
        self.w = np.ascontiguousarray(w, dtype=np.float64)
        self.count = np.ascontiguousarray(count, dtype=np.float64)

    def _out_of_time(self) -> bool:
        if self.deadline is not None and time.perf_counter() > self.deadline:
            return True
        return self.should_stop is not None and bool(self.should_stop())

    def all_right_cost(self) -> float:
        """Every point right: the cost of not splitting here (inf if a leaf is too small)."""
        tot = np.zeros(self.n_sub * self.K)
        np.add.at(tot, self.right_code, self.w)
        if self.st.min_leaf_size > 1:
            rows = np.bincount(self.right_leaf, weights=self.count, minlength=self.n_sub)
            if np.any((rows > 1e-9) & (rows < self.st.min_leaf_size - 1e-9)):
                return np.inf
        Q = tot.reshape(self.n_sub, self.K)
        return float((Q.sum(axis=1) - Q.max(axis=1)).sum())

    def run(self, A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Best cost and offset (midpoint of the cut) for each direction row of ``A``."""
        n = self.X.shape[0]
        m_all = A.shape[0]
        cost = np.full(m_all, np.inf)
        off = np.zeros(m_all)
        if n < 2 or m_all == 0:
            return cost, off
        # small chunks: the clock and the cancel are looked at between two of them
        per = max(16, min(64, _CHUNK_CELLS // max(1, n)))
        for s in range(0, m_all, per):
            if s and self._out_of_time():
                break  # directions left unswept keep cost inf
            V = np.ascontiguousarray(self.X @ A[s:s + per].T)  # (n, directions)
            c, o = best_cuts(V, self.left_code, self.right_code, self.w, self.left_leaf,
                             self.right_leaf, self.count, self.n_sub, self.K,
                             float(self.st.min_gap), float(self.st.min_leaf_size), self.gid,
                             self.n_groups)
            cost[s:s + per], off[s:s + per] = c, o
        return cost, off
