"""ONNX tree ensemble classifiers (ai.onnx.ml TreeEnsembleClassifier, TreeEnsemble) -> Forest.

The model is read with the ``onnx`` package only; onnxruntime is the reference the exactness
proof compares with, and the rules below are what onnxruntime does (checked by the tests):

- A split sends a row to its true child when ``x <= t`` (BRANCH_LEQ), ``x < t`` (LT),
  ``x >= t`` (GTE), ``x > t`` (GT), ``x == t`` (EQ), ``x != t`` (NEQ) or ``x`` is in the node's
  set (BRANCH_MEMBER of TreeEnsemble). The Forest's left child is the true child, except for
  GTE and GT, which become LT and LEQ with the children swapped (``x >= t`` is ``not x < t``).
- A missing value (NaN) goes to the true child when ``nodes_missing_value_tracks_true`` is 1;
  otherwise it is compared, and every comparison with NaN is false, except ``!=``: NaN goes
  to the false child of every rule but NEQ, whose true child it reaches either way.
- The input is compared in its own type (float32 for a float graph input, float64 for a
  double one) with the stored thresholds. One comparison rule per forest: all ``<`` (LT, GTE)
  on float32 keeps XGBoost's ``lt_float32``; otherwise every ``<`` becomes ``<=`` the next
  number below the threshold in the input's type, which is the same test.
- EQ, NEQ and MEMBER test category codes (whole numbers >= 0) and become
  :class:`~grovewise.forest.CategorySplit`; the Forest reads a code as its whole part, so a
  fractional value in such a column is where the two can differ.
- Probabilities: leaf weights summed per class, ``base_values`` added, then ``post_transform``.
  onnxruntime's two-class rules are peculiar; only the cases where its probabilities are a
  distribution and its label is their argmax are accepted (see :func:`_plan_classifier`).
  TreeEnsemble is read with post_transform NONE only (see :func:`_plan_ensemble`).
- No converter writes a classifier as TreeEnsemble yet (skl2onnx 1.20 and onnxmltools 1.16
  write TreeEnsembleClassifier for every target opset); the tests build such graphs by hand.

ONNX keeps no training statistics: every node's ``cover`` is taken as ``0.5 ** depth`` (each
split halves what reaches it; this weighs the contributions' expectations) and ``gain`` is 0.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import ModelFileError, UnsupportedModelError
from ..forest import (COMPARE_LE_FLOAT32, COMPARE_LE_FLOAT64, COMPARE_LT_FLOAT32, LINK_LOGISTIC,
                      LINK_MEAN, LINK_SOFTMAX, CategorySplit, Forest, Tree, node_depths,
                      plain_feature_names)
from .families import Family, NoReference

INSTALL = 'pip install "grovewise[onnx]"'
ML_DOMAIN = "ai.onnx.ml"
CLASSIFIER = "TreeEnsembleClassifier"
ENSEMBLE = "TreeEnsemble"  # ai.onnx.ml opset 5
MODES = ("BRANCH_LEQ", "BRANCH_LT", "BRANCH_GTE", "BRANCH_GT", "BRANCH_EQ", "BRANCH_NEQ",
         "BRANCH_MEMBER")  # TreeEnsemble numbers them 0..6 in this order
CATEGORY_MODES = ("BRANCH_EQ", "BRANCH_NEQ", "BRANCH_MEMBER")
POST_TRANSFORMS = ("NONE", "SOFTMAX", "LOGISTIC", "SOFTMAX_ZERO", "PROBIT")  # TreeEnsemble: 0..4
MAX_CODE = 65535  # largest category code a split may test (the Forest keeps codes as bit sets)
EXPANSION = 16  # a tree may grow to this many times the model's nodes when shared parts are copied
SUM_TOLERANCE = 1e-4  # how far float32 leaf weights may stray from adding up to 1

# TensorProto element types.
FLOAT, DOUBLE = 1, 11
FLOAT_TYPES = {FLOAT: np.float32, DOUBLE: np.float64}


def is_onnx_model(obj) -> bool:
    """An ``onnx.ModelProto`` (told by its type, without importing onnx)."""
    t = type(obj)
    return t.__module__.split(".")[0] == "onnx" and t.__name__ == "ModelProto"


def _refuse(why: str) -> UnsupportedModelError:
    return UnsupportedModelError(f"ONNX model: {why}. Grovewise refuses models it cannot "
                                 "reproduce exactly.")


def read_onnx_file(p: Path):
    """The ``onnx.ModelProto`` in file ``p`` (external data files are not followed)."""
    try:
        import onnx
    except ImportError:
        raise UnsupportedModelError(f"{p}: reading ONNX models needs the onnx package; "
                                    f"install it with {INSTALL}.") from None
    try:
        model = onnx.load(str(p), load_external_data=False)
    except Exception as exc:  # protobuf raises several kinds on damaged content
        raise ModelFileError(f"{p}: not a readable ONNX model ({type(exc).__name__}: "
                             f"{str(exc)[:200]}); it may be damaged or truncated; export the "
                             "model to ONNX again.") from None
    if not model.graph.node:
        raise ModelFileError(f"{p}: the ONNX file holds no graph (no nodes); expected a model "
                             "with a tree ensemble classifier.")
    return model


# ---------------------------------------------------------------------------- graph
@dataclass
class _Graph:
    """Where the tree ensemble sits in the graph and which outputs carry its results."""

    node: object  # the NodeProto of the ensemble
    input_name: str
    input_type: int  # FLOAT or DOUBLE: the type the graph input is fed in
    compare_type: int  # the type the ensemble compares in
    n_features: int | None
    proba_output: str
    label_output: str | None
    zipmap: bool


def _graph(model) -> _Graph:
    """Find the ensemble and check that every other node is plumbing it can be read through."""
    graph = model.graph
    nodes = list(graph.node)  # one wrapper per node, so that id() names a node below
    found = [n for n in nodes if n.domain == ML_DOMAIN and n.op_type in (CLASSIFIER, ENSEMBLE)]
    if not found:
        regress = [n for n in nodes if n.op_type == "TreeEnsembleRegressor"]
        if regress:
            raise _refuse("it holds a TreeEnsembleRegressor; Grovewise reviews classifiers")
        ops = sorted({n.op_type for n in nodes})
        raise _refuse(f"no {CLASSIFIER} or {ENSEMBLE} node in the graph (it has "
                      f"{', '.join(ops[:8]) or 'no nodes'})")
    if len(found) > 1:
        raise _refuse(f"the graph holds {len(found)} tree ensembles; Grovewise reads one")
    te = found[0]
    constants = {t.name: t for t in graph.initializer}
    constants.update({n.output[0]: n for n in nodes if n.op_type == "Constant"})
    inputs = {i.name: i for i in graph.input if i.name not in constants}
    if len(inputs) != 1:
        raise _refuse(f"the graph takes {len(inputs)} inputs; Grovewise reads models of one "
                      "input table")
    if te.op_type == CLASSIFIER and len(te.output) < 2:
        raise _refuse(f"the {CLASSIFIER} node has no probabilities output")
    used = {id(te)} | {id(n) for n in nodes if n.op_type == "Constant"}

    # Input side: a graph input, or a Cast of one.
    x = te.input[0]
    compare_type = None
    if x not in inputs:
        cast = next((n for n in nodes if x in n.output), None)
        if cast is None or cast.op_type != "Cast" or cast.input[0] not in inputs:
            op = cast.op_type if cast is not None else "an initializer"
            raise _refuse(f"the ensemble's input comes from {op}, not straight from the graph's "
                          f"input; Grovewise reads no preprocessing ({op} is not supported)")
        compare_type = _attr(cast, "to")
        used.add(id(cast))
        x = cast.input[0]
    info = inputs[x]
    input_type = info.type.tensor_type.elem_type
    if input_type not in FLOAT_TYPES:
        raise _refuse(f"the input {x!r} has element type {input_type}; only float and double "
                      "inputs are supported")
    compare_type = input_type if compare_type is None else compare_type
    if compare_type not in FLOAT_TYPES or (input_type == FLOAT and compare_type == DOUBLE):
        raise _refuse("the input is cast to a type other than float before the ensemble")
    dims = info.type.tensor_type.shape.dim
    n_features = int(dims[1].dim_value) if len(dims) == 2 and dims[1].dim_value > 0 else None

    outputs = {o.name for o in graph.output}
    proba, label, zipmap = _follow(nodes, te, constants, outputs, used)
    others = [n for n in nodes if id(n) not in used]
    if others:
        raise _refuse(f"the graph holds a {others[0].op_type} node besides the tree ensemble; "
                      "only Identity, Cast, ZipMap, ArgMax and multiplying by 1 may follow it")
    if proba is None:
        raise _refuse("the graph does not output the ensemble's probabilities")
    return _Graph(te, x, input_type, compare_type, n_features, proba, label, zipmap)


def _follow(nodes, te, constants, outputs, used) -> tuple[str | None, str | None, bool]:
    """Follow the ensemble's outputs through plumbing to the graph outputs.

    Returns the graph output holding the probabilities, the one holding the labels (or None)
    and whether the probabilities come as ZipMap's list of dicts.
    """
    consumers: dict[str, list] = {}
    for n in nodes:
        for name in n.input:
            consumers.setdefault(name, []).append(n)
    if te.op_type == CLASSIFIER:
        starts = [(te.output[0], "label", False), (te.output[1], "proba", False)]
    else:
        starts = [(te.output[0], "proba", False)]
    found = {"label": None, "proba": None}
    zip_out = False
    stack = list(starts)
    while stack:
        name, role, zipped = stack.pop()
        if name in outputs and found[role] is None:
            found[role] = name
            zip_out = zip_out or (role == "proba" and zipped)
        for n in consumers.get(name, []):
            op = n.op_type
            if op == "Identity":
                nxt = role
            elif op == "Cast":
                if role == "proba" and (_attr(n, "to") not in FLOAT_TYPES or zipped):
                    raise _refuse("the probabilities are cast to a type other than float")
                nxt = role
            elif op == "ZipMap" and n.domain == ML_DOMAIN and role == "proba" and not zipped:
                labels = _attr(n, "classlabels_int64s") or _attr(n, "classlabels_strings")
                te_labels = None
                if te.op_type == CLASSIFIER:
                    te_labels = (_attr(te, "classlabels_int64s")
                                 or _attr(te, "classlabels_strings"))
                if te_labels is not None and list(labels) != list(te_labels):
                    raise _refuse("ZipMap's class labels differ from the ensemble's")
                nxt, zipped = role, True
            elif op in ("Mul", "Div") and role == "proba" and not zipped and len(n.input) == 2:
                other = n.input[1] if n.input[0] == name else n.input[0]
                if op == "Div" and n.input[0] != name:
                    raise _refuse("the probabilities divide a constant")
                if not _is_one(constants.get(other)):
                    raise _refuse(f"the probabilities go through {op} by something other than 1")
                nxt = role
            elif op == "ArgMax" and te.op_type == ENSEMBLE and role == "proba" and not zipped:
                if _attr(n, "axis", 0) not in (1, -1) or _attr(n, "select_last_index", 0):
                    raise _refuse("ArgMax over the probabilities is not the first largest per row")
                nxt = "label"
            else:
                raise _refuse(f"the ensemble's output goes through a {op} node, which Grovewise "
                              "cannot reproduce (only Identity, Cast, ZipMap, ArgMax and "
                              "multiplying by 1 are read)")
            used.add(id(n))
            stack.extend((o, nxt, zipped) for o in n.output)
    return found["proba"], found["label"], zip_out


def _is_one(const) -> bool:
    if const is None:
        return False
    from onnx import numpy_helper

    tensor = const if not hasattr(const, "op_type") else _attr(const, "value")
    if tensor is None or not hasattr(tensor, "dims"):
        return False
    value = numpy_helper.to_array(tensor)
    return value.size > 0 and bool(np.all(value == 1))


def _attr(node, name: str, default=None):
    from onnx import helper

    for a in node.attribute:
        if a.name == name:
            return helper.get_attribute_value(a)
    return default


def _attrs(node) -> dict:
    """The node's attributes, with tensors as numpy arrays and strings decoded."""
    from onnx import helper, numpy_helper

    out = {}
    for a in node.attribute:
        v = helper.get_attribute_value(a)
        if hasattr(v, "dims"):
            v = numpy_helper.to_array(v)
        elif isinstance(v, bytes):
            v = v.decode("utf-8")
        elif isinstance(v, list) and v and isinstance(v[0], bytes):
            v = [s.decode("utf-8") for s in v]
        out[a.name] = v
    return out


