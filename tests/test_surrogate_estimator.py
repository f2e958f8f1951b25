"""ObliqueSurrogate and mimic: scikit-learn conformance, the greedy baseline, rules, iris.

References: scikit-learn's check_estimator and its CART; Fisher's iris data (Fisher 1936,
bundled with scikit-learn); breast cancer and wine data bundled with scikit-learn.
"""

import json

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_iris, load_wine
from sklearn.ensemble import RandomForestClassifier
from sklearn.utils.estimator_checks import check_estimator

from grovewise.errors import DataError, SettingError
from grovewise.loaders import from_estimator
from grovewise.surrogate import Cancel, ObliqueSurrogate, mimic
from grovewise.surrogate.greedy import fit_greedy, oblique_from_greedy
from grovewise.surrogate.rules import shortest_between
from grovewise.surrogate.tree import Scaling


def test_check_estimator():
    # Reference: scikit-learn's own estimator checks (short limits keep the ~60 fits fast;
    # without the proof, which with a node limit solves every part: 52 s against 4.5 s).
    failed = [r for r in check_estimator(ObliqueSurrogate(time_limit=0.5, node_limit=20,
                                                          prove=False),
                                         on_fail=None) if r["status"] == "failed"]
    assert failed == []


def test_greedy_conversion_routes_like_sklearn():
    # Reference: scikit-learn's DecisionTreeClassifier.predict on its own training rows.
    X, y = load_wine(return_X_y=True)
    w = np.ones(len(y))
    for depth in (1, 2, 3):
        g = fit_greedy(X, y, w, depth)
        tree = oblique_from_greedy(g, Scaling.fit(X), depth)
        assert np.array_equal(tree.leaf_class[tree.route(X)], g.predict(X))


@pytest.fixture(scope="module")
def cancer_forest():
    X, y = load_breast_cancer(return_X_y=True)
    rf = RandomForestClassifier(n_estimators=30, max_depth=5, random_state=0).fit(X, y)
    return from_estimator(rf), X


def test_surrogate_never_below_greedy_on_training_fidelity(cancer_forest):
    # Reference: scikit-learn's CART of the same depth on the same targets and weights.
    forest, X = cancer_forest
    for depth in (1, 2):
        res = mimic(forest, X, depth=depth, holdout=0.3, random_state=0, time_limit=3.0)
        assert res.weighted_fidelity["surrogate"]["train"] >= \
            res.weighted_fidelity["greedy"]["train"] - 1e-12
        assert res.fidelity["greedy"]["holdout"] is not None
        json.dumps(res.to_dict())


def test_mimic_reports_stages_certificate_and_leaves(cancer_forest):
    forest, X = cancer_forest
    res = mimic(forest, X, depth=2, holdout=0.3, random_state=0, time_limit=4.0)
    names = [s["name"] for s in res.stages]
    assert names[:4] == ["greedy", "trivial", "optimal_axis", "local_search"]
    assert res.certificate["solver"] == "HiGHS" and "highs" in res.certificate["versions"]
    assert res.certificate["first_candidate_time"] < 1.0
    assert sum(l["train_rows"] for l in res.leaves) == res.train_rows.size
    if res.certificate["readback"] is not None:
        assert res.certificate["readback"]["consistent"]
    # proximity pairs are hard: none may be separated by the returned tree
    assert res.proximity["separated_pairs"] == 0
    # the rules are in the model's feature names, and what predicts is what is read
    assert any(name in res.surrogate.rules_ for name in forest.feature_names)
    assert res.surrogate.fidelity_ == pytest.approx(res.weighted_fidelity["surrogate"]["train"])
    # the bound holds on every training row, in the objective's units, with its gap
    est = res.surrogate
    assert 0 <= est.bound_ <= est.objective_
    assert est.mip_gap_ == pytest.approx((est.objective_ - est.bound_) / est.objective_)
    assert est.bound_method_ in ("classes", "parts", "axis")
    assert est.certificate_ == res.certificate["statement"]
    assert f"of the {res.train_rows.size:,} training rows" in est.certificate_
    # the exact axis-aligned baseline: never better than the answer on the training objective
    axis = next(s for s in res.stages if s["name"] == "optimal_axis")
    assert res.surrogate.result_.objective <= axis["objective"] + 1e-12
    yhat = forest.classes_[np.argmax(forest.predict_proba(X), axis=1)]
    axis_agree = res.greedy_optimal.predict(X[res.holdout_rows]) == yhat[res.holdout_rows]
    assert res.fidelity["optimal_axis"]["holdout"] == pytest.approx(axis_agree.mean())
    # every fidelity shown carries its 95% Wilson interval (reference: scipy's binomtest)
    from scipy.stats import binomtest
    for model in ("surrogate", "greedy", "optimal_axis"):
        for part, rows in (("train", res.train_rows), ("holdout", res.holdout_rows)):
            k = int(round(res.fidelity[model][part] * rows.size))
            ci = binomtest(k, rows.size).proportion_ci(method="wilson")
            assert res.fidelity[model][f"{part}_ci"] == pytest.approx((ci.low, ci.high))


