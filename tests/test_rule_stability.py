"""Stability of the rules over bootstrap re-fits (grovewise.surrogate.stability).

References: a re-fit done by hand with ``mimic`` on the same resample (its split features and
classes must equal the stored ones), plain numpy counting for the agreement and fidelity
figures, and two data sets made for the test: one whose labels follow a single oblique rule
(0.6·x0 + 0.4·x1 > 0.5, 3% of labels flipped) and one of pure-noise labels.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from sklearn.ensemble import RandomForestClassifier

from grovewise.loaders import from_estimator
from grovewise.report.manifest import digest
from grovewise.surrogate import mimic
from grovewise.surrogate.stability import (bootstrap_rows, node_name, rule_stability,
                                           split_features)

OPTIONS = dict(depth=1, proximity_threshold=None, max_features_per_split=2, alpha=1e-4)


def _forest(labels_from, seed=0, n=500, p=4):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 1, size=(n, p))
    y = labels_from(X, rng)
    rf = RandomForestClassifier(n_estimators=30, max_depth=6, random_state=seed).fit(X, y)
    return from_estimator(rf), X


def _oblique(X, rng):
    y = (0.6 * X[:, 0] + 0.4 * X[:, 1] > 0.5).astype(int)
    flip = rng.random(X.shape[0]) < 0.03
    return np.where(flip, 1 - y, y)


def _noise(X, rng):
    return rng.integers(0, 2, X.shape[0])


def _stability(forest, X, resamples=10, seed=0, **extra):
    ref = mimic(forest, X, holdout=0.3, random_state=seed, time_limit=5.0, **OPTIONS, **extra)
    return ref, rule_stability(forest, X, ref, resamples=resamples, time_limit=0.6, seed=seed,
                               options={**OPTIONS, **extra})


@pytest.fixture(scope="module")
def oblique():
    forest, X = _forest(_oblique)
    ref, stab = _stability(forest, X)
    return forest, X, ref, stab


def test_an_oblique_truth_gives_a_stable_root(oblique):
    _, _, ref, stab = oblique
    s = stab.surrogate
    assert s.reference[0] == ["x0", "x1"]  # the review's root is the true rule's features
    recurs = sum(sets[0] == ["x0", "x1"] for sets in s.node_sets)
    assert recurs >= 9, s.node_sets
    assert not s.unstable
    assert "recurs in" in stab.sentence() and "stable" in stab.sentence()


def test_pure_noise_gives_an_unstable_root():
    forest, X = _forest(_noise, seed=1)
    _, stab = _stability(forest, X, seed=1)
    s = stab.surrogate
    recurs = sum(sets[0] == s.reference[0] for sets in s.node_sets)
    assert recurs < 9, s.node_sets
    assert s.root_recurrence == recurs / 10


def test_figures_equal_a_recount(oblique):
    forest, X, ref, stab = oblique
    truth = forest.predict(X)[stab.eval_rows]
    classes = forest.classes_
    for name, t in stab.trees.items():
        labels = classes[t.predicted]
        fid = [float(np.mean(row == truth)) for row in labels]
        assert np.allclose(fid, t.holdout_fidelity, atol=0)
        pairs = [np.mean(labels[a] == labels[b])
                 for a, b in itertools.combinations(range(len(labels)), 2)]
        assert t.pairwise_agreement == pytest.approx(np.mean(pairs), abs=1e-15)
        assert 0.0 <= t.root_recurrence <= 1.0


def test_a_fixed_seed_gives_identical_runs_and_a_refit_by_hand_agrees():
    """With a node limit every stage stops on counts, not the clock: two runs are identical,
    and resample 1 fitted again by hand (same rows, seed and options) gives the same tree."""
    forest, X = _forest(_oblique, seed=2, n=200)
    options = {**OPTIONS, "node_limit": 20}
    ref = mimic(forest, X, holdout=0.3, random_state=0, **options)
    runs = [rule_stability(forest, X, ref, resamples=2, time_limit=30.0, seed=5,
                           options=options) for _ in range(2)]
    assert digest(runs[0]) == digest(runs[1])
    rows = bootstrap_rows(ref.train_rows, 5, 1)
    assert rows.size == ref.train_rows.size and np.isin(rows, ref.train_rows).all()
    assert np.unique(rows).size < rows.size  # drawn with replacement
    assert not np.array_equal(rows, bootstrap_rows(ref.train_rows, 5, 0))
    again = mimic(forest, X[rows], holdout=None, random_state=6, time_limit=30.0, **options)
    names = list(forest.feature_names)
    stab = runs[0]
    assert split_features(again.surrogate.tree_, names) == stab.surrogate.node_sets[1]
    assert split_features(again.surrogate.result_.greedy_tree, names) == \
        stab.greedy.node_sets[1]
    held = X[stab.eval_rows]
    index = {c: i for i, c in enumerate(forest.classes_.tolist())}
    assert [index[c] for c in again.surrogate.predict(held).tolist()] == \
        stab.surrogate.predicted[1].tolist()
    # the re-fits whose answer went to an axis-aligned tree (oblique_level), counted by hand
    first = mimic(forest, X[bootstrap_rows(ref.train_rows, 5, 0)], holdout=None,
                  random_state=5, time_limit=30.0, **options)
    handed = sum(r.surrogate.result_.by_objective != r.winner for r in (first, again))
    assert stab.handed_to_axis == handed
    said = f"In {handed} of 2 re-fits the best tree's multi-feature splits"
    assert (said in stab.sentence("surrogate")) == (handed > 0)


def test_node_names_and_bad_settings():
    assert [node_name(t) for t in range(7)] == ["root", "root.L", "root.R", "root.L.L",
                                                "root.L.R", "root.R.L", "root.R.R"]
    from grovewise.errors import SettingError
    from grovewise.review import ReviewSettings

    forest, X = _forest(_oblique, n=100)
    ref = mimic(forest, X, holdout=0.3, time_limit=2.0, **OPTIONS)
    with pytest.raises(SettingError, match="stability_resamples"):
        rule_stability(forest, X, ref, resamples=1)
    with pytest.raises(SettingError, match="stability_resamples"):
        ReviewSettings(stability_resamples=1).validate()
    with pytest.raises(SettingError, match="stability_time_limit"):
        ReviewSettings(stability_time_limit=0).validate()
    assert ReviewSettings(time_limit=60).stability_seconds() == 3.0
    assert ReviewSettings(time_limit=4).stability_seconds() == 1.0