# ---------------------------------------------------------------------------- trees
@dataclass
class _Node:
    """One node of a tree as read: a split (``mode`` set) or a leaf (``weights``)."""

    mode: str | None = None
    feature: int = -1
    value: float = 0.0
    nan_true: bool = False  # nodes_missing_value_tracks_true
    members: tuple = ()
    true: int = -1
    false: int = -1
    weights: dict = field(default_factory=dict)  # class or target -> summed weight


def _walk(root, split_of, leaf_weights, where: str, limit: int) -> list[_Node]:
    """One tree in breadth-first order from ``root``.

    ``split_of(key)`` gives a split's (mode, feature, value, nan_true, members, true key, false
    key), or None for a leaf. A split whose two sides lead to the same node is that node. A
    chain of BRANCH_EQ nodes on one feature that all send their match to the same node (how
    onnxmltools writes LightGBM's category sets) is read as one set split: a code goes to
    that node when any link matches, NaN when any link sends NaN there. A node reached from
    two parents is copied for each; a cycle, or more than ``limit`` nodes, is refused.
    """
    nodes: list[_Node] = []
    origin: list = []  # the key each node was read from
    parent_of: list[int] = []
    queue = deque([(root, -1, True)])
    while queue:
        key, parent, side = queue.popleft()
        split = split_of(key)
        for _ in range(limit):
            if split is None or split[5] != split[6]:
                break
            key, split = split[5], split_of(split[5])  # both sides lead to the same place
        p = parent
        while p >= 0:
            if origin[p] == key:
                raise _refuse(f"{where}: node {key[-1]} leads back to itself; a tree has no cycles")
            p = parent_of[p]
        k = len(nodes)
        if k >= limit:
            raise _refuse(f"{where}: more than {limit} nodes once shared sub-trees are copied")
        origin.append(key)
        parent_of.append(parent)
        if parent >= 0:
            if side:
                nodes[parent].true = k
            else:
                nodes[parent].false = k
        if split is None:
            nodes.append(_Node(weights=leaf_weights(key)))
            continue
        mode, feature, value, nan_true, members, t, f = split
        if mode == "BRANCH_EQ":
            members = list(members)
            for _ in range(limit):
                nxt = split_of(f)
                if nxt is None or nxt[0] != mode or nxt[1] != feature or nxt[5] != t:
                    break
                members.extend(nxt[4])
                nan_true = nan_true or nxt[3]
                f = nxt[6]
            members = tuple(members)
        nodes.append(_Node(mode=mode, feature=feature, value=value, nan_true=nan_true,
                           members=members))
        queue.append((t, k, True))
        queue.append((f, k, False))
    return nodes


