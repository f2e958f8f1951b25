"""No rule that decides nothing: a split whose sides predict one class is removed everywhere.

References: scikit-learn's own CART (its ``tree_`` and ``predict``) for the split that decides
nothing and for the predictions the pruned tree must keep; breast cancer, wine and Fisher's
iris data (bundled with scikit-learn) and scikit-learn's ``make_classification`` for the panel.
The checks below read trees and rules with their own small walkers, not with the functions
under test.
"""

import functools
import re

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_iris, load_wine, make_classification
from sklearn.tree import DecisionTreeClassifier

from grovewise.surrogate import ObliqueSurrogate
from grovewise.surrogate.greedy import fit_greedy, oblique_from_greedy
from grovewise.surrogate.tree import (ObliqueTree, Scaling, class_weights_per_leaf,
                                      fill_empty_leaves, with_majority_classes,
                                      without_empty_splits)


# ---------------------------------------------------------------------------- own walkers
def _classes_below(tree: ObliqueTree, node: int) -> set:
    """Classes of the leaves a point at ``node`` can reach (a node whose coefficients are
    all zero sends every point right)."""
    nb = 2 ** tree.depth - 1
    if node >= nb:
        return {int(tree.leaf_class[node - nb])}
    if not np.any(tree.coef[node]):
        return _classes_below(tree, 2 * node + 2)
    return _classes_below(tree, 2 * node + 1) | _classes_below(tree, 2 * node + 2)


def _splits_reached(tree: ObliqueTree, node: int = 0, level: int = 0) -> list[tuple[int, int]]:
    """(node, level) of every split a point can reach."""
    nb = 2 ** tree.depth - 1
    if node >= nb:
        return []
    if not np.any(tree.coef[node]):
        return _splits_reached(tree, 2 * node + 2, level + 1)
    return ([(node, level)] + _splits_reached(tree, 2 * node + 1, level + 1)
            + _splits_reached(tree, 2 * node + 2, level + 1))


def _splits_deciding_nothing(tree: ObliqueTree) -> list[int]:
    return [t for t, _ in _splits_reached(tree) if len(_classes_below(tree, t)) == 1]


def _levels(tree: ObliqueTree) -> int:
    reached = _splits_reached(tree)
    return 1 + max(level for _, level in reached) if reached else 0


_LEAF = re.compile(r"^predict (.+?)( for every row)?  \[leaf \d+\]")


def _parse_rules(text: str):
    """The nested if/else of ``rules_`` as ("leaf", class) / ("if", left, right)."""
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#")]
    pos = [0]

    def node(indent: int):
        line = lines[pos[0]]
        assert line.startswith(" " * indent) and not line.startswith(" " * (indent + 1)), line
        body = line.strip()
        pos[0] += 1
        if body.startswith("if "):
            left = node(indent + 4)
            assert lines[pos[0]] == " " * indent + "else:", lines[pos[0]]
            pos[0] += 1
            return ("if", left, node(indent + 4))
        m = _LEAF.match(body)
        assert m, body
        return ("leaf", m.group(1), bool(m.group(2)))

    root = node(0)
    assert pos[0] == len(lines)
    return root


def _answers(parsed) -> set:
    return {parsed[1]} if parsed[0] == "leaf" else _answers(parsed[1]) | _answers(parsed[2])


def _ifs(parsed) -> list:
    return [] if parsed[0] == "leaf" else [parsed] + _ifs(parsed[1]) + _ifs(parsed[2])


def _nesting(parsed) -> int:
    return 0 if parsed[0] == "leaf" else 1 + max(_nesting(parsed[1]), _nesting(parsed[2]))


