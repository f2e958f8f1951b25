"""The executor: order of results, inline against a local dask cluster, progress, cancel, and
a wrong scheduler address."""

from __future__ import annotations

import os
import threading
import time

import numpy as np
import pytest

from grovewise.errors import CancelledError, SettingError
from grovewise.executor import Executor, resolve_jobs


def seeded_sum(seed: int) -> float:
    """A seeded numpy draw: the same seed gives the same number in any thread or process."""
    return float(np.random.default_rng(seed).standard_normal(10_000).sum())


def late_square(x: int) -> int:
    time.sleep(0.05 * (5 - x))  # the first items finish last
    return x * x


def fails_on_odd(x: int) -> int:
    if x % 2:
        raise ValueError(f"odd item {x}")
    return x


def sleep_long(x: int) -> int:
    time.sleep(2.0)
    return x


@pytest.fixture(scope="module")
def cluster():
    """One local cluster of 2 worker threads for the tests of this module."""
    with Executor(jobs=2) as executor:
        yield executor


def test_resolve_jobs():
    cores = max(1, os.cpu_count() or 1)
    assert resolve_jobs(None) == cores and resolve_jobs(0) == cores
    assert resolve_jobs(3) == 3 and resolve_jobs(np.int64(2)) == 2
    for bad in (-1, 1.5, "2", True):
        with pytest.raises(SettingError, match="--jobs"):
            resolve_jobs(bad)


def test_inline_runs_in_this_thread_without_dask():
    executor = Executor(jobs=1)
    here = threading.get_ident()
    assert executor.inline and executor.client is None
    assert executor.description == "inline (1 job)"
    assert executor.map(lambda _: threading.get_ident(), range(3)) == [here] * 3


def test_results_in_item_order_with_progress(cluster):
    calls = []
    out = cluster.map(late_square, range(5), progress=lambda d, t: calls.append((d, t)))
    assert out == [0, 1, 4, 9, 16]
    # progress: once per item, counting up to the total, in the calling thread
    assert calls == [(k, 5) for k in range(1, 6)]
    assert cluster.description == "local cluster, 2 workers (threads)"


def test_inline_and_cluster_give_identical_results(cluster):
    seeds = list(range(12))
    inline = Executor(jobs=1).map(seeded_sum, seeds)
    assert cluster.map(seeded_sum, seeds) == inline
    # numpy's own answer for one seed, computed here
    assert inline[3] == float(np.random.default_rng(3).standard_normal(10_000).sum())


def test_errors_first_in_item_order_or_settled(cluster):
    with pytest.raises(ValueError, match="odd item 1"):
        cluster.map(fails_on_odd, range(6))
    settled = cluster.map_settled(fails_on_odd, range(4))
    assert [ok for ok, _ in settled] == [True, False, True, False]
    assert settled[0][1] == 0 and str(settled[3][1]) == "odd item 3"
    inline = Executor(jobs=1).map_settled(fails_on_odd, range(4))
    assert [(ok, str(v)) for ok, v in inline] == [(ok, str(v)) for ok, v in settled]


def test_cancel_stops_within_a_second(cluster):
    cancel = threading.Event()
    threading.Timer(0.3, cancel.set).start()
    start = time.perf_counter()
    with pytest.raises(CancelledError, match="cancelled"):
        cluster.map(sleep_long, range(6), cancel=cancel)
    assert time.perf_counter() - start < 0.3 + 1.0
    # the cluster still works after a cancel
    assert cluster.map(late_square, [2, 3]) == [4, 9]


def test_cancel_inline_before_the_next_item():
    cancel = threading.Event()
    seen = []

    def step(x):
        seen.append(x)
        if x == 1:
            cancel.set()
        return x

    with pytest.raises(CancelledError):
        Executor(jobs=1).map(step, range(5), cancel=cancel)
    assert seen == [0, 1]


def test_given_scheduler_runs_the_same_code():
    from distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None,
                      scheduler_kwargs={"dashboard_address": "127.0.0.1:0"}) as running:
        with Executor(scheduler=running.scheduler_address) as executor:
            assert executor.description == f"cluster at {running.scheduler_address}"
            assert executor.map(seeded_sum, range(4)) == [seeded_sum(k) for k in range(4)]


@pytest.mark.parametrize("address", ["tcp://127.0.0.1:9", "no-port-here:x"])
def test_wrong_scheduler_address_is_a_setting_error(address):
    start = time.perf_counter()
    executor = Executor(scheduler=address)
    assert executor.description == f"cluster at {address}"
    with pytest.raises(SettingError) as caught:
        executor.map(seeded_sum, [1])
    message = str(caught.value)
    assert "--scheduler" in message and address in message
    assert time.perf_counter() - start < 10.0
    executor.close()
