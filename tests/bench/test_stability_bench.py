"""Benchmark: the stability step (bootstrap re-fits of both trees) on production-size data.

Run on purpose: ``python3 -m pytest -m bench tests/bench/test_stability_bench.py -s``.
For 3,000 (the bundled sample), 20,000 and 200,000 rows it prints the step's wall time
against its budget (resamples x seconds each / jobs, plus 20% and 2 s for starting the
workers and scoring), and the longest silence between two progress reports against 2 s.
GROVEWISE_BENCH_ONLY=20000 runs one size.
"""

from __future__ import annotations

import os
import time

import pytest

from .common import print_table
from .test_scale_bench import _cache, _make_inputs

pytestmark = pytest.mark.bench

RESAMPLES, SECONDS = 10, 3.0


def test_stability_step_against_its_budget():
    import pandas as pd

    from grovewise.executor import resolve_jobs
    from grovewise.review import Review, ReviewInputs, ReviewSettings
    from grovewise.sample_data import sample_paths

    inputs = _make_inputs(_cache())
    sample = sample_paths()
    twenty = _cache() / "data_20k.csv"
    if not twenty.is_file():
        pd.read_csv(inputs["data"], nrows=20_000).to_csv(twenty, index=False)
    sets = {3_000: (sample["forest"], sample["data"], sample["target"]),
            20_000: (inputs["rf"], twenty, "y"), 200_000: (inputs["rf"], inputs["data"], "y")}
    only = os.environ.get("GROVEWISE_BENCH_ONLY")
    jobs = resolve_jobs(None)
    rows = []
    for n, (model, data, target) in sets.items():
        if only and str(n) != only:
            continue
        review = Review(ReviewInputs(model, data, target=target),
                        ReviewSettings(time_limit=20.0, stability_resamples=RESAMPLES,
                                       stability_time_limit=SECONDS))
        review.run(steps=("intake", "surrogate"))
        stamps = []

        def progress(step, fraction, message, *_):
            if step == "stability":
                stamps.append(time.perf_counter())

        start = time.perf_counter()
        review.run_step("stability", progress=progress)
        wall = time.perf_counter() - start
        stamps = [start] + stamps
        silence = max(b - a for a, b in zip(stamps, stamps[1:]))
        budget = RESAMPLES * SECONDS / jobs * 1.2 + 2.0
        stab = review.stability
        rows.append([f"{n:,} rows: step wall (s), {RESAMPLES} re-fits x {SECONDS:g} s, "
                     f"{jobs} jobs", wall, budget, wall / budget])
        rows.append([f"{n:,} rows: longest silence (s)", silence, 2.0, silence / 2.0])
        print(f"{n:,} rows: {stab.sentence('surrogate')}")
    print_table("Stability step against its budget (ratio <= 1 meets it)",
                ["setting", "figure", "target", "ratio"], rows)
