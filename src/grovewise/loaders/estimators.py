"""A fitted in-memory model -> Forest, whichever library it comes from."""

from __future__ import annotations

from ..errors import UnsupportedModelError
from ..forest import Forest
from .sklearn_models import KINDS, forest_from_sklearn, is_sklearn_model
from .xgboost_models import forest_from_xgboost, is_xgboost_model


def from_estimator(estimator) -> Forest:
    """Convert a fitted tree-ensemble classifier into a :class:`~grovewise.forest.Forest`.

    Parameters
    ----------
    estimator : object
        A fitted scikit-learn tree classifier (``DecisionTreeClassifier``,
        ``RandomForestClassifier``, ``ExtraTreesClassifier``, ``GradientBoostingClassifier``,
        ``HistGradientBoostingClassifier``), an ``xgboost.XGBClassifier`` or an
        ``xgboost.Booster``. A Forest is returned as it is.

    Raises
    ------
    UnsupportedModelError
        For any other object, or a variant the Forest cannot reproduce exactly.
    """
    if isinstance(estimator, Forest):
        return estimator
    if is_sklearn_model(estimator):
        return forest_from_sklearn(estimator)
    if is_xgboost_model(estimator):
        return forest_from_xgboost(estimator)
    raise UnsupportedModelError(
        f"{type(estimator).__module__}.{type(estimator).__name__} is not a supported model; "
        f"supported: scikit-learn {', '.join(KINDS)}, and XGBoost XGBClassifier or Booster.")