def test_iris_depth_one_surrogate_isolates_setosa():
    # Reference: Fisher's iris (Fisher 1936, bundled with scikit-learn). Setosa is linearly
    # separable from the other two species by petal size (common practice, no source), so a
    # one-split surrogate of a forest puts every setosa row, and only those, in one leaf.
    data = load_iris()
    rf = RandomForestClassifier(n_estimators=50, random_state=0).fit(data.data, data.target)
    res = mimic(from_estimator(rf), data.data, depth=1, random_state=0, time_limit=5.0)
    leaf = res.surrogate.apply(data.data)
    setosa = data.target == 0
    assert len(set(leaf[setosa])) == 1
    assert not np.any(leaf[~setosa] == leaf[setosa][0])
    assert res.surrogate.predict(data.data[setosa]).tolist() == [0] * int(setosa.sum())


def test_rounded_rules_are_rescored():
    X, y = load_wine(return_X_y=True)
    est = ObliqueSurrogate(depth=2, max_features_per_split=2, time_limit=2.0,
                           random_state=0).fit(X, y)
    agree = float(np.mean(est.predict(X) == y))
    assert est.fidelity_ == pytest.approx(agree)  # unit weights: fidelity is agreement
    assert est.fidelity_ == pytest.approx(est.exact_fidelity_)  # rounding kept the routing
    for rule in est.rules_list_:
        assert len(rule.features) <= 2
    doc = json.loads(est.export_json())
    assert doc["status"] == est.status_ and len(doc["leaves"]) == 4
    assert est.export_text().count("if ") == len(est.rules_list_)


def test_shortest_between():
    assert shortest_between(7.83, 7.97) == pytest.approx(7.9)
    assert shortest_between(-0.5, 0.2) == 0.0
    assert shortest_between(123.4, 180.0) == pytest.approx(130.0)
    assert shortest_between(1.0, 1.0) is None


def test_must_link_pairs_share_a_leaf():
    X, y = load_wine(return_X_y=True)
    pairs = np.array([[0, 59], [59, 130], [10, 140]])  # rows of different cultivars
    # a node limit: every stage stops on counts, so a busy machine cannot cut the search short
    est = ObliqueSurrogate(depth=2, time_limit=60.0, node_limit=50, random_state=0).fit(
        X, y, must_link=pairs)
    leaf = est.apply(X)
    assert leaf[0] == leaf[59] == leaf[130] and leaf[10] == leaf[140]


def test_allowed_features_and_penalty_are_respected():
    X, y = load_wine(return_X_y=True)
    allowed = np.zeros(X.shape[1], dtype=bool)
    allowed[[0, 6, 9, 12]] = True
    est = ObliqueSurrogate(depth=2, time_limit=60.0, node_limit=50, random_state=0).fit(
        X, y, allowed_features=allowed)
    assert set(est.tree_.used_features()) <= {0, 6, 9, 12}


def test_cancel_returns_the_best_tree_so_far():
    X, y = load_breast_cancer(return_X_y=True)
    cancel = Cancel()

    def progress(report):  # cancel while the search is running, whatever the machine's speed
        if report.stage == "local_search":
            cancel.cancel()

    est = ObliqueSurrogate(depth=3, max_features_per_split=2, time_limit=60.0,
                           random_state=0).fit(X, y, cancel=cancel, progress=progress)
    assert est.status_ == "cancelled"
    assert est.fidelity_ >= np.mean(est.greedy_.predict(X) == y) - 1e-12


@pytest.mark.parametrize("bad", [dict(depth=0), dict(depth=2.5), dict(alpha=-1.0),
                                 dict(max_features_per_split=0), dict(time_limit=0.0),
                                 dict(routing="sideways")])
def test_bad_settings_are_refused(bad):
    with pytest.raises(SettingError):
        ObliqueSurrogate(**bad).fit(np.eye(4), [0, 1, 0, 1])


def test_mimic_refuses_missing_values(cancer_forest):
    forest, X = cancer_forest
    Xn = X.copy()
    Xn[3, 2] = np.nan
    with pytest.raises(DataError, match="missing values"):
        mimic(forest, Xn, depth=1)
