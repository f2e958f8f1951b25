"""The one normalized in-memory tree ensemble, with exact prediction.

Every model format is converted once into a :class:`Forest`; every analysis reads it and
nothing else. A Forest reproduces the source library's ``predict_proba``, ``predict`` and
``apply`` exactly, because it keeps the library's own comparison rule (which float type,
``<=`` or ``<``) and its own way of turning leaf values into class probabilities.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
from scipy.special import expit

from .errors import DataError, ModelFileError, UnsupportedModelError
from .traversal import decide_many, leaf_nodes

# How a split node compares a feature value with its threshold (the library's own rule).
COMPARE_LE_FLOAT32 = "le_float32"  # scikit-learn trees: float32(x) <= threshold (float64)
COMPARE_LE_FLOAT64 = "le_float64"  # scikit-learn histogram boosting: x <= threshold
COMPARE_LT_FLOAT32 = "lt_float32"  # XGBoost: float32(x) < float32(threshold)
COMPARES = (COMPARE_LE_FLOAT32, COMPARE_LE_FLOAT64, COMPARE_LT_FLOAT32)
FLOAT32_COMPARES = (COMPARE_LE_FLOAT32, COMPARE_LT_FLOAT32)
FLOAT32_MAX = float(np.finfo(np.float32).max)  # 3.4028235e38, IEEE 754 binary32's largest

# How leaf values become class probabilities.
LINK_MEAN = "mean"  # each leaf holds class probabilities; the ensemble averages them
LINK_LOGISTIC = "logistic"  # one output: p(classes_[1]) = expit(base + sum of leaf values)
LINK_SOFTMAX = "softmax"  # one output per class: softmax(base + sum of leaf values)
LINKS = (LINK_MEAN, LINK_LOGISTIC, LINK_SOFTMAX)

# Where a numeric split sends a missing value, and the categorical rule codes: defined once,
# beside the compiled rule that reads them.
from .traversal import (MISSING_NAN, MISSING_NONE, MISSING_ZERO,  # noqa: E402,F401
                        RULE_CATEGORY, RULE_CATEGORY_TRUNCATED, ZERO_AS_MISSING)


@dataclass(frozen=True, eq=False)
class CategorySplit:
    """A split on a categorical feature, by category codes (whole numbers >= 0).

    A code in ``left`` goes to the left child, a code in ``right`` to the right child, and any
    other code (one the split never saw, or a negative number) goes left when ``other_left``.
    A missing value (NaN) goes where the node's ``missing_left`` says. This covers every
    library's rule: LightGBM sends its bitset left and the rest right; XGBoost sends its set
    right and the rest left; scikit-learn's histogram boosting sends categories it did not see
    in training the missing side. ``truncated``: the value is cut to a whole number before it
    is looked up (LightGBM), so a value in (-1, 0) reads as code 0 rather than as no code.
    """

    left: np.ndarray
    right: np.ndarray
    other_left: bool = False
    truncated: bool = False


@dataclass(frozen=True, eq=False)
class Tree:
    """One tree as flat node arrays (node 0 is the root).

    Leaves have ``feature == -1`` and ``left == right == -1``. ``value`` holds, per node,
    class probabilities (``LINK_MEAN``) or the node's additive contribution to output column
    ``output`` already multiplied by any learning rate (``LINK_LOGISTIC``/``LINK_SOFTMAX``).
    ``gain`` is the split's weighted impurity decrease (scikit-learn) or loss change
    (XGBoost) and ``cover`` the weighted number of training samples (scikit-learn) or the
    hessian sum (XGBoost) reaching the node.

    ``missing_rule`` (None: ``MISSING_NAN`` everywhere) says per node how a missing value is
    recognised; ``categorical`` maps a node to its :class:`CategorySplit` (its ``threshold``
    is then unused). ``model_input`` (a pipeline's model only): the estimator's own input
    column that each split tested before the preprocessing was folded into it.
    """

    feature: np.ndarray
    threshold: np.ndarray
    left: np.ndarray
    right: np.ndarray
    missing_left: np.ndarray
    value: np.ndarray
    depth: np.ndarray
    gain: np.ndarray
    cover: np.ndarray
    output: int = 0
    missing_rule: np.ndarray | None = None
    categorical: dict | None = None
    model_input: np.ndarray | None = None

    @property
    def n_nodes(self) -> int:
        return int(self.feature.shape[0])

    @property
    def is_leaf(self) -> np.ndarray:
        return self.left < 0

    @property
    def n_leaves(self) -> int:
        return int(np.count_nonzero(self.is_leaf))

    @property
    def max_depth(self) -> int:
        return int(self.depth.max())

    @property
    def rules(self) -> np.ndarray:
        """The rule code of every node (``MISSING_*`` for numeric splits, ``RULE_CATEGORY``)."""
        rule = (np.zeros(self.n_nodes, dtype=np.int8) if self.missing_rule is None
                else np.asarray(self.missing_rule, dtype=np.int8).copy())
        for k, split in (self.categorical or {}).items():
            rule[k] = RULE_CATEGORY_TRUNCATED if split.truncated else RULE_CATEGORY
        return rule


def uncomparable(X: np.ndarray, compare: str | None = None) -> np.ndarray:
    """Cells no model can compare (infinite values) and, when ``compare`` is a float32 rule,
    the finite values beyond float32's range as well (the library would make them infinite,
    or refuse them); a boolean mask shaped like ``X``."""
    X = np.asarray(X, dtype=np.float64)
    bad = np.isinf(X)
    if compare in FLOAT32_COMPARES:
        bad |= np.abs(X) > FLOAT32_MAX
    return bad


# The largest category code a categorical split may hold (XGBoost's own limit: it reads a
# value of 2**24 or more as no category), and the most bit words all splits' code sets may
# take together (each split keeps a bit per code up to its largest: 2**24 words are 128 MB).
MAX_CATEGORY_CODE = 2**24 - 1
MAX_CATEGORY_WORDS = 2**24
# More columns than any table a review reads: a damaged count beyond it would fill the memory
# with names before anything else could refuse it.
MAX_FEATURES = 1_000_000
DAMAGED = "the model is damaged; save it again with its library"


def plain_feature_names(n_features: int) -> list[str]:
    """``x0, x1, ...``: the names of a model's features when it keeps none of its own."""
    if not 0 <= n_features <= MAX_FEATURES:
        raise ModelFileError(f"the model says it has {n_features:,} features, more than the "
                             f"{MAX_FEATURES:,} Grovewise reads; {DAMAGED}.")
    return [f"x{j}" for j in range(n_features)]


