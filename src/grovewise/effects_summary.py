"""The review's effects: what the ensemble itself does with its features, tied to the surrogate.

Computed in the cases step, on a seeded sample of the review rows stratified by the model's
class (``ReviewSettings.effects_rows``; the interactions on the first
``ReviewSettings.interaction_rows`` of it, among the ``INTERACTION_FEATURES`` features of
largest mean |contribution|), so the figures do not grow with the data. For a large forest the
rows shrink further to a work budget fixed by the forest's size (``CONTRIBUTION_WORK``,
``INTERACTION_WORK``), so the effects take seconds on any model and a re-run draws the same
sample:

- global importance as the mean absolute contribution (exact Shapley values, TreeSHAP) per
  feature, summed over the outputs;
- for the features the ensemble relies on most (by that importance, at most
  ``EFFECT_FEATURES``): the partial dependence curve (per category for a categorical
  feature), accumulated local effects (numeric features), the ensemble's own cut points (its
  threshold profile) and the surrogate's cuts on that feature, each with a sentence saying
  whether it falls where the curve changes most. An oblique split's cut on a feature is taken
  with its other feature at that feature's median on the sample, and says so;
- the feature pairs the ensemble combines most (mean |Shapley interaction|) beside the pairs
  the surrogate puts in one split, in words;
- the contributions of the disagreement rows shown in the report (the most confident first).

:func:`ensemble_effects` computes everything that needs no surrogate (``grovewise effects``
uses it alone, and writes its details); :func:`review_effects` adds the surrogate's cuts and
pairs and the disagreement rows.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .analysis.contributions import (Contributions, contributions, interaction_ranking,
                                      interactions)
from .analysis.effects import (AccumulatedEffects, PartialDependence, accumulated_local_effects,
                               partial_dependence)
from .sampling import RowSample, stratified_rows

EFFECT_FEATURES = 6  # curves for the features the ensemble relies on most
INTERACTION_FEATURES = 8  # the interactions rank the pairs among this many top features
# Work budgets (node visits x depth, per row: see ``_rows_within``): the sample shrinks for a
# large forest so that each part takes seconds (about 6 s on 2 cores), whatever the data.
# The row counts follow from the forest alone, so a review re-run gives the same sample.
CONTRIBUTION_WORK = 2.5e9
INTERACTION_WORK = 2.5e9
MIN_ROWS = 100
MIN_INTERACTION_ROWS = 20
DISAGREEMENT_ROWS = 12  # disagreement rows explained (the most confident first)
TOP_PAIRS = 10  # interaction pairs kept
STEEP_SHARE = 0.5  # an interval whose change is at least this share of the largest is steep


@dataclass
class SurrogateCut:
    """One surrogate split that tests a feature, placed on that feature's effect curve.

    ``value`` is the cut on the feature's own axis (None for a categorical split, whose
    ``categories`` go left); ``other`` names the second feature of an oblique split, held at
    its ``other_median``; ``steep`` says whether the cut falls where the curve changes most.
    """

    node: int
    rule: str
    value: float | None
    categories: list | None
    other: str | None
    other_median: float | None
    steep: bool
    statement: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass
class FeatureEffect:
    """One feature's effect curves and the cuts drawn on them."""

    feature: str
    index: int
    importance: float
    partial: PartialDependence
    accumulated: AccumulatedEffects | None
    class_index: int  # the class whose probability the curve's sentences read
    steepest: tuple  # (from, to): the grid interval where that curve changes most
    ensemble_cuts: np.ndarray  # the ensemble's distinct cut points on the feature
    ensemble_cut_counts: np.ndarray
    cuts: list[SurrogateCut] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"feature": self.feature, "index": self.index, "importance": self.importance,
                "partial_dependence": self.partial.to_dict(),
                "accumulated_local_effects": (None if self.accumulated is None
                                              else self.accumulated.to_dict()),
                "class_index": self.class_index, "steepest": list(self.steepest),
                "ensemble_cuts": self.ensemble_cuts.tolist(),
                "ensemble_cut_counts": self.ensemble_cut_counts.tolist(),
                "surrogate_cuts": [c.to_dict() for c in self.cuts]}


