"""Model files and data files -> Forest / Dataset, with safety checks."""

from .estimators import from_estimator
from .model_files import load_model

__all__ = ["from_estimator", "load_model"]
