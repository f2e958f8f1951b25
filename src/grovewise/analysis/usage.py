"""Where in its trees an ensemble splits on each feature: by depth and by node position.

Depth maps come from one pass over the forest's nodes laid end to end (one set of arrays
for every tree), summed with :func:`numpy.bincount`; no Python loop runs over nodes, so a
forest of a million nodes is mapped in a few hundredths of a second. Position maps walk only
the top levels of each tree, a few vectorised steps per tree.

Weights
-------
``count``
    Each split node counts 1.
``gain``
    The split's weighted impurity decrease (scikit-learn: ``w * imp - w_l * imp_l -
    w_r * imp_r`` with ``weighted_n_node_samples``), XGBoost's loss change, or histogram
    boosting's split gain.
``cover``
    Training samples reaching the split: ``weighted_n_node_samples`` (scikit-learn trees),
    the hessian sum (XGBoost) or the sample count (histogram boosting).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import SettingError
from ..forest import LINK_SOFTMAX, Forest, Tree

WEIGHTS = ("count", "gain", "cover")
MAX_POSITION_DEPTH = 8  # 511 positions: deeper heap maps cannot be read anyway


@dataclass(frozen=True)
class SplitNodes:
    """Every split node of a forest in one set of arrays (tree by tree, in the forest's order).

    ``tree`` is the tree's index in ``forest.trees`` and ``node`` the node's id within it
    (scikit-learn's and XGBoost's own node ids); the other arrays are the node's fields.
    """

    tree: np.ndarray
    node: np.ndarray
    feature: np.ndarray
    threshold: np.ndarray
    depth: np.ndarray
    gain: np.ndarray
    cover: np.ndarray
    output: np.ndarray
    categorical: np.ndarray  # True where the node splits a categorical feature by sets
    model_input: np.ndarray  # a pipeline's estimator input the split tested (else the feature)


def check_weight(weight: str) -> str:
    """``weight`` itself, or a SettingError naming the accepted weights."""
    if weight not in WEIGHTS:
        raise SettingError(f"weight={weight!r} is not known; use one of {', '.join(WEIGHTS)}")
    return weight


def split_nodes(forest: Forest) -> SplitNodes:
    """Every split node of ``forest`` in one set of arrays (what profiles and flags read)."""
    trees = forest.trees
    keep = [np.flatnonzero(t.feature >= 0) for t in trees]
    sizes = np.array([k.size for k in keep], dtype=np.int64)

    def cat(name: str, dtype) -> np.ndarray:
        return np.concatenate([getattr(t, name)[k] for t, k in zip(trees, keep)]).astype(dtype)

    return SplitNodes(
        tree=np.repeat(np.arange(len(trees), dtype=np.int64), sizes),
        node=np.concatenate(keep).astype(np.int64),
        feature=cat("feature", np.int64), threshold=cat("threshold", np.float64),
        depth=cat("depth", np.int64), gain=cat("gain", np.float64),
        cover=cat("cover", np.float64),
        output=np.repeat(np.array([t.output for t in trees], dtype=np.int64), sizes),
        categorical=np.concatenate([np.isin(k, list((t.categorical or {}).keys()))
                                    for t, k in zip(trees, keep)]).astype(bool),
        model_input=np.concatenate([(t.model_input if t.model_input is not None
                                     else t.feature)[k] for t, k in zip(trees, keep)]
                                   ).astype(np.int64),
    )


def input_usage(forest: Forest) -> list[dict] | None:
    """For a pipeline's model: split nodes per estimator input, beside the raw column each
    input is made from (the one-hot columns of ``region`` each get a row, and all count for
    ``region`` in every other view). None for a model whose inputs are its features."""
    if forest.model_inputs is None:
        return None
    counts = np.bincount(split_nodes(forest).model_input, minlength=len(forest.model_inputs))
    return [{"input": name, "column": forest.feature_names[forest.input_feature[i]],
             "splits": int(counts[i])} for i, name in enumerate(forest.model_inputs)]


def tree_top_positions(tree: Tree, max_depth: int) -> tuple[np.ndarray, np.ndarray]:
    """Node ids of ``tree`` down to depth ``max_depth`` and their heap positions.

    Heap positions number a full binary tree level by level: root 0, the children of
    position i at ``2i+1`` (left) and ``2i+2`` (right).
    """
    nodes, pos = np.zeros(1, dtype=np.int64), np.zeros(1, dtype=np.int64)
    all_nodes, all_pos = [nodes], [pos]
    for _ in range(max_depth):
        inner = tree.left[nodes] >= 0
        nodes, pos = nodes[inner], pos[inner]
        if nodes.size == 0:
            break
        nodes = np.concatenate([tree.left[nodes], tree.right[nodes]])
        pos = np.concatenate([2 * pos + 1, 2 * pos + 2])
        all_nodes.append(nodes)
        all_pos.append(pos)
    return np.concatenate(all_nodes), np.concatenate(all_pos)


def _column_shares(matrix: np.ndarray) -> np.ndarray:
    totals = matrix.sum(axis=0, keepdims=True)
    return np.divide(matrix, totals, out=np.zeros(matrix.shape), where=totals > 0)


def _class_scopes(forest: Forest, per_class: bool) -> list[tuple[int | None, str]]:
    """(output column or None for all trees, scope label) for each result asked for."""
    if not per_class:
        return [(None, "all trees")]
    if forest.link != LINK_SOFTMAX:
        raise SettingError(
            "per_class=True needs a multi-class boosted model (one tree per class and round); "
            f"in this {forest.kind} model every tree serves all classes, so use per_class=False")
    return [(k, f"trees of class {forest.classes_[k]}") for k in range(forest.n_classes)]


@dataclass
class _Usage:
    """What the depth and position maps share (see :class:`DepthUsage`)."""

    matrix: np.ndarray
    shares: np.ndarray
    feature_names: list[str]
    weight: str
    never_used: list[str]
    scope: str = "all trees"
    class_label: object = None
    n_trees: int = 0
    split_counts: np.ndarray = field(default=None, repr=False)

    @property
    def overall(self) -> np.ndarray:
        """Each feature's weight summed over every column."""
        return self.matrix.sum(axis=1)

    @property
    def overall_share(self) -> np.ndarray:
        """Each feature's share of the total weight over every column (sums to 1 if any split)."""
        total = self.matrix.sum()
        return self.overall / total if total > 0 else np.zeros(self.matrix.shape[0])

    def order(self) -> np.ndarray:
        """Feature indices from the largest overall share to the smallest (ties by index)."""
        return np.lexsort((np.arange(self.matrix.shape[0]), -self.overall_share))

    def _base_dict(self) -> dict:
        return {
            "weight": self.weight, "scope": self.scope,
            "class_label": None if self.class_label is None else _plain(self.class_label),
            "n_trees": self.n_trees, "feature_names": list(self.feature_names),
            "matrix": self.matrix.tolist(), "shares": self.shares.tolist(),
            "split_counts": self.split_counts.tolist(),
            "overall_share": self.overall_share.tolist(), "never_used": list(self.never_used),
        }


def _plain(value):
    """A numpy scalar (class label) as a plain Python value for JSON."""
    return value.item() if isinstance(value, np.generic) else value


@dataclass
class DepthUsage(_Usage):
    """How much of each depth's splitting each feature does.

    Attributes
    ----------
    matrix : ndarray of shape (n_features, n_depths)
        Summed weight of the split nodes at depth ``depths[d]`` (root 0) that use feature j.
    shares : ndarray of shape (n_features, n_depths)
        ``matrix`` divided by its column totals: columns sum to 1; a depth without any split
        (possible for one class's trees) is a zero column.
    feature_names : list of str
    depths : ndarray of int
    weight : str
        ``count``, ``gain`` or ``cover``.
    never_used : list of str
        Features no split uses (anywhere in the trees of this result's scope).
    scope, class_label : str, object
        ``"all trees"`` and None, or the class whose trees (boosted multi-class) were counted.
    n_trees : int
        Trees counted.
    split_counts : ndarray of shape (n_features, n_depths)
        Number of split nodes (the ``count`` matrix, whatever the weight).
    """

    depths: np.ndarray = None

    def to_dict(self) -> dict:
        return {"kind": "depth_usage", **self._base_dict(), "depths": self.depths.tolist()}

    def to_rows(self) -> list[dict]:
        """One row per (feature, depth) for a CSV table."""
        return [{"feature": name, "depth": int(d), "weight": self.weight, "scope": self.scope,
                 "value": float(self.matrix[j, c]), "share": float(self.shares[j, c]),
                 "splits": int(self.split_counts[j, c])}
                for j, name in enumerate(self.feature_names) for c, d in enumerate(self.depths)]


@dataclass
class PositionUsage(_Usage):
    """How much each feature splits at each node position of the trees' top levels.

    Attributes
    ----------
    matrix : ndarray of shape (n_features, n_positions)
        Summed weight of the split nodes at heap position ``positions[c]`` (root 0, children
        of position i at ``2i+1`` and ``2i+2``) that use feature j.
    shares : ndarray of shape (n_features, n_positions)
        Columns sum to 1; a position no tree splits at is a zero column.
    positions, position_depths : ndarray of int
        Heap positions ``0 .. 2**(max_depth+1) - 2`` and the depth of each.
    max_depth : int
        Deepest level mapped (root 0).
    n_reached : ndarray of int
        Trees with a split node at each position (trees whose branch ended earlier are not
        counted).
    Other attributes as in :class:`DepthUsage`.
    """

    positions: np.ndarray = None
    position_depths: np.ndarray = None
    max_depth: int = 3
    n_reached: np.ndarray = None

    def to_dict(self) -> dict:
        return {"kind": "position_usage", **self._base_dict(), "max_depth": self.max_depth,
                "positions": self.positions.tolist(),
                "position_depths": self.position_depths.tolist(),
                "n_reached": self.n_reached.tolist()}

    def to_rows(self) -> list[dict]:
        """One row per (feature, position) for a CSV table."""
        return [{"feature": name, "position": int(p), "depth": int(self.position_depths[c]),
                 "weight": self.weight, "scope": self.scope,
                 "value": float(self.matrix[j, c]), "share": float(self.shares[j, c]),
                 "splits": int(self.split_counts[j, c])}
                for j, name in enumerate(self.feature_names)
                for c, p in enumerate(self.positions)]


def _row_keys(forest: Forest, by_output: bool) -> tuple[np.ndarray, int]:
    """Per node, in the forest's concatenated order, the grid row ``output * (p+1) + feature``
    (leaves get feature p, a row that is dropped); and the number of outputs."""
    trees = forest.trees
    p = forest.n_features
    key = np.concatenate([t.feature for t in trees], dtype=np.int64)
    key[key < 0] = p
    n_out = forest.n_outputs if by_output else 1
    if by_output:
        sizes = np.array([t.n_nodes for t in trees], dtype=np.int64)
        key += np.repeat(np.array([t.output for t in trees], dtype=np.int64) * (p + 1), sizes)
    return key, n_out


def _bincount_grid(index: np.ndarray, n_columns: int, weights, n_out: int,
                   n_features: int) -> np.ndarray:
    """Sum ``weights`` (or 1) by flat cell ``index = row_key * n_columns + column`` into an
    (n_out, n_features, n_columns) grid; the leaf rows are dropped."""
    flat = np.bincount(index, weights=weights, minlength=n_out * (n_features + 1) * n_columns)
    return flat.reshape(n_out, n_features + 1, n_columns)[:, :n_features, :].astype(np.float64)


def _node_weights(forest: Forest, weight: str) -> np.ndarray | None:
    if weight == "count":
        return None
    return np.concatenate([t.gain if weight == "gain" else t.cover for t in forest.trees])


def _trees_per_scope(forest: Forest, k: int | None) -> int:
    if k is None:
        return forest.n_trees
    return sum(1 for t in forest.trees if t.output == k)


def depth_usage(forest: Forest, weight: str = "count",
                per_class: bool = False) -> DepthUsage | list[DepthUsage]:
    """Map each feature's splits by depth.

    Parameters
    ----------
    forest : Forest
    weight : {"count", "gain", "cover"}
        What each split node contributes (see the module docstring).
    per_class : bool
        For a multi-class boosted model (softmax link, one tree per class and round): one
        result per class, counting the trees that add to that class (``Tree.output``). All
        results share the depths of the whole forest, so they line up with the pooled one.

    Returns
    -------
    DepthUsage, or a list of them (one per class, in ``forest.classes_`` order).

    Raises
    ------
    SettingError
        For an unknown ``weight``, or ``per_class=True`` on a model whose trees serve every
        class at once.
    """
    check_weight(weight)
    scopes = _class_scopes(forest, per_class)
    p = forest.n_features
    key, n_out = _row_keys(forest, per_class)
    depth = np.concatenate([t.depth for t in forest.trees], dtype=np.int64)
    n_depths = max(int(t.depth[t.feature >= 0].max(initial=0)) for t in forest.trees) + 1
    # Leaves deeper than the deepest split are folded into its column (their row is dropped).
    np.minimum(depth, n_depths - 1, out=depth)
    key *= n_depths  # in place: the flat cell index (row key, depth) of every node
    key += depth
    del depth
    counts = _bincount_grid(key, n_depths, None, n_out, p)
    sums = counts if weight == "count" else _bincount_grid(
        key, n_depths, _node_weights(forest, weight), n_out, p)
    results = []
    for k, scope in scopes:
        c, m = counts[k or 0], sums[k or 0]
        results.append(DepthUsage(
            matrix=m, shares=_column_shares(m), feature_names=list(forest.feature_names),
            weight=weight, never_used=_unused(forest, c), scope=scope,
            class_label=None if k is None else forest.classes_[k],
            n_trees=_trees_per_scope(forest, k), split_counts=c.astype(np.int64),
            depths=np.arange(n_depths)))
    return results if per_class else results[0]


def _unused(forest: Forest, counts: np.ndarray) -> list[str]:
    return [forest.feature_names[j] for j in np.flatnonzero(counts.sum(axis=1) == 0)]


def position_usage(forest: Forest, max_depth: int = 3, weight: str = "count",
                   per_class: bool = False) -> PositionUsage | list[PositionUsage]:
    """Map each feature's splits by node position in the top ``max_depth + 1`` levels.

    Parameters
    ----------
    forest : Forest
    max_depth : int
        Deepest level mapped, root 0 (0 to 8): ``2**(max_depth+1) - 1`` positions.
    weight : {"count", "gain", "cover"}
    per_class : bool
        As in :func:`depth_usage`.

    Returns
    -------
    PositionUsage, or a list of them (one per class).
    """
    check_weight(weight)
    if (isinstance(max_depth, bool) or not isinstance(max_depth, (int, np.integer))
            or not 0 <= max_depth <= MAX_POSITION_DEPTH):
        raise SettingError(f"max_depth={max_depth!r} for the position map must be a whole number "
                           f"from 0 to {MAX_POSITION_DEPTH}")
    max_depth = int(max_depth)
    scopes = _class_scopes(forest, per_class)
    p, n_pos = forest.n_features, 2 ** (max_depth + 1) - 1
    keys, cols, ws = [], [], []
    for t in forest.trees:
        nodes, pos = tree_top_positions(t, max_depth)
        f = t.feature[nodes]
        split = f >= 0
        keys.append((t.output if per_class else 0) * (p + 1) + f[split])
        cols.append(pos[split])
        ws.append(t.gain[nodes[split]] if weight == "gain" else t.cover[nodes[split]])
    key, col = np.concatenate(keys), np.concatenate(cols)
    n_out = forest.n_outputs if per_class else 1
    index = key * n_pos + col
    counts = _bincount_grid(index, n_pos, None, n_out, p)
    sums = counts if weight == "count" else _bincount_grid(index, n_pos, np.concatenate(ws),
                                                           n_out, p)
    rows, _ = _row_keys(forest, per_class)
    used = np.bincount(rows, minlength=n_out * (p + 1)).reshape(n_out, p + 1)[:, :p]
    positions = np.arange(n_pos)
    results = []
    for k, scope in scopes:
        c, m = counts[k or 0], sums[k or 0]
        results.append(PositionUsage(
            matrix=m, shares=_column_shares(m), feature_names=list(forest.feature_names),
            weight=weight, never_used=_unused(forest, used[k or 0][:, None]), scope=scope,
            class_label=None if k is None else forest.classes_[k],
            n_trees=_trees_per_scope(forest, k), split_counts=c.astype(np.int64),
            positions=positions,
            position_depths=np.array([int(q + 1).bit_length() - 1 for q in positions]),
            max_depth=max_depth, n_reached=c.sum(axis=0).astype(np.int64)))
    return results if per_class else results[0]
