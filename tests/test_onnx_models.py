"""ONNX tree ensembles read into the Forest, checked against onnxruntime.

References named beside each check: onnxruntime's own outputs (``InferenceSession.run``, CPU,
float32 input unless the graph takes doubles) for the probabilities and the label, on models
converted by skl2onnx (scikit-learn) and onnxmltools (XGBoost, LightGBM) from fits on
scikit-learn's bundled datasets (breast cancer: Wolberg et al., UCI; iris: Fisher 1936; wine:
Forina et al., UCI), with 10% of the cells made missing in the rows compared (and in the
training rows of the libraries that accept missing values). For LightGBM's category sets, a
table made from wine: its first column cut at its sextiles into codes 0..5 (every 17th row
missing), beside five other columns. Hand-built graphs (onnx.helper) follow the ai.onnx.ml
operator definitions (TreeEnsembleClassifier, TreeEnsemble of opset 5) and are checked
against onnxruntime on values placed on, just above and just below every threshold.
"""

import warnings

import numpy as np
import pytest

onnx = pytest.importorskip("onnx")
ort = pytest.importorskip("onnxruntime")
skl2onnx = pytest.importorskip("skl2onnx")
onnxmltools = pytest.importorskip("onnxmltools")

import lightgbm as lgb  # noqa: E402
import xgboost as xgb  # noqa: E402
from onnx import TensorProto, helper, numpy_helper  # noqa: E402
from onnxmltools.convert.common.data_types import FloatTensorType  # noqa: E402
from sklearn.datasets import load_breast_cancer, load_iris, load_wine  # noqa: E402
from sklearn.ensemble import (ExtraTreesClassifier, GradientBoostingClassifier,  # noqa: E402
                              HistGradientBoostingClassifier, RandomForestClassifier)
from sklearn.tree import DecisionTreeClassifier  # noqa: E402

import grovewise as gw  # noqa: E402
from grovewise.forest import (COMPARE_LE_FLOAT32, COMPARE_LE_FLOAT64,  # noqa: E402
                              COMPARE_LT_FLOAT32)
from grovewise.loaders import load_native  # noqa: E402
from grovewise.loaders.exactness import check_exactness  # noqa: E402
from grovewise.loaders.families import NoReference, family_of  # noqa: E402
from grovewise.loaders.onnx_models import (FAMILY, forest_from_onnx, is_onnx_model,  # noqa: E402
                                           onnx_reference)

TOL = 1e-5  # the contract: onnxruntime sums and transforms in float32
DATASETS = {"breast_cancer": load_breast_cancer, "iris": load_iris, "wine": load_wine}


def _holes(X, seed=7):
    X = X.copy()
    X[np.random.default_rng(seed).random(X.shape) < 0.1] = np.nan
    return X


def _skl2onnx(model, X):
    """skl2onnx's conversion. skl2onnx 1.20 writes Python booleans into histogram boosting's
    ``nodes_missing_value_tracks_true``, which onnx 1.23 refuses; they are given as the 0/1
    integers the attribute holds, nothing else changes."""
    import skl2onnx.common._container as container

    make_node = container.make_node

    def ints(*args, **kwargs):
        if "nodes_missing_value_tracks_true" in kwargs:
            kwargs["nodes_missing_value_tracks_true"] = [
                int(v) for v in kwargs["nodes_missing_value_tracks_true"]]
        return make_node(*args, **kwargs)

    container.make_node = ints
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return skl2onnx.to_onnx(model, X[:1].astype(np.float32))
    finally:
        container.make_node = make_node


def _onnxmltools(model, X):
    types = [("input", FloatTensorType([None, X.shape[1]]))]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if isinstance(model, xgb.XGBClassifier):
            return onnxmltools.convert_xgboost(model, initial_types=types)
        return onnxmltools.convert_lightgbm(model, initial_types=types)


