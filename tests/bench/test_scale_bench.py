"""Benchmark of a production-size review (issue "Scale"): 200,000 rows x 60 features.

Run on purpose: ``python3 -m pytest tests/bench/test_scale_bench.py -m bench -s``.
The data and models are generated here from a seeded ``make_classification`` (and cached in
``$TMPDIR/grovewise_scale_bench`` so a second run skips the training): a random forest of 200
trees of depth 12 and XGBoost of 500 trees of depth 6. ``grovewise review`` runs as a user
runs it, in a child process; the table gives each figure beside its target and the ratio.
"""

from __future__ import annotations

import json
import os
import re
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest

from .common import print_table

pytestmark = pytest.mark.bench

ROWS, FEATURES = 200_000, 60
SOLVE = 60


def _cache() -> Path:
    folder = Path(tempfile.gettempdir()) / "grovewise_scale_bench"
    folder.mkdir(exist_ok=True)
    return folder


def _make_inputs(folder: Path) -> dict[str, Path]:
    import numpy as np
    import pandas as pd
    from sklearn.datasets import make_classification

    data = folder / "data.csv"
    rf_path, xgb_path = folder / "rf.skops", folder / "xgb.json"
    if data.is_file() and rf_path.is_file() and xgb_path.is_file():
        return {"data": data, "rf": rf_path, "xgb": xgb_path}
    X, y = make_classification(n_samples=ROWS, n_features=FEATURES, n_informative=12,
                               n_redundant=8, random_state=0)
    cols = [f"f{i}" for i in range(FEATURES)]
    frame = pd.DataFrame(X, columns=cols)
    frame["y"] = y
    frame.to_csv(data, index=False)
    import skops.io as sio
    from sklearn.ensemble import RandomForestClassifier
    import xgboost as xgb

    rf = RandomForestClassifier(n_estimators=200, max_depth=12, n_jobs=2, random_state=0)
    sio.dump(rf.fit(frame[cols], y), rf_path)
    booster = xgb.XGBClassifier(n_estimators=500, max_depth=6, n_jobs=2, random_state=0,
                                tree_method="hist")
    booster.fit(frame[cols], y)
    booster.save_model(xgb_path)
    del X, frame, np
    return {"data": data, "rf": rf_path, "xgb": xgb_path}


def _review(model: Path, data: Path, out: Path) -> dict:
    """Run ``grovewise review`` in a child; wall time, longest silence, peak memory."""
    cmd = [sys.executable, "-m", "grovewise.cli", "review", str(model), str(data), "--target",
           "y", "--out", str(out), "--time-limit", str(SOLVE)]
    start = time.perf_counter()
    stamps, lines = [start], []
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    with subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                          bufsize=1) as proc:
        for line in proc.stdout:
            stamps.append(time.perf_counter())
            lines.append(line.rstrip())
        code = proc.wait()
    wall = time.perf_counter() - start
    peak_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    assert code == 0, "\n".join(lines[-20:])
    done = [float(m.group(1)) for line in lines
            if (m := re.search(r"surrogate: done in ([0-9.]+) s", line))]
    return {"wall": wall, "silence": max(b - a for a, b in zip(stamps, stamps[1:])),
            "peak_gb": max(peak_kb, before) / 1024 ** 2, "surrogate": done[0] if done else None,
            "lines": lines}


def _window_stall(review_dir: Path) -> dict:
    out = subprocess.run([sys.executable, "-m", "tests.bench.window_probe", str(review_dir)],
                         capture_output=True, text=True, cwd=Path(__file__).parents[2],
                         env={**os.environ, "QT_QPA_PLATFORM": "offscreen"})
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_review_of_200k_rows(tmp_path):
    inputs = _make_inputs(_cache())
    rows = []
    for name in ("rf", "xgb"):
        res = _review(inputs[name], inputs["data"], tmp_path / name)
        print("\n".join(res["lines"][-9:]))
        rows += [
            [f"{name}: review end to end, 2 cores, {SOLVE} s solve (s)", res["wall"], 180.0,
             res["wall"] / 180.0],
            [f"{name}: longest silence between progress lines (s)", res["silence"], 2.0,
             res["silence"] / 2.0],
            [f"{name}: peak memory (GB)", res["peak_gb"], 4.0, res["peak_gb"] / 4.0],
            [f"{name}: surrogate step wall vs --time-limit (s)", res["surrogate"],
             SOLVE * 1.05, res["surrogate"] / (SOLVE * 1.05)],
        ]
        if name == "rf":
            probe = _window_stall(tmp_path / name / "review")
            rows.append([f"{name}: window, open the review and switch every page, longest "
                         "stall (s)", probe["max_stall"], 0.25, probe["max_stall"] / 0.25])
    print_table(f"Review of {ROWS:,} x {FEATURES} (figure, target, ratio; ratio <= 1 meets it)",
                ["setting", "figure", "target", "ratio"], rows)


def test_time_limit_is_the_budget():
    """The surrogate step's wall time against --time-limit T (contract: T + max(1 s, 5%)),
    at 3,000 (the bundled sample), 20,000 and 200,000 rows."""
    from grovewise.review import Review, ReviewInputs, ReviewSettings
    from grovewise.sample_data import sample_paths

    inputs = _make_inputs(_cache())
    sample = sample_paths()
    sets = {3_000: (sample["forest"], sample["data"], sample["target"])}
    import pandas as pd

    twenty = _cache() / "data_20k.csv"
    if not twenty.is_file():
        pd.read_csv(inputs["data"], nrows=20_000).to_csv(twenty, index=False)
    sets[20_000] = (inputs["rf"], twenty, "y")
    sets[200_000] = (inputs["rf"], inputs["data"], "y")
    rows = []
    for n, (model, data, target) in sets.items():
        review = Review(ReviewInputs(model, data, target=target), ReviewSettings())
        review.run_step("intake")
        for limit in (5.0, 10.0, 30.0):
            review.settings.time_limit = limit
            start = time.perf_counter()
            review.run_step("surrogate")
            wall = time.perf_counter() - start
            allowed = limit + max(1.0, 0.05 * limit)
            rows.append([f"{n:,} rows, --time-limit {limit:g} s", wall, allowed, wall / allowed,
                         review.surrogate.winner])
    print_table("Surrogate step wall time against its budget (ratio <= 1 meets it)",
                ["setting", "wall (s)", "T + max(1 s, 5%)", "ratio", "winning stage"], rows)
