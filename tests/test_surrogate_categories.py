"""Categorical features in the surrogate: categories in order, splits as sets of names.

The table is invented for the test: a numeric column ``dose`` (standard normal) and a
categorical column ``site`` with eight named categories, whose effect on the log-odds is
planted: ``logit = 3 * [site in {amber, cedar, fjord}] - 1.5 + 0.8 * dose``. The model is a
LightGBM classifier fitted with ``site`` as a pandas categorical column (LightGBM's own
categorical splits), read into a Forest.

References: LightGBM's own ``predict_proba`` (the Forest reproduces it); the planted set;
every category put through the fitted surrogate's own ``predict`` / ``apply`` (brute force);
fidelity and the category order re-derived by hand with numpy; exhaustive enumeration of
axis-aligned depth-1 trees (the true optimum of the program when no split may mix features,
SURROGATE_MILP.md "Checks that keep it honest"); HiGHS's optimality status; scikit-learn's
own ``DecisionTreeClassifier.predict`` on the encoded data.
"""

import json

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import RandomForestClassifier
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import OneHotEncoder

import grovewise as gw
from grovewise.app.paths import surrogate_path
from grovewise.app.tree_figure import cart_tree_figure
from grovewise.report.figures_surrogate import surrogate_tree_figure
from grovewise.review import Review, ReviewInputs, ReviewSettings
from grovewise.storage import decode, encode, load_arrays, save_arrays
from grovewise.surrogate import ObliqueSurrogate, mimic
from grovewise.surrogate.categories import CategoryOrder, EncodedTree, order_categories
from grovewise.surrogate.program import ProgramData, build_program, data_margin
from grovewise.surrogate.solver import compile_program, solve
from grovewise.surrogate.tree import ObliqueTree, Scaling

NAMES = ["amber", "birch", "cedar", "dune", "elm", "fjord", "glen", "heath"]
PLANTED = {"amber", "cedar", "fjord"}  # codes 0, 2, 5
SITE = 1  # the categorical column
FAST = dict(proximity_threshold=None, time_limit=5.0, node_limit=50, sample_size=60,
            random_state=0)


def _table(n=2000, seed=0):
    rng = np.random.default_rng(seed)
    code = rng.integers(0, len(NAMES), n)
    dose = rng.normal(size=n)
    logit = 3.0 * np.isin(code, [0, 2, 5]) - 1.5 + 0.8 * dose
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-logit))).astype(int)
    return dose, code, y


@pytest.fixture(scope="module")
def planted():
    dose, code, y = _table()
    frame = pd.DataFrame({"dose": dose, "site": pd.Categorical.from_codes(code, NAMES)})
    model = lgb.LGBMClassifier(n_estimators=40, num_leaves=8, verbose=-1,
                               random_state=0).fit(frame, y)
    forest = gw.from_estimator(model)
    X = np.column_stack([dose, code.astype(float)])
    # reference: LightGBM's own predict_proba on the data frame
    assert np.abs(forest.predict_proba(X) - model.predict_proba(frame)).max() <= 1e-9
    assert forest.categories == {SITE: NAMES} and forest.n_categorical_splits > 0
    return forest, X


@pytest.fixture(scope="module")
def depth_one(planted):
    forest, X = planted
    return mimic(forest, X, depth=1, holdout=0.3, **FAST)


@pytest.fixture(scope="module")
def depth_two(planted):
    forest, X = planted
    return mimic(forest, X, depth=2, holdout=0.3, **FAST)


def _splits_mixing(coef, j=SITE):
    """Nodes whose split uses feature j together with another feature."""
    coef = np.asarray(coef)
    return [t for t in range(coef.shape[0])
            if coef[t, j] != 0 and np.count_nonzero(coef[t]) > 1]


