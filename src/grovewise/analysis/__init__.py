"""How an ensemble uses its features, and which samples it treats alike (no Qt, no figures).

Each function reads a :class:`~grovewise.forest.Forest` and returns a plain result
dataclass with ``to_dict()`` (JSON) and ``to_rows()`` (a CSV table).
"""

from .compare import ModelComparison, compare_models
from .flags import FLAG_KINDS, FlaggedFeature, FlagReport, check_flags, flag_report
from .importance import (STROBL_CAUTION, ForestClassifier, ImportanceComparison,
                         ImpurityImportance, PermutationImportance, importance_comparison,
                         importance_ranks, impurity_importance, permutation_importance_result)
from .proximity import (PairCounts, ProximityPairs, SimilarSamples, most_similar,
                        pairs_above_thresholds, proximity, proximity_pairs)
from .thresholds import FeatureCuts, ThresholdProfiles, threshold_profiles
from .usage import WEIGHTS, DepthUsage, PositionUsage, depth_usage, position_usage

__all__ = [
    "FLAG_KINDS", "STROBL_CAUTION", "WEIGHTS",
    "DepthUsage", "FeatureCuts", "FlagReport", "FlaggedFeature", "ForestClassifier",
    "ImportanceComparison", "ImpurityImportance", "ModelComparison", "PairCounts",
    "PermutationImportance", "PositionUsage", "ProximityPairs", "SimilarSamples",
    "ThresholdProfiles",
    "check_flags", "compare_models", "depth_usage", "flag_report", "importance_comparison",
    "importance_ranks", "impurity_importance", "most_similar", "pairs_above_thresholds",
    "permutation_importance_result", "position_usage", "proximity", "proximity_pairs",
    "threshold_profiles",
]
