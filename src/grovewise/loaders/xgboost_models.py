"""XGBoost classifiers (XGBClassifier, Booster, or the model's JSON) -> Forest.

The model is read from XGBoost's own JSON form of the booster. Trees keep the booster's
order and node ids, so ``Forest.apply`` equals ``pred_leaf``. XGBoost compares in float32
with ``<`` and sends a missing value the node's default direction; the Forest does the same.

Categorical splits (``enable_categorical=True``; ``split_type`` 1 in the JSON, the node's
categories in ``categories`` at ``categories_segments[i]``, ``categories_sizes[i]`` long, for
node ``categories_nodes[i]``). XGBoost's rule, as its predictor decides (checked by
experiment against ``pred_leaf`` in tests/test_categorical_models.py): NaN takes the default
direction; a category in the node's set goes RIGHT; every other value goes LEFT: a category
outside the set or beyond its stored bit field, and an invalid one (negative, or >= 2**24).
A value with a fraction is truncated to its category (2.7 is category 2), as the Forest's
walk does. So a split becomes ``CategorySplit(left=[], right=set, other_left=True)``.
Partition splits and one-hot splits (``max_cat_to_onehot``) are stored alike: a one-hot
split is a set of one category (its ``split_conditions`` entry is unused, 1e-45).

Category names: XGBoost 3.1+ keeps a fitted DataFrame's categories in the model
(``gradient_booster.model.cats``: per feature either ``offsets`` into the UTF-8 bytes of the
names, or a numeric ``type`` and the ``values``), in code order; ``Forest.categories`` takes
them from there. A model fitted on codes (``feature_types`` 'c' with an array) stores none;
its categories are then named by their codes ("0", "1", ... up to the largest code a split
uses). XGBoost writes non-ASCII names' bytes incompletely into the JSON (3.2: offsets count
characters, not bytes), so such names are decoded with replacement characters.
"""

from __future__ import annotations

import json
import math

import numpy as np

from ..errors import ModelFileError, UnsupportedModelError
from ..forest import (COMPARE_LT_FLOAT32, LINK_LOGISTIC, LINK_SOFTMAX, CategorySplit, Forest, Tree,
                      node_depths)
from .families import Family

OBJECTIVES = ("binary:logistic", "multi:softprob", "multi:softmax")


def is_xgboost_model(obj) -> bool:
    return type(obj).__module__.split(".")[0] == "xgboost"


def _parse_floats(text) -> np.ndarray:
    """base_score is stored as '5E-1' (older) or '[5E-1]' / '[a,b,c]' (newer)."""
    if isinstance(text, (int, float)):
        return np.array([float(text)])
    s = str(text).strip().strip("[]")
    return np.array([float(v) for v in s.split(",") if v.strip()], dtype=np.float64)


def _category_splits(t: dict, split_type: np.ndarray, leaf: np.ndarray) -> dict:
    """The tree's categorical splits, node id -> CategorySplit (XGBoost's set goes right)."""
    nodes = [int(k) for k in t.get("categories_nodes", [])]
    begins = t.get("categories_segments", [])
    sizes = t.get("categories_sizes", [])
    cats = np.asarray(t.get("categories", []), dtype=np.int64)
    if len(begins) != len(nodes) or len(sizes) != len(nodes):
        raise ModelFileError("XGBoost: the tree's categories_nodes, categories_segments and "
                             "categories_sizes differ in length; the model is damaged.")
    sets = {k: cats[int(b):int(b) + int(n)] for k, b, n in zip(nodes, begins, sizes)}
    empty = np.zeros(0, dtype=np.int64)
    out = {}
    for k in np.flatnonzero((split_type == 1) & ~leaf):
        # A categorical node without a stored set (XGBoost never writes one) sends every
        # category left, as XGBoost's loader leaves it an empty bit field.
        right = np.unique(sets.get(int(k), empty))
        if right.size and right[0] < 0:
            raise ModelFileError("XGBoost: a categorical split holds a negative category; the "
                                 "model is damaged.")
        out[int(k)] = CategorySplit(left=empty, right=right, other_left=True)
    return out