# name: (make, converter, trained with missing values, comparison rule expected)
SOURCES = {
    "random_forest": (lambda: RandomForestClassifier(25, max_depth=4, random_state=0),
                      _skl2onnx, False, COMPARE_LE_FLOAT32),
    "extra_trees": (lambda: ExtraTreesClassifier(25, max_depth=4, random_state=0),
                    _skl2onnx, False, COMPARE_LE_FLOAT32),
    "decision_tree": (lambda: DecisionTreeClassifier(max_depth=4, random_state=0),
                      _skl2onnx, False, COMPARE_LE_FLOAT32),
    "gradient_boosting": (lambda: GradientBoostingClassifier(n_estimators=10, max_depth=3,
                                                             random_state=0),
                          _skl2onnx, False, COMPARE_LE_FLOAT32),
    "hist_gradient_boosting": (lambda: HistGradientBoostingClassifier(max_iter=10, max_depth=3,
                                                                      random_state=0),
                               _skl2onnx, True, COMPARE_LE_FLOAT32),
    "xgboost": (lambda: xgb.XGBClassifier(n_estimators=10, max_depth=3, random_state=0),
                _onnxmltools, True, COMPARE_LT_FLOAT32),
    "lightgbm": (lambda: lgb.LGBMClassifier(n_estimators=10, max_depth=3, num_leaves=8,
                                            random_state=0, verbose=-1),
                 _onnxmltools, True, COMPARE_LE_FLOAT32),
}
_CACHE = {}


def _converted(source, dataset):
    """(ONNX model, fitted model, rows to compare): every row of the dataset, and every row
    again with 10% of its cells missing."""
    if (source, dataset) not in _CACHE:
        make, convert, nan, _ = SOURCES[source]
        X, y = DATASETS[dataset](return_X_y=True)
        model = make().fit(_holes(X, seed=3) if nan else X, y)
        _CACHE[source, dataset] = convert(model, X), model, np.vstack([X, _holes(X)])
    return _CACHE[source, dataset]


def _check(forest, model, X):
    """The Forest against onnxruntime: the largest probability difference, labels equal."""
    proba, index, leaves = onnx_reference(model, X, forest)
    assert leaves is None  # onnxruntime has no leaf ids
    ours = forest.predict_proba(X)
    diff = float(np.abs(ours - proba).max())
    assert diff <= TOL, diff
    np.testing.assert_array_equal(forest.predict_index(X), index)
    return diff


# ---------------------------------------------------------------------------- converted models
@pytest.mark.parametrize("dataset", list(DATASETS))
@pytest.mark.parametrize("source", list(SOURCES))
def test_converted_models_equal_onnxruntime(source, dataset):
    onx, fitted, X = _converted(source, dataset)
    assert is_onnx_model(onx) and family_of(onx) is FAMILY
    forest = gw.from_estimator(onx)
    assert forest.kind == "onnx" and forest.compare == SOURCES[source][3]
    assert forest.n_features == X.shape[1] and not forest.has_feature_names
    np.testing.assert_array_equal(forest.classes_, fitted.classes_)
    assert forest.source["library"] == "onnx"
    assert forest.source["producer"] in ("skl2onnx", "OnnxMLTools")
    # reference: onnxruntime's probabilities (to 1e-5) and labels
    _check(forest, onx, X)


@pytest.mark.parametrize("dataset", ["breast_cancer", "wine"])
@pytest.mark.parametrize("source", list(SOURCES))
def test_onnx_files_load_and_prove_exact(source, dataset, tmp_path):
    onx, _, X = _converted(source, dataset)
    path = tmp_path / "model.onnx"
    onnx.save(onx, path)
    forest = gw.load_model(path)
    assert forest.source["file"] == str(path)
    native = load_native(path)
    assert is_onnx_model(native)
    # reference: onnxruntime on the model read back from the file
    check = check_exactness(forest, native, X)
    assert check.passed and check.rows == X.shape[0], check.text()
    assert check.max_abs_proba_diff <= TOL and check.leaves_equal is None
    assert check.tolerance == TOL