@dataclass
class EffectsResult:
    """The review's effects (see the module)."""

    sample: dict
    interaction_rows: int
    output: str  # what the contributions explain: "probability" or "margin"
    output_names: list[str]
    importance: dict  # feature -> mean |contribution| over the sample (summed over outputs)
    curves: list[FeatureEffect]
    pairs: list  # InteractionPair, strongest first (at most TOP_PAIRS)
    surrogate_pairs: list  # [feature, feature] pairs that share one surrogate split
    pair_statement: str
    case_rows: np.ndarray  # disagreement rows explained (indices into the case rows)
    case_base: np.ndarray  # (n_outputs,)
    case_values: np.ndarray  # (k, p, n_outputs)

    def ranking(self) -> list[str]:
        return sorted(self.importance, key=lambda f: -self.importance[f])

    def to_dict(self) -> dict:
        return {"kind": "effects", "sample": self.sample,
                "interaction_rows": self.interaction_rows, "output": self.output,
                "output_names": list(self.output_names), "importance": dict(self.importance),
                "curves": [c.to_dict() for c in self.curves],
                "pairs": [p.to_dict() for p in self.pairs],
                "surrogate_pairs": [list(p) for p in self.surrogate_pairs],
                "pair_statement": self.pair_statement,
                "case_rows": self.case_rows.tolist(), "case_base": self.case_base.tolist(),
                "case_values": self.case_values.tolist()}


def _steepest(pd_: PartialDependence) -> tuple[int, tuple, np.ndarray]:
    """The class whose curve moves most, the grid interval where it changes most, and the
    change per interval."""
    k = int(np.argmax(np.ptp(pd_.average, axis=0))) if pd_.average.shape[0] > 1 else 0
    if pd_.grid.size < 2:
        g = float(pd_.grid[0]) if pd_.grid.size else float("nan")
        return k, (g, g), np.zeros(0)
    change = np.abs(np.diff(pd_.average[:, k]))
    i = int(np.argmax(change))
    return k, (float(pd_.grid[i]), float(pd_.grid[i + 1])), change


def _cut_statement(name: str, value: float, grid: np.ndarray, change: np.ndarray,
                   steepest: tuple, other: str | None) -> tuple[bool, str]:
    held = f" (with {other} at its median)" if other else ""
    where = f"between {steepest[0]:.4g} and {steepest[1]:.4g}"
    if change.size == 0 or not np.any(change > 0):
        return False, (f"The surrogate cuts {name} at {value:.4g}{held}; the ensemble's curve "
                       "is flat over the sample, so no cut is better placed than another.")
    i = int(np.clip(np.searchsorted(grid, value) - 1, 0, change.size - 1))
    inside = grid[0] <= value <= grid[-1]
    steep = bool(inside and change[i] >= STEEP_SHARE * change.max())
    if steep:
        return True, (f"The surrogate cuts {name} at {value:.4g}{held}, where the ensemble's "
                      f"curve changes steeply (most {where}).")
    place = ("beyond the curve's grid (the middle 90% of the sampled values)" if not inside
             else "where the curve changes little")
    return False, (f"The surrogate cuts {name} at {value:.4g}{held}, {place}; the ensemble's "
                   f"curve changes most {where}.")


def _surrogate_cuts(est, j: int, names: list[str], medians: np.ndarray, effect: FeatureEffect,
                    change: np.ndarray) -> list[SurrogateCut]:
    out = []
    for rule in est.rules_list_:
        if j not in rule.features:
            continue
        k = rule.features.index(j)
        text = rule.text(names)
        cats = getattr(rule, "categories_left", None)
        if cats is not None and len(rule.features) == 1 and cats:
            out.append(SurrogateCut(node=rule.node, rule=text, value=None, categories=list(cats),
                                    other=None, other_median=None, steep=False,
                                    statement=f"The surrogate splits {names[j]} into sets: "
                                              f"{text}."))
            continue
        rest = [(f, c) for f, c in zip(rule.features, rule.coef) if f != j]
        shift = sum(c * medians[f] for f, c in rest)
        value = (rule.threshold - shift) / rule.coef[k]
        other = ", ".join(names[f] for f, _ in rest) or None
        steep, statement = _cut_statement(names[j], float(value), effect.partial.grid, change,
                                          effect.steepest, other)
        out.append(SurrogateCut(node=rule.node, rule=text, value=float(value), categories=None,
                                other=other, other_median=(float(medians[rest[0][0]])
                                                          if rest else None),
                                steep=steep, statement=statement))
    return out


