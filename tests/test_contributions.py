"""Exact per-case contributions (path-dependent TreeSHAP) and Shapley interaction values.

Outside references:
- the definition itself: Shapley values (Shapley 1953) of the path-dependent conditional
  expectation of Lundberg, Erion, Lee (2018), arXiv:1802.03888, and the Shapley interaction
  values of Lundberg et al. (2020), Nature Machine Intelligence 2:56-67, computed here by brute
  force over every subset of features, with a tree walk written in this file;
- XGBoost's own ``Booster.predict(pred_contribs=True / pred_interactions=True)``;
- LightGBM's own ``predict(pred_contrib=True)`` (when a LightGBM converter exists);
- scikit-learn's own ``decision_function`` / ``predict_proba`` (efficiency: base + sum);
- on scikit-learn's bundled datasets (breast cancer: Wolberg et al., UCI; wine: Forina et
  al., UCI; iris: Fisher 1936).
"""

import itertools
import json
import math
import threading
from dataclasses import replace

import numpy as np
import pytest
import xgboost as xgb
from sklearn.datasets import load_breast_cancer, load_iris, load_wine
from sklearn.ensemble import (ExtraTreesClassifier, GradientBoostingClassifier,
                              HistGradientBoostingClassifier, RandomForestClassifier)
from threadpoolctl import threadpool_limits

import grovewise as gw
from grovewise.analysis.contributions import (contributions, interaction_ranking,
                                              interactions)
from grovewise.errors import CancelledError, SettingError
from grovewise.forest import Tree

EXACT = 1e-9  # the contract: exact up to float64 rounding
ALGORITHMS = ("linear", "path")


# ------------------------------------------------------------------ brute force (independent)
def _goes_left(forest, tree, k, value):
    """The library's comparison rule, restated here (see DEVELOPERS.md, exactness rules)."""
    if math.isnan(value):
        return bool(tree.missing_left[k])
    thr = tree.threshold[k]
    if forest.compare == "lt_float32":  # XGBoost: float32(x) < float32(threshold)
        return bool(np.float32(value) < np.float32(thr))
    if forest.compare == "le_float32":  # scikit-learn trees: float32(x) <= threshold
        return bool(np.float64(np.float32(value)) <= thr)
    return bool(value <= thr)  # histogram boosting: float64


def _expectation(forest, tree, x, known, k=0):
    """E[f(x) | x_S] as Lundberg et al. (2018) define it for a tree: follow x at splits on a
    known feature, else average the children weighted by their cover."""
    if tree.left[k] < 0:
        return tree.value[k]
    left, right = tree.left[k], tree.right[k]
    f = tree.feature[k]
    if f in known:
        nxt = left if _goes_left(forest, tree, k, x[f]) else right
        return _expectation(forest, tree, x, known, nxt)
    c = tree.cover
    return (c[left] * _expectation(forest, tree, x, known, left)
            + c[right] * _expectation(forest, tree, x, known, right)) / c[k]


def _value(forest, x, known):
    """The explained output with the features in ``known`` known (one entry per output)."""
    if forest.link == "mean":
        return sum(_expectation(forest, t, x, known) for t in forest.trees) / forest.n_trees
    out = forest.base_score.copy()
    for t in forest.trees:
        out[t.output] += _expectation(forest, t, x, known)[0]
    return out


def _all_values(forest, x):
    p = forest.n_features
    return {S: _value(forest, x, set(S)) for r in range(p + 1)
            for S in itertools.combinations(range(p), r)}


def _brute_shapley(forest, x):
    """Shapley values from the definition: every subset S of the other features."""
    p = forest.n_features
    v = _all_values(forest, x)
    phi = np.zeros((p, forest.n_outputs))
    for i in range(p):
        others = [j for j in range(p) if j != i]
        for r in range(p):
            w = math.factorial(r) * math.factorial(p - r - 1) / math.factorial(p)
            for S in itertools.combinations(others, r):
                phi[i] += w * (v[tuple(sorted(S + (i,)))] - v[S])
    return phi, v[()]


def _brute_interactions(forest, x):
    """Shapley interaction values, Lundberg et al. (2020) eq. for Phi_ij (i != j), diagonal
    = phi_i - sum_{j != i} Phi_ij."""
    p = forest.n_features
    v = _all_values(forest, x)
    key = lambda S: tuple(sorted(S))  # noqa: E731
    out = np.zeros((p, p, forest.n_outputs))
    for i, j in itertools.permutations(range(p), 2):
        others = [k for k in range(p) if k not in (i, j)]
        for r in range(p - 1):
            w = math.factorial(r) * math.factorial(p - r - 2) / (2 * math.factorial(p - 1))
            for S in itertools.combinations(others, r):
                out[i, j] += w * (v[key(S + (i, j))] - v[key(S + (i,))] - v[key(S + (j,))]
                                  + v[S])
    phi, _ = _brute_shapley(forest, x)
    for i in range(p):
        out[i, i] = phi[i] - out[i].sum(axis=0)  # out[i, i] is still 0 here
    return out


