"""LightGBM classifiers (LGBMClassifier, Booster, the model text file, dump_model JSON) -> Forest.

The model is read from LightGBM's own model text (``model_to_string``), or from the nested
trees of ``dump_model()``. Both give the same node arrays. A tree of L leaves keeps its
internal nodes as node ids 0..L-2 in LightGBM's order and its leaf ``l`` as node
``L - 1 + l``, so ``Forest.apply`` is ``pred_leaf`` shifted by a fixed offset per tree.

LightGBM's rules, kept exactly (``decision_type`` bit 0: categorical, bit 1: default left,
bits 2-3: missing type):

- numeric split: ``x <= threshold`` in float64; missing type NaN sends NaN the default way;
  missing type Zero sends NaN and |x| <= 1e-35 (a float32) the default way; missing type
  None compares NaN as 0.0;
- categorical split: the value is truncated to a whole number; a code in the node's bitset
  goes left; NaN, a negative code and any other code go right;
- the first tree holds the starting score (``boost_from_average``), so the base is 0;
  ``average_output`` (random forest mode) divides the sum by the number of iterations.

Refused, with a message: linear trees, objectives other than binary (sigmoid 1) and
multiclass (softmax), and files that are not LightGBM models.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import GrovewiseError, ModelFileError, UnsupportedModelError
from ..forest import (COMPARE_LE_FLOAT64, LINK_LOGISTIC, LINK_SOFTMAX, MISSING_NAN, MISSING_NONE,
                      MAX_CATEGORY_CODE, MISSING_ZERO, CategorySplit, Forest, Tree,
                      node_depths, plain_feature_names)
from .families import DAMAGE, Family, NoReference, as_model_error

_MISSING = {0: MISSING_NONE, 1: MISSING_ZERO, 2: MISSING_NAN}
_MISSING_BY_NAME = {"None": 0, "Zero": 1, "NaN": 2}
_AUTO_NAME = re.compile(r"Column_\d+$")


@dataclass(frozen=True, eq=False)
class LightGBMDump:
    """A ``dump_model()`` JSON read from a file. LightGBM cannot load it back, so there is
    nothing to compare the Forest with; the review says so."""

    doc: dict
    path: str


def is_lightgbm_model(obj) -> bool:
    return isinstance(obj, LightGBMDump) or type(obj).__module__.split(".")[0] == "lightgbm"


# ---------------------------------------------------------------------------- reading
def _header_and_trees(text: str, where: str) -> tuple[dict, list[dict], str]:
    """The model text's header entries, one dict of entries per tree, and the text after the
    trees (feature importances, parameters, pandas categories)."""
    if not text.lstrip().startswith("tree"):
        raise ModelFileError(f"{where}: not a LightGBM model text (it does not begin with "
                             "'tree'); give a file written by LightGBM's save_model.")
    body, sep, tail = text.partition("end of trees")
    if not sep:
        raise ModelFileError(f"{where}: the LightGBM model text has no 'end of trees' line; the "
                             "file may be truncated; save the model again.")
    # Strict, so that LightGBM reads the text as Grovewise does: every line of the header and
    # the trees is blank or key=value, no key twice in one part, the trees numbered 0, 1, ...
    blocks: list[dict] = [{}]
    for number, line in enumerate(body.splitlines(), start=1):
        key, eq, value = line.partition("=")
        if not line.strip() or (number == 1 and line.strip() == "tree"):
            continue
        if not eq:
            raise ModelFileError(f"{where}: line {number} of the LightGBM model text is not "
                                 "key=value; the file may be damaged; save the model again.")
        key = key.strip()
        if key == "Tree":
            if value.strip() != str(len(blocks) - 1):
                raise ModelFileError(f"{where}: line {number} starts tree {value.strip()!r} "
                                     f"where tree {len(blocks) - 1} was expected; the file may "
                                     "be damaged; save the model again.")
            blocks.append({})
            continue
        if key in blocks[-1]:
            raise ModelFileError(f"{where}: line {number} gives {key!r} a second time; the "
                                 "file may be damaged; save the model again.")
        blocks[-1][key] = value.strip()
    return blocks[0], blocks[1:], tail


def _numbers(entry: dict, key: str, dtype, where: str, count: int | None = None) -> np.ndarray:
    try:
        text = entry[key]
        arr = np.array(text.split(), dtype=np.float64 if dtype is float else np.int64) \
            if text else np.zeros(0, dtype=np.float64 if dtype is float else np.int64)
    except KeyError:
        raise ModelFileError(f"{where}: a tree has no '{key}' line; the file may be damaged; "
                             "save the model again.") from None
    except ValueError:
        raise ModelFileError(f"{where}: a tree's '{key}' line holds something other than "
                             "numbers; the file may be damaged; save the model again.") from None
    if count is not None and arr.shape[0] != count:
        raise ModelFileError(f"{where}: a tree's '{key}' line has {arr.shape[0]} entries where "
                             f"{count} were expected; the file may be damaged.")
    return arr


def _tree_arrays_from_text(t: dict, where: str) -> dict:
    """One tree's entries of the model text as node arrays (LightGBM's own numbering)."""
    try:
        n_leaves = int(t["num_leaves"])
    except (KeyError, ValueError):
        raise ModelFileError(f"{where}: a tree has no valid 'num_leaves' line; the file may be "
                             "damaged; save the model again.") from None
    if n_leaves < 1:
        raise ModelFileError(f"{where}: a tree has num_leaves={n_leaves}; the file is damaged.")
    if t.get("is_linear", "0").strip() not in ("0", ""):
        raise _linear(where)
    n_int = n_leaves - 1
    out = {"n_leaves": n_leaves,
           "leaf_value": _numbers(t, "leaf_value", float, where, n_leaves),
           "leaf_count": _numbers(t, "leaf_count", float, where, n_leaves) if "leaf_count" in t
           else np.zeros(n_leaves)}
    if n_int == 0:
        return {**out, "feature": np.zeros(0, np.int64), "threshold": np.zeros(0),
                "decision": np.zeros(0, np.int64), "left": np.zeros(0, np.int64),
                "right": np.zeros(0, np.int64), "gain": np.zeros(0),
                "internal_count": np.zeros(0), "cat_sets": {}}
    out.update(feature=_numbers(t, "split_feature", int, where, n_int),
               threshold=_numbers(t, "threshold", float, where, n_int),
               decision=_numbers(t, "decision_type", int, where, n_int),
               left=_numbers(t, "left_child", int, where, n_int),
               right=_numbers(t, "right_child", int, where, n_int),
               gain=_numbers(t, "split_gain", float, where, n_int),
               internal_count=_numbers(t, "internal_count", float, where, n_int)
               if "internal_count" in t else np.zeros(n_int))
    decision = out["decision"]
    # bits 0-3 only, and missing type 3 is none LightGBM writes (it reads it as no missing
    # side at all); a categorical split needs the tree's bit sets.
    if np.any((decision < 0) | (decision > 15) | ((decision >> 2) & 3 == 3)):
        raise ModelFileError(f"{where}: a tree's decision_type holds a value LightGBM does not "
                             "write; the file may be damaged; save the model again.")
    num_cat = int(t.get("num_cat", "0"))
    cat_nodes = np.flatnonzero(decision & 1)
    cat_sets = {}
    if num_cat > 0 or cat_nodes.size:
        bounds = _numbers(t, "cat_boundaries", int, where, num_cat + 1)
        words = _numbers(t, "cat_threshold", int, where)
        if (num_cat < 1 or bounds[0] != 0 or np.any(np.diff(bounds) < 0)
                or bounds[-1] != words.shape[0] or np.any(words < 0) or np.any(words >= 2**32)):
            raise ModelFileError(f"{where}: a tree's num_cat, cat_boundaries and cat_threshold "
                                 "do not describe its category bit sets; the file is damaged.")
        for k in cat_nodes:
            i = out["threshold"][k]
            if not (0 <= i < bounds.shape[0] - 1 and i == int(i)):
                raise ModelFileError(f"{where}: a categorical split points at bitset {i}, which "
                                     "the tree does not have; the file is damaged.")
            i = int(i)
            cat_sets[int(k)] = _bitset_codes(words[bounds[i]:bounds[i + 1]])
    out["cat_sets"] = cat_sets
    return out


def _bitset_codes(words: np.ndarray) -> np.ndarray:
    """The codes whose bits are set in LightGBM's 32-bit words."""
    codes = [32 * w + b for w, word in enumerate(words.tolist()) for b in range(32)
             if (int(word) >> b) & 1]
    return np.asarray(codes, dtype=np.int64)


