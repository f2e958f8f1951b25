"""Benchmark: a large LightGBM model read into the Forest, and its predictions, against LightGBM.

Run on purpose: ``python -m pytest tests/bench -m bench -s``.
Targets: 1,000 trees of 63 leaves on 20,000 x 30 rows: conversion at most 1 s; our
``predict_proba`` (one thread) within 3x of LightGBM's own (one thread), both timed in this run.
The fitted model is kept as model text under $TMPDIR (fitting it takes about 90 s on 2 cores);
delete grovewise_lightgbm_bench to fit it again.
"""

import os
import tempfile
import time
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pytest

import grovewise as gw
from grovewise.loaders.lightgbm_models import forest_from_lightgbm_text, read_lightgbm_text
from grovewise.traversal import use_threads

from .common import best_time, print_table

CACHE = Path(os.environ.get("TMPDIR", tempfile.gettempdir())) / "grovewise_lightgbm_bench"


def _data():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(20_000, 30))
    y = (X[:, 0] + X[:, 1] * X[:, 2] + rng.normal(size=20_000) > 0).astype(int)
    return X, y


def _model_text(X, y) -> str:
    path = CACHE / "model.txt"
    if not path.is_file():
        CACHE.mkdir(parents=True, exist_ok=True)
        model = lgb.LGBMClassifier(n_estimators=1000, num_leaves=63, min_child_samples=5,
                                   verbose=-1, n_jobs=2, random_state=0).fit(X, y)
        model.booster_.save_model(str(path))
    return path.read_text()


@pytest.mark.bench
def test_lightgbm_conversion_and_prediction_speed():
    X, y = _data()
    text = _model_text(X, y)
    booster = lgb.Booster(model_str=text)
    leaves = sum(1 for line in text.splitlines() if line.startswith("num_leaves="))
    assert leaves == 1000

    convert_text, forest = best_time(lambda: forest_from_lightgbm_text(text), repeats=3)
    convert_booster, _ = best_time(lambda: gw.from_estimator(booster), repeats=3)
    path = CACHE / "model.txt"
    start = time.perf_counter()
    gw.load_model(path)
    load_file = time.perf_counter() - start
    read_native, _ = best_time(lambda: read_lightgbm_text(path), repeats=1)

    use_threads(1)
    forest.predict_proba(X[:10])  # compiled walk ready
    ours, p = best_time(lambda: forest.predict_proba(X), repeats=3)
    theirs, q = best_time(lambda: booster.predict(X, num_threads=1), repeats=3)
    use_threads(0)
    diff = float(np.abs(p[:, 1] - q).max())
    print_table(
        "LightGBM benchmark: 1,000 trees of 63 leaves, 20,000 x 30 rows, one thread",
        ["setting", "grovewise (s)", "baseline", "baseline (s)", "ratio ours/baseline"],
        [["convert model text -> Forest", convert_text, "target", 1.0, convert_text / 1.0],
         ["convert Booster -> Forest (model_to_string + text)", convert_booster, "target", 1.0,
          convert_booster / 1.0],
         ["load_model(model.txt)", load_file, "LightGBM reads the text", read_native,
          load_file / read_native],
         ["predict_proba, 20,000 rows", ours, "LightGBM predict", theirs, ours / theirs]])
    print(f"largest probability difference: {diff:.1e}")
    assert diff <= 1e-9
    assert convert_booster <= 1.0
    assert ours <= 3.0 * theirs
