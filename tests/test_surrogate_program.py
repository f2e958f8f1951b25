"""The surrogate program (Pyomo) and its solving with HiGHS, on tiny problems.

References: exhaustive enumeration of axis-aligned trees (the true optimum, SURROGATE_MILP.md
"Checks that keep it honest"); HiGHS itself reading the MPS file; scikit-learn's own CART.
"""

import threading
import time

import highspy
import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer

from grovewise.surrogate.greedy import fit_greedy, oblique_from_greedy
from grovewise.surrogate.program import ProgramData, build_program, data_margin
from grovewise.surrogate.solver import Cancel, compile_program, solve
from grovewise.surrogate.tree import Scaling


def tiny_data(seed: int, n: int = 14, p: int = 3, K: int = 2):
    rng = np.random.default_rng(seed)
    X = rng.integers(0, 6, size=(n, p)).astype(float) + rng.random((n, p)) * 0.01
    y = rng.integers(0, K, size=n)
    w = rng.uniform(0.5, 1.0, size=n)
    return X, y, w / w.sum()


def enumerate_axis_aligned(Xs, y, w, K, depth):
    """Least weighted disagreement over every axis-aligned tree of at most ``depth``.

    A depth-d tree's best is the best root split (or none) with each side's best
    depth-(d-1) tree: the sides do not interact, so this is exhaustive.
    """
    def leaf_cost(idx):
        if idx.size == 0:
            return 0.0
        return float(w[idx].sum() - np.bincount(y[idx], weights=w[idx], minlength=K).max())

    def best(idx, d):
        cost = leaf_cost(idx)
        if d == 0 or idx.size < 2:
            return cost
        for j in range(Xs.shape[1]):
            v = np.unique(Xs[idx, j])
            for a, b in zip(v[:-1], v[1:]):
                left = idx[Xs[idx, j] < (a + b) / 2]
                right = idx[Xs[idx, j] >= (a + b) / 2]
                cost = min(cost, best(left, d - 1) + best(right, d - 1))
        return cost

    return best(np.arange(Xs.shape[0]), depth)


def program_for(X, y, w, depth, K=2, k=1, alpha=0.0, routing="node", group=None, start=None):
    sc = Scaling.fit(X)
    Xs = sc.transform(X)
    n, p = Xs.shape
    adm = np.ones((depth, p), dtype=bool)
    cw = np.zeros((n, K))
    cw[np.arange(n), y] = w
    data = ProgramData(Xs=Xs, group=np.arange(n) if group is None else group,
                       class_weight=cw if group is None else _by_group(cw, group),
                       count=np.ones(n) if group is None else np.bincount(group).astype(float),
                       depth=depth, n_classes=K, admissible=adm, penalty=np.ones((depth, p)),
                       alpha=alpha, max_features=k, mu=max(data_margin(Xs), 1e-5),
                       routing=routing)
    return build_program(data), sc, Xs


def _by_group(cw, group):
    out = np.zeros((group.max() + 1, cw.shape[1]))
    np.add.at(out, group, cw)
    return out


@pytest.mark.parametrize("depth", [1, 2])
@pytest.mark.parametrize("seed", [0, 1])
def test_milp_reaches_enumerated_optimum_axis_aligned(depth, seed):
    # Reference: exhaustive enumeration of axis-aligned trees (true optimum); k = 1, alpha = 0.
    X, y, w = tiny_data(seed)
    prog, sc, Xs = program_for(X, y, w, depth, k=1)
    res = solve(compile_program(prog), time_limit=30.0, seed=0)
    truth = enumerate_axis_aligned(Xs, y, w, 2, depth)
    assert res.status == "optimal"
    assert res.objective == pytest.approx(truth, abs=1e-6)
    assert res.bound == pytest.approx(truth, abs=1e-6)


def test_both_routing_forms_reach_the_same_optimum():
    # Reference: enumeration again; the per-leaf form of SURROGATE_MILP.md and our per-node form.
    X, y, w = tiny_data(3)
    truth = enumerate_axis_aligned(Scaling.fit(X).transform(X), y, w, 2, 2)
    for routing in ("node", "leaf"):
        prog, _, _ = program_for(X, y, w, 2, k=1, routing=routing)
        res = solve(compile_program(prog), time_limit=30.0, seed=0)
        assert res.status == "optimal" and res.objective == pytest.approx(truth, abs=1e-6)


def test_mps_file_read_by_highs_gives_the_same_optimum(tmp_path):
    # Reference: HiGHS reading the MPS file Pyomo writes, solved on its own.
    X, y, w = tiny_data(4)
    prog, _, _ = program_for(X, y, w, 2, k=1)
    ours = solve(compile_program(prog), time_limit=30.0, seed=0)
    path = tmp_path / "surrogate.mps"
    prog.write_mps(str(path))
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    assert h.readModel(str(path)) == highspy.HighsStatus.kOk
    h.run()
    assert h.getModelStatus() == highspy.HighsModelStatus.kOptimal
    assert h.getInfo().objective_function_value == pytest.approx(ours.objective, abs=1e-6)


