"""A Review: one review's inputs, settings, results and sign-off; runs the steps; saves and opens.

The same object drives the command line, the window and the report. Each step stores a plain
result object; a saved review (a folder with ``review.json`` and an arrays file) reopens
with identical results and nothing recomputed.
"""

from __future__ import annotations

import datetime as _dt
import gzip
import json
import tempfile
import threading
import time
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

import numpy as np

from .errors import CancelledError, DataError, GrovewiseError, SettingError  # noqa: F401 (re-exported)
from .forest import Forest
from .hashing import sha256_of
from .loaders import Dataset, from_estimator, load_data, load_native
from .loaders.exactness import ExactnessCheck, check_exactness
from .report.atomic import write_atomic
from .storage import decode, encode, open_saved, tidy_saved_folder, write_arrays_file
from .progress import Progress, StepMeter, check_cancel
from .sampling import stratified_rows
from .summary import ModelSummary, summarize
from .traversal import use_threads
from .surrogate.mimic import READABLE_DEFAULTS

STEPS = ("intake", "anatomy", "proximity", "surrogate", "cases", "second_model", "stability")
REQUIRES = {"intake": (), "anatomy": ("intake",), "proximity": ("intake",),
            "surrogate": ("intake",), "cases": ("intake", "surrogate"),
            "second_model": ("intake", "surrogate"), "stability": ("intake", "surrogate")}
# The steps every report needs; the others add their sections when they have run.
REPORT_STEPS = ("intake", "anatomy", "proximity", "surrogate", "cases")
# Steps made from the surrogate's tree: a new surrogate leaves their results out of date.
FROM_SURROGATE = ("second_model", "stability")
DECISIONS = ("pending", "approve", "approve_with_conditions", "reject")
DECISION_LABELS = {"pending": "not yet decided", "approve": "approve",
                   "approve_with_conditions": "approve with conditions", "reject": "reject"}
REVIEW_FILE = "review.json"
FORMAT = "grovewise-review/1"
PAIRS_KEPT = 2000  # closest pairs kept with the results for the Proximity page and report

PREDICT_BLOCK_ROWS = 20_000  # rows predicted at a time: progress, cancel, flat memory


@dataclass
class ReviewInputs:
    """What is reviewed: the model file, the review data, and how the holdout is made."""

    model: Path
    data: Path
    target: str | None = None
    holdout: Path | None = None
    trusted: bool = False
    # a second model over the same features (a retrained version, a challenger), reviewed
    # beside the first by the second_model step
    second_model: Path | None = None

    def __post_init__(self) -> None:
        self.model = Path(self.model)
        self.data = Path(self.data)
        self.holdout = None if self.holdout in (None, "") else Path(self.holdout)
        self.second_model = None if self.second_model in (None, "") else Path(self.second_model)


