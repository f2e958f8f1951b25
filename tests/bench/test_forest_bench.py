"""Benchmark: converting and running a large forest, against scikit-learn's own in the same run.

Run on purpose: ``python -m pytest tests/bench -m bench -s``.
Targets: conversion at most 1 s; predict_proba within 3x of scikit-learn's.
"""

import time

import numpy as np
import pytest
from sklearn.datasets import make_classification
from sklearn.ensemble import RandomForestClassifier

import grovewise as gw

from .common import best_time, print_table


@pytest.mark.bench
def test_forest_conversion_and_prediction_speed():
    X, y = make_classification(20_000, 30, n_informative=12, random_state=0)
    model = RandomForestClassifier(500, n_jobs=2, random_state=0).fit(X, y)
    model.set_params(n_jobs=None)  # scikit-learn's predictions single-threaded, as by default

    convert, forest = best_time(lambda: gw.from_estimator(model), repeats=3)
    start = time.perf_counter()
    forest.predict_proba(X[:10])  # first call builds the flat layout (and compiles, if not cached)
    first_call = time.perf_counter() - start
    layout, _ = best_time(lambda: gw.from_estimator(model)._flat, repeats=3)

    ours_pp, p_ours = best_time(lambda: forest.predict_proba(X))
    theirs_pp, p_theirs = best_time(lambda: model.predict_proba(X))
    ours_apply, a_ours = best_time(lambda: forest.apply(X))
    theirs_apply, a_theirs = best_time(lambda: model.apply(X))
    model.set_params(n_jobs=2)
    theirs_pp2, _ = best_time(lambda: model.predict_proba(X))

    nodes = sum(t.n_nodes for t in forest.trees)
    print_table(
        f"Forest benchmark: 500 trees, unlimited depth, {nodes} nodes, 20,000 x 30 rows",
        ["setting", "grovewise (s)", "baseline", "baseline (s)", "ratio ours/baseline"],
        [
            ["conversion (from_estimator)", convert, "target", 1.0, convert / 1.0],
            ["flat layout (built once, lazily)", layout, "-", "-", "-"],
            ["first call (layout + compile)", first_call, "-", "-", "-"],
            ["predict_proba", ours_pp, "scikit-learn n_jobs=None", theirs_pp, ours_pp / theirs_pp],
            ["predict_proba", ours_pp, "scikit-learn n_jobs=2", theirs_pp2, ours_pp / theirs_pp2],
            ["apply", ours_apply, "scikit-learn n_jobs=None", theirs_apply, ours_apply / theirs_apply],
        ])
    np.testing.assert_allclose(p_ours, p_theirs, atol=1e-9, rtol=0)
    np.testing.assert_array_equal(a_ours, a_theirs)
    assert convert <= 1.0
    assert ours_pp <= 3 * theirs_pp
