"""How stable the rules are: the surrogate and the greedy tree re-fitted on bootstrap resamples.

A rule a reviewer signs off should not hinge on which rows happened to be in the data. Each of
``B`` seeded bootstrap resamples of the training rows (drawn with replacement, as many rows as
there are training rows) gets its own surrogate and greedy tree, fitted exactly as the review
fitted them but with a short time limit each. Then, for each tree kind:

- **recurrence** per node position (the root, its left and right child, ...): the share of
  the re-fitted trees whose split there uses exactly the feature set of the review's tree
  (a node that does not split has the empty set), and the feature set seen most often;
- **agreement**: the mean, over every pair of re-fitted trees, of the share of the
  evaluation rows (the holdout, else the training rows) on which they predict the same class;
- **fidelity spread**: each re-fitted tree's agreement with the ensemble on the evaluation
  rows (least, mean, largest, standard deviation).

The rules are called unstable when the root's feature set differs from the review's in more
than half of the resamples. The re-fits are independent pieces of work and run through the
one :class:`~grovewise.executor.Executor` (inline with one job).
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field

import numpy as np

from ..errors import SettingError
from .tree import ObliqueTree, reachable_splits

TREES = ("surrogate", "greedy")
TREE_LABELS = {"surrogate": "surrogate", "greedy": "greedy tree"}  # as sentences name them
UNSTABLE_ROOT_SHARE = 0.5  # the root's features recur in less than this share: unstable
# the re-fits' mean fidelity this far below the review's tree: their time limit is suspect
SHORT_FIT_GAP = 0.02


@dataclass
class TreeStability:
    """One tree kind's stability over the resamples.

    Attributes
    ----------
    tree : str
        ``"surrogate"`` or ``"greedy"``.
    reference : list of list of str
        Per branch node (heap order: root, its left child, its right child, ...), the
        features the review's tree splits on there (empty: the node does not split).
    node_sets : list of list of list of str
        ``node_sets[b][t]``: the same for the tree re-fitted on resample ``b``.
    predicted : ndarray of shape (B, n_eval)
        Each re-fitted tree's class (an index into the ensemble's classes) on each
        evaluation row, kept so that every figure below can be computed again.
    holdout_fidelity : ndarray of shape (B,)
        Each re-fitted tree's share of evaluation rows on which it predicts the ensemble's
        class.
    pairwise_agreement : float
        Mean over pairs of re-fitted trees of the share of evaluation rows they predict alike.
    reference_fidelity : float or None
        The review's own tree's share on the same rows (the re-fits' yardstick).
    """

    tree: str
    reference: list
    node_sets: list
    predicted: np.ndarray
    holdout_fidelity: np.ndarray
    pairwise_agreement: float
    reference_fidelity: float | None = None  # the review's own tree on the same rows

    @property
    def resamples(self) -> int:
        return len(self.node_sets)

    def recurrence(self) -> np.ndarray:
        """Per node, the share of resamples whose feature set there equals the reference's."""
        ref = [tuple(s) for s in self.reference]
        if not self.node_sets:
            return np.zeros(len(ref))
        hits = np.array([[tuple(sets[t]) == ref[t] for t in range(len(ref))]
                         for sets in self.node_sets], dtype=float)
        return hits.mean(axis=0)

    def most_common(self) -> list[tuple[list[str], float]]:
        """Per node, the feature set seen most often over the resamples and its share (the
        first seen wins a tie)."""
        out = []
        for t in range(len(self.reference)):
            counts: dict[tuple, int] = {}
            for sets in self.node_sets:
                key = tuple(sets[t])
                counts[key] = counts.get(key, 0) + 1
            if not counts:
                out.append(([], 0.0))
                continue
            best = max(counts, key=lambda k: counts[k])  # dicts keep first-seen order
            out.append((list(best), counts[best] / self.resamples))
        return out

    @property
    def root_recurrence(self) -> float:
        return float(self.recurrence()[0]) if self.reference else 0.0

    @property
    def unstable(self) -> bool:
        return self.root_recurrence < UNSTABLE_ROOT_SHARE

    def fidelity_spread(self) -> dict:
        f = np.asarray(self.holdout_fidelity, dtype=float)
        if not f.size:
            return {"min": None, "mean": None, "max": None, "std": None}
        return {"min": float(f.min()), "mean": float(f.mean()), "max": float(f.max()),
                "std": float(f.std(ddof=1)) if f.size > 1 else 0.0}


@dataclass
class RuleStability:
    """The surrogate's and the greedy tree's stability over ``resamples`` bootstrap re-fits.

    ``evaluated_on`` says which rows the agreement and fidelity are measured on
    (``"holdout"`` or ``"training"``) and ``rows`` how many; ``time_limit`` is each re-fit's.
    """

    resamples: int
    seed: int
    time_limit: float
    evaluated_on: str
    eval_rows: np.ndarray
    trees: dict = field(default_factory=dict)  # name -> TreeStability
    # re-fits whose best tree had multi-feature splits without significantly more agreeing
    # training rows than the best axis-aligned tree (oblique_level): their answer is that one
    handed_to_axis: int = 0

    @property
    def rows(self) -> int:
        return int(self.eval_rows.size)

    @property
    def surrogate(self) -> TreeStability:
        return self.trees["surrogate"]

    @property
    def greedy(self) -> TreeStability:
        return self.trees["greedy"]

    def sentence(self, name: str = "surrogate") -> str:
        """The finding for one tree in words."""
        t = self.trees[name]
        label = TREE_LABELS[name]
        root = ", ".join(t.reference[0]) if t.reference and t.reference[0] else "no split"
        share = t.root_recurrence
        spread = t.fidelity_spread()
        ref = t.reference_fidelity
        fid = ("" if spread["mean"] is None else
               f"; {self.evaluated_on} fidelity ranges {spread['min']:.1%} to "
               f"{spread['max']:.1%} (mean {spread['mean']:.1%}"
               + ("" if ref is None else f"; the review's {label}: {ref:.1%}") + ")")
        verdict = ("unstable: the root's features change in more than half of the resamples"
                   if t.unstable else "the root is stable")
        words = (f"The {label}'s root ({root}) recurs in {round(share * t.resamples)} of "
                 f"{t.resamples} bootstrap re-fits: {verdict}. Re-fitted trees agree with each "
                 f"other on {t.pairwise_agreement:.1%} of the {self.rows:,} {self.evaluated_on} "
                 f"rows{fid}.")
        if name == "surrogate" and ref is not None and spread["mean"] is not None \
                and spread["mean"] < ref - SHORT_FIT_GAP:
            words += (f" The re-fits, {self.time_limit:g} s each, fall short of the review's "
                      "tree, so part of the change may come from their short time limit: "
                      "raise stability_time_limit to tell.")
        if name == "surrogate" and self.handed_to_axis:
            words += (f" In {self.handed_to_axis} of {t.resamples} re-fits the best tree's "
                      "multi-feature splits did not agree on significantly more training rows "
                      "than the best axis-aligned tree, so that re-fit's answer is axis-aligned")
            words += (f"; the review's own fit found them significant, so the re-fits' "
                      f"{self.time_limit:g} s each may be too short to find them: raise "
                      "stability_time_limit to tell." if any(len(f) > 1 for f in t.reference)
                      else ".")
        return words

    def to_rows(self, name: str) -> list[list[str]]:
        """Per node: position, the review's features, their recurrence, the most common set
        and its share."""
        t = self.trees[name]
        rec = t.recurrence()
        common = t.most_common()
        rows = []
        for i, ref in enumerate(t.reference):
            mc, share = common[i]
            rows.append([node_name(i), ", ".join(ref) or "no split",
                         f"{round(rec[i] * t.resamples)} of {t.resamples}",
                         ", ".join(mc) or "no split", f"{share:.0%}"])
        return rows


def node_name(t: int) -> str:
    """``root``, ``root.L``, ``root.R``, ``root.L.L``, ... for heap node ``t``."""
    path = []
    while t > 0:
        path.append("L" if t % 2 == 1 else "R")
        t = (t - 1) // 2
    return ".".join(["root"] + path[::-1])


def split_features(tree: ObliqueTree, names: list[str]) -> list[list[str]]:
    """Per branch node, the names of the features its split uses (empty where the node does
    not split or cannot be reached)."""
    live = set(int(t) for t in reachable_splits(tree))
    return [[names[j] for j in np.flatnonzero(tree.coef[t])] if t in live else []
            for t in range(tree.coef.shape[0])]


def bootstrap_rows(train_rows: np.ndarray, seed: int, b: int) -> np.ndarray:
    """Resample ``b``'s rows: ``len(train_rows)`` draws with replacement, seeded by
    ``(seed, b)`` so each resample is the same whatever order or worker runs it."""
    rng = np.random.default_rng([int(seed), int(b)])
    return np.sort(train_rows[rng.integers(0, train_rows.size, train_rows.size)])


@dataclass
class _Refit:
    """What one re-fit hands back (small, so it travels cheaply from a worker)."""

    sets: dict
    predicted: dict
    # the best tree had multi-feature splits, but not significantly better than the best
    # axis-aligned one (oblique_level), so the answer is axis-aligned
    handed_to_axis: bool = False


@dataclass
class _Shared:
    """What every re-fit needs; sent to a cluster's workers once."""

    forest: object
    X: np.ndarray
    proba: np.ndarray
    train_rows: np.ndarray
    eval_rows: np.ndarray
    options: dict
    seed: int


class _RefitOne:
    """Fits the surrogate and the greedy tree on one resample. It holds only the cancel
    event (None on a cluster, where an event cannot travel): the data comes as ``shared``."""

    def __init__(self, cancel):
        self.cancel = cancel

    def __call__(self, b: int, shared: _Shared) -> _Refit:
        from .mimic import mimic
        from .solver import Cancel

        started = time.perf_counter()  # the re-fit's time limit covers its preparation too
        rows = bootstrap_rows(shared.train_rows, shared.seed, b)
        stop = Cancel(self.cancel) if self.cancel is not None else None
        res = mimic(shared.forest, shared.X[rows], holdout=None, proba=shared.proba[rows],
                    random_state=int(shared.seed) + int(b), cancel=stop, started=started,
                    **shared.options)
        names = list(shared.forest.feature_names)
        Xe = shared.X[shared.eval_rows]
        return _Refit(
            sets={"surrogate": split_features(res.surrogate.tree_, names),
                  "greedy": split_features(res.surrogate.result_.greedy_tree, names)},
            predicted={"surrogate": np.asarray(res.surrogate.predict(Xe)),
                       "greedy": np.asarray(res.greedy.predict(Xe))},
            handed_to_axis=res.surrogate.result_.by_objective != res.winner)


def rule_stability(forest, X: np.ndarray, reference, *, resamples: int = 10,
                   time_limit: float = 3.0, seed: int = 0, options: dict | None = None,
                   proba: np.ndarray | None = None, executor=None, progress=None,
                   cancel: threading.Event | None = None) -> RuleStability:
    """Re-fit the surrogate and the greedy tree on ``resamples`` bootstrap resamples.

    Parameters
    ----------
    forest : Forest
    X : ndarray (n, p)
        The rows the review's surrogate saw, missing values already filled.
    reference : MimicResult
        The review's fit: its trees are the reference, its ``train_rows`` are resampled and
        its ``holdout_rows`` (else its training rows) are the evaluation rows.
    resamples : int
        B, at least 2.
    time_limit : float
        Seconds for each re-fit.
    seed : int
        Resample ``b`` draws its rows with ``(seed, b)`` and fits with seed ``seed + b``.
    options : dict
        Further ``mimic`` options, as the review fitted with (depth, proximity_threshold,
        max_features_per_split, alpha, forbidden_features, node_limit, proximity_rows...).
    proba : ndarray (n, n_classes), optional
        The forest's probabilities of ``X`` (computed when not given).
    executor : Executor, optional
        Where the re-fits run (inline when None).
    progress : callable, optional
        ``progress(done, total)`` after each re-fit.
    cancel : threading.Event, optional
    """
    if not isinstance(resamples, (int, np.integer)) or isinstance(resamples, bool) \
            or resamples < 2:
        raise SettingError(f"stability_resamples={resamples!r}: give a whole number of at "
                           "least 2 (0 in the review's settings leaves the step out).")
    if not float(time_limit) > 0:
        raise SettingError(f"stability_time_limit={time_limit!r}: give more than 0 seconds.")
    from ..executor import Executor

    X = np.asarray(X, dtype=np.float64)
    proba = forest.predict_proba(X) if proba is None else np.asarray(proba)
    train = np.asarray(reference.train_rows)
    held = np.asarray(reference.holdout_rows)
    eval_rows, evaluated_on = (held, "holdout") if held.size else (train, "training")
    # no bound is proved for a re-fit: only its tree is used
    opts = {**(options or {}), "time_limit": float(time_limit), "threads": 1, "prove": False}
    runner = executor if executor is not None else Executor(1)
    # on a cluster the executor drops the re-fits on cancel (an event does not travel);
    # inline, each re-fit also stops itself
    one = _RefitOne(cancel if runner.inline else None)
    shared = _Shared(forest, X, proba, train, eval_rows, opts, int(seed))
    fits = runner.map(one, range(int(resamples)), progress=progress, cancel=cancel,
                      shared=shared)

    names = list(forest.feature_names)
    ref_trees = {"surrogate": reference.surrogate.tree_,
                 "greedy": reference.surrogate.result_.greedy_tree}
    ref_models = {"surrogate": reference.surrogate, "greedy": reference.greedy}
    index = {c: i for i, c in enumerate(forest.classes_.tolist())}
    truth = np.argmax(proba, axis=1)[eval_rows]
    trees = {}
    for name in TREES:
        preds = np.array([[index[c] for c in f.predicted[name].tolist()] for f in fits],
                         dtype=np.int32).reshape(len(fits), eval_rows.size)
        trees[name] = TreeStability(
            tree=name, reference=split_features(ref_trees[name], names),
            node_sets=[f.sets[name] for f in fits], predicted=preds,
            holdout_fidelity=fidelities(preds, truth),
            pairwise_agreement=pairwise_agreement(preds),
            reference_fidelity=float(np.mean(
                np.asarray(ref_models[name].predict(X[eval_rows]), dtype=object)
                == forest.classes_[truth].astype(object))) if eval_rows.size else None)
    return RuleStability(resamples=int(resamples), seed=int(seed), time_limit=float(time_limit),
                         evaluated_on=evaluated_on, eval_rows=eval_rows.astype(np.int64),
                         trees=trees, handed_to_axis=sum(f.handed_to_axis for f in fits))


def fidelities(preds: np.ndarray, truth: np.ndarray) -> np.ndarray:
    """Per row of ``preds`` (one tree's classes), the share equal to ``truth``."""
    if preds.shape[1] == 0:
        return np.zeros(preds.shape[0])
    return (preds == np.asarray(truth)[None, :]).mean(axis=1)


def pairwise_agreement(preds: np.ndarray) -> float:
    """Mean over pairs of rows of ``preds`` (one per tree) of the share of columns equal."""
    B = preds.shape[0]
    if B < 2 or preds.shape[1] == 0:
        return 1.0
    total, pairs = 0.0, 0
    for a in range(B):
        for b in range(a + 1, B):
            total += float(np.mean(preds[a] == preds[b]))
            pairs += 1
    return total / pairs
