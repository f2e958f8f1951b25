"""LightGBM models read into the Forest, checked against LightGBM itself.

References named beside each check: LightGBM's own ``predict_proba``, ``predict(raw_score=True)``,
``predict(pred_leaf=True)`` and ``predict(pred_contrib=True)``. Data: scikit-learn's breast
cancer (binary) and wine (three classes), with 5% of the cells made missing, and a table made
for the test with a categorical column of 70 categories (codes drawn at random, each with its
own effect on the log-odds).
"""

import json

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_wine

import grovewise as gw
from grovewise.loaders import load_native
from grovewise.loaders.exactness import check_exactness
from grovewise.loaders.lightgbm_models import forest_from_lightgbm_dump

SETTINGS = {"default": {}, "zero_as_missing": {"zero_as_missing": True},
            "no_missing": {"use_missing": False}}


def _with_missing(loader, seed=0, zeros=False):
    X, y = loader(return_X_y=True)
    rng = np.random.default_rng(seed)
    X = X.copy()
    X[rng.random(X.shape) < 0.05] = np.nan
    if zeros:
        X[rng.random(X.shape) < 0.05] = 0.0
    return X, y


def _leaf_nodes(forest, booster, X):
    """LightGBM's leaf index as the Forest's node id (internal nodes come first)."""
    first_leaf = np.array([t.n_nodes - t.n_leaves for t in forest.trees])
    return booster.predict(X, pred_leaf=True) + first_leaf


@pytest.mark.parametrize("loader", [load_breast_cancer, load_wine])
@pytest.mark.parametrize("setting", sorted(SETTINGS))
def test_probabilities_margins_and_leaves_equal_lightgbm(loader, setting):
    X, y = _with_missing(loader, zeros=setting == "zero_as_missing")
    model = lgb.LGBMClassifier(n_estimators=40, num_leaves=15, verbose=-1, random_state=0,
                               **SETTINGS[setting]).fit(X, y)
    forest = gw.from_estimator(model)
    # reference: LightGBM's predict_proba, to the contract's 1e-9
    assert np.abs(forest.predict_proba(X) - model.predict_proba(X)).max() <= 1e-9
    # reference: LightGBM's raw margin
    raw = model.predict(X, raw_score=True)
    ours = forest.decision_function(X)
    assert np.abs(ours[:, 0] - raw if raw.ndim == 1 else ours - raw).max() <= 1e-12
    # reference: LightGBM's classes and pred_leaf
    assert np.array_equal(forest.predict(X), model.predict(X))
    assert np.array_equal(forest.apply(X), _leaf_nodes(forest, model.booster_, X))
    rules = {int(r) for t in forest.trees for r in t.rules[t.feature >= 0]}
    expected = {"default": 0, "zero_as_missing": 1, "no_missing": 2}[setting]
    assert expected in rules