def _tree_arrays_from_dump(t: dict, where: str) -> dict:
    """One tree of ``dump_model()`` as the same node arrays as the model text gives."""
    n_leaves = int(t.get("num_leaves", 0))
    if t.get("is_linear"):
        raise _linear(where)
    n_int = n_leaves - 1
    arrays = {"feature": np.zeros(n_int, np.int64), "threshold": np.zeros(n_int),
              "decision": np.zeros(n_int, np.int64), "left": np.zeros(n_int, np.int64),
              "right": np.zeros(n_int, np.int64), "gain": np.zeros(n_int),
              "internal_count": np.zeros(n_int), "leaf_value": np.zeros(n_leaves),
              "leaf_count": np.zeros(n_leaves), "cat_sets": {}, "n_leaves": n_leaves}

    def visit(node: dict) -> int:
        if "leaf_index" in node or "split_index" not in node:
            leaf = int(node.get("leaf_index", 0))
            arrays["leaf_value"][leaf] = float(node["leaf_value"])
            arrays["leaf_count"][leaf] = float(node.get("leaf_count", 0))
            return ~leaf
        k = int(node["split_index"])
        arrays["feature"][k] = int(node["split_feature"])
        arrays["gain"][k] = float(node.get("split_gain", 0.0))
        arrays["internal_count"][k] = float(node.get("internal_count", 0))
        decision = (2 if node.get("default_left") else 0) \
            | (_MISSING_BY_NAME[str(node.get("missing_type", "None"))] << 2)
        if node.get("decision_type") == "==":
            decision |= 1
            arrays["cat_sets"][k] = np.asarray(
                [int(c) for c in str(node["threshold"]).split("||") if c != ""], dtype=np.int64)
        else:
            arrays["threshold"][k] = float(node["threshold"])
        arrays["decision"][k] = decision
        arrays["left"][k] = visit(node["left_child"])
        arrays["right"][k] = visit(node["right_child"])
        return k

    try:
        visit(t["tree_structure"])
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        raise ModelFileError(f"{where}: a tree of the LightGBM JSON dump is not readable "
                             f"({type(exc).__name__}: {exc}); write it again with "
                             "dump_model().") from None
    return arrays


