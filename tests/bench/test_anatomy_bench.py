"""Benchmark: usage maps on a large forest, and proximity pairs against the dense route.

Run on purpose: ``python -m pytest tests/bench/test_anatomy_bench.py -m bench -s``.
Targets: ``depth_usage`` at most 0.2 s on the 500-tree forest of the forest benchmark;
``proximity_pairs`` (n = 6,000, 200 trees, threshold 0.9) with at least 5x less peak memory
than the dense route (``proximity`` then thresholding its upper triangle) and no slower.

Fitted forests are cached as ``.skops`` files (no pickle) in the temporary folder, so a
second run skips the fitting.
"""

from __future__ import annotations

import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import sklearn
import skops.io as sio
from sklearn.datasets import make_classification
from sklearn.ensemble import RandomForestClassifier

import grovewise as gw
from grovewise.analysis import depth_usage, position_usage, proximity, proximity_pairs

from .common import best_time, print_table

CACHE = Path(tempfile.gettempdir()) / "grovewise_bench"


def cached_forest(name: str, fit) -> RandomForestClassifier:
    """A fitted forest from the cache, or fit it and cache it (skops, trusted types only)."""
    path = CACHE / f"{name}_sklearn{sklearn.__version__}.skops"
    if path.is_file():
        try:
            return sio.load(path, trusted=["sklearn.tree._tree.Tree"])
        except Exception:  # a stale or damaged cache: fit again
            path.unlink()
    model = fit()
    CACHE.mkdir(exist_ok=True)
    sio.dump(model, path)
    return model


def walk_depth_counts(model, n_features: int) -> np.ndarray:
    """Baseline: the plain approach, a Python loop over every node of every ``tree_``
    (parents have smaller ids than their children in scikit-learn's numbering)."""
    grid = {}
    for est in model.estimators_:
        t = est.tree_
        left, right, feat = t.children_left, t.children_right, t.feature
        depth = [0] * t.node_count
        for node in range(t.node_count):
            if left[node] != -1:
                depth[left[node]] = depth[right[node]] = depth[node] + 1
                key = (int(feat[node]), depth[node])
                grid[key] = grid.get(key, 0) + 1
    out = np.zeros((n_features, max(d for _, d in grid) + 1))
    for (f, d), c in grid.items():
        out[f, d] = c
    return out


@pytest.mark.bench
def test_depth_usage_speed_on_500_deep_trees():
    # The forest of tests/bench/test_forest_bench.py.
    X, y = make_classification(20_000, 30, n_informative=12, random_state=0)
    model = cached_forest("rf500_deep", lambda: RandomForestClassifier(
        500, n_jobs=2, random_state=0).fit(X, y))
    forest = gw.from_estimator(model)
    nodes = sum(t.n_nodes for t in forest.trees)
    start = time.perf_counter()
    first = depth_usage(forest, "count")
    cold = time.perf_counter() - start
    times = {w: best_time(lambda w=w: depth_usage(forest, w), repeats=5)[0]
             for w in ("count", "gain", "cover")}
    pos_time, _ = best_time(lambda: position_usage(forest, 3), repeats=5)
    start = time.perf_counter()
    reference = walk_depth_counts(model, forest.n_features)
    walk = time.perf_counter() - start
    np.testing.assert_array_equal(first.matrix, reference)
    rows = [["depth_usage count, first call", cold, "target 0.2 s", 0.2, cold / 0.2]]
    rows += [[f"depth_usage {w}", t, "target 0.2 s", 0.2, t / 0.2] for w, t in times.items()]
    rows += [["depth_usage count", times["count"], "Python loop over nodes", walk,
              times["count"] / walk],
             ["position_usage (4 levels)", pos_time, "target 0.2 s", 0.2, pos_time / 0.2]]
    print_table(f"Usage maps: 500 trees, unlimited depth, {nodes} nodes",
                ["setting", "figure (s)", "baseline", "baseline (s)", "ratio"], rows)
    assert max(cold, *times.values()) <= 0.2


def _peak(fn) -> tuple[float, object]:
    """Peak traced memory (bytes) of one call, and its result."""
    tracemalloc.start()
    try:
        result = fn()
        return tracemalloc.get_traced_memory()[1], result
    finally:
        tracemalloc.stop()


def _review_rows(X_held: np.ndarray) -> np.ndarray:
    """6,000 review rows: 3,000 held-out rows and a slightly jittered copy of each (the
    near-duplicates a reviewer wants proximity to find)."""
    rng = np.random.default_rng(1)
    noise = 1e-3 * X_held.std(axis=0) * rng.standard_normal(X_held.shape)
    return np.vstack([X_held, X_held + noise])


@pytest.mark.bench
@pytest.mark.parametrize("depth", [None, 8])
def test_proximity_pairs_memory_and_time_against_dense(depth):
    X, y = make_classification(17_000, 30, n_informative=12, random_state=2)
    model = cached_forest(f"rf200_depth{depth}", lambda: RandomForestClassifier(
        200, max_depth=depth, n_jobs=2, random_state=0).fit(X[:14_000], y[:14_000]))
    forest = gw.from_estimator(model)
    R = _review_rows(X[14_000:])
    forest.apply(R[:10])  # compile the tree walk before timing

    def dense():
        P = proximity(forest, R)
        i, j = np.nonzero(np.triu(P >= 0.9, k=1))
        return i, j, P[i, j]

    def pairs():
        return tuple(proximity_pairs(forest, R, 0.9))

    t_dense, (di, dj, dp) = best_time(dense, repeats=2)
    t_pairs, (pi, pj, pp) = best_time(pairs, repeats=2)
    m_dense, _ = _peak(dense)
    m_pairs, _ = _peak(pairs)
    np.testing.assert_array_equal(pi, di)
    np.testing.assert_array_equal(pj, dj)
    np.testing.assert_array_equal(pp, dp)
    label = f"n=6000, 200 trees, {'unlimited depth' if depth is None else f'max_depth={depth}'}"
    print_table(f"Proximity pairs at threshold 0.9 ({label}; {len(pi)} pairs found)",
                ["setting", "figure", "baseline", "baseline value", "ratio baseline/figure"],
                [["peak memory (MB), proximity_pairs", m_pairs / 1e6, "dense route",
                  m_dense / 1e6, m_dense / m_pairs],
                 ["time (s), proximity_pairs", t_pairs, "dense route", t_dense,
                  t_dense / t_pairs]])
    assert len(pi) >= 1000  # the jittered copies are found
    assert m_dense >= 5 * m_pairs
    assert t_pairs <= t_dense
