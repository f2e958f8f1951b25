"""Effect curves: partial dependence, individual curves, accumulated local effects.

References named beside each check: the definition (the estimator's own ``predict_proba``
with the column set to each grid value), scikit-learn's ``partial_dependence(method="brute")``
on the same grid, and, for accumulated local effects, the centred partial dependence of a
model that is additive in its margin (gradient boosting of single-split trees). Data: breast
cancer and wine, and tables invented for the tests (said where).
"""

import lightgbm as lgb
import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_wine
from sklearn.ensemble import GradientBoostingClassifier, RandomForestClassifier
from sklearn.inspection import partial_dependence as sklearn_partial_dependence

import grovewise as gw
from grovewise.analysis.effects import DEFAULT_GRID


def test_partial_dependence_equals_its_definition_and_scikit_learn():
    X, y = load_breast_cancer(return_X_y=True)
    model = RandomForestClassifier(40, random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    pd_ = gw.partial_dependence(forest, X, 3, kind="both")
    assert pd_.grid.size <= DEFAULT_GRID and pd_.average.shape == (pd_.grid.size, 2)
    # reference: the definition, with the estimator's own predict_proba
    for k in (0, pd_.grid.size // 2, pd_.grid.size - 1):
        moved = X.copy()
        moved[:, 3] = pd_.grid[k]
        assert np.abs(model.predict_proba(moved).mean(axis=0) - pd_.average[k]).max() <= 1e-9
        assert np.abs(model.predict_proba(moved) - pd_.individual[:, k]).max() <= 1e-9
    # reference: scikit-learn's brute partial dependence on the same grid (second class)
    ref = sklearn_partial_dependence(model, X, [3], method="brute", kind="both",
                                     custom_values={3: pd_.grid})
    assert np.abs(ref["average"][0] - pd_.average[:, 1]).max() <= 1e-9
    assert np.abs(ref["individual"][0] - pd_.individual[:, :, 1]).max() <= 1e-9


def test_partial_dependence_multi_class_and_small_chunks():
    X, y = load_wine(return_X_y=True)
    model = GradientBoostingClassifier(n_estimators=30, random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    pd_ = gw.partial_dependence(forest, X, "x6", chunk_cells=50)
    ref = sklearn_partial_dependence(model, X, [6], method="brute",
                                     custom_values={6: pd_.grid})
    assert np.abs(ref["average"].T - pd_.average).max() <= 1e-9  # reference: scikit-learn
    assert np.allclose(pd_.average.sum(axis=1), 1.0)


def test_accumulated_local_effects_of_an_additive_model_are_its_centred_partial_dependence():
    # invented: y depends on x0 and sin(2 x1), additively in the log-odds
    rng = np.random.default_rng(0)
    X = rng.normal(size=(3000, 3))
    y = (X[:, 0] + np.sin(2 * X[:, 1]) + 0.3 * rng.normal(size=3000) > 0).astype(int)
    model = GradientBoostingClassifier(n_estimators=80, max_depth=1, random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    ale = gw.accumulated_local_effects(forest, X, 1, output="margin")
    pd_ = gw.partial_dependence(forest, X, 1, grid=ale.edges, output="margin")
    mids = 0.5 * (pd_.average[:-1, 0] + pd_.average[1:, 0])
    centred = pd_.average[:, 0] - np.average(mids, weights=ale.counts)
    # reference: the centred partial dependence (exact for a model additive in its margin)
    assert np.abs(ale.effect[:, 0] - centred).max() <= 1e-9
    assert ale.counts.sum() == 3000
    # the curve follows sin(2 x1): up from x1 = -pi/4 to pi/4, down after
    at = lambda v: np.interp(v, ale.edges, ale.effect[:, 0])  # noqa: E731
    assert at(0.78) - at(-0.78) > 1.0 and at(0.78) - at(1.8) > 0.5


def test_categorical_feature_has_per_category_partial_dependence():
    rng = np.random.default_rng(1)
    code = rng.integers(0, 6, 3000)
    x = rng.normal(size=3000)
    effect = np.array([2.0, -1.0, 0.5, -2.0, 1.0, 0.0])
    y = (rng.random(3000) < 1 / (1 + np.exp(-(effect[code] + x)))).astype(int)
    X = np.column_stack([x, code.astype(float)])
    model = lgb.LGBMClassifier(n_estimators=40, num_leaves=8, min_data_per_group=10,
                               cat_smooth=1, verbose=-1, random_state=0).fit(
        X, y, categorical_feature=[1])
    forest = gw.from_estimator(model)
    pd_ = gw.partial_dependence(forest, X, 1)
    assert pd_.grid.tolist() == [0.0, 1.0, 2.0, 3.0, 4.0, 5.0]
    assert pd_.categories == ["0", "1", "2", "3", "4", "5"]
    # the planted effects' order is the curve's order
    assert np.argsort(pd_.average[:, 1]).tolist() == np.argsort(effect).tolist()
    with pytest.raises(gw.SettingError, match="categorical"):
        gw.accumulated_local_effects(forest, X, 1)


def test_settings_are_checked():
    X, y = load_breast_cancer(return_X_y=True)
    forest = gw.from_estimator(RandomForestClassifier(3, random_state=0).fit(X, y))
    with pytest.raises(gw.SettingError, match="not one of the model's features"):
        gw.partial_dependence(forest, X, "age")
    with pytest.raises(gw.SettingError, match="kind="):
        gw.partial_dependence(forest, X, 0, kind="mean")
    with pytest.raises(gw.SettingError, match="margin"):
        gw.partial_dependence(forest, X, 0, output="margin")


def test_review_effects_on_the_sample_are_rederived(tmp_path):
    """The cases step's effects, re-derived outside the code path that made them."""
    from grovewise.review import Review, ReviewInputs, ReviewSettings
    from grovewise.sample_data import sample_paths
    from grovewise.sampling import stratified_rows

    p = sample_paths()
    review = Review(ReviewInputs(p["forest"], p["data"], target=p["target"]),
                    ReviewSettings(time_limit=5, node_limit=10, effects_rows=400,
                                   interaction_rows=50))
    review.run(["intake", "surrogate", "cases"])
    fx = review.cases.effects
    X = review.data.X
    rows = stratified_rows(review.cases.ensemble[:X.shape[0]], X.shape[0], 400, 0).rows
    assert fx.sample["size"] == 400 and fx.sample["sampled"]
    # reference: gw.contributions on the same rows, mean |value| per feature by numpy
    c = gw.contributions(review.forest, X[rows])
    expected = np.abs(c.values).mean(axis=0).sum(axis=1)
    assert np.allclose([fx.importance[n] for n in review.forest.feature_names], expected,
                       rtol=0, atol=1e-12)
    top = fx.curves[0]
    assert top.feature == fx.ranking()[0]
    # the partial dependence curve is the definition on the same rows
    moved = X[rows].copy()
    moved[:, top.index] = top.partial.grid[3]
    assert np.allclose(review.forest.predict_proba(moved).mean(axis=0), top.partial.average[3],
                       atol=1e-12)
    # disagreement rows: the most confident ones, explained exactly
    picked = review.cases.confident_disagreements(12)
    assert fx.case_rows.tolist() == picked.tolist()
    if picked.size:
        explained = fx.case_base + fx.case_values.sum(axis=1)
        assert np.allclose(explained, review.forest.predict_proba(review.case_rows()[picked]),
                           atol=1e-9)
    assert "The ensemble combines" in fx.pair_statement
    for curve in fx.curves:
        for cut in curve.cuts:
            assert cut.statement.startswith("The surrogate")


def test_accumulated_local_effects_follow_correlated_data_where_partial_dependence_does_not():
    """Invented: the model learns p = x0 * x1 on the whole square; the review rows have x1
    close to x0. Along the data the effect of x0 grows with x0 (its slope is x1, about x0):
    accumulated local effects show that, while partial dependence averages x1 over values
    that never occur with that x0 and stays about linear (slope mean(x1)), the difference
    Apley & Zhu (2020) describe for correlated features."""
    rng = np.random.default_rng(1)
    square = rng.uniform(0, 1, (20000, 2))
    y = (rng.random(20000) < square[:, 0] * square[:, 1]).astype(int)
    model = RandomForestClassifier(50, min_samples_leaf=100, random_state=0).fit(square, y)
    forest = gw.from_estimator(model)
    rng = np.random.default_rng(2)
    x0 = rng.uniform(0.05, 0.95, 3000)
    X = np.column_stack([x0, np.clip(x0 + rng.normal(0, 0.02, 3000), 0, 1)])
    ale = gw.accumulated_local_effects(forest, X, 0, bins=10)
    pd_ = gw.partial_dependence(forest, X, 0, grid=ale.edges)

    def slope_ratio(values):  # slope over the upper half / slope over the lower half
        at = lambda v: np.interp(v, ale.edges, values)  # noqa: E731
        return (at(0.9) - at(0.5)) / (at(0.5) - at(0.1))

    ale_ratio, pd_ratio = slope_ratio(ale.effect[:, 1]), slope_ratio(pd_.average[:, 1])
    assert ale_ratio > 2.0  # the model's truth along the data: 0.28 / 0.12 = 2.3
    assert pd_ratio < 1.6  # mean(x1) over both halves: about 1
    assert ale_ratio > 1.5 * pd_ratio


def test_a_large_forest_gets_a_smaller_sample_set_by_its_size(monkeypatch):
    """The effects' rows follow a work budget fixed by the forest alone: a smaller budget
    gives fewer rows, the same on a re-run; the interactions keep the pairs among the top
    features and equal the full computation there."""
    from grovewise import effects_summary as es

    X, y = load_breast_cancer(return_X_y=True)
    forest = gw.from_estimator(RandomForestClassifier(20, random_state=0).fit(X, y))
    pred = forest.predict_index(X)
    work = es._work_per_row(forest)
    monkeypatch.setattr(es, "CONTRIBUTION_WORK", 150 * work)
    monkeypatch.setattr(es, "INTERACTION_WORK", 1.0)
    first, _ = es.ensemble_effects(forest, X, pred, None, rows=400, interaction_rows=100,
                                   seed=3)
    again, _ = es.ensemble_effects(forest, X, pred, None, rows=400, interaction_rows=100,
                                   seed=3)
    assert first.sample["size"] == 150 and again.sample == first.sample
    assert first.interaction_rows == es.MIN_INTERACTION_ROWS
    top = sorted(first.importance, key=lambda f: -first.importance[f])[:es.INTERACTION_FEATURES]
    assert all(p.first in top and p.second in top for p in first.pairs)
    # reference: the full interactions on the same rows, ranked among the same features
    from grovewise.sampling import stratified_rows

    rows = stratified_rows(pred, X.shape[0], 150, 3).rows[:es.MIN_INTERACTION_ROWS]
    full = gw.interaction_ranking(gw.interactions(forest, X[rows]), forest.feature_names)
    expected = [(p.first, p.second) for p in full if p.first in top and p.second in top]
    assert [(p.first, p.second) for p in first.pairs] == expected[:len(first.pairs)]