def shape_problem(left, right) -> str | None:
    """Why the child arrays do not form one tree rooted at node 0, or None when they do.

    A tree here: every node has two children or none (-1 both, as every library writes a
    leaf; XGBoost takes any other negative number for a node); every child is another
    node, never the root; no node is the child of two nodes (so no node is its own
    ancestor: a cycle is impossible); every node is reached from the root.
    """
    left = np.asarray(left)
    right = np.asarray(right)
    n = left.shape[0]
    if left.ndim != 1 or right.shape != left.shape:
        return (f"its left and right child lists differ in length ({left.shape[0]} and "
                f"{right.shape[0]})")
    if n == 0:
        return "it has no nodes"
    below = np.flatnonzero((left < -1) | (right < -1))
    if below.size:
        k = int(below[0])
        return (f"node {k} has child {int(min(left[k], right[k]))}; a leaf's children are -1 "
                "(a library that reads that as a node reads outside the tree)")
    inner = left >= 0
    odd = np.flatnonzero(inner != (right >= 0))
    if odd.size:
        k = int(odd[0])
        return (f"node {k} has one child (left {int(left[k])}, right {int(right[k])}); a node "
                "has two children or none")
    kids = np.concatenate([left[inner], right[inner]]).astype(np.int64)
    parents = np.concatenate([np.flatnonzero(inner)] * 2)
    beyond = np.flatnonzero(kids >= n)
    if beyond.size:
        return (f"node {int(parents[beyond[0]])} has child {int(kids[beyond[0]])}, but the "
                f"tree has {n} nodes")
    root = np.flatnonzero(kids == 0)
    if root.size:
        return f"node {int(parents[root[0]])} has the root (node 0) as its child: a cycle"
    twice = np.flatnonzero(np.bincount(kids, minlength=n) > 1)
    if twice.size:
        k = int(twice[0])
        return (f"node {k} is the child of more than one node "
                f"({', '.join(str(int(q)) for q in parents[kids == k][:3])})")
    if kids.size != n - 1:
        lost = np.setdiff1d(np.arange(1, n), kids)
        return f"node {int(lost[0])} is not reached from the root"
    return None


