"""The model's own performance on review data that has the target: a summary, not a validation.

Discrimination (ROC AUC with a 95% interval), the Brier score, a reliability table and the
confusion matrix at the model's own rule (the class of largest probability; ties go to the
first class, as numpy's argmax).

For two classes the AUC interval is DeLong's (DeLong, DeLong and Clarke-Pearson (1988),
"Comparing the areas under two or more correlated receiver operating characteristic curves:
a nonparametric approach", Biometrics 44:837-845), computed with the midrank algorithm of
Sun and Xu (2014), "Fast implementation of DeLong's algorithm for comparing the areas under
correlated receiver operating characteristic curves", IEEE Signal Processing Letters
21(11):1389-1393, in O(n log n). For more classes the macro one-vs-rest AUC gets a seeded
percentile bootstrap over rows. The multi-class Brier score is Brier's own definition
(Brier (1950), "Verification of forecasts expressed in terms of probability", Monthly
Weather Review 78:1-3).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import DataError, SettingError
from .intervals import Z95

PERFORMANCE_CAUTION = (
    "These figures summarise the model on the review data only; they are not the model's "
    "validation, which needs data the model never saw, drawn from the population it serves.")

ROW_SUM_TOLERANCE = 1e-3  # how far a row of probabilities may sum from 1


@dataclass(frozen=True)
class ReliabilityBin:
    """One non-empty equal-width bin of predicted probability (or confidence).

    ``lower`` and ``upper`` are the bin's edges; a value on an inner edge counts in the lower
    bin, as in scikit-learn's ``calibration_curve(strategy="uniform")``.
    """

    lower: float
    upper: float
    count: int
    mean_predicted: float
    observed_share: float

    def to_dict(self) -> dict:
        return {"lower": self.lower, "upper": self.upper, "count": self.count,
                "mean_predicted": self.mean_predicted, "observed_share": self.observed_share}


@dataclass
class PerformanceResult:
    """The model's performance on the review data.

    Attributes
    ----------
    n_rows : int
    classes : list of str
        In the order of the probability columns.
    positive_class : str or None
        ``classes[1]`` for two classes, None otherwise.
    roc_auc : float or None
        Two classes: the AUC of the positive class's probability. More: the macro one-vs-rest
        AUC. None when a class has no rows (``roc_auc_note`` says which).
    roc_auc_interval : (float, float) or None
        95% interval; None when it cannot be computed (``roc_auc_note`` says why).
    roc_auc_method : str or None
        ``"DeLong"`` or ``"bootstrap"``.
    roc_auc_variance : float or None
        DeLong's variance of the AUC (two classes).
    roc_auc_resamples : int or None
        Bootstrap resamples used (those that hold every class).
    roc_auc_note : str or None
        Why the AUC or its interval is missing.
    brier, brier_definition : float, str
    reliability : list of ReliabilityBin
    reliability_definition : str
        What the reliability table bins and what it compares.
    confusion : ndarray of int, shape (K, K)
        Rows are the true class, columns the predicted class, in ``classes`` order.
    accuracy : float
    caution : str
    """

    n_rows: int
    classes: list[str]
    positive_class: str | None
    roc_auc: float | None
    roc_auc_interval: tuple[float, float] | None
    roc_auc_method: str | None
    roc_auc_variance: float | None
    roc_auc_resamples: int | None
    roc_auc_note: str | None
    brier: float
    brier_definition: str
    reliability: list[ReliabilityBin]
    reliability_definition: str
    confusion: np.ndarray
    accuracy: float
    caution: str = field(default=PERFORMANCE_CAUTION)

    def to_dict(self) -> dict:
        interval = self.roc_auc_interval
        return {"kind": "model_performance", "n_rows": self.n_rows,
                "classes": list(self.classes), "positive_class": self.positive_class,
                "roc_auc": self.roc_auc,
                "roc_auc_interval": None if interval is None else [interval[0], interval[1]],
                "roc_auc_method": self.roc_auc_method,
                "roc_auc_variance": self.roc_auc_variance,
                "roc_auc_resamples": self.roc_auc_resamples,
                "roc_auc_note": self.roc_auc_note,
                "brier": self.brier, "brier_definition": self.brier_definition,
                "reliability": [b.to_dict() for b in self.reliability],
                "reliability_definition": self.reliability_definition,
                "confusion": self.confusion.tolist(), "accuracy": self.accuracy,
                "caution": self.caution}

    def text(self) -> str:
        """Plain lines: the figures, a note on the interval if any, then the caution."""
        name = "ROC AUC" if len(self.classes) == 2 else "Macro one-vs-rest ROC AUC"
        rows = f"{self.n_rows:,} rows"
        if self.roc_auc is None:
            auc = f"{name} not available ({self.roc_auc_note}); on {rows}"
        elif self.roc_auc_interval is None:
            auc = f"{name} {self.roc_auc:.3f} (no interval: {self.roc_auc_note}) on {rows}"
        else:
            low, high = self.roc_auc_interval
            how = ("DeLong" if self.roc_auc_method == "DeLong"
                   else f"bootstrap over rows, {self.roc_auc_resamples:,} resamples")
            auc = (f"{name} {self.roc_auc:.3f} (95% interval {low:.3f} to {high:.3f}, {how}) "
                   f"on {rows}")
        brier = "Brier score" if len(self.classes) == 2 else "multi-class Brier score"
        lines = [f"{auc}; {brier} {self.brier:.3f}; accuracy {100 * self.accuracy:.1f}% at the "
                 f"model's own rule (largest probability)."]
        if self.roc_auc_interval is not None and self.roc_auc_note:
            lines.append(f"Note: {self.roc_auc_note}.")
        return "\n".join([*lines, self.caution])


def model_performance(y_true, proba, classes, *, seed: int = 0, n_boot: int = 1000,
                      bins: int = 10) -> PerformanceResult:
    """Summarise a classifier's performance on rows that have the target.

    Parameters
    ----------
    y_true : array-like of shape (n,)
        True labels, each one of ``classes``.
    proba : array-like of shape (n, K)
        Predicted probabilities, columns in the order of ``classes``; rows sum to 1.
    classes : sequence of length K >= 2
        The model's classes (e.g. ``model.classes_``); for two classes ``classes[1]`` is the
        positive class.
    seed, n_boot : int
        The bootstrap of the AUC interval for more than two classes.
    bins : int
        Equal-width bins of the reliability table.

    Raises
    ------
    DataError
        On mismatched lengths, missing values, labels outside ``classes``, probabilities
        outside 0 to 1 or rows that do not sum to 1, fewer than 2 rows.
    SettingError
        On ``n_boot`` or ``bins`` below 1.
    """
    for name, value in (("n_boot", n_boot), ("bins", bins)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise SettingError(f"{name} must be a whole number of at least 1 (got {value!r}).")
    names, y, p = _checked(y_true, proba, classes)
    n, k = p.shape
    predicted = np.argmax(p, axis=1)
    confusion = np.bincount(y * k + predicted, minlength=k * k).reshape(k, k)
    accuracy = float(np.trace(confusion) / n)
    counts = np.bincount(y, minlength=k)
    absent = [names[c] for c in range(k) if counts[c] == 0]

    auc = interval = method = variance = resamples = note = None
    if absent:
        note = ("the review data has no rows of class " + ", ".join(repr(a) for a in absent)
                + "; the AUC needs rows of every class")
    elif k == 2:
        method = "DeLong"
        auc, var = _delong(p[:, 1], y == 1)
        if math.isnan(var):
            note = "DeLong's interval needs at least two rows of each class"
        else:
            variance = var
            half = Z95 * math.sqrt(var)
            interval = (max(0.0, auc - half), min(1.0, auc + half))
            if var == 0:
                note = ("the classes do not overlap in the review data, so DeLong's interval "
                        "has no width and understates the uncertainty")
    else:
        method = "bootstrap"
        auc = _macro_ovr_auc(p, y)
        interval, resamples = _bootstrap_interval(p, y, np.random.default_rng(seed), n_boot)
        if interval is None:
            note = "no bootstrap resample held rows of every class"

    if k == 2:
        brier = float(np.mean((p[:, 1] - (y == 1)) ** 2))
        brier_definition = (f"mean squared difference between the probability of "
                            f"{names[1]!r} and the outcome (1 if {names[1]!r}, else 0); "
                            f"0 is best, 1 worst")
        scores, hits = p[:, 1], y == 1
        reliability_definition = (f"probability of {names[1]!r} in {bins} equal-width bins "
                                  f"versus the observed share of {names[1]!r}")
    else:
        onehot = np.eye(k)[y]
        brier = float(np.mean(np.sum((p - onehot) ** 2, axis=1)))
        brier_definition = ("multi-class (Brier 1950): mean over rows of the sum over classes "
                            "of (probability - outcome)^2, outcome 1 for the true class and 0 "
                            "for the others; 0 is best, 2 worst")
        scores, hits = p.max(axis=1), predicted == y
        reliability_definition = (f"confidence calibration: the largest probability in {bins} "
                                  f"equal-width bins versus the observed share of rows whose "
                                  f"largest-probability class is right")

    return PerformanceResult(
        n_rows=n, classes=names, positive_class=names[1] if k == 2 else None,
        roc_auc=None if auc is None else float(auc), roc_auc_interval=interval,
        roc_auc_method=method, roc_auc_variance=variance, roc_auc_resamples=resamples,
        roc_auc_note=note, brier=brier, brier_definition=brier_definition,
        reliability=_reliability(scores, hits, bins),
        reliability_definition=reliability_definition, confusion=confusion,
        accuracy=accuracy)


def _checked(y_true, proba, classes) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Class names, labels as class indices and probabilities as floats, or a DataError."""
    class_list = np.asarray(classes, dtype=object).ravel().tolist()
    k = len(class_list)
    if k < 2:
        raise DataError(f"the model has {k} class(es); give at least two classes, in the "
                        f"order of the probability columns.")
    index = {}
    for c, label in enumerate(class_list):
        if label in index:
            raise DataError(f"the class {label!r} appears twice in classes; give each class once.")
        index[label] = c
    labels = np.asarray(y_true, dtype=object)
    if labels.ndim != 1:
        raise DataError(f"y_true has shape {labels.shape}; give one label per row (1-D).")
    n = len(labels)
    if n < 2:
        raise DataError(f"there are {n} row(s) with a target; give at least 2 rows.")
    try:
        p = np.asarray(proba, dtype=float)
    except (TypeError, ValueError):
        raise DataError("proba could not be read as numbers; give an array of predicted "
                        "probabilities, one row per label and one column per class.") from None
    if p.ndim != 2 or p.shape[1] != k:
        raise DataError(f"proba has shape {p.shape}, but there are {k} classes; give one "
                        f"column of probabilities per class, in the order of classes.")
    if p.shape[0] != n:
        raise DataError(f"y_true has {n:,} rows but proba has {p.shape[0]:,}; give one row "
                        f"of probabilities per label, in the same order.")
    if not np.isfinite(p).all():
        bad = int(np.sum(~np.isfinite(p).all(axis=1)))
        raise DataError(f"proba has missing or infinite values (NaN) in {bad:,} row(s); "
                        f"remove those rows or predict them again.")
    if p.min() < 0 or p.max() > 1:
        raise DataError("proba has values outside 0 to 1; give predicted probabilities "
                        "(e.g. predict_proba), not scores or log-odds.")
    off = np.abs(p.sum(axis=1) - 1) > ROW_SUM_TOLERANCE
    if off.any():
        raise DataError(f"{int(off.sum()):,} row(s) of proba do not sum to 1 (first: row "
                        f"{int(np.argmax(off))}); give every class's probability, one column "
                        f"per class.")
    y = np.array([index.get(v, -1) for v in labels.tolist()], dtype=np.intp)
    if (y < 0).any():
        unknown = labels[y < 0].tolist()
        missing = sum(1 for v in unknown if v is None or (isinstance(v, float) and v != v))
        if missing:
            raise DataError(f"y_true has {missing:,} missing value(s) (None or NaN); remove "
                            f"those rows or fill in their target.")
        shown = ", ".join(list(dict.fromkeys(repr(v) for v in unknown))[:5])
        raise DataError(f"y_true has {len(unknown):,} label(s) that are not among the model's "
                        f"classes ({shown}); the classes are "
                        f"{', '.join(repr(c) for c in class_list)}. Check the target column "
                        f"and that its values are written as the model's classes.")
    return [str(c) for c in class_list], y, p


