"""A study of one more bound route for two-feature splits, on the sample's surrogate rows.

Run on purpose: ``PYTHONPATH=src python3 -m pytest tests/bench/test_proof_routes_bench.py
-m bench -s``.

The route ("witnesses under the root"): a set of rows that no single two-feature line with two
leaves fits without a disagreement (a witness) costs any depth-2 tree at least its own
least disagreement whenever the root sends all of it to one side, since each side is then a
depth-1 tree. So for disjoint witnesses W, every tree disagrees by at least
``sum(opt1(W)) - max over root lines of sum(opt1(W) for W the line cuts)``. The cut is
over-estimated (valid) per root feature pair on 720 direction bins, each witness's
projection widened by the bin's half-width. The study prints, beside the tree's own
disagreement: the best single two-feature line on every row (exact, by the rotating sweep),
the witnesses' sum, the largest cut and the bound that is left.
"""

from __future__ import annotations

import itertools
import json
import time

import numpy as np
import pytest

from grovewise.sample_data import sample_paths

from .common import print_table

pytestmark = pytest.mark.bench


def _one_line(Xs, y, w, K, rows, feats):
    """Least weighted disagreement of one line on two of ``feats`` with two leaves, exact."""
    from grovewise.surrogate.pair_split import best_pair_line

    W = np.zeros((rows.size, K))
    W[np.arange(rows.size), y[rows]] = w[rows]
    best, arg = W.sum() - W.sum(axis=0).max(), None
    for a, b in itertools.combinations(range(K), 2):
        delta, const = W[:, b] - W[:, a], W.sum() - W[:, b].sum()
        for pq in itertools.combinations(feats, 2):
            r = best_pair_line(Xs[np.ix_(rows, pq)], delta)
            if r is not None and const + r[0] < best - 1e-15:
                best, arg = const + r[0], (pq, r[1], r[2], a, b)
            if best <= 1e-15:
                return 0.0, arg
    return max(best, 0.0), arg


def _witnesses(Xs, y, w, K, feats, union, max_rows=16):
    """Disjoint witnesses grown from the closest conflicting pairs: while one line fits the
    set, add the nearest unused row that this line gets wrong."""
    from sklearn.neighbors import NearestNeighbors

    Z = Xs[:, union]
    _, idx = NearestNeighbors(n_neighbors=60).fit(Z).kneighbors(Z)
    seeds = []
    for i in range(len(y)):
        other = [j for j in idx[i][1:] if y[j] != y[i]]
        if other:
            seeds.append((np.abs(Z[i] - Z[other[0]]).sum(), i, other[0]))
    used = np.zeros(len(y), dtype=bool)
    found, values = [], []
    for _, i, j in sorted(seeds):
        if used[i] or used[j]:
            continue
        S, v = [i, j], 0.0
        while len(S) <= max_rows:
            v, arg = _one_line(Xs, y, w, K, np.array(S), feats)
            if v > 0 or arg is None:
                break
            pq, u, b, ca, cb = arg
            pool = [c for c in idx[i] if not used[c] and c not in S]
            if not pool:
                break
            left = Xs[np.ix_(pool, pq)] @ u < b
            wrong = [c for c, lf in zip(pool, left) if y[c] != (ca if lf else cb)]
            if not wrong:
                break
            centre = Z[S].mean(axis=0)
            S.append(min(wrong, key=lambda c: np.abs(Z[c] - centre).sum()))
        if v > 0:
            used[S] = True
            found.append(np.array(S))
            values.append(v)
    return found, np.array(values)


def _largest_cut(Xs, parts, values, root_feats, bins=720):
    """Over-estimate of the most witness weight one root line can cut."""
    worst, where = 0.0, None
    half = np.pi / bins / 2
    for p, q in itertools.combinations(root_feats, 2):
        P = [Xs[np.ix_(r, [p, q])] for r in parts]
        for g in range(bins):
            th = np.pi * (g + 0.5) / bins
            u = np.array([np.cos(th), np.sin(th)])
            proj = [pts @ u for pts in P]
            lo = np.array([v.min() for v in proj]) - np.sqrt(2) * half
            hi = np.array([v.max() for v in proj]) + np.sqrt(2) * half
            ev = np.concatenate([np.c_[lo, values], np.c_[hi, -values]])
            order = np.lexsort((-ev[:, 1], ev[:, 0]))  # an opening before a closing at ties
            c = float(np.cumsum(ev[order, 1]).max())
            if c > worst:
                worst, where = c, (int(p), int(q), th)
    return worst, where


def test_witnesses_under_the_root(monkeypatch, tmp_path):
    import grovewise.surrogate.pipeline as pipeline
    from grovewise.cli import main

    seen = {}
    original = pipeline.prove

    def capture(*args, **kwargs):
        seen["args"] = args
        return original(*args, **kwargs)

    monkeypatch.setattr(pipeline, "prove", capture)
    paths = sample_paths()
    assert main(["surrogate", str(paths["forest"]), str(paths["data"]), "--target",
                 "complication", "--out", str(tmp_path / "s"), "--time-limit", "20",
                 "--stability-resamples", "0"]) == 0
    Xs, y, w, K, depth, admissible = seen["args"][:6]
    assert depth == 2
    root, child = np.flatnonzero(admissible[0]), np.flatnonzero(admissible[1])
    saved = json.loads((tmp_path / "s" / "surrogate.json").read_text())
    tree_dis = 1 - saved["surrogate"]["fidelity"]  # weighted, on the training rows
    t0 = time.perf_counter()
    line_all, _ = _one_line(Xs, y, w, K, np.arange(len(y)), child)
    t_line = time.perf_counter() - t0
    t0 = time.perf_counter()
    parts, values = _witnesses(Xs, y, w, K, child, np.union1d(root, child))
    t_wit = time.perf_counter() - t0
    t0 = time.perf_counter()
    cut, where = _largest_cut(Xs, parts, values, root)
    t_cut = time.perf_counter() - t0
    bound = max(values.sum() - cut, 0.0)
    rows = [
        ["the tree's weighted disagreement (training rows)", f"{tree_dis:.5f}", "", ""],
        ["best single two-feature line, every row (exact)", f"{line_all:.5f}",
         f"{t_line:.1f}", f"{len(child) * (len(child) - 1) // 2} pairs"],
        ["disjoint witnesses (no one line fits any)", f"{values.sum():.5f}", f"{t_wit:.1f}",
         f"{len(parts)} witnesses, {min(map(len, parts))}-{max(map(len, parts))} rows"],
        ["the most one root line cuts", f"{cut:.5f}", f"{t_cut:.1f}",
         f"root pair {where[:2]}, direction {where[2]:.3f} rad"],
        ["bound left (witnesses - cut)", f"{bound:.5f}", "",
         f"gap {(tree_dis - bound) / tree_dis:.2f}"],
    ]
    print_table("Witnesses under the root, on the sample's 2,100 training rows (depth 2, "
                "at most 2 features per split)", ["figure", "value", "seconds", "note"], rows)
    assert bound <= tree_dis + 1e-12  # a bound never exceeds what a tree reaches