@dataclass
class ReviewSettings:
    """Every setting of a review; the manifest records them all.

    ``max_features_per_split`` and ``alpha`` default to the surrogate's readable-rule
    defaults (``grovewise.surrogate.READABLE_DEFAULTS``: at most two features per split, a
    small price per feature used).
    """

    depth: int = 2
    max_features_per_split: int | None = READABLE_DEFAULTS["max_features_per_split"]
    alpha: float = READABLE_DEFAULTS["alpha"]
    # Multi-feature splits are kept only when they agree on significantly more training rows
    # than the best axis-aligned candidate, at this level (None: the lower objective wins).
    oblique_level: float | None = READABLE_DEFAULTS["oblique_level"]
    proximity_threshold: float = 0.9
    time_limit: float = 60.0
    node_limit: int | None = None
    holdout_share: float = 0.3
    seed: int = 0
    flags: dict[str, str] = field(default_factory=dict)
    # Columns of the data (model inputs or not) whose groups get their own fidelity, beside
    # every feature flagged protected (grovewise.analysis.group_fidelity).
    group_columns: list[str] = field(default_factory=list)
    permutation_repeats: int = 5
    # Rows for the steps whose cost grows fastest with the data; 0 means every row. A larger
    # data set is sampled (seeded, stratified by the predicted class) and the report says so.
    permutation_rows: int = 5_000
    exactness_rows: int = 50_000
    proximity_rows: int = 3_000
    # The effects (grovewise.effects_summary): the rows their summaries are computed on, and
    # the first rows of those that the interactions use (they cost a walk per feature).
    effects_rows: int = 1_000
    interaction_rows: int = 200
    # Stability of the rules (grovewise.surrogate.stability): the surrogate and the greedy tree
    # re-fitted on this many seeded bootstrap resamples of the training rows (0 leaves the
    # step out), each with this time limit (None: the surrogate's time limit / (2 x resamples),
    # at least 1 s, so that the step costs at most half the solve on one core).
    stability_resamples: int = 10
    stability_time_limit: float | None = None
    # Weak spots (grovewise.weak_spots): when a leaf, the fit or the data deserve a warning.
    leaf_min_holdout_rows: int = 30
    leaf_fidelity_floor: float = 0.8
    overfit_gap: float = 0.05
    near_perfect_target: float = 0.99

    def validate(self) -> "ReviewSettings":
        """Raise a SettingError naming the first setting out of range."""
        checks = [
            ("depth", _whole(self.depth) and 1 <= self.depth <= 4,
             "a whole number from 1 to 4"),
            ("max_features_per_split", self.max_features_per_split is None or (
                _whole(self.max_features_per_split)
                and self.max_features_per_split >= 1), "a whole number of at least 1, or none"),
            ("alpha", _number(self.alpha) and self.alpha >= 0, "zero or more"),
            ("oblique_level", self.oblique_level is None or (
                _number(self.oblique_level) and 0 < self.oblique_level <= 1),
             "above 0 and at most 1, or none"),
            ("proximity_threshold", _number(self.proximity_threshold)
             and 0 < self.proximity_threshold <= 1, "above 0 and at most 1"),
            ("time_limit", _number(self.time_limit) and self.time_limit > 0,
             "more than 0 seconds"),
            ("node_limit", self.node_limit is None or (_whole(self.node_limit)
                                                       and self.node_limit >= 1),
             "a whole number of at least 1, or none"),
            ("holdout_share", _number(self.holdout_share) and 0 <= self.holdout_share < 0.9,
             "from 0 to below 0.9"),
            # numpy's RandomState and scikit-learn's random_state take seeds below 2**32
            ("seed", _whole(self.seed) and self.seed < 2**32,
             "a whole number from 0 to 4,294,967,295"),
            ("group_columns", isinstance(self.group_columns, (list, tuple)) and all(
                isinstance(c, str) and c for c in self.group_columns),
             "a list of column names"),
            ("permutation_repeats", _whole(self.permutation_repeats)
             and self.permutation_repeats >= 1, "at least 1"),
            ("permutation_rows", _whole(self.permutation_rows) and (
                self.permutation_rows == 0 or self.permutation_rows >= 10),
             "0 (every row) or a whole number of at least 10"),
            ("exactness_rows", _whole(self.exactness_rows) and (
                self.exactness_rows == 0 or self.exactness_rows >= 10),
             "0 (every row) or a whole number of at least 10"),
            ("proximity_rows", _whole(self.proximity_rows) and 2 <= self.proximity_rows
             <= 20_000, "a whole number from 2 to 20,000"),
            ("effects_rows", _whole(self.effects_rows) and 10 <= self.effects_rows <= 100_000,
             "a whole number from 10 to 100,000"),
            ("interaction_rows", _whole(self.interaction_rows) and 1 <= self.interaction_rows
             <= 10_000, "a whole number from 1 to 10,000"),
            ("stability_resamples", _whole(self.stability_resamples) and (
                self.stability_resamples == 0 or 2 <= self.stability_resamples <= 1000),
             "0 (no stability step) or a whole number from 2 to 1,000"),
            ("stability_time_limit", self.stability_time_limit is None or (
                _number(self.stability_time_limit) and self.stability_time_limit > 0),
             "more than 0 seconds, or none"),
            ("leaf_min_holdout_rows", _whole(self.leaf_min_holdout_rows), "0 or more"),
            ("leaf_fidelity_floor", _number(self.leaf_fidelity_floor)
             and 0 <= self.leaf_fidelity_floor <= 1, "from 0 to 1"),
            ("overfit_gap", _number(self.overfit_gap) and 0 <= self.overfit_gap <= 1,
             "from 0 to 1"),
            ("near_perfect_target", _number(self.near_perfect_target)
             and 0 < self.near_perfect_target <= 1, "above 0 and at most 1"),
        ]
        for name, ok, what in checks:
            if not ok:
                raise SettingError(f"setting {name}={getattr(self, name)!r} is out of range; "
                                   f"give {what}.")
        return self

    def stability_seconds(self) -> float:
        """Each bootstrap re-fit's time limit (see ``stability_time_limit``)."""
        if self.stability_time_limit is not None:
            return float(self.stability_time_limit)
        return max(1.0, float(self.time_limit) / (2 * max(1, int(self.stability_resamples))))


def _whole(v) -> bool:
    return isinstance(v, (int, np.integer)) and not isinstance(v, bool) and v >= 0


def _number(v) -> bool:
    """A finite real number (not a bool, not text)."""
    if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)):
        return False
    return isinstance(v, (int, np.integer)) or bool(np.isfinite(v))


@dataclass
class Reviewer:
    """The sign-off: who reviewed, what they decided, on which conditions, and notes."""

    name: str = ""
    role: str = ""
    decision: str = "pending"
    conditions: str = ""
    notes: str = ""
    signed_at: str = ""

    def validate(self) -> "Reviewer":
        if self.decision not in DECISIONS:
            raise SettingError(f"decision {self.decision!r} is not known; use one of "
                               f"{', '.join(DECISIONS)}.")
        if self.decision == "approve_with_conditions" and not self.conditions.strip():
            raise SettingError("the decision 'approve with conditions' needs the conditions "
                               "written out; fill in the conditions.")
        return self