# ---------------------------------------------------------------------------- the order
def test_order_and_encoding_by_hand():
    # Reference: the means below worked out by hand.
    cats = {1: ["p", "q", "r", "s", "t"]}
    X = np.array([[0.0, 0], [0, 0], [0, 1], [0, 2], [0, 4], [0, np.nan], [0, 7]])
    p1 = np.array([0.8, 0.6, 0.2, 0.7, 0.1, 0.9, 0.9])
    order = order_categories(cats, X, np.column_stack([1 - p1, p1]))
    # means of P(second class): p 0.7, q 0.2, r 0.7 (tie with p: code order), s no row, t 0.1
    assert order.features == [1] and order.by_class == [1]
    assert order.ranks[0].tolist() == [2, 1, 3, 4, 0]
    assert order.in_order(1) == ["t", "q", "p", "r", "s"]
    assert order.rows[0].tolist() == [2, 1, 1, 0, 1]
    np.testing.assert_allclose(order.means[0][[0, 1, 2, 4]], [0.7, 0.2, 0.7, 0.1])
    assert np.isnan(order.means[0][3])
    # codes beyond the known ones, negative or fractional take the rank after the last
    enc = order.encode(np.array([[5.0, c] for c in (0, 1, 2, 3, 4, 7, -1, 1.5, np.nan)]))
    assert enc[:, 0].tolist() == [5.0] * 9
    np.testing.assert_array_equal(enc[:, 1], [2, 1, 3, 4, 0, 5, 5, 5, np.nan])
    assert order.names_below(1, 2.5) == ["p", "q", "t"]
    assert order.split_sets(1, 2.5, ">") == (["r", "s"], ["p", "q", "t"], True)
    assert order_categories({}, X, np.column_stack([1 - p1, p1])) is None


def test_more_classes_order_by_the_class_that_varies_most():
    # Reference: by hand. Variances of the per-category means: class 0 0.0067, class 1
    # 0.0622, class 2 0.0956; so class 2 orders them: b (0.1), a (0.2), c (0.8).
    cats = {0: ["a", "b", "c"]}
    X = np.array([[0.0], [1.0], [2.0]])
    proba = np.array([[0.3, 0.5, 0.2], [0.2, 0.7, 0.1], [0.1, 0.1, 0.8]])
    order = order_categories(cats, X, proba)
    assert order.by_class == [2]
    assert order.in_order(0) == ["b", "a", "c"]


# ---------------------------------------------------------------------------- the surrogate
def test_depth_one_splits_on_the_planted_set_alone(planted, depth_one):
    forest, X = planted
    est = depth_one.surrogate
    assert isinstance(est.category_order_, CategoryOrder)
    assert est.category_order_ is depth_one.category_order
    # the only split is on site, alone
    assert est.tree_.coef[0, SITE] != 0 and np.count_nonzero(est.tree_.coef[0]) == 1
    (rule,) = est.rules_list_
    left, right = set(rule.categories_left), set(rule.categories_right)
    assert left | right == set(NAMES) and not left & right
    assert PLANTED in (left, right)
    text = "site in {" + ", ".join(rule.categories_left) + "}"
    assert rule.text(est.feature_names_) == text and text in est.rules_
    # the cut lies halfway between two ranks, so the sets are exact
    assert rule.threshold % 1 == 0.5
    d = rule.to_dict(est.feature_names_)
    assert d["categories_left"] == rule.categories_left and d["categorical"]
    # brute force: every category through the fitted surrogate, dose held at 0
    probe = np.column_stack([np.zeros(len(NAMES)), np.arange(len(NAMES), dtype=float)])
    leaf = est.apply(probe)
    assert {NAMES[c] for c in np.flatnonzero(leaf == 0)} == left
    assert {NAMES[c] for c in np.flatnonzero(est.predict(probe) == 1)} == PLANTED


