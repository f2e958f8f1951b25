"""The exact optimal axis-aligned tree of depth 1 and 2 (surrogate/optimal_axis.py).

References: an exhaustive enumeration written here (every feature and threshold at the root
and at each child, or no split), independent of the module's search; scikit-learn's
DecisionTreeClassifier (CART) scored with numpy on scikit-learn's bundled breast cancer and
wine data; and invented data on which greedy CART is known to fail (XOR of two features).
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_wine
from sklearn.tree import DecisionTreeClassifier

from grovewise.surrogate.optimal_axis import optimal_axis_tree, warm_up
from grovewise.surrogate.tree import Scaling


@pytest.fixture(scope="module", autouse=True)
def _compiled():
    warm_up()  # numba's disk cache: compile once, then load


# ---------------------------------------------------------------------------- reference
def leaf_error(y, w, K):
    if y.size == 0:
        return 0.0
    cw = np.bincount(y, weights=w, minlength=K)
    return float(cw.sum() - cw.max())


def thresholds_of(values):
    v = np.unique(values)
    return (v[:-1] + v[1:]) / 2


def best_depth1(X, y, w, rows, feats, K, min_leaf):
    """Least error of a leaf or one split x[f] <= t over ``rows`` (every part >= min_leaf)."""
    best = leaf_error(y[rows], w[rows], K)
    for f in feats:
        for t in thresholds_of(X[rows, f]):
            left, right = rows[X[rows, f] <= t], rows[X[rows, f] > t]
            if len(left) < min_leaf or len(right) < min_leaf:
                continue
            best = min(best, leaf_error(y[left], w[left], K) + leaf_error(y[right], w[right], K))
    return best


def brute_force(X, y, w, K, depth=2, admissible=None, min_leaf=1):
    """Least weighted error over every tree of ``depth``: enumeration of every root feature
    and threshold, and for each child every feature and threshold or none; a root that does
    not split sends every row to its right child."""
    n, p = X.shape
    adm = np.ones((depth, p), bool) if admissible is None else admissible
    rows = np.arange(n)
    if depth == 1:
        return best_depth1(X, y, w, rows, np.flatnonzero(adm[0]), K, min_leaf)
    child = np.flatnonzero(adm[1])
    best = best_depth1(X, y, w, rows, child, K, min_leaf)  # root does not split
    for f in np.flatnonzero(adm[0]):
        for t in thresholds_of(X[:, f]):
            left, right = rows[X[:, f] <= t], rows[X[:, f] > t]
            if len(left) < min_leaf or len(right) < min_leaf:
                continue
            best = min(best, best_depth1(X, y, w, left, child, K, min_leaf)
                       + best_depth1(X, y, w, right, child, K, min_leaf))
    return best


def scored_error(res, X, y, w):
    """The returned tree's weighted error, routed here with numpy."""
    node = np.zeros(len(y), dtype=int)
    for _ in range(res.depth):
        f = res.features[node]
        go_left = (f >= 0) & (X[np.arange(len(y)), np.maximum(f, 0)] <= res.thresholds[node])
        node = np.where(go_left, 2 * node + 1, 2 * node + 2)
    leaf = node - (2 ** res.depth - 1)
    return float(w[res.leaf_class[leaf] != y].sum())


def random_problem(rng, n_max=40, p_max=4):
    n = int(rng.integers(2, n_max + 1))
    p = int(rng.integers(1, p_max + 1))
    K = int(rng.integers(2, 4))
    levels = int(rng.integers(2, 8))  # few distinct values: many ties
    X = rng.integers(0, levels, size=(n, p)).astype(float)
    y = rng.integers(0, K, n)
    w = rng.uniform(0.05, 1.0, n)
    return X, y, w, K


# ---------------------------------------------------------------------------- (1) exact
def test_equals_brute_force_on_small_random_problems():
    rng = np.random.default_rng(20240601)
    for _ in range(120):
        X, y, w, K = random_problem(rng)
        depth = 2 if rng.random() < 0.8 else 1
        grid = int(rng.integers(1, 4))  # few grid cuts: the intervals and sweeps do the work
        res = optimal_axis_tree(X, y, w, depth=depth, n_classes=K, grid_points=grid)
        ref = brute_force(X, y, w, K, depth=depth)
        assert res.optimal
        assert res.weighted_error == pytest.approx(ref, abs=1e-9)
        assert scored_error(res, X, y, w) == pytest.approx(ref, abs=1e-9)
        assert res.objective == pytest.approx(ref / w.sum(), abs=1e-12)
        assert res.lower_bound == pytest.approx(res.objective, abs=1e-12)


