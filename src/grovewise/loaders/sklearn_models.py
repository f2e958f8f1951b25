"""scikit-learn tree classifiers -> Forest.

Supported: DecisionTreeClassifier, RandomForestClassifier, ExtraTreesClassifier,
GradientBoostingClassifier (default prior or zero init) and HistGradientBoostingClassifier
(numeric and categorical features). Everything is read from the fitted public arrays
(``tree_``) or, for histogram boosting, the fitted predictor node records, its categorical
bitsets and its input encoder; nothing private is kept.

Histogram boosting with categorical features (``categorical_features`` as indices, a mask,
names or ``"from_dtype"``). scikit-learn 1.9 then always fits a ``_preprocessor``: a
ColumnTransformer whose OrdinalEncoder (``handle_unknown="use_encoded_value"``,
``unknown_value=nan``) turns each categorical column into ordinal codes 0..n-1 (the sorted
categories seen in fit), with the categorical columns moved first; the trees split on that
reordered table (``feature_idx`` is a position in it, mapped back here to the original
column). The compiled predictor (``_predictor.pyx``) decides a categorical node so: NaN and a
negative value go the missing side; a code in the node's ``raw_left_cat_bitsets`` row goes
left; a code among the feature's known categories (``make_known_categories_bitsets``, those
the binner saw) goes right; any other code goes the missing side. Hence
``CategorySplit(left=known & bitset, right=known - bitset, other_left=missing_go_to_left)``.

What the predictor sees is always the encoder's output, so a value of the user's data that
is not a fitted category (a value never seen, a code >= the number of categories, a negative
or a non-integer number, however large) becomes NaN before the trees and goes the missing
side; ``predict_proba`` accepts such values without complaint (checked in
tests/test_categorical_models.py). The predictor's own uint8 cast of a code (which would
wrap codes >= 256 and truncate 2.5 to 2) is never reached from ``predict_proba``.

The Forest's codes for a categorical feature:
- categories that are whole numbers 0..MAX_VALUE_CODE (integer-coded numeric input, also a
  pandas category column of such integers): the code is the value itself, so the data's own
  column is the code column, and ``Forest.categories[j][c]`` is ``str(c)``;
- any other categories (strings, say): the code is the ordinal code (the position in the
  encoder's sorted ``categories_``), and ``Forest.categories[j]`` those categories.
The Forest truncates a non-integer code (2.5 reads as 2) where scikit-learn sends it the
missing side: the one place where the Forest and the model can disagree. Category codes are
whole numbers (the data intake matches a categorical column's cells to the category names),
so it does not arise from the intake; the exactness proof would show it on other data.
"""

from __future__ import annotations

import numpy as np

from ..errors import UnsupportedModelError
from ..forest import (COMPARE_LE_FLOAT32, COMPARE_LE_FLOAT64, LINK_LOGISTIC, LINK_MEAN,
                      LINK_SOFTMAX, CategorySplit, Forest, Tree, node_depths,
                      plain_feature_names)
from .families import Family

KINDS = {
    "DecisionTreeClassifier": "decision_tree",
    "ExtraTreeClassifier": "decision_tree",
    "RandomForestClassifier": "random_forest",
    "ExtraTreesClassifier": "extra_trees",
    "GradientBoostingClassifier": "gradient_boosting",
    "HistGradientBoostingClassifier": "hist_gradient_boosting",
}


def is_sklearn_model(est) -> bool:
    return type(est).__name__ in KINDS and type(est).__module__.startswith("sklearn.")


def _feature_names(est, n_features: int) -> tuple[list[str], bool]:
    names = getattr(est, "feature_names_in_", None)
    if names is None:
        return plain_feature_names(n_features), False
    return [str(n) for n in names], True


def _refuse(est, why: str) -> UnsupportedModelError:
    return UnsupportedModelError(f"{type(est).__name__}: {why}. Grovewise refuses models it cannot "
                                 "reproduce exactly; retrain without that option or use a "
                                 "supported model.")