def test_readback_routes_points_as_the_program_did():
    # The tree read from a solution sends every point to the leaf its z says, and its
    # disagreement equals sum_i w_i e_i of the solution (SURROGATE_MILP.md read-back check).
    X, y, w = tiny_data(5, n=20, p=3, K=3)
    prog, sc, Xs = program_for(X, y, w, 2, K=3, k=2)
    cp = compile_program(prog)
    res = solve(cp, time_limit=3.0, seed=0)
    value = cp.value_getter(res.values)
    tree = prog.tree_from_values(value, sc)
    assert np.array_equal(tree.route_scaled(Xs), prog.program_leaves(value))
    dis = float(w[tree.predict_index_scaled(Xs) != y].sum())
    assert dis == pytest.approx(prog.program_disagreement(value), abs=1e-7)


def _breast_cancer_program(n=120, depth=2, k=2, noisy=False):
    X, y = load_breast_cancer(return_X_y=True)
    rng = np.random.default_rng(0)
    idx = rng.choice(len(y), n, replace=False)
    X, y = X[idx], y[idx]
    if noisy:  # random targets: no tree fits them, so the search cannot end early
        y = rng.integers(0, 2, size=n)
    w = np.full(n, 1.0 / n)
    sc = Scaling.fit(X)
    g = fit_greedy(X, y, w, depth)
    start_tree = oblique_from_greedy(g, sc, depth)
    prog, sc, Xs = program_for(X, y, w, depth, k=k)
    return prog, start_tree, g, X, y, w


def test_warm_start_from_cart_is_exact_and_accepted():
    # Reference: scikit-learn's CART; the start (z included) has CART's weighted error and
    # HiGHS's first incumbent is never worse.
    prog, start_tree, g, X, y, w = _breast_cancer_program()
    vals, start_obj = prog.start_values(start_tree)
    assert vals is not None
    assert start_obj == pytest.approx(float(w[g.predict(X) != y].sum()), abs=1e-9)
    cp = compile_program(prog)
    seen = []
    res = solve(cp, start=cp.vector(vals), time_limit=2.0, seed=0, progress=seen.append)
    assert res.start_accepted
    first = next(p.incumbent for p in seen if p.incumbent is not None)
    assert first <= start_obj + 1e-9
    assert res.objective <= start_obj + 1e-9
    assert [p.elapsed for p in seen] == sorted(p.elapsed for p in seen)


def test_cancel_from_another_thread_keeps_the_incumbent():
    prog, start_tree, *_ = _breast_cancer_program(n=150, depth=2, noisy=True)
    vals, start_obj = prog.start_values(start_tree)
    cp = compile_program(prog)
    cancel = Cancel()
    timer = threading.Timer(0.5, cancel.cancel)
    t0 = time.perf_counter()
    timer.start()
    res = solve(cp, start=cp.vector(vals), time_limit=60.0, seed=0, cancel=cancel)
    took = time.perf_counter() - t0
    assert res.status == "cancelled"
    assert res.values is not None and res.objective <= start_obj + 1e-9
    assert took < 10.0  # the prototype measured about 3 s from interrupt to stop


def test_node_limit_makes_a_solve_reproducible():
    prog, start_tree, *_ = _breast_cancer_program(n=80)
    vals, _ = prog.start_values(start_tree)
    cp = compile_program(prog)
    runs = [solve(cp, start=cp.vector(vals), time_limit=60.0, node_limit=30, seed=1)
            for _ in range(2)]
    assert runs[0].status in ("node_limit", "optimal")
    assert runs[0].objective == runs[1].objective
    assert np.array_equal(runs[0].values, runs[1].values)


def test_hard_groups_share_a_leaf():
    X, y, w = tiny_data(6, n=16)
    group = np.array([0, 0, 0, 1, 2, 3, 4, 5, 6, 6, 7, 8, 9, 10, 11, 12])
    prog, sc, Xs = program_for(X, y, w, 2, k=1, group=group)
    cp = compile_program(prog)
    res = solve(cp, time_limit=20.0, seed=0)
    value = cp.value_getter(res.values)
    leaf = prog.tree_from_values(value, sc).route_scaled(Xs)
    assert len(set(leaf[:3])) == 1 and leaf[8] == leaf[9]


def test_soft_pair_is_kept_when_separating_costs_more_than_it_gains():
    # Two points of different classes: apart they cost nothing in fidelity; a soft pair with
    # a penalty above any fidelity gain (weights sum to 1) must bring them together.
    X, y, w = tiny_data(7, n=12)
    i, j = int(np.flatnonzero(y == 0)[0]), int(np.flatnonzero(y == 1)[0])
    for beta, together in ((0.0, False), (5.0, True)):
        prog, sc, Xs = program_for(X, y, w, 1, k=1)
        prog.data.soft_pairs = np.array([[i, j]])
        prog.data.beta = beta
        prog = build_program(prog.data)
        cp = compile_program(prog)
        res = solve(cp, time_limit=20.0, seed=0)
        leaf = prog.tree_from_values(cp.value_getter(res.values), sc).route_scaled(Xs)
        if together:
            assert leaf[i] == leaf[j]
        else:  # without a penalty the optimum is the plain enumerated one
            assert res.objective == pytest.approx(enumerate_axis_aligned(Xs, y, w, 2, 1), abs=1e-6)