def _read_classifier(a: dict) -> tuple[list[list[_Node]], dict]:
    """TreeEnsembleClassifier: the trees (ordered by tree id) and the class-weight facts."""
    known = {"base_values", "base_values_as_tensor", "class_ids", "class_nodeids",
             "class_treeids", "class_weights", "class_weights_as_tensor", "classlabels_int64s",
             "classlabels_strings", "nodes_falsenodeids", "nodes_featureids", "nodes_hitrates",
             "nodes_hitrates_as_tensor", "nodes_missing_value_tracks_true", "nodes_modes",
             "nodes_nodeids", "nodes_treeids", "nodes_truenodeids", "nodes_values",
             "nodes_values_as_tensor", "post_transform"}
    extra = sorted(set(a) - known)
    if extra:
        raise _refuse(f"{CLASSIFIER} has the attribute {extra[0]!r}, which the operator does "
                      "not define (onnxruntime refuses it too)")
    tids = np.asarray(a.get("nodes_treeids", []), dtype=np.int64)
    nids = np.asarray(a.get("nodes_nodeids", []), dtype=np.int64)
    n = tids.shape[0]
    modes = list(a.get("nodes_modes", []))
    values = a.get("nodes_values_as_tensor", a.get("nodes_values"))
    feats = np.asarray(a.get("nodes_featureids", []), dtype=np.int64)
    trues = np.asarray(a.get("nodes_truenodeids", []), dtype=np.int64)
    falses = np.asarray(a.get("nodes_falsenodeids", []), dtype=np.int64)
    track = np.asarray(a.get("nodes_missing_value_tracks_true", [0] * n), dtype=np.int64)
    if values is None:
        raise _refuse(f"{CLASSIFIER} has no nodes_values")
    values = np.asarray(values, dtype=np.float64).reshape(-1)
    if n == 0 or any(len(x) != n for x in (nids, modes, values, feats, trues, falses, track)):
        raise _refuse(f"{CLASSIFIER}'s nodes_* attributes are empty or of different lengths")
    index = {}
    for i, key in enumerate(zip(tids.tolist(), nids.tolist())):
        if key in index:
            raise _refuse(f"tree {key[0]} has node {key[1]} twice")
        index[key] = i
    c_t = np.asarray(a.get("class_treeids", []), dtype=np.int64)
    c_n = np.asarray(a.get("class_nodeids", []), dtype=np.int64)
    c_id = np.asarray(a.get("class_ids", []), dtype=np.int64)
    c_w = np.asarray(a.get("class_weights_as_tensor", a.get("class_weights", [])),
                     dtype=np.float64).reshape(-1)
    if not (c_t.shape[0] == c_n.shape[0] == c_id.shape[0] == c_w.shape[0]) or c_w.size == 0:
        raise _refuse(f"{CLASSIFIER}'s class_* attributes are empty or of different lengths")
    weights: dict = {}
    for t, nd, c, w in zip(c_t.tolist(), c_n.tolist(), c_id.tolist(), c_w.tolist()):
        leaf = weights.setdefault((t, nd), {})
        leaf[c] = leaf.get(c, 0.0) + w

    def split_of(key):
        i = index.get(key)
        if i is None:
            raise _refuse(f"tree {key[0]} refers to node {key[1]}, which it does not hold")
        mode = modes[i]
        if mode == "LEAF":
            return None
        if mode not in MODES[:6]:
            raise _refuse(f"node {key[1]} of tree {key[0]} has the unknown mode {mode!r}")
        t = key[0]
        return (mode, int(feats[i]), float(values[i]), bool(track[i]), (float(values[i]),),
                (t, int(trues[i])), (t, int(falses[i])))

    children = {(int(tids[i]), int(x)) for i in range(n) if modes[i] != "LEAF"
                for x in (trues[i], falses[i])}
    roots_of: dict[int, list] = {}
    for t, nd in index:
        if (t, nd) not in children:
            roots_of.setdefault(t, []).append(nd)
    trees = []
    for t in sorted(set(tids.tolist())):
        roots = roots_of.get(t, [])
        if len(roots) != 1:
            raise _refuse(f"tree {t} has {len(roots)} nodes that no node points to; a tree has "
                          "one root")
        trees.append(_walk((t, roots[0]), split_of, lambda k: weights.get(k, {}), f"tree {t}",
                           EXPANSION * n + 1000))
    labels = a.get("classlabels_int64s") or a.get("classlabels_strings")
    if not labels:
        raise _refuse(f"{CLASSIFIER} has no class labels")
    base = np.asarray(a.get("base_values_as_tensor", a.get("base_values", [])),
                      dtype=np.float64).reshape(-1)
    facts = {"classes": list(labels), "base": base, "post": a.get("post_transform", "NONE"),
             "ids": set(c_id.tolist()), "all_positive": bool(np.all(c_w >= 0)),
             "aggregate": "SUM"}
    return trees, facts