# ------------------------------------------------------------------ models
def _holes(X, share=0.1, seed=7):
    X = X.copy()
    X[np.random.default_rng(seed).random(X.shape) < share] = np.nan
    return X


def _small_models():
    """Small forests on at most 7 features, so that every subset can be enumerated."""
    Xi, yi = load_iris(return_X_y=True)
    Xb, yb = load_breast_cancer(return_X_y=True)
    Xb = Xb[:, :7]
    Xh = _holes(Xb)
    return {
        "random_forest_multiclass": (
            RandomForestClassifier(8, max_depth=5, random_state=0).fit(Xi, yi), Xi),
        "gradient_boosting_binary": (
            GradientBoostingClassifier(n_estimators=8, max_depth=3, random_state=0).fit(Xb, yb),
            Xb),
        "xgboost_binary_missing": (
            xgb.XGBClassifier(n_estimators=8, max_depth=4, n_jobs=1, random_state=0).fit(Xh, yb),
            Xh),
        "xgboost_multiclass": (
            xgb.XGBClassifier(n_estimators=4, max_depth=3, n_jobs=1, random_state=0).fit(Xi, yi),
            Xi),
        "hist_gradient_boosting_missing": (
            HistGradientBoostingClassifier(max_iter=6, max_depth=4, random_state=0).fit(Xh, yb),
            Xh),
    }


@pytest.fixture(scope="module")
def small_models():
    with threadpool_limits(1):  # tiny fits: extra threads only wait on busy machines
        return _small_models()


ROWS = [0, 3, 57, 101]


@pytest.mark.parametrize("algorithm", ALGORITHMS)
@pytest.mark.parametrize("name", ["random_forest_multiclass", "gradient_boosting_binary",
                                  "xgboost_binary_missing", "xgboost_multiclass",
                                  "hist_gradient_boosting_missing"])
def test_equals_brute_force_shapley_values(small_models, name, algorithm):
    model, X = small_models[name]
    forest = gw.from_estimator(model)
    rows = X[ROWS]
    assert np.isnan(rows).any() == name.endswith("missing")
    c = contributions(forest, rows, algorithm=algorithm)
    for r, x in enumerate(rows):
        # Reference: Shapley's definition over every subset, on the path-dependent
        # expectation of Lundberg, Erion, Lee (2018), computed in this file.
        phi, base = _brute_shapley(forest, x)
        np.testing.assert_allclose(c.values[r], phi, rtol=0, atol=EXACT)
        np.testing.assert_allclose(c.base, base, rtol=0, atol=EXACT)


def test_single_leaf_trees_only_move_the_base(small_models):
    model, X = small_models["gradient_boosting_binary"]
    forest = gw.from_estimator(model)
    leaf = Tree(feature=np.array([-1]), threshold=np.array([0.0]), left=np.array([-1]),
                right=np.array([-1]), missing_left=np.array([False]), value=np.array([[0.25]]),
                depth=np.array([0]), gain=np.array([0.0]), cover=np.array([10.0]))
    grown = replace(forest, trees=[leaf] + forest.trees + [leaf])
    rows = X[:5]
    before, after = contributions(forest, rows), contributions(grown, rows)
    np.testing.assert_allclose(after.values, before.values, rtol=0, atol=EXACT)
    np.testing.assert_allclose(after.base, before.base + 0.5, rtol=0, atol=EXACT)
    # Reference: scikit-learn's decision_function, plus the two invented leaves' 0.5.
    np.testing.assert_allclose(after.explained[:, 0], model.decision_function(rows) + 0.5,
                               rtol=0, atol=EXACT)
    only = replace(forest, trees=[leaf])
    for algorithm in ALGORITHMS:
        c = contributions(only, rows, algorithm=algorithm)
        assert np.all(c.values == 0.0)
        assert c.base[0] == pytest.approx(forest.base_score[0] + 0.25, abs=EXACT)


@pytest.mark.parametrize("algorithm", ALGORITHMS)
@pytest.mark.parametrize("name", ["gradient_boosting_binary", "xgboost_multiclass",
                                  "random_forest_multiclass"])
def test_interactions_equal_brute_force(small_models, name, algorithm):
    model, X = small_models[name]
    forest = gw.from_estimator(model)
    rows = X[ROWS[:3]]
    values = interactions(forest, rows, algorithm=algorithm)
    for r, x in enumerate(rows):
        # Reference: the Shapley interaction index as Lundberg et al. (2020) define it.
        np.testing.assert_allclose(values[r], _brute_interactions(forest, x), rtol=0,
                                   atol=EXACT)
    np.testing.assert_array_equal(values, np.swapaxes(values, 1, 2))


