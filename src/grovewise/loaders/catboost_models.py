"""CatBoost classifiers (CatBoostClassifier, CatBoost, a .cbm file or the JSON export) -> Forest.

The model is read from CatBoost's own JSON export. CatBoost grows symmetric (oblivious) trees:
every level of a tree asks the same question, and the leaf index has bit ``i`` set when split
``i`` of the tree's ``splits`` list answers "value > border". Each such tree becomes a full
binary :class:`~grovewise.forest.Tree` in heap order (children of node ``i`` are ``2i + 1``
and ``2i + 2``) whose root asks the last split of the list, so the leaf CatBoost numbers ``b``
in a tree of depth ``d`` is node ``2**d - 1 + b``.

CatBoost's comparison rule, found by experiment (catboost 1.2.10) and checked by the tests:
the feature value is rounded to float32 and goes right when it is greater than the border (a
float32 value), so a value equal to the border, or one that only float32 rounding brings down
to it, goes left: ``float32(x) <= border`` (``COMPARE_LE_FLOAT32``). A missing value goes
where the feature's ``nan_value_treatment`` says: ``AsFalse`` (trained with nan_mode Min) and
``AsIs`` (no missing values in training; NaN > border is false) send it left, ``AsTrue``
(nan_mode Max) sends it right.

Leaf values are multiplied by the model's scale; its bias is the Forest's ``base_score``.
A multi-class tree (``leaf_values`` leaf by leaf, one value per class) becomes one Tree per
class, class by class. Categorical, text and embedding features, non-symmetric trees and
losses other than Logloss, CrossEntropy, Focal and MultiClass are refused.
"""

from __future__ import annotations

import json
import os
import re
import tempfile
from pathlib import Path

import numpy as np

from ..errors import ModelFileError, UnsupportedModelError
from ..forest import (COMPARE_LE_FLOAT32, LINK_LOGISTIC, LINK_SOFTMAX, Forest, Tree,
                      plain_feature_names)
from .families import Family

# Losses whose probabilities the Forest reproduces, and the link of each.
# (CatBoost's Probability is expit(RawFormulaVal) for the first three, softmax for MultiClass.)
LOSS_LINKS = {"Logloss": LINK_LOGISTIC, "CrossEntropy": LINK_LOGISTIC, "Focal": LINK_LOGISTIC,
              "MultiClass": LINK_SOFTMAX}
# CatBoost's classification losses (a CatBoost object with one of these is a classifier).
CLASSIFIER_LOSSES = frozenset(LOSS_LINKS) | {"MultiClassOneVsAll"}
# Where a missing value goes, per feature's nan_value_treatment: True = left.
NAN_LEFT = {"AsIs": True, "AsFalse": True, "AsTrue": False}
INSTALL = 'pip install "grovewise[catboost]"'
RETRAIN_NUMERIC = ("turn it into numeric columns before training (for example one-hot columns "
                   "for a categorical feature) and retrain, or leave it out of the model")


def _loss_name(text) -> str:
    """'Logloss', from 'Logloss', 'Logloss:border=0.5' or {'type': 'Logloss', ...}."""
    if isinstance(text, dict):
        text = text.get("type", "")
    return str(text or "").split(":")[0].strip()


def _native_loss(obj) -> str:
    """The loss of a CatBoost object, fitted (all parameters) or not (its own parameters)."""
    try:
        if obj.is_fitted():
            return _loss_name(obj.get_all_params().get("loss_function"))
    except Exception:  # a damaged or half-built object: fall back to the given parameters
        pass
    return _loss_name(obj.get_params().get("loss_function"))


def is_catboost_model(obj) -> bool:
    """A CatBoostClassifier, or a ``catboost.CatBoost`` whose loss is a classification loss."""
    if type(obj).__module__.split(".")[0] != "catboost":
        return False
    import catboost

    if isinstance(obj, catboost.CatBoostClassifier):
        return True
    if type(obj) is catboost.CatBoost:
        return _native_loss(obj) in CLASSIFIER_LOSSES
    return False