def _read_ensemble(a: dict) -> tuple[list[list[_Node]], dict]:
    """TreeEnsemble (ai.onnx.ml opset 5): the trees and the target facts."""
    modes = np.asarray(a.get("nodes_modes", []), dtype=np.int64).reshape(-1)
    n = modes.shape[0]
    feats = np.asarray(a.get("nodes_featureids", []), dtype=np.int64)
    splits = np.asarray(a.get("nodes_splits", []), dtype=np.float64).reshape(-1)
    trues = np.asarray(a.get("nodes_truenodeids", []), dtype=np.int64)
    falses = np.asarray(a.get("nodes_falsenodeids", []), dtype=np.int64)
    t_leaf = np.asarray(a.get("nodes_trueleafs", []), dtype=np.int64)
    f_leaf = np.asarray(a.get("nodes_falseleafs", []), dtype=np.int64)
    track = np.asarray(a.get("nodes_missing_value_tracks_true", [0] * n), dtype=np.int64)
    if n == 0 or any(x.shape[0] != n for x in (feats, splits, trues, falses, t_leaf, f_leaf,
                                                 track)):
        raise _refuse(f"{ENSEMBLE}'s nodes_* attributes are empty or of different lengths")
    targets = np.asarray(a.get("leaf_targetids", []), dtype=np.int64)
    leaf_w = np.asarray(a.get("leaf_weights", []), dtype=np.float64).reshape(-1)
    if targets.shape[0] != leaf_w.shape[0]:
        raise _refuse(f"{ENSEMBLE}'s leaf_* attributes are of different lengths")
    members_all = np.asarray(a.get("membership_values", []), dtype=np.float64).reshape(-1)
    sets = iter(_split_nan(members_all))
    members = {}
    for i in np.flatnonzero(modes == 6).tolist():
        members[i] = next(sets, None)
        if members[i] is None:
            raise _refuse(f"{ENSEMBLE} has fewer membership sets than BRANCH_MEMBER nodes")

    def split_of(key):
        kind, i = key
        if kind == "leaf":
            if not 0 <= i < leaf_w.shape[0]:
                raise _refuse(f"{ENSEMBLE} refers to leaf {i}, which it does not hold")
            return None
        if not 0 <= i < n:
            raise _refuse(f"{ENSEMBLE} refers to node {i}, which it does not hold")
        m = int(modes[i])
        if not 0 <= m < len(MODES):
            raise _refuse(f"node {i} has the unknown mode {m}")
        return (MODES[m], int(feats[i]), float(splits[i]), bool(track[i]),
                members[i] if m == 6 else (float(splits[i]),),
                ("leaf" if t_leaf[i] else "node", int(trues[i])),
                ("leaf" if f_leaf[i] else "node", int(falses[i])))

    def leaf_weights(key):
        return {int(targets[key[1]]): float(leaf_w[key[1]])}

    roots = list(a.get("tree_roots", []))
    if not roots:
        raise _refuse(f"{ENSEMBLE} has no tree_roots")
    trees = [_walk(("node", int(r)), split_of, leaf_weights, f"tree {t}",
                   EXPANSION * (n + leaf_w.shape[0]) + 1000) for t, r in enumerate(roots)]
    n_targets = int(a.get("n_targets", 0))
    post = int(a.get("post_transform", 0))
    agg = int(a.get("aggregate_function", 1))
    facts = {"n_targets": n_targets,
             "post": POST_TRANSFORMS[post] if 0 <= post < len(POST_TRANSFORMS) else str(post),
             "aggregate": {0: "AVERAGE", 1: "SUM", 2: "MIN", 3: "MAX"}.get(agg, str(agg)),
             "all_positive": bool(np.all(leaf_w >= 0))}
    return trees, facts


