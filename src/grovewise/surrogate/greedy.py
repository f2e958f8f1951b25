"""The greedy baseline: CART of the same depth, fit on the ensemble's predictions.

The baseline is scikit-learn's ``DecisionTreeClassifier`` (CART, Breiman et al. 1984) fit
on the targets and weights the surrogate is fit on. It is reported beside every surrogate
and is also the first candidate of the pipeline, converted into an :class:`ObliqueTree`
(axis-aligned splits with coefficient 1) so it can warm-start the program.
"""

from __future__ import annotations

import numpy as np
from sklearn.tree import DecisionTreeClassifier

from .tree import ObliqueTree, Scaling, n_branch_nodes, n_leaves


def fit_greedy(X: np.ndarray, y: np.ndarray, w: np.ndarray, depth: int,
               min_leaf_size: int = 1, random_state: int | None = None,
               usable: np.ndarray | None = None) -> DecisionTreeClassifier:
    """CART of ``depth`` on (X, y) with sample weights ``w`` (y: class indices).

    ``usable`` (a boolean mask over the features) keeps the baseline to the features the
    surrogate may use at some depth: the others are held constant, so CART never splits on
    them, and the comparison is between trees over the same features."""
    est = DecisionTreeClassifier(max_depth=depth, min_samples_leaf=max(1, int(min_leaf_size)),
                                 random_state=random_state)
    if usable is not None and not np.all(usable):
        X = np.where(np.asarray(usable, dtype=bool)[None, :], X, 0.0)
    return est.fit(X, y, sample_weight=w)


def oblique_from_greedy(est: DecisionTreeClassifier, scaling: Scaling, depth: int) -> ObliqueTree:
    """The CART tree as a complete oblique tree of ``depth`` in scaled space.

    A CART leaf above the full depth becomes a node that does not split: its points all go
    right, down to the rightmost leaf of its subtree, which takes the CART leaf's class.
    CART sends ``x <= threshold`` left; the oblique tree sends ``x < threshold`` left. The
    thresholds are midpoints between training values, so training points route the same.
    """
    p = scaling.low.shape[0]
    nb = n_branch_nodes(depth)
    coef = np.zeros((nb, p))
    offset = np.zeros(nb)
    leaf_class = np.zeros(n_leaves(depth), dtype=np.int64)
    t_ = est.tree_
    classes = est.classes_.astype(np.int64)

    def visit(src: int, dst: int) -> None:
        if t_.children_left[src] < 0:  # CART leaf: fill the subtree's rightmost leaf
            cls = classes[int(np.argmax(t_.value[src][0]))]
            # every leaf of the subtree gets the class (only the rightmost is reachable)
            lo = hi = dst
            while lo < nb:
                lo, hi = 2 * lo + 1, 2 * hi + 2
            leaf_class[lo - nb: hi - nb + 1] = cls
            return
        j = int(t_.feature[src])
        coef[dst, j] = 1.0
        offset[dst] = (float(t_.threshold[src]) - scaling.low[j]) / scaling.span[j]
        visit(int(t_.children_left[src]), 2 * dst + 1)
        visit(int(t_.children_right[src]), 2 * dst + 2)

    visit(0, 0)
    return ObliqueTree(depth=depth, coef=coef, offset=offset, leaf_class=leaf_class, scaling=scaling)