def test_lightgbm_categorical_chains_become_set_splits():
    """onnxmltools writes a LightGBM category set as a chain of BRANCH_EQ nodes sharing their
    matching child; the Forest reads each chain as one set split."""
    X, y = load_wine(return_X_y=True)
    X = X[:, :6].copy()
    X[:, 0] = np.digitize(X[:, 0], np.quantile(X[:, 0], [1 / 6, 2 / 6, 3 / 6, 4 / 6, 5 / 6]))
    X[::17, 0] = np.nan
    model = lgb.LGBMClassifier(n_estimators=10, max_depth=3, num_leaves=8, min_child_samples=5,
                               min_data_per_group=5, cat_smooth=1, verbose=-1, random_state=0)
    model.fit(X, y, categorical_feature=[0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        onx = onnxmltools.convert_lightgbm(  # without ZipMap: the probabilities times 1
            model, initial_types=[("input", FloatTensorType([None, X.shape[1]]))], zipmap=False)
    assert "Mul" in [n.op_type for n in onx.graph.node]
    modes = [m for n in onx.graph.node if n.op_type == "TreeEnsembleClassifier"
             for a in n.attribute if a.name == "nodes_modes" for m in a.strings]
    assert b"BRANCH_EQ" in modes
    forest = forest_from_onnx(onx)
    assert forest.n_categorical_splits > 0
    unseen = X[:20].copy()
    unseen[:, 0] = np.arange(-1, 9).repeat(2)  # codes below, inside and above those trained
    # reference: onnxruntime on whole-number codes, NaN and codes never seen
    _check(forest, onx, np.vstack([X, unseen, _holes(X)]))


def test_skl2onnx_double_input_compares_in_float64():
    """skl2onnx converts for a double input when told so; onnxruntime then compares doubles."""
    from skl2onnx.common.data_types import DoubleTensorType

    X, y = load_wine(return_X_y=True)
    model = RandomForestClassifier(10, max_depth=4, random_state=0).fit(X, y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        onx = skl2onnx.convert_sklearn(model, initial_types=[("X", DoubleTensorType(
            [None, X.shape[1]]))], options={"zipmap": False})
    forest = forest_from_onnx(onx)
    assert forest.compare == COMPARE_LE_FLOAT64
    # reference: onnxruntime fed float64
    _check(forest, onx, np.vstack([X, _holes(X)]))


# ---------------------------------------------------------------------------- hand-built graphs
def _classifier_model(nodes, leaves, labels, *, post="NONE", base=None, n_features=3,
                      input_type=TensorProto.FLOAT, before=(), after=(), extra=None,
                      proba_name="probabilities"):
    """A TreeEnsembleClassifier graph. ``nodes``: (tree, id, mode, feature, value, true,
    false, nan_true); ``leaves``: (tree, node, class id, weight)."""
    attrs = dict(
        nodes_treeids=[n[0] for n in nodes], nodes_nodeids=[n[1] for n in nodes],
        nodes_modes=[n[2] for n in nodes], nodes_featureids=[n[3] for n in nodes],
        nodes_values=[float(n[4]) for n in nodes], nodes_truenodeids=[n[5] for n in nodes],
        nodes_falsenodeids=[n[6] for n in nodes],
        nodes_missing_value_tracks_true=[int(n[7]) for n in nodes],
        class_treeids=[w[0] for w in leaves], class_nodeids=[w[1] for w in leaves],
        class_ids=[w[2] for w in leaves], class_weights=[float(w[3]) for w in leaves],
        post_transform=post)
    strings = isinstance(labels[0], str)
    attrs["classlabels_strings" if strings else "classlabels_int64s"] = list(labels)
    if base is not None:
        attrs["base_values"] = [float(b) for b in base]
    attrs.update(extra or {})
    x = "Xf" if before else "X"
    te = helper.make_node("TreeEnsembleClassifier", [x], ["label", "scores"],
                          domain="ai.onnx.ml", **attrs)
    plumbing = list(after) or [helper.make_node("Identity", ["scores"], [proba_name])]
    label_type = TensorProto.STRING if strings else TensorProto.INT64
    outputs = [helper.make_tensor_value_info("label", label_type, [None])]
    if proba_name.startswith("zip"):
        key = TensorProto.STRING if strings else TensorProto.INT64
        outputs.append(helper.make_value_info(proba_name, helper.make_sequence_type_proto(
            helper.make_map_type_proto(key, helper.make_tensor_type_proto(TensorProto.FLOAT,
                                                                          [])))))
    else:
        outputs.append(helper.make_tensor_value_info(proba_name, TensorProto.FLOAT,
                                                     [None, len(labels)]))
    graph = helper.make_graph(list(before) + [te] + plumbing, "g",
                              [helper.make_tensor_value_info("X", input_type,
                                                             [None, n_features])], outputs)
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17),
                                                    helper.make_opsetid("ai.onnx.ml", 3)],
                              producer_name="hand")
    model.ir_version = 8
    return model


