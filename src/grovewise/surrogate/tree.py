"""The oblique tree: a complete binary tree of fixed depth with sparse hyperplane splits.

Nodes are numbered in heap order: branch node ``t`` (0 is the root) has children
``2t + 1`` (left) and ``2t + 2`` (right); a tree of depth D has ``2**D - 1`` branch nodes
and ``2**D`` leaves, leaf ``l`` being heap node ``2**D - 1 + l``. A point goes left at
node t when ``coef[t] . x < offset[t]`` in the scaled space ([0, 1] per feature, by the
min/max of the data the tree was fit on). A node whose coefficients are all zero does
not split: ``0 < offset`` is false for the offsets we keep (0), so every point goes right,
which is the convention of the program (``d_t = 0``).

No split decides nothing: a split whose reachable leaves all predict one class (``if ...:
predict A else: predict A``) is removed with its subtree, which then states its one leaf
(:func:`without_empty_splits`, applied wherever leaf classes are assigned, so in every stage).
:func:`depth_used` gives the levels that still split.

Scoring lives here too, so that every stage of the pipeline is measured the same way.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np


# ---------------------------------------------------------------------------- shape
def n_branch_nodes(depth: int) -> int:
    """Number of branch nodes of a complete binary tree of ``depth``."""
    return 2 ** depth - 1


def n_leaves(depth: int) -> int:
    """Number of leaves of a complete binary tree of ``depth``."""
    return 2 ** depth


def node_depth(t: int) -> int:
    """Depth of heap node ``t`` (root 0)."""
    return int(np.floor(np.log2(t + 1)))


def node_depths(depth: int) -> np.ndarray:
    """Depth of every branch node of a tree of ``depth``."""
    return np.array([node_depth(t) for t in range(n_branch_nodes(depth))], dtype=np.int64)


def subtree_leaves(node: int, depth: int) -> np.ndarray:
    """Leaf indices (0 .. 2**depth - 1) below heap node ``node``."""
    first = n_branch_nodes(depth)
    lo = hi = node
    while lo < first:
        lo, hi = 2 * lo + 1, 2 * hi + 2
    return np.arange(lo - first, hi - first + 1)


def subtree_branch_nodes(node: int, depth: int) -> np.ndarray:
    """Branch nodes (heap order) of the subtree of branch node ``node``, itself included."""
    nb = n_branch_nodes(depth)
    out, lo, hi = [], node, node
    while lo < nb:
        out.extend(range(lo, hi + 1))
        lo, hi = 2 * lo + 1, 2 * hi + 2
    return np.array(out, dtype=np.int64)


def side_leaves(node: int, depth: int) -> tuple[np.ndarray, np.ndarray]:
    """Leaves of the left and of the right subtree of branch node ``node``."""
    return subtree_leaves(2 * node + 1, depth), subtree_leaves(2 * node + 2, depth)


def leaf_ancestors(leaf: int, depth: int) -> list[tuple[int, bool]]:
    """(ancestor branch node, goes left) from the root down to ``leaf``."""
    node = n_branch_nodes(depth) + leaf
    path = []
    while node > 0:
        parent = (node - 1) // 2
        path.append((parent, node == 2 * parent + 1))
        node = parent
    return path[::-1]


# ---------------------------------------------------------------------------- scaling
@dataclass(frozen=True)
class Scaling:
    """Min/max scaling to [0, 1] per feature, kept so rules can be shown in original units.

    ``span`` is ``max - min``, or 1 for a constant feature (which is then never admissible:
    it cannot separate anything).
    """

    low: np.ndarray
    span: np.ndarray
    constant: np.ndarray

    @classmethod
    def fit(cls, X: np.ndarray) -> "Scaling":
        X = np.asarray(X, dtype=np.float64)
        low = X.min(axis=0)
        span = X.max(axis=0) - low
        constant = ~(span > 0)
        return cls(low=low, span=np.where(constant, 1.0, span), constant=constant)

    def transform(self, X: np.ndarray) -> np.ndarray:
        return (np.asarray(X, dtype=np.float64) - self.low) / self.span

    def to_original(self, coef: np.ndarray, offset: float) -> tuple[np.ndarray, float]:
        """``coef . xs < offset`` in scaled space as ``c . x < threshold`` in original units."""
        c = coef / self.span
        return c, float(offset + c @ self.low)

    def to_scaled(self, coef: np.ndarray, threshold: float) -> tuple[np.ndarray, float]:
        """Inverse of :meth:`to_original`."""
        a = np.asarray(coef, dtype=np.float64) * self.span
        return a, float(threshold - np.asarray(coef, dtype=np.float64) @ self.low)

    def to_dict(self) -> dict:
        return {"low": self.low.tolist(), "span": self.span.tolist(),
                "constant": self.constant.tolist()}


# ---------------------------------------------------------------------------- tree
@dataclass(eq=False)
class ObliqueTree:
    """A complete binary tree of fixed depth with hyperplane splits in scaled space.

    Attributes
    ----------
    depth : int
    coef : ndarray, shape (2**depth - 1, n_features)
        Hyperplane coefficients per branch node (scaled space); a zero row does not split.
    offset : ndarray, shape (2**depth - 1,)
        Go left when ``coef[t] . x < offset[t]``.
    leaf_class : ndarray of int, shape (2**depth,)
        Class index each leaf predicts.
    scaling : Scaling
    leaf_weight : ndarray, shape (2**depth, n_classes), optional
        Training weight per class reaching each leaf (for probabilities and reports).
    """

    depth: int
    coef: np.ndarray
    offset: np.ndarray
    leaf_class: np.ndarray
    scaling: Scaling
    leaf_weight: np.ndarray | None = field(default=None)

    @property
    def n_features(self) -> int:
        return int(self.coef.shape[1])

    @property
    def splits(self) -> np.ndarray:
        """Which branch nodes split (have a non-zero coefficient)."""
        return np.any(self.coef != 0.0, axis=1)

    @property
    def active(self) -> np.ndarray:
        """``d_t`` of the program: a node is active if it or a node below it splits."""
        split = self.splits
        act = split.copy()
        for t in range(n_branch_nodes(self.depth) - 1, 0, -1):
            if act[t]:
                act[(t - 1) // 2] = True
        act[0] = True
        return act

    def features_per_node(self) -> list[np.ndarray]:
        return [np.flatnonzero(row) for row in self.coef]

    def used_features(self) -> np.ndarray:
        return np.flatnonzero(np.any(self.coef != 0.0, axis=0))

    def copy(self, **changes) -> "ObliqueTree":
        base = dict(coef=self.coef.copy(), offset=self.offset.copy(),
                    leaf_class=self.leaf_class.copy(),
                    leaf_weight=None if self.leaf_weight is None else self.leaf_weight.copy())
        base.update(changes)
        return replace(self, **base)

    # ------------------------------------------------------------------ routing
    def route_scaled(self, Xs: np.ndarray) -> np.ndarray:
        """Leaf index (0 .. 2**depth - 1) of every row of scaled data."""
        Xs = np.asarray(Xs, dtype=np.float64)
        proj = Xs @ self.coef.T  # (n, n_branch)
        n = Xs.shape[0]
        node = np.zeros(n, dtype=np.int64)
        rows = np.arange(n)
        for _ in range(self.depth):
            left = proj[rows, node] < self.offset[node]
            node = np.where(left, 2 * node + 1, 2 * node + 2)
        return node - n_branch_nodes(self.depth)

    def route(self, X: np.ndarray) -> np.ndarray:
        """Leaf index of every row of data in original units."""
        return self.route_scaled(self.scaling.transform(X))

    def predict_index_scaled(self, Xs: np.ndarray) -> np.ndarray:
        return self.leaf_class[self.route_scaled(Xs)]

    def normalized(self) -> "ObliqueTree":
        """The same routing with every split scaled to ``sum |coef| = 1`` (the program's budget)."""
        norm = np.abs(self.coef).sum(axis=1)
        scale = np.where(norm > 0, norm, 1.0)
        offset = np.where(norm > 0, self.offset / scale, 0.0)
        return self.copy(coef=self.coef / scale[:, None], offset=offset)

    def to_dict(self) -> dict:
        return {
            "depth": self.depth,
            "coef_scaled": self.coef.tolist(),
            "offset_scaled": self.offset.tolist(),
            "leaf_class": self.leaf_class.tolist(),
            "leaf_weight": None if self.leaf_weight is None else self.leaf_weight.tolist(),
            "scaling": self.scaling.to_dict(),
        }


def trivial_tree(n_features: int, depth: int, scaling: Scaling, leaf_class: int = 0) -> ObliqueTree:
    """A tree that splits nowhere: every point reaches the rightmost leaf."""
    nb = n_branch_nodes(depth)
    return ObliqueTree(depth=depth, coef=np.zeros((nb, n_features)), offset=np.zeros(nb),
                       leaf_class=np.full(n_leaves(depth), leaf_class, dtype=np.int64),
                       scaling=scaling)


# ---------------------------------------------------------------------------- scoring
def class_weights_per_leaf(leaf: np.ndarray, y: np.ndarray, w: np.ndarray,
                           n_leaves_: int, n_classes: int) -> np.ndarray:
    """Sum of ``w`` per (leaf, class), shape (n_leaves, n_classes)."""
    out = np.zeros((n_leaves_, n_classes))
    np.add.at(out, (leaf, y), w)
    return out


def with_majority_classes(tree: ObliqueTree, Xs: np.ndarray, y: np.ndarray, w: np.ndarray,
                          n_classes: int) -> ObliqueTree:
    """The tree with each leaf predicting its weighted-majority class on (Xs, y, w).

    An empty leaf takes the class of its nearest non-empty ancestor's points, so that a new
    point reaching it gets the answer the training data would have given one level up.
    The per-leaf class weights are kept in ``leaf_weight``. Splits that then decide nothing
    are removed (:func:`without_empty_splits`): every stage's tree passes through here.
    """
    leaf = tree.route_scaled(Xs)
    lw = class_weights_per_leaf(leaf, y, w, n_leaves(tree.depth), n_classes)
    filled = fill_empty_leaves(lw, tree.depth)
    return without_empty_splits(
        tree.copy(leaf_class=np.argmax(filled, axis=1).astype(np.int64), leaf_weight=lw))


# ---------------------------------------------------------------------------- pruning
def _reachable_nodes(split: np.ndarray) -> np.ndarray:
    """Over every heap node (branch nodes, then leaves): can a point get there? Both
    children of a node that splits, only the right child of one that does not."""
    nb = split.shape[0]
    reach = np.zeros(2 * nb + 1, dtype=bool)
    reach[0] = True
    for t in range(nb):
        if reach[t]:
            reach[2 * t + 2] = True
            reach[2 * t + 1] = bool(split[t])
    return reach


def _class_sets(split: np.ndarray, leaf_class: np.ndarray) -> list[int]:
    """Per heap node, the classes its reachable leaves predict, as a bit set (bit k: class
    k), built bottom-up."""
    nb = split.shape[0]
    sets = [0] * nb + [1 << int(k) for k in leaf_class]
    for t in range(nb - 1, -1, -1):
        sets[t] = sets[2 * t + 2] | (sets[2 * t + 1] if split[t] else 0)
    return sets


def reachable_leaves(tree: ObliqueTree, node: int = 0) -> np.ndarray:
    """Leaves (0 .. 2**depth - 1) a point at heap node ``node`` can reach."""
    nb = n_branch_nodes(tree.depth)
    split = tree.splits
    out, stack = [], [node]
    while stack:
        t = stack.pop()
        if t >= nb:
            out.append(t - nb)
        else:
            stack.extend([2 * t + 2, 2 * t + 1] if split[t] else [2 * t + 2])
    return np.sort(np.array(out, dtype=np.int64))


def reachable_splits(tree: ObliqueTree) -> np.ndarray:
    """Branch nodes that split and that a point can reach."""
    split = tree.splits
    return np.flatnonzero(split & _reachable_nodes(split)[:split.shape[0]])


def empty_splits(tree: ObliqueTree) -> np.ndarray:
    """Reachable splits whose reachable leaves all predict one class: the split decides
    nothing (``if ...: predict A else: predict A``, or deeper, every leaf below A)."""
    split = tree.splits
    live = split & _reachable_nodes(split)[:split.shape[0]]
    sets = _class_sets(live, tree.leaf_class)
    return np.array([t for t in np.flatnonzero(live) if sets[t].bit_count() == 1],
                    dtype=np.int64)


def depth_used(tree: ObliqueTree) -> int:
    """Levels of the tree that actually split (0 for a tree that is one leaf)."""
    nodes = reachable_splits(tree)
    return 0 if nodes.size == 0 else node_depth(int(nodes.max())) + 1


def without_empty_splits(tree: ObliqueTree) -> ObliqueTree:
    """The same predictions, with no split that decides nothing.

    Splits no point can reach (below the left side of a node that does not split) are
    cleared. A split whose reachable leaves all predict one class is removed with its
    subtree: the node and every node below stop splitting (coefficients and offset 0, so
    every point goes right, as ``d_t = 0`` in the program), every leaf below states that
    class, and the subtree's ``leaf_weight`` moves to its rightmost leaf, where all its
    points now go. Every point reaching the node got that class before and gets it now, so
    predictions on any data are unchanged (and a leaf's class stays its weighted
    majority); only the sparsity penalty can fall. :func:`with_majority_classes` calls this,
    so it is the one place every stage's tree is pruned.
    """
    split = tree.splits
    nb = split.shape[0]
    if nb == 0:
        return tree
    live = split & _reachable_nodes(split)[:nb]
    sets = _class_sets(live, tree.leaf_class)
    empty = [t for t in np.flatnonzero(live) if sets[t].bit_count() == 1]
    if not empty and np.array_equal(live, split):
        return tree
    out = tree.copy()
    out.coef[~live] = 0.0
    out.offset[~live] = 0.0
    for t in empty:  # ascending heap order is top-down: a removed node takes its subtree
        if not np.any(out.coef[t] != 0.0):
            continue  # already inside a removed subtree
        below = subtree_branch_nodes(int(t), tree.depth)
        out.coef[below] = 0.0
        out.offset[below] = 0.0
        leaves = subtree_leaves(int(t), tree.depth)
        out.leaf_class[leaves] = sets[t].bit_length() - 1
        if out.leaf_weight is not None:
            gathered = out.leaf_weight[leaves].sum(axis=0)
            out.leaf_weight[leaves] = 0.0
            out.leaf_weight[leaves[-1]] = gathered
    return out


def fill_empty_leaves(leaf_weight: np.ndarray, depth: int) -> np.ndarray:
    """Per-leaf class weights where an empty leaf borrows its nearest non-empty ancestor's."""
    out = leaf_weight.copy()
    total = out.sum(axis=1)
    for l in np.flatnonzero(total <= 0):
        for level in range(1, depth + 1):
            group = l >> level
            members = np.arange(group << level, (group + 1) << level)
            agg = leaf_weight[members].sum(axis=0)
            if agg.sum() > 0:
                out[l] = agg
                break
    return out


def weighted_disagreement(tree: ObliqueTree, Xs: np.ndarray, y: np.ndarray, w: np.ndarray) -> float:
    """Sum of ``w`` over the points where the tree's class differs from ``y``."""
    return float(w[tree.predict_index_scaled(Xs) != y].sum())


def sparsity_penalty(tree: ObliqueTree, penalty: np.ndarray) -> float:
    """``sum_t sum_j s_tj * penalty[depth(t), j]`` for the tree's non-zero coefficients."""
    depths = node_depths(tree.depth)
    used = tree.coef != 0.0
    return float((used * penalty[depths]).sum())


def objective(tree: ObliqueTree, Xs: np.ndarray, y: np.ndarray, w_norm: np.ndarray,
              alpha: float, penalty: np.ndarray) -> float:
    """The program's objective for ``tree``: weighted disagreement + alpha * sparsity penalty.

    ``w_norm`` are fidelity weights summing to 1, so the first term is the weighted share
    of points the tree contradicts and alpha reads as "fidelity traded per feature".
    """
    return weighted_disagreement(tree, Xs, y, w_norm) + alpha * sparsity_penalty(tree, penalty)