def _convert_sklearn_tree(tree_, *, classifier: bool, scale: float = 1.0, output: int = 0) -> Tree:
    """One fitted ``tree_`` -> Tree. Classifier leaves hold normalized class fractions."""
    left = tree_.children_left.astype(np.int64)
    right = tree_.children_right.astype(np.int64)
    leaf = left < 0
    if classifier:
        value = np.asarray(tree_.value[:, 0, :], dtype=np.float64)
        norm = value.sum(axis=1, keepdims=True)
        norm[norm == 0.0] = 1.0
        value = value / norm
    else:
        value = scale * np.asarray(tree_.value[:, 0, :1], dtype=np.float64)
    w = np.asarray(tree_.weighted_n_node_samples, dtype=np.float64)
    imp = np.asarray(tree_.impurity, dtype=np.float64)
    li, ri = np.where(leaf, 0, left), np.where(leaf, 0, right)
    gain = np.where(leaf, 0.0, w * imp - w[li] * imp[li] - w[ri] * imp[ri])
    missing = getattr(tree_, "missing_go_to_left", None)
    missing_left = (np.zeros(left.shape[0], dtype=bool) if missing is None
                    else np.asarray(missing, dtype=bool))
    return Tree(
        feature=np.where(leaf, -1, tree_.feature).astype(np.int64),
        threshold=np.where(leaf, 0.0, tree_.threshold).astype(np.float64),
        left=left, right=right, missing_left=missing_left & ~leaf,
        value=value, depth=node_depths(left, right), gain=gain, cover=w, output=output,
    )


def _check_single_output(est) -> None:
    if getattr(est, "n_outputs_", 1) != 1:
        raise _refuse(est, "multi-output classification is not supported")


def _convert_averaging(est) -> Forest:
    _check_single_output(est)
    estimators = [est] if not hasattr(est, "estimators_") else list(est.estimators_)
    trees = [_convert_sklearn_tree(e.tree_, classifier=True) for e in estimators]
    names, has = _feature_names(est, est.n_features_in_)
    return Forest(trees=trees, classes_=est.classes_, feature_names=names, has_feature_names=has,
                  kind=KINDS[type(est).__name__], link=LINK_MEAN, compare=COMPARE_LE_FLOAT32,
                  source=_source(est))


def _convert_gradient_boosting(est) -> Forest:
    init = est.init
    if not (init is None or (isinstance(init, str) and init == "zero")):
        raise _refuse(est, "a custom `init` estimator makes the starting score depend on the data")
    n_features = est.n_features_in_
    base = est._raw_predict_init(np.zeros((1, n_features), dtype=np.float32))[0]
    stages, k = est.estimators_.shape
    trees = [_convert_sklearn_tree(est.estimators_[i, j].tree_, classifier=False,
                                   scale=est.learning_rate, output=j)
             for i in range(stages) for j in range(k)]
    names, has = _feature_names(est, n_features)
    link = LINK_LOGISTIC if k == 1 else LINK_SOFTMAX
    return Forest(trees=trees, classes_=est.classes_, feature_names=names, has_feature_names=has,
                  kind="gradient_boosting", link=link, compare=COMPARE_LE_FLOAT32,
                  base_score=base, source=_source(est))


# The largest category value used as its own code (larger whole numbers are coded by rank).
MAX_VALUE_CODE = 4095


def _bitset_codes(words: np.ndarray) -> np.ndarray:
    """The codes set in one scikit-learn bitset row (uint32 words, bit c % 32 of word c // 32)."""
    bits = np.unpackbits(np.ascontiguousarray(words, dtype="<u4").view(np.uint8),
                         bitorder="little")
    return np.flatnonzero(bits).astype(np.int64)


def _convert_hist_node_records(nodes, output: int, cat=None, left_bitsets=None) -> Tree:
    """One predictor's node records -> Tree. Categorical models only: ``cat`` is the model's
    :class:`_HistCategorical` and ``left_bitsets`` the predictor's ``raw_left_cat_bitsets``."""
    leaf = nodes["is_leaf"].astype(bool)
    is_cat = nodes["is_categorical"].astype(bool) & ~leaf
    if np.any(is_cat) and cat is None:
        raise UnsupportedModelError("HistGradientBoostingClassifier: categorical splits without "
                                    "the fitted categorical encoder; refit the model.")
    left = np.where(leaf, -1, nodes["left"].astype(np.int64))
    right = np.where(leaf, -1, nodes["right"].astype(np.int64))
    column = nodes["feature_idx"].astype(np.int64)
    categorical = {}
    if cat is not None:
        for k in np.flatnonzero(is_cat):
            categorical[int(k)] = cat.split(int(column[k]), left_bitsets[nodes["bitset_idx"][k]],
                                            bool(nodes["missing_go_to_left"][k]))
        column = cat.original[column]
    return Tree(
        feature=np.where(leaf, -1, column),
        threshold=np.where(leaf | is_cat, 0.0, nodes["num_threshold"]).astype(np.float64),
        left=left, right=right,
        missing_left=nodes["missing_go_to_left"].astype(bool) & ~leaf,
        value=nodes["value"].astype(np.float64).reshape(-1, 1),
        depth=node_depths(left, right),
        gain=np.where(leaf, 0.0, nodes["gain"]).astype(np.float64),
        cover=nodes["count"].astype(np.float64), output=output,
        categorical=categorical or None,
    )