def test_fidelity_by_hand(planted, depth_one, depth_two):
    # Reference: numpy, from the forest's probabilities and the surrogate's predictions.
    forest, X = planted
    proba = forest.predict_proba(X)
    yhat = forest.classes_[np.argmax(proba, axis=1)]
    w = proba.max(axis=1)
    for res in (depth_one, depth_two):
        tr, ho = res.train_rows, res.holdout_rows
        pred = res.surrogate.predict(X)
        agree = pred == yhat
        assert res.surrogate.fidelity_ == pytest.approx(w[tr][agree[tr]].sum() / w[tr].sum(),
                                                        abs=1e-12)
        assert res.fidelity["surrogate"]["holdout"] == pytest.approx(agree[ho].mean())
        g = res.greedy.predict(X) == yhat
        assert res.fidelity["greedy"]["holdout"] == pytest.approx(g[ho].mean())
        # the planted effect is strong: the surrogate follows the forest closely
        assert res.fidelity["surrogate"]["holdout"] > 0.95


def test_no_split_mixes_the_categorical_feature_in_any_stage(depth_two):
    est = depth_two.surrogate
    assert est.max_features_per_split == 2  # mixing two features would be allowed
    trees = [est.tree_, est.exact_tree_] + [s.tree for s in est.stages_ if s.tree is not None]
    assert {s.name for s in est.stages_} >= {"greedy", "local_search", "program", "polish"}
    for tree in trees:
        assert _splits_mixing(tree.coef) == []
    assert any(r.categorical for r in est.rules_list_)
    assert json.loads(est.export_json())["category_order"]["features"][0]["feature_index"] \
        == SITE


def test_without_solo_features_the_search_does_mix(planted):
    # The check above is not empty: told that no feature must split alone, the node-by-node
    # search combines dose with the rank of site (a number that means nothing).
    forest, X = planted
    proba = forest.predict_proba(X)
    order = order_categories(forest, X, proba)
    kw = dict(depth=1, time_limit=5.0, node_limit=50, sample_size=60, random_state=0)
    free = ObliqueSurrogate(**kw).fit(X, proba.argmax(axis=1), proba.max(axis=1),
                                      category_order=order, solo_features=np.zeros(2, bool))
    assert _splits_mixing(free.tree_.coef) == [0]
    kept = ObliqueSurrogate(**kw).fit(X, proba.argmax(axis=1), proba.max(axis=1),
                                      category_order=order)
    assert kept.solo_features_.tolist() == [False, True]
    assert _splits_mixing(kept.tree_.coef) == []


def test_greedy_baseline_reads_codes(planted, depth_two):
    # Reference: scikit-learn's DecisionTreeClassifier.predict on the encoded data.
    forest, X = planted
    g = depth_two.greedy
    assert isinstance(g, EncodedTree) and g is depth_two.surrogate.greedy_
    enc = depth_two.category_order.encode(X)
    np.testing.assert_array_equal(g.predict(X), g.estimator.predict(enc))
    np.testing.assert_array_equal(g.predict_proba(X), g.estimator.predict_proba(enc))
    np.testing.assert_array_equal(g.apply(X), g.estimator.apply(enc))
    assert (g.decision_path(X) != g.estimator.decision_path(enc)).nnz == 0
    assert g.tree_ is g.estimator.tree_ and list(g.classes_) == [0, 1]


# ---------------------------------------------------------------------------- the program
def _enumerate_depth_one(Xs, y, w):
    """Least weighted disagreement of a one-split axis-aligned tree (or none)."""
    def cost(idx):
        return w[idx].sum() - np.bincount(y[idx], weights=w[idx], minlength=2).max() \
            if idx.size else 0.0
    best = cost(np.arange(y.size))
    for j in range(Xs.shape[1]):
        v = np.unique(Xs[:, j])
        for a, b in zip(v[:-1], v[1:]):
            left = Xs[:, j] < (a + b) / 2
            best = min(best, cost(np.flatnonzero(left)) + cost(np.flatnonzero(~left)))
    return float(best)