# ---------------------------------------------------------------------------- data
def _one_class_dominates(seed: int = 0, n: int = 400):
    """Class 1 only in a small corner (x0 > 1.2 and x1 > 0.8): CART's depth-2 tree splits the
    large class-0 side once more, into two leaves that both predict 0."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 4))
    y = ((X[:, 0] > 1.2) & (X[:, 1] > 0.8)).astype(np.int64)
    return X, y


def _panel(name: str):
    if name == "breast_cancer":
        return load_breast_cancer(return_X_y=True)
    if name == "wine":
        return load_wine(return_X_y=True)
    if name == "iris":
        return load_iris(return_X_y=True)
    if name.startswith("make_classification_"):
        seed = int(name.rsplit("_", 1)[1])
        return make_classification(n_samples=300, n_features=8, n_informative=4, n_classes=3,
                                   random_state=seed)
    return _one_class_dominates()


PANEL = ["breast_cancer", "wine", "iris", "make_classification_0", "make_classification_1",
         "make_classification_2", "one_class_dominates"]


@functools.lru_cache(maxsize=None)
def _fit(name: str, depth: int) -> tuple[ObliqueSurrogate, np.ndarray, np.ndarray]:
    X, y = _panel(name)
    est = ObliqueSurrogate(depth=depth, max_features_per_split=2, time_limit=2.0,
                           random_state=0).fit(X, y)
    return est, X, y


# ---------------------------------------------------------------------------- CART's case
def _cart_splits_of_one_class(cart) -> list[int]:
    """CART nodes whose two children are leaves predicting the same class (its tree_.value)."""
    t = cart.tree_
    left, right = t.children_left, t.children_right
    return [i for i in range(t.node_count) if left[i] >= 0 and left[left[i]] < 0
            and left[right[i]] < 0 and np.argmax(t.value[left[i]]) == np.argmax(t.value[right[i]])]


def test_cart_splits_into_two_leaves_of_one_class_and_the_greedy_stage_does_not():
    # Reference: scikit-learn's CART on the constructed data has a split whose two leaves
    # predict the same class (its own tree_.value), the "if f < t: predict 0 else: predict
    # 0" a user saw; the pruned tree must predict what CART's own predict gives.
    X, y = _one_class_dominates()
    cart = DecisionTreeClassifier(max_depth=2, random_state=0).fit(X, y)
    assert _cart_splits_of_one_class(cart), "the constructed case must give CART such a split"

    sc = Scaling.fit(X)
    raw = oblique_from_greedy(fit_greedy(X, y, np.ones(len(y)), 2, random_state=0), sc, 2)
    assert _splits_deciding_nothing(raw)  # the plain conversion keeps CART's split
    pruned = without_empty_splits(raw)
    assert _splits_deciding_nothing(pruned) == []
    assert np.count_nonzero(pruned.coef.any(axis=1)) < np.count_nonzero(raw.coef.any(axis=1))
    fresh = np.random.default_rng(1).normal(scale=3.0, size=(2000, 4))
    for data in (X, fresh):
        assert np.array_equal(pruned.leaf_class[pruned.route(data)], cart.predict(data))

    # in the pipeline: the baseline it fits has the split, its greedy stage does not
    est, _, _ = _fit("one_class_dominates", 2)
    assert _cart_splits_of_one_class(est.greedy_)
    greedy = est.result_.stages[0]
    assert greedy.name == "greedy" and _splits_deciding_nothing(greedy.tree) == []
    for data in (X, fresh):
        assert np.array_equal(est.classes_[greedy.tree.leaf_class[greedy.tree.route(data)]],
                              est.greedy_.predict(data))


# ---------------------------------------------------------------------------- every stage
@pytest.mark.parametrize("depth", [2, 3])
@pytest.mark.parametrize("name", PANEL)
def test_no_stage_keeps_a_split_that_decides_nothing(name, depth):
    est, X, y = _fit(name, depth)
    res = est.result_
    names = [s.name for s in res.stages]
    assert names[0] == "greedy" and "local_search" in names
    for s in res.stages:
        assert s.tree is not None, s.name
        assert _splits_deciding_nothing(s.tree) == [], (s.name, s.tree.coef)
        assert s.depth_used == _levels(s.tree), s.name
        assert "tree" not in s.to_dict()
    for tree in (res.tree, res.greedy_tree, est.exact_tree_, est.tree_):
        assert _splits_deciding_nothing(tree) == []
    if res.readback is not None:  # the program's own routing and count still agree
        assert res.readback["consistent"], res.readback
        assert res.readback["pruning_prediction_changes"] == 0
    # what predicts is what is read: the rounded tree's fidelity on unit weights
    assert est.fidelity_ == pytest.approx(float(np.mean(est.predict(X) == y)))


@pytest.mark.parametrize("depth", [2, 3])
@pytest.mark.parametrize("name", PANEL)
def test_rules_have_no_if_whose_sides_give_one_answer(name, depth):
    est, X, _ = _fit(name, depth)
    parsed = _parse_rules(est.rules_)
    for node in _ifs(parsed):
        assert len(_answers(node)) >= 2, est.rules_
    assert len(_ifs(parsed)) == len(est.rules_list_)
    assert sorted(r.node for r in est.rules_list_) == sorted(t for t, _ in
                                                             _splits_reached(est.tree_))
    # the rules' answers are the classes the estimator gives
    assert {str(c) for c in np.unique(est.predict(X))} <= _answers(parsed)


@pytest.mark.parametrize("depth", [2, 3])
@pytest.mark.parametrize("name", PANEL)
def test_depth_used_is_the_depth_the_rules_use(name, depth):
    est, _, _ = _fit(name, depth)
    used = est.depth_used_
    assert 0 <= used <= depth
    assert used == _levels(est.tree_) == _nesting(_parse_rules(est.rules_))
    doc = est.to_dict()
    assert doc["depth"] == depth and doc["depth_used"] == used
    reachable = [leaf["leaf"] for leaf in doc["leaves"] if leaf["reachable"]]
    assert len(reachable) == len(est.rules_list_) + 1
    first = est.rules_.splitlines()[0]
    assert first.startswith("# depth")
    if used < depth:
        assert f"depth {used} used of the {depth} allowed" in first
    assert first in est.export_text()


def test_a_tree_that_is_one_leaf_says_so():
    # 10% of the rows are class 1 at random and a leaf holds at least 40 rows: no split can
    # make a side predict 1, so every split decides nothing and the tree is one leaf.
    rng = np.random.default_rng(3)
    X = rng.normal(size=(300, 3))
    y = (rng.random(300) < 0.1).astype(np.int64)
    est = ObliqueSurrogate(depth=2, time_limit=2.0, min_leaf_size=40, random_state=0).fit(X, y)
    assert est.depth_used_ == 0 and est.rules_list_ == []
    assert "depth 0 used of the 2 allowed" in est.rules_
    body = [ln for ln in est.rules_.splitlines() if not ln.startswith("#")]
    assert len(body) == 1 and body[0].startswith("predict 0 for every row")
    assert est.predict(X).tolist() == [0] * len(y)
    assert est.to_dict()["depth_used"] == 0
    for s in est.result_.stages:
        assert s.depth_used == 0 and not np.any(s.tree.coef)


# ---------------------------------------------------------------------------- predictions
def _random_tree(rng, depth: int, p: int, n_classes: int) -> ObliqueTree:
    nb = 2 ** depth - 1
    coef = rng.normal(size=(nb, p)) * (rng.random((nb, p)) < 0.5)
    coef[rng.random(nb) < 0.25] = 0.0  # some nodes do not split
    offset = np.where(coef.any(axis=1), rng.uniform(-0.5, 1.5, size=nb), 0.0)
    leaf_class = rng.integers(0, n_classes, size=2 ** depth)
    weight = rng.random((2 ** depth, n_classes))
    return ObliqueTree(depth=depth, coef=coef, offset=offset, leaf_class=leaf_class,
                       scaling=Scaling.fit(rng.random((5, p))), leaf_weight=weight)


def test_pruning_keeps_every_prediction_of_the_unpruned_tree():
    # Reference: the unpruned tree's own predictions, on points inside and far outside the
    # data's range.
    rng = np.random.default_rng(0)
    seen_removed = 0
    for trial in range(300):
        depth = int(rng.integers(1, 6))
        tree = _random_tree(rng, depth, p=4, n_classes=int(rng.integers(1, 4)))
        pruned = without_empty_splits(tree)
        Xs = rng.uniform(-1.0, 2.0, size=(500, 4))
        before = tree.leaf_class[tree.route_scaled(Xs)]
        assert np.array_equal(pruned.leaf_class[pruned.route_scaled(Xs)], before), trial
        assert _splits_deciding_nothing(pruned) == []
        # only splits are removed, never moved or changed
        kept = pruned.coef.any(axis=1)
        assert np.array_equal(pruned.coef[kept], tree.coef[kept])
        assert np.array_equal(pruned.offset[kept], tree.offset[kept])
        assert not np.any(pruned.coef[~tree.coef.any(axis=1)])
        # the weight of a removed subtree is gathered, not lost
        assert pruned.leaf_weight.sum() == pytest.approx(tree.leaf_weight.sum())
        assert without_empty_splits(pruned) is pruned  # nothing left to remove
        seen_removed += int(np.count_nonzero(tree.coef.any(axis=1) & ~kept))
    assert seen_removed > 100  # the trials did exercise the pruning


@pytest.mark.parametrize("depth", [2, 3])
@pytest.mark.parametrize("name", ["wine", "one_class_dominates", "make_classification_1"])
def test_majority_classes_predict_as_before_pruning(name, depth):
    # Reference: the greedy tree with each leaf's weighted-majority class, not pruned,
    # computed here from the leaves' class weights.
    X, y = _panel(name)
    sc = Scaling.fit(X)
    Xs = sc.transform(X)
    K = int(y.max()) + 1
    w = np.random.default_rng(depth).uniform(0.5, 1.0, size=len(y))
    raw = oblique_from_greedy(fit_greedy(X, y, w, depth, random_state=0), sc, depth)
    lw = class_weights_per_leaf(raw.route_scaled(Xs), y, w, 2 ** depth, K)
    raw_classes = np.argmax(fill_empty_leaves(lw, depth), axis=1)
    tree = with_majority_classes(raw, Xs, y, w, K)
    fresh = sc.transform(np.random.default_rng(7).uniform(X.min(0) - X.std(0),
                                                          X.max(0) + X.std(0), (3000, X.shape[1])))
    for data in (Xs, fresh):
        assert np.array_equal(tree.predict_index_scaled(data),
                              raw_classes[raw.route_scaled(data)])
    assert _splits_deciding_nothing(tree) == []
    again = with_majority_classes(tree, Xs, y, w, K)  # pruning is stable under re-scoring
    assert np.array_equal(again.coef, tree.coef) and np.array_equal(again.leaf_class,
                                                                     tree.leaf_class)
    assert np.allclose(again.leaf_weight, tree.leaf_weight)
