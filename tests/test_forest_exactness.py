"""The Forest reproduces the source library's predict_proba, predict and apply exactly.

Outside references: scikit-learn's and XGBoost's own predict_proba / predict / apply /
pred_leaf, on scikit-learn's bundled datasets (breast cancer: Wolberg et al., UCI;
wine: Forina et al., UCI; iris: Fisher 1936).
"""

import numpy as np
import pytest
import skops.io as sio
import xgboost as xgb
from sklearn.datasets import load_breast_cancer, load_iris, load_wine
from sklearn.ensemble import (ExtraTreesClassifier, GradientBoostingClassifier,
                              HistGradientBoostingClassifier, RandomForestClassifier)
from sklearn.tree import DecisionTreeClassifier

import grovewise as gw

SKLEARN_TOL = 1e-9  # the contract for scikit-learn models
XGBOOST_TOL = 2e-6  # XGBoost accumulates in float32

DATASETS = {"breast_cancer": load_breast_cancer, "wine": load_wine, "iris": load_iris}


def _data(name, holes):
    X, y = DATASETS[name](return_X_y=True)
    if holes:
        X = X.copy()
        X[np.random.default_rng(7).random(X.shape) < 0.1] = np.nan
    return X, y


def _sklearn_models():
    return {
        "decision_tree": (lambda: DecisionTreeClassifier(random_state=0), True),
        "random_forest": (lambda: RandomForestClassifier(25, random_state=0), True),
        "extra_trees": (lambda: ExtraTreesClassifier(25, random_state=0), True),
        # GradientBoostingClassifier does not accept missing values.
        "gradient_boosting": (lambda: GradientBoostingClassifier(n_estimators=15, max_depth=3,
                                                                 random_state=0), False),
        "hist_gradient_boosting": (lambda: HistGradientBoostingClassifier(max_iter=15,
                                                                          random_state=0), True),
    }


def _library_leaves(model, X):
    if isinstance(model, xgb.XGBClassifier):
        return model.get_booster().predict(xgb.DMatrix(X), pred_leaf=True).astype(np.int64)
    if hasattr(model, "apply"):
        return model.apply(X).reshape(X.shape[0], -1)
    return None


def _check_same(forest, model, X, tol):
    np.testing.assert_allclose(forest.predict_proba(X), model.predict_proba(X), rtol=0, atol=tol)
    np.testing.assert_array_equal(forest.predict(X), model.predict(X))
    leaves = _library_leaves(model, X)
    if leaves is not None:
        np.testing.assert_array_equal(forest.apply(X), leaves)


@pytest.mark.parametrize("dataset", list(DATASETS))
@pytest.mark.parametrize("kind", list(_sklearn_models()))
def test_sklearn_in_memory(dataset, kind):
    make, accepts_nan = _sklearn_models()[kind]
    X, y = _data(dataset, holes=accepts_nan)
    model = make().fit(X, y)
    forest = gw.from_estimator(model)
    assert forest.kind == kind
    assert forest.n_features == X.shape[1]
    np.testing.assert_array_equal(forest.classes_, model.classes_)
    _check_same(forest, model, X, SKLEARN_TOL)


XGB_OBJECTIVES = {"breast_cancer": ["binary:logistic"],
                  "wine": ["multi:softprob", "multi:softmax"],
                  "iris": ["multi:softprob", "multi:softmax"]}


@pytest.mark.parametrize("dataset,objective",
                         [(d, o) for d, objs in XGB_OBJECTIVES.items() for o in objs])
