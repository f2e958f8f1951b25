"""Surrogate proof benchmark (issue 11): the certificate, the baselines and repeated splits.

Run on purpose: ``PYTHONPATH=src python3 -m pytest tests/bench/test_surrogate_proof_bench.py
-m bench -s``. Environment: ``GROVEWISE_BENCH_TIME`` (seconds per mimic, default 60),
``GROVEWISE_BENCH_SPLITS`` (seeded 70/30 splits per row, default 5), ``GROVEWISE_BENCH_ONLY``
(comma-separated substrings of the setting names).

Same panel as tests/bench/test_surrogate_bench.py. Per row, in one run: the certificate's gap
on the first split (the proven bound on every training row against the tree's objective),
whether the program (or polish of its tree) gave the final tree or tied it, the surrogate's
training objective against the exact axis-aligned tree's (depth 2; "n/a" at depth 3, where
it is not computed), and the holdout fidelity minus the greedy tree's, mean and standard
deviation over the splits. Targets: gap <= 0.5 on >= 6 of the 12 depth-2 rows; program gives
or ties the final tree on >= 1/3 of the rows; never worse than the exact axis-aligned tree;
mean holdout difference >= 0 on every row; mean depth-2 gain >= +5 points.

Beside the answer's holdout difference, ``obj_diff`` is that of the candidate the objective
alone would choose (``result_.by_objective``), measured on the same splits: the effect of
``oblique_level`` (multi-feature splits kept only when significantly better on the training
rows than the best axis-aligned candidate), and ``axis_kept`` counts the splits where it
handed the answer to an axis-aligned tree.
"""

from __future__ import annotations

import os
import time

import numpy as np
import pytest

from grovewise.loaders import from_estimator
from grovewise.surrogate import mimic

from .common import print_table
from .test_surrogate_bench import DATASETS, TIME, _rows_to_run, models

pytestmark = pytest.mark.bench

SPLITS = int(os.environ.get("GROVEWISE_BENCH_SPLITS", "5"))


def _holdout_of_stage(res, forest, X, name: str) -> float:
    """Holdout fidelity of one stage's tree (its exact, unrounded form)."""
    est = res.surrogate
    tree = next(s.tree for s in est.result_.stages if s.name == name)
    hold = res.holdout_rows
    pred = est.classes_[tree.predict_index_scaled(est._scaled(X[hold]))]
    return float(np.mean(pred == forest.predict(X[hold])))


def _program_gives_or_ties(res) -> bool:
    stages = {s["name"]: s["objective"] for s in res.stages}
    final = min(stages.values())
    return any(name in stages and stages[name] <= final + 1e-12 for name in ("program", "polish"))


def test_proof_panel():
    header = ["setting", "gap", "bound_method", "fidelity_bound", "winner", "program_ties",
              "objective", "axis_objective", "diff_mean", "diff_sd", "obj_diff_mean",
              "axis_kept", "splits", "seconds"]
    rows, misses = [], []
    gaps_d2, ties, gains_d2, obj_gains_d2, n_rows = [], 0, [], [], 0
    for name, ds, mname, depth in _rows_to_run():
        X, y = DATASETS[ds]()
        forest = from_estimator(models()[mname]().fit(X, y))
        diffs, obj_diffs, kept, first = [], [], 0, None
        t0 = time.perf_counter()
        for split in range(SPLITS):
            res = mimic(forest, X, depth=depth, holdout=0.3, random_state=split,
                        time_limit=TIME)
            f = res.fidelity
            diffs.append(100 * (f["surrogate"]["holdout"] - f["greedy"]["holdout"]))
            by_obj = res.surrogate.result_.by_objective
            kept += by_obj != res.winner
            obj_hold = (f["surrogate"]["holdout"] if by_obj == res.winner else
                        _holdout_of_stage(res, forest, X, by_obj))
            obj_diffs.append(100 * (obj_hold - f["greedy"]["holdout"]))
            if first is None:
                first = res
        c = first.certificate
        stages = {s["name"]: s["objective"] for s in first.stages}
        final = stages[first.winner]  # the answer's objective
        axis = stages.get("optimal_axis")
        tie = _program_gives_or_ties(first)
        n_rows += 1
        ties += tie
        mean, sd = float(np.mean(diffs)), float(np.std(diffs, ddof=1)) if len(diffs) > 1 else 0.0
        proof = c.get("proof") or {}
        rows.append([name, f"{c['gap']:.2f}", c.get("bound_method"),
                     f"{proof.get('fidelity_bound', float('nan')):.4f}", first.winner,
                     "yes" if tie else "no", f"{final:.5f}",
                     "n/a" if axis is None else f"{axis:.5f}", f"{mean:+.2f}", f"{sd:.2f}",
                     f"{np.mean(obj_diffs):+.2f}", kept, len(diffs), f"{time.perf_counter() - t0:.0f}"])
        if depth == 2:
            gaps_d2.append(c["gap"])
            gains_d2.append(mean)
            obj_gains_d2.append(float(np.mean(obj_diffs)))
        if axis is not None and final > axis + 1e-12:
            misses.append(f"{name}: objective {final:.5f} worse than the exact axis tree "
                          f"{axis:.5f}")
        if mean < 0:
            misses.append(f"{name}: holdout difference to greedy {mean:+.2f} points (mean)")
        print(f"  done {name} in {time.perf_counter() - t0:.0f} s", flush=True)
    print_table(f"Surrogate proof panel ({TIME:.0f} s per mimic, {SPLITS} splits per row; gap, "
                "winner, program and objectives from split 0)", header, rows)
    small = sum(g <= 0.5 for g in gaps_d2)
    print(f"depth-2 rows with gap <= 0.5: {small} of {len(gaps_d2)} (target >= 6 of 12)")
    print(f"rows where the program gives or ties the final tree: {ties} of {n_rows} "
          f"(target >= 1/3)")
    if gains_d2:
        print(f"mean depth-2 holdout gain over greedy: {np.mean(gains_d2):+.2f} points "
              f"(target >= +5); the objective's own choice: {np.mean(obj_gains_d2):+.2f}")
    print("misses:" if misses else "misses: none")
    for m in misses:
        print("  " + m)