def _import_catboost(where: str):
    try:
        import catboost
    except ImportError:
        raise UnsupportedModelError(f"{where}: reading CatBoost models needs the catboost "
                                    f"package, which is not installed; install it with {INSTALL}."
                                    ) from None
    return catboost


def _message(exc: Exception) -> str:
    """CatBoost's own message, without the source location it starts with."""
    text = str(exc).strip()
    line = text.splitlines()[-1] if text else type(exc).__name__
    return re.sub(r"^\S+:\d+: ", "", line)[:200]


# ------------------------------------------------------------------ the JSON export
def _floats(value) -> np.ndarray:
    return np.atleast_1d(np.asarray(value, dtype=np.float64)).reshape(-1)


def _class_labels(doc: dict) -> list:
    params = (doc.get("model_info") or {}).get("class_params") or {}
    return list(params.get("class_names") or [])


def _version(doc: dict) -> str:
    info = str((doc.get("model_info") or {}).get("catboost_version_info", ""))
    found = re.search(r"tags/v(\d[\w.]*\w)", info) or re.search(r"release (\d[\w.]*\d)", info)
    return found.group(1) if found else ""


def _check_features(doc: dict, where: str) -> None:
    """Refuse categorical, text and embedding features, naming them."""
    info = doc.get("features_info")
    if not isinstance(info, dict):
        raise ModelFileError(f"{where} has no 'features_info'; give a file written by CatBoost's "
                             "save_model(..., format='json').")
    kinds = {"categorical_features": "categorical", "text_features": "text",
             "embedding_features": "embedding"}
    for key, kind in kinds.items():
        feats = info.get(key) or []
        if feats:
            names = [str(f.get("feature_id") or f"column {f.get('flat_feature_index', '?')}")
                     for f in feats]
            listed = ", ".join(repr(n) for n in names[:6]) + (", ..." if len(names) > 6 else "")
            raise UnsupportedModelError(
                f"{where} has {kind} feature{'s' if len(names) > 1 else ''} {listed}; Grovewise "
                f"reproduces CatBoost models of numeric (float) features only: {RETRAIN_NUMERIC}.")
    other = sorted(k for k, v in info.items() if k != "float_features" and v)
    if other or doc.get("ctr_data"):
        what = ", ".join(other) or "ctr_data"
        raise UnsupportedModelError(f"{where} holds features computed by CatBoost ({what}); "
                                    "Grovewise reproduces CatBoost models of numeric (float) "
                                    f"features only: {RETRAIN_NUMERIC}.")


def _check_doc(doc: dict, where: str) -> str:
    """Every refusal that can be told from the export alone; returns the loss."""
    if not isinstance(doc, dict):
        raise ModelFileError(f"{where} is not a CatBoost JSON export (not a JSON object).")
    if "oblivious_trees" not in doc and "trees" in doc:
        raise UnsupportedModelError(
            f"{where} has non-symmetric trees (grow_policy 'Depthwise' or 'Lossguide'); "
            "Grovewise reproduces CatBoost's symmetric trees only: retrain with "
            "grow_policy='SymmetricTree' (CatBoost's default).")
    if not isinstance(doc.get("oblivious_trees"), list):
        raise ModelFileError(f"{where} is not a CatBoost JSON export (no 'oblivious_trees'); give "
                             "a file written by CatBoost's save_model(..., format='json').")
    _check_features(doc, where)
    params = (doc.get("model_info") or {}).get("params") or {}
    loss = _loss_name(params.get("loss_function"))
    if not loss:
        raise UnsupportedModelError(f"{where} does not record its loss function, so how its "
                                    "values become probabilities is unknown; export the trained "
                                    "model again with CatBoost's save_model.")
    if loss not in LOSS_LINKS:
        kind = ("a classification loss Grovewise cannot reproduce" if loss in CLASSIFIER_LOSSES
                else "not a classification loss; Grovewise reviews classifiers")
        raise UnsupportedModelError(f"{where} was trained with loss_function {loss!r}, {kind}; "
                                    f"retrain a CatBoostClassifier with one of "
                                    f"{', '.join(LOSS_LINKS)}.")
    return loss


