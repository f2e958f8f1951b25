"""``mimic``: fit the surrogate tree of a Forest on review data and report how well it agrees.

Targets are the forest's predicted classes, weights its probability of them (contradicting
a confident prediction costs more). The features a split may use at each depth, and what
each costs, come from the forest's own depth usage: ``f[d, j]``, the share of the forest's
split nodes at depth d that use feature j. Rows the forest treats alike (proximity at or
above the threshold) must share a leaf (or, with ``proximity_penalty``, pay when they don't).

A categorical feature of the forest (its column holds category codes) is handed to the
surrogate with its categories in order (:func:`~.categories.order_categories`, from the
training rows and the forest's probabilities): it only splits alone, as a set of categories.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import sklearn

from ..analysis.intervals import wilson_interval
from ..analysis.proximity import proximity_pairs
from ..analysis.usage import depth_usage
from ..errors import DataError, SettingError
from ..forest import Forest
from ..plain import to_plain
from ..sampling import stratified_rows
from .categories import order_categories
from .estimator import PENALTY_EPS, ObliqueSurrogate
from .solver import versions
from .tree import n_leaves, reachable_leaves

# Defaults for readable rules, from the benchmark's readability grid (test_readability_defaults:
# depth 2, random forest, breast cancer / wine / make_classification, 10 s per fit). Mean
# holdout gain over CART: k=1 +3.3 points (alpha 0 or 1e-4); k=2 +3.3 (alpha 0), +1.8 (1e-4),
# +2.6 (1e-3); no cap +4.5 (alpha 0) with up to 8 features per split. k = 2 keeps every rule a
# two-term comparison; alpha = 1e-4 used one feature fewer per tree on two of the three sets.
# The grid's differences are one to two holdout rows, so read them as ties; on the full panel
# (60 s) these defaults gave +4.9 points on average at depth 2.
# oblique_level: two-feature splits must agree on significantly more training rows than the
# best axis-aligned candidate (one-sided exact McNemar, 5%). On 105 to 398 training rows (iris,
# wine, breast cancer) a gain of 2 to 4 rows is not significant; on the depth-2 panel (60 s,
# 5 splits per row, test_surrogate_proof_bench) it handed the answer to an axis-aligned tree
# on 16 of 60 splits, and the mean holdout gain over greedy was +4.28 points against +4.12
# for the objective's own choice, measured in the same run (row by row -0.47 to +1.86); at
# depth 3 (30 s), where the axis-aligned candidate is CART, +2.91 against +3.02 (-2.96 on
# wine's forest to +2.22 on iris's XGBoost). A wash for fidelity: it buys readable
# axis-aligned rules where two-feature splits have no evidence behind them.
READABLE_DEFAULTS = {"max_features_per_split": 2, "alpha": 1e-4, "oblique_level": 0.05}
# A feature is admissible at a depth if it does at least this share of the forest's splits there.
USAGE_FLOOR = 0.01
_ESTIMATOR_OPTIONS = {"max_features_per_split", "alpha", "min_leaf_size", "time_limit",
                      "random_state", "node_limit", "mip_gap", "proximity_penalty",
                      "sample_size", "routing", "threads", "prove", "oblique_level"}
# Training rows among which must-link pairs are looked for: pairs of rows cost far more than
# rows, and the program sees a sample of a few thousand points anyway.
PROXIMITY_ROWS = 3_000
_MIMIC_OPTIONS = {"forbidden_features", "usage_floor", "usage_weight", "progress", "cancel",
                  "proba", "proximity_rows", "started",
                  "mps_path"}


@dataclass
class MimicResult:
    """The surrogate of a forest with its fidelity, certificate and per-leaf report.

    Attributes
    ----------
    surrogate : ObliqueSurrogate
    greedy : DecisionTreeClassifier or EncodedTree
        CART of the same depth on the same targets and weights (the baseline); with
        categorical features, wrapped so that it is given category codes like the surrogate.
    greedy_optimal : AxisTree or None
        The proven-optimal axis-aligned tree of the same depth (depth 1 and 2) on the same
        targets and weights, the second baseline.
    fidelity : dict
        ``{"surrogate": {"train", "holdout", "full", "train_ci", "holdout_ci"}, "greedy":
        {...}, "optimal_axis": {...}}``: share of rows where the tree predicts the forest's
        class (``holdout`` None without a holdout), ``*_ci`` its 95% Wilson interval
        (:func:`~grovewise.analysis.intervals.wilson_interval`).
    weighted_fidelity : dict
        The same, each row weighted by the forest's probability of its class.
    certificate : dict
        Status, objective, bound, gap, time, sample, read-back check, solver and versions.
    leaves : list of dict
        Per leaf: class, training rows, coverage (share of training rows), fidelity, and the
        same on the holdout.
    sample_size : int or None
        Points the program saw (None when it did not run).
    stages : list of dict
        Each candidate's stage, objective, fidelity and time.
    winner : str
        The stage whose tree was chosen; ``note`` says it plainly when that is the greedy tree.
    category_order : CategoryOrder or None
        The order of the categories of the categorical features, from the training rows
        (None without categorical features); the surrogate holds the same.
    """

    surrogate: ObliqueSurrogate
    greedy: object
    greedy_optimal: object
    fidelity: dict
    weighted_fidelity: dict
    certificate: dict
    leaves: list
    sample_size: int | None
    stages: list
    winner: str
    note: str
    proximity: dict
    settings: dict
    train_rows: np.ndarray = field(repr=False)
    holdout_rows: np.ndarray = field(repr=False)
    category_order: object = None
    # fidelity per group of the protected features and group columns (set by a review:
    # grovewise.analysis.group_fidelity.GroupFidelity each)
    group_fidelity: list = field(default_factory=list)

    def to_dict(self) -> dict:
        return to_plain({
            "kind": "surrogate_result", "fidelity": self.fidelity,
            "weighted_fidelity": self.weighted_fidelity, "certificate": self.certificate,
            "leaves": self.leaves, "sample_size": self.sample_size, "stages": self.stages,
            "winner": self.winner, "note": self.note, "proximity": self.proximity,
            "settings": self.settings, "rules": self.surrogate.rules_,
            "surrogate": self.surrogate.to_dict(),
            "train_rows": self.train_rows.tolist(), "holdout_rows": self.holdout_rows.tolist(),
        })


def mimic(forest: Forest, X, depth: int = 2, proximity_threshold: float | None = 0.9,
          holdout=None, **options) -> MimicResult:
    """Fit a depth-``depth`` oblique surrogate of ``forest`` on ``X``.

    Parameters
    ----------
    forest : Forest
    X : array-like (n, n_features)
        Review data, without missing values (the tree cannot route a missing value).
    depth : int
    proximity_threshold : float or None
        Training rows whose proximity (share of trees with a common leaf, Breiman) is at least
        this must share a leaf; None for no proximity.
    holdout : None, float or array-like
        None: fit on every row. A float in (0, 1): that share of rows, stratified by the
        forest's class (seeded by ``random_state``), is held out. Row indices or a boolean
        mask: those rows are held out.
    **options
        ``ObliqueSurrogate`` parameters (``max_features_per_split``, ``alpha`` and
        ``oblique_level`` default to ``READABLE_DEFAULTS``; ``time_limit`` to 60 s for the
        whole fit), and:
        ``forbidden_features`` (names or indices never to use), ``usage_floor`` (default
        ``USAGE_FLOOR``), ``usage_weight`` (``count``, ``gain`` or ``cover``), ``progress``,
        ``cancel`` and ``mps_path`` (see ``ObliqueSurrogate.fit``).
    """
    X = forest.check_X(X)
    if np.isnan(X).any():
        rows = np.flatnonzero(np.isnan(X).any(axis=1))
        raise DataError(f"{rows.size} row(s) have missing values (first, numbered from 1: "
                        f"{(rows[:5] + 1).tolist()}); "
                        "the surrogate tree needs complete rows: drop or impute them first")
    opts = dict(options)
    progress, cancel = opts.pop("progress", None), opts.pop("cancel", None)
    mps_path = opts.pop("mps_path", None)
    forbidden = opts.pop("forbidden_features", None)
    floor = float(opts.pop("usage_floor", USAGE_FLOOR))
    weight_kind = opts.pop("usage_weight", "count")
    given_proba = opts.pop("proba", None)
    prox_rows = int(opts.pop("proximity_rows", PROXIMITY_ROWS))
    started = opts.pop("started", None)
    unknown = set(opts) - _ESTIMATOR_OPTIONS
    if unknown:
        known = sorted(_ESTIMATOR_OPTIONS | _MIMIC_OPTIONS)
        raise SettingError(f"mimic got unknown option(s) {sorted(unknown)}; known: {known}")
    params = {**READABLE_DEFAULTS, "time_limit": 60.0, **opts}
    seed = params.get("random_state")

    proba = forest.predict_proba(X) if given_proba is None else np.asarray(given_proba)
    yhat = np.argmax(proba, axis=1)
    w = proba[np.arange(X.shape[0]), yhat]
    train, hold = _split(holdout, yhat, seed)
    allowed, penalty, f = _feature_tables(forest, depth, floor, forbidden, weight_kind)
    pairs, prox = _proximity(forest, X[train], yhat[train], proximity_threshold, prox_rows,
                             seed or 0)

    order = order_categories(forest, X[train], proba[train])
    est = ObliqueSurrogate(depth=depth, **params)
    labels = forest.classes_[yhat]
    est.fit(X[train], labels[train], w[train], must_link=pairs, allowed_features=allowed,
            feature_penalty=penalty, feature_names=forest.feature_names,
            progress=progress, cancel=cancel, mps_path=mps_path, started=started,
            category_order=order)
    prox["separated_pairs"] = _separated(est, X[train], pairs)
    greedy = est.greedy_
    res = est.result_
    fid, wfid = _fidelity(est, greedy, est.optimal_axis_, X, labels, w, train, hold)
    note = ""
    if res.winner == "greedy" and not res.choice:
        note = ("The greedy tree (CART) is the answer: no other candidate beat it on "
                "full-training weighted fidelity.")
    note = " ".join(s for s in (note, res.choice) if s)
    cert = {
        "status": est.status_, "objective": est.objective_, "bound": est.bound_,
        "gap": est.mip_gap_, "bound_method": est.bound_method_,
        "statement": est.certificate_,
        "proof": None if est.proof_ is None else est.proof_.to_dict(),
        "program_bound": None if res.certificate is None else res.certificate.get("bound"),
        "optimal_axis": None if est.optimal_axis_ is None else {
            "objective": est.optimal_axis_.objective_, "optimal": est.optimal_axis_.optimal_,
            "note": res.axis_note},
        "time": res.total_time, "solve_time": res.solve_time,
        "build_time": res.build_time, "first_candidate_time": res.first_candidate_time,
        "nodes": None if res.certificate is None else res.certificate.get("nodes"),
        "program_status": None if res.certificate is None else res.certificate.get("status"),
        "sample": res.sample, "program_size": res.program_size, "readback": res.readback,
        "solver": "HiGHS", "versions": {**versions(), "scikit-learn": sklearn.__version__,
                                        "numpy": np.__version__},
    }
    return MimicResult(
        surrogate=est, greedy=greedy, greedy_optimal=est.optimal_axis_, fidelity=fid, weighted_fidelity=wfid, certificate=cert,
        leaves=_leaves(est, X, labels, train, hold), sample_size=None if res.sample is None
        else res.sample["points"], stages=[s.to_dict() for s in res.stages], winner=res.winner,
        note=note, proximity=prox,
        settings={"depth": depth, "proximity_threshold": proximity_threshold,
                  "usage_floor": floor, "usage_weight": weight_kind,
                  "forbidden_features": _plain_list(forbidden), **to_plain(params),
                  "usage_shares": f.tolist()},
        train_rows=train, holdout_rows=hold, category_order=order)


def _plain_list(v):
    return None if v is None else [x if isinstance(x, str) else int(x) for x in v]


def _split(holdout, yhat: np.ndarray, seed) -> tuple[np.ndarray, np.ndarray]:
    n = yhat.shape[0]
    if holdout is None:
        return np.arange(n), np.zeros(0, dtype=np.int64)
    if isinstance(holdout, float):
        if not 0.0 < holdout < 1.0:
            raise SettingError(f"holdout={holdout!r}: give a share between 0 and 1, row indices "
                               "or a boolean mask")
        from sklearn.model_selection import train_test_split
        idx = np.arange(n)
        counts = np.bincount(yhat)
        strat = yhat if counts[counts > 0].min() >= 2 else None
        tr, ho = train_test_split(idx, test_size=holdout, stratify=strat, random_state=seed)
        return np.sort(tr), np.sort(ho)
    arr = np.asarray(holdout)
    mask = np.zeros(n, dtype=bool)
    if arr.dtype == bool:
        if arr.shape != (n,):
            raise SettingError(f"the holdout mask has {arr.shape[0]} entries for {n} rows")
        mask = arr.copy()
    else:
        idx = arr.astype(np.int64).reshape(-1)
        if idx.size and (idx.min() < 0 or idx.max() >= n):
            raise SettingError(f"holdout lists rows outside 0..{n - 1}")
        mask[idx] = True
    if mask.all():
        raise SettingError("the holdout holds every row: keep some rows to fit on")
    return np.flatnonzero(~mask), np.flatnonzero(mask)


def _feature_tables(forest: Forest, depth: int, floor: float, forbidden, weight_kind):
    """Admissible features and sparsity costs per surrogate depth, from f[d, j]."""
    usage = depth_usage(forest, weight=weight_kind)
    shares = np.asarray(usage.shares, dtype=np.float64)  # (p, n_depths)
    overall = usage.matrix.sum(axis=1)
    overall = overall / overall.sum() if overall.sum() > 0 else np.full(shares.shape[0], 1.0)
    p = forest.n_features
    f = np.zeros((depth, p))
    for d in range(depth):
        col = shares[:, d] if d < shares.shape[1] else None
        f[d] = col if col is not None and col.sum() > 0 else overall
    banned = np.zeros(p, dtype=bool)
    for item in forbidden or []:
        if isinstance(item, str):
            if item not in forest.feature_names:
                raise SettingError(f"forbidden feature {item!r} is not a feature of the model")
            banned[forest.feature_names.index(item)] = True
        else:
            if not 0 <= int(item) < p:
                raise SettingError(f"forbidden feature index {item} is outside 0..{p - 1}")
            banned[int(item)] = True
    allowed = (f >= floor) & ~banned[None, :]
    for d in range(depth):  # never leave a depth with nothing: keep its most used feature
        if not allowed[d].any():
            order = np.argsort(-f[d])
            free = [j for j in order if not banned[j]]
            if free:
                allowed[d, free[0]] = True
    penalty = 1.0 / np.maximum(f, PENALTY_EPS)
    return allowed, penalty, f


def _proximity(forest: Forest, Xtr: np.ndarray, ytr: np.ndarray, threshold, max_rows: int,
               seed: int):
    """Training pairs at or above the threshold that the forest also gives the same class,
    among at most ``max_rows`` training rows (a seeded sample stratified by class beyond).

    Pairs of different predicted classes are left out: chained through other pairs they can
    tie a whole data set into one group (seen with boosted trees, whose leaves are shared
    across classes), and keeping them together would force disagreements.
    """
    if threshold is None:
        return None, {"threshold": None, "pairs": 0}
    sample = stratified_rows(ytr, Xtr.shape[0], max_rows, seed)
    rows = sample.rows
    i, j, _p = proximity_pairs(forest, Xtr[rows], threshold)
    same = ytr[rows[i]] == ytr[rows[j]]
    pairs = np.stack([rows[i[same]], rows[j[same]]], axis=1).astype(np.int64)
    return pairs, {"threshold": float(threshold), "pairs": int(pairs.shape[0]),
                   "searched": sample.to_dict(),
                   "pairs_across_classes_dropped": int(np.count_nonzero(~same)),
                   "rows_in_pairs": int(np.unique(pairs).size)}


def _separated(est: ObliqueSurrogate, Xtr: np.ndarray, pairs) -> int:
    if pairs is None or not len(pairs):
        return 0
    leaf = est.apply(Xtr)
    return int(np.count_nonzero(leaf[pairs[:, 0]] != leaf[pairs[:, 1]]))


def _fidelity(est, greedy, axis, X, yhat, w, train, hold):
    """Agreement with the forest's class (``yhat``: labels) per tree and part of the data,
    with the 95% Wilson interval of the unweighted share on the training and holdout rows."""
    trees = [("surrogate", est.predict(X)), ("greedy", greedy.predict(X))]
    if axis is not None:
        trees.append(("optimal_axis", axis.predict(X)))
    fid, wfid = {}, {}
    for name, pred in trees:
        agree = pred == yhat
        fid[name], wfid[name] = {}, {}
        for part, rows in (("train", train), ("holdout", hold), ("full", np.arange(X.shape[0]))):
            if rows.size == 0:
                fid[name][part] = wfid[name][part] = None
                if part != "full":
                    fid[name][f"{part}_ci"] = None
                continue
            fid[name][part] = float(agree[rows].mean())
            wfid[name][part] = float((w[rows] * agree[rows]).sum() / w[rows].sum())
            if part != "full":
                fid[name][f"{part}_ci"] = wilson_interval(int(agree[rows].sum()), int(rows.size))
    return fid, wfid


def _leaves(est, X, yhat, train, hold) -> list[dict]:
    leaf = est.apply(X)
    pred = est.predict(X)
    reach = set(reachable_leaves(est.tree_).tolist())
    out = []
    for l in range(n_leaves(est.depth)):
        row = {"leaf": l, "class": to_plain(est.classes_[int(est.tree_.leaf_class[l])]),
               "reachable": l in reach}
        for part, rows in (("train", train), ("holdout", hold)):
            here = rows[leaf[rows] == l]
            row[f"{part}_rows"] = int(here.size)
            row[f"{part}_coverage"] = float(here.size / rows.size) if rows.size else None
            row[f"{part}_fidelity"] = float((pred[here] == yhat[here]).mean()) if here.size else None
        out.append(row)
    return out