def test_root_cut_inside_a_run_of_one_class():
    """Invented data (found by enumeration) on which every optimal tree cuts the root between
    two rows of the same class: class boundaries may prune the children's cuts, never the
    root's. Perfect trees exist (e.g. x0 <= 6.5, then x1 <= 0.5 / x1 <= 1.5)."""
    X = np.array([[5, 1], [8, 3], [7, 0], [3, 1], [6, 2], [9, 1], [4, 0], [10, 2], [0, 3],
                  [2, 2], [1, 2]], dtype=float)
    y = np.array([1, 0, 1, 1, 1, 1, 0, 0, 1, 1, 1])
    w = np.ones(len(y))
    assert brute_force(X, y, w, 2) == 0.0 < brute_force(X, y, w, 2, depth=1)
    for grid in (1, 2, 6):
        res = optimal_axis_tree(X, y, grid_points=grid)
        assert res.optimal and res.weighted_error == 0.0
        f, t = res.features[0], res.thresholds[0]
        left_max = X[X[:, f] <= t, f].max()
        right_min = X[X[:, f] > t, f].min()
        assert set(y[X[:, f] == left_max]) == set(y[X[:, f] == right_min])  # inside a run


def test_equals_exhaustive_search_where_the_bounds_prune():
    """A few hundred rows: most root cuts are settled by the interval bounds, not evaluated
    one by one; the enumeration still agrees."""
    rng = np.random.default_rng(7)
    for K in (2, 3):
        n, p = 160, 3
        X = np.round(rng.random((n, p)), 2)
        y = ((X[:, 0] > 0.4).astype(int) + (X[:, 1] > 0.6) * (K - 1)) % K
        y = np.where(rng.random(n) < 0.15, rng.integers(0, K, n), y)
        w = rng.uniform(0.2, 1.0, n)
        res = optimal_axis_tree(X, y, w, n_classes=K, grid_points=4)
        assert res.counters["cuts_bounded"] > 0
        assert res.weighted_error == pytest.approx(brute_force(X, y, w, K), abs=1e-9)


# ---------------------------------------------------------------------------- (2) vs CART
def cart_error(X, y, w, depth=2, min_leaf=1):
    """scikit-learn's greedy tree (CART) with the same weights, scored with numpy."""
    est = DecisionTreeClassifier(max_depth=depth, min_samples_leaf=min_leaf, random_state=0)
    est.fit(X, y, sample_weight=w)
    return float(w[est.predict(X) != y].sum()), est


@pytest.mark.parametrize("loader", [load_breast_cancer, load_wine])
def test_never_worse_than_cart_on_bundled_data(loader):
    # scikit-learn's bundled breast cancer (2 classes) and wine (3 classes) data
    X, y = loader(return_X_y=True)
    w = np.random.default_rng(0).uniform(0.5, 2.0, len(y))
    for depth in (1, 2):
        res = optimal_axis_tree(X, y, w, depth=depth)
        ref, _ = cart_error(X, y, w, depth=depth)
        assert res.optimal
        assert res.weighted_error <= ref + 1e-9
        assert scored_error(res, X, y, w) == pytest.approx(res.weighted_error, abs=1e-9)


def test_strictly_better_than_cart_on_xor():
    """y = (x0 > 0.5) xor (x1 > 0.5): no root split on x0 or x1 helps on its own, so greedy
    CART takes the noise feature x2 (made slightly informative), after which depth 2 cannot
    recover the XOR; the optimal tree splits x0 then x1 and makes no error. (Invented data;
    the failure of greedy trees on XOR is common practice, no source.)"""
    rng = np.random.default_rng(3)
    n = 400
    X = rng.random((n, 3))
    y = ((X[:, 0] > 0.5) ^ (X[:, 1] > 0.5)).astype(int)
    X[:, 2] = 0.25 * y + 0.75 * rng.random(n)
    w = np.ones(n)
    ref, est = cart_error(X, y, w)
    assert est.tree_.feature[0] == 2  # greedy picked the wrong root, as intended
    res = optimal_axis_tree(X, y, w)
    assert res.optimal and res.weighted_error == 0.0 < ref
    assert res.features[0] in (0, 1) and set(res.features[1:]) == {1 - res.features[0]}