def _split_nan(values: np.ndarray) -> list[tuple]:
    sets, cur = [], []
    for v in values.tolist():
        if v != v:
            sets.append(tuple(cur))
            cur = []
        else:
            cur.append(v)
    if cur:
        sets.append(tuple(cur))
    return sets


# ---------------------------------------------------------------------------- probabilities
@dataclass
class _Plan:
    """How leaf weights become the Forest's values."""

    link: str
    classes: list
    base: np.ndarray
    binary_one_column: bool = False  # MEAN: leaves hold class 1's share, class 0 gets 1 - it
    scale: float = 1.0  # AVERAGE: weights divided by the number of trees


def _leaves(trees):
    return [[nd.weights for nd in tree if nd.mode is None] for tree in trees]


def _always_scored(trees) -> set:
    """Classes every row gets a weight for: those present at every leaf of some tree."""
    out = set()
    for leaves in _leaves(trees):
        common = set.intersection(*(set(w) for w in leaves)) if leaves else set()
        out |= common
    return out


def _sums_to_one(trees, scale: float = 1.0) -> bool:
    """Every tree's leaves carry the same total weight, and the totals (times ``scale``) add
    up to 1: then every row's scores do."""
    total = 0.0
    for leaves in _leaves(trees):
        sums = [scale * sum(w.values()) for w in leaves]
        if max(sums) - min(sums) > SUM_TOLERANCE:
            return False
        total += sums[0]
    return abs(total - 1.0) <= SUM_TOLERANCE