def _midranks(x: np.ndarray) -> np.ndarray:
    """1-based ranks of ``x``, tied values sharing the mean of their ranks (Sun & Xu 2014)."""
    order = np.argsort(x, kind="mergesort")
    xs = x[order]
    starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])
    ends = np.r_[starts[1:], len(x)]
    ranks = np.empty(len(x))
    ranks[order] = np.repeat((starts + ends + 1) / 2.0, ends - starts)
    return ranks


def _auc(scores: np.ndarray, positive: np.ndarray) -> float:
    """The Mann-Whitney AUC (ties count one half), from midranks."""
    m = int(positive.sum())
    n = len(scores) - m
    return float((_midranks(scores)[positive].sum() - m * (m + 1) / 2) / (m * n))


def _delong(scores: np.ndarray, positive: np.ndarray) -> tuple[float, float]:
    """The AUC and DeLong's variance of it (NaN with fewer than two rows of a class)."""
    x, y = scores[positive], scores[~positive]
    m, n = len(x), len(y)
    tz = _midranks(np.concatenate([x, y]))
    auc = (tz[:m].sum() - m * (m + 1) / 2) / (m * n)
    if m < 2 or n < 2:
        return float(auc), math.nan
    v10 = (tz[:m] - _midranks(x)) / n        # each positive's share of negatives below it
    v01 = 1.0 - (tz[m:] - _midranks(y)) / m  # each negative's share of positives above it
    return float(auc), float(np.var(v10, ddof=1) / m + np.var(v01, ddof=1) / n)


