"""The surrogate: a fixed-depth sparse oblique tree that mimics a tree ensemble.

See SURROGATE_MILP.md for the program and :mod:`.pipeline` for how it is solved.
"""

from .categories import CategoryOrder, order_categories
from .estimator import ObliqueSurrogate
from .mimic import READABLE_DEFAULTS, MimicResult, mimic
from .solver import Cancel, Progress



def warm_up() -> None:
    """Load (or compile, the first time after an install) every compiled kernel of the
    surrogate: the best-cut sweep, the exact two-feature line and the exact axis-aligned
    search. Loading holds the interpreter for a moment, so the window does it before it is
    shown rather than in the middle of a solve."""
    from . import optimal_axis, pair_split, sweep_kernel

    for module in (sweep_kernel, pair_split, optimal_axis):
        module.warm_up()


__all__ = ["ObliqueSurrogate", "mimic", "MimicResult", "READABLE_DEFAULTS", "Cancel", "Progress",
           "CategoryOrder", "order_categories", "warm_up"]