def _linear(where: str) -> UnsupportedModelError:
    return UnsupportedModelError(
        f"{where}: LightGBM linear trees (linear_tree=True) hold a linear model in each leaf; "
        "Grovewise reviews trees whose leaves are numbers. Retrain without linear_tree.")


# ---------------------------------------------------------------------------- conversion
def _tree(a: dict, output: int, scale: float, where: str) -> Tree:
    n_int = a["n_leaves"] - 1
    n_nodes = n_int + a["n_leaves"]

    def child(v: np.ndarray) -> np.ndarray:
        return np.where(v >= 0, v, n_int + (~v))

    # LightGBM's own numbering: a child v >= 0 is internal node v (below n_int), a child
    # v < 0 is leaf ~v (below n_leaves); LightGBM reads either without a bounds check.
    kids = np.concatenate([a["left"], a["right"]])
    if np.any(kids >= n_int) or np.any(~kids[kids < 0] >= a["n_leaves"]):
        raise ModelFileError(f"{where}: a tree's child index is out of range; the file is damaged.")
    left = np.full(n_nodes, -1, dtype=np.int64)
    right = np.full(n_nodes, -1, dtype=np.int64)
    left[:n_int], right[:n_int] = child(a["left"]), child(a["right"])
    feature = np.full(n_nodes, -1, dtype=np.int64)
    feature[:n_int] = a["feature"]
    threshold = np.zeros(n_nodes)
    threshold[:n_int] = np.where(a["decision"] & 1, 0.0, a["threshold"])
    decision = a["decision"]
    missing_left = np.zeros(n_nodes, dtype=bool)
    missing_left[:n_int] = (decision & 2).astype(bool) & ~(decision & 1).astype(bool)
    missing_rule = np.zeros(n_nodes, dtype=np.int8)
    missing_rule[:n_int] = [_MISSING.get(int(m), MISSING_NAN) for m in (decision >> 2) & 3]
    value = np.zeros((n_nodes, 1))
    value[n_int:, 0] = a["leaf_value"] * scale
    count = np.concatenate([a["internal_count"], a["leaf_count"]]).astype(np.float64)
    gain = np.concatenate([a["gain"], np.zeros(a["n_leaves"])]).astype(np.float64)
    categorical = {k: CategorySplit(left=codes, right=np.zeros(0, np.int64), other_left=False,
                                    truncated=True)
                   for k, codes in a["cat_sets"].items()}
    depth = node_depths(left, right)  # a ModelFileError when they form no tree (a cycle)
    return Tree(feature=feature, threshold=threshold, left=left, right=right,
                missing_left=missing_left, value=value, depth=depth, gain=gain, cover=count,
                output=output, missing_rule=missing_rule, categorical=categorical or None)