def _plan_classifier(trees, f: dict) -> _Plan:
    """TreeEnsembleClassifier: the cases where onnxruntime's probabilities are a distribution
    and its label is their first argmax (its two-class rules found by running it):

    - two classes, weights for class id 0 only, NONE, no weight negative: probabilities
      ``[1 - s, s]`` (``s`` the summed weights: scikit-learn's forests);
    - two classes, weights for class id 0 only, LOGISTIC, some weight negative:
      ``[1 - expit(s + b), expit(s + b)]`` with ``b`` the one base value (boosting). With no
      weight negative onnxruntime labels by ``s > 0.5`` instead, so that case is refused;
    - three or more classes, NONE, no weight negative, each tree's leaves adding up to the
      same total and the totals to 1 (forests);
    - three or more classes, SOFTMAX, every class scored on every row (boosting).

    These are onnxruntime 1.32's rules; its two-class rules changed between releases (its
    1.26 changed LOGISTIC with no negative weight), which is one more reason to refuse the
    cases where they matter. The exactness proof runs whichever onnxruntime is installed.
    """
    classes, base, post = f["classes"], f["base"], f["post"]
    k = len(classes)
    ids = f["ids"]
    if k < 2:
        raise _refuse("the classifier has fewer than two classes")
    if any(c < 0 or c >= k for c in ids):
        raise _refuse(f"a class id is outside 0..{k - 1}")
    if base.size not in (0, k) and not (k == 2 and base.size == 1):
        raise _refuse(f"{base.size} base values for {k} classes")
    scored = _always_scored(trees) | set(range(base.size if k > 2 else 0))
    if k == 2:
        if ids != {0}:
            raise _refuse("a two-class ensemble with weights for class id 1: onnxruntime's "
                          "label then follows class 1's score alone and can disagree with its "
                          "probabilities (only weights for class id 0, as the converters "
                          "write them, are supported)")
        if base.size == 2:
            raise _refuse("a two-class ensemble with two base values: onnxruntime's "
                          "probabilities are then not a distribution")
        b = float(base[0]) if base.size else 0.0
        if post == "NONE":
            if not f["all_positive"] or b != 0.0:
                raise _refuse("post_transform NONE with negative weights or a base value: the "
                              "scores are not probabilities")
            most = sum(max((w.get(0, 0.0) for w in leaves), default=0.0)
                       for leaves in _leaves(trees))
            if most > 1.0 + SUM_TOLERANCE:
                raise _refuse("post_transform NONE with weights adding up to more than 1: the "
                              "scores are not probabilities")
            return _Plan(LINK_MEAN, classes, np.zeros(1), binary_one_column=True)
        if post == "LOGISTIC":
            if f["all_positive"]:
                raise _refuse("post_transform LOGISTIC with no negative weight: onnxruntime then "
                              "labels a row class 1 when the raw score exceeds 0.5, which "
                              "disagrees with its probabilities")
            if 0 not in scored:
                raise _refuse("some rows get no weight at all, and onnxruntime then labels "
                              "them class 0 whatever their probability")
            return _Plan(LINK_LOGISTIC, classes, np.array([b]))
        raise _refuse(f"post_transform {post} of a two-class ensemble is not supported "
                      "(NONE and LOGISTIC are)")
    if post == "NONE":
        if not f["all_positive"] or np.any(base != 0.0):
            raise _refuse("post_transform NONE with negative weights or base values: the scores "
                          "are not probabilities")
        if not _sums_to_one(trees):
            raise _refuse("post_transform NONE, but the trees' leaf weights do not add up to 1: "
                          "the scores are not probabilities")
        return _Plan(LINK_MEAN, classes, np.zeros(1))
    if post == "SOFTMAX":
        missing = sorted(set(range(k)) - scored)
        if missing:
            raise _refuse(f"class {classes[missing[0]]!r} gets no weight on some rows, and "
                          "onnxruntime's label then skips it whatever its probability")
        return _Plan(LINK_SOFTMAX, classes, base if base.size else np.zeros(k))
    raise _refuse(f"post_transform {post} of a {k}-class ensemble is not supported (NONE and "
                  "SOFTMAX are)")


def _shape(tree: list[_Node]) -> tuple:
    return tuple(("leaf",) if nd.mode is None else
                 (nd.mode, nd.feature, nd.value, nd.nan_true, nd.members, nd.true, nd.false)
                 for nd in tree)


