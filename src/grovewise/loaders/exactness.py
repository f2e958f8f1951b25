"""The intake proof: the Forest's predictions equal the source library's on the review data."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ..forest import Forest

# The tolerances of the contract: scikit-learn to 1e-9, XGBoost (float32 sums) to 2e-6.
TOLERANCE = {"scikit-learn": 1e-9, "xgboost": 2e-6}


@dataclass
class ExactnessCheck:
    """How closely the Forest reproduces the library's own predictions on some rows."""

    library: str
    rows: int
    max_abs_proba_diff: float
    tolerance: float
    predictions_equal: bool
    leaves_equal: bool | None  # None where the library has no leaf-index method
    sample: dict | None = None  # how the rows were chosen from larger data (grovewise.sampling)

    @property
    def passed(self) -> bool:
        return (self.max_abs_proba_diff <= self.tolerance and self.predictions_equal
                and self.leaves_equal is not False)

    def text(self) -> str:
        verdict = "exact" if self.passed else "NOT exact"
        leaves = {True: "leaf ids equal", False: "leaf ids differ",
                  None: "no leaf ids to compare"}[self.leaves_equal]
        where = (self.sample or {}).get("description") if (self.sample or {}).get("sampled") \
            else f"{self.rows} rows"
        return (f"{verdict}: on {where}, largest probability difference from "
                f"{self.library}'s own predict_proba is {self.max_abs_proba_diff:.1e} "
                f"(tolerance {self.tolerance:.0e}); predicted classes "
                f"{'equal' if self.predictions_equal else 'differ'}; {leaves}")

    def to_dict(self) -> dict:
        return {**asdict(self), "passed": self.passed}


def _library_outputs(native, X: np.ndarray, feature_names: list[str] | None):
    """(probabilities, class indices, leaf ids or None) from the library's own object."""
    if type(native).__name__ == "Booster":
        import xgboost

        dm = xgboost.DMatrix(X, feature_names=feature_names)
        p = native.predict(dm)
        proba = np.column_stack([1 - p, p]) if p.ndim == 1 else p
        if native.attr("best_iteration") is None:
            leaves = native.predict(dm, pred_leaf=True).astype(np.int64)
        else:
            leaves = None
        return proba, np.argmax(proba, axis=1), leaves
    if feature_names is not None:  # the estimator was fit on a table with these columns
        import pandas as pd

        X = pd.DataFrame(X, columns=feature_names)
    proba = native.predict_proba(X)
    leaves = native.apply(X).reshape(X.shape[0], -1) if hasattr(native, "apply") else None
    return proba, np.argmax(proba, axis=1), leaves


CHUNK_ROWS = 20_000  # rows compared at a time: progress, and memory flat in the data's size


def check_exactness(forest: Forest, native, X: np.ndarray, *, progress=None,
                    sample: dict | None = None) -> ExactnessCheck:
    """Compare ``forest`` with the library's own object ``native`` on ``X``.

    The rows are compared in blocks of :data:`CHUNK_ROWS`; ``progress(done_rows, total)``
    follows each block (raise from it to stop). ``sample`` records how ``X`` was drawn from
    larger data, for the text.
    """
    library = "xgboost" if forest.kind == "xgboost" else "scikit-learn"
    names = forest.feature_names if forest.has_feature_names else None
    n = X.shape[0]
    diff, classes_equal, leaves_equal = 0.0, True, None
    for s in range(0, n, CHUNK_ROWS):
        block = X[s:s + CHUNK_ROWS]
        proba, index, leaves = _library_outputs(native, block, names)
        ours = forest.predict_proba(block)
        diff = max(diff, float(np.max(np.abs(ours - proba))))
        classes_equal &= bool(np.array_equal(np.argmax(ours, axis=1), index))
        if leaves is not None:
            same = bool(np.array_equal(forest.apply(block), leaves))
            leaves_equal = same if leaves_equal is None else (leaves_equal and same)
        if progress is not None:
            progress(min(n, s + CHUNK_ROWS), n)
    return ExactnessCheck(library=library, rows=int(n), max_abs_proba_diff=diff,
                          tolerance=TOLERANCE[library], predictions_equal=classes_equal,
                          leaves_equal=leaves_equal, sample=sample)
