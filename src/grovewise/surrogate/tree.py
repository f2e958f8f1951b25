"""The oblique tree: a complete binary tree of fixed depth with sparse hyperplane splits.

Nodes are numbered in heap order: branch node ``t`` (0 is the root) has children
``2t + 1`` (left) and ``2t + 2`` (right); a tree of depth D has ``2**D - 1`` branch nodes
and ``2**D`` leaves, leaf ``l`` being heap node ``2**D - 1 + l``. A point goes left at
node t when ``coef[t] . x < offset[t]`` in the scaled space ([0, 1] per feature, by the
min/max of the data the tree was fit on). A node whose coefficients are all zero does
not split: ``0 < offset`` is false for the offsets we keep (0), so every point goes right,
which is the convention of the program (``d_t = 0``).

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
    The per-leaf class weights are kept in ``leaf_weight``.
    """
    leaf = tree.route_scaled(Xs)
    lw = class_weights_per_leaf(leaf, y, w, n_leaves(tree.depth), n_classes)
    filled = fill_empty_leaves(lw, tree.depth)
    return tree.copy(leaf_class=np.argmax(filled, axis=1).astype(np.int64), leaf_weight=lw)


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
