"""A review that holds up when checked: intervals, the headline, weak spots, the time limit
(issue "A review that holds up when someone checks it")."""

from __future__ import annotations

import time

import numpy as np
import pytest
from scipy.stats import binomtest
from sklearn.datasets import load_breast_cancer, make_classification
from sklearn.ensemble import RandomForestClassifier

import grovewise as gw
from grovewise.analysis.importance import (importance_comparison, impurity_importance,
                                           permutation_importance_result, reliance)
from grovewise.analysis.intervals import wilson_interval


@pytest.mark.parametrize("k,n", [(0, 1), (1, 1), (7, 10), (93, 97), (1990, 2100), (0, 40)])
def test_wilson_interval_equals_scipy(k, n):
    # Reference: scipy's binomtest(...).proportion_ci(method="wilson") (Wilson 1927, JASA 22).
    ref = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    low, high = wilson_interval(k, n)
    assert low == pytest.approx(ref.low, abs=1e-12) and high == pytest.approx(ref.high, abs=1e-12)
    assert wilson_interval(0, 0) is None


def test_headline_flags_impurity_features_without_permutation_importance():
    # Several exact copies of the strongest feature of scikit-learn's breast-cancer set share
    # its impurity importance between them, while shuffling any one copy changes almost
    # nothing (the others still carry it): impurity ranks them high, permutation near zero.
    X, y = load_breast_cancer(return_X_y=True)
    worst = 22  # "worst perimeter"
    X = np.hstack([X] + [X[:, [worst]]] * 6)
    rf = RandomForestClassifier(n_estimators=60, max_depth=6, random_state=0).fit(X, y)
    forest = gw.from_estimator(rf)
    cmp = importance_comparison(impurity_importance(forest),
                                permutation_importance_result(forest, X, y, n_repeats=3))
    rel = reliance(cmp)
    assert rel.disagreements, "the top impurity features have no permutation importance"
    assert "Strobl et al. 2007" in rel.disagreements[0]
    assert "mean rank of impurity importance and permutation importance" in rel.headline()
    # the headline's order is by mean rank, recomputed here
    mean = (cmp.impurity_rank + cmp.permutation_rank) / 2
    assert mean[rel.order[0]] == mean.min()


@pytest.fixture(scope="module")
def twenty_thousand(tmp_path_factory):
    """20,000 rows of invented data (make_classification, seeded) and a forest, as files."""
    import pandas as pd
    import skops.io as sio

    folder = tmp_path_factory.mktemp("big")
    X, y = make_classification(n_samples=20_000, n_features=20, n_informative=8,
                               random_state=4)
    frame = pd.DataFrame(X, columns=[f"f{j}" for j in range(20)])
    frame["y"] = y
    frame.to_csv(folder / "data.csv", index=False)
    rf = RandomForestClassifier(n_estimators=60, max_depth=10, random_state=0, n_jobs=2)
    sio.dump(rf.fit(frame.drop(columns="y"), y), folder / "rf.skops")
    return folder


# 30 s is checked on purpose (-m slow) and by tests/bench/test_scale_bench.py
@pytest.mark.parametrize("limit", [5.0, 10.0, pytest.param(30.0, marks=pytest.mark.slow)])
def test_the_time_limit_bounds_the_whole_surrogate_step(twenty_thousand, limit):
    from grovewise.review import Review, ReviewInputs, ReviewSettings

    review = Review(ReviewInputs(twenty_thousand / "rf.skops", twenty_thousand / "data.csv",
                                 target="y"), ReviewSettings(time_limit=limit))
    review.run_step("intake")
    first = []

    def progress(step, fraction, message, *_):
        if fraction > 0 and not first:
            first.append(time.perf_counter())

    start = time.perf_counter()
    review.run_step("surrogate", progress=progress)
    wall = time.perf_counter() - start
    print(f"\nmeasured: surrogate step {wall:.2f} s at --time-limit {limit:g} on 20,000 rows")
    # T + max(1 s, 5%) is the contract (the benchmark checks it exactly); 1.5 s more here
    # for a busy CI machine
    assert wall <= limit + max(1.0, 0.05 * limit) + 1.5
    assert first[0] - start < 2.0  # the first progress line comes at once
    names = [s["name"] for s in review.surrogate.stages]
    assert "local_search" in names


def test_no_table_header_breaks_mid_word():
    """The report's widest tables, with breast-cancer feature names in their cells: headers
    and names wrap at spaces or after an underscore, never inside a word (the PDF's own
    layout functions)."""
    from grovewise.report.pdf_report import CELL, CELL_HEAD, CELL_PAD_X, _column_widths, _wrap

    names = [n.replace(" ", "_") for n in load_breast_cancer().feature_names]
    tables = [
        (["feature", "impurity", "rank", "permutation (mean)", "(std)", "(se)", "rank"],
         [[n, "0.1234", "3", "0.0123", "0.0012", "0.0004", "12"] for n in names]),
        (["row", "part", "ensemble", "its probability", "surrogate", "leaf",
          "features on its path"],
         [["1234", "holdout", "malignant", "0.987", "benign", "2",
           f"{names[22]} = 105.2, {names[27]} = 0.1471"]]),
        (["row", "part", "ensemble", "its probability", "surrogate", "leaf"] + names[20:24],
         [["1234", "holdout", "malignant", "0.987", "benign", "2", "25.1", "17.3", "105.2",
           "1980"]]),
        (["leaf", "class", "train rows", "train coverage", "train fidelity (unweighted)",
          "holdout rows", "holdout fidelity (unweighted)"], [["0", "1", "2,100", "45.2%",
                                                            "93.1%", "900", "92.4%"]]),
    ]
    for header, rows in tables:
        widths = _column_widths(header, rows)
        cells = [(h, CELL_HEAD, w) for h, w in zip(header, widths)]
        cells += [(c, CELL, w) for row in rows for c, w in zip(row, widths)]
        for text, font, width in cells:
            lines = _wrap(text, font, width - 2 * CELL_PAD_X)
            words = text.split()
            for line in lines[:-1]:
                # a line ends at a whole word or just after an underscore
                assert line.endswith("_") or line.split()[-1] in words, (text, lines)
