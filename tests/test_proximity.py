"""Breiman's proximity against its definition computed from the libraries' own leaf ids.

Definition (Breiman 2001, "Random Forests", Machine Learning 45:5-32): the proximity of two
samples is the share of trees in which they reach the same leaf. References: scikit-learn's
``apply`` and XGBoost's ``predict(..., pred_leaf=True)``; bundled datasets (breast cancer,
wine).
"""

from __future__ import annotations

import json
import tracemalloc

import numpy as np
import pytest
import xgboost as xgb
from sklearn.datasets import load_breast_cancer, load_wine, make_classification
from sklearn.ensemble import GradientBoostingClassifier, RandomForestClassifier

import grovewise as gw
from grovewise.analysis import (most_similar, pairs_above_thresholds, proximity,
                                proximity_pairs)
from grovewise.errors import SettingError


def definition_from_leaves(leaves: np.ndarray) -> np.ndarray:
    """P[i, j] = share of columns (trees) where rows i and j hold the same leaf id."""
    n, n_trees = leaves.shape
    P = np.zeros((n, n))
    for t in range(n_trees):
        P += leaves[:, t][:, None] == leaves[:, t][None, :]
    return P / n_trees


def threshold_dense(P: np.ndarray, threshold: float):
    i, j = np.nonzero(np.triu(P >= threshold, k=1))
    return i, j, P[i, j]


@pytest.fixture(scope="module")
def cancer_forest():
    X, y = load_breast_cancer(return_X_y=True)
    rf = RandomForestClassifier(n_estimators=20, min_samples_leaf=5, random_state=0).fit(X, y)
    return rf, X


@pytest.fixture(scope="module")
def cancer_reference(cancer_forest):
    rf, X = cancer_forest
    return definition_from_leaves(rf.apply(X))  # scikit-learn's apply: leaf id per tree


def test_dense_proximity_equals_definition_from_sklearn_apply(cancer_forest, cancer_reference):
    rf, X = cancer_forest
    P = proximity(gw.from_estimator(rf), X, max_block_entries=20_000)  # many row blocks
    np.testing.assert_array_equal(P, cancer_reference)
    assert np.all(np.diag(P) == 1.0) and np.array_equal(P, P.T)


def test_gradient_boosting_proximity_counts_every_class_tree():
    X, y = load_wine(return_X_y=True)
    gb = GradientBoostingClassifier(n_estimators=8, max_depth=2, random_state=0).fit(X, y)
    # scikit-learn's apply gives (n, n_estimators, n_classes) leaf ids: every tree counts.
    ref = definition_from_leaves(gb.apply(X).reshape(X.shape[0], -1))
    np.testing.assert_array_equal(proximity(gw.from_estimator(gb), X), ref)


def test_xgboost_proximity_equals_definition_from_pred_leaf():
    X, y = load_wine(return_X_y=True)
    model = xgb.XGBClassifier(n_estimators=6, max_depth=3, random_state=0).fit(X, y)
    leaves = model.get_booster().predict(xgb.DMatrix(X), pred_leaf=True)
    forest = gw.from_estimator(model)
    np.testing.assert_array_equal(proximity(forest, X), definition_from_leaves(leaves))
    pairs = proximity_pairs(forest, X, 0.8)
    assert "all trees" in pairs.definition and "18 trees" in pairs.definition


@pytest.mark.parametrize("threshold", [0.0, 0.25, 0.5, 0.9, 1.0])
def test_proximity_pairs_equal_thresholding_the_dense_matrix(cancer_forest, cancer_reference,
                                                             threshold):
    rf, X = cancer_forest
    i, j, p = proximity_pairs(gw.from_estimator(rf), X, threshold, max_block_entries=30_000)
    ri, rj, rp = threshold_dense(cancer_reference, threshold)
    np.testing.assert_array_equal(i, ri)
    np.testing.assert_array_equal(j, rj)
    np.testing.assert_array_equal(p, rp)
    assert np.all(i < j)


def test_pair_counts_for_several_thresholds(cancer_forest, cancer_reference):
    rf, X = cancer_forest
    ts = [0.0, 0.1, 0.5, 0.75, 0.9, 0.95, 1.0]
    counts = pairs_above_thresholds(gw.from_estimator(rf), X, ts, max_block_entries=50_000)
    upper = cancer_reference[np.triu_indices(X.shape[0], k=1)]
    assert counts.n_pairs.tolist() == [int((upper >= t).sum()) for t in ts]
    assert counts.n_total_pairs == X.shape[0] * (X.shape[0] - 1) // 2 == counts.histogram.sum()
    json.dumps(counts.to_dict(), allow_nan=False)
    assert [r["pairs"] for r in counts.to_rows()] == counts.n_pairs.tolist()


def test_most_similar_ranks_by_proximity_then_row(cancer_forest, cancer_reference):
    rf, X = cancer_forest
    forest = gw.from_estimator(rf)
    for index in (0, 37, 400):
        res = most_similar(forest, X, index, k=7)
        row = cancer_reference[index].copy()
        row[index] = -1.0
        ref = np.lexsort((np.arange(row.size), -row))[:7]
        np.testing.assert_array_equal(res.neighbours, ref)
        np.testing.assert_array_equal(res.proximity, row[ref])
    with pytest.raises(SettingError, match="row number"):
        most_similar(forest, X, X.shape[0])
    with pytest.raises(SettingError, match="k="):
        most_similar(forest, X, 0, k=0)


def test_proximity_pairs_memory_stays_below_the_dense_matrix():
    X, y = make_classification(n_samples=3000, n_features=10, random_state=0)
    rf = RandomForestClassifier(n_estimators=15, max_depth=6, random_state=0).fit(X, y)
    forest = gw.from_estimator(rf)
    tracemalloc.start()
    res = proximity_pairs(forest, X, 0.9, max_block_entries=300_000)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    dense_bytes = X.shape[0] ** 2 * 8  # the float64 n x n matrix it avoids
    assert peak < dense_bytes / 5, f"peak {peak / 1e6:.1f} MB"
    # Same pairs as the definition (scikit-learn's apply) thresholded.
    ri, rj, _ = threshold_dense(definition_from_leaves(rf.apply(X)), 0.9)
    np.testing.assert_array_equal(res.i, ri)
    np.testing.assert_array_equal(res.j, rj)


def test_bad_proximity_settings(cancer_forest):
    rf, X = cancer_forest
    forest = gw.from_estimator(rf)
    for bad in (-0.1, 1.5, "high", None):
        with pytest.raises(SettingError, match="threshold"):
            proximity_pairs(forest, X[:20], bad)
    with pytest.raises(SettingError, match="max_block_entries"):
        proximity(forest, X[:20], max_block_entries=0)
    stump = RandomForestClassifier(n_estimators=1, max_depth=1, random_state=0)
    tiny = gw.from_estimator(stump.fit(X, rf.predict(X)))
    with pytest.raises(SettingError, match="proximity_pairs"):
        proximity(tiny, np.repeat(X[:1], 20_001, axis=0))  # would be 3.2 GB dense