def _random_trees(rng, n_trees, modes, *, n_classes=1, depth=3, thresholds, codes=None):
    """Random full trees over features 0 and 1 (numeric, ``modes``) and 2 (category codes:
    BRANCH_EQ / BRANCH_NEQ when ``codes`` is given)."""
    nodes, leaves = [], []
    for t in range(n_trees):
        for i in range(2 ** (depth + 1) - 1):
            if i >= 2 ** depth - 1:
                nodes.append((t, i, "LEAF", 0, 0.0, 0, 0, 0))
                for c in range(n_classes):
                    leaves.append((t, i, c, rng.normal(0.0, 0.5)))
                continue
            if codes is not None and rng.random() < 0.35:
                mode, feature, value = rng.choice(["BRANCH_EQ", "BRANCH_NEQ"]), 2, rng.choice(codes)
            else:
                mode, feature = rng.choice(modes), int(rng.integers(0, 2))
                value = rng.choice(thresholds)
            nodes.append((t, i, str(mode), feature, float(value), 2 * i + 1, 2 * i + 2,
                          int(rng.integers(0, 2))))
    return nodes, leaves


def _probe_rows(rng, thresholds, codes, n=600, dtype=np.float32):
    """Values on, just above and just below every threshold, NaN and infinities (numeric
    columns); whole-number codes, a negative one, one far above, NaN (the code column)."""
    t = np.asarray(thresholds, dtype=dtype)
    near = np.concatenate([t, np.nextafter(t, dtype(np.inf)), np.nextafter(t, dtype(-np.inf)),
                           [np.nan, np.inf, -np.inf]]).astype(np.float64)
    code = np.concatenate([np.asarray(codes, dtype=np.float64), [-1.0, 70.0, np.nan]])
    return np.column_stack([rng.choice(near, n), rng.choice(near, n), rng.choice(code, n)])


THRESHOLDS = np.float32([-1.5, 0.0, 0.1, 1.0, 2.5])
CODES = [0, 1, 2, 3, 5]


@pytest.mark.parametrize("modes,compare", [
    (["BRANCH_LT", "BRANCH_GTE"], COMPARE_LT_FLOAT32),
    (["BRANCH_LEQ", "BRANCH_GT"], COMPARE_LE_FLOAT32),
    (["BRANCH_LEQ", "BRANCH_LT", "BRANCH_GTE", "BRANCH_GT"], COMPARE_LE_FLOAT32),
])
def test_branch_rules_equal_onnxruntime(modes, compare):
    """GT and GTE (children swapped), EQ and NEQ (category sets), NaN to the true or the false
    side, < and <= mixed in one forest (< read as <= the float32 just below)."""
    rng = np.random.default_rng(11)
    nodes, leaves = _random_trees(rng, 12, modes, thresholds=THRESHOLDS, codes=CODES)
    model = _classifier_model(nodes, leaves, [0, 1], post="LOGISTIC", base=[0.3])
    forest = forest_from_onnx(model)
    assert forest.compare == compare and forest.n_categorical_splits > 0
    np.testing.assert_allclose(forest.base_score, [0.3])
    # reference: onnxruntime's probabilities and labels
    _check(forest, model, _probe_rows(rng, THRESHOLDS, CODES))


def test_single_nodes_follow_each_rule():
    """One split per mode, NaN to the false side unless tracked: the sides onnxruntime takes
    for 0, 1 (the threshold), 1.5, 2 and NaN, as the Forest's leaf values show them."""
    X = np.array([[0.0], [1.0], [1.5], [2.0], [np.nan]])
    expected = {  # True: the true child; from onnxruntime's outputs
        "BRANCH_LEQ": [1, 1, 0, 0, 0], "BRANCH_LT": [1, 0, 0, 0, 0],
        "BRANCH_GTE": [0, 1, 1, 1, 0], "BRANCH_GT": [0, 0, 1, 1, 0],
        "BRANCH_EQ": [0, 1, 0, 0, 0], "BRANCH_NEQ": [1, 0, 1, 1, 1],
    }
    for mode, sides in expected.items():
        for track in (0, 1):
            nodes = [(0, 0, mode, 0, 1.0, 1, 2, track), (0, 1, "LEAF", 0, 0, 0, 0, 0),
                     (0, 2, "LEAF", 0, 0, 0, 0, 0)]
            model = _classifier_model(nodes, [(0, 1, 0, 0.75), (0, 2, 0, 0.25)], [0, 1],
                                      n_features=1)
            forest = forest_from_onnx(model)
            want = np.where(np.array(sides, dtype=bool), 0.75, 0.25)
            if track:
                want[-1] = 0.75
            proba, _, _ = onnx_reference(model, X, forest)
            # EQ and NEQ test category codes: 1.5 is none (the Forest reads it as code 1)
            keep = [0, 1, 3, 4] if mode in ("BRANCH_EQ", "BRANCH_NEQ") else slice(None)
            # reference: onnxruntime
            np.testing.assert_allclose(proba[keep, 1], want[keep], atol=1e-7)
            np.testing.assert_allclose(forest.predict_proba(X[keep])[:, 1], want[keep],
                                       atol=1e-12)


