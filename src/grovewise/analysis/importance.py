"""Feature importances: impurity-based (from the trees) and permutation (on the review data).

Impurity importance (mean decrease in impurity) follows scikit-learn's own arithmetic
exactly, so it equals ``feature_importances_`` of its forests and gradient boosting. For
XGBoost and histogram boosting, which have no such attribute with that meaning, it is the
total split gain per feature divided by the total (XGBoost's ``importance_type="total_gain"``,
normalised). Permutation importance runs through
:func:`sklearn.inspection.permutation_importance` on the Forest itself.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.stats import rankdata
from sklearn.base import BaseEstimator, ClassifierMixin

from ..errors import DataError, SettingError
from ..forest import Forest
from ..progress import StepMeter

SKLEARN_MDI_KINDS = ("decision_tree", "random_forest", "extra_trees")
METHOD_MDI = "mean decrease in impurity (scikit-learn's feature_importances_)"
METHOD_TOTAL_GAIN = "total split gain per feature, normalised to sum 1"

STROBL_CAUTION = (
    "Impurity importance is measured on the training data and favours features with many "
    "distinct values (many possible cut points), even when they carry no signal "
    "(Strobl et al. 2007, BMC Bioinformatics 8:25). Permutation importance on the review "
    "data avoids that bias, but correlated features share or hide each other's importance.")


@dataclass
class ImpurityImportance:
    """Impurity importance per feature (sums to 1 unless no tree splits).

    Attributes
    ----------
    feature_names : list of str
    values : ndarray of shape (n_features,)
    method : str
        Which arithmetic: :data:`METHOD_MDI` or :data:`METHOD_TOTAL_GAIN` (XGBoost:
        ``importance_type="total_gain"`` normalised; histogram boosting: its split gains).
    kind : str
        The forest's kind.
    """

    feature_names: list[str]
    values: np.ndarray
    method: str
    kind: str

    @property
    def ranks(self) -> np.ndarray:
        return importance_ranks(self.values)

    def to_dict(self) -> dict:
        return {"kind": "impurity_importance", "model_kind": self.kind, "method": self.method,
                "feature_names": list(self.feature_names), "values": self.values.tolist(),
                "ranks": self.ranks.tolist()}

    def to_rows(self) -> list[dict]:
        return [{"feature": n, "importance": float(v), "rank": int(r)}
                for n, v, r in zip(self.feature_names, self.values, self.ranks)]


@dataclass
class PermutationImportance:
    """Permutation importance per feature: the drop in score when the column is shuffled.

    Attributes
    ----------
    feature_names : list of str
    mean, std : ndarray of shape (n_features,)
        Mean and standard deviation over the repeats.
    values : ndarray of shape (n_features, n_repeats)
        Every repeat's drop in score.
    baseline_score : float
        Score on the data as given.
    scoring : str
    target : str
        ``"labels"`` (scored against the given y) or ``"model predictions"`` (y was not
        given: the score is the agreement with the forest's own predictions, i.e. fidelity).
    n_repeats, random_state, n_rows : int
    se : ndarray of shape (n_features,) or None
        Standard error of ``mean`` that the number of rows implies: the standard deviation
        over rows of each row's drop (averaged over the repeats) divided by sqrt(n_rows).
        Computed for accuracy only.
    sample : dict or None
        How the rows were chosen, when they are a sample of the review data.
    """

    feature_names: list[str]
    mean: np.ndarray
    std: np.ndarray
    values: np.ndarray
    baseline_score: float
    scoring: str
    target: str
    n_repeats: int
    random_state: int
    n_rows: int
    se: np.ndarray | None = None
    sample: dict | None = None  # the RowSample the rows came from (see grovewise.sampling)

    @property
    def ranks(self) -> np.ndarray:
        return importance_ranks(self.mean)

    def to_dict(self) -> dict:
        return {"kind": "permutation_importance", "scoring": self.scoring, "target": self.target,
                "n_repeats": self.n_repeats, "random_state": self.random_state,
                "n_rows": self.n_rows, "baseline_score": self.baseline_score,
                "feature_names": list(self.feature_names), "mean": self.mean.tolist(),
                "std": self.std.tolist(), "values": self.values.tolist(),
                "se": None if self.se is None else self.se.tolist(), "sample": self.sample,
                "ranks": self.ranks.tolist()}

    def to_rows(self) -> list[dict]:
        return [{"feature": n, "mean": float(m), "std": float(s), "rank": int(r)}
                for n, m, s, r in zip(self.feature_names, self.mean, self.std, self.ranks)]


@dataclass
class ImportanceComparison:
    """Impurity and permutation importance side by side, with ranks (1 = most important).

    ``permutation_*`` are None when no review data was given. ``caution`` is the known
    bias of impurity importance, to show beside any display of it.
    """

    feature_names: list[str]
    impurity: np.ndarray
    impurity_rank: np.ndarray
    impurity_method: str
    permutation_mean: np.ndarray | None = None
    permutation_std: np.ndarray | None = None
    permutation_se: np.ndarray | None = None
    permutation_rank: np.ndarray | None = None
    permutation_setting: dict | None = None
    caution: str = STROBL_CAUTION

    @property
    def has_permutation(self) -> bool:
        return self.permutation_mean is not None

    def to_dict(self) -> dict:
        def lst(a):
            return None if a is None else a.tolist()

        return {"kind": "importance_comparison", "feature_names": list(self.feature_names),
                "impurity": self.impurity.tolist(), "impurity_rank": self.impurity_rank.tolist(),
                "impurity_method": self.impurity_method,
                "permutation_mean": lst(self.permutation_mean),
                "permutation_std": lst(self.permutation_std),
                "permutation_se": lst(self.permutation_se),
                "permutation_rank": lst(self.permutation_rank),
                "permutation_setting": self.permutation_setting, "caution": self.caution}

    def to_rows(self) -> list[dict]:
        rows = []
        for j, name in enumerate(self.feature_names):
            row = {"feature": name, "impurity": float(self.impurity[j]),
                   "impurity_rank": int(self.impurity_rank[j])}
            if self.has_permutation:
                row.update(permutation_mean=float(self.permutation_mean[j]),
                           permutation_std=float(self.permutation_std[j]),
                           permutation_rank=int(self.permutation_rank[j]))
            rows.append(row)
        return rows


def importance_ranks(values: np.ndarray) -> np.ndarray:
    """Rank 1 for the largest value; ties share the best rank of their group (1, 2, 2, 4)."""
    return rankdata(-np.asarray(values, dtype=np.float64), method="min").astype(np.int64)


def _tree_mdi(tree, n_features: int) -> np.ndarray:
    """scikit-learn's ``Tree.compute_feature_importances(normalize=False)``: summed weighted
    impurity decrease per feature divided by the root's weighted sample count."""
    split = tree.feature >= 0
    total = np.bincount(tree.feature[split], weights=tree.gain[split], minlength=n_features)
    return total / tree.cover[0]


def _sklearn_mdi(forest: Forest) -> np.ndarray:
    """``feature_importances_`` of scikit-learn's forests, trees and gradient boosting.

    Forests and trees: each tree's importances normalised to sum 1, averaged over the trees
    with more than one node, normalised again. Gradient boosting: the unnormalised tree
    importances averaged over every tree with more than one node, then normalised.
    """
    p = forest.n_features
    relevant = [t for t in forest.trees if t.n_nodes > 1]
    if not relevant:
        return np.zeros(p)
    per_tree = []
    for t in relevant:
        imp = _tree_mdi(t, p)
        if forest.kind in SKLEARN_MDI_KINDS:
            norm = imp.sum()
            imp = imp / norm if norm > 0.0 else imp
        per_tree.append(imp)
    mean = np.mean(per_tree, axis=0, dtype=np.float64)
    return mean / np.sum(mean)


def _total_gain(forest: Forest) -> np.ndarray:
    p = forest.n_features
    total = np.zeros(p)
    for t in forest.trees:
        split = t.feature >= 0
        total += np.bincount(t.feature[split], weights=t.gain[split], minlength=p)
    s = total.sum()
    return total / s if s > 0 else total


def impurity_importance(forest: Forest) -> ImpurityImportance:
    """Impurity importance per feature.

    Equals scikit-learn's ``feature_importances_`` for DecisionTree, RandomForest,
    ExtraTrees and GradientBoosting classifiers. For XGBoost and histogram gradient
    boosting: total split gain per feature, normalised to sum 1 (``result.method`` says
    which).

    Parameters
    ----------
    forest : Forest

    Returns
    -------
    ImpurityImportance
    """
    if forest.kind in SKLEARN_MDI_KINDS + ("gradient_boosting",):
        values, method = _sklearn_mdi(forest), METHOD_MDI
    else:
        values = _total_gain(forest)
        method = METHOD_TOTAL_GAIN + (" (XGBoost importance_type='total_gain')"
                                      if forest.kind == "xgboost" else "")
    return ImpurityImportance(list(forest.feature_names), values, method, forest.kind)


class ForestClassifier(ClassifierMixin, BaseEstimator):
    """A Forest dressed as a fitted scikit-learn classifier, for scikit-learn's scorers.

    ``fit`` does nothing: the forest is the model under review and stays as it is.
    ``progress(done, total)``, if given, is called after every prediction; raising from it
    stops the computation (how a worker cancels).
    """

    def __init__(self, forest: Forest | None = None, progress: Callable | None = None,
                 total_calls: int = 0):
        self.forest = forest
        self.progress = progress
        self.total_calls = total_calls

    def fit(self, X, y=None):
        return self

    def __sklearn_is_fitted__(self) -> bool:
        return self.forest is not None

    @property
    def classes_(self) -> np.ndarray:
        return self.forest.classes_

    def _tick(self) -> None:
        self._calls = getattr(self, "_calls", 0) + 1
        if self.progress is not None:
            self.progress(self._calls, self.total_calls)

    def predict(self, X) -> np.ndarray:
        out = self.forest.predict(X)
        self._tick()
        return out

    def predict_proba(self, X) -> np.ndarray:
        out = self.forest.predict_proba(X)
        self._tick()
        return out


def _scorer(estimator, scoring):
    from sklearn.metrics import check_scoring

    try:
        return check_scoring(estimator, scoring=scoring)
    except (ValueError, TypeError) as exc:
        raise SettingError(f"scoring={scoring!r} is not a scikit-learn scoring name or scorer "
                           f"({exc}); use e.g. 'accuracy', 'balanced_accuracy' or 'roc_auc'"
                           ) from None


def _sklearn_shuffles(random_state: int, n_rows: int, n_repeats: int) -> np.ndarray:
    """The row orders scikit-learn's ``permutation_importance`` applies, repeat by repeat.

    It draws one seed from ``random_state`` and, for every column alike, shuffles an index
    array ``n_repeats`` times with a fresh ``RandomState(seed)``, each shuffle applied on top
    of the previous one. Reproducing that gives scikit-learn's numbers exactly (tested).
    """
    seed = np.random.RandomState(random_state).randint(np.iinfo(np.int32).max + 1)
    rs = np.random.RandomState(seed)
    idx = np.arange(n_rows)
    out = np.empty((n_repeats, n_rows), dtype=np.int64)
    for r in range(n_repeats):
        rs.shuffle(idx)
        out[r] = idx
    return out


def permutation_importance_result(forest: Forest, X, y=None, n_repeats: int = 5,
                                  random_state: int = 0, scoring="accuracy",
                                  progress: Callable | None = None,
                                  meter: StepMeter | None = None) -> PermutationImportance:
    """Permutation importance of each feature on the review data.

    Each column is shuffled ``n_repeats`` times (seeded by ``random_state``, in the same way
    as :func:`sklearn.inspection.permutation_importance`, whose numbers it equals) and the
    drop in score recorded. For accuracy the agreement of every row is kept, so the result
    also carries the standard error that the number of rows implies (``se``).

    Parameters
    ----------
    forest : Forest
    X : array-like of shape (n, n_features)
    y : array-like of shape (n,), optional
        True labels. Without them, the score is agreement with the forest's own predictions
        on the unshuffled data (fidelity): how much the model's answers depend on a feature.
    n_repeats : int
    random_state : int
    scoring : str or callable
        ``"accuracy"`` (computed here, with standard errors), or any other scikit-learn
        scoring name or scorer (through scikit-learn's function, without them).
    progress : callable, optional
        ``progress(done, total)`` after each of the ``1 + n_features * n_repeats`` scoring
        passes; raise from it to stop.
    meter : StepMeter, optional
        Counts the passes for a review step (progress, time left, cancel).

    Returns
    -------
    PermutationImportance
    """
    if isinstance(n_repeats, bool) or not isinstance(n_repeats, (int, np.integer)) or n_repeats < 1:
        raise SettingError(f"n_repeats={n_repeats!r} must be a whole number of at least 1")
    if isinstance(random_state, bool) or not isinstance(random_state, (int, np.integer)):
        raise SettingError(f"random_state={random_state!r} must be a whole number (a seed)")
    X = forest.check_X(X)
    if y is None:
        target, y = "model predictions", forest.predict(X)
    else:
        target, y = "labels", np.asarray(y).reshape(-1)
        if y.shape[0] != X.shape[0]:
            raise DataError(f"the target has {y.shape[0]} values but the data has {X.shape[0]} "
                            "rows; give one label per row")
    n_repeats, random_state = int(n_repeats), int(random_state)
    total = 1 + forest.n_features * n_repeats
    if scoring != "accuracy":
        return _permutation_by_sklearn(forest, X, y, n_repeats, random_state, scoring,
                                       progress, total, target)
    calls = 0

    def tick() -> None:
        nonlocal calls
        calls += 1
        if progress is not None:
            progress(calls, total)
        if meter is not None:
            meter.advance()

    hit0 = forest.predict(X) == y
    tick()
    n, p = X.shape
    shuffles = _sklearn_shuffles(random_state, n, n_repeats)
    drops = np.zeros((p, n_repeats))
    row_drop = np.zeros((p, n))
    column = X.copy()
    for j in range(p):
        original = X[:, j].copy()
        for r in range(n_repeats):
            column[:, j] = column[shuffles[r], j]
            hit = forest.predict(column) == y
            drops[j, r] = hit0.mean() - hit.mean()
            row_drop[j] += hit0.astype(np.float64) - hit
            tick()
        column[:, j] = original
    row_drop /= n_repeats
    se = row_drop.std(axis=1, ddof=1) / np.sqrt(n) if n > 1 else np.zeros(p)
    return PermutationImportance(
        feature_names=list(forest.feature_names), mean=drops.mean(axis=1),
        std=drops.std(axis=1), values=drops, baseline_score=float(hit0.mean()),
        scoring="accuracy", target=target, n_repeats=n_repeats, random_state=random_state,
        n_rows=int(n), se=se)


def _permutation_by_sklearn(forest, X, y, n_repeats, random_state, scoring, progress, total,
                            target) -> PermutationImportance:
    """Any other score, through scikit-learn's own function (no standard errors)."""
    from sklearn.inspection import permutation_importance

    est = ForestClassifier(forest, progress=progress, total_calls=total + 1)
    scorer = _scorer(est, scoring)
    baseline = float(scorer(est, X, y))
    res = permutation_importance(est, X, y, scoring=scorer, n_repeats=n_repeats,
                                 random_state=random_state)
    return PermutationImportance(
        feature_names=list(forest.feature_names), mean=res.importances_mean,
        std=res.importances_std, values=res.importances, baseline_score=baseline,
        scoring=scoring if isinstance(scoring, str) else getattr(scoring, "__name__", "custom"),
        target=target, n_repeats=n_repeats, random_state=random_state, n_rows=int(X.shape[0]))


def importance_comparison(impurity: ImpurityImportance,
                          permutation: PermutationImportance | None = None
                          ) -> ImportanceComparison:
    """Both importances side by side with their ranks, and the impurity caution."""
    if permutation is not None and list(permutation.feature_names) != list(impurity.feature_names):
        raise DataError("the two importances are over different features; compute both from "
                        "the same model")
    cmp = ImportanceComparison(feature_names=list(impurity.feature_names),
                               impurity=impurity.values, impurity_rank=impurity.ranks,
                               impurity_method=impurity.method)
    if permutation is not None:
        cmp.permutation_mean = permutation.mean
        cmp.permutation_std = permutation.std
        cmp.permutation_se = permutation.se
        cmp.permutation_rank = permutation.ranks
        cmp.permutation_setting = {"scoring": permutation.scoring, "target": permutation.target,
                                   "n_repeats": permutation.n_repeats,
                                   "random_state": permutation.random_state,
                                   "n_rows": permutation.n_rows,
                                   "sample": permutation.sample,
                                   "baseline_score": permutation.baseline_score}
    return cmp


@dataclass
class Reliance:
    """What the model relies on most, by the agreement of the importance measures it has.

    ``order`` ranks the features by their mean rank over ``measures`` (ties by impurity
    rank); ``disagreements`` names features whose ranks disagree strongly: high by impurity
    (top ``k``) while permutation finds no importance (at most one standard error above 0,
    or in the lower half of its ranking), and the reverse.
    """

    feature_names: list[str]
    measures: list[str]
    mean_rank: np.ndarray
    order: np.ndarray
    disagreements: list[str]

    def top(self, k: int = 3) -> list[str]:
        return [self.feature_names[j] for j in self.order[:k]]

    def headline(self, k: int = 3) -> str:
        by = " and ".join(self.measures)
        text = f"{', '.join(self.top(k))} (by the mean rank of {by})"
        return text

    def to_dict(self) -> dict:
        return {"kind": "reliance", "measures": self.measures,
                "feature_names": list(self.feature_names), "mean_rank": self.mean_rank.tolist(),
                "order": self.order.tolist(), "disagreements": list(self.disagreements)}


def reliance(cmp: ImportanceComparison, k: int = 3, extra: dict | None = None) -> Reliance:
    """Rank features by the agreement of impurity, permutation (and any ``extra`` measure:
    name -> ranks) importance, and flag the features on which the measures disagree."""
    names = list(cmp.feature_names)
    p = len(names)
    ranks = {"impurity importance": np.asarray(cmp.impurity_rank, dtype=np.float64)}
    if cmp.has_permutation:
        ranks["permutation importance"] = np.asarray(cmp.permutation_rank, dtype=np.float64)
    for name, r in (extra or {}).items():
        ranks[name] = np.asarray(r, dtype=np.float64)
    mean_rank = np.mean(list(ranks.values()), axis=0)
    order = np.lexsort((cmp.impurity_rank, mean_rank))
    notes = []
    if cmp.has_permutation:
        se = cmp.permutation_se if cmp.permutation_se is not None else np.zeros(p)
        none = (cmp.permutation_mean <= se) | (cmp.permutation_rank > p / 2)
        for j in np.argsort(cmp.impurity_rank, kind="stable")[:k]:
            if none[j]:
                notes.append(
                    f"{names[j]} is ranked {int(cmp.impurity_rank[j])} by impurity importance "
                    f"but permutation importance finds little or none "
                    f"({cmp.permutation_mean[j]:.4f}, rank {int(cmp.permutation_rank[j])}); "
                    "impurity importance favours features with many cut points and shares "
                    "credit among correlated features (Strobl et al. 2007)")
        for j in np.argsort(cmp.permutation_rank, kind="stable")[:k]:
            if cmp.impurity_rank[j] > p / 2 and cmp.permutation_mean[j] > se[j]:
                notes.append(
                    f"{names[j]} is ranked {int(cmp.permutation_rank[j])} by permutation "
                    f"importance but only {int(cmp.impurity_rank[j])} by impurity importance")
    return Reliance(names, list(ranks), mean_rank, order, notes)
