"""``ObliqueSurrogate``: the surrogate tree as a scikit-learn classifier."""

from __future__ import annotations

import json
import numbers

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.utils import check_random_state
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from ..errors import SettingError
from ..plain import to_plain
from .categories import CategoryOrder, EncodedTree, solo_mask
from .optimal_axis import AxisTree
from .pipeline import PipelineSettings, run_pipeline
from .program import ROUTINGS
from .rules import round_tree, tree_text
from .tree import (Scaling, depth_used, fill_empty_leaves, n_leaves, objective,
                   reachable_leaves, weighted_disagreement, with_majority_classes)

MAX_DEPTH = 6
# Sparsity costs below this share are treated as this share (the eps of 1 / max(f, eps)).
PENALTY_EPS = 0.01


class ObliqueSurrogate(ClassifierMixin, BaseEstimator):
    """A fixed-depth, sparse oblique decision tree fit by an anytime MILP pipeline.

    Each branch node tests ``c . x < t`` over at most ``max_features_per_split`` features;
    each leaf predicts one class. The tree is the best of: CART of the same depth, a
    node-by-node hyperplane search, the MILP of SURROGATE_MILP.md solved by HiGHS on a
    representative weighted sample (warm-started from the best candidate), and that
    program's tree polished on every row. Candidates are compared on the program's
    objective over all training rows: weighted disagreement (weights normalized to sum 1)
    plus ``alpha`` times the sparsity penalty.

    Parameters
    ----------
    depth : int, default=2
        Depth of the complete tree (``2**depth`` leaves), 1 to 6.
    max_features_per_split : int or None, default=None
        At most this many features per split (k); 1 gives an axis-aligned tree, None no cap.
        For readable rules :func:`~grovewise.surrogate.mimic` uses 2 by default
        (``READABLE_DEFAULTS``), the setting the benchmark picked.
    alpha : float, default=0.0
        Fidelity traded per unit of sparsity penalty (a feature costs ``feature_penalty``,
        1 unless given). :func:`~grovewise.surrogate.mimic` uses ``READABLE_DEFAULTS``.
    min_leaf_size : int, default=1
        A leaf that holds rows holds at least this many.
    time_limit : float, default=30.0
        Seconds for the whole fit.
    random_state : int, RandomState or None, default=None
        Seeds CART's tie-breaking, the sample and HiGHS.
    node_limit : int or None, default=None
        Branch-and-bound node limit for HiGHS (``mip_max_nodes``). Set it well below what
        the time limit allows to make a fit reproducible.
    mip_gap : float or None, default=None
        Relative gap at which HiGHS stops (its default 1e-4 when None).
    proximity_penalty : float or None, default=None
        When set, ``must_link`` pairs are soft: each separated pair costs this much
        (``beta``), in the program stage. When None they are hard.
    sample_size : int or None, default=None
        Points the program sees; None picks a size from depth, features and time limit.
    routing : {"node", "leaf"}, default="node"
        Routing rows of the program: per (point, node, side) or per (point, leaf, ancestor).
    threads : int or None, default=None
        HiGHS threads.
    prove : bool, default=True
        Prove a bound on every training row for the certificate (``bound_``, ``proof_``);
        False leaves it out, for a re-fit that only needs the tree (the stability step).
    oblique_level : float in (0, 1] or None, default=None
        When set, multi-feature splits must earn their place: the best candidate using them
        is kept over the best axis-aligned candidate only if it agrees with the ensemble on
        significantly more training rows (one-sided exact McNemar test on the rows where
        the two disagree, at this level); ``choice_`` says which way it went and why. None:
        the lower objective wins. :func:`~grovewise.surrogate.mimic` uses 0.05.

    Categorical features (``fit(..., category_order=...)``, see :mod:`.categories`): the data
    keeps category codes in such a column; the estimator replaces each code by its
    category's rank before fitting and in ``predict``, ``predict_proba`` and ``apply``, and
    a categorical feature only ever splits alone, so its rules read as sets of categories.

    Attributes
    ----------
    classes_ : ndarray
    tree_ : ObliqueTree
        The rounded tree the estimator predicts with (what ``rules_`` says); in the encoded
        space, where a categorical column holds ranks, not codes.
    exact_tree_ : ObliqueTree
        The tree before rounding.
    rules_ : str
        The tree as if/else text in original units; its first line gives the depth used.
    depth_used_ : int
        Levels of ``tree_`` that actually split (``<= depth``; 0 when the tree is one leaf
        and predicts one class for every row). No split of ``tree_`` has sides that predict
        the same class: such a split is removed in every stage, predictions unchanged.
    status_ : str
        ``optimal`` (proved best on every training row by ``proof_``), ``optimal_on_sample``
        (proved for the program's sample only), ``time_limit``, ``node_limit``, ``cancelled``, ``greedy_fallback``
        (the greedy tree is the answer), ``no_incumbent`` (the program found nothing; the
        answer is the best other candidate), ``skipped`` (no program was run).
    objective_ : float
        The program's objective for the returned (rounded) tree on the training rows.
    bound_ : float or None
        A proven lower bound on the least objective any tree of the fitted class (depth,
        features per split, admissible features, minimum leaf size) reaches on every row
        given to ``fit`` (:mod:`grovewise.surrogate.proof`), in the units of ``objective_``.
        (The program's own bound, on its sample only, is in ``result_.certificate``.)
    mip_gap_ : float or None
        ``(objective_ - bound_) / objective_``; 0 when the tree is proven best.
    bound_method_ : str or None
        The route whose bound won: ``classes``, ``parts`` or ``axis``.
    proof_ : Proof or None
        The bound on the weighted disagreement, every route's bound, and each proven part
        (``proof_.write_mps(folder)`` writes their programs).
    certificate_ : str or None
        The certificate in one sentence: the fidelity no tree of the class can beat, this
        tree's, and the gap.
    fidelity_ : float
        Weighted training fidelity of the rounded tree (``exact_fidelity_`` before rounding).
    result_ : PipelineResult
        Stages (each with its tree and ``depth_used``), certificate, sample size, read-back
        check.
    optimal_axis_ : AxisTree or None
        The exact optimal axis-aligned tree of the same depth (depth 1 and 2), the second
        baseline; ``objective_`` is its weighted disagreement on every training row.
    choice_ : str
        With ``oblique_level``: whether multi-feature splits were kept, with the counts and
        the test's p-value ("" otherwise, or when the best candidate is axis-aligned).
    greedy_ : DecisionTreeClassifier or EncodedTree
        The greedy baseline (CART); with categorical features it was fit on ranks, and is
        wrapped so that it too is given codes.
    category_order_ : CategoryOrder or None
        The order of the categories (None without categorical features).
    solo_features_ : ndarray of bool or None
        Features that only ever split alone.
    """

    def __init__(self, depth=2, max_features_per_split=None, alpha=0.0, min_leaf_size=1,
                 time_limit=30.0, random_state=None, *, node_limit=None, mip_gap=None,
                 proximity_penalty=None, sample_size=None, routing="node", threads=None,
                 prove=True, oblique_level=None):
        self.depth = depth
        self.max_features_per_split = max_features_per_split
        self.alpha = alpha
        self.min_leaf_size = min_leaf_size
        self.time_limit = time_limit
        self.random_state = random_state
        self.node_limit = node_limit
        self.mip_gap = mip_gap
        self.proximity_penalty = proximity_penalty
        self.sample_size = sample_size
        self.routing = routing
        self.threads = threads
        self.prove = prove
        self.oblique_level = oblique_level

    # ------------------------------------------------------------------ checks
    def _check_params(self) -> None:
        def integer(name, lo, hi=None, none=False):
            v = getattr(self, name)
            if v is None and none:
                return
            if not isinstance(v, numbers.Integral) or isinstance(v, bool) or v < lo or (
                    hi is not None and v > hi):
                rng = f"{lo} to {hi}" if hi is not None else f">= {lo}"
                raise SettingError(f"{name}={v!r} is not valid: give an integer {rng}"
                                   + (" or None" if none else ""))

        def real(name, lo, strict=False, none=False):
            v = getattr(self, name)
            if v is None and none:
                return
            if (not isinstance(v, numbers.Real) or isinstance(v, bool) or not np.isfinite(v)
                    or v < lo or (strict and v == lo)):
                raise SettingError(f"{name}={v!r} is not valid: give a number "
                                   f"{'>' if strict else '>='} {lo}" + (" or None" if none else ""))

        integer("depth", 1, MAX_DEPTH)
        integer("max_features_per_split", 1, none=True)
        real("alpha", 0.0)
        integer("min_leaf_size", 1)
        real("time_limit", 0.0, strict=True)
        integer("node_limit", 0, none=True)
        real("mip_gap", 0.0, none=True)
        real("proximity_penalty", 0.0, none=True)
        real("oblique_level", 0.0, strict=True, none=True)
        if self.oblique_level is not None and self.oblique_level > 1:
            raise SettingError(f"oblique_level={self.oblique_level!r} is not valid: give a "
                               "number in (0, 1] or None")
        integer("sample_size", 2, none=True)
        integer("threads", 1, none=True)
        if self.routing not in ROUTINGS:
            raise SettingError(f"routing={self.routing!r} is not valid: use one of {ROUTINGS}")

    def _feature_table(self, value, p: int, name: str, kind: str) -> np.ndarray:
        """A per-feature setting as a (depth, p) table; accepts (p,), (depth, p) or indices."""
        D = self.depth
        if value is None:
            return np.ones((D, p), dtype=bool) if kind == "bool" else np.ones((D, p))
        arr = np.asarray(value)
        if kind == "bool" and arr.ndim == 1 and arr.dtype != bool:
            idx = arr.astype(np.int64)
            if idx.size and (idx.min() < 0 or idx.max() >= p):
                raise SettingError(f"{name} lists feature indices outside 0..{p - 1}")
            mask = np.zeros(p, dtype=bool)
            mask[idx] = True
            arr = mask
        if arr.shape == (p,):
            arr = np.broadcast_to(arr, (D, p)).copy()
        if arr.shape != (D, p):
            raise SettingError(f"{name} has shape {arr.shape}; give one value per feature "
                               f"({p},) or per depth and feature ({D}, {p})")
        if kind == "bool":
            return arr.astype(bool)
        arr = arr.astype(np.float64)
        if not np.all(np.isfinite(arr)) or np.any(arr < 0):
            raise SettingError(f"{name} must hold finite non-negative costs")
        return arr

    # ------------------------------------------------------------------ fit
    def fit(self, X, y, sample_weight=None, *, must_link=None, allowed_features=None,
            feature_penalty=None, feature_names=None, progress=None, cancel=None,
            mps_path=None, started=None, solo_features=None, category_order=None):
        """Fit the surrogate.

        Parameters
        ----------
        X : array-like (n_samples, n_features)
        y : array-like (n_samples,)
            Targets (for a surrogate: the ensemble's predicted classes).
        sample_weight : array-like (n_samples,), optional
            Fidelity weights (for a surrogate: the ensemble's probability of its class).
        must_link : array-like (m, 2) of int, optional
            Row pairs that must end in the same leaf (hard; soft with ``proximity_penalty``).
        allowed_features : array-like, optional
            Boolean mask (n_features,) or (depth, n_features), or a list of feature indices:
            the features a split may use (at each depth).
        feature_penalty : array-like, optional
            Sparsity cost per feature, (n_features,) or (depth, n_features); 1 when None.
        feature_names : list of str, optional
            Names used in ``rules_`` (default: the DataFrame's columns, else ``x0, x1, ...``).
        progress : callable, optional
            Called with :class:`~grovewise.surrogate.solver.Progress` reports.
        cancel : Cancel, optional
            Set from another thread to stop; the best tree so far is kept (status
            ``cancelled``).
        mps_path : str, optional
            Write the program HiGHS solves (on its sample) to this MPS file.
        started : float, optional
            ``time.perf_counter()`` when the time limit began (default: now), so that work
            done before ``fit`` counts against ``time_limit`` too.
        solo_features : array-like, optional
            Feature indices or a boolean mask (n_features,): features that may only split
            alone, never in a combination with another feature. Default: the categorical
            features of ``category_order`` (none without it).
        category_order : CategoryOrder, optional
            The order of the categories of the categorical features
            (:func:`~grovewise.surrogate.categories.order_categories`). ``X`` then holds
            category codes in those columns, here and in ``predict``, ``predict_proba`` and
            ``apply``.
        """
        self._check_params()
        X, y = validate_data(self, X, y, dtype=np.float64)
        check_classification_targets(y)
        n, p = X.shape
        order = self._category_order(category_order, p)
        if order is not None:
            X = order.encode(X)
        try:
            solo = solo_mask(order.features if solo_features is None and order is not None
                             else solo_features, p)
        except ValueError as exc:
            raise SettingError(str(exc)) from None
        w = self._weights(sample_weight, n)
        self.classes_, y_idx = np.unique(y, return_inverse=True)
        keep = w > 0
        if not keep.any():
            raise SettingError("every sample_weight is zero: give some rows a positive weight")
        admissible = self._feature_table(allowed_features, p, "allowed_features", "bool")
        penalty = self._feature_table(feature_penalty, p, "feature_penalty", "float")
        pairs = self._pairs(must_link, n, keep)
        Xk, yk, wk = X[keep], y_idx[keep], w[keep]
        scaling = Scaling.fit(Xk)
        admissible = admissible & ~scaling.constant[None, :]
        seed = int(check_random_state(self.random_state).randint(0, 2 ** 31 - 1))
        st = PipelineSettings(
            depth=int(self.depth), admissible=admissible, penalty=penalty, alpha=float(self.alpha),
            max_features=self.max_features_per_split, min_leaf_size=int(self.min_leaf_size),
            time_limit=float(self.time_limit), node_limit=self.node_limit, mip_gap=self.mip_gap,
            seed=seed, sample_size=self.sample_size, routing=self.routing,
            proximity_penalty=self.proximity_penalty, threads=self.threads,
            mps_path=None if mps_path is None else str(mps_path), started=started, solo=solo,
            prove=bool(self.prove), oblique_level=self.oblique_level)
        hard = pairs if self.proximity_penalty is None else None
        soft = pairs if self.proximity_penalty is not None else None
        res = run_pipeline(Xk, yk, wk, len(self.classes_), scaling, st, must_link=hard,
                           soft_pairs=soft, progress=progress, cancel=cancel)
        self.category_order_ = order
        self.solo_features_ = solo
        self._finish(res, Xk, yk, wk, scaling, penalty, feature_names, p)
        return self

    @staticmethod
    def _category_order(order, p: int) -> CategoryOrder | None:
        if order is None:
            return None
        if not isinstance(order, CategoryOrder):
            raise SettingError("category_order must be a CategoryOrder (from "
                               "grovewise.surrogate.categories.order_categories)")
        bad = [j for j in order.features if not 0 <= int(j) < p]
        if bad:
            raise SettingError(f"category_order names feature(s) {bad}, outside 0..{p - 1}")
        return order

    def _weights(self, sample_weight, n: int) -> np.ndarray:
        if sample_weight is None:
            return np.ones(n)
        w = np.asarray(sample_weight, dtype=np.float64).reshape(-1) if not np.isscalar(
            sample_weight) else np.full(n, float(sample_weight))
        if w.shape != (n,):
            raise ValueError(f"sample_weight has shape {w.shape}; expected ({n},)")
        if not np.all(np.isfinite(w)) or np.any(w < 0):
            raise ValueError("sample_weight must be finite and non-negative")
        return w

    @staticmethod
    def _pairs(must_link, n: int, keep: np.ndarray) -> np.ndarray | None:
        if must_link is None:
            return None
        pr = np.asarray(must_link, dtype=np.int64).reshape(-1, 2)
        if pr.size and (pr.min() < 0 or pr.max() >= n):
            raise SettingError(f"must_link names rows outside 0..{n - 1}")
        new_index = np.cumsum(keep) - 1
        pr = pr[keep[pr[:, 0]] & keep[pr[:, 1]]]
        return new_index[pr]

    def _finish(self, res, Xk, yk, wk, scaling, penalty, feature_names, p) -> None:
        Xs = scaling.transform(Xk)
        wn = wk / wk.sum()
        K = len(self.classes_)
        exact = with_majority_classes(res.tree, Xs, yk, wk, K)
        order = self.category_order_
        rounded, rules = round_tree(exact, Xs, order)
        # if rounding moved a point, its leaves' classes are assigned anew, and a split that
        # then decides nothing goes (with_majority_classes): its rule goes with it
        rounded = with_majority_classes(rounded, Xs, yk, wk, K)
        rules = [r for r in rules if rounded.splits[r.node]]
        names = self._names(feature_names, p)
        self.exact_tree_ = exact
        self.tree_ = rounded
        self.rules_list_ = rules
        self.depth_used_ = depth_used(rounded)
        self.feature_names_ = names
        self.result_ = res
        # the baseline was fit on class indices; give it the labels so it predicts like us
        res.greedy.classes_ = self.classes_[res.greedy.classes_.astype(np.int64)]
        if order is not None:  # fit on ranks: it is given codes, like the surrogate
            res.greedy = EncodedTree(res.greedy, order)
        self.greedy_ = res.greedy
        self.optimal_axis_ = None
        if res.axis is not None:
            axis = AxisTree(res.axis, self.classes_, order)
            # scored on every training row (the search may have run on a sample of them)
            axis.objective_ = float(weighted_disagreement(res.axis_tree, Xs, yk, wn))
            self.optimal_axis_ = axis
        self.exact_fidelity_ = 1.0 - weighted_disagreement(exact, Xs, yk, wn)
        self.fidelity_ = 1.0 - weighted_disagreement(rounded, Xs, yk, wn)
        self.objective_ = objective(rounded, Xs, yk, wn, self.alpha, penalty)
        self.proof_ = res.proof
        self.bound_ = res.bound
        if res.proof is not None:  # the proof holds on every row: gap of the tree returned
            self.bound_ = min(res.bound, self.objective_)
            self.mip_gap_ = (0.0 if self.objective_ - self.bound_ <= 1e-9 else
                             float((self.objective_ - self.bound_) / self.objective_))
        else:
            self.mip_gap_ = res.gap
        self.bound_method_ = None if res.proof is None else res.proof.method
        self.certificate_ = (None if res.proof is None else
                             res.proof.sentence(1.0 - self.fidelity_))
        self.status_ = res.status
        self.winner_ = res.winner
        self.choice_ = res.choice
        self.stages_ = res.stages
        leaf = rounded.route_scaled(Xs)
        self.leaf_rows_ = np.bincount(leaf, minlength=n_leaves(rounded.depth))
        lw = rounded.leaf_weight
        tot = lw.sum(axis=1)
        agree = lw[np.arange(lw.shape[0]), rounded.leaf_class]
        self.leaf_fidelity_ = np.where(tot > 0, agree / np.where(tot > 0, tot, 1.0), np.nan)
        self.rules_ = tree_text(rounded, rules, names, list(self.classes_), self.leaf_rows_,
                                self.leaf_fidelity_)

    def _names(self, feature_names, p: int) -> list[str]:
        if feature_names is not None:
            names = [str(v) for v in feature_names]
            if len(names) != p:
                raise SettingError(f"feature_names has {len(names)} names; the data has {p} columns")
            return names
        if hasattr(self, "feature_names_in_"):
            return [str(v) for v in self.feature_names_in_]
        return [f"x{j}" for j in range(p)]

    # ------------------------------------------------------------------ predict
    def _scaled(self, X) -> np.ndarray:
        check_is_fitted(self)
        X = validate_data(self, X, dtype=np.float64, reset=False)
        return self.tree_.scaling.transform(self.encode(X))

    def encode(self, X) -> np.ndarray:
        """``X`` as the tree reads it: each category code replaced by its rank (unchanged
        without categorical features)."""
        order = getattr(self, "category_order_", None)
        return np.asarray(X, dtype=np.float64) if order is None else order.encode(X)

    def apply(self, X) -> np.ndarray:
        """Leaf index (0 .. 2**depth - 1) of every row."""
        Xs = self._scaled(X)
        return self.tree_.route_scaled(Xs)

    def predict_proba(self, X) -> np.ndarray:
        """Training weight share per class in the leaf each row reaches."""
        leaf = self.apply(X)
        lw = fill_empty_leaves(self.tree_.leaf_weight, self.tree_.depth)
        tot = lw.sum(axis=1, keepdims=True)
        share = lw / np.where(tot > 0, tot, 1.0)
        return share[leaf]

    def predict(self, X) -> np.ndarray:
        """Class of the leaf each row reaches."""
        leaf = self.apply(X)
        return self.classes_[self.tree_.leaf_class[leaf]]

    # ------------------------------------------------------------------ export
    def export_text(self) -> str:
        """The rules as text (``rules_``), with status, fidelity and certificate."""
        check_is_fitted(self)
        head = [f"# oblique surrogate: status {self.status_}, winner {self.winner_}",
                f"# training fidelity {self.fidelity_:.4f} (rounded rules), "
                f"{self.exact_fidelity_:.4f} (exact)",
                f"# objective {self.objective_:.6g}, bound "
                f"{'n/a' if self.bound_ is None else f'{self.bound_:.6g}'}, gap "
                f"{'n/a' if self.mip_gap_ is None else f'{self.mip_gap_:.4g}'}"]
        return "\n".join(head + [self.rules_]) + "\n"

    def to_dict(self) -> dict:
        """The fitted surrogate as JSON-serialisable data."""
        check_is_fitted(self)
        names = self.feature_names_
        classes = [c.item() if hasattr(c, "item") else c for c in self.classes_]
        reach = set(reachable_leaves(self.tree_).tolist())
        leaves = [{"leaf": l, "class": classes[int(self.tree_.leaf_class[l])],
                   "reachable": l in reach, "rows": int(self.leaf_rows_[l]),
                   "weight_per_class": self.tree_.leaf_weight[l].tolist(),
                   "fidelity": None if np.isnan(self.leaf_fidelity_[l]) else
                   float(self.leaf_fidelity_[l])} for l in range(n_leaves(self.depth))]
        return {
            "kind": "oblique_surrogate", "depth": int(self.depth),
            "depth_used": int(self.depth_used_), "feature_names": names,
            "classes": classes, "rules": [r.to_dict(names) for r in self.rules_list_],
            "leaves": leaves, "tree_scaled": self.tree_.to_dict(),
            "status": self.status_, "winner": self.winner_, "objective": self.objective_,
            "bound": self.bound_, "mip_gap": self.mip_gap_, "fidelity": self.fidelity_,
            "exact_fidelity": self.exact_fidelity_, "params": to_plain(self.get_params()),
            "pipeline": to_plain(self.result_.to_dict()),
            "category_order": None if getattr(self, "category_order_", None) is None else
            self.category_order_.to_dict(),
        }

    def export_json(self, path=None) -> str:
        """The fitted surrogate as a JSON string (also written to ``path`` when given)."""
        text = json.dumps(self.to_dict(), indent=2)
        if path is not None:
            with open(path, "w", encoding="utf-8") as fh:
                fh.write(text)
        return text

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.non_deterministic = False
        return tags


