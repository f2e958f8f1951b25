"""The model families Grovewise reads: how to recognise, convert and check each one.

Every family is one converter module in this package. It defines a :class:`Family`: how to
recognise the library's own object, how to convert it into a :class:`~grovewise.forest.Forest`,
and how to ask the library itself for the predictions that the exactness proof compares with
(the contract's tolerance beside it). Nothing outside ``loaders/`` knows a library's types.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import GrovewiseError, ModelFileError
from ..forest import Forest

# What a family's reference returns for some rows: the library's class probabilities, the
# predicted class indices, and the leaf ids per tree (None where the library gives none).
Reference = tuple[np.ndarray, np.ndarray, "np.ndarray | None"]


@dataclass(frozen=True)
class Family:
    """One model family.

    Attributes
    ----------
    library : str
        The library's name as the proof states it ("lightgbm").
    tolerance : float
        The exactness contract: the largest probability difference allowed.
    matches : callable(obj) -> bool
        Whether ``obj`` is this library's model object.
    convert : callable(obj) -> Forest
    reference : callable(obj, X, forest) -> (proba, class index, leaves or None)
        The library's own predictions on ``X`` (the Forest's columns: category codes for
        categorical features, the raw columns for a pipeline). ``obj`` may have no way to
        predict (a file format the library cannot read back): it then raises
        :class:`NoReference`.
    supported : str
        What the family accepts, for messages ("LightGBM LGBMClassifier or Booster").
    """

    library: str
    tolerance: float
    matches: Callable[[Any], bool]
    convert: Callable[[Any], Forest]
    reference: Callable[[Any, np.ndarray, Forest], Reference]
    supported: str


# What a damaged model's content makes a converter raise (a count that is not a number, a
# list too short, an index beyond a list, JSON nested too deep): a reader turns it into a
# ModelFileError naming the file (as_model_error).
DAMAGE = (KeyError, TypeError, ValueError, IndexError, AttributeError, OverflowError,
          RecursionError)


def as_model_error(exc: Exception, where: str, library: str) -> GrovewiseError:
    """``exc``, raised while ``library``'s model in ``where`` was read, as a GrovewiseError
    that names ``where`` (a GrovewiseError keeps its kind and words, with ``where`` first)."""
    if isinstance(exc, GrovewiseError):
        return exc if where in str(exc) else type(exc)(f"{where}: {exc}")
    first = (str(exc).strip().splitlines() or [""])[0][:160]
    return ModelFileError(f"{where}: the {library} model is not readable ({type(exc).__name__}"
                          f"{': ' + first if first else ''}); the file may be damaged; save "
                          "the model again with its library.")


class NoReference(Exception):
    """The library cannot predict from this object (for example a JSON dump it cannot read
    back); the message says why, for the proof's text."""


def families() -> list[Family]:
    """Every family, in the order objects are tried."""
    from . import catboost_models, lightgbm_models, onnx_models, pipelines, sklearn_models, xgboost_models

    return [pipelines.FAMILY, sklearn_models.FAMILY, xgboost_models.FAMILY, lightgbm_models.FAMILY,
            catboost_models.FAMILY, onnx_models.FAMILY]


def family_of(obj) -> Family | None:
    for fam in families():
        if fam.matches(obj):
            return fam
    return None
