"""Large data: every step reports progress and honours cancel, sampled steps say how large
their sample was, the cores never change a result (issue "Scale")."""

from __future__ import annotations

import io
import threading
import time

import numpy as np
import pytest

from grovewise.cli import TerminalProgress
from grovewise.errors import CancelledError
from grovewise.progress import StepMeter, time_left_text
from grovewise.report.content import sample_rows
from grovewise.report.manifest import build_manifest
from grovewise.review import STEPS, Review, ReviewInputs, ReviewSettings
from grovewise.sample_data import sample_paths
from grovewise.sampling import stratified_rows


def _inputs() -> ReviewInputs:
    paths = sample_paths()
    return ReviewInputs(paths["forest"], paths["data"], target=paths["target"])


SMALL = dict(permutation_rows=600, exactness_rows=1000, proximity_rows=400,
             permutation_repeats=2, depth=2, seed=3, stability_resamples=2)


def test_stratified_sample_keeps_class_shares_and_is_seeded():
    labels = np.repeat([0, 1, 2], [7000, 2500, 500])
    s = stratified_rows(labels, labels.size, 1000, seed=5)
    # each class keeps its share of the 10,000 rows: 700, 250 and 50 of the 1,000
    assert np.bincount(labels[s.rows]).tolist() == [700, 250, 50]
    assert s.size == 1000 and s.sampled and np.all(np.diff(s.rows) > 0)
    assert "a sample of 1,000 of 10,000 rows (seed 5" in s.describe()
    assert np.array_equal(stratified_rows(labels, labels.size, 1000, seed=5).rows, s.rows)
    assert not np.array_equal(stratified_rows(labels, labels.size, 1000, seed=6).rows, s.rows)
    everything = stratified_rows(labels, labels.size, 0, seed=5)
    assert everything.size == labels.size and everything.describe() == "all 10,000 rows"
    # a rare class keeps at least one row
    rare = np.r_[np.zeros(9999, dtype=int), 1]
    assert 1 in rare[stratified_rows(rare, 10000, 100, seed=0).rows]


def test_meter_reports_counts_time_left_and_stops_on_cancel():
    calls = []
    cancel = threading.Event()
    meter = StepMeter(lambda *a: calls.append(a), "anatomy", 10, "passes", cancel=cancel,
                      start=0.2, span=0.5, every=0.0)
    for _ in range(4):
        time.sleep(0.01)
        meter.advance()
    step, fraction, message = calls[-1]
    assert step == "anatomy" and fraction == pytest.approx(0.2 + 0.5 * 0.4)
    assert message.startswith("passes 4/10, about ") and message.endswith(" s left")
    cancel.set()
    with pytest.raises(CancelledError, match="anatomy step was cancelled during passes"):
        meter.advance()
    assert time_left_text(125) == "about 2 min 05 s left" and time_left_text(None) == ""


def test_terminal_is_never_silent_for_more_than_two_seconds():
    out = io.StringIO()
    with TerminalProgress(stream=out, every=1.0) as progress:
        progress("surrogate", 0.0, "surrogate: starting")
        time.sleep(2.6)  # a long library call that says nothing
        progress("surrogate", 1.0, "surrogate: done")
    lines = out.getvalue().splitlines()
    assert len(lines) >= 4  # start, at least two watch lines, done
    assert "still working" in lines[1] and "[....................]" in lines[1]
    assert lines[-1].endswith("surrogate: done")


def test_review_records_every_sample_and_reports_progress_in_every_step():
    seen: dict[str, list[tuple[float, float, str]]] = {}

    def progress(step, fraction, message, *_):
        seen.setdefault(step, []).append((time.perf_counter(), fraction, message))

    review = Review(_inputs(), ReviewSettings(time_limit=6, **SMALL))
    review.run(progress=progress)
    assert set(seen) == set(STEPS)
    for step, calls in seen.items():
        assert calls[0][1] == 0.0 and calls[-1][1] == 1.0, step
    # permutation passes were counted: 1 + 16 features x 2 repeats on 600 rows
    assert any("permutation passes 33/33" in m for _, _, m in seen["anatomy"])
    ex = review.intake.exactness
    assert ex.rows == 1000 and ex.sample["sampled"] and "1,000 of 3,000" in ex.text()
    perm = review.anatomy.importance.permutation_setting
    assert perm["n_rows"] == 600 and perm["sample"]["size"] == 600
    assert review.anatomy.importance.permutation_se.shape == (16,)
    assert review.proximity.rows.size == 400 and review.proximity.sample["n_total"] == 3000
    searched = review.surrogate.proximity["searched"]
    assert searched["size"] == 400 and searched["n_total"] == review.intake.train_rows.size
    table = dict(sample_rows(review))
    assert "600 of 3,000" in table["Permutation importance (standard error from the rows used)"]
    assert "400 of 3,000" in table["Proximity pairs and counts"]
    assert build_manifest(review)["settings"]["permutation_rows"] == 600


def test_cancel_keeps_the_finished_steps_and_stops_within_two_seconds():
    cancel = threading.Event()
    asked = []

    def progress(step, fraction, message, *_):
        if step == "anatomy" and "permutation passes" in message and not asked:
            asked.append(time.perf_counter())
            cancel.set()

    review = Review(_inputs(), ReviewSettings(**{**SMALL, "permutation_rows": 3000,
                                                  "permutation_repeats": 5}))
    with pytest.raises(CancelledError):
        review.run(progress=progress, cancel=cancel)
    stopped = time.perf_counter() - asked[0]
    assert stopped < 2.0
    assert review.done("intake") and not review.done("anatomy")


@pytest.mark.slow  # about 50 s: run on purpose with `pytest -m slow`
def test_jobs_never_change_a_result():
    digests = []
    for jobs in (1, 2):
        # a node limit and a generous clock: every stage stops on counts, not on time
        review = Review(_inputs(), ReviewSettings(time_limit=120, node_limit=30, **SMALL))
        review.jobs = jobs
        review.run()
        digests.append(build_manifest(review)["digests"])
    assert digests[0] == digests[1]
    assert set(digests[0]) == set(STEPS)
