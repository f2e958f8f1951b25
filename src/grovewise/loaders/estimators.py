"""A fitted in-memory model -> Forest, whichever library it comes from."""

from __future__ import annotations

from ..errors import UnsupportedModelError
from ..forest import Forest
from .families import families, family_of


def from_estimator(estimator) -> Forest:
    """Convert a fitted tree-ensemble classifier into a :class:`~grovewise.forest.Forest`.

    Parameters
    ----------
    estimator : object
        A fitted scikit-learn tree classifier (``DecisionTreeClassifier``,
        ``RandomForestClassifier``, ``ExtraTreesClassifier``, ``GradientBoostingClassifier``,
        ``HistGradientBoostingClassifier``) or a ``Pipeline`` ending in one, an
        ``xgboost.XGBClassifier`` or ``Booster``, a ``lightgbm.LGBMClassifier`` or ``Booster``,
        a ``catboost.CatBoostClassifier``, or an ONNX model holding a tree ensemble
        classifier. A Forest is returned as it is.

    Raises
    ------
    UnsupportedModelError
        For any other object, or a variant the Forest cannot reproduce exactly.
    """
    if isinstance(estimator, Forest):
        return estimator
    fam = family_of(estimator)
    if fam is None:
        supported = "; ".join(f.supported for f in families())
        raise UnsupportedModelError(
            f"{type(estimator).__module__}.{type(estimator).__name__} is not a supported "
            f"model; supported: {supported}.")
    return fam.convert(estimator)