class _HistCategorical:
    """What a categorical histogram-boosting model's trees need from its encoder and binner.

    ``original[i]``: the original column of encoded column ``i``; ``known[i]``: the ordinal
    codes the binner knows for a categorical encoded column; ``code[j]``: for original
    categorical column ``j``, the Forest's code of each ordinal code; ``values[j]``: the fitted
    categories in ordinal order; ``by_value[j]``: whether the codes are the values themselves.
    """

    def __init__(self, est, n_features: int):
        pre = est._preprocessor
        self.original = np.full(n_features, -1, dtype=np.int64)
        for name, _, columns in pre.transformers_:
            if name not in pre.output_indices_ or name == "remainder":
                continue
            inputs = np.arange(n_features)[np.asarray(columns)]
            out = np.arange(n_features)[pre.output_indices_[name]]
            if len(inputs) != len(out):
                raise _refuse(est, "its input encoder's columns could not be matched")
            self.original[out] = inputs
        if np.any(self.original < 0):
            raise _refuse(est, "its input encoder drops or adds columns")
        bitsets, f_idx_map = est._bin_mapper.make_known_categories_bitsets()
        remapped = np.asarray(est._is_categorical_remapped, dtype=bool)
        self.known = {int(i): _bitset_codes(bitsets[f_idx_map[i]])
                      for i in np.flatnonzero(remapped)}
        encoder = pre.named_transformers_["encoder"]
        cat_columns = np.arange(n_features)[pre.output_indices_["encoder"]]
        self.values, self.code, self.by_value = {}, {}, {}
        for i, found in zip(cat_columns, encoder.categories_):
            j = int(self.original[i])
            found = np.asarray(found)
            if len(found) and _is_nan(found[-1]):  # missing values are no category
                found = found[:-1]
            self.values[j] = found
            self.by_value[j] = _whole_codes(found)
            self.code[j] = (found.astype(np.float64).astype(np.int64) if self.by_value[j]
                            else np.arange(len(found), dtype=np.int64))

    def names(self) -> dict:
        """``Forest.categories``: code c is named str(c) when the codes are the values."""
        out = {}
        for j, found in sorted(self.values.items()):
            if self.by_value[j]:
                top = int(self.code[j].max()) if len(found) else -1
                out[j] = [str(c) for c in range(top + 1)]
            else:
                out[j] = [_category_name(v) for v in found]
        return out

    def split(self, column: int, left_bitset: np.ndarray, missing_left: bool) -> CategorySplit:
        """scikit-learn's categorical node (on encoded column ``column``, its left bitset) as a
        CategorySplit in the Forest's codes."""
        goes_left = _bitset_codes(left_bitset)
        known = self.known[column]
        code = self.code[int(self.original[column])]
        known = known[known < len(code)]
        in_left = np.isin(known, goes_left)
        return CategorySplit(left=np.sort(code[known[in_left]]),
                             right=np.sort(code[known[~in_left]]), other_left=missing_left)


def _category_name(v) -> str:
    """A fitted category as text: a whole number without its ".0" (2.0 is "2")."""
    if isinstance(v, (float, np.floating)) and float(v).is_integer():
        return str(int(v))
    return str(v)


def _is_nan(v) -> bool:
    try:
        return bool(np.isnan(v))
    except TypeError:
        return v is None


def _whole_codes(found: np.ndarray) -> bool:
    """Whether fitted categories can be their own codes: whole numbers 0..MAX_VALUE_CODE."""
    if found.dtype.kind not in "iuf" or not len(found):
        return False
    v = found.astype(np.float64)
    return bool(np.all(np.isfinite(v)) and np.all(v == np.floor(v)) and v.min() >= 0
                and v.max() <= MAX_VALUE_CODE)