@dataclass
class IntakeResult:
    """The files, their hashes, the model summary and the exactness proof."""

    model_sha256: str
    data_sha256: str
    holdout_sha256: str | None
    summary: ModelSummary
    exactness: ExactnessCheck
    data_summary: dict
    notes: list[str]
    train_rows: np.ndarray  # indices into the review data used to fit the surrogate
    holdout_rows: np.ndarray  # indices held out (empty when a holdout file is given)
    holdout_source: str  # "split", "file" or "none"
    # the model's own performance on the review data when it has the target (a summary,
    # not a validation: grovewise.analysis.performance); None without a target
    performance: object = None


@dataclass
class AnatomyResult:
    """How the ensemble uses its features."""

    depth_usage: dict  # weight name -> DepthUsage
    position_usage: object  # PositionUsage
    thresholds: object  # ThresholdProfiles
    importance: object  # ImportanceComparison
    flags: object  # FlagReport
    per_class: list | None = None  # DepthUsage per class for multi-class boosting


@dataclass
class ProximityResult:
    """Which samples the ensemble treats alike (Breiman's proximity)."""

    threshold: float
    definition: str
    rows: np.ndarray  # the review-data rows proximity was computed on
    counts: object  # PairCounts
    pairs: object  # ProximityPairs at the threshold, closest first, at most PAIRS_KEPT
    n_pairs_at_threshold: int
    sample: dict | None = None  # how ``rows`` were drawn (grovewise.sampling.RowSample)


@dataclass
class CasesResult:
    """Row by row: the ensemble's answer, the surrogate's and the greedy tree's."""

    proba: np.ndarray
    ensemble: np.ndarray  # class index
    surrogate: np.ndarray
    surrogate_leaf: np.ndarray
    greedy: np.ndarray
    split: np.ndarray  # 0 train, 1 holdout (review data), 2 holdout file
    disagreements: np.ndarray  # row indices where the surrogate differs from the ensemble
    fill_values: np.ndarray  # per feature: what a missing value is for the surrogate
    effects: object = None  # grovewise.effects_summary.EffectsResult

    @property
    def agreement(self) -> float:
        return float(np.mean(self.surrogate == self.ensemble)) if self.ensemble.size else 1.0

    def confident_disagreements(self, k: int) -> np.ndarray:
        """The rows (at most ``k``) where the surrogate disagrees with the ensemble and the
        ensemble is most confident, most confident first."""
        conf = self.proba[self.disagreements, self.ensemble[self.disagreements]]
        return self.disagreements[np.argsort(-conf, kind="stable")[:k]]


def proba_in_blocks(forest: Forest, X: np.ndarray, meter: StepMeter | None = None
                    ) -> np.ndarray:
    """``forest.predict_proba(X)`` a block of rows at a time, counted on ``meter``."""
    out = np.empty((X.shape[0], forest.n_classes))
    for s in range(0, X.shape[0], PREDICT_BLOCK_ROWS):
        block = X[s:s + PREDICT_BLOCK_ROWS]
        out[s:s + block.shape[0]] = forest.predict_proba(block)
        if meter is not None:
            meter.advance(block.shape[0])
    return out


def _warm_up_surrogate() -> None:
    # only the sweep: compiling more here, beside a running window, holds the interpreter in
    # long compiler calls (the window's stall tests measured 0.48 s against 0.25 s)
    from .surrogate import sweep_kernel

    sweep_kernel.warm_up()


