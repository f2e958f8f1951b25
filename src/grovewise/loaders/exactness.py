"""The intake proof: the Forest's predictions equal the source library's on the review data."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ..errors import GrovewiseError
from ..forest import Forest
from .families import NoReference, families, family_of

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
    no_reference: str | None = None  # why the library could not be asked (nothing compared)

    @property
    def passed(self) -> bool:
        if self.no_reference:
            return True
        return (self.max_abs_proba_diff <= self.tolerance and self.predictions_equal
                and self.leaves_equal is not False)

    def text(self) -> str:
        if self.no_reference:
            return f"not checked against {self.library}: {self.no_reference}"
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


CHUNK_ROWS = 20_000  # rows compared at a time: progress, and memory flat in the data's size


def check_exactness(forest: Forest, native, X: np.ndarray, *, progress=None,
                    sample: dict | None = None) -> ExactnessCheck:
    """Compare ``forest`` with the library's own object ``native`` on ``X``.

    The rows are compared in blocks of :data:`CHUNK_ROWS`; ``progress(done_rows, total)``
    follows each block (raise from it to stop). ``sample`` records how ``X`` was drawn from
    larger data, for the text.
    """
    fam = family_of(native)
    library = fam.library  # whose predictions are the reference (onnxruntime for ONNX)
    # A pipeline is checked against scikit-learn, but its estimator's sums set the contract
    # (a pipeline ending in XGBoost sums in float32, as XGBoost does).
    inner = forest.source.get("library", library)
    tolerance = max([fam.tolerance, *(f.tolerance for f in families() if f.library == inner)])
    n = X.shape[0]
    diff, classes_equal, leaves_equal = 0.0, True, None
    for s in range(0, n, CHUNK_ROWS):
        block = X[s:s + CHUNK_ROWS]
        try:
            proba, index, leaves = fam.reference(native, block, forest)
        except NoReference as why:
            return ExactnessCheck(library=library, rows=0, max_abs_proba_diff=0.0,
                                  tolerance=tolerance, predictions_equal=True,
                                  leaves_equal=None, sample=sample, no_reference=str(why))
        except Exception as exc:  # the library refused: its own error types, many of them
            first = (str(exc).strip().splitlines() or [""])[0][:200]
            raise GrovewiseError(
                f"{library} could not predict with the model on rows {s + 1} to "
                f"{min(n, s + CHUNK_ROWS)} of the data ({type(exc).__name__}: {first}), so "
                "Grovewise cannot check its own predictions against it. Check those rows' "
                "values; if they are ordinary numbers, report the model type and library "
                "versions.") from None
        ours = forest.predict_proba(block)
        diff = max(diff, float(np.max(np.abs(ours - proba))))
        classes_equal &= bool(np.array_equal(np.argmax(ours, axis=1), index))
        if leaves is not None:
            same = bool(np.array_equal(forest.apply(block), leaves))
            leaves_equal = same if leaves_equal is None else (leaves_equal and same)
        if progress is not None:
            progress(min(n, s + CHUNK_ROWS), n)
    return ExactnessCheck(library=library, rows=int(n), max_abs_proba_diff=diff,
                          tolerance=tolerance, predictions_equal=classes_equal,
                          leaves_equal=leaves_equal, sample=sample)