def _convert_tree(t: dict, output: int) -> Tree:
    if int(t["tree_param"].get("size_leaf_vector", "1")) > 1:
        raise UnsupportedModelError("XGBoost: multi-target (vector-leaf) trees are not supported; "
                                    "retrain with multi_strategy='one_output_per_tree'.")
    left = np.asarray(t["left_children"], dtype=np.int64)
    right = np.asarray(t["right_children"], dtype=np.int64)
    leaf = left < 0
    split_type = np.asarray(t.get("split_type", [0] * left.shape[0]), dtype=np.int64)
    if np.any((split_type[~leaf] != 0) & (split_type[~leaf] != 1)):
        raise UnsupportedModelError("XGBoost: a split type other than numeric (0) or categorical "
                                    "(1) is not supported.")
    categorical = _category_splits(t, split_type, leaf)
    is_cat = np.zeros(left.shape[0], dtype=bool)
    is_cat[list(categorical)] = True
    cond = np.asarray(t["split_conditions"], dtype=np.float32).astype(np.float64)
    return Tree(
        feature=np.where(leaf, -1, np.asarray(t["split_indices"], dtype=np.int64)),
        threshold=np.where(leaf | is_cat, 0.0, cond),
        left=left, right=right,
        missing_left=np.asarray(t["default_left"], dtype=bool) & ~leaf,
        value=np.where(leaf, cond, 0.0).reshape(-1, 1),
        depth=node_depths(left, right),
        gain=np.where(leaf, 0.0, np.asarray(t["loss_changes"], dtype=np.float64)),
        cover=np.asarray(t["sum_hessian"], dtype=np.float64),
        output=output,
        categorical=categorical or None,
    )


def _stored_category_names(gbtree: dict, n_features: int) -> dict:
    """Category names per feature as XGBoost 3.1+ stores a fitted DataFrame's categories
    (``cats``), in code order; {} when the model holds none."""
    cats = gbtree.get("cats") or {}
    enc, seg = cats.get("enc") or [], cats.get("feature_segments") or []
    if len(enc) != n_features or len(seg) != n_features + 1:
        return {}
    names = {}
    for j, col in enumerate(enc):
        count = int(seg[j + 1]) - int(seg[j])
        if count <= 0:
            continue
        values = col.get("values", [])
        if "offsets" in col:  # strings: UTF-8 bytes (stored as int8) between offsets
            off = [int(o) for o in col["offsets"]]
            raw = bytes(int(v) & 0xFF for v in values)
            found = [raw[off[i]:off[i + 1]].decode("utf-8", errors="replace")
                     for i in range(len(off) - 1)]
        else:  # integers (XGBoost refuses floating-point categories)
            found = [str(int(v)) for v in values]
        if len(found) == count:
            names[j] = found
    return names


def _categories(learner: dict, gbtree: dict, trees: list[Tree], n_features: int) -> dict:
    """``Forest.categories``: every feature typed 'c' or split on categorically."""
    types = learner.get("feature_types") or []
    largest = {j: -1 for j in range(min(len(types), n_features)) if types[j] == "c"}
    for t in trees:
        for k, split in (t.categorical or {}).items():
            j = int(t.feature[k])
            top = int(split.right.max()) if split.right.size else -1
            largest[j] = max(largest.get(j, -1), top)
    stored = _stored_category_names(gbtree, n_features)
    return {j: stored.get(j) or [str(c) for c in range(top + 1)]
            for j, top in sorted(largest.items())}