def test_xgboost_in_memory_and_files(dataset, objective, tmp_path):
    X, y = _data(dataset, holes=True)
    model = xgb.XGBClassifier(n_estimators=20, max_depth=3, objective=objective,
                              random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    assert forest.kind == "xgboost"
    _check_same(forest, model, X, XGBOOST_TOL)
    booster_forest = gw.from_estimator(model.get_booster())
    _check_same(booster_forest, model, X, XGBOOST_TOL)
    for suffix in (".json", ".ubj"):
        path = tmp_path / f"model{suffix}"
        model.save_model(path)
        _check_same(gw.load_model(path), model, X, XGBOOST_TOL)


def test_xgboost_base_score_as_stored(tmp_path):
    """A user-set base_score is used as stored (XGBoost's own margin is the reference)."""
    X, y = _data("breast_cancer", holes=True)
    model = xgb.XGBClassifier(n_estimators=5, max_depth=2, base_score=0.3).fit(X, y)
    forest = gw.from_estimator(model)
    margin = model.get_booster().predict(xgb.DMatrix(X), output_margin=True)
    np.testing.assert_allclose(forest.decision_function(X)[:, 0], margin, atol=2e-6)


@pytest.mark.parametrize("kind", list(_sklearn_models()))
def test_sklearn_through_skops_and_trusted_pickle(kind, tmp_path):
    import joblib

    make, accepts_nan = _sklearn_models()[kind]
    X, y = _data("wine", holes=accepts_nan)
    model = make().fit(X, y)
    path = tmp_path / "model.skops"
    sio.dump(model, path)
    _check_same(gw.load_model(path), model, X, SKLEARN_TOL)
    for suffix in (".pkl", ".joblib"):
        p = tmp_path / f"model{suffix}"
        joblib.dump(model, p)
        with pytest.raises(gw.UnsafeModelError):
            gw.load_model(p)
        _check_same(gw.load_model(p, trusted=True), model, X, SKLEARN_TOL)


def test_feature_names_follow_the_model():
    import pandas as pd

    data = load_breast_cancer(as_frame=True)
    model = RandomForestClassifier(5, random_state=0).fit(data.data, data.target)
    forest = gw.from_estimator(model)
    assert forest.has_feature_names
    assert forest.feature_names == list(data.data.columns)
    bare = gw.from_estimator(RandomForestClassifier(5, random_state=0).fit(data.data.values,
                                                                           data.target))
    assert not bare.has_feature_names
    assert bare.feature_names[:2] == ["x0", "x1"]
    assert isinstance(data.data, pd.DataFrame)


def test_string_class_labels():
    X, y = load_iris(return_X_y=True)
    labels = np.array(["setosa", "versicolor", "virginica"])[y]
    model = RandomForestClassifier(10, random_state=0).fit(X, labels)
    forest = gw.from_estimator(model)
    np.testing.assert_array_equal(forest.predict(X), model.predict(X))


def test_float32_boundaries_follow_each_library():
    """Values a hair either side of a threshold go where the library sends them."""
    X, y = load_breast_cancer(return_X_y=True)
    rf = RandomForestClassifier(10, max_depth=4, random_state=0).fit(X, y)
    model = xgb.XGBClassifier(n_estimators=10, max_depth=3).fit(X, y)
    for m, tol in ((rf, SKLEARN_TOL), (model, XGBOOST_TOL)):
        forest = gw.from_estimator(m)
        f, t = forest.trees[0].feature[0], forest.trees[0].threshold[0]
        probe = np.repeat(X[:1], 5, axis=0)
        probe[:, f] = [np.nextafter(t, -np.inf), t, np.nextafter(t, np.inf),
                       np.float32(t), np.nextafter(np.float32(t), np.float32(np.inf))]
        _check_same(forest, m, probe, tol)


def test_unsupported_variants_are_refused():
    X, y = load_iris(return_X_y=True)
    multi = RandomForestClassifier(3, random_state=0).fit(X, np.column_stack([y, y]))
    with pytest.raises(gw.UnsupportedModelError, match="multi-output"):
        gw.from_estimator(multi)
    from sklearn.linear_model import LogisticRegression

    gb = GradientBoostingClassifier(n_estimators=3, init=LogisticRegression(max_iter=500)).fit(X, y)
    with pytest.raises(gw.UnsupportedModelError, match="init"):
        gw.from_estimator(gb)
    with pytest.raises(gw.UnsupportedModelError, match="not a supported model"):
        gw.from_estimator(LogisticRegression())
    with pytest.raises(gw.UnsupportedModelError, match="not fitted"):
        gw.from_estimator(RandomForestClassifier())
