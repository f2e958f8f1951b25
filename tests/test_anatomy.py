"""Anatomy: usage maps, threshold profiles, importances, flags and model comparison.

Outside references: scikit-learn's fitted ``tree_`` arrays (walked here independently of the
Forest), ``feature_importances_``, ``decision_path`` and
``sklearn.inspection.permutation_importance``; XGBoost's ``Booster.trees_to_dataframe()`` and
``Booster.get_score``; datasets bundled with scikit-learn (breast cancer, wine, iris).
"""

from __future__ import annotations

import json
from collections import Counter

import numpy as np
import pandas as pd
import pytest
import xgboost as xgb
from sklearn.datasets import load_breast_cancer, load_iris, load_wine
from sklearn.ensemble import (ExtraTreesClassifier, GradientBoostingClassifier,
                              RandomForestClassifier)
from sklearn.inspection import permutation_importance
from sklearn.tree import DecisionTreeClassifier

import grovewise as gw
from grovewise.analysis import (STROBL_CAUTION, compare_models, depth_usage, flag_report,
                                importance_comparison, importance_ranks, impurity_importance,
                                permutation_importance_result, position_usage,
                                threshold_profiles)
from grovewise.errors import DataError, SettingError
from grovewise.forest import COMPARE_LE_FLOAT32, LINK_SOFTMAX, Forest, Tree, node_depths


# ----------------------------------------------------------------------------- references
def walk_sklearn_tree(tree_):
    """Split nodes of a fitted scikit-learn ``tree_`` by an explicit depth-first walk:
    (node, depth, heap position, feature, gain, cover). Leaves have children_left == -1
    (scikit-learn's TREE_LEAF); gain is w*imp - w_l*imp_l - w_r*imp_r with
    weighted_n_node_samples, the quantity scikit-learn's importances sum."""
    left, right = tree_.children_left, tree_.children_right
    w, imp = tree_.weighted_n_node_samples, tree_.impurity
    out, stack = [], [(0, 0, 0)]
    while stack:
        node, depth, pos = stack.pop()
        if left[node] == -1:
            continue
        lft, rgt = left[node], right[node]
        gain = w[node] * imp[node] - w[lft] * imp[lft] - w[rgt] * imp[rgt]
        out.append((node, depth, pos, int(tree_.feature[node]), gain, w[node]))
        stack.append((lft, depth + 1, 2 * pos + 1))
        stack.append((rgt, depth + 1, 2 * pos + 2))
    return out


def reference_grid(trees_, n_features, weight="count", by="depth", max_depth=None):
    """(n_features, n_columns) sums over the walked split nodes of the given ``tree_``s."""
    rows = [r for t in trees_ for r in walk_sklearn_tree(t)]
    if by == "position":
        rows = [r for r in rows if r[1] <= max_depth]
        n_cols = 2 ** (max_depth + 1) - 1
    else:
        n_cols = max(r[1] for r in rows) + 1
    grid = np.zeros((n_features, n_cols))
    for _node, depth, pos, feat, gain, cover in rows:
        col = pos if by == "position" else depth
        grid[feat, col] += {"count": 1.0, "gain": gain, "cover": cover}[weight]
    return grid


def walk_xgb_dataframe(df: pd.DataFrame, feature_index):
    """Split nodes of every tree in ``trees_to_dataframe()`` output, walked from node 0 by the
    Yes/No ids: (tree, depth, heap position, feature, gain, cover)."""
    out = []
    for tree_id, t in df.groupby("Tree"):
        rows = {r.ID: r for r in t.itertuples()}
        stack = [(f"{tree_id}-0", 0, 0)]
        while stack:
            node_id, depth, pos = stack.pop()
            r = rows[node_id]
            if r.Feature == "Leaf":
                continue
            out.append((int(tree_id), depth, pos, feature_index(r.Feature), r.Gain, r.Cover))
            stack.append((r.Yes, depth + 1, 2 * pos + 1))
            stack.append((r.No, depth + 1, 2 * pos + 2))
    return out


