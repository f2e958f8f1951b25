"""Grovewise: review tree-ensemble classifiers and sign them off.

The public API (see the project's API contract): intake (``load_model``, ``from_estimator``,
``load_data``), anatomy, proximity, the surrogate, and the review.
"""

from .analysis import (depth_usage, impurity_importance, position_usage, proximity,
                       proximity_pairs)
from .analysis.contributions import (Contributions, contributions, interaction_ranking,
                                     interactions)
from .analysis.effects import (AccumulatedEffects, PartialDependence, accumulated_local_effects,
                               partial_dependence)
from .errors import (CancelledError, DataError, GrovewiseError, ModelFileError, SettingError,
                     UnsafeModelError, UnsupportedModelError)
from .forest import Forest, Tree
from .loaders import Dataset, from_estimator, load_data, load_model
from .surrogate import ObliqueSurrogate, mimic
from .surrogate.optimal_axis import fit_axis_tree as optimal_axis_tree

__version__ = "0.1.0"

__all__ = [
    "CancelledError", "Contributions", "DataError", "Dataset", "Forest", "GrovewiseError",
    "ModelFileError", "ObliqueSurrogate", "SettingError", "Tree", "contributions",
    "interaction_ranking", "interactions", "partial_dependence", "accumulated_local_effects",
    "PartialDependence", "AccumulatedEffects",
    "UnsafeModelError", "UnsupportedModelError", "depth_usage", "from_estimator",
    "impurity_importance", "load_data", "load_model", "mimic", "optimal_axis_tree", "position_usage", "proximity",
    "proximity_pairs", "__version__",
]
