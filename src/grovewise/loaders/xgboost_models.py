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

from ..errors import GrovewiseError, ModelFileError, UnsupportedModelError
from ..forest import (COMPARE_LT_FLOAT32, LINK_LOGISTIC, LINK_SOFTMAX, MAX_CATEGORY_CODE,
                      CategorySplit, Forest, Tree, node_depths, plain_feature_names)
from .families import DAMAGE, Family, as_model_error

OBJECTIVES = ("binary:logistic", "multi:softprob", "multi:softmax")
DAMAGED = "the model is damaged; save it again with XGBoost's save_model"


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
    nodes = _ints(t.get("categories_nodes", []), len(t.get("categories_nodes", [])),
                  "categories_nodes")
    begins = _ints(t.get("categories_segments", []), nodes.shape[0], "categories_segments")
    sizes = _ints(t.get("categories_sizes", []), nodes.shape[0], "categories_sizes")
    cats = _ints(t.get("categories", []), len(t.get("categories", [])), "categories")
    # XGBoost reads the sets in node order and writes each into a bit field, without bounds
    # checks: one set per categorical split, in node order, each within the categories and
    # not empty (XGBoost writes no split without its set, and fails to write one back).
    split_nodes = np.flatnonzero((split_type == 1) & ~leaf)
    if (not np.array_equal(nodes, split_nodes) or np.any(sizes <= 0) or np.any(begins < 0)
            or np.any(begins + sizes > cats.shape[0])):
        raise ModelFileError("its categories_nodes, categories_segments and categories_sizes "
                             f"do not describe its categorical splits; {DAMAGED}.")
    if cats.size and (cats.min() < 0 or cats.max() > MAX_CATEGORY_CODE):
        odd = int(cats.min()) if cats.min() < 0 else int(cats.max())
        raise ModelFileError(f"a categorical split holds the category {odd}, outside 0 to "
                             f"{MAX_CATEGORY_CODE}; {DAMAGED}.")
    sets = {int(k): cats[int(b):int(b) + int(n)] for k, b, n in zip(nodes, begins, sizes)}
    empty = np.zeros(0, dtype=np.int64)
    out = {}
    for k in split_nodes:
        right = np.unique(sets[int(k)])
        if right.size and right[0] < 0:
            raise ModelFileError(f"node {int(k)}: a categorical split holds a negative "
                                 f"category; {DAMAGED}.")
        out[int(k)] = CategorySplit(left=empty, right=right, other_left=True)
    return out


def _ints(values, n: int, key: str) -> np.ndarray:
    """A node list of whole numbers, exactly ``n`` long (XGBoost indexes it by node)."""
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.shape[0] != n or not (
            arr.dtype.kind in "iub" or (arr.size == 0 and arr.dtype.kind == "f")):
        raise ModelFileError(f"{key} is not a list of {n} whole numbers; {DAMAGED}.")
    return arr.astype(np.int64)


def _floats(values, n: int, key: str) -> np.ndarray:
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.shape[0] != n or arr.dtype.kind not in "iuf":
        raise ModelFileError(f"{key} is not a list of {n} numbers; {DAMAGED}.")
    return arr.astype(np.float64)


def _check_links(t: dict, left: np.ndarray, right: np.ndarray) -> None:
    """The tree's own bookkeeping that XGBoost's reader trusts (it crashes the process when
    it is wrong): its node count, and each node's parent (children already form a tree)."""
    n = left.shape[0]
    if int(t["tree_param"]["num_nodes"]) != n:
        raise ModelFileError(f"tree_param says {t['tree_param']['num_nodes']} nodes, the lists "
                             f"hold {n}; {DAMAGED}.")
    parents = _ints(t["parents"], n, "parents")
    inner = np.flatnonzero(left >= 0)
    kids = np.concatenate([left[inner], right[inner]])
    if n and (parents[0] not in (-1, 2**31 - 1)  # the root's parent: none
              or not np.array_equal(parents[kids], np.concatenate([inner, inner]))):
        raise ModelFileError(f"its parents list does not match its children lists; "
                             f"{DAMAGED}.")