def test_missing_and_zero_go_the_default_side_exactly():
    """Probes at the edges of the rules: NaN, signed zero, the float32 1e-35 zero band."""
    X, y = _with_missing(load_breast_cancer, zeros=True)
    model = lgb.LGBMClassifier(n_estimators=30, num_leaves=7, verbose=-1, zero_as_missing=True,
                               random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    probes = np.tile(X[:4], (8, 1))
    values = [np.nan, 0.0, -0.0, 1e-35, -1e-35, 1.1e-35, 1e-30, -2e-35]
    for i, v in enumerate(values):
        probes[4 * i:4 * i + 4, :] = v
    assert np.abs(forest.predict_proba(probes) - model.predict_proba(probes)).max() <= 1e-9
    assert np.array_equal(forest.apply(probes), _leaf_nodes(forest, model.booster_, probes))


def _categorical_table(n=3000, seed=0):
    rng = np.random.default_rng(seed)
    code = rng.integers(0, 70, n)
    x = rng.normal(size=n)
    effect = rng.normal(size=70) * 2
    y = (rng.random(n) < 1 / (1 + np.exp(-(effect[code] + x)))).astype(int)
    code = code.astype(float)
    code[rng.random(n) < 0.1] = np.nan
    return np.column_stack([x, code]), y


def test_categorical_bitsets_reproduce_lightgbm_on_every_kind_of_value():
    X, y = _categorical_table()
    model = lgb.LGBMClassifier(n_estimators=30, num_leaves=8, verbose=-1, min_data_per_group=10,
                               cat_smooth=1, random_state=0).fit(X, y, categorical_feature=[1])
    forest = gw.from_estimator(model)
    assert forest.n_categorical_splits > 20 and forest.is_categorical(1)
    assert not forest.is_categorical(0)
    # codes beyond a bitset, negative, fractional in (-1, 0) (LightGBM truncates), huge, NaN
    values = [np.nan, -1, -0.5, -0.0, 0, 0.5, 1, 2.7, 31, 32, 63, 64, 69, 70, 100, 1e10, -1e10]
    probes = np.tile(X[:5], (len(values), 1))
    probes[:, 1] = np.repeat(values, 5)
    for data in (X, probes):
        # reference: LightGBM's predict_proba and pred_leaf
        assert np.abs(forest.predict_proba(data) - model.predict_proba(data)).max() <= 1e-9
        assert np.array_equal(forest.apply(data), _leaf_nodes(forest, model.booster_, data))


def test_pandas_categories_name_the_codes_and_the_proof_passes():
    X, y = _categorical_table()
    codes = np.nan_to_num(X[:, 1], nan=-1).astype(int)
    names = [f"branch {i}" for i in range(70)]
    frame = pd.DataFrame({"income": X[:, 0], "branch": pd.Categorical.from_codes(codes, names)})
    model = lgb.LGBMClassifier(n_estimators=30, num_leaves=8, verbose=-1, min_data_per_group=10,
                               cat_smooth=1, random_state=0).fit(frame, y)
    forest = gw.from_estimator(model)
    assert forest.feature_names == ["income", "branch"] and forest.has_feature_names
    assert forest.categories[1] == names
    assert forest.category_name(1, 3.0) == "branch 3"
    # reference: LightGBM's predict_proba on the data frame itself
    assert np.abs(forest.predict_proba(X) - model.predict_proba(frame)).max() <= 1e-9
    check = check_exactness(forest, model, X)
    assert check.passed and check.leaves_equal and check.library == "lightgbm"


def test_model_text_and_dump_files(tmp_path):
    X, y = _with_missing(load_wine)
    model = lgb.LGBMClassifier(n_estimators=20, num_leaves=7, verbose=-1, random_state=0).fit(X, y)
    text = tmp_path / "wine model.txt"
    model.booster_.save_model(str(text))
    dump = tmp_path / "wine_dump.json"
    dump.write_text(json.dumps(model.booster_.dump_model()))
    from_text = gw.load_model(text)
    from_dump = gw.load_model(dump)
    expected = model.predict_proba(X)  # reference: LightGBM's predict_proba
    assert np.abs(from_text.predict_proba(X) - expected).max() <= 1e-9
    assert np.abs(from_dump.predict_proba(X) - expected).max() <= 1e-9
    assert np.array_equal(from_text.apply(X), from_dump.apply(X))
    # The proof on the text file compares with LightGBM; a dump cannot be read back by it.
    native = load_native(text)
    assert check_exactness(from_text, native, X).passed
    dump_check = check_exactness(from_dump, load_native(dump), X)
    assert dump_check.no_reference and "dump_model" in dump_check.text()


def test_dump_and_text_give_the_same_forest_with_categories():
    X, y = _categorical_table()
    model = lgb.LGBMClassifier(n_estimators=15, num_leaves=8, verbose=-1, min_data_per_group=10,
                               cat_smooth=1, random_state=0).fit(X, y, categorical_feature=[1])
    from_dump = forest_from_lightgbm_dump(model.booster_.dump_model())
    from_text = gw.from_estimator(model.booster_)
    assert np.array_equal(from_dump.apply(X), from_text.apply(X))
    assert np.abs(from_dump.predict_proba(X) - model.predict_proba(X)).max() <= 1e-9


def test_linear_trees_and_other_objectives_are_refused(tmp_path):
    X, y = load_breast_cancer(return_X_y=True)
    linear = lgb.LGBMClassifier(n_estimators=3, linear_tree=True, verbose=-1).fit(X, y)
    with pytest.raises(gw.UnsupportedModelError, match="linear_tree"):
        gw.from_estimator(linear)
    regressor = lgb.LGBMRegressor(n_estimators=3, verbose=-1).fit(X, y)
    with pytest.raises(gw.UnsupportedModelError, match="not a classifier"):
        gw.from_estimator(regressor)
    path = tmp_path / "regression.txt"
    regressor.booster_.save_model(str(path))
    with pytest.raises(gw.UnsupportedModelError, match="objective 'regression'"):
        gw.load_model(path)


def test_damaged_text_files_are_named(tmp_path):
    X, y = load_breast_cancer(return_X_y=True)
    model = lgb.LGBMClassifier(n_estimators=5, verbose=-1).fit(X, y)
    text = model.booster_.model_to_string()
    cases = {
        "truncated.txt": text[: len(text) // 2],
        "not_a_model.txt": "hello\n",
        "bad_numbers.txt": text.replace("leaf_value=", "leaf_value=abc ", 1),
    }
    for name, content in cases.items():
        path = tmp_path / name
        path.write_text(content)
        with pytest.raises(gw.ModelFileError) as info:
            gw.load_model(path)
        assert name in str(info.value)


def test_contributions_equal_lightgbm_pred_contrib():
    for loader in (load_breast_cancer, load_wine):
        X, y = _with_missing(loader)
        model = lgb.LGBMClassifier(n_estimators=30, num_leaves=15, verbose=-1,
                                   random_state=0).fit(X, y)
        forest = gw.from_estimator(model)
        res = gw.contributions(forest, X)
        n, p = X.shape
        # reference: LightGBM's pred_contrib, per output: p contributions then the base
        ref = model.predict(X, pred_contrib=True).reshape(n, forest.n_outputs, p + 1)
        assert np.abs(res.values - ref[:, :, :p].transpose(0, 2, 1)).max() <= 1e-9
        assert np.abs(res.base - ref[0, :, p]).max() <= 1e-9
        assert res.output == "margin"


def test_contributions_add_up_on_categorical_splits():
    X, y = _categorical_table()
    model = lgb.LGBMClassifier(n_estimators=15, num_leaves=8, verbose=-1, min_data_per_group=10,
                               cat_smooth=1, random_state=0).fit(X, y, categorical_feature=[1])
    forest = gw.from_estimator(model)
    res = gw.contributions(forest, X[:300])
    ref = model.predict(X[:300], pred_contrib=True)  # reference: LightGBM's pred_contrib
    assert np.abs(res.values[:, :, 0] - ref[:, :2]).max() <= 1e-9
    assert np.abs(res.base[0] + res.values.sum(axis=1)[:, 0]
                  - forest.decision_function(X[:300])[:, 0]).max() <= 1e-9
