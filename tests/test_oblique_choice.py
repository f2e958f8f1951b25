"""Multi-feature splits must earn their place (``oblique_level``).

Outside reference: scipy's ``binomtest(gained, gained + lost, 0.5, alternative="greater")``,
the one-sided exact McNemar test, on the two trees' training predictions computed here.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from scipy.stats import binomtest
from sklearn.datasets import load_iris

from grovewise.surrogate import ObliqueSurrogate
from grovewise.surrogate.pipeline import is_oblique


def _fit(X, y, level):
    # a node limit: every stage stops on counts, so two fits see the same candidates
    return ObliqueSurrogate(depth=2, max_features_per_split=2, time_limit=60.0, random_state=0,
                            node_limit=100, prove=False, oblique_level=level).fit(X, y)


def _stage_predictions(est, X, name):
    tree = next(s.tree for s in est.result_.stages if s.name == name)
    return est.classes_[tree.predict_index_scaled(est._scaled(X))], tree


def _counts(X, y, est, best, axis):
    ok_best = _stage_predictions(est, X, best)[0] == y
    ok_axis = _stage_predictions(est, X, axis)[0] == y
    return int((ok_best & ~ok_axis).sum()), int((~ok_best & ok_axis).sum())


def _p_in(sentence: str) -> float:
    return float(re.search(r"McNemar p = ([0-9.e+-]+)", sentence).group(1))


def test_a_small_gain_hands_the_answer_to_the_axis_aligned_tree():
    X, y = load_iris(return_X_y=True)
    free = _fit(X, y, None)
    assert is_oblique(free.result_.tree), "the search finds a two-feature tree on iris"
    assert free.choice_ == ""
    held = _fit(X, y, 0.05)
    best = held.result_.by_objective
    assert best == free.winner_  # the same candidates, ranked by the objective alone
    assert held.winner_ in ("greedy", "optimal_axis")
    assert not is_oblique(held.exact_tree_)
    gained, lost = _counts(X, y, held, best, held.winner_)
    p = binomtest(gained, gained + lost, 0.5, alternative="greater").pvalue
    assert 0 < gained <= 6 and p >= 0.05
    assert f"agrees with the ensemble on {gained:,} training rows" in held.choice_
    assert f"disagrees on {lost:,} where it agrees" in held.choice_
    assert _p_in(held.choice_) == pytest.approx(p, rel=1e-2)
    # the answer is the best axis-aligned candidate: never worse than the exact axis tree
    axis_obj = next(s.objective for s in held.result_.stages if s.name == "optimal_axis")
    assert held.result_.objective <= axis_obj + 1e-12
    assert np.array_equal(held.predict(X), _stage_predictions(held, X, held.winner_)[0])


def test_a_significant_gain_keeps_the_multi_feature_splits():
    rng = np.random.default_rng(3)
    X = rng.uniform(size=(500, 3))
    y = (0.7 * X[:, 0] + 0.3 * X[:, 1] > 0.5).astype(int)
    est = _fit(X, y, 0.05)
    assert is_oblique(est.exact_tree_)
    assert est.choice_.startswith("Multi-feature splits kept")
    axis = min((s for s in est.result_.stages if not is_oblique(s.tree)
                and s.fidelity >= est.result_.stages[0].fidelity - 1e-12),
               key=lambda s: s.objective)
    gained, lost = _counts(X, y, est, est.winner_, axis.name)
    p = binomtest(gained, gained + lost, 0.5, alternative="greater").pvalue
    assert gained > 10 * max(lost, 1) and p < 1e-6
    assert _p_in(est.choice_) == pytest.approx(p, rel=1e-2)


def test_the_level_is_checked():
    from grovewise.errors import SettingError

    X, y = load_iris(return_X_y=True)
    for bad in (0, -0.1, 1.5, float("nan"), "0.05", True):
        with pytest.raises(SettingError, match="oblique_level"):
            _fit(X, y, bad)