def _convert_tree(t: dict, j: int, features: dict, dims: int, scale: float,
                  where: str) -> list[Tree]:
    """One oblivious tree -> ``dims`` full binary Trees (one per output)."""
    splits = t.get("splits") or []
    d = len(splits)
    n_leaves = 1 << d
    cols, borders, nan_left = [], [], []
    for s in splits:
        kind = s.get("split_type", "FloatFeature")
        if kind != "FloatFeature":
            raise UnsupportedModelError(f"{where}: tree {j} splits on a {kind} (a feature CatBoost "
                                        "computes from other columns); Grovewise reproduces "
                                        f"splits on numeric features only: {RETRAIN_NUMERIC}.")
        f = features.get(int(s["float_feature_index"]))
        if f is None:
            raise ModelFileError(f"{where}: tree {j} splits on float feature "
                                 f"{s['float_feature_index']}, which features_info does not list; "
                                 "the file may be damaged; export the model again.")
        cols.append(f[0])
        borders.append(float(np.float32(s["border"])))  # CatBoost keeps borders as float32
        nan_left.append(f[1])
    leaf_values = _floats(t.get("leaf_values", []))
    if leaf_values.shape[0] != n_leaves * dims:
        raise ModelFileError(f"{where}: tree {j} has {leaf_values.shape[0]} leaf values, expected "
                             f"{n_leaves * dims} ({n_leaves} leaves x {dims} outputs); the file "
                             "may be damaged; export the model again.")
    weights = _floats(t.get("leaf_weights", []))
    if weights.shape[0] != n_leaves:
        weights = np.ones(n_leaves)  # no training weights recorded: equal weights
    n_nodes = 2 * n_leaves - 1
    nodes = np.arange(n_nodes, dtype=np.int64)
    depth = np.floor(np.log2(nodes + 1)).astype(np.int64)
    inner = nodes < n_leaves - 1
    # Node i at depth l asks split d-1-l; the padding entry (index d) serves the leaves.
    asks = np.where(inner, d - 1 - depth, d)
    feature = np.asarray(cols + [-1], dtype=np.int64)[asks]
    threshold = np.asarray(borders + [0.0], dtype=np.float64)[asks]
    missing_left = np.asarray(nan_left + [False], dtype=bool)[asks]
    left = np.where(inner, 2 * nodes + 1, -1)
    right = np.where(inner, 2 * nodes + 2, -1)
    cover = np.zeros(n_nodes)
    cover[n_leaves - 1:] = weights
    for i in range(n_leaves - 2, -1, -1):
        cover[i] = cover[2 * i + 1] + cover[2 * i + 2]
    per_leaf = leaf_values.reshape(n_leaves, dims) * scale
    trees = []
    for k in range(dims):
        value = np.zeros(n_nodes)
        value[n_leaves - 1:] = per_leaf[:, k]
        trees.append(Tree(feature=feature, threshold=threshold, left=left, right=right,
                          missing_left=missing_left, value=value.reshape(-1, 1), depth=depth,
                          gain=np.zeros(n_nodes), cover=cover, output=k))
    return trees