def _link(objective: str, where: str) -> str:
    name, *params = objective.split()
    settings = dict(p.split(":", 1) for p in params if ":" in p)
    if name == "binary":
        if float(settings.get("sigmoid", "1")) != 1.0:
            raise UnsupportedModelError(
                f"{where}: the LightGBM objective 'binary' with sigmoid={settings['sigmoid']} is "
                "not supported (its probabilities are expit(sigmoid * margin)); retrain with "
                "the default sigmoid=1.")
        return LINK_LOGISTIC
    if name in ("multiclass", "softmax"):
        return LINK_SOFTMAX
    raise UnsupportedModelError(
        f"{where}: the LightGBM objective {name!r} is not a supported classifier objective "
        "(binary, multiclass); Grovewise reviews classifiers whose probabilities it can "
        "reproduce exactly.")


def _categories(infos: list[str], pandas_categorical, n_features: int) -> dict:
    """Categorical features (LightGBM writes their codes, colon-separated, as the feature's
    info) and their names: pandas' categories when the model was fitted on a data frame."""
    cat_features = [j for j, info in enumerate(infos[:n_features])
                    if info and info != "none" and not info.startswith("[")]
    codes = {j: [int(float(c)) for c in infos[j].split(":") if c.strip()] for j in cat_features}
    if any(c > MAX_CATEGORY_CODE for cs in codes.values() for c in cs):
        raise ModelFileError(f"a feature's categories go beyond code {MAX_CATEGORY_CODE}; the "
                             "file may be damaged; save the model again.")
    names = {}
    lists = pandas_categorical if isinstance(pandas_categorical, list) else []
    for i, j in enumerate(cat_features):
        if len(lists) == len(cat_features):
            names[j] = [str(c) for c in lists[i]]
        else:
            names[j] = [str(c) for c in range(max([c for c in codes[j] if c >= 0], default=0) + 1)]
    return names


def _pandas_categorical(tail: str):
    """The categories of a model fitted on a data frame, as LightGBM's Python package writes
    them after the trees (one JSON line; its own reader takes the last one), or None."""
    found = re.findall(r"^pandas_categorical:(.*)$", tail, flags=re.M)
    try:
        return json.loads(found[-1]) if found else None
    except (json.JSONDecodeError, RecursionError):
        return None


