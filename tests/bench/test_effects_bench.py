"""Benchmark: what the effects add to the review of the bundled sample, measured in one run.

Run on purpose: ``python3 -m pytest tests/bench/test_effects_bench.py -m bench -s``.
Target: the sample's review with its effects at most 15 s longer than without. The effects
are computed in the cases step; they are timed alone, and the review without them is the
whole review less that time (the same run, the same machine state).
"""

from __future__ import annotations

import time

import pytest

from grovewise.review import Review, ReviewInputs, ReviewSettings
from grovewise.sample_data import sample_paths

from .common import print_table

pytestmark = pytest.mark.bench


def test_effects_cost_on_the_sample_review():
    p = sample_paths()
    review = Review(ReviewInputs(p["forest"], p["data"], target=p["target"]),
                    ReviewSettings(time_limit=20))
    start = time.perf_counter()
    review.run()
    whole = time.perf_counter() - start
    cases = review.cases
    start = time.perf_counter()
    again = review._effects(cases, review.case_rows(), lambda *_: None, None)
    effects = time.perf_counter() - start
    assert again.importance == cases.effects.importance  # the same sample, the same numbers
    without = whole - effects
    print_table(
        "Effects on the sample's review (3,000 rows, 16 features, 300 trees)",
        ["setting", "with effects (s)", "baseline", "without (s)", "added (s)", "target (s)"],
        [["whole review, 20 s solve", whole, "review less effects", without, effects, 15.0],
         ["effects alone: contributions on "
          f"{cases.effects.sample['size']:,} rows, interactions on "
          f"{cases.effects.interaction_rows} rows, {len(cases.effects.curves)} curves",
          effects, "-", "-", effects, 15.0]])
    assert effects <= 15.0