# ---------------------------------------------------------------------------- (3) constraints
def test_min_leaf_and_admissible_masks_exact_and_respected():
    rng = np.random.default_rng(11)
    for _ in range(80):
        X, y, w, K = random_problem(rng)
        p = X.shape[1]
        min_leaf = int(rng.choice([1, 2, 3, 5]))
        adm = rng.random((2, p)) < 0.7
        res = optimal_axis_tree(X, y, w, n_classes=K, admissible=adm, min_leaf=min_leaf,
                                grid_points=int(rng.integers(1, 4)))
        ref = brute_force(X, y, w, K, admissible=adm, min_leaf=min_leaf)
        assert res.weighted_error == pytest.approx(ref, abs=1e-9)
        for t, f in enumerate(res.features):
            if f >= 0:
                assert adm[0 if t == 0 else 1, f]
        if np.any(res.features >= 0):  # every leaf holding rows keeps min_leaf of them
            counts = np.bincount(res.route(X), minlength=4)
            assert np.all((counts == 0) | (counts >= min_leaf))


def test_depth_one_with_mask_and_min_leaf():
    X, y = load_breast_cancer(return_X_y=True)
    adm = np.zeros((1, X.shape[1]), bool)
    adm[0, [0, 3, 7]] = True
    res = optimal_axis_tree(X, y, depth=1, admissible=adm, min_leaf=40)
    ref = brute_force(X, y, np.ones(len(y)), 2, depth=1, admissible=adm, min_leaf=40)
    assert res.weighted_error == pytest.approx(ref, abs=1e-9)
    assert res.features[0] in (0, 3, 7)
    assert np.bincount(res.route(X)).min() >= 40


# ---------------------------------------------------------------------------- (4) oblique
def test_to_oblique_routes_like_predict():
    rng = np.random.default_rng(5)
    cases = [load_breast_cancer(return_X_y=True), load_wine(return_X_y=True)]
    for _ in range(20):
        X, y, w, K = random_problem(rng)
        cases.append((X, y))
    for X, y in cases:
        res = optimal_axis_tree(X, y)
        for scaling in (Scaling.fit(X), Scaling.fit(np.vstack([X, X.max(0) + 3.0]))):
            tree = res.to_oblique(scaling)
            np.testing.assert_array_equal(tree.route(X), res.route(X))
            np.testing.assert_array_equal(tree.leaf_class[tree.route(X)], res.predict(X))


# ---------------------------------------------------------------------------- the certificate
def test_deadline_gives_a_valid_bound_and_tree():
    X, y = load_breast_cancer(return_X_y=True)
    full = optimal_axis_tree(X, y, grid_points=2)
    cut = optimal_axis_tree(X, y, grid_points=2, deadline=time.perf_counter() - 1.0)
    assert full.optimal and not cut.optimal
    assert cut.lower_bound <= full.objective + 1e-12 <= cut.objective + 1e-12
    assert scored_error(cut, X, y, np.ones(len(y))) == pytest.approx(cut.weighted_error)


def test_same_answer_every_run():
    X, y = load_wine(return_X_y=True)
    runs = [optimal_axis_tree(X, y) for _ in range(3)]
    for r in runs[1:]:
        np.testing.assert_array_equal(r.features, runs[0].features)
        np.testing.assert_array_equal(r.thresholds, runs[0].thresholds)


@pytest.mark.parametrize("kwargs, words", [
    (dict(X=[[np.nan, 1.0]], y=[0]), "NaN"),
    (dict(X=np.ones((3, 2)), y=[0, 1]), "one class index"),
    (dict(X=np.ones((2, 2)), y=[0, 1], depth=3), "depth"),
    (dict(X=np.ones((2, 2)), y=[0, 1], admissible=np.ones((1, 2), bool)), "admissible"),
    (dict(X=np.ones((2, 2)), y=[0, 1], sample_weight=[1.0, -1.0]), "sample_weight"),
    (dict(X=np.ones((2, 2)), y=[0, 2], n_classes=2), "n_classes"),
    (dict(X=np.ones((2, 2)), y=[0, 1], min_leaf=0), "min_leaf"),
])
def test_bad_input_is_named(kwargs, words):
    with pytest.raises(ValueError, match=words):
        optimal_axis_tree(**kwargs)
