"""CatBoost classifiers converted into the Forest reproduce CatBoost's own predictions exactly.

Outside references: CatBoost's own ``predict_proba``, ``predict(prediction_type=
"RawFormulaVal")``, ``predict(prediction_type="Probability")``, ``calc_leaf_indexes``,
``get_tree_leaf_counts`` and ``classes_`` (catboost 1.2.10), on scikit-learn's bundled
datasets (breast cancer: Wolberg et al., UCI; wine: Forina et al., UCI; iris: Fisher 1936),
with missing values put into 10% of the cells for training and prediction.
"""

import json
import sys
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

catboost = pytest.importorskip("catboost")
from catboost import CatBoost, CatBoostClassifier, CatBoostRegressor  # noqa: E402
from sklearn.datasets import load_breast_cancer, load_iris, load_wine  # noqa: E402

import grovewise as gw  # noqa: E402
from grovewise.errors import ModelFileError, UnsupportedModelError  # noqa: E402
from grovewise.loaders import load_native  # noqa: E402
from grovewise.loaders.catboost_models import (is_catboost_model,  # noqa: E402
                                               read_catboost_json)
from grovewise.loaders.exactness import check_exactness  # noqa: E402

TOL = 1e-6  # the contract for CatBoost models
DATASETS = {"breast_cancer": load_breast_cancer, "wine": load_wine, "iris": load_iris}
NAN_MODES = ("Min", "Max")


def _data(name):
    X, y = DATASETS[name](return_X_y=True)
    X = X.copy()
    X[np.random.default_rng(7).random(X.shape) < 0.1] = np.nan
    return X, y


def _fit(X, y, **params):
    settings = dict(iterations=30, depth=4, thread_count=1, random_seed=0,
                    allow_writing_files=False, verbose=False)
    return CatBoostClassifier(**{**settings, **params}).fit(X, y)


_MODELS = {}


def _model(name, nan_mode="Min"):
    """One trained model per dataset and nan_mode, shared by the tests (training is the cost)."""
    key = (name, nan_mode)
    if key not in _MODELS:
        X, y = _data(name)
        _MODELS[key] = (_fit(X, y, nan_mode=nan_mode), X)
    return _MODELS[key]


def _catboost_leaves_as_nodes(model, X, per_tree):
    """CatBoost's calc_leaf_indexes as the Forest's node ids: a symmetric tree with L leaves
    is a full binary tree in heap order, so leaf b is node L - 1 + b; a multi-class tree is
    one Forest tree per class."""
    leaf = model.calc_leaf_indexes(X).astype(np.int64)
    counts = np.asarray(model.get_tree_leaf_counts(), dtype=np.int64)
    return np.repeat(leaf + (counts - 1)[None, :], per_tree, axis=1)


def _assert_same_as_catboost(forest, model, X):
    # CatBoost's own predict_proba and classes_.
    proba = model.predict_proba(X)
    assert np.max(np.abs(forest.predict_proba(X) - proba)) <= TOL
    np.testing.assert_array_equal(forest.classes_, model.classes_)
    np.testing.assert_array_equal(forest.predict(X), model.classes_[np.argmax(proba, axis=1)])
    # CatBoost's own raw margin (RawFormulaVal).
    raw = np.asarray(model.predict(X, prediction_type="RawFormulaVal")).reshape(X.shape[0], -1)
    assert np.max(np.abs(forest.decision_function(X) - raw)) <= TOL
    # CatBoost's own calc_leaf_indexes.
    np.testing.assert_array_equal(forest.apply(X),
                                  _catboost_leaves_as_nodes(model, X, forest.n_outputs))


# ------------------------------------------------------------------ in memory
@pytest.mark.parametrize("nan_mode", NAN_MODES)
@pytest.mark.parametrize("dataset", list(DATASETS))
def test_in_memory_equals_catboost(dataset, nan_mode):
    model, X = _model(dataset, nan_mode)
    forest = gw.from_estimator(model)
    n_classes = len(model.classes_)
    assert forest.kind == "catboost"
    assert forest.link == ("logistic" if n_classes == 2 else "softmax")
    assert forest.n_features == X.shape[1]
    assert forest.n_trees == model.tree_count_ * (1 if n_classes == 2 else n_classes)
    assert forest.source["library"] == "catboost"
    assert forest.source["version"] == catboost.__version__
    assert forest.source["estimator"] == "CatBoostClassifier"
    assert forest.source["loss"] == ("Logloss" if n_classes == 2 else "MultiClass")
    assert np.isnan(X).any()
    _assert_same_as_catboost(forest, model, X)
    check = check_exactness(forest, model, X)
    assert check.passed and check.leaves_equal is True, check.text()