def forest_from_xgboost_json(model: dict, *, classes=None, where: str = "the model") -> Forest:
    """Convert XGBoost's JSON model (as a dict) into a Forest.

    ``classes`` are the labels of the classes in output order (an XGBClassifier's
    ``classes_``); without them the classes are 0..K-1, as XGBoost itself numbers them.
    """
    try:
        learner = model["learner"]
        booster = learner["gradient_booster"]
        objective = learner["objective"]["name"]
        params = learner["learner_model_param"]
    except (KeyError, TypeError):
        raise ModelFileError(f"{where} is JSON but not an XGBoost model (no learner / "
                             "gradient_booster / objective); give a file written by XGBoost's "
                             "save_model.") from None
    if booster.get("name") != "gbtree":
        raise UnsupportedModelError(f"XGBoost booster {booster.get('name')!r} in {where} is not "
                                    "supported; only tree boosters ('gbtree') are.")
    if objective not in OBJECTIVES:
        raise UnsupportedModelError(f"XGBoost objective {objective!r} in {where} is not a "
                                    f"supported classifier objective ({', '.join(OBJECTIVES)}).")
    gbtree = booster["model"]
    trees_json = gbtree["trees"]
    tree_info = gbtree["tree_info"]
    indptr = gbtree.get("iteration_indptr")
    best = learner.get("attributes", {}).get("best_iteration")
    if best is not None and indptr:
        # The scikit-learn wrapper predicts with the trees up to the best iteration.
        trees_json = trees_json[: indptr[int(best) + 1]]
        tree_info = tree_info[: indptr[int(best) + 1]]
    num_class = int(params.get("num_class", "0"))
    n_classes = max(num_class, 2)
    base = _parse_floats(params["base_score"])
    if objective == "binary:logistic":
        link = LINK_LOGISTIC
        p = float(base[0])
        base = np.array([math.log(p / (1.0 - p))])
    else:
        link = LINK_SOFTMAX
        base = np.broadcast_to(base, (n_classes,)).copy() if base.size in (1, n_classes) else base
    trees = [_convert_tree(t, int(k)) for t, k in zip(trees_json, tree_info)]
    n_features = int(params["num_feature"])
    names = [str(n) for n in learner.get("feature_names") or []]
    has = len(names) == n_features and n_features > 0
    if not has:
        names = [f"x{j}" for j in range(n_features)]
    labels = np.arange(n_classes) if classes is None else np.asarray(classes)
    if labels.shape[0] != n_classes:
        raise ModelFileError(f"{where} has {n_classes} classes but {labels.shape[0]} labels were given.")
    version = model.get("version", [])
    return Forest(trees=trees, classes_=labels, feature_names=names, has_feature_names=has,
                  kind="xgboost", link=link, compare=COMPARE_LT_FLOAT32, base_score=base,
                  categories=_categories(learner, gbtree, trees, n_features),
                  source={"library": "xgboost", "version": ".".join(str(v) for v in version),
                          "objective": objective})


def forest_from_xgboost(obj) -> Forest:
    """Convert a fitted XGBClassifier or a Booster into a Forest."""
    import xgboost

    if isinstance(obj, xgboost.XGBModel):
        if not isinstance(obj, xgboost.XGBClassifier):
            raise UnsupportedModelError(f"{type(obj).__name__} is not a classifier; Grovewise "
                                        "reviews classifiers (XGBClassifier).")
        try:
            booster = obj.get_booster()
        except xgboost.core.XGBoostError:
            raise UnsupportedModelError("the XGBClassifier is not fitted; fit it first.") from None
        classes = getattr(obj, "classes_", None)
        forest = forest_from_xgboost_json(json.loads(booster.save_raw("json")), classes=classes)
        forest.source["estimator"] = "XGBClassifier"
        return forest
    if isinstance(obj, xgboost.Booster):
        forest = forest_from_xgboost_json(json.loads(obj.save_raw("json")))
        forest.source["estimator"] = "Booster"
        return forest
    raise UnsupportedModelError(f"{type(obj).__name__} is not a supported XGBoost model.")


def xgboost_reference(native, X: np.ndarray, forest: Forest):
    """XGBoost's own probabilities, classes and leaf ids (``pred_leaf``) on ``X``.

    Categorical features hold category codes (NaN for missing). They are handed to XGBoost
    as an array typed 'c', which XGBoost reads as the codes themselves: only a DataFrame's
    categories are re-coded by the names the model stores, so the codes mean what they mean
    to the Forest (the tests check both against XGBoost's prediction on the original table).
    """
    import xgboost

    booster = native.get_booster() if isinstance(native, xgboost.XGBModel) else native
    names = forest.feature_names if forest.has_feature_names else None
    if forest.categories:
        types = [("c" if forest.is_categorical(j) else "float") for j in range(forest.n_features)]
        dm = xgboost.DMatrix(np.asarray(X, dtype=np.float64), feature_names=names,
                             feature_types=types, enable_categorical=True)
    else:
        dm = xgboost.DMatrix(X, feature_names=names)
    best = booster.attr("best_iteration")
    upto = (0, int(best) + 1) if best is not None else (0, 0)  # as the Forest keeps them
    p = booster.predict(dm, iteration_range=upto)
    proba = np.column_stack([1 - p, p]) if p.ndim == 1 else p
    leaves = booster.predict(dm, pred_leaf=True, iteration_range=upto)
    leaves = leaves.astype(np.int64).reshape(X.shape[0], -1)
    return proba, np.argmax(proba, axis=1), leaves


# XGBoost sums in float32, so the contract is 2e-6.
FAMILY = Family(library="xgboost", tolerance=2e-6, matches=is_xgboost_model,
                convert=forest_from_xgboost, reference=xgboost_reference,
                supported="XGBoost XGBClassifier or Booster")