def test_double_input_compares_in_float64():
    """A graph taking doubles compares the doubles themselves: x < t becomes x <= the double
    just below t (reference: onnxruntime fed float64)."""
    rng = np.random.default_rng(5)
    thresholds = np.array([-1.5, 0.1, 1.0000000001, 2.5])
    nodes, leaves = _random_trees(rng, 8, ["BRANCH_LEQ", "BRANCH_LT", "BRANCH_GTE"],
                                  thresholds=thresholds)
    attrs = {"nodes_values_as_tensor": numpy_helper.from_array(
        np.array([n[4] for n in nodes], dtype=np.float64))}
    model = _classifier_model(nodes, leaves, [0, 1], post="LOGISTIC",
                              input_type=TensorProto.DOUBLE, extra=attrs)
    for a in model.graph.node[0].attribute:
        if a.name == "nodes_values":
            model.graph.node[0].attribute.remove(a)
            break
    forest = forest_from_onnx(model)
    assert forest.compare == COMPARE_LE_FLOAT64
    X = _probe_rows(rng, thresholds, CODES, dtype=np.float64)
    _check(forest, model, X)


def test_double_input_cast_to_float_and_division_by_one():
    """A double input cast to float before the ensemble compares in float32; dividing the
    probabilities by a Constant 1 changes nothing (reference: onnxruntime fed float64)."""
    rng = np.random.default_rng(9)
    nodes, leaves = _random_trees(rng, 8, ["BRANCH_LT", "BRANCH_GTE"], thresholds=THRESHOLDS,
                                  codes=CODES)
    before = [helper.make_node("Cast", ["X"], ["Xf"], to=TensorProto.FLOAT)]
    after = [helper.make_node("Constant", [], ["one"], value=numpy_helper.from_array(
                 np.float32(1.0))),
             helper.make_node("Div", ["scores", "one"], ["probabilities"])]
    model = _classifier_model(nodes, leaves, [0, 1], post="LOGISTIC", base=[-0.2],
                              input_type=TensorProto.DOUBLE, before=before, after=after)
    forest = forest_from_onnx(model)
    assert forest.compare == COMPARE_LT_FLOAT32
    X = _probe_rows(rng, THRESHOLDS, CODES)
    X[::7, :2] += 1e-12  # doubles that round to a float32 threshold
    _check(forest, model, X)


def test_string_labels_through_zipmap_and_softmax():
    rng = np.random.default_rng(3)
    nodes, leaves = _random_trees(rng, 6, ["BRANCH_LEQ"], n_classes=3, thresholds=THRESHOLDS)
    labels = ["setosa", "versicolor", "virginica"]
    after = [helper.make_node("Cast", ["scores"], ["scores32"], to=TensorProto.FLOAT),
             helper.make_node("ZipMap", ["scores32"], ["zipped"], domain="ai.onnx.ml",
                              classlabels_strings=labels)]
    model = _classifier_model(nodes, leaves, labels, post="SOFTMAX", base=[0.1, -0.2, 0.0],
                              after=after, proba_name="zipped")
    forest = forest_from_onnx(model)
    assert list(forest.classes_) == labels and forest.link == "softmax"
    _check(forest, model, _probe_rows(rng, THRESHOLDS, CODES))