# ------------------------------------------------------------------ files
@pytest.mark.parametrize("dataset", list(DATASETS))
def test_cbm_and_json_files_equal_catboost(dataset, tmp_path):
    model, X = _model(dataset)
    for name, fmt in (("model.cbm", "cbm"), ("model.json", "json")):
        path = tmp_path / name
        model.save_model(str(path), format=fmt)
        forest = gw.load_model(path)
        assert forest.source["file"] == str(path)
        assert forest.source["loss"] == ("Logloss" if dataset == "breast_cancer" else "MultiClass")
        # The file's class labels are CatBoost's class_names, the model's classes_.
        _assert_same_as_catboost(forest, model, X)
        native = load_native(path)
        assert isinstance(native, CatBoost)
        check = check_exactness(forest, native, X)
        assert check.passed and check.leaves_equal is True, check.text()
        assert check.max_abs_proba_diff <= TOL


# ------------------------------------------------------------------ CatBoost's rules
@pytest.mark.filterwarnings("ignore:overflow encountered:RuntimeWarning")  # the 1e39 rows
def test_comparison_rule_is_float32_greater_than_border_goes_right():
    """CatBoost rounds a value to float32 and sends it right when it is > the border, so a
    float64 value just above a border that float32 rounds onto it goes left."""
    model, X = _model("iris")
    doc = _export(model)
    base = np.nanmedian(X, axis=0)
    rows, onto_border = [], []

    def add(col, v):
        row = base.copy()
        row[col] = v
        rows.append(row)

    for feat in doc["features_info"]["float_features"]:
        col = feat["flat_feature_index"]
        for v in (np.inf, -np.inf, 1e39, -1e39):  # beyond float32's range
            add(col, v)
        for border in feat["borders"]:
            b32 = np.float32(border)
            if abs(float(b32)) == np.finfo(np.float32).max:  # nan_mode Min's border
                add(col, float(b32))
                continue
            for v in (float(b32), float(np.nextafter(b32, np.float32(np.inf))),
                      float(np.nextafter(b32, np.float32(-np.inf)))):
                add(col, v)
            above64 = float(border) + abs(float(border)) * 1e-9
            assert above64 > border and np.float32(above64) == b32
            add(col, above64)  # > border in float64, == border in float32
            onto_border.append(len(rows) - 1)
    R = np.array(rows)
    forest = gw.from_estimator(model)
    _assert_same_as_catboost(forest, model, R)
    # CatBoost's own leaf indexes: the row a hair above a border in float64 lands where the
    # row exactly on the border lands (the first of its group of four rows).
    leaf = model.calc_leaf_indexes(R)
    for i in onto_border:
        np.testing.assert_array_equal(leaf[i], leaf[i - 3])
    assert len(onto_border) > 10
    # ... which a float64 comparison would get wrong.
    as64 = replace(forest, compare="le_float64")
    assert not np.array_equal(as64.apply(R), forest.apply(R))


def test_missing_values_follow_nan_mode():
    """nan_mode Min sends NaN left (CatBoost exports nan_value_treatment AsFalse), Max right
    (AsTrue); a feature without NaN in training (AsIs) sends it left too."""
    for nan_mode, side in (("Min", "AsFalse"), ("Max", "AsTrue")):
        model, X = _model("wine", nan_mode)
        doc = _export(model)
        assert {f["nan_value_treatment"] for f in doc["features_info"]["float_features"]} == {side}
        forest = gw.from_estimator(model)
        inner = [t.missing_left[t.left >= 0] for t in forest.trees]
        assert all(m.all() if nan_mode == "Min" else not m.any() for m in inner)
        # A row of NaN only: CatBoost's own leaf index is 0 (all left) or all ones (all right).
        empty = np.full((1, X.shape[1]), np.nan)
        counts = np.asarray(model.get_tree_leaf_counts())
        expected = np.zeros_like(counts) if nan_mode == "Min" else counts - 1
        np.testing.assert_array_equal(model.calc_leaf_indexes(empty)[0], expected)
        _assert_same_as_catboost(forest, model, empty)
    X, y = DATASETS["breast_cancer"](return_X_y=True)
    model = _fit(X, y, iterations=10, nan_mode="Max")  # no NaN in training
    assert {f["nan_value_treatment"] for f in _export(model)["features_info"]["float_features"]} \
        == {"AsIs"}
    holes = X.copy()
    holes[np.random.default_rng(3).random(X.shape) < 0.2] = np.nan
    _assert_same_as_catboost(gw.from_estimator(model), model, holes)


def _export(model):
    import tempfile
    with tempfile.TemporaryDirectory() as tmp:
        path = f"{tmp}/model.json"
        model.save_model(path, format="json")
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)


@pytest.mark.parametrize("params", [
    {"boost_from_average": True},  # a bias in scale_and_bias
    {"loss_function": "CrossEntropy"},
    {"loss_function": "Focal:focal_alpha=0.3;focal_gamma=2"},
])
def test_other_binary_losses_and_bias(params):
    X, y = _data("breast_cancer")
    model = _fit(X, y, iterations=15, **params)
    forest = gw.from_estimator(model)
    if params.get("boost_from_average"):
        assert forest.base_score[0] != 0.0
    _assert_same_as_catboost(forest, model, X)


