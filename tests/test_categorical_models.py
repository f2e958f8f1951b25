"""Categorical splits of XGBoost (enable_categorical) and scikit-learn's histogram boosting
(categorical_features) reproduced exactly by the Forest.

Outside references: XGBoost's own ``predict_proba`` / ``Booster.predict`` (probabilities,
``pred_leaf``, ``pred_contribs``) and scikit-learn's own ``predict_proba`` / ``predict``, on
tables made from scikit-learn's bundled datasets (breast cancer: Wolberg et al., UCI; wine:
Forina et al., UCI).

The tables: three numeric columns of the dataset, and two categorical ones made from two
other numeric columns, which are left out: ``band``, the first column (mean radius /
alcohol) cut at its sextiles into six categories named low, lowish, midlow, midhigh,
highish, high (pandas ``qcut``), and ``quarter``, the fourth column (mean area / alcalinity
of ash) cut at its quartiles into q1..q4. Every 17th row has no band and every 23rd row
(from the 6th) no quarter (NaN). The categorical columns sit between numeric ones, so that
scikit-learn's encoder, which moves them first, has to be undone.
"""

import json

import numpy as np
import pandas as pd
import pytest
import xgboost as xgb
from sklearn.datasets import load_breast_cancer, load_wine
from sklearn.ensemble import HistGradientBoostingClassifier
from threadpoolctl import threadpool_limits

import grovewise as gw
from grovewise.loaders.exactness import check_exactness

SKLEARN_TOL = 1e-9  # the contract for scikit-learn models
XGBOOST_TOL = 2e-6  # XGBoost accumulates in float32
BANDS = ["low", "lowish", "midlow", "midhigh", "highish", "high"]
QUARTERS = ["q1", "q2", "q3", "q4"]
DATASETS = {"breast_cancer": load_breast_cancer, "wine": load_wine}
BAND, QUARTER = 1, 4  # the categorical columns' positions


def _table(name):
    data = DATASETS[name]()
    d = pd.DataFrame(data.data, columns=[c.replace(" ", "_") for c in data.feature_names])
    cols = list(d.columns)
    X = pd.DataFrame({cols[1]: d[cols[1]],
                      "band": pd.qcut(d[cols[0]], 6, labels=BANDS),
                      cols[4]: d[cols[4]], cols[7]: d[cols[7]],
                      "quarter": pd.qcut(d[cols[3]], 4, labels=QUARTERS)})
    X.loc[X.index[::17], "band"] = np.nan
    X.loc[X.index[5::23], "quarter"] = np.nan
    return X, data.target


def _codes(X, names=None):
    """The table as numbers: a category by its code (pandas' own, or its place in ``names``,
    the Forest's categories), NaN for none."""
    A = np.empty(X.shape)
    for j, col in enumerate(X.columns):
        if isinstance(X[col].dtype, pd.CategoricalDtype):
            order = list(X[col].cat.categories) if names is None else names[j]
            where = {v: i for i, v in enumerate(order)}
            A[:, j] = [where[v] if isinstance(v, str) else np.nan for v in X[col].astype(object)]
        else:
            A[:, j] = X[col].to_numpy()
    return A


def _odd_rows(A, values):
    """Copies of the first rows with each of ``values`` in the band column."""
    rows = np.repeat(A[:3], len(values), axis=0)
    rows[:, BAND] = np.tile(values, 3)
    return rows


# ------------------------------------------------------------------ XGBoost
def _typed_dmatrix(X, forest):
    types = ["c" if forest.is_categorical(j) else "q" for j in range(X.shape[1])]
    return xgb.DMatrix(X, feature_types=types, enable_categorical=True,
                       feature_names=forest.feature_names if forest.has_feature_names else None)


@pytest.fixture(scope="module")
def xgb_models():
    """(model, table) per dataset and split style: partition splits (max_cat_to_onehot=1)
    and one-hot splits (max_cat_to_onehot=8: both features have fewer categories)."""
    out = {}
    for name in DATASETS:
        X, y = _table(name)
        for style, onehot in (("partition", 1), ("onehot", 8)):
            model = xgb.XGBClassifier(n_estimators=25, max_depth=4, tree_method="hist",
                                      enable_categorical=True, max_cat_to_onehot=onehot,
                                      random_state=0, n_jobs=1).fit(X, y)
            out[name, style] = (model, X)
    return out