# ----------------------------------------------------------------------------- fixtures
@pytest.fixture(scope="module")
def cancer():
    return load_breast_cancer(return_X_y=True)


@pytest.fixture(scope="module")
def wine():
    return load_wine(return_X_y=True)


@pytest.fixture(scope="module")
def rf_cancer(cancer):
    X, y = cancer
    return RandomForestClassifier(n_estimators=12, random_state=0).fit(X, y)


# ----------------------------------------------------------------------------- usage maps
@pytest.mark.parametrize("weight", ["count", "gain", "cover"])
def test_depth_usage_equals_walk_over_sklearn_tree_arrays(rf_cancer, weight):
    forest = gw.from_estimator(rf_cancer)
    usage = depth_usage(forest, weight)
    # Reference: an explicit walk over scikit-learn's tree_ arrays.
    ref = reference_grid([e.tree_ for e in rf_cancer.estimators_], forest.n_features, weight)
    assert usage.matrix.shape == ref.shape
    np.testing.assert_allclose(usage.matrix, ref, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(usage.shares.sum(axis=0), 1.0, rtol=1e-12)
    assert list(usage.depths) == list(range(ref.shape[1]))
    # Every split node counted once: the walk's node count (scikit-learn's own node_count minus
    # its leaves) equals the grid's total.
    n_splits = sum(int((e.tree_.children_left != -1).sum()) for e in rf_cancer.estimators_)
    assert int(usage.split_counts.sum()) == n_splits


@pytest.mark.parametrize("weight", ["count", "gain"])
def test_position_usage_equals_heap_walk_over_sklearn_tree_arrays(rf_cancer, weight):
    forest = gw.from_estimator(rf_cancer)
    pos = position_usage(forest, max_depth=3, weight=weight)
    ref = reference_grid([e.tree_ for e in rf_cancer.estimators_], forest.n_features, weight,
                         by="position", max_depth=3)
    np.testing.assert_allclose(pos.matrix, ref, rtol=1e-12, atol=1e-9)
    assert list(pos.positions) == list(range(15))
    assert list(pos.position_depths) == [0, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 3, 3, 3, 3]
    # Position 0 is every tree's root split: scikit-learn's tree_.feature[0].
    roots = Counter(int(e.tree_.feature[0]) for e in rf_cancer.estimators_)
    for j, c in roots.items():
        assert pos.split_counts[j, 0] == c


def test_per_class_usage_of_gradient_boosting_follows_its_class_trees(wine):
    X, y = wine
    gb = GradientBoostingClassifier(n_estimators=6, max_depth=3, random_state=0).fit(X, y)
    forest = gw.from_estimator(gb)
    pooled = depth_usage(forest, "gain")
    per_class = depth_usage(forest, "gain", per_class=True)
    assert [u.class_label for u in per_class] == list(gb.classes_)
    for k, u in enumerate(per_class):
        # scikit-learn keeps class k's regression trees in estimators_[:, k].
        ref = reference_grid([e.tree_ for e in gb.estimators_[:, k]], X.shape[1], "gain")
        np.testing.assert_allclose(u.matrix[:, : ref.shape[1]], ref, rtol=1e-12, atol=1e-12)
        assert u.n_trees == gb.estimators_.shape[0]
    np.testing.assert_allclose(sum(u.matrix for u in per_class), pooled.matrix, rtol=1e-12)
    pos = position_usage(forest, 2, per_class=True)
    assert len(pos) == 3 and all(p.split_counts[:, 0].sum() == 6 for p in pos)


def _xgb_feature_index(name: str) -> int:
    return int(name[1:])  # XGBoost names unnamed columns f0, f1, ...


@pytest.mark.parametrize("weight, column", [("count", None), ("gain", "Gain"), ("cover", "Cover")])
def test_depth_usage_equals_xgboost_trees_to_dataframe(cancer, weight, column):
    X, y = cancer
    model = xgb.XGBClassifier(n_estimators=8, max_depth=4, random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    usage = depth_usage(forest, weight)
    rows = walk_xgb_dataframe(model.get_booster().trees_to_dataframe(), _xgb_feature_index)
    ref = np.zeros_like(usage.matrix)
    for _tree, depth, _pos, feat, gain, cover in rows:
        ref[feat, depth] += {"count": 1.0, "gain": gain, "cover": cover}[weight]
    # The text dump behind trees_to_dataframe prints gain and cover rounded (float32 digits).
    np.testing.assert_allclose(usage.matrix, ref, rtol=1e-5, atol=1e-6)


def test_per_class_usage_of_xgboost_equals_trees_to_dataframe(wine):
    X, y = wine
    model = xgb.XGBClassifier(n_estimators=5, max_depth=3, random_state=0).fit(X, y)
    forest = gw.from_estimator(model)
    per_class = depth_usage(forest, "count", per_class=True)
    pos = position_usage(forest, 3, per_class=True)
    rows = walk_xgb_dataframe(model.get_booster().trees_to_dataframe(), _xgb_feature_index)
    for k in range(3):
        # Multi-class XGBoost grows one tree per class each round: tree i adds to class i % 3
        # (XGBoost documentation, multi:softprob; the model's tree_info says the same).
        mine = [r for r in rows if r[0] % 3 == k]
        ref = np.zeros_like(per_class[k].matrix)
        ref_pos = np.zeros_like(pos[k].matrix)
        for _tree, depth, p, feat, _g, _c in mine:
            ref[feat, depth] += 1
            ref_pos[feat, p] += 1
        np.testing.assert_array_equal(per_class[k].matrix, ref)
        np.testing.assert_array_equal(pos[k].matrix, ref_pos)


def _tree(feature, left, right, output):
    left, right = np.array(left), np.array(right)
    n = left.shape[0]
    return Tree(feature=np.array(feature), threshold=np.zeros(n), left=left, right=right,
                missing_left=np.zeros(n, dtype=bool), value=np.zeros((n, 1)),
                depth=node_depths(left, right), gain=np.ones(n), cover=np.ones(n), output=output)


def test_depth_without_splits_in_a_class_gives_a_zero_column():
    # Class 0's tree splits at depths 0 and 1; class 1's tree is a stump (depth 0 only).
    deep = _tree([0, 1, -1, -1, -1], [1, 3, -1, -1, -1], [2, 4, -1, -1, -1], output=0)
    stump = _tree([1, -1, -1], [1, -1, -1], [2, -1, -1], output=1)
    forest = Forest(trees=[deep, stump], classes_=np.array([0, 1]), feature_names=["a", "b"],
                    kind="xgboost", link=LINK_SOFTMAX, compare=COMPARE_LE_FLOAT32,
                    base_score=np.zeros(2))
    u0, u1 = depth_usage(forest, per_class=True)
    assert list(u1.depths) == [0, 1]
    np.testing.assert_array_equal(u1.shares[:, 1], [0.0, 0.0])
    np.testing.assert_array_equal(u0.shares, [[1.0, 0.0], [0.0, 1.0]])
    assert u0.never_used == [] and u1.never_used == ["a"]


def test_never_used_names_a_constant_column(cancer):
    X, y = cancer
    Xc = np.column_stack([X, np.zeros(X.shape[0])])
    # A constant column cannot be split (CART needs two distinct values; common practice,
    # no source), so scikit-learn never uses it.
    rf = RandomForestClassifier(n_estimators=5, random_state=0).fit(Xc, y)
    forest = gw.from_estimator(rf)
    used = {int(f) for e in rf.estimators_ for f in e.tree_.feature[e.tree_.children_left != -1]}
    expected = [f"x{j}" for j in range(31) if j not in used]
    assert "x30" in expected
    assert depth_usage(forest).never_used == expected
    assert position_usage(forest, 2).never_used == expected


def test_bad_usage_settings_raise_setting_errors(rf_cancer):
    forest = gw.from_estimator(rf_cancer)
    with pytest.raises(SettingError, match="weight"):
        depth_usage(forest, "depth")
    with pytest.raises(SettingError, match="per_class"):
        depth_usage(forest, per_class=True)
    with pytest.raises(SettingError, match="max_depth"):
        position_usage(forest, max_depth=12)


# ----------------------------------------------------------------------------- thresholds
def test_threshold_cuts_and_counts_equal_sklearn_tree_arrays(rf_cancer, cancer):
    X, _ = cancer
    forest = gw.from_estimator(rf_cancer)
    profiles = threshold_profiles(forest, X)
    for j in (0, 7, 22):
        cuts = np.concatenate([e.tree_.threshold[(e.tree_.children_left != -1)
                                                 & (e.tree_.feature == j)]
                               for e in rf_cancer.estimators_])
        values, counts = np.unique(cuts, return_counts=True)
        fc = profiles.features[j]
        np.testing.assert_array_equal(fc.cuts, values)
        np.testing.assert_array_equal(fc.counts, counts)
        # Empirical CDF of the review column at each cut (scikit-learn's rule: float32(x) <= t).
        col = X[:, j].astype(np.float32)
        np.testing.assert_array_equal(fc.quantiles, [(col <= c).mean() for c in values])


def test_root_cut_quantile_equals_share_sent_left_by_decision_path(cancer):
    X, y = cancer
    dt = DecisionTreeClassifier(max_depth=3, random_state=0).fit(X[:300], y[:300])
    forest = gw.from_estimator(dt)
    review = X[300:]
    fc = threshold_profiles(forest, review).features[int(dt.tree_.feature[0])]
    root_cut = dt.tree_.threshold[0]
    path = dt.decision_path(review)
    # scikit-learn's decision_path: the share of review rows that visit the root's left child.
    went_left = path[:, dt.tree_.children_left[0]].toarray().mean()
    assert fc.quantiles[np.flatnonzero(fc.cuts == root_cut)[0]] == pytest.approx(went_left, abs=0)


def test_cuts_outside_the_review_range_are_flagged(rf_cancer, cancer):
    X, _ = cancer
    forest = gw.from_estimator(rf_cancer)
    j = 22  # worst perimeter
    low = X[X[:, j] <= np.median(X[:, j])]  # review data: the lower half only
    fc = threshold_profiles(forest, low).features[j]
    col = low[:, j].astype(np.float32)
    # A cut at or above the largest value sends every row left; below the smallest, right.
    expect_above = fc.cuts >= col.max()
    expect_below = fc.cuts < col.min()
    assert expect_above.any()
    np.testing.assert_array_equal(fc.side == 1, expect_above)
    np.testing.assert_array_equal(fc.side == -1, expect_below)
    assert fc.data_summary["max"] == pytest.approx(low[:, j].max())
    assert profiles_rows_ok(threshold_profiles(forest, low))


def profiles_rows_ok(profiles) -> bool:
    rows = profiles.to_rows()
    json.dumps(profiles.to_dict(), allow_nan=False)
    return len(rows) == sum(f.cuts.shape[0] for f in profiles.features)


def test_infinite_cut_of_a_missing_value_split_is_not_placed():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(300, 2))
    y = (X[:, 0] > 0).astype(int)
    X[y == 1, 1] = np.nan  # missingness alone predicts the class
    dt = DecisionTreeClassifier(max_depth=1, random_state=0).fit(X[:, 1:], y)
    # scikit-learn writes threshold inf when a split only separates missing values.
    assert np.isinf(dt.tree_.threshold[0])
    fc = threshold_profiles(gw.from_estimator(dt), X[:, 1:]).features[0]
    assert fc.n_missing_only == 1 and not fc.outside.any() and np.isnan(fc.quantiles[0])
    assert fc.n_missing == int(np.isnan(X[:, 1]).sum())


def test_xgboost_cut_counts_equal_trees_to_dataframe(wine):
    X, y = wine
    model = xgb.XGBClassifier(n_estimators=4, max_depth=3, random_state=0).fit(X, y)
    profiles = threshold_profiles(gw.from_estimator(model), X)
    df = model.get_booster().trees_to_dataframe()
    splits = df[df.Feature != "Leaf"]
    for j in range(X.shape[1]):
        fc = profiles.features[j]
        ref = splits[splits.Feature == f"f{j}"].Split.to_numpy(np.float64)
        assert fc.n_splits == ref.shape[0]
        # The text dump rounds the float32 cut to a few digits.
        np.testing.assert_allclose(np.sort(np.repeat(fc.cuts, fc.counts)), np.sort(ref),
                                   rtol=1e-5)
        if fc.cuts.size:
            # XGBoost's rule is float32(x) < cut.
            col = X[:, j].astype(np.float32)
            np.testing.assert_array_equal(fc.quantiles, [(col < np.float32(c)).mean()
                                                         for c in fc.cuts])
    assert profiles.rule == "x < cut goes left"


# ----------------------------------------------------------------------------- importances
MODELS = {
    "tree": lambda: DecisionTreeClassifier(random_state=0),
    "forest": lambda: RandomForestClassifier(n_estimators=15, random_state=0),
    "extra": lambda: ExtraTreesClassifier(n_estimators=15, random_state=0),
    "boosting": lambda: GradientBoostingClassifier(n_estimators=15, random_state=0),
    "stumps": lambda: GradientBoostingClassifier(n_estimators=15, max_depth=1, subsample=0.6,
                                                 random_state=0),
}


@pytest.mark.parametrize("loader", [load_breast_cancer, load_wine, load_iris])
@pytest.mark.parametrize("name", list(MODELS))
def test_impurity_importance_equals_feature_importances(loader, name):
    X, y = loader(return_X_y=True)
    est = MODELS[name]().fit(X, y)
    imp = impurity_importance(gw.from_estimator(est))
    # Reference: scikit-learn's own feature_importances_.
    np.testing.assert_allclose(imp.values, est.feature_importances_, rtol=0, atol=1e-10)
    assert "feature_importances_" in imp.method


@pytest.mark.parametrize("loader", [load_breast_cancer, load_wine])
def test_xgboost_impurity_importance_is_normalised_total_gain(loader):
    X, y = loader(return_X_y=True)
    model = xgb.XGBClassifier(n_estimators=10, max_depth=3, random_state=0).fit(X, y)
    imp = impurity_importance(gw.from_estimator(model))
    # Reference: XGBoost's Booster.get_score(importance_type="total_gain"), normalised.
    score = model.get_booster().get_score(importance_type="total_gain")
    ref = np.zeros(X.shape[1])
    for key, value in score.items():
        ref[int(key[1:])] = value
    np.testing.assert_allclose(imp.values, ref / ref.sum(), rtol=1e-6, atol=1e-9)
    assert "total_gain" in imp.method


def test_permutation_importance_equals_sklearn_on_the_original_model(wine):
    X, y = wine
    rf = RandomForestClassifier(n_estimators=10, random_state=0).fit(X, y)
    forest = gw.from_estimator(rf)
    res = permutation_importance_result(forest, X, y, n_repeats=3, random_state=7)
    # Reference: sklearn.inspection.permutation_importance on the scikit-learn model itself.
    ref = permutation_importance(rf, X, y, n_repeats=3, random_state=7, scoring="accuracy")
    np.testing.assert_array_equal(res.values, ref.importances)
    np.testing.assert_array_equal(res.std, ref.importances_std)
    assert res.baseline_score == rf.score(X, y) and res.target == "labels"
    fid = permutation_importance_result(forest, X, None, n_repeats=2, random_state=1)
    ref_fid = permutation_importance(rf, X, rf.predict(X), n_repeats=2, random_state=1)
    np.testing.assert_array_equal(fid.values, ref_fid.importances)
    assert fid.target == "model predictions" and fid.baseline_score == 1.0
    # The standard error the rows imply, recomputed here from its definition: each row's
    # drop in agreement averaged over the repeats, its standard deviation over sqrt(n).
    hit0 = rf.predict(X) == y
    Xv = np.asarray(X, dtype=np.float64)
    seed = np.random.RandomState(7).randint(np.iinfo(np.int32).max + 1)
    for j in (0, 6):
        rs, idx, Xp, drop = np.random.RandomState(seed), np.arange(len(y)), Xv.copy(), 0.0
        for _ in range(3):
            rs.shuffle(idx)
            Xp[:, j] = Xp[idx, j]
            drop = drop + (hit0.astype(float) - (rf.predict(Xp) == y)) / 3
        assert res.se[j] == pytest.approx(np.std(drop, ddof=1) / np.sqrt(len(y)), abs=1e-12)


def test_permutation_importance_progress_settings_and_cancel(wine):
    X, y = wine
    forest = gw.from_estimator(RandomForestClassifier(n_estimators=3, random_state=0).fit(X, y))
    calls = []
    permutation_importance_result(forest, X, y, n_repeats=2, progress=lambda d, t: calls.append(
        (d, t)))
    assert calls[-1] == (1 + 13 * 2, 1 + 13 * 2)

    class Stop(Exception):
        pass

    def cancel(done, total):
        if done == 3:
            raise Stop

    with pytest.raises(Stop):
        permutation_importance_result(forest, X, y, progress=cancel)
    with pytest.raises(SettingError, match="n_repeats"):
        permutation_importance_result(forest, X, y, n_repeats=0)
    with pytest.raises(SettingError, match="scoring"):
        permutation_importance_result(forest, X, y, scoring="no_such_score")
    with pytest.raises(DataError, match="label"):
        permutation_importance_result(forest, X, y[:10])


def test_comparison_table_ranks_and_caution(wine):
    X, y = wine
    rf = RandomForestClassifier(n_estimators=10, random_state=0).fit(X, y)
    forest = gw.from_estimator(rf)
    cmp = importance_comparison(impurity_importance(forest),
                                permutation_importance_result(forest, X, y, n_repeats=2))
    # Rank 1 goes to scikit-learn's largest feature_importances_, and so on down.
    order = np.argsort(-rf.feature_importances_, kind="stable")
    np.testing.assert_array_equal(cmp.impurity_rank[order], np.arange(1, 14))
    assert importance_ranks(np.array([0.5, 0.2, 0.2, 0.1])).tolist() == [1, 2, 2, 4]
    assert "Strobl et al. 2007, BMC Bioinformatics 8:25" in cmp.caution == STROBL_CAUTION
    rows = cmp.to_rows()
    assert set(rows[0]) >= {"impurity_rank", "permutation_rank", "permutation_std"}
    json.dumps(cmp.to_dict(), allow_nan=False)


# ----------------------------------------------------------------------------- flags
def test_flag_report_states_where_flagged_features_appear(rf_cancer, cancer):
    forest = gw.from_estimator(rf_cancer)
    report = flag_report(forest, {"x22": "protected", "x9": "forbidden"})
    walked = [(t, r) for t, e in enumerate(rf_cancer.estimators_)
              for r in walk_sklearn_tree(e.tree_)]
    total = len(walked)
    for name in ("x22", "x9"):
        j = int(name[1:])
        mine = [(t, r) for t, r in walked if r[3] == j]
        f = report[name]
        assert f.n_splits == len(mine)
        assert f.share_of_splits == pytest.approx(len(mine) / total)
        assert f.n_trees_using == len({t for t, _ in mine})
        assert dict(zip(f.depths.tolist(), f.depth_counts.tolist())) == Counter(
            r[1] for _, r in mine)
        assert f.n_root == sum(1 for e in rf_cancer.estimators_ if e.tree_.feature[0] == j)
        assert f.impurity_rank == int(importance_ranks(rf_cancer.feature_importances_)[j])
        assert name in f.statement()
    assert report["x9"].flag == "forbidden"


def test_flags_are_checked_and_unused_flags_say_so(cancer):
    X, y = cancer
    rf = RandomForestClassifier(n_estimators=4, random_state=0).fit(
        np.column_stack([X, np.zeros(len(X))]), y)
    forest = gw.from_estimator(rf)
    f = flag_report(forest, {"x30": "forbidden"})["x30"]
    assert not f.used and "not used by any of the 4 trees" in f.statement()
    with pytest.raises(SettingError, match="not a feature"):
        flag_report(forest, {"zip_code": "forbidden"})
    with pytest.raises(SettingError, match="protected or forbidden"):
        flag_report(forest, {"x1": "suspicious"})


# ----------------------------------------------------------------------------- comparison
def test_compare_models_differences_and_vanished_features(cancer):
    X, y = cancer
    names = [f"c{j}" for j in range(X.shape[1])]
    a_df = pd.DataFrame(X, columns=names)
    b_df = a_df.copy()
    b_df["c3"] = 0.0  # the retrained model loses feature c3: it is constant now
    b_df = b_df[names[::-1]]  # and sees its columns in another order
    rf_a = RandomForestClassifier(n_estimators=6, random_state=0).fit(a_df, y)
    rf_b = RandomForestClassifier(n_estimators=6, max_depth=4, random_state=1).fit(b_df, y)
    fa, fb = gw.from_estimator(rf_a), gw.from_estimator(rf_b)
    cmp = compare_models(fa, fb, labels=("2023", "2024"))

    def used(rf):  # names a scikit-learn forest splits on, from its tree_ arrays
        return {rf.feature_names_in_[f] for e in rf.estimators_
                for f in e.tree_.feature[e.tree_.children_left != -1]}

    assert "c3" in cmp.vanished
    assert cmp.vanished == [n for n in names if n in used(rf_a) - used(rf_b)]
    assert cmp.appeared == [n for n in names if n in used(rf_b) - used(rf_a)]
    assert sorted(compare_models(fb, fa).appeared) == sorted(cmp.vanished)
    ua, ub = depth_usage(fa), depth_usage(fb)
    order = [fb.feature_names.index(n) for n in names]
    diff = cmp.share_difference
    nb = ub.depths.size
    assert nb < ua.depths.size == cmp.depths.size  # B is the shallower model
    np.testing.assert_allclose(diff[:, :nb], ub.shares[order] - ua.shares[:, :nb])
    np.testing.assert_allclose(diff[:, nb:], -ua.shares[:, nb:])
    # Ranks from each model's own feature_importances_, matched by name.
    ref_b = dict(zip(rf_b.feature_names_in_, importance_ranks(rf_b.feature_importances_)))
    assert cmp.rank_b.tolist() == [int(ref_b[n]) for n in names]
    assert len(cmp.to_rows()) == 30 and len(cmp.depth_rows()) == 30 * cmp.depths.size
    json.dumps(cmp.to_dict(), allow_nan=False)
    other = gw.from_estimator(RandomForestClassifier(n_estimators=2, random_state=0).fit(
        a_df.rename(columns={"c0": "zz"}), y))
    with pytest.raises(DataError, match="same features"):
        compare_models(fa, other)


def test_every_result_serialises_to_json(rf_cancer, cancer):
    X, y = cancer
    forest = gw.from_estimator(rf_cancer)
    for result in (depth_usage(forest), position_usage(forest), threshold_profiles(forest),
                   threshold_profiles(forest, X), impurity_importance(forest),
                   flag_report(forest, {"x0": "protected"})):
        text = json.dumps(result.to_dict(), allow_nan=False)
        assert json.loads(text)["kind"]
        assert isinstance(result.to_rows(), list)