def test_labels_and_feature_names_from_a_table():
    data = load_iris()
    X = pd.DataFrame(data.data, columns=data.feature_names)
    y = data.target_names[data.target]
    model = _fit(X, y, iterations=10)
    forest = gw.from_estimator(model)
    assert list(forest.classes_) == ["setosa", "versicolor", "virginica"]
    assert forest.feature_names == list(data.feature_names) and forest.has_feature_names
    _assert_same_as_catboost(forest, model, data.data)


# ------------------------------------------------------------------ what is refused
def test_categorical_feature_is_refused_naming_it(tmp_path):
    X, y = load_iris(return_X_y=True)
    table = pd.DataFrame(X, columns=["a", "b", "c", "d"])
    table["petal_shade"] = np.where(X[:, 2] > 3.0, "dark", "light")
    model = _fit(table, y, iterations=5, cat_features=["petal_shade"])
    with pytest.raises(UnsupportedModelError, match="petal_shade"):
        gw.from_estimator(model)
    for name, fmt in (("cat.cbm", "cbm"), ("cat.json", "json")):
        path = tmp_path / name
        model.save_model(str(path), format=fmt)
        with pytest.raises(UnsupportedModelError) as err:
            gw.load_model(path)
        assert "petal_shade" in str(err.value) and str(path) in str(err.value)


def test_unsupported_variants_are_refused(tmp_path):
    X, y = load_iris(return_X_y=True)
    with pytest.raises(UnsupportedModelError, match="SymmetricTree"):
        gw.from_estimator(_fit(X, y, iterations=5, grow_policy="Depthwise"))
    with pytest.raises(UnsupportedModelError, match="MultiClassOneVsAll"):
        gw.from_estimator(_fit(X, y, iterations=5, loss_function="MultiClassOneVsAll"))
    with pytest.raises(UnsupportedModelError, match="not fitted"):
        gw.from_estimator(CatBoostClassifier())
    regressor = CatBoostRegressor(iterations=5, verbose=False, allow_writing_files=False,
                                  thread_count=1).fit(X, y)
    path = tmp_path / "regressor.cbm"
    regressor.save_model(str(path))
    with pytest.raises(UnsupportedModelError, match="RMSE") as err:
        gw.load_model(path)
    assert str(path) in str(err.value)
    with pytest.raises(UnsupportedModelError):
        gw.from_estimator(regressor)  # no family takes a regressor


def test_damaged_file_names_it(tmp_path):
    model, _ = _model("iris")
    good = tmp_path / "good.cbm"
    model.save_model(str(good))
    bad = tmp_path / "bad.cbm"
    bad.write_bytes(good.read_bytes()[:200])
    with pytest.raises(ModelFileError, match="bad.cbm"):
        gw.load_model(bad)


def test_recognises_catboost_objects():
    X, y = load_iris(return_X_y=True)
    assert is_catboost_model(_model("iris")[0])
    booster = CatBoost({"loss_function": "MultiClass", "iterations": 3, "verbose": False,
                        "allow_writing_files": False, "thread_count": 1}).fit(X, y)
    assert is_catboost_model(booster)
    assert not is_catboost_model(CatBoost({"loss_function": "RMSE"}))
    assert not is_catboost_model(CatBoostRegressor())
    assert not is_catboost_model(object())
    forest = gw.from_estimator(booster)
    assert forest.source["estimator"] == "CatBoost"
    proba = booster.predict(X, prediction_type="Probability")  # CatBoost's own probabilities
    assert np.max(np.abs(forest.predict_proba(X) - proba)) <= TOL


def test_without_catboost_the_message_says_how_to_install(tmp_path, monkeypatch):
    model, _ = _model("iris")
    path = tmp_path / "model.json"
    model.save_model(str(path), format="json")
    doc = json.loads(path.read_text())
    monkeypatch.setitem(sys.modules, "catboost", None)  # import catboost now fails
    with pytest.raises(UnsupportedModelError, match=r'pip install "grovewise\[catboost\]"'):
        read_catboost_json(doc, path)


# ------------------------------------------------------------------ contributions
@pytest.mark.parametrize("dataset", ["breast_cancer", "wine"])
def test_contributions_add_up_to_the_margin(dataset):
    """Efficiency of Shapley values: base + sum of contributions = the raw margin, which is
    CatBoost's own RawFormulaVal."""
    model, X = _model(dataset)
    forest = gw.from_estimator(model)
    rows = X[:60]
    result = gw.contributions(forest, rows)
    margin = forest.decision_function(rows)
    np.testing.assert_allclose(result.base + result.values.sum(axis=1), margin, rtol=0, atol=1e-9)
    raw = np.asarray(model.predict(rows, prediction_type="RawFormulaVal")).reshape(60, -1)
    np.testing.assert_allclose(margin, raw, rtol=0, atol=TOL)