def _macro_ovr_auc(p: np.ndarray, y: np.ndarray) -> float:
    """The unweighted mean over classes of each class's AUC against the rest."""
    return float(np.mean([_auc(p[:, c], y == c) for c in range(p.shape[1])]))


def _bootstrap_interval(p, y, rng, n_boot) -> tuple[tuple[float, float] | None, int]:
    """Percentile 95% interval of the macro AUC over row resamples holding every class."""
    n, k = p.shape
    values = []
    for _ in range(n_boot):
        rows = rng.integers(0, n, size=n)
        yb = y[rows]
        if np.bincount(yb, minlength=k).min() == 0:
            continue
        values.append(_macro_ovr_auc(p[rows], yb))
    if not values:
        return None, 0
    low, high = np.percentile(values, [2.5, 97.5])
    return (float(low), float(high)), len(values)


def _reliability(scores: np.ndarray, hits: np.ndarray, bins: int) -> list[ReliabilityBin]:
    """Non-empty equal-width bins of ``scores`` (calibration_curve's uniform binning)."""
    edges = np.linspace(0.0, 1.0, bins + 1)
    ids = np.searchsorted(edges[1:-1], scores)
    total = np.bincount(ids, minlength=bins)
    sums = np.bincount(ids, weights=scores, minlength=bins)
    true = np.bincount(ids, weights=hits.astype(float), minlength=bins)
    return [ReliabilityBin(float(edges[b]), float(edges[b + 1]), int(total[b]),
                           float(sums[b] / total[b]), float(true[b] / total[b]))
            for b in range(bins) if total[b]]
