"""scikit-learn pipelines folded into a Forest over the raw columns.

Reference for every check: the pipeline's own ``predict_proba`` on the raw data frame. Data:
scikit-learn's breast cancer table, with two categorical columns derived from it for the test
("region": quartiles of mean texture named north/south/east/west; "grade": terciles of mean
area named low/mid/high) and 5% of some cells emptied.
"""

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
import skops.io as sio
import xgboost as xgb
from sklearn.compose import ColumnTransformer
from sklearn.datasets import load_breast_cancer
from sklearn.ensemble import (GradientBoostingClassifier, HistGradientBoostingClassifier,
                              RandomForestClassifier)
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import (FunctionTransformer, MinMaxScaler, OneHotEncoder,
                                   OrdinalEncoder, PolynomialFeatures, StandardScaler)

import grovewise as gw
from grovewise.forest import CategorySplit
from grovewise.loaders import load_native
from grovewise.loaders.exactness import check_exactness
from grovewise.loaders.pipelines import raw_frame

ESTIMATORS = {
    "random_forest": (lambda: RandomForestClassifier(30, max_depth=6, random_state=0), 1e-9),
    "hist_gradient_boosting": (lambda: HistGradientBoostingClassifier(max_iter=30,
                                                                      random_state=0), 1e-9),
    "gradient_boosting": (lambda: GradientBoostingClassifier(n_estimators=20, random_state=0),
                          1e-9),
    # XGBoost sums in float32: its own contract
    "xgboost": (lambda: xgb.XGBClassifier(n_estimators=30, max_depth=4, random_state=0), 2e-6),
    "lightgbm": (lambda: lgb.LGBMClassifier(n_estimators=30, verbose=-1, random_state=0), 1e-9),
}


@pytest.fixture(scope="module")
def table():
    data = load_breast_cancer(as_frame=True)
    df = data.frame.drop(columns="target").iloc[:, :8].copy()
    rng = np.random.default_rng(0)
    df.loc[rng.random(len(df)) < 0.05, "mean radius"] = np.nan
    df["region"] = np.array(["north", "south", "east", "west"])[
        pd.qcut(df["mean texture"], 4, labels=False)]
    df.loc[rng.random(len(df)) < 0.05, "region"] = np.nan
    df["grade"] = np.array(["low", "mid", "high"])[pd.qcut(df["mean area"], 3, labels=False)]
    return df, data.target.to_numpy()


def _preprocessing(numeric):
    return ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()), numeric[:4]),
        ("range", MinMaxScaler(), numeric[4:6]),
        ("region", make_pipeline(SimpleImputer(strategy="constant", fill_value="missing"),
                                 OneHotEncoder(handle_unknown="ignore")), ["region"]),
        ("grade", OrdinalEncoder(), ["grade"]),
        ("gone", "drop", numeric[6:7]),
    ], remainder="passthrough")


def _codes(forest, df):
    """The raw table as the Forest reads it: numbers, and category codes by name."""
    X = np.empty((len(df), forest.n_features))
    for j, name in enumerate(forest.feature_names):
        if forest.is_categorical(j):
            names = forest.categories[j]
            X[:, j] = [names.index(v) if isinstance(v, str) else np.nan for v in df[name]]
        else:
            X[:, j] = df[name].to_numpy(dtype=float)
    return X


@pytest.mark.parametrize("kind", sorted(ESTIMATORS))
def test_pipeline_predictions_equal_the_pipeline(table, kind):
    df, y = table
    make, tolerance = ESTIMATORS[kind]
    numeric = [c for c in df.columns if c not in ("region", "grade")]
    pipe = Pipeline([("prep", _preprocessing(numeric)), ("model", make())]).fit(df, y)
    forest = gw.from_estimator(pipe)
    assert forest.feature_names == list(df.columns)  # the raw columns, in the file's order
    assert forest.categories[8] == ["east", "missing", "north", "south", "west"]
    assert forest.categories[9] == ["high", "low", "mid"]
    X = _codes(forest, df)
    # reference: the pipeline's own predict_proba on the raw data frame
    assert np.abs(forest.predict_proba(X) - pipe.predict_proba(df)).max() <= tolerance
    assert np.array_equal(forest.predict(X), pipe.predict(df))
    check = check_exactness(forest, pipe, X)
    assert check.passed and check.tolerance == tolerance
    # the one-hot columns of 'region' count for 'region'; 'grade' reads as a set of names
    used = set(forest.used_features.tolist())
    assert 6 not in used  # the dropped column
    assert forest.input_feature.count(8) == 5 and len(forest.model_inputs) == 13


