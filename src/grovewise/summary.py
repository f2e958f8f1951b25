"""A short, readable summary of a model (and of its predictions on review data)."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from .analysis.usage import input_usage
from .forest import Forest

KIND_NAMES = {
    "decision_tree": "decision tree",
    "random_forest": "random forest",
    "extra_trees": "extremely randomized trees",
    "gradient_boosting": "gradient boosting",
    "hist_gradient_boosting": "histogram gradient boosting",
    "xgboost": "XGBoost gradient boosting",
    "lightgbm": "LightGBM gradient boosting",
    "catboost": "CatBoost gradient boosting (symmetric trees)",
    "onnx": "ONNX tree ensemble",
}


@dataclass
class ModelSummary:
    """What a reviewer wants to know about a model before anything else."""

    kind: str
    library: str
    n_trees: int
    depth_min: int
    depth_max: int
    leaves_total: int
    leaves_per_tree_mean: float
    classes: list
    n_features: int
    features_used: list[str]
    features_never_used: list[str]
    has_feature_names: bool
    rows: int | None = None
    predicted_counts: dict = field(default_factory=dict)
    estimator: str = ""
    categorical: dict = field(default_factory=dict)  # feature -> number of categories
    categorical_splits: int = 0
    input_usage: list | None = None  # a pipeline's estimator inputs and their split counts

    def to_dict(self) -> dict:
        return asdict(self)

    def text(self) -> str:
        lines = [
            f"Model      {KIND_NAMES.get(self.kind, self.kind)} ({self.library})",
            f"Trees      {self.n_trees}, depth {self.depth_min} to {self.depth_max}, "
            f"{self.leaves_total} leaves ({self.leaves_per_tree_mean:.1f} per tree)",
            f"Classes    {', '.join(str(c) for c in self.classes)}",
            f"Features   {self.n_features}, {len(self.features_used)} used by some split"
            + ("" if self.has_feature_names else " (the model has no feature names: "
               "data columns are matched by position)"),
        ]
        if self.estimator:
            lines.insert(1, f"Estimator  {self.estimator}")
        if self.features_never_used:
            lines.append(f"Never used {', '.join(self.features_never_used)}")
        if self.categorical:
            cats = ", ".join(f"{n} ({k} categories)" for n, k in self.categorical.items())
            lines.append(f"Categories {cats}; {self.categorical_splits} splits send sets of "
                         "categories")
        if self.input_usage:
            used = [u for u in self.input_usage if u["splits"]]
            shown = ", ".join(f"{u['input']} -> {u['column']}: {u['splits']}"
                              for u in sorted(used, key=lambda u: -u["splits"])[:8])
            more = f", and {len(used) - 8} more" if len(used) > 8 else ""
            lines.append(f"Inputs     the pipeline makes {len(self.input_usage)} estimator "
                         f"inputs from the raw columns; splits per input: {shown}{more}")
        if self.rows is not None:
            total = max(self.rows, 1)
            parts = [f"{c}: {n} ({100.0 * n / total:.1f}%)" for c, n in self.predicted_counts.items()]
            lines.append(f"Data       {self.rows} rows; predicted {'; '.join(parts)}")
        return "\n".join(lines)


def summarize(forest: Forest, X: np.ndarray | None = None, *,
              predicted: np.ndarray | None = None) -> ModelSummary:
    """Summarise ``forest``; with review data ``X``, add the predicted class counts
    (``predicted``: the class indices, when already known)."""
    depths = np.array([t.max_depth for t in forest.trees])
    leaves = np.array([t.n_leaves for t in forest.trees])
    used = forest.used_features
    names = forest.feature_names
    summary = ModelSummary(
        kind=forest.kind,
        library=f"{forest.source.get('library', '?')} {forest.source.get('version', '')}".strip(),
        n_trees=forest.n_trees,
        depth_min=int(depths.min()), depth_max=int(depths.max()),
        leaves_total=int(leaves.sum()), leaves_per_tree_mean=float(leaves.mean()),
        classes=[c.item() if hasattr(c, "item") else c for c in forest.classes_],
        n_features=forest.n_features,
        features_used=[names[j] for j in used],
        features_never_used=[n for j, n in enumerate(names) if j not in set(used.tolist())],
        has_feature_names=forest.has_feature_names,
        estimator=str(forest.source.get("estimator", "")),
        categorical={names[j]: len(c) for j, c in sorted(forest.categories.items())},
        categorical_splits=forest.n_categorical_splits,
        input_usage=input_usage(forest),
    )
    if X is not None:
        pred = forest.predict_index(X) if predicted is None else predicted
        counts = np.bincount(pred, minlength=forest.n_classes)
        summary.rows = int(X.shape[0])
        summary.predicted_counts = {str(c): int(n) for c, n in zip(forest.classes_, counts)}
    return summary