class Review:
    """One review: inputs, settings, results of every step, and the reviewer's sign-off."""

    def __init__(self, inputs: ReviewInputs, settings: ReviewSettings | None = None,
                 reviewer: Reviewer | None = None) -> None:
        self.inputs = inputs
        self.settings = (settings or ReviewSettings()).validate()
        self.reviewer = reviewer or Reviewer()
        self.forest: Forest | None = None
        self.data: Dataset | None = None
        self.holdout_data: Dataset | None = None
        self.results: dict[str, object] = {}
        self.timings: dict[str, float] = {}
        self.program_mps: bytes | None = None  # gzip of the surrogate's program, as MPS
        self.created_at = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        self.jobs: int | None = None  # cores for the steps (None: all); never changes a result
        self._lock = threading.Lock()

    # ------------------------------------------------------------------ access
    @property
    def intake(self) -> IntakeResult | None:
        return self.results.get("intake")

    @property
    def anatomy(self) -> AnatomyResult | None:
        return self.results.get("anatomy")

    @property
    def proximity(self) -> ProximityResult | None:
        return self.results.get("proximity")

    @property
    def surrogate(self):
        """The surrogate step's result (``mimic``'s result object)."""
        return self.results.get("surrogate")

    @property
    def cases(self) -> CasesResult | None:
        return self.results.get("cases")

    @property
    def second_model(self):
        """The second_model step's result (a ``SecondModel``); None before it ran or when
        no second model is given."""
        return self.results.get("second_model")

    @property
    def stability(self):
        """The stability step's result (a ``RuleStability``); None before it ran or when
        the settings leave it out."""
        return self.results.get("stability")

    def done(self, step: str) -> bool:
        return step in self.results

    def use_checked(self, checked) -> "Review":
        """Take the data files as the checks before the work read them
        (:func:`grovewise.preflight.check_review`), so the intake step does not read them
        a second time. They must be the checks of this review's inputs and settings."""
        self._checked = checked
        return self

    # ------------------------------------------------------------------ running
    def run(self, steps=STEPS, progress: Progress | None = None,
            cancel: threading.Event | None = None) -> "Review":
        """Run ``steps`` in order. A failing or cancelled step leaves earlier results intact."""
        if "surrogate" in steps and not self.done("surrogate"):
            # compile the surrogate's kernels while the first steps run, not on its clock
            threading.Thread(target=_warm_up_surrogate, name="compile-sweep",
                             daemon=True).start()
        for step in steps:
            if step not in STEPS:
                raise SettingError(f"step {step!r} is not known; steps: {', '.join(STEPS)}")
            if cancel is not None and cancel.is_set():
                raise CancelledError(f"cancelled before the {step} step; earlier results kept.")
            self.run_step(step, progress=progress, cancel=cancel)
        return self

    def run_step(self, step: str, progress: Progress | None = None,
                 cancel: threading.Event | None = None) -> object:
        """Run one step (its prerequisites must have run)."""
        report = progress or (lambda *_: None)
        missing = [s for s in REQUIRES[step] if s not in self.results]
        if missing:
            raise SettingError(f"the {step} step needs the {', '.join(missing)} step first.")
        report(step, 0.0, f"{step}: starting")
        start = time.perf_counter()
        runner = getattr(self, f"_run_{step}")
        use_threads(self.jobs)
        result = runner(report, cancel)
        with self._lock:
            self.results[step] = result
            self.timings[step] = time.perf_counter() - start
            if step == "intake":  # new inputs: later results no longer apply
                for later in STEPS[1:]:
                    self.results.pop(later, None)
            if step == "surrogate":  # a new tree: what was made from the old one goes
                for later in FROM_SURROGATE:
                    self.results.pop(later, None)
        report(step, 1.0, f"{step}: done in {self.timings[step]:.1f} s")
        return result

    def _run_intake(self, report: Progress, cancel: threading.Event | None) -> IntakeResult:
        inp, st = self.inputs, self.settings
        report("intake", 0.02, f"reading the model {inp.model.name}")
        native = load_native(inp.model, trusted=inp.trusted)
        forest = from_estimator(native)
        check_cancel(cancel, "intake")
        checked, self._checked = getattr(self, "_checked", None), None  # used once
        if checked is not None:  # the checks read the data already: not twice
            data, holdout = checked.data, checked.holdout
        else:
            report("intake", 0.15, f"model read; reading the review data {inp.data.name}")
            data = load_data(inp.data, forest=forest, target=inp.target,
                             groups=st.group_columns)
            holdout = None
            if inp.holdout is not None:
                holdout = load_data(inp.holdout, forest=forest, target=inp.target,
                                    groups=st.group_columns)
        meter = StepMeter(report, "intake", data.X.shape[0], "rows predicted", cancel=cancel,
                          start=0.3, span=0.35)
        proba = proba_in_blocks(forest, data.X, meter)
        predicted = np.argmax(proba, axis=1)
        sample = stratified_rows(predicted, data.X.shape[0], st.exactness_rows, st.seed)
        meter = StepMeter(report, "intake", sample.size, "rows checked against the library's "
                          "own predictions", cancel=cancel, start=0.65, span=0.3)
        exactness = check_exactness(forest, native, data.X[sample.rows],
                                    progress=lambda done, _total: meter.advance(
                                        done - meter.done), sample=sample.to_dict())
        if not exactness.passed:
            raise GrovewiseError(f"{inp.model}: Grovewise does not reproduce this model's "
                                 f"predictions on {inp.data}: {exactness.text()}. The review "
                                 "stops here; report the model type and library versions.")
        train, held = self._split(predicted, holdout is None)
        performance = self._performance(data, forest, proba, report)
        from .analysis.flags import check_flags

        st.flags = check_flags(forest.feature_names, st.flags)
        self.forest, self.data, self.holdout_data = forest, data, holdout
        self._proba = proba
        return IntakeResult(
            model_sha256=sha256_of(inp.model), data_sha256=data.sha256,
            holdout_sha256=None if holdout is None else holdout.sha256,
            summary=summarize(forest, data.X, predicted=predicted), exactness=exactness,
            data_summary=data.to_dict(), notes=list(data.notes),
            train_rows=train, holdout_rows=held,
            holdout_source="file" if holdout is not None else
            ("split" if held.size else "none"), performance=performance)

    def _performance(self, data, forest, proba, report):
        """The model's performance on the review data when the target is there; a target
        whose labels are not the model's classes gets a note instead (the review goes on)."""
        if data.y is None:
            return None
        from .analysis.performance import model_performance

        n, K = proba.shape
        report("intake", 0.97, f"the model's own performance on {n:,} rows")
        # the bootstrap (more than two classes) costs n_boot sorts of every row
        n_boot = int(np.clip(2e7 / max(n * K, 1), 100, 1000))
        try:
            return model_performance(data.y, proba, forest.classes_, seed=self.settings.seed,
                                     n_boot=n_boot)
        except DataError as exc:
            data.notes.append(f"The model's performance was not computed: {exc}")
            return None

    def _split(self, predicted: np.ndarray, split: bool) -> tuple[np.ndarray, np.ndarray]:
        """Train and holdout rows, stratified by the ensemble's predicted class (seeded)."""
        n = predicted.shape[0]
        share = self.settings.holdout_share
        if not split or share == 0 or n < 10:
            return np.arange(n), np.zeros(0, dtype=np.int64)
        rng = np.random.default_rng(self.settings.seed)
        held = []
        for k in np.unique(predicted):
            rows = np.flatnonzero(predicted == k)
            take = int(round(share * rows.size))
            held.append(rng.permutation(rows)[:take])
        held_rows = np.sort(np.concatenate(held)).astype(np.int64)
        train = np.setdiff1d(np.arange(n), held_rows).astype(np.int64)
        return train, held_rows

    def predicted_proba(self) -> np.ndarray:
        """The ensemble's probabilities on the review data (kept from the intake step)."""
        proba = getattr(self, "_proba", None)
        if proba is None or proba.shape[0] != self.data.X.shape[0]:
            proba = self._proba = proba_in_blocks(self.forest, self.data.X)
        return proba

    def rows_proba(self) -> np.ndarray:
        """The ensemble's probabilities on every row the surrogate sees (the review data,
        then any holdout file), computed once."""
        if self.holdout_data is None:
            return self.predicted_proba()
        proba = getattr(self, "_rows_proba", None)
        if proba is None or proba.shape[0] != self._surrogate_rows()[0].shape[0]:
            proba = self._rows_proba = np.vstack(
                [self.predicted_proba(), proba_in_blocks(self.forest, self.holdout_data.X)])
        return proba

    def _run_anatomy(self, report: Progress, cancel: threading.Event | None) -> AnatomyResult:
        from .analysis.flags import flag_report
        from .analysis.importance import (importance_comparison, impurity_importance,
                                          permutation_importance_result)
        from .analysis.thresholds import threshold_profiles
        from .analysis.usage import depth_usage, position_usage

        forest, X, st = self.forest, self.data.X, self.settings
        report("anatomy", 0.02, "usage by depth and position, threshold profiles")
        usage = {w: depth_usage(forest, weight=w) for w in ("count", "gain", "cover")}
        per_class = depth_usage(forest, per_class=True) if forest.n_outputs > 1 and \
            forest.link == "softmax" else None
        thresholds = threshold_profiles(forest, X)
        sample = stratified_rows(np.argmax(self.predicted_proba(), axis=1), X.shape[0],
                                 st.permutation_rows, st.seed)
        passes = 1 + forest.n_features * st.permutation_repeats
        report("anatomy", 0.1, f"permutation importance on {sample.describe()}")
        meter = StepMeter(report, "anatomy", passes, "permutation passes", cancel=cancel,
                          start=0.1, span=0.88)
        perm = permutation_importance_result(forest, X[sample.rows], y=None,
                                             n_repeats=st.permutation_repeats,
                                             random_state=st.seed, meter=meter)
        perm.sample = sample.to_dict()
        impurity = impurity_importance(forest)
        comparison = importance_comparison(impurity, perm)
        return AnatomyResult(
            depth_usage=usage, position_usage=position_usage(forest, max_depth=3),
            thresholds=thresholds, importance=comparison,
            flags=flag_report(forest, st.flags, comparison), per_class=per_class)

    def _run_proximity(self, report: Progress, cancel: threading.Event | None
                       ) -> ProximityResult:
        from .analysis.proximity import definition, pairs_above_thresholds, proximity_pairs

        X, st = self.data.X, self.settings
        sample = stratified_rows(np.argmax(self.predicted_proba(), axis=1), X.shape[0],
                                 st.proximity_rows, st.seed)
        rows = sample.rows
        Xp = X[rows]
        report("proximity", 0.05, f"pairs sharing leaves on {sample.describe()}")
        counts = pairs_above_thresholds(self.forest, Xp)
        check_cancel(cancel, "proximity")
        report("proximity", 0.5, "pairs at the threshold")
        pairs = proximity_pairs(self.forest, Xp, st.proximity_threshold)
        n_pairs = len(pairs)
        if n_pairs > PAIRS_KEPT:
            keep = np.sort(np.argsort(-pairs.p, kind="stable")[:PAIRS_KEPT])
            pairs = replace(pairs, i=pairs.i[keep], j=pairs.j[keep], p=pairs.p[keep])
        return ProximityResult(threshold=float(st.proximity_threshold),
                               definition=definition(self.forest), rows=rows, counts=counts,
                               pairs=pairs, n_pairs_at_threshold=n_pairs,
                               sample=sample.to_dict())

    def _surrogate_rows(self) -> tuple[np.ndarray, np.ndarray]:
        """Every row the surrogate sees (review data, then any holdout file), and which of
        them are held out."""
        X = self.data.X
        if self.holdout_data is None:
            return X, self.intake.holdout_rows
        return (np.vstack([X, self.holdout_data.X]),
                np.arange(X.shape[0], X.shape[0] + self.holdout_data.X.shape[0]))

    def fill_values(self) -> np.ndarray:
        """Per feature, the value a missing entry takes for the surrogate: the median of the
        training rows, or for a categorical feature the most frequent code among them (the
        smallest on a tie); 0 for a feature missing on every training row. The surrogate is
        a tree of comparisons and cannot route a missing value itself."""
        X = self.data.X[self.intake.train_rows]
        categorical = getattr(self.forest, "categories", None) or {}
        with np.errstate(all="ignore"):
            present = ~np.isnan(X)
            out = np.zeros(X.shape[1])
            for j in range(X.shape[1]):
                col = X[present[:, j], j]
                if not col.size:
                    continue
                if j in categorical:
                    codes, counts = np.unique(col, return_counts=True)
                    out[j] = codes[int(np.argmax(counts))]
                else:
                    out[j] = np.median(col)
        return out

    def filled(self, X: np.ndarray) -> np.ndarray:
        """``X`` with missing values replaced by :meth:`fill_values`."""
        return np.where(np.isnan(X), self.fill_values()[None, :], X)

    def _run_surrogate(self, report: Progress, cancel: threading.Event | None):
        from .surrogate import mimic
        from .surrogate.solver import Cancel

        st = self.settings
        started = time.perf_counter()  # the time limit covers the whole step
        X, held = self._surrogate_rows()
        forbidden = [f for f, kind in st.flags.items() if kind == "forbidden"]
        stop = Cancel(cancel) if cancel is not None else None
        proba = self.rows_proba()

        def on_progress(info) -> None:
            elapsed = time.perf_counter() - started
            gap = "" if info.gap is None else f", gap {info.gap:.3f}"
            best = "" if info.incumbent is None else f", incumbent {info.incumbent:.5f}"
            bound = "" if info.bound is None else f", bound {info.bound:.5f}"
            note = f" ({info.note})" if getattr(info, "note", "") else ""
            frac = min(0.99, elapsed / max(st.time_limit, 1e-9))
            report("surrogate", frac, f"{info.stage}: {elapsed:.1f} s of {st.time_limit:g} s"
                   f"{best}{bound}{gap}{note}", info)

        report("surrogate", 0.0, f"preparing: proximity pairs among at most "
               f"{st.proximity_rows:,} training rows, feature usage by depth")

        with tempfile.TemporaryDirectory() as scratch:
            program = Path(scratch) / "program.mps"
            result = mimic(self.forest, self.filled(X), depth=st.depth,
                           proximity_threshold=st.proximity_threshold,
                           holdout=held if held.size else None,
                           max_features_per_split=st.max_features_per_split, alpha=st.alpha,
                           oblique_level=st.oblique_level, time_limit=st.time_limit,
                           node_limit=st.node_limit,
                           random_state=st.seed, forbidden_features=forbidden or None,
                           progress=on_progress, cancel=stop, mps_path=program, proba=proba,
                           proximity_rows=st.proximity_rows, started=started,
                           threads=1)  # HiGHS's answer changes with its threads; ours must not
            self.program_mps = gzip.compress(program.read_bytes(), compresslevel=1, mtime=0) \
                if program.is_file() else None
        result.group_fidelity = self._group_fidelity(result, X, proba)
        return result

    def _group_fidelity(self, result, X: np.ndarray, proba: np.ndarray) -> list:
        """The surrogate's, the greedy tree's and the exact axis tree's fidelity per group of
        every protected feature and every group column, on the holdout rows (the training
        rows without a holdout)."""
        from .analysis.group_fidelity import group_fidelity

        st = self.settings
        labels = self.forest.classes_[np.argmax(proba, axis=1)]
        filled = self.filled(X)
        agree = {"surrogate": result.surrogate.predict(filled) == labels,
                 "greedy": result.greedy.predict(filled) == labels}
        if getattr(result, "greedy_optimal", None) is not None:
            agree["optimal_axis"] = result.greedy_optimal.predict(filled) == labels
        rows = result.holdout_rows if result.holdout_rows.size else result.train_rows
        names = list(self.forest.feature_names)
        categories = getattr(self.forest, "categories", None) or {}
        out = []
        for feature, kind in st.flags.items():
            if kind != "protected" or feature not in names:
                continue
            j = names.index(feature)
            cats = categories.get(j)
            out.append(group_fidelity(X[:, j], agree, name=feature, rows=rows,
                                      categories=None if cats is None else dict(enumerate(cats))))
        for column in st.group_columns:
            values = self.data.group_values[column]
            if self.holdout_data is not None:
                values = np.concatenate([values, self.holdout_data.group_values[column]])
            out.append(group_fidelity(values, agree, name=column, rows=rows))
        return out

    def _run_second_model(self, report: Progress, cancel: threading.Event | None):
        """The second model beside the first: its feature usage, its classes on every row,
        and how well the first model's surrogate explains it (None without one)."""
        from .analysis.second_model import aligned_input, check_second, second_model

        path = self.inputs.second_model
        if path is None:
            report("second_model", 1.0, "second model: none given")
            return None
        report("second_model", 0.05, f"reading the second model {path.name}")
        native = load_native(path, trusted=self.inputs.trusted)
        forest = from_estimator(native)
        check_second(self.forest, forest, str(path))
        check_cancel(cancel, "second_model")
        X, _ = self._surrogate_rows()
        predicted = np.argmax(self.rows_proba(), axis=1)  # the first model's, computed once
        sample = stratified_rows(predicted, X.shape[0], self.settings.exactness_rows,
                                 self.settings.seed)
        report("second_model", 0.3, f"checking {path.name} against its library on "
               f"{sample.size:,} rows")
        exactness = check_exactness(forest, native, aligned_input(self.forest, forest,
                                                                  X[sample.rows]),
                                    sample=sample.to_dict())
        if not exactness.passed:
            raise GrovewiseError(f"{path}: Grovewise does not reproduce the second model's "
                                 f"predictions: {exactness.text()}.")
        check_cancel(cancel, "second_model")
        report("second_model", 0.7, "comparing the two models on every row")
        sur = self.surrogate
        held = sur.holdout_rows
        rows, where = (held, "holdout") if held.size else (sur.train_rows, "training")
        return second_model(self.forest, forest, X, label=path.name, sha256=sha256_of(path),
                            trees={"surrogate": sur.surrogate, "greedy": sur.greedy},
                            eval_rows=rows, evaluated_on=where, X_trees=self.filled(X),
                            exactness=exactness.text(),
                            first_classes=self.forest.classes_[predicted])

    def _run_stability(self, report: Progress, cancel: threading.Event | None):
        """The surrogate and the greedy tree re-fitted on bootstrap resamples of the training
        rows (None when ``stability_resamples`` is 0)."""
        from .executor import Executor
        from .surrogate.stability import rule_stability

        st = self.settings
        if not st.stability_resamples:
            report("stability", 1.0, "stability: left out (stability_resamples is 0)")
            return None
        seconds = st.stability_seconds()
        X, _ = self._surrogate_rows()
        sur = self.surrogate
        options = {k: sur.settings.get(k) for k in (
            "depth", "proximity_threshold", "max_features_per_split", "alpha", "oblique_level",
            "node_limit", "forbidden_features", "usage_floor", "usage_weight")}
        options["proximity_rows"] = st.proximity_rows
        B = int(st.stability_resamples)
        report("stability", 0.0, f"re-fitting the surrogate and the greedy tree on {B} "
               f"bootstrap resamples, {seconds:g} s each")

        finished = [0]
        started = time.perf_counter()

        def on_done(done: int, total: int) -> None:
            finished[0] = done
            report("stability", done / total, f"bootstrap re-fit {done} of {total} done "
                   f"({seconds:g} s each)")

        def beat(stop: threading.Event) -> None:  # a word every second while re-fits run
            while not stop.wait(1.0):
                report("stability", finished[0] / B, f"bootstrap re-fits: {finished[0]} of "
                       f"{B} done, {time.perf_counter() - started:.0f} s in")

        stop = threading.Event()
        threading.Thread(target=beat, args=(stop,), name="stability-beat", daemon=True).start()
        try:
            with Executor(self.jobs) as executor:
                return rule_stability(self.forest, self.filled(X), sur, resamples=B,
                                      time_limit=seconds, seed=st.seed, options=options,
                                      proba=self.rows_proba(), executor=executor,
                                      progress=on_done, cancel=cancel)
        finally:
            stop.set()

    def write_program(self, path) -> Path:
        """Write the program HiGHS solved in the surrogate step (on its sample) as MPS."""
        from .report.atomic import write_atomic

        if not getattr(self, "program_mps", None):
            raise SettingError("no program to write: the surrogate step did not reach the "
                               "program stage (run it with a longer time limit).")
        return write_atomic(Path(path), gzip.decompress(self.program_mps))

    def _run_cases(self, report: Progress, cancel: threading.Event | None) -> CasesResult:
        allX, held = self._surrogate_rows()
        split = np.zeros(allX.shape[0], dtype=np.int64)
        split[held] = 2 if self.holdout_data is not None else 1
        proba = self.rows_proba()
        ensemble = np.argmax(proba, axis=1)
        filled = self.filled(allX)
        sur = self.surrogate
        classes = list(self.forest.classes_)
        to_index = np.vectorize(lambda c: classes.index(c), otypes=[np.int64])
        surrogate = to_index(sur.surrogate.predict(filled))
        greedy = to_index(sur.greedy.predict(filled))
        result = CasesResult(proba=proba, ensemble=ensemble, surrogate=surrogate,
                             surrogate_leaf=np.asarray(sur.surrogate.apply(filled)),
                             greedy=greedy, split=split,
                             disagreements=np.flatnonzero(surrogate != ensemble),
                             fill_values=self.fill_values())
        try:
            result.effects = self._effects(result, allX, report, cancel)
        except CancelledError:
            # the cases of a cancelled solve are still remade from the tree it handed back;
            # the effects (seconds of work) wait for the next run
            result.effects = None
        return result

    def _effects(self, cases: CasesResult, allX: np.ndarray, report: Progress,
                 cancel: threading.Event | None):
        """The ensemble's own effects, tied to the surrogate (grovewise.effects_summary)."""
        from .analysis.thresholds import threshold_profiles
        from .effects_summary import DISAGREEMENT_ROWS, review_effects

        st, X = self.settings, self.data.X
        picked = cases.confident_disagreements(DISAGREEMENT_ROWS)
        return review_effects(
            self.forest, X, cases.ensemble[:X.shape[0]], self.surrogate.surrogate,
            threshold_profiles(self.forest), rows=st.effects_rows,
            interaction_rows=st.interaction_rows, seed=st.seed, case_rows=picked,
            case_X=allX[picked], cancel=cancel, jobs=self.jobs,
            progress=lambda f, msg: report("cases", 0.1 + 0.85 * f, msg))

    def case_rows(self) -> np.ndarray:
        """Every row of the review data (and holdout file), in the Cases order."""
        return self._surrogate_rows()[0]

    # ------------------------------------------------------------------ saving
    def _state(self) -> dict:
        return {
            "format": FORMAT,
            "created_at": self.created_at,
            "inputs": self.inputs,
            "settings": self.settings,
            "reviewer": self.reviewer,
            "forest": self.forest,
            "data": self.data,
            "holdout_data": self.holdout_data,
            "results": self.results,
            "timings": self.timings,
            "program_mps": None if self.program_mps is None else
            np.frombuffer(self.program_mps, dtype=np.uint8),
        }

    def save(self, folder) -> Path:
        """Save to ``folder`` (created if needed). The arrays file is named after its sha256
        and ``review.json``, written last, is the commit point, both written atomically: a
        save killed at any point leaves the previously saved review or this one, whole, never
        a mix; the next save removes what a killed one left."""
        folder = Path(folder)
        if folder.exists() and not folder.is_dir():
            raise SettingError(f"Cannot save the review to {folder}: it is a file; choose a "
                               "folder (it is made if missing).")
        folder.mkdir(parents=True, exist_ok=True)
        tree, arrays = encode(self._state())
        arrays_name, digest = write_arrays_file(folder, arrays)
        doc = {"format": FORMAT, "arrays": arrays_name, "arrays_sha256": digest, "state": tree}
        write_atomic(folder / REVIEW_FILE, json.dumps(doc, indent=1, allow_nan=False))
        tidy_saved_folder(folder, REVIEW_FILE, arrays_name)
        return folder / REVIEW_FILE

    @classmethod
    def open(cls, folder) -> "Review":
        """Reopen a review saved with :meth:`save`; nothing is recomputed."""
        _path, doc, arrays = open_saved(folder, FORMAT, REVIEW_FILE)
        state = decode(doc["state"], arrays)
        review = cls.__new__(cls)
        review.inputs = state["inputs"]
        review.settings = state["settings"]
        review.reviewer = state["reviewer"]
        review.forest = state["forest"]
        review.data = state["data"]
        review.holdout_data = state["holdout_data"]
        review.results = state["results"]
        review.timings = state["timings"]
        mps = state.get("program_mps")
        review.program_mps = None if mps is None else mps.tobytes()
        review.created_at = state["created_at"]
        review.jobs = None
        review._lock = threading.Lock()
        return review

    def settings_dict(self) -> dict:
        return asdict(self.settings)