def _convert_tree(t: dict, output: int) -> Tree:
    if int(t["tree_param"].get("size_leaf_vector", "1")) > 1:
        raise UnsupportedModelError("XGBoost: multi-target (vector-leaf) trees are not supported; "
                                    "retrain with multi_strategy='one_output_per_tree'.")
    left = _ints(t["left_children"], len(t["left_children"]), "left_children")
    n = left.shape[0]
    right = _ints(t["right_children"], n, "right_children")
    depth = node_depths(left, right)  # one tree, before any list is read by node
    _check_links(t, left, right)
    leaf = left < 0
    split_type = _ints(t.get("split_type", [0] * n), n, "split_type")
    if np.any((split_type[~leaf] != 0) & (split_type[~leaf] != 1)):
        raise UnsupportedModelError("XGBoost: a split type other than numeric (0) or categorical "
                                    "(1) is not supported.")
    if np.any(split_type[leaf] != 0):
        raise ModelFileError(f"leaf {int(np.flatnonzero(leaf & (split_type != 0))[0])} has a "
                             f"split type; {DAMAGED}.")
    categorical = _category_splits(t, split_type, leaf)
    is_cat = np.zeros(n, dtype=bool)
    is_cat[list(categorical)] = True
    cond = _floats(t["split_conditions"], n, "split_conditions").astype(np.float32)
    _floats(t["base_weights"], n, "base_weights")
    return Tree(
        feature=np.where(leaf, -1, _ints(t["split_indices"], n, "split_indices")),
        threshold=np.where(leaf | is_cat, 0.0, cond.astype(np.float64)),
        left=left, right=right,
        missing_left=_ints(t["default_left"], n, "default_left").astype(bool) & ~leaf,
        value=np.where(leaf, cond.astype(np.float64), 0.0).reshape(-1, 1),
        depth=depth,
        gain=np.where(leaf, 0.0, _floats(t["loss_changes"], n, "loss_changes")),
        cover=_floats(t["sum_hessian"], n, "sum_hessian"),
        output=output,
        categorical=categorical or None,
    )


def _check_cats(gbtree: dict, n_features: int) -> None:
    """The stored categories (``cats``) as XGBoost writes them, or none at all: one entry
    per feature, segments counting each feature's categories, each feature's order a
    permutation of them, a text feature's offsets within its bytes (XGBoost's reader takes
    them as they stand and fails to write the model back otherwise)."""
    cats = gbtree.get("cats")
    if cats is None:
        return
    enc, seg, order = cats.get("enc", []), cats.get("feature_segments", []), \
        cats.get("sorted_idx", [])
    if not (len(enc) or len(seg) or len(order)):
        return
    bad = ModelFileError(f"the stored categories (cats) do not describe the model's "
                         f"{n_features} features; {DAMAGED}.")
    if not isinstance(enc, list) or len(enc) != n_features:
        raise bad
    seg = _ints(seg, n_features + 1, "cats feature_segments")
    order = _ints(order, len(order), "cats sorted_idx")
    if seg[0] != 0 or np.any(np.diff(seg) < 0) or seg[-1] != order.shape[0]:
        raise bad
    for j, col in enumerate(enc):
        count = int(seg[j + 1] - seg[j])
        if not isinstance(col, dict) or not np.array_equal(
                np.sort(order[seg[j]:seg[j + 1]]), np.arange(count)):
            raise bad
        values = col.get("values", [])
        if "offsets" in col:
            off = _ints(col["offsets"], len(col["offsets"]), "cats offsets")
            if count and (off.shape[0] != count + 1 or off[0] != 0
                          or np.any(np.diff(off) < 0) or off[-1] != len(values)):
                raise bad
            if not count and (off.size or len(values)):
                raise bad
        elif len(values) != count:
            raise bad


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

    Everything XGBoost's own reader trusts is checked first (it crashes the process on a
    child index out of range, a tree id twice, a tree's output group beyond the classes,
    and more), so a damaged model is a ModelFileError naming ``where`` and the tree.
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
    if not isinstance(booster, dict) or booster.get("name") != "gbtree":
        name = booster.get("name") if isinstance(booster, dict) else booster
        raise UnsupportedModelError(f"XGBoost booster {name!r} in {where} is not "
                                    "supported; only tree boosters ('gbtree') are.")
    if not isinstance(objective, str) or objective not in OBJECTIVES:
        raise UnsupportedModelError(f"XGBoost objective {objective!r} in {where} is not a "
                                    f"supported classifier objective ({', '.join(OBJECTIVES)}).")
    try:
        return _forest(model, learner, booster["model"], objective, params, classes, where)
    except (GrovewiseError, *DAMAGE) as exc:
        raise as_model_error(exc, where, "XGBoost") from None


