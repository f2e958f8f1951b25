"""The proof's bound against true optima found by enumerations written here.

References (independent of the product): at depth 1 with two features per split on
two-feature data, every line through two points with the points on it placed either way
(see tests/test_pair_split.py for why that covers every line); at depth 2 with one feature
per split, every axis-aligned tree (root feature and cut, then each child's feature and cut
or no split). A leaf predicts its weighted-majority class, so a partition's cost is the
weight outside each part's majority."""

import gzip
import itertools

import highspy
import numpy as np
import pytest

from grovewise.surrogate.proof import classes_bound, prove


def part_cost(y, w, parts, K):
    total = 0.0
    for rows in parts:
        if rows.any():
            per = np.bincount(y[rows], weights=w[rows], minlength=K)
            total += per.sum() - per.max()
    return total


def depth1_lines_optimum(P, y, w, K):
    n = len(P)
    best = part_cost(y, w, [np.ones(n, bool)], K)
    for i, j in itertools.combinations(range(n), 2):
        d = P[j] - P[i]
        if not d.any():
            continue
        u = np.array([-d[1], d[0]])
        side = P @ u - u @ P[i]
        on = np.flatnonzero(np.abs(side) <= 1e-12)
        along = on[np.argsort(P[on] @ d, kind="stable")]
        for cut in range(len(along) + 1):
            for first_left in (True, False):
                left = side < -1e-12
                left[along[:cut]] = first_left
                left[along[cut:]] = not first_left
                best = min(best, part_cost(y, w, [left, ~left], K))
    return best


def cuts(v):
    u = np.unique(v)
    return list(0.5 * (u[1:] + u[:-1]))


def depth2_axis_optimum(X, y, w, K):
    n, p = X.shape
    everyone = np.ones(n, bool)

    def best1(rows):
        b = part_cost(y, w, [rows], K)
        for f in range(p):
            for c in cuts(X[rows, f]):
                left = rows & (X[:, f] <= c)
                b = min(b, part_cost(y, w, [left, rows & ~left], K))
        return b

    best = best1(everyone)
    for f in range(p):
        for c in cuts(X[:, f]):
            left = X[:, f] <= c
            best = min(best, best1(left) + best1(~left))
    return best


@pytest.mark.parametrize("seed", range(8))
def test_depth1_two_feature_bound_never_exceeds_the_optimum(seed):
    rng = np.random.default_rng(seed)
    n, K = 11, 2 + seed % 2
    P = rng.random((n, 2))
    y = rng.integers(0, K, n)
    w = rng.random(n) + 0.2
    w /= w.sum()
    truth = depth1_lines_optimum(P, y, w, K)
    proof = prove(P, y, w, K, 1, np.ones((1, 2), bool), 2, node_limit=None)
    assert proof.disagreement_bound <= truth + 1e-7
    # the one part (every row) was solved to optimality: the bound is the optimum
    assert proof.method == "parts" or truth <= classes_bound(y, w, K, 1) + 1e-7
    assert proof.parts[0].status == "optimal"
    assert proof.disagreement_bound == pytest.approx(truth, rel=1e-3, abs=1e-7)


@pytest.mark.parametrize("seed", range(6))
def test_depth2_axis_bound_never_exceeds_the_optimum(seed):
    rng = np.random.default_rng(100 + seed)
    n, p, K = 10, 3, 2 + seed % 2
    X = np.round(rng.random((n, p)) * 6) / 6
    y = rng.integers(0, K, n)
    w = rng.random(n) + 0.2
    w /= w.sum()
    truth = depth2_axis_optimum(X, y, w, K)
    proof = prove(X, y, w, K, 2, np.ones((2, p), bool), 1)
    assert proof.disagreement_bound <= truth + 1e-7
    assert proof.parts[0].status == "optimal"
    assert proof.disagreement_bound == pytest.approx(truth, rel=1e-3, abs=1e-7)


def test_the_classes_bound_counts_the_classes_beyond_the_leaves():
    y = np.array([0, 0, 0, 1, 1, 2, 3, 4])
    w = np.full(8, 1 / 8)
    # four leaves keep classes 0, 1 and two of the three single ones: one row always disagrees
    assert classes_bound(y, w, 5, 2) == pytest.approx(1 / 8)
    assert classes_bound(y, w, 5, 1) == pytest.approx(3 / 8)
    assert classes_bound(y, w, 5, 3) == 0.0


def test_an_exported_part_resolved_by_highs_gives_the_bound_used(tmp_path):
    rng = np.random.default_rng(7)
    P = rng.random((12, 2))
    y = (P[:, 0] + 0.3 * rng.random(12) > 0.6).astype(int)
    y[:3] = 1 - y[:3]
    w = np.full(12, 1 / 12)
    proof = prove(P, y, w, 2, 1, np.ones((1, 2), bool), 2)
    assert proof.disagreement_bound > 0
    [path] = proof.write_mps(tmp_path)
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    assert h.readModel(str(path)) == highspy.HighsStatus.kOk
    h.run()
    assert h.getModelStatus() == highspy.HighsModelStatus.kOptimal
    assert h.getInfo().objective_function_value == pytest.approx(proof.parts[0].bound,
                                                                 rel=1e-4, abs=1e-9)
    assert gzip.decompress(proof.parts[0].mps.tobytes()) == path.read_bytes()


def test_the_sentence_states_bound_tree_and_gap():
    y = np.array([0, 1, 2, 3, 4, 4])
    w = np.full(6, 1 / 6)
    proof = prove(np.random.default_rng(0).random((6, 2)), y, w, 5, 1,
                  np.ones((1, 2), bool), 2)
    text = proof.sentence(0.6)
    assert text.startswith("No tree of depth 1 with at most 2 features per split agrees")
    assert f"more than {100 * (1 - proof.disagreement_bound):.1f}%" in text
    assert "this tree agrees on 40.0%" in text
    assert f"gap {proof.gap(0.6):.2f}" in text