def _ensemble_model(trees, n_targets, *, post, aggregate=1, argmax=True):
    """A TreeEnsemble (ai.onnx.ml opset 5) graph from trees given as nested tuples:
    ``(mode number, feature, value or set, nan_true, true, false)`` or ``(target, weight)``."""
    modes, feats, splits, tn, tl, fn, fl, track, members = [], [], [], [], [], [], [], [], []
    targets, weights, roots = [], [], []

    seen = {}  # one leaf entry per leaf object: the same object twice is one shared leaf

    def add(tree):
        if len(tree) == 2:
            if id(tree) not in seen:
                targets.append(tree[0])
                weights.append(tree[1])
                seen[id(tree)] = len(targets) - 1
            return seen[id(tree)], 1
        mode, feature, value, nan_true, true, false = tree
        i = len(modes)
        modes.append(mode)
        feats.append(feature)
        splits.append(0.0 if mode == 6 else value)
        if mode == 6:
            members.extend(list(value) + [np.nan])
        track.append(nan_true)
        for lst in (tn, tl, fn, fl):
            lst.append(0)
        tn[i], tl[i] = add(true)
        fn[i], fl[i] = add(false)
        return i, 0

    for tree in trees:
        roots.append(add(tree)[0])
    attrs = dict(
        nodes_modes=numpy_helper.from_array(np.array(modes, dtype=np.uint8)),
        nodes_featureids=feats, nodes_splits=numpy_helper.from_array(np.float32(splits)),
        nodes_truenodeids=tn, nodes_trueleafs=tl, nodes_falsenodeids=fn, nodes_falseleafs=fl,
        nodes_missing_value_tracks_true=track, tree_roots=roots, leaf_targetids=targets,
        leaf_weights=numpy_helper.from_array(np.float32(weights)), n_targets=n_targets,
        post_transform=post, aggregate_function=aggregate)
    if members:
        attrs["membership_values"] = numpy_helper.from_array(np.float32(members))
    nodes = [helper.make_node("TreeEnsemble", ["X"], ["Y"], domain="ai.onnx.ml", **attrs)]
    outputs = [helper.make_tensor_value_info("Y", TensorProto.FLOAT, [None, n_targets])]
    if argmax:
        nodes.append(helper.make_node("ArgMax", ["Y"], ["label"], axis=1, keepdims=0))
        outputs.append(helper.make_tensor_value_info("label", TensorProto.INT64, [None]))
    graph = helper.make_graph(nodes, "g", [helper.make_tensor_value_info("X", TensorProto.FLOAT,
                                                                         [None, 3])], outputs)
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 21),
                                                    helper.make_opsetid("ai.onnx.ml", 5)])
    model.ir_version = 10
    return model


def _random_shape(rng, depth):
    """A random tree over every mode (BRANCH_MEMBER, EQ and NEQ on the code column); its
    leaves are None, to be filled."""
    if depth == 0:
        return None
    mode = int(rng.integers(0, 7))
    if mode == 6:
        node = (6, 2, tuple(sorted(rng.choice(CODES, 2, replace=False).tolist())))
    elif mode in (4, 5):
        node = (mode, 2, float(rng.choice(CODES)))
    else:
        node = (mode, int(rng.integers(0, 2)), float(rng.choice(THRESHOLDS)))
    return node + (int(rng.integers(0, 2)), _random_shape(rng, depth - 1),
                   _random_shape(rng, depth - 1))


def _fill(shape, target, shares):
    """``shape`` with leaf k holding (target, shares[k]), leaves numbered depth first."""
    count = iter(range(10 ** 6))

    def walk(node):
        if node is None:
            return (target, float(shares[next(count)]))
        return node[:4] + (walk(node[4]), walk(node[5]))

    return walk(shape)


@pytest.mark.parametrize("aggregate", [0, 1])  # AVERAGE, SUM
def test_tree_ensemble_opset5_forest_of_class_trees(aggregate):
    """The TreeEnsemble operator (ai.onnx.ml opset 5), written as a forest writes it there:
    one tree per class with that class's share at each leaf, post_transform NONE; every mode
    including BRANCH_MEMBER; the label from ArgMax (reference: onnxruntime)."""
    rng = np.random.default_rng(21)
    shapes = [_random_shape(rng, 3) for _ in range(6)]
    shapes.append((0, 0, 1.0, 0, None, None))  # both sides one leaf: a single leaf
    n_trees = 3 * len(shapes)
    trees = []
    for shape in shapes:
        shares = rng.dirichlet(np.ones(3), size=8)  # per leaf, the classes' shares
        scale = n_trees / len(shapes) if aggregate == 0 else 1.0 / len(shapes)
        for c in range(3):
            tree = _fill(shape, c, scale * shares[:, c])
            if shape[4] is None:  # the two sides share leaf 0
                tree = tree[:4] + (tree[4], tree[4])
            trees.append(tree)
    model = _ensemble_model(trees, 3, post=0, aggregate=aggregate)
    forest = forest_from_onnx(model)
    assert forest.link == "mean" and forest.source["operator"] == "TreeEnsemble"
    assert forest.n_trees == len(shapes)  # the class trees of a shape merged into one
    assert forest.n_categorical_splits > 0 and forest.trees[-1].n_nodes == 1
    X = _probe_rows(rng, THRESHOLDS, CODES)
    np.testing.assert_allclose(forest.predict_proba(X).sum(axis=1), 1.0, atol=1e-6)
    _check(forest, model, X)


