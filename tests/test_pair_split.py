"""The exact two-feature line of one node against an enumeration written here.

Reference: every line through two of the points, each such line with the points on it put
on either side in every way a slightly turned or moved line can (a run of the points along
the line on one side, the rest on the other), in both orientations. Any partition of the
points by a line is one of these (move the line until it meets a point, turn it about that
point until it meets another), so the least cost among them is the true optimum."""

import numpy as np
import pytest

from grovewise.surrogate.pair_split import best_pair_line


def enumerate_lines(P, delta):
    # identical points stay together: no line separates them
    P, inv = np.unique(P, axis=0, return_inverse=True)
    delta = np.bincount(inv.reshape(-1), weights=delta, minlength=len(P))
    n = len(P)
    best = np.inf
    for i in range(n):
        for j in range(i + 1, n):
            d = P[j] - P[i]
            if not np.any(d):
                continue
            u = np.array([-d[1], d[0]])
            side = P @ u - u @ P[i]
            on = np.flatnonzero(np.abs(side) <= 1e-12)
            along = on[np.argsort(P[on] @ d, kind="stable")]
            below = side < -1e-12
            for cut in range(len(along) + 1):
                for first_left in (True, False):
                    left = below.copy()
                    left[along[:cut]] = first_left
                    left[along[cut:]] = not first_left
                    for part in (left, ~left):
                        if 0 < part.sum() < n:
                            best = min(best, float(delta[part].sum()))
    return best


@pytest.mark.parametrize("seed", range(40))
def test_pair_line_equals_the_enumeration(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(3, 22))
    P = rng.random((n, 2))
    if seed % 2:  # a coarse grid: ties, collinear points and repeated points
        P = np.round(P * 4) / 4
    delta = rng.normal(size=n)
    got = best_pair_line(P, delta)
    want = enumerate_lines(P, delta)
    if got is None:
        assert len(np.unique(P, axis=0)) < 2
        return
    cost, u, b = got
    left = P @ u < b
    assert 0 < left.sum() < n
    assert not np.any(left[:, None] & ~left[None, :] & (P[:, None] == P[None, :]).all(axis=2))
    assert cost == pytest.approx(float(delta[left].sum()), abs=1e-12)
    assert cost == pytest.approx(want, abs=1e-9)
    assert np.abs(u).sum() == pytest.approx(1.0)


def test_one_distinct_point_has_no_line():
    assert best_pair_line(np.ones((5, 2)), np.arange(5.0)) is None