def test_folded_cuts_are_exact_at_the_boundary(table):
    """Rows placed on each folded cut and on the next float64 above it: the pipeline and the
    Forest send them the same way (the cut is the last value that goes left)."""
    df, y = table
    numeric = [c for c in df.columns if c not in ("region", "grade")]
    pipe = Pipeline([("prep", _preprocessing(numeric)),
                     ("model", RandomForestClassifier(10, max_depth=5, random_state=1))]).fit(df, y)
    forest = gw.from_estimator(pipe)
    rows = []
    for t in forest.trees:
        for k in np.flatnonzero((t.feature >= 0) & ~np.isin(np.arange(t.n_nodes),
                                                             list((t.categorical or {}).keys()))):
            for v in (t.threshold[k], np.nextafter(t.threshold[k], np.inf)):
                row = df.iloc[len(rows) % len(df)].copy()
                row[forest.feature_names[t.feature[k]]] = v
                rows.append(row)
    probes = pd.DataFrame(rows).astype(df.dtypes.to_dict())
    assert len(probes) > 200
    X = _codes(forest, probes)
    # reference: the pipeline's predict_proba on the probe rows
    assert np.abs(forest.predict_proba(X) - pipe.predict_proba(probes)).max() <= 1e-12


def test_scaled_cuts_are_in_the_data_units_and_one_hot_reads_as_a_set(table):
    df, y = table
    pipe = Pipeline([("prep", ColumnTransformer([
        ("scaled", StandardScaler(), ["mean radius", "mean texture"]),
        ("region", OneHotEncoder(handle_unknown="ignore"), ["region"])])),
        ("model", HistGradientBoostingClassifier(max_iter=5, random_state=0))])
    frame = df.assign(region=df["region"].fillna("north"))
    pipe.fit(frame, y)
    forest = gw.from_estimator(pipe)
    inner = gw.from_estimator(pipe[-1])
    scaler = pipe[0].named_transformers_["scaled"]
    # histogram boosting compares in float64: the folded cut is the un-scaled cut, to rounding
    for t_in, t_out in zip(inner.trees, forest.trees):
        for k in np.flatnonzero((t_in.feature >= 0) & (t_in.feature < 2)):
            j = t_in.feature[k]
            unscaled = t_in.threshold[k] * scaler.scale_[j] + scaler.mean_[j]
            assert t_out.threshold[k] == pytest.approx(unscaled, rel=1e-12, abs=1e-12)
        for k in np.flatnonzero(t_in.feature >= 2):
            split = t_out.categorical[int(k)]
            assert isinstance(split, CategorySplit)
            # one one-hot column: its category on one side, every other on the other
            assert min(len(split.left), len(split.right)) == 1
            assert forest.feature_names[t_out.feature[k]] == "region"
            assert t_out.model_input[k] == t_in.feature[k]


def test_unsupported_steps_are_refused_by_name(table):
    df, y = table
    numeric = [c for c in df.columns if c not in ("region", "grade")]
    for step, name in ((PolynomialFeatures(2), "PolynomialFeatures"),
                       (FunctionTransformer(np.log1p), "FunctionTransformer")):
        pipe = make_pipeline(step, RandomForestClassifier(3, random_state=0)).fit(
            df[numeric].fillna(0), y)
        with pytest.raises(gw.UnsupportedModelError, match=name):
            gw.from_estimator(pipe)
    indicator = make_pipeline(SimpleImputer(add_indicator=True),
                              RandomForestClassifier(3, random_state=0)).fit(df[numeric], y)
    with pytest.raises(gw.UnsupportedModelError, match="add_indicator"):
        gw.from_estimator(indicator)


def test_pipeline_from_skops_and_csv_with_category_names(table, tmp_path):
    df, y = table
    numeric = [c for c in df.columns if c not in ("region", "grade")]
    pipe = Pipeline([("prep", _preprocessing(numeric)),
                     ("model", RandomForestClassifier(20, random_state=0))]).fit(df, y)
    model_path = tmp_path / "clinic pipeline é.skops"
    sio.dump(pipe, model_path)
    data_path = tmp_path / "clinic data.csv"
    df.assign(outcome=y).to_csv(data_path, index=False)
    forest = gw.load_model(model_path)
    data = gw.load_data(data_path, forest, target="outcome")
    # reference: the pipeline's predict_proba on the frame read back from the CSV
    frame = pd.read_csv(data_path).drop(columns="outcome")
    assert np.abs(forest.predict_proba(data.X) - pipe.predict_proba(frame)).max() <= 1e-9
    assert check_exactness(forest, load_native(model_path), data.X).passed
    # the reference table built from the codes is the raw table itself
    back = raw_frame(pipe, data.X)
    assert back["region"].fillna("?").tolist() == df["region"].fillna("?").tolist()
    unknown = df.assign(outcome=y)
    unknown.loc[5, "region"] = "middle"
    unknown.to_csv(data_path, index=False)
    with pytest.raises(gw.DataError, match="'middle' \\(data row 6\\)"):
        gw.load_data(data_path, forest, target="outcome")


def test_contributions_are_per_raw_column(table):
    df, y = table
    numeric = [c for c in df.columns if c not in ("region", "grade")]
    pipe = Pipeline([("prep", _preprocessing(numeric)),
                     ("model", GradientBoostingClassifier(n_estimators=20,
                                                          random_state=0))]).fit(df, y)
    forest = gw.from_estimator(pipe)
    X = _codes(forest, df)
    res = gw.contributions(forest, X)
    assert res.values.shape == (len(df), len(df.columns), 1)
    # reference: the pipeline's decision_function; base plus the sum is the model's margin
    margin = pipe.decision_function(df)
    assert np.abs(res.base[0] + res.values.sum(axis=1)[:, 0] - margin).max() <= 1e-9