def _pair_statement(pairs, surrogate_pairs) -> str:
    if not pairs:
        return "The ensemble shows no interaction on the sample."
    strongest = ", ".join(f"{p.first} & {p.second}" for p in pairs[:3])
    if not surrogate_pairs:
        return (f"The ensemble combines {strongest} most; the surrogate's splits each use one "
                "feature, so it states none of these combinations.")
    rank = {frozenset((p.first, p.second)): i + 1 for i, p in enumerate(pairs)}
    parts = []
    for a, b in surrogate_pairs:
        r = rank.get(frozenset((a, b)))
        parts.append(f"{a} & {b} (the ensemble's #{r} pair)" if r else
                     f"{a} & {b} (not among the ensemble's {len(pairs)} strongest pairs)")
    top = frozenset((pairs[0].first, pairs[0].second))
    verdict = ("so it pairs the features the ensemble combines most"
               if any(frozenset(p) == top for p in surrogate_pairs)
               else "which is not the pair the ensemble combines most")
    return (f"The ensemble combines {strongest} most. The surrogate puts {'; '.join(parts)} "
            f"in one split, {verdict}.")


@dataclass
class EffectsDetail:
    """What :func:`ensemble_effects` computed on the way, kept for exports (``grovewise
    effects`` writes it) and for tying the curves to a surrogate: the sample, every sampled
    row's contributions, every feature pair ranked, the sample's medians per feature (an
    oblique split's other feature is held there), and per curve the change of its partial
    dependence per grid interval."""

    sample: RowSample
    contributions: Contributions
    all_pairs: list  # InteractionPair, every pair, strongest first
    medians: np.ndarray
    changes: list  # per curve of the result, ndarray (n_grid - 1,)


def _medians(Xs: np.ndarray) -> np.ndarray:
    with np.errstate(all="ignore"):
        return np.array([np.nanmedian(Xs[:, j]) if np.any(~np.isnan(Xs[:, j])) else 0.0
                         for j in range(Xs.shape[1])])


def _work_per_row(forest, features=None) -> float:
    """The walk's work for one row: every tree's nodes times its depth, and for the
    interactions that again per conditioned feature (twice: known and unknown)."""
    work = 0.0
    for t in forest.trees:
        base = t.n_nodes * max(t.max_depth, 1)
        if features is None:
            work += base
        else:
            used = np.intersect1d(t.feature[t.feature >= 0], features).size
            work += base * (1 + 2 * used)
    return work