def test_program_with_solo_rows_reaches_the_axis_aligned_optimum(planted):
    # Reference: exhaustive enumeration of axis-aligned depth-1 trees. With two features and
    # one of them solo, no split can combine them, so the program's optimum is that one;
    # HiGHS must prove it (status optimal). Targets: the table's drawn outcomes on 40 rows
    # (noisy, so no tree is perfect), equal weights.
    forest, X = planted
    _, _, y_all = _table()
    order = order_categories(forest, X, forest.predict_proba(X))
    rows = np.random.default_rng(0).choice(X.shape[0], 40, replace=False)
    enc = order.encode(X[rows])
    sc = Scaling.fit(enc)
    Xs = sc.transform(enc)
    y = y_all[rows]
    w = np.full(rows.size, 1.0 / rows.size)
    cw = np.zeros((rows.size, 2))
    cw[np.arange(rows.size), y] = w

    def program(solo):
        data = ProgramData(Xs=Xs, group=np.arange(rows.size), class_weight=cw,
                           count=np.ones(rows.size), depth=1, n_classes=2,
                           admissible=np.ones((1, 2), bool), penalty=np.ones((1, 2)),
                           max_features=None, mu=max(data_margin(Xs), 1e-5), solo=solo)
        return build_program(data)

    def solved(prog):
        cp = compile_program(prog)
        res = solve(cp, time_limit=30.0, seed=0)
        assert res.status == "optimal"
        return res.objective, prog.tree_from_values(cp.value_getter(res.values), sc)

    prog = program(np.array([False, True]))
    assert len(prog.model.solo) == 1  # one row: node 0, feature site
    best = _enumerate_depth_one(Xs, y, w)
    assert best * rows.size == pytest.approx(10.0)  # 10 of the 40 rows, measured
    obj, tree = solved(prog)
    assert obj == pytest.approx(best, abs=1e-6)
    assert _splits_mixing(tree.coef) == []
    # a start that mixes site with dose is refused by the program's own check
    mixed = ObliqueTree(depth=1, coef=np.array([[0.5, 0.5]]), offset=np.array([0.5]),
                        leaf_class=np.array([0, 1]), scaling=sc)
    vals, why = prog.start_values(mixed)
    assert vals is None and "alone" in why
    free = program(None)
    assert free.start_values(mixed)[0] is not None
    # without the solo rows the program combines the two, and does better on these rows:
    # the rows are what keeps the split a set of categories
    obj_free, tree_free = solved(free)
    assert obj_free < best - 1e-6 and _splits_mixing(tree_free.coef) == [0]


# ---------------------------------------------------------------------------- around it
def _roundtrip(obj, tmp_path):
    tree, arrays = encode(obj)
    text = json.dumps(tree)
    save_arrays(tmp_path / "a.npz", arrays)
    return decode(json.loads(text), load_arrays(tmp_path / "a.npz"))


def test_storage_roundtrip_predicts_the_same(planted, depth_two, tmp_path):
    forest, X = planted
    est = depth_two.surrogate
    back = _roundtrip({"surrogate": est, "greedy": depth_two.greedy}, tmp_path)
    probes = np.vstack([X, [[0.3, c] for c in (-1, 8, 100, 2.5)]])
    for a, b in ((back["surrogate"], est), (back["greedy"], depth_two.greedy)):
        np.testing.assert_array_equal(a.predict(probes), b.predict(probes))
        np.testing.assert_array_equal(a.apply(probes), b.apply(probes))
        np.testing.assert_array_equal(a.predict_proba(probes), b.predict_proba(probes))
    assert isinstance(back["surrogate"].category_order_, CategoryOrder)
    assert isinstance(back["surrogate"].greedy_, EncodedTree)
    assert back["surrogate"].rules_ == est.rules_