def _forest(header: dict, trees: list[dict], *, pandas_categorical, classes, where: str,
            estimator: str) -> Forest:
    try:
        k = int(header.get("num_tree_per_iteration", 1))
        num_class = int(header.get("num_class", 1))
        objective = str(header["objective"])
        n_features = int(header["max_feature_idx"]) + 1
    except (KeyError, ValueError):
        raise ModelFileError(f"{where}: the LightGBM model has no valid objective / "
                             "num_class / max_feature_idx; the file may be damaged.") from None
    link = _link(objective, where)
    # LightGBM reads these counts as they stand; a model that disagrees with itself is read
    # one way by LightGBM and another by Grovewise (or crashes LightGBM's predict).
    binary = link == LINK_LOGISTIC
    said = dict(q.split(":", 1) for q in objective.split()[1:] if ":" in q).get("num_class")
    if (num_class != (1 if binary else k) or k < 1 or (not binary and k < 2)
            or len(trees) % k or (said is not None and int(said) != num_class)):
        raise ModelFileError(f"{where}: the LightGBM model's num_class={num_class} and "
                             f"num_tree_per_iteration={k} do not fit its objective "
                             f"{objective.split()[0]!r} and its {len(trees)} trees; the file "
                             "may be damaged; save the model again.")
    n_classes = 2 if binary else num_class
    scale = 1.0
    if header.get("average_output"):
        scale = 1.0 / max(1, len(trees) // max(k, 1))
    converted = [_tree(t, i % k, scale, where) for i, t in enumerate(trees)]
    for t in converted:
        if t.feature.max(initial=-1) >= n_features:
            raise ModelFileError(f"{where}: a split uses feature {int(t.feature.max())}, but the "
                                 f"model has {n_features}; the file is damaged.")
    names = list(header.get("feature_names") or [])
    if len(names) != n_features:  # LightGBM writes one name per feature, Column_j or its own
        raise ModelFileError(f"{where}: the LightGBM model says max_feature_idx={n_features - 1}"
                             f" but names {len(names)} features; the file may be damaged; save "
                             "the model again.")
    has = not all(_AUTO_NAME.match(n) for n in names)
    if not has:
        names = plain_feature_names(n_features)
    labels = np.arange(n_classes) if classes is None else np.asarray(classes)
    if labels.shape[0] != n_classes:
        raise ModelFileError(f"{where}: the model has {n_classes} classes but {labels.shape[0]} "
                             "labels were given.")
    infos = list(header.get("feature_infos") or [])
    import lightgbm

    return Forest(trees=converted, classes_=labels, feature_names=names, has_feature_names=has,
                  kind="lightgbm", link=link, compare=COMPARE_LE_FLOAT64,
                  base_score=np.zeros(1 if link == LINK_LOGISTIC else n_classes),
                  categories=_categories(infos, pandas_categorical, n_features),
                  source={"library": "lightgbm", "version": lightgbm.__version__,
                          "objective": objective, "estimator": estimator})


def _readable(convert):
    """``convert`` with what a damaged model raises turned into a ModelFileError naming
    ``where``, and a GrovewiseError from the Forest's own checks named too."""
    def wrapped(*args, where: str = "the model", **kwargs) -> Forest:
        try:
            return convert(*args, where=where, **kwargs)
        except (GrovewiseError, *DAMAGE) as exc:
            raise as_model_error(exc, where, "LightGBM") from None
    wrapped.__doc__ = convert.__doc__
    wrapped.__name__ = convert.__name__
    return wrapped


@_readable
def forest_from_lightgbm_text(text: str, *, classes=None, where: str = "the model",
                              estimator: str = "Booster") -> Forest:
    """Convert LightGBM's model text (``model_to_string()`` or a saved model file)."""
    header, trees, tail = _header_and_trees(text, where)
    for key in ("feature_names", "feature_infos"):
        header[key] = header.get(key, "").split()
    arrays = [_tree_arrays_from_text(t, where) for t in trees]
    return _forest(header, arrays, pandas_categorical=_pandas_categorical(tail),
                   classes=classes, where=where, estimator=estimator)


@_readable
def forest_from_lightgbm_dump(doc: dict, *, classes=None, where: str = "the model") -> Forest:
    """Convert LightGBM's ``dump_model()`` (as a dict)."""
    try:
        infos = doc.get("feature_infos", {})
        names = list(doc.get("feature_names") or [])
        header = {"num_tree_per_iteration": doc.get("num_tree_per_iteration", 1),
                  "num_class": doc.get("num_class", 1), "objective": doc["objective"],
                  "max_feature_idx": doc["max_feature_idx"], "feature_names": names,
                  "average_output": doc.get("average_output", False),
                  "feature_infos": [_dump_info(infos.get(n)) for n in names]}
        trees = [_tree_arrays_from_dump(t, where) for t in doc["tree_info"]]
    except (KeyError, TypeError, AttributeError) as exc:
        raise ModelFileError(f"{where}: JSON, but not a readable LightGBM dump ({type(exc).__name__}:"
                             f" {exc}); write it again with dump_model().") from None
    return _forest(header, trees, pandas_categorical=doc.get("pandas_categorical"),
                   classes=classes, where=where, estimator="dump_model JSON")


def _dump_info(info) -> str:
    """A dump's feature info in the model text's form ("[a:b]", "none" or "c1:c2:...")."""
    if not isinstance(info, dict):
        return "none"
    values = info.get("values") or []
    if values:
        return ":".join(str(int(v)) for v in values)
    return f"[{info.get('min_value')}:{info.get('max_value')}]"


def forest_from_lightgbm(obj) -> Forest:
    """Convert a fitted LGBMClassifier, a Booster or a dump read from a file into a Forest."""
    import lightgbm

    if isinstance(obj, LightGBMDump):
        forest = forest_from_lightgbm_dump(obj.doc, where=obj.path)
        forest.source["file"] = obj.path
        return forest
    if isinstance(obj, lightgbm.LGBMModel):
        if not isinstance(obj, lightgbm.LGBMClassifier):
            raise UnsupportedModelError(f"{type(obj).__name__} is not a classifier; Grovewise "
                                        "reviews classifiers (LGBMClassifier).")
        if not getattr(obj, "fitted_", False) and getattr(obj, "_Booster", None) is None:
            raise UnsupportedModelError("the LGBMClassifier is not fitted; fit it first.")
        return forest_from_lightgbm_text(obj.booster_.model_to_string(), classes=obj.classes_,
                                         estimator="LGBMClassifier")
    if isinstance(obj, lightgbm.Booster):
        return forest_from_lightgbm_text(obj.model_to_string())
    raise UnsupportedModelError(f"{type(obj).__name__} is not a supported LightGBM model.")


# ---------------------------------------------------------------------------- files
def read_lightgbm_text(p: Path):
    """A LightGBM model text file as LightGBM's own Booster (the proof's reference)."""
    import lightgbm

    try:
        text = p.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise ModelFileError(f"{p}: not a text file; expected LightGBM's model text "
                             "(save_model).") from None
    if "\x00" in text:  # LightGBM reads the text as a C string: it would end there
        raise ModelFileError(f"{p}: the model text holds a NUL character; the file may be "
                             "damaged; save the model again.")
    # Read it ourselves first: LightGBM aborts or crashes the whole process on some damaged
    # texts, so it only sees what parsed: the header and the trees, without the tree_sizes
    # line (optional; LightGBM cuts the text into trees by it, and a wrong one is one such
    # abort), then the data frame's categories as read here; not the importances and
    # training parameters, which prediction does not read (a parameters section cut short
    # is another crash).
    forest = forest_from_lightgbm_text(text, where=str(p))
    body, _, tail = re.sub(r"^tree_sizes=.*$", "", text, count=1, flags=re.M).partition(
        "end of trees")
    categories = _pandas_categorical(tail)
    text = body + "end of trees\n" + (f"\npandas_categorical:{json.dumps(categories)}\n"
                                       if categories is not None else "")
    try:
        booster = lightgbm.Booster(model_str=text)
    except (lightgbm.basic.LightGBMError, ValueError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise ModelFileError(f"{p}: LightGBM could not read this model text ({first[:200]}); "
                             "it may be damaged; save the model again.") from None
    if (booster.num_trees(), booster.num_feature()) != (forest.n_trees, forest.n_features):
        raise ModelFileError(f"{p}: LightGBM reads {booster.num_trees()} trees of "
                             f"{booster.num_feature()} features from this text, Grovewise "
                             f"{forest.n_trees} of {forest.n_features}; the file may be "
                             "damaged; save the model again.")
    return booster


def read_lightgbm_dump(doc: dict, p: Path) -> LightGBMDump:
    """A dump_model JSON, converted once so that its refusals name the file."""
    forest_from_lightgbm_dump(doc, where=str(p))
    return LightGBMDump(doc=doc, path=str(p))


# ---------------------------------------------------------------------------- reference
def lightgbm_reference(native, X: np.ndarray, forest: Forest):
    """LightGBM's own probabilities, classes and leaves (``pred_leaf``, as node ids)."""
    import lightgbm

    if isinstance(native, LightGBMDump):
        raise NoReference("LightGBM cannot read its dump_model JSON back, so the Forest was "
                          "not compared with LightGBM's own predictions; give the model text "
                          "(save_model) for the proof")
    booster = native.booster_ if isinstance(native, lightgbm.LGBMModel) else native
    p = booster.predict(X)
    proba = np.column_stack([1.0 - p, p]) if p.ndim == 1 else p
    leaf = booster.predict(X, pred_leaf=True).astype(np.int64).reshape(X.shape[0], -1)
    first_leaf = np.array([t.n_nodes - t.n_leaves for t in forest.trees], dtype=np.int64)
    return proba, np.argmax(proba, axis=1), leaf + first_leaf[None, :]


FAMILY = Family(library="lightgbm", tolerance=1e-9, matches=is_lightgbm_model,
                convert=forest_from_lightgbm, reference=lightgbm_reference,
                supported="LightGBM LGBMClassifier or Booster (model text or dump_model JSON)")