def _rows_within(work_per_row: float, budget: float, cap: int, floor: int) -> int:
    """The rows a budget allows (at least ``floor``, at most ``cap``)."""
    return int(min(cap, max(floor, budget // max(work_per_row, 1.0))))


def ensemble_effects(forest, X: np.ndarray, predicted: np.ndarray, thresholds, *, rows: int,
                     interaction_rows: int, seed: int, features=None, progress=None,
                     cancel=None, jobs=None) -> tuple[EffectsResult, EffectsDetail]:
    """The ensemble's own effects on a seeded sample, without a surrogate (see the module).

    ``X`` are the rows and ``predicted`` the model's class index per row (the sample is
    stratified by it); ``thresholds`` the threshold profiles of the forest (or None);
    ``features`` the features to draw curves for (indices, in that order), by default the
    ``EFFECT_FEATURES`` the ensemble relies on most by mean |contribution|. The result has
    no surrogate cuts, pairs or explained cases; :func:`review_effects` adds them.
    ``progress(fraction, message)`` hears of each part.
    """
    say = progress or (lambda *_: None)
    rows = _rows_within(_work_per_row(forest), CONTRIBUTION_WORK, rows, MIN_ROWS)
    sample = stratified_rows(predicted, X.shape[0], rows, seed)
    Xs = X[sample.rows]
    names = list(forest.feature_names)
    what = f"contributions (TreeSHAP) on {sample.describe()}"
    say(0.05, what)
    c = contributions(forest, Xs, jobs=jobs, cancel=cancel, chunk_rows=64,
                      progress=lambda done, total: say(0.05 + 0.3 * done / max(total, 1),
                                                       f"{what}: {done:,}/{total:,} rows"))
    mean_abs = np.abs(c.values).mean(axis=0).sum(axis=1)
    importance = {n: float(v) for n, v in zip(names, mean_abs)}
    top = [int(j) for j in np.argsort(-mean_abs, kind="stable")[:INTERACTION_FEATURES]]
    n_int = min(Xs.shape[0], _rows_within(_work_per_row(forest, top), INTERACTION_WORK,
                                          interaction_rows, MIN_INTERACTION_ROWS))
    what = (f"interactions among the {len(top)} features of largest mean |contribution|, on "
            f"{n_int:,} of the sampled rows")
    say(0.35, what)
    inter = interactions(forest, Xs[:n_int], jobs=jobs, cancel=cancel, chunk_rows=4,
                         features=top,
                         progress=lambda done, total: say(0.35 + 0.25 * done / max(total, 1),
                                                          f"{what}: {done:,}/{total:,} rows"))
    among = set(top)
    all_pairs = [pr for pr in interaction_ranking(inter, names)
                 if names.index(pr.first) in among and names.index(pr.second) in among]
    pairs = all_pairs[:TOP_PAIRS]
    medians = _medians(Xs)
    if features is None:
        order = [int(j) for j in np.argsort(-mean_abs, kind="stable") if mean_abs[j] > 0]
        chosen = order[:EFFECT_FEATURES]
    else:
        chosen = [int(j) for j in features]
    curves, changes = [], []
    for n_done, j in enumerate(chosen):
        say(0.6 + 0.3 * n_done / max(len(chosen), EFFECT_FEATURES), f"effect curves of {names[j]}")
        if not np.any(~np.isnan(Xs[:, j])):
            continue
        pd_ = partial_dependence(forest, Xs, j)
        ale = None if forest.is_categorical(j) or np.unique(Xs[~np.isnan(Xs[:, j]), j]).size < 2 \
            else accumulated_local_effects(forest, Xs, j)
        k, steepest, change = _steepest(pd_)
        prof = None if thresholds is None else thresholds.features[j]
        curves.append(FeatureEffect(
            feature=names[j], index=j, importance=float(mean_abs[j]), partial=pd_,
            accumulated=ale, class_index=k, steepest=steepest,
            ensemble_cuts=np.zeros(0) if prof is None else prof.cuts,
            ensemble_cut_counts=np.zeros(0, dtype=np.int64) if prof is None else prof.counts))
        changes.append(change)
    strongest = ", ".join(f"{p.first} & {p.second}" for p in pairs[:3])
    statement = (f"The ensemble combines {strongest} most." if pairs else
                 "The ensemble shows no interaction on the sample.")
    result = EffectsResult(sample=sample.to_dict(), interaction_rows=int(n_int), output=c.output,
                           output_names=list(c.output_names), importance=importance,
                           curves=curves, pairs=pairs, surrogate_pairs=[],
                           pair_statement=statement, case_rows=np.zeros(0, dtype=np.int64),
                           case_base=c.base, case_values=np.zeros((0, len(names),
                                                                   c.base.shape[0])))
    return result, EffectsDetail(sample=sample, contributions=c, all_pairs=all_pairs,
                                 medians=medians, changes=changes)


def _surrogate_pairs(est, names: list[str]) -> list:
    """The feature pairs that share one split of the surrogate, in the order of its rules."""
    out = []
    for rule in est.rules_list_:
        feats = [names[f] for f in rule.features]
        for a in range(len(feats)):
            for b in range(a + 1, len(feats)):
                if [feats[a], feats[b]] not in out:
                    out.append([feats[a], feats[b]])
    return out


def review_effects(forest, X: np.ndarray, predicted: np.ndarray, est, thresholds, *,
                   rows: int, interaction_rows: int, seed: int, case_rows: np.ndarray,
                   case_X: np.ndarray, progress=None, cancel=None, jobs=None) -> EffectsResult:
    """The effects of a review (see the module).

    ``X`` are the review rows and ``predicted`` the model's class index per row (the sample
    is stratified by it); ``est`` the fitted surrogate (``rules_list_``); ``thresholds`` the
    anatomy's threshold profiles (or None); ``case_rows`` / ``case_X`` the disagreement rows
    to explain and their values.
    """
    say = progress or (lambda *_: None)
    fx, detail = ensemble_effects(forest, X, predicted, thresholds, rows=rows,
                                  interaction_rows=interaction_rows, seed=seed,
                                  progress=say, cancel=cancel, jobs=jobs)
    names = list(forest.feature_names)
    surrogate_pairs = []
    if est is not None:
        for effect, change in zip(fx.curves, detail.changes):
            effect.cuts = _surrogate_cuts(est, effect.index, names, detail.medians, effect,
                                          change)
        surrogate_pairs = _surrogate_pairs(est, names)
    fx.surrogate_pairs = surrogate_pairs
    fx.pair_statement = _pair_statement(fx.pairs, surrogate_pairs)
    say(0.95, f"contributions of {len(case_rows)} disagreement rows")
    if len(case_rows):
        cc = contributions(forest, case_X, jobs=jobs, cancel=cancel)
        fx.case_base, fx.case_values = cc.base, cc.values
    fx.case_rows = np.asarray(case_rows, dtype=np.int64)
    return fx
