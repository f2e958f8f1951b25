"""The whole review (intake to report, then ``reproduce``) on the new model families: a
LightGBM model text with a categorical column, and a scikit-learn pipeline with encoders,
each read with a data file that gives categories by name.

Data: scikit-learn's breast cancer table (first 6 columns), with a column "clinic" derived
for the test from the quintiles of mean texture (named clinic A..E) and, for LightGBM, a
pandas category column fitted as such.
"""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from sklearn.compose import ColumnTransformer
from sklearn.datasets import load_breast_cancer
from sklearn.ensemble import RandomForestClassifier
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

from grovewise.batch import write_review_folder
from grovewise.reproduce import reproduce
from grovewise.review import ReviewInputs, ReviewSettings

SETTINGS = dict(depth=2, time_limit=60, node_limit=20, permutation_repeats=1,
                permutation_rows=300, exactness_rows=1000, proximity_rows=200, seed=1,
                stability_resamples=0)


@pytest.fixture(scope="module")
def table():
    data = load_breast_cancer(as_frame=True)
    df = data.frame.iloc[:, :6].copy()
    df["clinic"] = np.array([f"clinic {c}" for c in "ABCDE"])[
        pd.qcut(df["mean texture"], 5, labels=False)]
    df["diagnosis"] = np.where(data.target == 1, "benign", "malignant")
    return df


def _review(model, df, folder):
    data = folder / "patients.csv"
    df.to_csv(data, index=False)
    out = folder / "review"
    write_review_folder(ReviewInputs(model, data, target="diagnosis"),
                        ReviewSettings(**SETTINGS), out)
    return out


def test_lightgbm_with_a_categorical_column(table, tmp_path):
    frame = table.drop(columns="diagnosis").assign(clinic=lambda d: d["clinic"].astype("category"))
    y = (table["diagnosis"] == "malignant").astype(int)
    model = lgb.LGBMClassifier(n_estimators=30, num_leaves=8, min_data_per_group=5,
                               cat_smooth=1, verbose=-1, random_state=0).fit(frame, y)
    path = tmp_path / "model.txt"
    model.booster_.save_model(str(path))
    out = _review(path, table.assign(diagnosis=y), tmp_path)
    verdict = reproduce(out / "manifest.json")
    assert verdict.passed, verdict.text()
    text = (out / "report.html").read_text()
    assert "exact: on 569 rows" in text and "lightgbm" in text
    assert "clinic (5 categories)" in text


def test_pipeline_with_encoders(table, tmp_path):
    X = table.drop(columns="diagnosis")
    numeric = list(X.columns[:6])
    pipe = Pipeline([("prep", ColumnTransformer([
        ("scaled", StandardScaler(), numeric),
        ("clinic", OneHotEncoder(handle_unknown="ignore"), ["clinic"])])),
        ("model", RandomForestClassifier(30, max_depth=5, random_state=0))]).fit(
        X, table["diagnosis"])
    path = tmp_path / "pipeline.skops"
    sio.dump(pipe, path)
    out = _review(path, table, tmp_path)
    verdict = reproduce(out / "manifest.json")
    assert verdict.passed, verdict.text()
    text = (out / "report.html").read_text()
    assert "Splits per estimator input of the pipeline" in text
    assert "clinic__clinic_clinic A" in text  # the one-hot input, counted for clinic
    assert "exact: on 569 rows" in text
