"""The surrogate program of SURROGATE_MILP.md, written in Pyomo.

The program finds a complete binary tree of fixed depth whose branch nodes test sparse
hyperplanes, agreeing with the ensemble's predictions on a weighted set of points. It builds
on the optimal-classification-tree MILP with hyperplane splits (Bertsimas & Dunn,
"Optimal classification trees", Machine Learning 106, 2017) and adds fidelity weights,
admissible features, an inverse-frequency sparsity penalty and proximity, and keeps a
categorical ("solo") feature out of every split that uses another feature.

Points are grouped: every point of a group shares one set of leaf variables ``z[g, l]``
(hard proximity: the group's points must end in one leaf), while each *distinct* point of a
group keeps its own routing rows. A point standing for several training rows carries their
weight (``class_weight``) and count (``count``, used by the minimum leaf size).

Two routing forms are offered (``routing``):

``"node"`` (default)
    One row per (point, branch node, side), with the z of that side's leaves summed. The
    prototype found this the only form that improved at n = 500; :mod:`tests.bench`
    measures it against the other.
``"leaf"``
    One row per (point, leaf, ancestor), as written in SURROGATE_MILP.md.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace

import numpy as np
import pyomo.environ as pyo
from pyomo.core.expr.numeric_expr import LinearExpression

from ..errors import SettingError
from .tree import (ObliqueTree, Scaling, leaf_ancestors, n_branch_nodes, n_leaves, node_depth,
                   side_leaves)

ROUTINGS = ("node", "leaf")
# HiGHS accepts a row as satisfied within mip_feasibility_tolerance (1e-6 by default); a
# margin below ten times that would let a point sit on both sides of a hyperplane.
MIN_MARGIN = 1e-5


@dataclass
class ProgramData:
    """Everything the program is built from.

    Attributes
    ----------
    Xs : ndarray (n, p)
        Distinct sample points, scaled to [0, 1].
    group : ndarray of int (n,)
        Leaf-variable group of each point (0 .. n_groups - 1).
    class_weight : ndarray (n_groups, n_classes)
        Fidelity weight per group and target class (the ensemble's predicted class); the
        weights of the whole sample sum to 1.
    count : ndarray (n_groups,)
        Training rows each group stands for (the minimum leaf size counts these).
    depth, n_classes : int
    admissible : ndarray of bool (depth, p)
        Features allowed at each depth.
    penalty : ndarray (depth, p)
        Sparsity cost of using feature j at depth d (``1 / max(f[d, j], eps)``).
    alpha : float
    max_features : int or None
        At most this many features per split (k).
    min_leaf_size : int
    soft_pairs : ndarray of int (m, 2)
        Pairs of groups that should share a leaf, each separated pair costing ``beta``.
    beta : float
    mu : float
        Routing margin: a left point satisfies ``a . x + mu <= b``.
    routing : str
        ``"node"`` or ``"leaf"``.
    solo : ndarray of bool (p,) or None
        Features that may only split alone (categorical features, whose splits must stay
        sets of categories): a node that uses one uses no other feature.
    """

    Xs: np.ndarray
    group: np.ndarray
    class_weight: np.ndarray
    count: np.ndarray
    depth: int
    n_classes: int
    admissible: np.ndarray
    penalty: np.ndarray
    alpha: float = 0.0
    max_features: int | None = None
    min_leaf_size: int = 1
    soft_pairs: np.ndarray = field(default_factory=lambda: np.zeros((0, 2), dtype=np.int64))
    beta: float = 0.0
    mu: float = MIN_MARGIN
    routing: str = "node"
    solo: np.ndarray | None = None
    # The relaxation that bounds every tree of the class (see ``build_program``): no margin,
    # ``|a|_1 = 1`` at every node that has admissible features; ``mu``, ``alpha``, soft pairs
    # and the minimum leaf size are then not used.
    for_bound: bool = False

    @property
    def n_groups(self) -> int:
        return int(self.class_weight.shape[0])

    def __post_init__(self) -> None:
        if self.routing not in ROUTINGS:
            raise SettingError(f"routing={self.routing!r} is not known; use one of {ROUTINGS}")


def data_margin(Xs: np.ndarray, admissible: np.ndarray | None = None) -> float:
    """The smallest non-zero gap between neighbouring values of any (admissible) feature.

    A split between two neighbouring values needs a margin no wider than their gap, so this
    is the widest margin that keeps every axis-aligned split of the data representable.
    """
    cols = np.arange(Xs.shape[1]) if admissible is None else np.flatnonzero(admissible.any(axis=0))
    best = np.inf
    for j in cols:
        v = np.unique(Xs[:, j])
        if v.size > 1:
            best = min(best, float(np.diff(v).min()))
    return best if np.isfinite(best) else 1.0


def start_margin(tree: ObliqueTree, Xs: np.ndarray) -> float:
    """Smallest gap, over split nodes, between the points a tree sends left and right.

    The program can represent the tree's routing of ``Xs`` only with a margin below this.
    """
    t = tree.normalized()
    proj = Xs @ t.coef.T
    node = np.zeros(Xs.shape[0], dtype=np.int64)
    best = np.inf
    rows = np.arange(Xs.shape[0])
    for _ in range(t.depth):
        v = proj[rows, node]
        left = v < t.offset[node]
        for m in np.unique(node):
            if not t.splits[m]:
                continue
            here = node == m
            lv, rv = v[here & left], v[here & ~left]
            if lv.size and rv.size:
                best = min(best, float(rv.min() - lv.max()))
        node = np.where(left, 2 * node + 1, 2 * node + 2)
    return best


def choose_margin(Xs: np.ndarray, admissible: np.ndarray, starts: list[ObliqueTree]) -> float:
    """mu: the data's smallest gap, narrowed so every start stays representable, floored."""
    mu = data_margin(Xs, admissible)
    for tree in starts:
        mu = min(mu, start_margin(tree, Xs))
    return float(max(mu, MIN_MARGIN))


# ---------------------------------------------------------------------------- model
@dataclass(eq=False)
class Program:
    """A built Pyomo model of the surrogate program with handles on its variables."""

    data: ProgramData
    model: pyo.ConcreteModel
    pairs: list[tuple[int, int]]  # admissible (node, feature) pairs, the s/a variables' index
    error_index: list[tuple[int, int]]  # (group, class) with positive weight, e's index
    build_time: float

    # ------------------------------------------------------------------ sizes
    def size(self) -> dict:
        m = self.model
        n_vars = sum(1 for _ in m.component_data_objects(pyo.Var, descend_into=True))
        n_bin = sum(1 for v in m.component_data_objects(pyo.Var) if v.is_binary())
        n_rows = sum(1 for _ in m.component_data_objects(pyo.Constraint, active=True))
        return {"variables": n_vars, "binaries": n_bin, "rows": n_rows,
                "points": int(self.data.Xs.shape[0]), "groups": self.data.n_groups,
                "routing": self.data.routing, "build_time": self.build_time}

    def write_mps(self, path: str) -> None:
        """Write the program to an MPS file with readable variable and row names."""
        self.model.write(str(path), format="mps", io_options={"symbolic_solver_labels": True})

    # ------------------------------------------------------------------ start
    def start_values(self, tree: ObliqueTree) -> tuple[dict, float] | tuple[None, str]:
        """Values of every variable for ``tree`` on the program's points (an exact MIP start).

        Returns ``(values, objective)`` with values keyed by ``id`` of the Pyomo variable, or ``(None, reason)`` when the
        tree is not a feasible point of this program (a group split across leaves, a
        forbidden feature, a margin narrower than mu, a leaf below the minimum size).
        """
        d = self.data
        m = self.model
        t = tree.normalized()
        nb, nl = n_branch_nodes(d.depth), n_leaves(d.depth)
        for tt in range(nb):
            bad = np.flatnonzero((t.coef[tt] != 0) & ~d.admissible[node_depth(tt)])
            if bad.size:
                return None, f"node {tt} uses feature(s) {bad.tolist()} not admissible there"
            if d.max_features is not None and np.count_nonzero(t.coef[tt]) > d.max_features:
                return None, f"node {tt} uses more than {d.max_features} features"
            used = np.flatnonzero(t.coef[tt] != 0)
            if d.solo is not None and used.size > 1 and np.any(d.solo[used]):
                return None, (f"node {tt} mixes feature(s) {used[d.solo[used]].tolist()}, "
                              "which may only split alone, with another feature")
        leaf = t.route_scaled(d.Xs)
        g_leaf = np.full(d.n_groups, -1)
        for i, g in enumerate(d.group):
            if g_leaf[g] >= 0 and g_leaf[g] != leaf[i]:
                return None, f"group {g} is split across leaves {g_leaf[g]} and {leaf[i]}"
            g_leaf[g] = leaf[i]
        offsets = self._start_offsets(t, leaf)
        if isinstance(offsets, str):
            return None, offsets
        counts = np.bincount(g_leaf, weights=d.count, minlength=nl)
        used = counts > 0
        if np.any(counts[used] < d.min_leaf_size - 1e-9):
            return None, "a leaf of the start holds fewer rows than the minimum leaf size"
        lw = np.zeros((nl, d.n_classes))
        np.add.at(lw, g_leaf, d.class_weight)
        leaf_cls = np.argmax(lw, axis=1)
        act = t.active
        vals: dict = {}
        for tt in range(nb):
            vals[id(m.d[tt])] = float(act[tt])
            vals[id(m.b[tt])] = float(offsets[tt])
        for (tt, j) in self.pairs:
            a = float(t.coef[tt, j])
            vals[id(m.s[tt, j])] = float(a != 0.0)
            vals[id(m.a[tt, j])] = a
            vals[id(m.aa[tt, j])] = abs(a)
        for g in range(d.n_groups):
            for l in range(nl):
                vals[id(m.z[g, l])] = float(g_leaf[g] == l)
        for l in range(nl):
            vals[id(m.q[l])] = float(used[l])
            for k in range(d.n_classes):
                vals[id(m.c[k, l])] = float(used[l] and leaf_cls[l] == k)
        err = 0.0
        for (g, k) in self.error_index:
            e = float(leaf_cls[g_leaf[g]] != k)
            vals[id(m.e[g, k])] = e
            err += e * d.class_weight[g, k]
        sep = 0.0
        for p, (g1, g2) in enumerate(self.pairs_soft()):
            u = float(g_leaf[g1] != g_leaf[g2])
            vals[id(m.u[p])] = u
            sep += u
        pen = sum(d.penalty[node_depth(tt), j] for (tt, j) in self.pairs if t.coef[tt, j] != 0)
        return vals, err + d.alpha * pen + d.beta * sep

    def _start_offsets(self, t: ObliqueTree, leaf: np.ndarray) -> np.ndarray | str:
        """Offsets that route the points as ``t`` does with the program's margin."""
        d = self.data
        nb = n_branch_nodes(d.depth)
        proj = d.Xs @ t.coef.T
        node_of = self._nodes_on_path(leaf)
        out = np.zeros(nb)
        for tt in range(nb):
            if not t.splits[tt]:
                continue
            here = node_of[:, node_depth(tt)] == tt
            left_leaves, _ = side_leaves(tt, d.depth)
            goes_left = np.isin(leaf, left_leaves)
            lv, rv = proj[here & goes_left, tt], proj[here & ~goes_left, tt]
            hi = rv.min() if rv.size else 1.0
            lo = lv.max() + d.mu if lv.size else -1.0
            if lo > hi + 1e-12:
                return f"node {tt}: the start's margin is narrower than mu = {d.mu:.3g}"
            b = hi if rv.size else max(lo, min(t.offset[tt], 1.0))
            out[tt] = float(np.clip(b, -1.0, 1.0))
            if lv.size and lv.max() + d.mu > out[tt] + 1e-12:
                return f"node {tt}: a left point cannot keep the margin within b <= 1"
        return out

    def _nodes_on_path(self, leaf: np.ndarray) -> np.ndarray:
        """Heap node at each depth on the path to each point's leaf, shape (n, depth)."""
        D = self.data.depth
        node = leaf + n_branch_nodes(D)
        path = np.zeros((leaf.shape[0], D), dtype=np.int64)
        for level in range(D - 1, -1, -1):
            node = (node - 1) // 2
            path[:, level] = node
        return path

    def pairs_soft(self) -> list[tuple[int, int]]:
        return [tuple(map(int, p)) for p in self.data.soft_pairs]

    # ------------------------------------------------------------------ read back
    def tree_from_values(self, value, scaling: Scaling) -> ObliqueTree:
        """The tree a solution describes; ``value(var) -> float``.

        Each offset is moved down by mu / 2 so that the tree's strict ``a . x < b`` sends
        every point where the program's rows (within HiGHS's tolerance) sent it.
        """
        d = self.data
        m = self.model
        nb, nl = n_branch_nodes(d.depth), n_leaves(d.depth)
        p = d.Xs.shape[1]
        coef = np.zeros((nb, p))
        for (tt, j) in self.pairs:
            if value(m.s[tt, j]) > 0.5:
                coef[tt, j] = value(m.a[tt, j])
        coef[np.abs(coef) < 1e-9] = 0.0
        offset = np.zeros(nb)
        for tt in range(nb):
            if np.any(coef[tt] != 0):
                offset[tt] = value(m.b[tt]) - d.mu / 2
        leaf_class = np.zeros(nl, dtype=np.int64)
        for l in range(nl):
            cv = [value(m.c[k, l]) for k in range(d.n_classes)]
            leaf_class[l] = int(np.argmax(cv))
        return ObliqueTree(depth=d.depth, coef=coef, offset=offset, leaf_class=leaf_class,
                           scaling=scaling)

    def program_leaves(self, value) -> np.ndarray:
        """Leaf of every point as the program's z variables put it."""
        d = self.data
        nl = n_leaves(d.depth)
        zg = np.array([[value(self.model.z[g, l]) for l in range(nl)] for g in range(d.n_groups)])
        return np.argmax(zg, axis=1)[d.group]

    def program_disagreement(self, value) -> float:
        """``sum w_i e_i`` of a solution."""
        return float(sum(self.data.class_weight[g, k] * value(self.model.e[g, k])
                         for (g, k) in self.error_index))


def build_program(data: ProgramData) -> Program:
    """Build the Pyomo model of the surrogate program for ``data``.

    With ``data.for_bound`` the model is a relaxation of the tree class, so that its proven
    optimum bounds the least disagreement of every tree of the class on the points: a point
    on a hyperplane may go either way (``mu = 0``; with one feature per split, the data's
    smallest gap, which every axis-aligned split keeps), and so that the zero hyperplane cannot
    route points at will, every node with admissible features splits with ``|a|_1 = 1``
    (one sign binary per coefficient makes ``aa = |a|``). A real split ``a . x < b``,
    scaled to ``|a|_1 = 1``, satisfies these rows; a node that does not split is a split
    that sends every point right (``b = -1``); a node with no admissible feature sends every
    point right. The minimum leaf size is dropped, which only lowers the optimum.
    """
    t0 = time.perf_counter()
    if data.for_bound:
        # one feature per split: every split can be placed half-way between two neighbouring
        # values, so the data's smallest gap is a margin every tree keeps (rows tied on a
        # feature then stay together); with more, a hyperplane can pass arbitrarily close
        # to a point, and only a margin of 0 is safe
        mu = data_margin(data.Xs, data.admissible) if data.max_features == 1 else 0.0
        data = replace(data, mu=mu, alpha=0.0, beta=0.0, min_leaf_size=1,
                       soft_pairs=np.zeros((0, 2), dtype=np.int64))
    D, K = data.depth, data.n_classes
    nb, nl = n_branch_nodes(D), n_leaves(D)
    n, p = data.Xs.shape
    G = data.n_groups
    k_cap = data.max_features
    m = pyo.ConcreteModel(name="surrogate")
    pairs = [(t, j) for t in range(nb) for j in range(p) if data.admissible[node_depth(t), j]]
    error_index = [(g, k) for g in range(G) for k in range(K) if data.class_weight[g, k] > 0]
    soft = [tuple(map(int, pr)) for pr in data.soft_pairs]

    m.d = pyo.Var(range(nb), domain=pyo.Binary)
    m.s = pyo.Var(pairs, domain=pyo.Binary)
    m.a = pyo.Var(pairs, bounds=(-1.0, 1.0))
    m.aa = pyo.Var(pairs, bounds=(0.0, 1.0))
    m.b = pyo.Var(range(nb), bounds=(-1.0, 1.0))
    m.z = pyo.Var(range(G), range(nl), domain=pyo.Binary)
    m.q = pyo.Var(range(nl), domain=pyo.Binary)
    m.c = pyo.Var(range(K), range(nl), domain=pyo.Binary)
    m.e = pyo.Var(error_index, bounds=(0.0, 1.0))
    m.u = pyo.Var(range(len(soft)), bounds=(0.0, 1.0))
    m.d[0].fix(1)  # no empty tree

    by_node: dict[int, list[int]] = {t: [] for t in range(nb)}
    for (t, j) in pairs:
        by_node[t].append(j)
    if data.for_bound:
        _relax_for_bound(m, data, pairs, by_node)

    # -- split budget and admissible features
    m.budget = pyo.Constraint(range(nb), rule=lambda m, t: (
        sum(m.aa[t, j] for j in by_node[t]) <= m.d[t]) if by_node[t] else pyo.Constraint.Skip)
    m.abs_hi = pyo.Constraint(pairs, rule=lambda m, t, j: m.aa[t, j] >= m.a[t, j])
    m.abs_lo = pyo.Constraint(pairs, rule=lambda m, t, j: m.aa[t, j] >= -m.a[t, j])
    m.a_hi = pyo.Constraint(pairs, rule=lambda m, t, j: m.a[t, j] <= m.s[t, j])
    m.a_lo = pyo.Constraint(pairs, rule=lambda m, t, j: m.a[t, j] >= -m.s[t, j])
    m.s_on = pyo.Constraint(pairs, rule=lambda m, t, j: m.s[t, j] <= m.d[t])
    m.b_hi = pyo.Constraint(range(nb), rule=lambda m, t: m.b[t] <= m.d[t])
    m.b_lo = pyo.Constraint(range(nb), rule=lambda m, t: m.b[t] >= -m.d[t])
    if not data.for_bound:
        m.hier = pyo.Constraint(range(1, nb), rule=lambda m, t: m.d[t] <= m.d[(t - 1) // 2])
    if k_cap is not None:
        m.k_cap = pyo.Constraint(range(nb), rule=lambda m, t: (
            sum(m.s[t, j] for j in by_node[t]) <= k_cap)
            if len(by_node[t]) > k_cap else pyo.Constraint.Skip)

    # -- a solo feature splits alone: sum_{k != j} s[t, k] <= M_t (1 - s[t, j]), with M_t the
    # most other features node t could use (its admissible ones less one, at most k)
    if data.solo is not None:
        solo = np.asarray(data.solo, dtype=bool)
        solo_rows = [(t, j) for (t, j) in pairs if solo[j] and len(by_node[t]) > 1]

        def solo_rule(m, t, j):
            big = len(by_node[t]) - 1 if k_cap is None else min(len(by_node[t]) - 1, k_cap)
            return sum(m.s[t, k] for k in by_node[t] if k != j) <= big * (1 - m.s[t, j])
        if solo_rows:
            m.solo = pyo.Constraint(solo_rows, rule=solo_rule)

    # -- assignment, used leaves, minimum leaf size
    m.one_leaf = pyo.Constraint(range(G), rule=lambda m, g: sum(m.z[g, l] for l in range(nl)) == 1)
    m.used = pyo.Constraint(range(G), range(nl), rule=lambda m, g, l: m.z[g, l] <= m.q[l])
    if data.min_leaf_size > 1:
        m.min_leaf = pyo.Constraint(range(nl), rule=lambda m, l: sum(
            float(data.count[g]) * m.z[g, l] for g in range(G)) >= data.min_leaf_size * m.q[l])

    # -- routing (big-M)
    _add_routing(m, data, by_node)

    # -- classes and disagreement
    m.one_class = pyo.Constraint(range(nl), rule=lambda m, l: sum(
        m.c[k, l] for k in range(K)) == m.q[l])
    m.err = pyo.Constraint(error_index, range(nl), rule=lambda m, g, k, l: (
        m.e[g, k] >= m.z[g, l] - m.c[k, l]))
    if soft:
        m.sep = pyo.Constraint(range(len(soft)), range(nl), rule=lambda m, r, l: (
            m.u[r] >= m.z[soft[r][0], l] - m.z[soft[r][1], l]))

    fid = LinearExpression(constant=0.0,
                           linear_coefs=[float(data.class_weight[g, k]) for (g, k) in error_index],
                           linear_vars=[m.e[g, k] for (g, k) in error_index])
    pen = LinearExpression(constant=0.0,
                           linear_coefs=[float(data.alpha * data.penalty[node_depth(t), j])
                                         for (t, j) in pairs],
                           linear_vars=[m.s[t, j] for (t, j) in pairs])
    obj = fid + pen
    if soft and data.beta > 0:
        obj = obj + data.beta * sum(m.u[r] for r in range(len(soft)))
    m.obj = pyo.Objective(expr=obj, sense=pyo.minimize)
    return Program(data=data, model=m, pairs=pairs, error_index=error_index,
                   build_time=time.perf_counter() - t0)


def _relax_for_bound(m: pyo.ConcreteModel, data: ProgramData, pairs, by_node) -> None:
    """Every node with admissible features splits with ``|a|_1 = 1``; one without sends
    every point right (see :func:`build_program`)."""
    D = data.depth
    m.sign = pyo.Var(pairs, domain=pyo.Binary)
    m.abs_pos = pyo.Constraint(pairs, rule=lambda m, t, j: (
        m.a[t, j] >= m.aa[t, j] - 2 * (1 - m.sign[t, j])))
    m.abs_neg = pyo.Constraint(pairs, rule=lambda m, t, j: (
        m.a[t, j] <= -m.aa[t, j] + 2 * m.sign[t, j]))
    m.unit = pyo.Constraint([t for t in by_node if by_node[t]], rule=lambda m, t: (
        sum(m.aa[t, j] for j in by_node[t]) == 1))
    for t, feats in by_node.items():
        m.d[t].fix(1 if feats else 0)
        if not feats:
            for g in range(data.n_groups):
                for leaf in side_leaves(t, D)[0]:
                    m.z[g, int(leaf)].fix(0)


def _add_routing(m: pyo.ConcreteModel, data: ProgramData, by_node: dict[int, list[int]]) -> None:
    """Big-M routing rows: left ``a.x + mu <= b + (2 + mu)(1 - Z)``, right ``a.x >= b - 2(1 - Z)``.

    Written as ``a.x - b + (2 + mu) Z <= 2`` and ``a.x - b - 2 Z >= -2``, with ``Z`` the z of
    the side's leaves (node form) or of one leaf (leaf form).
    """
    D, mu = data.depth, data.mu
    nb = n_branch_nodes(D)
    X = data.Xs
    rows: list[tuple[int, int, list[int], bool]] = []  # (point, node, leaves, left side)
    if data.routing == "node":
        sides = [side_leaves(t, D) for t in range(nb)]
        for i in range(X.shape[0]):
            for t in range(nb):
                rows.append((i, t, list(sides[t][0]), True))
                rows.append((i, t, list(sides[t][1]), False))
    else:
        for i in range(X.shape[0]):
            for leaf in range(n_leaves(D)):
                for (t, left) in leaf_ancestors(leaf, D):
                    rows.append((i, t, [leaf], left))

    def rule(m, r):
        i, t, leaves, left = rows[r]
        g = int(data.group[i])
        feats = by_node[t]
        coefs = [float(X[i, j]) for j in feats] + [-1.0]
        vars_ = [m.a[t, j] for j in feats] + [m.b[t]]
        big = (2.0 + mu) if left else -2.0
        coefs += [big] * len(leaves)
        vars_ += [m.z[g, l] for l in leaves]
        body = LinearExpression(constant=0.0, linear_coefs=coefs, linear_vars=vars_)
        return body <= 2.0 if left else body >= -2.0

    m.route = pyo.Constraint(range(len(rows)), rule=rule)
