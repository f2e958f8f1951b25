"""scikit-learn tree classifiers -> Forest.

Supported: DecisionTreeClassifier, RandomForestClassifier, ExtraTreesClassifier,
GradientBoostingClassifier (default prior or zero init) and HistGradientBoostingClassifier
(numeric features). Everything is read from the fitted public arrays (``tree_``) or, for
histogram boosting, the fitted predictor node records; nothing private is kept.
"""

from __future__ import annotations

import numpy as np

from ..errors import UnsupportedModelError
from ..forest import (COMPARE_LE_FLOAT32, COMPARE_LE_FLOAT64, LINK_LOGISTIC, LINK_MEAN,
                      LINK_SOFTMAX, Forest, Tree, node_depths)
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
        return [f"x{j}" for j in range(n_features)], False
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


def _convert_hist_node_records(nodes, output: int) -> Tree:
    leaf = nodes["is_leaf"].astype(bool)
    if np.any(nodes["is_categorical"][~leaf]):
        raise UnsupportedModelError("HistGradientBoostingClassifier: categorical splits are not "
                                    "supported; retrain with numeric (e.g. one-hot) features.")
    left = np.where(leaf, -1, nodes["left"].astype(np.int64))
    right = np.where(leaf, -1, nodes["right"].astype(np.int64))
    return Tree(
        feature=np.where(leaf, -1, nodes["feature_idx"].astype(np.int64)),
        threshold=np.where(leaf, 0.0, nodes["num_threshold"]).astype(np.float64),
        left=left, right=right,
        missing_left=nodes["missing_go_to_left"].astype(bool) & ~leaf,
        value=nodes["value"].astype(np.float64).reshape(-1, 1),
        depth=node_depths(left, right),
        gain=np.where(leaf, 0.0, nodes["gain"]).astype(np.float64),
        cover=nodes["count"].astype(np.float64), output=output,
    )


def _convert_hist_gradient_boosting(est) -> Forest:
    cats = getattr(est, "is_categorical_", None)
    if cats is not None and np.any(cats):
        raise _refuse(est, "categorical features are not supported")
    k = est.n_trees_per_iteration_
    trees = [_convert_hist_node_records(pred.nodes, j)
             for iteration in est._predictors for j, pred in enumerate(iteration)]
    base = np.asarray(est._baseline_prediction, dtype=np.float64).reshape(-1)
    names, has = _feature_names(est, est.n_features_in_)
    link = LINK_LOGISTIC if k == 1 else LINK_SOFTMAX
    return Forest(trees=trees, classes_=est.classes_, feature_names=names, has_feature_names=has,
                  kind="hist_gradient_boosting", link=link, compare=COMPARE_LE_FLOAT64,
                  base_score=base, source=_source(est))


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
    column names when it was fitted on one)."""
    if forest.has_feature_names:
        import pandas as pd

        X = pd.DataFrame(X, columns=forest.feature_names)
    proba = native.predict_proba(X)
    leaves = native.apply(X).reshape(X.shape[0], -1) if hasattr(native, "apply") else None
    return proba, np.argmax(proba, axis=1), leaves


FAMILY = Family(library="scikit-learn", tolerance=1e-9, matches=is_sklearn_model,
                convert=forest_from_sklearn, reference=sklearn_reference,
                supported=f"scikit-learn {', '.join(KINDS)}")