def test_tree_ensemble_post_transforms_are_refused_as_onnxruntime_differs():
    """onnxruntime reads TreeEnsemble's post_transform codes otherwise than the operator
    defines them (reference: onnxruntime's outputs): SOFTMAX (1) over three targets gives
    rows that do not add up to 1, and LOGISTIC (2) of one target leaves the raw score."""
    X = np.array([[0.0, 0, 0], [2.0, 0, 0]], dtype=np.float32)
    three = _ensemble_model([(0, 0, 1.0, 0, (0, 1.5), (1, -0.5)), (0, 0, 1.0, 0, (2, 1.5),
                                                                    (1, 0.5))], 3, post=1)
    one = _ensemble_model([(0, 0, 1.0, 0, (0, 3.0), (0, -2.0))], 1, post=2, argmax=False)
    for model, name in ((three, "SOFTMAX"), (one, "LOGISTIC")):
        with pytest.raises(gw.UnsupportedModelError, match=f"post_transform {name}"):
            forest_from_onnx(model)
    run = lambda m: ort.InferenceSession(m.SerializeToString(),  # noqa: E731
                                         providers=["CPUExecutionProvider"]).run(None, {"X": X})
    assert np.abs(run(three)[0].sum(axis=1) - 1.0).max() > 0.1
    np.testing.assert_allclose(run(one)[0][:, 0], [3.0, -2.0])


# ---------------------------------------------------------------------------- refusals
STUMP = [(0, 0, "BRANCH_LEQ", 0, 1.0, 1, 2, 0), (0, 1, "LEAF", 0, 0, 0, 0, 0),
         (0, 2, "LEAF", 0, 0, 0, 0, 0)]


@pytest.mark.parametrize("build,named", [
    (lambda: _classifier_model(STUMP, [(0, 1, 0, 0.2), (0, 2, 0, 0.7)], [0, 1], after=[
        helper.make_node("Normalizer", ["scores"], ["probabilities"], domain="ai.onnx.ml",
                         norm="L1")]), "Normalizer"),
    (lambda: _classifier_model(STUMP, [(0, 1, 0, 0.2), (0, 2, 0, 0.7)], [0, 1], before=[
        helper.make_node("Scaler", ["X"], ["Xf"], domain="ai.onnx.ml", offset=[0.0] * 3,
                         scale=[2.0] * 3)]), "Scaler"),
    (lambda: _classifier_model(STUMP, [(0, 1, 0, -0.2), (0, 2, 0, 0.7)], [0, 1],
                               post="PROBIT"), "PROBIT"),
    (lambda: _classifier_model(STUMP, [(0, 1, c, 0.2 + c) for c in range(3)]
                               + [(0, 2, c, 0.1 * c) for c in range(3)], [0, 1, 2],
                               post="SOFTMAX_ZERO"), "SOFTMAX_ZERO"),
    (lambda: _classifier_model(STUMP, [(0, 1, 0, -0.2), (0, 2, 0, 0.7)], [0, 1],
                               extra={"aggregate_function": "AVERAGE"}), "aggregate_function"),
    (lambda: _classifier_model(STUMP, [(0, 1, 0, 0.2), (0, 2, 0, 0.7)], [0, 1],
                               post="LOGISTIC"), "LOGISTIC"),
    (lambda: _classifier_model(STUMP, [(0, 1, 0, 0.2), (0, 2, 0, 0.7), (0, 1, 1, 0.8),
                                       (0, 2, 1, 0.3)], [0, 1]), "class id 1"),
    (lambda: _classifier_model(STUMP, [(0, 1, 0, 0.9), (0, 2, 0, 1.7)], [0, 1]),
     "not probabilities"),
    (lambda: _classifier_model([(0, 0, "BRANCH_EQ", 0, 1.5, 1, 2, 0)] + STUMP[1:],
                               [(0, 1, 0, -0.2), (0, 2, 0, 0.7)], [0, 1], post="LOGISTIC"),
     "category codes"),
    (lambda: _ensemble_model([(0, 0, 1.0, 0, (0, 0.2), (0, 0.7))], 1, post=0, argmax=False),
     "one score"),
    (lambda: _ensemble_model([(0, 0, 1.0, 0, (0, 0.2), (1, 0.7))], 2, post=0),
     "do not add up to 1"),
])
def test_unsupported_graphs_are_refused_by_name(build, named):
    model = build()
    with pytest.raises(gw.UnsupportedModelError, match=named):
        gw.from_estimator(model)


