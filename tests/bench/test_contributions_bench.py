"""Benchmark: exact contributions (path-dependent TreeSHAP) against XGBoost's own, same run.

Run on purpose: ``python -m pytest tests/bench -m bench -s``.
Targets: 5,000 x 30 rows, 500 trees of depth 6, one thread: at most 2x the time of XGBoost's
``pred_contribs`` (nthread=1), the goal being faster; one row: at most 50 ms. Both of our exact
algorithms are timed (``linear``, the default, and ``path``, Algorithm 2 of Lundberg, Erion,
Lee 2018); the targets are asserted for the default.
"""

import time

import numpy as np
import pytest
import xgboost as xgb
from sklearn.datasets import make_classification

import grovewise as gw
from grovewise.analysis.contributions import contributions, interactions

from .common import best_time, print_table


@pytest.mark.bench
def test_contributions_speed_against_xgboost():
    # A noisy target and no minimum child weight, so that the trees grow (nearly) full.
    X, y = make_classification(5_000, 30, n_informative=12, flip_y=0.2, class_sep=0.5,
                               random_state=0)
    model = xgb.XGBClassifier(n_estimators=500, max_depth=6, min_child_weight=0, n_jobs=2,
                              random_state=0).fit(X, y)
    booster = model.get_booster()
    booster.set_param({"nthread": 1})
    forest = gw.from_estimator(model)
    dm = xgb.DMatrix(X, nthread=1)
    one = X[17]
    dm_one = xgb.DMatrix(one[None, :], nthread=1)

    start = time.perf_counter()
    contributions(forest, X[:2])  # first call: layout, and compiling unless cached on disk
    first_call = time.perf_counter() - start
    contributions(forest, X[:2], algorithm="path")
    interactions(forest, X[:2])

    theirs, ref = best_time(lambda: booster.predict(dm, pred_contribs=True), repeats=1)
    ours, c = best_time(lambda: contributions(forest, X, jobs=1), repeats=3)
    ours_path, c_path = best_time(lambda: contributions(forest, X, jobs=1, algorithm="path"),
                                  repeats=1)
    ours2, c2 = best_time(lambda: contributions(forest, X, jobs=2), repeats=3)
    theirs_one, _ = best_time(lambda: booster.predict(dm_one, pred_contribs=True), repeats=20)
    ours_one, c_one = best_time(lambda: contributions(forest, one), repeats=20)
    ours_one_path, _ = best_time(lambda: contributions(forest, one, algorithm="path"), repeats=20)
    rows_int = X[:50]
    dm_int = xgb.DMatrix(rows_int, nthread=1)
    theirs_int, ref_int = best_time(lambda: booster.predict(dm_int, pred_interactions=True),
                                    repeats=1)
    ours_int, v_int = best_time(lambda: interactions(forest, rows_int, jobs=1), repeats=1)

    nodes = sum(t.n_nodes for t in forest.trees)
    print_table(
        f"Contributions benchmark: XGBoost 500 trees of depth 6 ({nodes} nodes), 30 features",
        ["setting", "grovewise (s)", "baseline", "baseline (s)", "ratio ours/baseline"],
        [
            ["first call (layout + compile or load)", first_call, "-", "-", "-"],
            ["5,000 rows, linear, jobs=1", ours, "XGBoost pred_contribs nthread=1", theirs,
             ours / theirs],
            ["5,000 rows, path (Algorithm 2), jobs=1", ours_path,
             "XGBoost pred_contribs nthread=1", theirs, ours_path / theirs],
            ["5,000 rows, linear, jobs=2", ours2, "XGBoost pred_contribs nthread=1", theirs,
             ours2 / theirs],
            ["1 row, linear", ours_one, "target", 0.05, ours_one / 0.05],
            ["1 row, linear", ours_one, "XGBoost pred_contribs nthread=1", theirs_one,
             ours_one / theirs_one],
            ["1 row, path (Algorithm 2)", ours_one_path, "target", 0.05, ours_one_path / 0.05],
            ["interactions 50 rows, linear, jobs=1", ours_int,
             "XGBoost pred_interactions nthread=1", theirs_int, ours_int / theirs_int],
        ])

    p = forest.n_features
    # XGBoost sums 500 trees in float32: agreement to ~1e-5 of margins of size ~10.
    np.testing.assert_allclose(c.values[:, :, 0], ref[:, :p], rtol=0, atol=1e-4)
    np.testing.assert_allclose(c_path.values, c.values, rtol=0, atol=1e-10)
    np.testing.assert_array_equal(c2.values, c.values)
    np.testing.assert_array_equal(c_one.values[0], c.values[17])
    np.testing.assert_allclose(v_int[..., 0], ref_int[:, :p, :p], rtol=0, atol=1e-4)
    assert ours <= 2 * theirs
    assert ours_one <= 0.05
