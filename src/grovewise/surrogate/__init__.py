"""The surrogate: a fixed-depth sparse oblique tree that mimics a tree ensemble.

See SURROGATE_MILP.md for the program and :mod:`.pipeline` for how it is solved.
"""

from .categories import CategoryOrder, order_categories
from .estimator import ObliqueSurrogate
from .mimic import READABLE_DEFAULTS, MimicResult, mimic
from .solver import Cancel, Progress

__all__ = ["ObliqueSurrogate", "mimic", "MimicResult", "READABLE_DEFAULTS", "Cancel", "Progress",
           "CategoryOrder", "order_categories"]