def test_figures_and_the_row_path_show_category_names(planted, depth_two):
    forest, X = planted
    est = depth_two.surrogate
    names, classes = list(est.feature_names_), list(est.classes_)
    drawn = " ".join(t.get_text().replace("\n", " ")
                     for t in surrogate_tree_figure(est).axes[0].texts)
    assert "site in {" in drawn.replace("  ", " ")
    cart = " ".join(t.get_text().replace("\n", " ")
                    for t in cart_tree_figure(depth_two.greedy, names, classes).axes[0].texts)
    assert "site in {" in cart and "site <=" not in cart
    for row in range(12):
        steps, leaf = surrogate_path(est, X[row])
        assert leaf == est.apply(X[row:row + 1])[0]
        for st in steps:
            for term in st.terms:
                if term.feature == "site":
                    assert term.text == NAMES[int(X[row, SITE])] and term.code == X[row, SITE]
                    assert st.holds == (term.text in st.categories)


def test_review_of_a_pipeline_with_one_hot_categories(tmp_path):
    # Reference: the planted set; the fill value and the fidelity re-derived with numpy.
    dose, code, y = _table(n=1200, seed=2)
    site = np.array(NAMES, dtype=object)[code]
    site[np.random.default_rng(3).random(site.size) < 0.04] = None
    frame = pd.DataFrame({"dose": dose, "site": site})
    pipe = Pipeline([
        ("prep", ColumnTransformer([
            ("num", "passthrough", ["dose"]),
            ("site", make_pipeline(SimpleImputer(strategy="constant", fill_value="none"),
                                   OneHotEncoder(handle_unknown="ignore")), ["site"])])),
        ("model", RandomForestClassifier(40, max_depth=6, random_state=0))]).fit(frame, y)
    sio.dump(pipe, tmp_path / "clinic.skops")
    frame.assign(outcome=y).to_csv(tmp_path / "clinic.csv", index=False)
    review = Review(ReviewInputs(tmp_path / "clinic.skops", tmp_path / "clinic.csv",
                                 target="outcome"),
                    ReviewSettings(depth=2, time_limit=6.0, node_limit=50, seed=0,
                                   permutation_repeats=1))
    review.run(steps=("intake", "surrogate", "cases"))
    forest = review.forest
    j = forest.feature_names.index("site")
    assert forest.is_categorical(j) and "amber" in forest.categories[j]
    # a missing site is filled with the most frequent code of the training rows
    col = review.data.X[review.intake.train_rows, j]
    codes, counts = np.unique(col[~np.isnan(col)], return_counts=True)
    assert review.fill_values()[j] == codes[np.argmax(counts)]
    sur = review.surrogate
    est = sur.surrogate
    assert "site in {" in est.rules_
    for tree in [est.tree_] + [s.tree for s in est.stages_ if s.tree is not None]:
        assert _splits_mixing(tree.coef, j) == []
    # the planted set stands out: each named category of it is split from each one outside
    probe = np.column_stack([np.zeros(len(NAMES)),
                             [forest.categories[j].index(n) for n in NAMES]])
    pred = est.predict(probe)
    assert {NAMES[i] for i in np.flatnonzero(pred == 1)} == PLANTED
    # the cases step predicts from the filled codes, as the fidelity says
    X = review.case_rows()
    filled = review.filled(X)
    ens = forest.predict(X)
    agree = est.predict(filled) == ens
    assert review.cases.surrogate.tolist() == [list(forest.classes_).index(c)
                                               for c in est.predict(filled)]
    assert sur.fidelity["surrogate"]["holdout"] == pytest.approx(agree[sur.holdout_rows].mean())
    assert sur.fidelity["greedy"]["full"] == pytest.approx(
        np.mean(sur.greedy.predict(filled) == ens))
    review.save(tmp_path / "saved")
    back = Review.open(tmp_path / "saved")
    np.testing.assert_array_equal(back.surrogate.surrogate.predict(filled), est.predict(filled))
    np.testing.assert_array_equal(back.surrogate.greedy.predict(filled),
                                  sur.greedy.predict(filled))