@pytest.mark.parametrize("style", ["partition", "onehot"])
@pytest.mark.parametrize("name", list(DATASETS))
def test_xgboost_categorical_exact(xgb_models, name, style):
    model, X = xgb_models[name, style]
    forest = gw.from_estimator(model)
    assert forest.categories == {BAND: BANDS, QUARTER: QUARTERS}  # the stored names, in order
    assert forest.n_categorical_splits > 0
    splits = [s for t in forest.trees for s in (t.categorical or {}).values()]
    assert all(s.left.size == 0 and s.other_left for s in splits)  # XGBoost: the set goes right
    sizes = {int(s.right.size) for s in splits}
    if style == "onehot":
        assert sizes == {1}
    else:
        assert max(sizes) > 1
    A = _codes(X)
    # Reference: XGBoost's own predict_proba / predict on the original table.
    np.testing.assert_allclose(forest.predict_proba(A), model.predict_proba(X), rtol=0,
                               atol=XGBOOST_TOL)
    np.testing.assert_array_equal(forest.predict(A), model.predict(X))
    # Codes never seen (6, 100, 2**24 + 2, beyond XGBoost's largest category), negative
    # ones, fractions (XGBoost truncates them, as the Forest does), NaN: reference XGBoost's
    # Booster.predict and pred_leaf on the codes typed 'c'.
    rows = np.vstack([A, _odd_rows(A, [np.nan, -1.0, -0.5, 2.7, 5.5, 6.0, 7.0, 100.0,
                                       2.0 ** 24 + 2])])
    booster = model.get_booster()
    dm = _typed_dmatrix(rows, forest)
    p = booster.predict(dm)
    ref = np.column_stack([1 - p, p]) if p.ndim == 1 else p
    np.testing.assert_allclose(forest.predict_proba(rows), ref, rtol=0, atol=XGBOOST_TOL)
    np.testing.assert_array_equal(forest.apply(rows),
                                  booster.predict(dm, pred_leaf=True).astype(np.int64))
    check = check_exactness(forest, model, rows)
    assert check.passed and check.leaves_equal, check.text()