# ------------------------------------------------------------------ the libraries' own figures
@pytest.fixture(scope="module")
def xgb_models():
    Xb, yb = load_breast_cancer(return_X_y=True)
    Xb = _holes(Xb, share=0.05)
    Xw, yw = load_wine(return_X_y=True)
    Xw = _holes(Xw, share=0.05, seed=3)
    binary = xgb.XGBClassifier(n_estimators=60, max_depth=4, n_jobs=1, random_state=0).fit(Xb, yb)
    multi = xgb.XGBClassifier(n_estimators=30, max_depth=3, n_jobs=1, random_state=0).fit(Xw, yw)
    return {"binary": (binary, Xb), "multiclass": (multi, Xw)}


def _xgb_reference(model, X, what):
    """XGBoost's own figures with the outputs last: (n, p+1, K) or (n, p+1, p+1, K)."""
    ref = model.get_booster().predict(xgb.DMatrix(X), **{what: True}).astype(np.float64)
    if what == "pred_contribs":
        return ref[:, :, None] if ref.ndim == 2 else np.moveaxis(ref, 1, 2)
    return ref[..., None] if ref.ndim == 3 else np.moveaxis(ref, 1, 3)


@pytest.mark.parametrize("kind", ["binary", "multiclass"])
def test_xgboost_pred_contribs(xgb_models, kind):
    model, X = xgb_models[kind]
    forest = gw.from_estimator(model)
    c = contributions(forest, X)
    ref = _xgb_reference(model, X, "pred_contribs")
    p = forest.n_features
    # Reference: XGBoost's own TreeSHAP (float32 arithmetic there, hence the tolerance).
    np.testing.assert_allclose(c.values, ref[:, :p], rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(np.broadcast_to(c.base, ref[:, p].shape), ref[:, p], rtol=1e-5,
                               atol=1e-6)
    assert c.output == "margin" and c.values.shape == (X.shape[0], p, forest.n_outputs)
    # Efficiency against our own exact margin (float64 throughout).
    np.testing.assert_allclose(c.explained, forest.decision_function(X), rtol=0, atol=EXACT)


@pytest.mark.parametrize("kind", ["binary", "multiclass"])
def test_xgboost_pred_interactions(xgb_models, kind):
    model, X = xgb_models[kind]
    forest = gw.from_estimator(model)
    rows = X[:40]
    values = interactions(forest, rows)
    ref = _xgb_reference(model, rows, "pred_interactions")
    p = forest.n_features
    # Reference: XGBoost's own Shapley interaction values (float32 there).
    np.testing.assert_allclose(values, ref[:, :p, :p], rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(values.sum(axis=2), contributions(forest, rows).values,
                               rtol=0, atol=EXACT)


def test_lightgbm_pred_contrib():
    import lightgbm as lgb

    X, y = load_breast_cancer(return_X_y=True)
    model = lgb.LGBMClassifier(n_estimators=20, num_leaves=15, verbose=-1, n_jobs=1,
                               random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    c = contributions(forest, X)
    ref = model.predict(X, pred_contrib=True)
    p = forest.n_features
    # Reference: LightGBM's own TreeSHAP (float64).
    np.testing.assert_allclose(c.values[:, :, 0], ref[:, :p], rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(np.broadcast_to(c.base[0], ref[:, p].shape), ref[:, p],
                               rtol=1e-7, atol=1e-9)


@pytest.mark.parametrize("algorithm", ALGORITHMS)
def test_sklearn_efficiency_gradient_boosting_and_random_forest(algorithm):
    Xb, yb = load_breast_cancer(return_X_y=True)
    gb = GradientBoostingClassifier(n_estimators=40, max_depth=3, random_state=0).fit(Xb, yb)
    c = contributions(gw.from_estimator(gb), Xb, algorithm=algorithm)
    assert c.output == "margin"
    # Reference: scikit-learn's decision_function (the log-odds).
    np.testing.assert_allclose(c.explained[:, 0], gb.decision_function(Xb), rtol=0, atol=EXACT)

    Xi, yi = load_iris(return_X_y=True)
    gbm = GradientBoostingClassifier(n_estimators=20, max_depth=2, random_state=0).fit(Xi, yi)
    c = contributions(gw.from_estimator(gbm), Xi, algorithm=algorithm)
    # Reference: scikit-learn's decision_function, one margin per class.
    np.testing.assert_allclose(c.explained, gbm.decision_function(Xi), rtol=0, atol=EXACT)

    Xw, yw = load_wine(return_X_y=True)
    rf = RandomForestClassifier(30, random_state=0).fit(Xw, yw)  # unlimited depth
    c = contributions(gw.from_estimator(rf), Xw, algorithm=algorithm)
    assert c.output == "probability" and c.output_names == ["0", "1", "2"]
    # Reference: scikit-learn's predict_proba (the mean of the trees' probabilities).
    np.testing.assert_allclose(c.explained, rf.predict_proba(Xw), rtol=0, atol=EXACT)


def test_missing_values_hist_gradient_boosting():
    X, y = load_breast_cancer(return_X_y=True)
    X = _holes(X, share=0.15)
    with threadpool_limits(1):
        model = HistGradientBoostingClassifier(max_iter=30, random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    assert forest.compare == "le_float64"
    c = contributions(forest, X)
    # Reference: scikit-learn's decision_function on the same rows with holes.
    np.testing.assert_allclose(c.explained[:, 0], model.decision_function(X), rtol=0,
                               atol=EXACT)
    # A missing value does get a contribution: the path it takes differs from the average.
    assert np.any(c.values[np.isnan(X)] != 0.0)


def test_both_algorithms_agree_on_deep_trees():
    X, y = load_breast_cancer(return_X_y=True)
    et = ExtraTreesClassifier(15, random_state=0).fit(X, y)  # unlimited depth, repeated features
    forest = gw.from_estimator(et)
    assert forest.max_depth >= 12
    a = contributions(forest, X[:100], algorithm="linear")
    b = contributions(forest, X[:100], algorithm="path")
    np.testing.assert_allclose(a.values, b.values, rtol=0, atol=1e-12)
    # Reference: scikit-learn's predict_proba.
    np.testing.assert_allclose(a.explained, et.predict_proba(X[:100]), rtol=0, atol=EXACT)


# ------------------------------------------------------------------ interactions on planted data
def test_interaction_ranking_finds_a_planted_pair():
    # Invented for this test: the target depends on x0 * x1 (and on x2 alone), plus noise.
    rng = np.random.default_rng(0)
    X = rng.uniform(-1, 1, size=(2000, 5))
    y = (X[:, 0] * X[:, 1] + 0.3 * X[:, 2] + 0.1 * rng.normal(size=2000) > 0).astype(int)
    model = xgb.XGBClassifier(n_estimators=60, max_depth=3, n_jobs=1, random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    values = interactions(forest, X[:300])
    np.testing.assert_allclose(values.sum(axis=2), contributions(forest, X[:300]).values,
                               rtol=0, atol=EXACT)
    ranking = interaction_ranking(values, forest.feature_names)
    assert (ranking[0].first, ranking[0].second) == ("x0", "x1")
    assert ranking[0].mean_abs > 3 * ranking[1].mean_abs
    assert len(ranking) == 10 and ranking == sorted(ranking, key=lambda r: -r.mean_abs)
    per_output = interaction_ranking(values, forest.feature_names, output=0)
    assert [(r.first, r.second) for r in per_output] == [(r.first, r.second) for r in ranking]


# ------------------------------------------------------------------ threads, chunks, protocol
def test_threads_chunks_progress_and_cancel(xgb_models):
    model, X = xgb_models["multiclass"]
    forest = gw.from_estimator(model)
    # Properties of our own (no outside reference): threads and chunks change no number.
    one = contributions(forest, X, jobs=1)
    two = contributions(forest, X, jobs=2, chunk_rows=50)
    np.testing.assert_array_equal(one.values, two.values)
    for algorithm in ALGORITHMS:
        np.testing.assert_array_equal(
            interactions(forest, X[:30], jobs=1, algorithm=algorithm),
            interactions(forest, X[:30], jobs=2, chunk_rows=7, algorithm=algorithm))
    np.testing.assert_array_equal(contributions(forest, X[5]).values[0], one.values[5])

    seen = []
    contributions(forest, X, chunk_rows=60, progress=lambda done, total: seen.append((done, total)))
    n = X.shape[0]
    assert seen == [(min(n, e), n) for e in range(60, n + 60, 60)]

    cancel = threading.Event()
    calls = []

    def stop_after_first(done, total):
        calls.append(done)
        cancel.set()

    with pytest.raises(CancelledError):
        contributions(forest, X, chunk_rows=50, progress=stop_after_first, cancel=cancel)
    assert calls == [50]

    for bad in ({"jobs": -1}, {"jobs": 1.5}, {"chunk_rows": 0}, {"algorithm": "sampling"}):
        with pytest.raises(SettingError):
            contributions(forest, X[:2], **bad)


def test_result_as_plain_values(xgb_models):
    model, X = xgb_models["multiclass"]
    forest = gw.from_estimator(model)
    c = contributions(forest, X[:3])
    d = json.loads(json.dumps(c.to_dict()))  # a round trip through JSON, no outside reference
    assert d["output"] == "margin" and d["output_names"] == ["margin(0)", "margin(1)",
                                                            "margin(2)"]
    np.testing.assert_array_equal(np.array(d["values"]), c.values)
    assert len(d["feature_names"]) == forest.n_features