def test_refused_cases_really_differ_in_onnxruntime():
    """Why two refusals: onnxruntime's label disagrees with its own probabilities there."""
    X = np.array([[0.0, 0, 0], [2.0, 0, 0]])
    positive = _classifier_model(STUMP, [(0, 1, 0, 0.2), (0, 2, 0, 0.7)], [0, 1],
                                 post="LOGISTIC")
    both = _classifier_model(STUMP, [(0, 1, 0, 0.2), (0, 2, 0, 0.7), (0, 1, 1, 0.8),
                                     (0, 2, 1, 0.3)], [0, 1])
    for model in (positive, both):
        session = ort.InferenceSession(model.SerializeToString(),
                                       providers=["CPUExecutionProvider"])
        label, proba = session.run(None, {"X": X.astype(np.float32)})
        assert not np.array_equal(label, proba.argmax(axis=1))  # reference: onnxruntime


def test_regressor_and_non_models_are_refused():
    node = helper.make_node("TreeEnsembleRegressor", ["X"], ["Y"], domain="ai.onnx.ml",
                            nodes_treeids=[0], nodes_nodeids=[0], nodes_modes=["LEAF"],
                            nodes_featureids=[0], nodes_values=[0.0], nodes_truenodeids=[0],
                            nodes_falsenodeids=[0], target_treeids=[0], target_nodeids=[0],
                            target_ids=[0], target_weights=[1.0], n_targets=1)
    graph = helper.make_graph([node], "g",
                              [helper.make_tensor_value_info("X", TensorProto.FLOAT, [None, 1])],
                              [helper.make_tensor_value_info("Y", TensorProto.FLOAT, [None, 1])])
    with pytest.raises(gw.UnsupportedModelError, match="TreeEnsembleRegressor"):
        forest_from_onnx(helper.make_model(graph))
    assert not is_onnx_model(object()) and not is_onnx_model(graph)


def test_damaged_file_and_missing_packages(tmp_path, monkeypatch):
    bad = tmp_path / "broken.onnx"
    bad.write_bytes(b"\x08\x07this is not a protobuf model\xff\xff")
    with pytest.raises(gw.ModelFileError, match="broken.onnx"):
        gw.load_model(bad)
    onx, _, X = _converted("random_forest", "iris")
    forest = forest_from_onnx(onx)
    monkeypatch.setitem(__import__("sys").modules, "onnxruntime", None)
    with pytest.raises(NoReference, match=r"grovewise\[onnx\]"):
        onnx_reference(onx, X, forest)
    check = check_exactness(forest, onx, X)
    assert check.passed and check.no_reference and "grovewise[onnx]" in check.text()
    good = tmp_path / "model.onnx"
    onnx.save(onx, good)
    monkeypatch.setitem(__import__("sys").modules, "onnx", None)
    with pytest.raises(gw.UnsupportedModelError, match=r'pip install "grovewise\[onnx\]"'):
        gw.load_model(good)


# ---------------------------------------------------------------------------- analyses
@pytest.mark.parametrize("source,dataset", [("random_forest", "wine"), ("xgboost", "iris"),
                                            ("lightgbm", "breast_cancer"), ("hand-built", "")])
def test_contributions_add_up_to_the_margin(source, dataset):
    """Shapley values add up to the margin (their efficiency property), with the assumed
    covers, numeric and category splits alike."""
    if source == "hand-built":
        rng = np.random.default_rng(4)
        nodes, leaves = _random_trees(rng, 10, ["BRANCH_LEQ", "BRANCH_GTE"],
                                      thresholds=THRESHOLDS, codes=CODES)
        onx = _classifier_model(nodes, leaves, [0, 1], post="LOGISTIC")
        X = _probe_rows(rng, THRESHOLDS, CODES, n=200)
    else:
        onx, _, X = _converted(source, dataset)
    forest = forest_from_onnx(onx)
    c = gw.contributions(forest, X)
    np.testing.assert_allclose(c.base[None, :] + c.values.sum(axis=1),
                               forest.decision_function(X), rtol=0, atol=1e-9)
