"""Batch benchmark: four reviews of the bundled sample on a 2-worker local cluster against the
same four one after another (the inline executor), measured in the same run.

Run on purpose: ``python3 -m pytest tests/bench/test_batch_bench.py -m bench -s``.
Environment: ``GROVEWISE_BENCH_BATCH_TIME`` (seconds for each review's surrogate fit, default
the demo's 30 s; the same for both runs). Every review uses one job either way; the cluster's
time includes starting its worker processes. Target: cluster time at most 0.6 of the
one-after-another time (two cores do the work of one in half the time, less start-up).
"""

from __future__ import annotations

import os
import time

import pytest

from grovewise.batch import run_batch
from grovewise.cli import DEMO_TIME_LIMIT
from grovewise.executor import Executor
from grovewise.sample_data import sample_paths

from .common import print_table

pytestmark = pytest.mark.bench

TIME = float(os.environ.get("GROVEWISE_BENCH_BATCH_TIME", DEMO_TIME_LIMIT))
REVIEWS = 4
WORKERS = 2
TARGET = 0.6


def _batch_file(folder) -> object:
    paths = sample_paths()
    rows = ["name,model,data,target,time_limit"]
    rows += [f"sample-{k},{paths['forest']},{paths['data']},{paths['target']},{TIME:g}"
             for k in range(1, REVIEWS + 1)]
    path = folder / "batch.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def _timed(batch, out, executor):
    start = time.perf_counter()
    with executor:
        result = run_batch(batch, out, executor=executor)
    return time.perf_counter() - start, result


def _mean(result, field: str) -> float:
    values = [getattr(o, field) for o in result.outcomes]
    return sum(values) / len(values)


def test_batch_on_two_workers_against_one_after_another(tmp_path):
    batch = _batch_file(tmp_path)
    load = os.getloadavg()[0]
    inline_s, inline = _timed(batch, tmp_path / "inline", Executor(jobs=1))
    cluster_s, cluster = _timed(batch, tmp_path / "cluster",
                                Executor(jobs=WORKERS, processes=True))
    assert inline.all_done and cluster.all_done
    ratio = cluster_s / inline_s
    setting = f"{REVIEWS} sample reviews, {TIME:g} s surrogate limit, 1 job each"
    rows = [[f"{setting}: wall time (s)", cluster_s, inline_s, ratio]]
    # per review: equal when each worker has a core to itself (other load on the computer
    # slows the two reviews at once more than the one alone)
    for label, field in (("seconds per review", "seconds"),
                         ("mean surrogate holdout fidelity", "surrogate_holdout_fidelity")):
        ours, base = _mean(cluster, field), _mean(inline, field)
        rows.append([f"{setting}: {label}", ours, base, ours / base])
    print_table(f"Batch of reviews: {WORKERS}-worker local cluster (figure) against one after "
                f"another (baseline); load average {load:.1f} at the start on {os.cpu_count()} "
                "cores", ["setting", "figure", "baseline", "ratio"], rows)
    assert ratio <= TARGET