def forest_from_catboost_json(doc: dict, *, classes=None, where: str = "the model") -> Forest:
    """Convert CatBoost's JSON export (as a dict) into a Forest.

    ``classes`` are the class labels in output order (a CatBoostClassifier's ``classes_``);
    without them the export's ``class_names`` are used, or 0..K-1.
    """
    loss = _check_doc(doc, where)
    link = LOSS_LINKS[loss]
    info = doc["features_info"]
    features = {}
    names_by_col = {}
    for f in info.get("float_features") or []:
        treatment = str(f.get("nan_value_treatment", "AsIs"))
        if treatment not in NAN_LEFT:
            name = f.get("feature_id") or f"column {f.get('flat_feature_index')}"
            raise UnsupportedModelError(f"{where}: feature {name!r} has nan_value_treatment "
                                        f"{treatment!r}, which Grovewise does not know; retrain "
                                        "with nan_mode 'Min' or 'Max'.")
        col = int(f.get("flat_feature_index", f["feature_index"]))
        features[int(f["feature_index"])] = (col, NAN_LEFT[treatment])
        names_by_col[col] = str(f.get("feature_id") or "")
    n_features = max(names_by_col) + 1 if names_by_col else 0
    if n_features == 0:
        raise UnsupportedModelError(f"{where} has no numeric features; Grovewise reproduces "
                                    "CatBoost models of numeric (float) features only.")
    plain = plain_feature_names(n_features)
    names = [names_by_col.get(c, "") for c in range(n_features)]
    has = all(names)
    if not has:
        names = plain

    scale, bias = 1.0, np.zeros(1)
    if "scale_and_bias" in doc:
        scale = float(doc["scale_and_bias"][0])
        bias = _floats(doc["scale_and_bias"][1])
    labels = _class_labels(doc)
    trees_json = doc["oblivious_trees"]
    if link == LINK_LOGISTIC:
        dims, n_classes = 1, 2
    else:
        first = trees_json[0] if trees_json else {}
        leaves = 1 << len(first.get("splits") or [])
        dims = _floats(first.get("leaf_values", [])).shape[0] // leaves
        dims = dims or max(len(labels), bias.shape[0])
        n_classes = dims
    if bias.shape[0] == 1 and dims > 1:
        bias = np.full(dims, bias[0])
    if bias.shape[0] != dims:
        raise ModelFileError(f"{where}: scale_and_bias has {bias.shape[0]} biases for {dims} "
                             "outputs; the file may be damaged; export the model again.")
    trees = []
    for j, t in enumerate(trees_json):
        trees.extend(_convert_tree(t, j, features, dims, scale, where))
    if not trees:
        raise UnsupportedModelError(f"{where} has no trees; train the model first.")
    if classes is None:
        classes = labels if len(labels) == n_classes else np.arange(n_classes)
    classes = np.asarray(classes)
    if classes.shape[0] != n_classes:
        raise ModelFileError(f"{where} has {n_classes} classes but {classes.shape[0]} labels were "
                             "given.")
    return Forest(trees=trees, classes_=classes, feature_names=names, has_feature_names=has,
                  kind="catboost", link=link, compare=COMPARE_LE_FLOAT32, base_score=bias,
                  source={"library": "catboost", "version": _version(doc),
                          "estimator": "JSON export", "loss": loss})


# ------------------------------------------------------------------ the library's objects
def _export_json(obj, where: str) -> dict:
    """The model as CatBoost's own JSON export (a dict)."""
    catboost = _import_catboost(where)
    _check_native_features(obj, where)
    fd, name = tempfile.mkstemp(suffix=".json", prefix="grovewise-catboost-")
    os.close(fd)
    try:
        obj.save_model(name, format="json")
        with open(name, encoding="utf-8") as fh:
            return json.load(fh)
    except catboost.CatBoostError as exc:
        raise UnsupportedModelError(f"{where}: CatBoost could not export the model as JSON "
                                    f"({_message(exc)}); Grovewise reads CatBoost models of "
                                    "numeric (float) features with symmetric trees.") from None
    finally:
        os.unlink(name)


def _check_native_features(obj, where: str) -> None:
    """Refuse categorical, text and embedding features before exporting (CatBoost cannot
    export text or embedding features as JSON), naming them."""
    names = list(getattr(obj, "feature_names_", None) or [])
    for kind, getter in (("categorical", "get_cat_feature_indices"),
                         ("text", "get_text_feature_indices"),
                         ("embedding", "get_embedding_feature_indices")):
        try:
            idx = list(getattr(obj, getter)())
        except Exception:  # an older catboost without this kind of feature
            continue
        if idx:
            shown = [repr(names[i]) if i < len(names) else f"column {i}" for i in idx]
            listed = ", ".join(shown[:6]) + (", ..." if len(shown) > 6 else "")
            raise UnsupportedModelError(
                f"{where} has {kind} feature{'s' if len(idx) > 1 else ''} {listed}; Grovewise "
                f"reproduces CatBoost models of numeric (float) features only: {RETRAIN_NUMERIC}.")