@pytest.mark.parametrize("name", list(DATASETS))
def test_xgboost_categorical_contributions(xgb_models, name):
    model, X = xgb_models[name, "partition"]
    forest = gw.from_estimator(model)
    A = np.vstack([_codes(X), _odd_rows(_codes(X), [np.nan, 6.0, -1.0])])
    c = gw.contributions(forest, A)
    np.testing.assert_allclose(c.explained, forest.decision_function(A), rtol=0, atol=1e-9)
    ref = model.get_booster().predict(_typed_dmatrix(A, forest), pred_contribs=True)
    ref = ref[:, :, None] if ref.ndim == 2 else np.moveaxis(ref, 1, 2)
    p = forest.n_features
    # Reference: XGBoost's own TreeSHAP (float32 arithmetic there, hence the tolerance).
    np.testing.assert_allclose(c.values, ref[:, :p], rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(np.broadcast_to(c.base, ref[:, p].shape), ref[:, p], rtol=1e-5,
                               atol=1e-6)


def test_xgboost_recodes_a_table_by_the_stored_names(xgb_models):
    """XGBoost 3.x re-codes a table's categories by the names stored in the model; the
    Forest's codes are the stored order, whatever order the table gives."""
    model, X = xgb_models["wine", "partition"]
    forest = gw.from_estimator(model)
    shuffled = X.copy()
    shuffled["band"] = shuffled["band"].cat.reorder_categories(BANDS[::-1])
    shuffled["quarter"] = shuffled["quarter"].cat.set_categories(["q4", "q2", "q3"])  # q1 gone
    assert not np.array_equal(shuffled["band"].cat.codes, X["band"].cat.codes)
    A = _codes(shuffled, forest.categories)
    np.testing.assert_allclose(forest.predict_proba(A), model.predict_proba(shuffled), rtol=0,
                               atol=XGBOOST_TOL)


def test_xgboost_codes_without_names_and_file(tmp_path):
    """A Booster trained on codes (an array typed 'c') stores no names: the categories are
    named by their codes; a categorical feature no split uses is still categorical. The
    model's JSON file reads back into the same Forest."""
    X, y = _table("wine")
    A = np.column_stack([_codes(X), np.zeros(X.shape[0])])  # a constant category: never split
    types = ["q", "c", "q", "q", "c", "c"]
    dtrain = xgb.DMatrix(A, label=y, feature_types=types, enable_categorical=True)
    booster = xgb.train({"objective": "multi:softprob", "num_class": 3, "max_depth": 3,
                         "tree_method": "hist", "max_cat_to_onehot": 1, "nthread": 1}, dtrain, 15)
    forest = gw.from_estimator(booster)
    top = {j: max((int(s.right.max()) for t in forest.trees
                   for k, s in (t.categorical or {}).items() if t.feature[k] == j), default=-1)
           for j in (BAND, QUARTER)}
    assert top[BAND] >= 1 and top[QUARTER] >= 1
    assert forest.categories == {BAND: [str(c) for c in range(top[BAND] + 1)],
                                 QUARTER: [str(c) for c in range(top[QUARTER] + 1)], 5: []}
    rows = np.vstack([A, _odd_rows(A, [np.nan, 6.0, -1.0, 40.0])])
    check = check_exactness(forest, booster, rows)
    assert check.passed and check.leaves_equal, check.text()
    path = tmp_path / "model.json"
    booster.save_model(str(path))
    again = gw.load_model(path)
    assert again.categories == forest.categories
    np.testing.assert_array_equal(again.predict_proba(rows), forest.predict_proba(rows))
    doc = json.loads(path.read_text())
    assert doc["learner"]["feature_types"] == types


# ------------------------------------------------------------------ scikit-learn
def _hgb(categorical, X, y):
    # One OpenMP thread: on a small, busy machine scikit-learn's threads otherwise wait on
    # the compiled walk's ones.
    with threadpool_limits(limits=1):
        return HistGradientBoostingClassifier(max_iter=30, categorical_features=categorical,
                                              random_state=0).fit(X, y)


@pytest.fixture(scope="module")
def hgb_models():
    """(model, table) per dataset: categorical_features="from_dtype" on the table."""
    out = {}
    for name in DATASETS:
        X, y = _table(name)
        out[name] = (_hgb("from_dtype", X, y), X)
    return out


@pytest.mark.parametrize("name", list(DATASETS))
def test_hist_gradient_boosting_from_dtype(hgb_models, name):
    model, X = hgb_models[name]
    forest = gw.from_estimator(model)
    # The codes are the encoder's ordinal codes: its categories, sorted.
    assert forest.categories == {BAND: sorted(BANDS), QUARTER: QUARTERS}
    assert forest.n_categorical_splits > 0
    A = _codes(X, forest.categories)
    # Reference: scikit-learn's own predict_proba / predict on the original table.
    np.testing.assert_allclose(forest.predict_proba(A), model.predict_proba(X), rtol=0,
                               atol=SKLEARN_TOL)
    np.testing.assert_array_equal(forest.predict(A), model.predict(X))
    # A category never seen in training, given to scikit-learn as a name it does not know,
    # and to the Forest as a code that names none.
    unseen = X.iloc[:20].copy()
    unseen["band"] = unseen["band"].astype(object)
    unseen.loc[:, "band"] = "enormous"
    coded = A[:20].copy()
    coded[:, BAND] = len(BANDS)
    np.testing.assert_allclose(forest.predict_proba(coded), model.predict_proba(unseen), rtol=0,
                               atol=SKLEARN_TOL)
    rows = np.vstack([A, _odd_rows(A, [np.nan, -1.0, 6.0, 255.0, 256.0, 1e9])])
    check = check_exactness(forest, model, rows)
    assert check.passed and check.leaves_equal is None, check.text()
    c = gw.contributions(forest, rows)
    np.testing.assert_allclose(c.explained, forest.decision_function(rows), rtol=0, atol=1e-9)


def _integer_coded(name):
    """The table with pandas' category codes as numbers; band's code 2 written as 9, so that
    the band values seen in training are 0, 1, 3, 4, 5, 9 (not the encoder's 0..5)."""
    X, y = _table(name)
    A = _codes(X)
    A[A[:, BAND] == 2, BAND] = 9
    return A, y


@pytest.mark.parametrize("name", list(DATASETS))
def test_hist_gradient_boosting_indices(name):
    A, y = _integer_coded(name)
    model = _hgb([BAND, QUARTER], A, y)
    forest = gw.from_estimator(model)
    assert forest.categories == {BAND: [str(c) for c in range(10)], QUARTER: ["0", "1", "2", "3"]}
    assert forest.n_categorical_splits > 0
    # Values never seen (2, 6, 300, 1e9), negative ones, NaN.
    rows = np.vstack([A, _odd_rows(A, [np.nan, -1.0, -0.5, 2.0, 6.0, 9.0, 300.0, 1e9])])
    # Reference: scikit-learn's own predict_proba / predict on the same numbers.
    np.testing.assert_allclose(forest.predict_proba(rows), model.predict_proba(rows), rtol=0,
                               atol=SKLEARN_TOL)
    np.testing.assert_array_equal(forest.predict(rows), model.predict(rows))
    check = check_exactness(forest, model, rows)
    assert check.passed, check.text()
    c = gw.contributions(forest, rows)
    np.testing.assert_allclose(c.explained, forest.decision_function(rows), rtol=0, atol=1e-9)


def test_hist_gradient_boosting_categories_that_are_not_codes():
    """Categories that are not whole numbers >= 0 (here band's values 0, 1, 3, 4, 5, 9 written
    as -1, 0.5, 7000, 3.25, 12, 40) are coded by rank, named by value; the reference is handed
    the values (an array without column names)."""
    A, y = _integer_coded("wine")
    values = np.array([-1.0, 0.5, np.nan, 7000.0, 3.25, 12.0, np.nan, np.nan, np.nan, 40.0])
    raw = A.copy()
    seen = ~np.isnan(A[:, BAND])
    raw[seen, BAND] = values[A[seen, BAND].astype(int)]
    model = _hgb([BAND, QUARTER], raw, y)
    forest = gw.from_estimator(model)
    names = ["-1", "0.5", "3.25", "12", "40", "7000"]
    assert forest.categories[BAND] == names
    codes = A.copy()
    codes[seen, BAND] = [names.index(f"{v:g}") for v in raw[seen, BAND]]
    # Reference: scikit-learn's own predict_proba on the values.
    np.testing.assert_allclose(forest.predict_proba(codes), model.predict_proba(raw), rtol=0,
                               atol=SKLEARN_TOL)
    check = check_exactness(forest, model, np.vstack([codes, _odd_rows(codes, [6.0, -1.0])]))
    assert check.passed, check.text()


def test_hist_gradient_boosting_values_that_are_no_category():
    """scikit-learn's encoder turns a value that is no fitted category (a fraction too) into
    NaN, the missing side, and predict_proba accepts it; the Forest reads a fraction as its
    whole part. Documented in sklearn_models.py."""
    A, y = _integer_coded("wine")
    model = _hgb([BAND, QUARTER], A, y)
    forest = gw.from_estimator(model)
    missing = model.predict_proba(_odd_rows(A, [np.nan]))
    for value in (0.5, 3.5, -0.5, 2.0, 1e9):
        np.testing.assert_array_equal(model.predict_proba(_odd_rows(A, [value])), missing)
    np.testing.assert_array_equal(forest.predict_proba(_odd_rows(A, [3.5])),
                                  forest.predict_proba(_odd_rows(A, [3.0])))
    # Which is why a fraction can differ (here it does, on wine): whole codes only.
    assert not np.allclose(forest.predict_proba(_odd_rows(A, [3.0])), missing)