def _plan_ensemble(trees, f: dict) -> tuple[_Plan, list[list[_Node]]]:
    """TreeEnsemble (opset 5: no class labels, no base values, one target per leaf).

    Read with post_transform NONE only: the onnxruntime checked (1.32) does not apply the
    others as the operator defines them (it takes code 1 for LOGISTIC and 2 for SOFTMAX, the
    reverse of the definition, and transforms no single target), so what such a model
    predicts depends on the runtime. The targets are the classes 0..n-1 and the scores must
    be probabilities: trees of the same shape (a forest writes one per class) are merged
    into one tree with a class vector at each leaf; every merged tree's leaves must carry the
    same total, and the totals (divided by the number of trees for AVERAGE) add up to 1.
    Returns the plan and the merged trees.
    """
    m, post, agg = f["n_targets"], f["post"], f["aggregate"]
    if post != "NONE":
        raise _refuse(f"{ENSEMBLE} with post_transform {post}: onnxruntime (checked with 1.32) "
                      "does not apply TreeEnsemble's post_transform as the operator defines it "
                      "(it reads code 1 as LOGISTIC and 2 as SOFTMAX, and transforms no single "
                      "target), so the probabilities depend on the runtime; Grovewise reads "
                      "TreeEnsemble with post_transform NONE and probabilities as its scores")
    if agg not in ("SUM", "AVERAGE"):
        raise _refuse(f"aggregate_function {agg} is not supported (SUM and AVERAGE are)")
    if m < 2:
        raise _refuse(f"{ENSEMBLE} with {m} target and post_transform NONE: one score is not "
                      "a set of class probabilities")
    targets = {c for leaves in _leaves(trees) for w in leaves for c in w}
    if any(c < 0 or c >= m for c in targets):
        raise _refuse(f"a leaf target id is outside 0..{m - 1}")
    if not f["all_positive"]:
        raise _refuse("post_transform NONE with negative weights: the scores are not "
                      "probabilities")
    groups: dict = {}
    for tree in trees:
        merged = groups.setdefault(_shape(tree), [_Node(**{**vars(nd), "weights": {}})
                                                  for nd in tree])
        for into, nd in zip(merged, tree):
            for c, w in nd.weights.items():
                into.weights[c] = into.weights.get(c, 0.0) + w
    merged_trees = list(groups.values())
    scale = 1.0 / len(trees) if agg == "AVERAGE" else 1.0
    if not _sums_to_one(merged_trees, scale):
        raise _refuse("post_transform NONE, but the trees' leaf weights do not add up to 1: "
                      "the scores are not probabilities")
    return _Plan(LINK_MEAN, list(range(m)), np.zeros(1), scale=scale), merged_trees


# ---------------------------------------------------------------------------- forest
def _below(t: float, compare_type: int) -> float:
    """The largest number of the comparison's type strictly below ``t``: ``x < t`` is
    ``x <= _below(t)`` for every ``x`` of that type."""
    if compare_type == DOUBLE:
        return float(np.nextafter(t, -np.inf))
    with np.errstate(over="ignore"):
        f = np.float32(t)
    if float(f) >= t:
        f = np.nextafter(f, np.float32(-np.inf))
    return float(f)


def _codes(values, where: str) -> np.ndarray:
    out = []
    for v in values:
        if not (v == v and v >= 0 and v == int(v) and v <= MAX_CODE):
            raise _refuse(f"{where} tests equality with {v!r}; Grovewise reads equality and set "
                          f"splits as category codes, whole numbers from 0 to {MAX_CODE}")
        out.append(int(v))
    return np.asarray(sorted(set(out)), dtype=np.int64)


def _convert_tree(nodes: list[_Node], compare: str, compare_type: int, plan: _Plan,
                  column, n_classes: int, n_trees: int, where: str) -> Tree:
    """One read tree -> Tree: the structure, and the leaf values of ``column`` (a class for
    the sum links; None for the mean link's class vectors)."""
    n = len(nodes)
    feature = np.full(n, -1, dtype=np.int64)
    threshold = np.zeros(n)
    left = np.full(n, -1, dtype=np.int64)
    right = np.full(n, -1, dtype=np.int64)
    missing_left = np.zeros(n, dtype=bool)
    width = n_classes if plan.link == LINK_MEAN else 1
    value = np.zeros((n, width))
    categorical = {}
    for i, nd in enumerate(nodes):
        if nd.mode is None:
            if plan.link != LINK_MEAN:
                value[i, 0] = nd.weights.get(column, 0.0) * plan.scale
            elif plan.binary_one_column:
                share = n_trees * plan.scale * nd.weights.get(0, 0.0)
                value[i] = (1.0 - share, share)
            else:
                for c, w in nd.weights.items():
                    value[i, c] = n_trees * plan.scale * w
            continue
        feature[i] = nd.feature
        nan_goes_true = nd.nan_true or nd.mode == "BRANCH_NEQ"  # NaN != t is true
        swap = nd.mode in ("BRANCH_GTE", "BRANCH_GT")  # x >= t is not (x < t)
        left[i], right[i] = (nd.false, nd.true) if swap else (nd.true, nd.false)
        missing_left[i] = nan_goes_true != swap
        t = nd.value
        if nd.mode in CATEGORY_MODES:
            codes = _codes(nd.members, f"{where}, node {i}")
            if nd.mode == "BRANCH_NEQ":
                categorical[i] = CategorySplit(left=np.zeros(0, dtype=np.int64), right=codes,
                                               other_left=True)
            else:
                categorical[i] = CategorySplit(left=codes, right=np.zeros(0, dtype=np.int64),
                                               other_left=False)
            continue
        if t != t:
            raise _refuse(f"{where}, node {i} has a NaN threshold")
        strict = nd.mode in ("BRANCH_LT", "BRANCH_GTE")
        if strict and compare != COMPARE_LT_FLOAT32:
            if t == -np.inf:
                raise _refuse(f"{where}, node {i} tests x < -inf")
            t = _below(t, compare_type)
        threshold[i] = t
    if plan.link == LINK_MEAN:
        for i in range(n - 1, -1, -1):  # children come after their parents
            if left[i] >= 0:
                value[i] = 0.5 * (value[left[i]] + value[right[i]])
    depth = node_depths(left, right)
    return Tree(feature=feature, threshold=threshold, left=left, right=right,
                missing_left=missing_left, value=value, depth=depth,
                gain=np.zeros(n), cover=0.5 ** depth.astype(np.float64),
                output=0 if column is None else int(column), categorical=categorical or None)