def _convert_hist_gradient_boosting(est) -> Forest:
    cats = getattr(est, "is_categorical_", None)
    has_cats = cats is not None and np.any(cats)
    if has_cats != (getattr(est, "_preprocessor", None) is not None):
        raise _refuse(est, "categorical features without the fitted input encoder (or an "
                      "encoder without categorical features) are not supported")
    cat = _HistCategorical(est, est.n_features_in_) if has_cats else None
    k = est.n_trees_per_iteration_
    trees = [_convert_hist_node_records(pred.nodes, j, cat, pred.raw_left_cat_bitsets)
             for iteration in est._predictors for j, pred in enumerate(iteration)]
    base = np.asarray(est._baseline_prediction, dtype=np.float64).reshape(-1)
    names, has = _feature_names(est, est.n_features_in_)
    link = LINK_LOGISTIC if k == 1 else LINK_SOFTMAX
    return Forest(trees=trees, classes_=est.classes_, feature_names=names, has_feature_names=has,
                  kind="hist_gradient_boosting", link=link, compare=COMPARE_LE_FLOAT64,
                  base_score=base, source=_source(est),
                  categories=cat.names() if cat is not None else {})


def _source(est) -> dict:
    import sklearn

    return {"library": "scikit-learn", "version": sklearn.__version__,
            "estimator": type(est).__name__}


def forest_from_sklearn(est) -> Forest:
    """Convert a fitted scikit-learn tree classifier into a Forest."""
    name = type(est).__name__
    if not hasattr(est, "classes_"):
        raise UnsupportedModelError(f"{name} is not fitted; fit it before handing it to Grovewise.")
    if name in ("DecisionTreeClassifier", "ExtraTreeClassifier", "RandomForestClassifier",
                "ExtraTreesClassifier"):
        return _convert_averaging(est)
    if name == "GradientBoostingClassifier":
        return _convert_gradient_boosting(est)
    if name == "HistGradientBoostingClassifier":
        return _convert_hist_gradient_boosting(est)
    raise UnsupportedModelError(f"{name} is not a supported scikit-learn model; supported: "
                                f"{', '.join(KINDS)}.")


def sklearn_reference(native, X: np.ndarray, forest: Forest):
    """scikit-learn's own ``predict_proba`` and ``apply`` on ``X`` (a table with the model's
    column names when it was fitted on one).

    Categorical histogram boosting: a column whose codes are the categories' ordinal codes is
    handed over as those categories (NaN stays NaN; a code that names no category, as an
    unseen one, becomes a value that is no category, which scikit-learn sends the missing
    side, as it does an unseen category); a column whose codes are the values is handed over
    as it is.
    """
    data = X
    if forest.kind == "hist_gradient_boosting" and forest.categories:
        data = _hist_categorical_input(native, np.asarray(X, dtype=np.float64), forest)
    elif forest.has_feature_names:
        import pandas as pd

        data = pd.DataFrame(X, columns=forest.feature_names)
    proba = native.predict_proba(data)
    leaves = native.apply(data).reshape(X.shape[0], -1) if hasattr(native, "apply") else None
    return proba, np.argmax(proba, axis=1), leaves


def _hist_categorical_input(native, X: np.ndarray, forest: Forest):
    """The Forest's columns as the model's own input: codes back to categories."""
    import pandas as pd

    cat = _HistCategorical(native, native.n_features_in_)
    if all(cat.by_value.values()):
        return pd.DataFrame(X, columns=forest.feature_names) if forest.has_feature_names else X
    columns = {}
    for j in range(X.shape[1]):
        x = X[:, j]
        if j not in cat.values or cat.by_value[j]:
            columns[j] = x
            continue
        found = cat.values[j]
        ok = ~np.isnan(x) & (x >= 0) & (x < len(found)) & (x == np.floor(np.nan_to_num(x)))
        # A code that names no category: a string that is none (for string categories), else
        # NaN; scikit-learn's encoder turns either into NaN, the missing side.
        other = "(no category)" if found.dtype.kind in "OUS" else np.nan
        while other in set(found.tolist()):
            other = other + "_"
        col = np.empty(x.shape[0], dtype=object)
        col[:] = np.nan
        col[ok] = found[x[ok].astype(np.int64)]
        col[~ok & ~np.isnan(x)] = other
        columns[j] = col
    if forest.has_feature_names:
        return pd.DataFrame({forest.feature_names[j]: columns[j] for j in range(X.shape[1])})
    table = np.empty(X.shape, dtype=object)
    for j, col in columns.items():
        table[:, j] = col
    return table


FAMILY = Family(library="scikit-learn", tolerance=1e-9, matches=is_sklearn_model,
                convert=forest_from_sklearn, reference=sklearn_reference,
                supported=f"scikit-learn {', '.join(KINDS)}")