def forest_from_catboost(obj) -> Forest:
    """Convert a fitted CatBoostClassifier (or a CatBoost with a classification loss)."""
    catboost = _import_catboost("the CatBoost model")
    estimator = type(obj).__name__
    where = f"the {estimator}"
    if not isinstance(obj, catboost.CatBoost):
        raise UnsupportedModelError(f"{estimator} is not a supported CatBoost model; give a "
                                    "CatBoostClassifier.")
    if not obj.is_fitted():
        raise UnsupportedModelError(f"{where} is not fitted; fit it first.")
    if isinstance(obj, catboost.CatBoostClassifier):
        loss = _native_loss(obj)
        if loss not in LOSS_LINKS:
            raise UnsupportedModelError(f"{where} was trained with loss_function {loss!r}, which "
                                        "Grovewise cannot reproduce; retrain with one of "
                                        f"{', '.join(LOSS_LINKS)}.")
    doc = _export_json(obj, where)
    classes = getattr(obj, "classes_", None)
    if classes is not None and len(classes) == 0:
        classes = None
    forest = forest_from_catboost_json(doc, classes=classes, where=where)
    forest.source["estimator"] = estimator
    if not forest.source["version"]:
        forest.source["version"] = catboost.__version__
    return forest


def _load(p: Path, fmt: str, redo: str):
    """CatBoost's own object from file ``p`` in format ``fmt`` (errors name the file)."""
    catboost = _import_catboost(str(p))
    model = catboost.CatBoost()
    try:
        model.load_model(str(p), format=fmt)
    except catboost.CatBoostError as exc:
        raise ModelFileError(f"{p}: CatBoost could not read this file ({_message(exc)}); it "
                             f"may be damaged or truncated; {redo}.") from None
    return model


def read_catboost_file(p: Path):
    """A CatBoost binary model file (``.cbm``) as CatBoost's own object."""
    model = _load(p, "cbm", "save the model again with save_model")
    # The refusals, with messages naming the file.
    forest_from_catboost_json(_export_json(model, str(p)), where=str(p))
    return model


def read_catboost_json(doc: dict, p: Path):
    """A CatBoost JSON export, read back with CatBoost itself so that its predictions are the
    exactness proof's reference."""
    forest_from_catboost_json(doc, where=str(p))  # the refusals, naming the file
    return _load(p, "json", "export the model again with save_model(..., format='json')")


def catboost_reference(native, X: np.ndarray, forest: Forest):
    """CatBoost's own probabilities, classes and leaf indexes (as the Forest's node ids)."""
    proba = np.asarray(native.predict(X, prediction_type="Probability"), dtype=np.float64)
    if proba.ndim == 1:
        proba = np.column_stack([1.0 - proba, proba])
    leaf = np.asarray(native.calc_leaf_indexes(X), dtype=np.int64).reshape(X.shape[0], -1)
    per_tree = forest.n_outputs  # Forest trees per CatBoost tree
    first = forest.trees[::per_tree]
    offset = np.array([t.n_nodes - t.n_leaves for t in first], dtype=np.int64)
    nodes = leaf + offset[None, :leaf.shape[1]]
    return proba, np.argmax(proba, axis=1), np.repeat(nodes, per_tree, axis=1)


# CatBoost sums its leaf values in float64; the contract is 1e-6.
FAMILY = Family(library="catboost", tolerance=1e-6, matches=is_catboost_model,
                convert=forest_from_catboost, reference=catboost_reference,
                supported="CatBoost CatBoostClassifier (float features)")
