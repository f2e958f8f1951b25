"""Model files and data files -> Forest / Dataset, with safety checks."""

from .data_files import Dataset, load_data
from .estimators import from_estimator
from .model_files import load_model, load_native

__all__ = ["Dataset", "from_estimator", "load_data", "load_model", "load_native"]