def node_depths(left: np.ndarray, right: np.ndarray) -> np.ndarray:
    """Depth of every node of a tree given by child arrays (-1 at leaves), root at 0.

    Raises ModelFileError when the arrays are not one tree (:func:`shape_problem`), so a
    cycle or a child out of range never loops or reads beyond the arrays.
    """
    problem = shape_problem(left, right)
    if problem is not None:
        raise ModelFileError(f"its nodes do not form a tree: {problem}; {DAMAGED}.")
    depth = np.zeros(left.shape[0], dtype=np.int64)
    frontier = np.array([0], dtype=np.int64)
    level = 0
    while frontier.size:
        depth[frontier] = level
        internal = frontier[left[frontier] >= 0]
        frontier = np.concatenate([left[internal], right[internal]])
        level += 1
    return depth


@dataclass(eq=False)
class Forest:
    """A tree ensemble classifier in one normalized form.

    Attributes
    ----------
    trees : list of Tree
        In the source library's order (scikit-learn's ``estimators_`` flattened row-major
        for gradient boosting, the booster's order for XGBoost).
    classes_ : ndarray
        Class labels, in the order of ``predict_proba``'s columns.
    feature_names : list of str
        The model's feature names, or ``x0, x1, ...`` when it has none
        (``has_feature_names`` is then False).
    kind : str
        ``decision_tree``, ``random_forest``, ``extra_trees``, ``gradient_boosting``,
        ``hist_gradient_boosting`` or ``xgboost``.
    link : str
        One of ``LINKS``.
    compare : str
        One of ``COMPARES``.
    base_score : ndarray
        The raw margin every sample starts from, one per output (sum links only).
    source : dict
        What the model came from (library, version, estimator, objective, ...).
    categories : dict
        For each categorical feature (by index), the category names in code order: code ``c``
        of feature ``j`` is ``categories[j][c]``. Empty for a model of numeric features only.
    model_inputs : list of str or None
        For a pipeline: the final estimator's own input columns (after the preprocessing),
        and ``input_feature[i]`` the feature (raw column) input ``i`` is made from. None when
        the features are the estimator's inputs.
    """

    trees: list[Tree]
    classes_: np.ndarray
    feature_names: list[str]
    kind: str
    link: str
    compare: str
    base_score: np.ndarray = field(default_factory=lambda: np.zeros(1))
    has_feature_names: bool = True
    source: dict = field(default_factory=dict)
    categories: dict = field(default_factory=dict)
    model_inputs: list | None = None
    input_feature: list | None = None

    def __post_init__(self) -> None:
        if self.link not in LINKS:
            raise ValueError(f"unknown link {self.link!r}; expected one of {LINKS}")
        if self.compare not in COMPARES:
            raise ValueError(f"unknown comparison {self.compare!r}; expected one of {COMPARES}")
        self.classes_ = np.asarray(self.classes_)
        self.base_score = np.asarray(self.base_score, dtype=np.float64).reshape(-1)
        self.feature_names = [str(f) for f in self.feature_names]
        self.categories = {int(j): [str(c) for c in names]
                           for j, names in (self.categories or {}).items()}
        self._check_structure()

    def _check_structure(self) -> None:
        """Refuse trees the walks cannot follow safely (the compiled walk checks no index):
        a node list that is not one tree, a split on a feature the model does not have, an
        output or class the model does not have, a NaN threshold or a leaf value that is not
        a finite number, category codes out of range. Raises ModelFileError naming the tree
        and the node; a loader that knows the file adds its name."""
        if not self.trees:
            raise ModelFileError(f"the model has no trees; {DAMAGED}.")
        if not 1 <= self.n_features <= MAX_FEATURES:
            raise ModelFileError(f"the model has {self.n_features:,} features; {DAMAGED}.")
        if self.n_classes < 2:
            raise UnsupportedModelError(f"the model has {self.n_classes} class(es); Grovewise "
                                        "reviews classifiers of two classes or more.")
        if self.link == LINK_LOGISTIC and self.n_classes != 2:
            raise ModelFileError(f"the model has one output (a logistic link) but "
                                 f"{self.n_classes} classes; {DAMAGED}.")
        width = self.n_classes if self.link == LINK_MEAN else 1
        if self.link != LINK_MEAN and (self.base_score.shape[0] != self.n_outputs
                                       or not np.isfinite(self.base_score).all()):
            raise ModelFileError(f"the model's starting score {self.base_score.tolist()} is not "
                                 f"{self.n_outputs} finite number(s); {DAMAGED}.")
        words = 0
        for t, tree in enumerate(self.trees):
            problem = self._tree_problem(tree, width)
            if problem is not None:
                raise ModelFileError(f"tree {t}: {problem}; {DAMAGED}.")
            for k, split in (tree.categorical or {}).items():
                codes = np.concatenate([np.asarray(split.left).ravel(),
                                        np.asarray(split.right).ravel()])
                if codes.size and (codes.min() < 0 or codes.max() > MAX_CATEGORY_CODE):
                    odd = int(codes.min() if codes.min() < 0 else codes.max())
                    raise ModelFileError(f"tree {t}, node {k}: a categorical split holds the "
                                         f"code {odd}, outside 0 to {MAX_CATEGORY_CODE}; "
                                         f"{DAMAGED}.")
                words += int(codes.max()) // 64 + 1 if codes.size else 1
        if words > MAX_CATEGORY_WORDS:
            raise UnsupportedModelError(
                f"the model's categorical splits need {words * 16 // 2**20} MB for their "
                f"category sets, more than the {MAX_CATEGORY_WORDS * 16 // 2**20} MB Grovewise "
                "holds; it reviews models whose categories are codes below a few thousand.")

    def _tree_problem(self, tree: Tree, width: int) -> str | None:
        n = tree.n_nodes
        lengths = {name: np.shape(getattr(tree, name))[:1] for name in (
            "threshold", "left", "right", "missing_left", "depth", "gain", "cover", "value")}
        short = [name for name, shape in lengths.items() if shape != (n,)]
        if tree.feature.ndim != 1 or short:
            return f"its node lists differ in length ({', '.join(short)} against feature)"
        problem = shape_problem(tree.left, tree.right)
        if problem is not None:
            return problem
        split = tree.left >= 0
        used = tree.feature[split]
        bad = np.flatnonzero((used < 0) | (used >= self.n_features))
        if bad.size:
            k = int(np.flatnonzero(split)[bad[0]])
            return (f"node {k} splits on feature {int(tree.feature[k])}, but the model has "
                    f"{self.n_features} features")
        value = np.asarray(tree.value)
        if value.ndim != 2 or value.shape[1] < width:
            return f"its node values have shape {value.shape}, not ({n}, {width})"
        leaves = np.flatnonzero(~split)
        wrong = leaves[~np.isfinite(value[leaves, :width]).all(axis=1)]
        if wrong.size:
            return (f"leaf {int(wrong[0])} holds {value[wrong[0], :width].tolist()}, not "
                    "finite numbers")
        cats = [int(k) for k in (tree.categorical or {})]
        odd = [k for k in cats if not 0 <= k < n or not split[k]]
        if odd:
            return f"node {odd[0]} holds a categorical split but is not a split node"
        numeric = split.copy()
        numeric[cats] = False
        nan = np.flatnonzero(numeric & np.isnan(tree.threshold))
        if nan.size:
            return f"node {int(nan[0])} compares with a NaN threshold"
        if self.link != LINK_MEAN and not 0 <= tree.output < self.n_outputs:
            return f"it adds to output {tree.output}, but the model has {self.n_outputs}"
        return None

    # ------------------------------------------------------------------ summary
    @property
    def n_trees(self) -> int:
        return len(self.trees)

    @property
    def n_features(self) -> int:
        return len(self.feature_names)

    @property
    def n_classes(self) -> int:
        return int(self.classes_.shape[0])

    @property
    def n_outputs(self) -> int:
        """Columns of the raw margin (sum links) or of the averaged probabilities (mean)."""
        if self.link == LINK_MEAN:
            return self.n_classes
        return 1 if self.link == LINK_LOGISTIC else self.n_classes

    @property
    def max_depth(self) -> int:
        return max(t.max_depth for t in self.trees)

    @property
    def used_features(self) -> np.ndarray:
        """Indices of the features at least one split uses, ascending."""
        used = np.zeros(self.n_features, dtype=bool)
        for t in self.trees:
            used[t.feature[t.feature >= 0]] = True
        return np.flatnonzero(used)

    def is_categorical(self, j: int) -> bool:
        return int(j) in self.categories

    def category_name(self, j: int, code: float) -> str:
        """The name of code ``code`` of categorical feature ``j`` ("missing" for NaN)."""
        if code != code:
            return "missing"
        names = self.categories.get(int(j), [])
        c = int(code)
        return names[c] if 0 <= c < len(names) and c == code else f"code {code:g}"

    @property
    def n_categorical_splits(self) -> int:
        return sum(len(t.categorical or {}) for t in self.trees)

    # ------------------------------------------------------------------ input
    def check_X(self, X) -> np.ndarray:
        """``X`` as a float64 array of shape (n, n_features), or a DataError saying what is off."""
        try:
            arr = np.asarray(X, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise DataError(f"the data could not be read as numbers ({exc}); "
                            "give a numeric array or table with one column per feature") from None
        if arr.ndim == 1:
            arr = arr.reshape(1, -1)
        if arr.ndim != 2 or arr.shape[1] != self.n_features:
            raise DataError(f"the data has shape {arr.shape}, but the model expects "
                            f"{self.n_features} feature columns ({', '.join(self.feature_names[:5])}"
                            f"{', ...' if self.n_features > 5 else ''}); give one column per feature")
        return arr

    def compare_input(self, X: np.ndarray) -> np.ndarray:
        """``X`` as the model's comparisons see it (float32-rounded where the library rounds)."""
        if self.compare == COMPARE_LE_FLOAT64:
            return X
        return X.astype(np.float32).astype(np.float64)

    # ------------------------------------------------------------------ flat layout
    @cached_property
    def _flat(self) -> dict:
        """All trees' nodes in one set of arrays, children as global indices (-1 at leaves)."""
        sizes = np.array([t.n_nodes for t in self.trees], dtype=np.int64)
        offsets = np.concatenate([[0], np.cumsum(sizes)[:-1]]).astype(np.int64)
        threshold = np.concatenate([t.threshold for t in self.trees]).astype(np.float64)
        if self.compare == COMPARE_LT_FLOAT32:
            threshold = threshold.astype(np.float32).astype(np.float64)
        def children(side: str) -> np.ndarray:
            return np.concatenate([np.where(getattr(t, side) >= 0, getattr(t, side) + o, -1)
                                   for t, o in zip(self.trees, offsets)]).astype(np.int64)
        return {
            "offsets": offsets,
            "feature": np.concatenate([t.feature for t in self.trees]).astype(np.int64),
            "threshold": threshold,
            "left": children("left"),
            "right": children("right"),
            "missing_left": np.concatenate([t.missing_left for t in self.trees]).astype(np.bool_),
            **self._flat_categories(offsets, int(sizes.sum())),
        }

    def _flat_categories(self, offsets: np.ndarray, n_nodes: int) -> dict:
        """The rule of every node and the categorical splits' code sets as bit words.

        Node ``k``'s left set is ``bits[ptr[k] : ptr[k] + words[k]]`` and its right set the
        ``words[k]`` words after it (bit ``c % 64`` of word ``c // 64`` for code ``c``).
        """
        rule = np.concatenate([t.rules for t in self.trees]).astype(np.int8)
        other_left = np.zeros(n_nodes, dtype=np.bool_)
        ptr = np.full(n_nodes, -1, dtype=np.int64)
        words = np.zeros(n_nodes, dtype=np.int64)
        chunks, used = [], 0
        for t, o in zip(self.trees, offsets):
            for k, split in sorted((t.categorical or {}).items()):
                codes = np.concatenate([split.left, split.right]).astype(np.int64)
                w = int(codes.max()) // 64 + 1 if codes.size else 1
                block = np.zeros(2 * w, dtype=np.uint64)
                for side, part in enumerate((split.left, split.right)):
                    for c in np.asarray(part, dtype=np.int64):
                        block[side * w + c // 64] |= np.uint64(1) << np.uint64(c % 64)
                g = int(o) + int(k)
                ptr[g], words[g], other_left[g] = used, w, bool(split.other_left)
                chunks.append(block)
                used += 2 * w
        bits = np.concatenate(chunks) if chunks else np.zeros(1, dtype=np.uint64)
        return {"rule": rule, "other_left": other_left, "cat_ptr": ptr, "cat_words": words,
                "cat_bits": bits}

    @property
    def decision_arrays(self) -> tuple:
        """What the compiled walks need to decide a node (``traversal.goes_left``)."""
        f = self._flat
        return (f["threshold"], f["missing_left"], f["rule"], f["other_left"], f["cat_ptr"],
                f["cat_words"], f["cat_bits"])

    def _leaf_nodes(self, X: np.ndarray) -> np.ndarray:
        """Global node index of the leaf each row reaches in each tree, shape (n, n_trees)."""
        flat = self._flat
        Xc = np.ascontiguousarray(self.compare_input(X))
        return leaf_nodes(Xc, flat["feature"], self.decision_arrays, flat["left"], flat["right"],
                          flat["offsets"], self.compare == COMPARE_LT_FLOAT32)

    def goes_left(self, nodes: np.ndarray, values: np.ndarray) -> np.ndarray:
        """Whether value ``values[i]`` goes left at global node ``nodes[i]`` (the walk's own
        rule, the comparison's float rounding included)."""
        v = self.compare_input(np.asarray(values, dtype=np.float64).reshape(-1))
        n = np.asarray(nodes, dtype=np.int64).reshape(-1)
        return decide_many(np.ascontiguousarray(v), n, self.decision_arrays,
                           self.compare == COMPARE_LT_FLOAT32)

    # ------------------------------------------------------------------ prediction
    def apply(self, X) -> np.ndarray:
        """Leaf id (the node's index within its tree) per row and tree, shape (n, n_trees)."""
        X = self.check_X(X)
        return self._leaf_nodes(X) - self._flat["offsets"][None, :]

    def decision_function(self, X) -> np.ndarray:
        """Raw margin (sum links), shape (n, n_outputs); for the mean link, the mean probabilities."""
        X = self.check_X(X)
        return self._raw_from_leaves(self._leaf_nodes(X))

    def _raw_from_leaves(self, leaves: np.ndarray) -> np.ndarray:
        n = leaves.shape[0]
        offsets = self._flat["offsets"]
        if self.link == LINK_MEAN:
            acc = np.zeros((n, self.n_classes))
            for j, tree in enumerate(self.trees):
                acc += tree.value[leaves[:, j] - offsets[j]]
            return acc / self.n_trees
        raw = np.zeros((n, self.n_outputs))
        raw += self.base_score[None, :]
        for j, tree in enumerate(self.trees):
            raw[:, tree.output] += tree.value[leaves[:, j] - offsets[j], 0]
        return raw

    def predict_proba(self, X) -> np.ndarray:
        """Class probabilities, shape (n, n_classes), as the source library computes them."""
        raw = self.decision_function(X)
        return self.proba_from_raw(raw)

    def proba_from_raw(self, raw: np.ndarray) -> np.ndarray:
        if self.link == LINK_MEAN:
            return raw
        if self.link == LINK_LOGISTIC:
            p1 = expit(raw[:, 0])
            return np.column_stack([1.0 - p1, p1])
        z = raw - raw.max(axis=1, keepdims=True)
        e = np.exp(z)
        return e / e.sum(axis=1, keepdims=True)

    def predict(self, X) -> np.ndarray:
        """Predicted class labels (``classes_[argmax predict_proba]``)."""
        return self.classes_[np.argmax(self.predict_proba(X), axis=1)]

    def predict_index(self, X) -> np.ndarray:
        """Predicted class as an index into ``classes_``."""
        return np.argmax(self.predict_proba(X), axis=1)

    def __repr__(self) -> str:
        return (f"Forest(kind={self.kind!r}, n_trees={self.n_trees}, n_features={self.n_features}, "
                f"classes={list(self.classes_)!r})")