def _forest(model: dict, learner: dict, gbtree: dict, objective: str, params: dict, classes,
            where: str) -> Forest:
    trees_json = gbtree["trees"]
    tree_info = _ints(gbtree["tree_info"], len(gbtree["tree_info"]), "tree_info")
    num_class = int(params.get("num_class", "0"))
    n_groups = max(num_class, 1)  # XGBoost's output groups: one per class, one for binary
    n_trees = len(trees_json)
    declared = (gbtree.get("gbtree_model_param") or {}).get("num_trees", n_trees)
    if int(declared) != n_trees or tree_info.shape[0] != n_trees:
        raise ModelFileError(f"{where}: the model declares {declared} trees, lists "
                             f"{n_trees} and gives {tree_info.shape[0]} output groups; {DAMAGED}.")
    if n_trees and (tree_info.min() < 0 or tree_info.max() >= n_groups):
        raise ModelFileError(f"{where}: a tree adds to output group {int(tree_info.max())}, "
                             f"but the model has {n_groups}; {DAMAGED}.")
    if objective != "binary:logistic" and num_class < 2:
        raise ModelFileError(f"{where}: the objective {objective} needs num_class 2 or more, "
                             f"the model says {num_class}; {DAMAGED}.")
    indptr = gbtree.get("iteration_indptr")
    if indptr is not None:
        indptr = _ints(indptr, len(indptr), "iteration_indptr")
        if (indptr.size == 0 or indptr[0] != 0 or np.any(np.diff(indptr) < 0)
                or indptr[-1] != n_trees):
            raise ModelFileError(f"{where}: the model's iteration_indptr does not count its "
                                 f"{n_trees} trees; {DAMAGED}.")
    best = (learner.get("attributes") or {}).get("best_iteration")
    kept = n_trees
    if best is not None and indptr is not None and indptr.size:
        if not 0 <= int(best) < indptr.size - 1:
            raise ModelFileError(f"{where}: best_iteration {best} is not one of the model's "
                                 f"{indptr.size - 1} iterations; {DAMAGED}.")
        # The scikit-learn wrapper predicts with the trees up to the best iteration (the
        # others are checked too: XGBoost reads them all).
        kept = int(indptr[int(best) + 1])
    n_classes = max(num_class, 2)
    base = _parse_floats(params["base_score"])
    if base.size == 0 or not np.isfinite(base).all():
        raise ModelFileError(f"{where}: the base_score {params['base_score']!r} is not a "
                             f"number; {DAMAGED}.")
    if objective == "binary:logistic":
        link = LINK_LOGISTIC
        p = float(base[0])
        if not 0.0 < p < 1.0:
            raise ModelFileError(f"{where}: the base_score {p!r} of a binary:logistic model is "
                                 f"not a probability between 0 and 1; {DAMAGED}.")
        base = np.array([math.log(p / (1.0 - p))])
    else:
        link = LINK_SOFTMAX
        base = np.broadcast_to(base, (n_classes,)).copy() if base.size in (1, n_classes) else base
    trees = []
    for i, (t, k) in enumerate(zip(trees_json, tree_info)):
        try:
            if int(t.get("id", i)) != i:
                raise ModelFileError(f"its id is {t.get('id')!r}; {DAMAGED}.")
            trees.append(_convert_tree(t, int(k)))
        except (GrovewiseError, *DAMAGE) as exc:
            raise as_model_error(exc, f"{where}, tree {i}", "XGBoost") from None
    trees = trees[:kept]
    n_features = int(params["num_feature"])
    if n_features < 1:
        raise ModelFileError(f"{where}: the model has num_feature {n_features}; {DAMAGED}.")
    _check_cats(gbtree, n_features)
    names = learner.get("feature_names") or []
    types = learner.get("feature_types") or []
    for key, values in (("feature_names", names), ("feature_types", types)):
        if (not isinstance(values, list) or len(values) not in (0, n_features)
                or not all(isinstance(v, str) for v in values)):
            raise ModelFileError(f"{where}: the model's {key} is not a list of {n_features} "
                                 f"names; {DAMAGED}.")
    has = len(names) == n_features and n_features > 0
    if not has:
        names = plain_feature_names(n_features)
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