def forest_from_onnx(model) -> Forest:
    """Convert an ONNX model holding a tree ensemble classifier into a Forest."""
    try:
        import onnx
    except ImportError:
        raise UnsupportedModelError(f"reading ONNX models needs the onnx package; install it "
                                    f"with {INSTALL}.") from None
    g = _graph(model)
    a = _attrs(g.node)
    if g.node.op_type == CLASSIFIER:
        trees, facts = _read_classifier(a)
        plan = _plan_classifier(trees, facts)
    else:
        trees, facts = _read_ensemble(a)
        plan, trees = _plan_ensemble(trees, facts)
    modes = {nd.mode for tree in trees for nd in tree if nd.mode is not None}
    numeric = modes - set(CATEGORY_MODES)
    if g.compare_type == DOUBLE:
        compare = COMPARE_LE_FLOAT64
    elif numeric and numeric <= {"BRANCH_LT", "BRANCH_GTE"}:
        compare = COMPARE_LT_FLOAT32
    else:
        compare = COMPARE_LE_FLOAT32
    used = [nd.feature for tree in trees for nd in tree if nd.mode is not None]
    n_features = g.n_features if g.n_features is not None else max(used, default=-1) + 1
    if any(j < 0 or j >= n_features for j in used):
        raise _refuse(f"a split uses feature {max(used)}, but the input has {n_features} columns")
    k = len(plan.classes)
    out_trees = []
    for t, nodes in enumerate(trees):
        where = f"tree {t}"
        if plan.link == LINK_MEAN:
            out_trees.append(_convert_tree(nodes, compare, g.compare_type, plan, None, k,
                                           len(trees), where))
            continue
        columns = sorted({c for nd in nodes if nd.mode is None for c in nd.weights}) or [0]
        for c in columns:  # a tree scoring several classes becomes one tree per class
            out_trees.append(_convert_tree(nodes, compare, g.compare_type, plan, c, k,
                                           len(trees), where))
    return Forest(
        trees=out_trees, classes_=np.asarray(plan.classes),
        feature_names=plain_feature_names(n_features), has_feature_names=False,
        kind="onnx", link=plan.link, compare=compare, base_score=plan.base,
        source={"library": "onnx", "version": onnx.__version__,
                "producer": model.producer_name, "producer_version": model.producer_version,
                "operator": g.node.op_type, "post_transform": facts["post"],
                "aggregate_function": facts["aggregate"],
                "cover": "assumed: every split halves what reaches it (ONNX keeps no counts)"})


# ---------------------------------------------------------------------------- reference
def onnx_reference(native, X: np.ndarray, forest: Forest):
    """onnxruntime's own probabilities and labels on ``X`` (no leaf ids: it has none)."""
    try:
        import onnxruntime
    except ImportError:
        raise NoReference("onnxruntime is not installed; install it with "
                          f"{INSTALL} to check the Forest against it") from None
    g = _graph(native)
    options = onnxruntime.SessionOptions()
    options.log_severity_level = 3  # errors only: converters' loose output shapes are warned
    try:
        session = onnxruntime.InferenceSession(native.SerializeToString(), options,
                                               providers=["CPUExecutionProvider"])
    except Exception as exc:  # onnxruntime raises its own kinds for models it cannot run
        raise NoReference(f"onnxruntime could not run the model ({str(exc).strip()[:200]})") \
            from None
    names = [g.proba_output] + ([g.label_output] if g.label_output else [])
    feed = np.ascontiguousarray(np.asarray(X, dtype=FLOAT_TYPES[g.input_type]))
    outs = session.run(names, {g.input_name: feed})
    classes = forest.classes_.tolist()
    raw = outs[0]
    if g.zipmap:
        proba = np.array([[row[c] for c in classes] for row in raw], dtype=np.float64)
    else:
        proba = np.asarray(raw, dtype=np.float64).reshape(feed.shape[0], -1)
    if g.label_output is None:
        return proba, np.argmax(proba, axis=1), None
    labels = np.asarray(outs[1]).reshape(-1)
    if g.node.op_type == ENSEMBLE:  # ArgMax: the index itself
        return proba, labels.astype(np.int64), None
    where = {c: i for i, c in enumerate(classes)}
    index = np.array([where.get(v.item() if hasattr(v, "item") else v, -1) for v in labels],
                     dtype=np.int64)
    return proba, index, None


# onnxruntime sums leaf weights and applies the transform in float32.
FAMILY = Family(library="onnxruntime", tolerance=1e-5, matches=is_onnx_model,
                convert=forest_from_onnx, reference=onnx_reference,
                supported="an ONNX TreeEnsembleClassifier")
