"""The greedy baseline (scikit-learn's CART) drawn as a tree, to stand beside the surrogate.

The surrogate itself is drawn by the report's figure
(:func:`grovewise.report.figures_surrogate.surrogate_tree_figure`); the report has no drawing
of a CART tree yet, so this one reads scikit-learn's own ``tree_`` arrays and draws it in the
same manner and colours: split boxes with the rule ("yes" to the left), leaves framed in
their class's colour with rows and fidelity (the share of the leaf's fidelity weight
held by its class, as the surrogate's leaves report it). A split on a categorical feature
(the tree was then fit on category ranks and is wrapped, ``EncodedTree``) reads as the set of
categories that go left, as the surrogate's rules do.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..report.figures_surrogate import BRANCH_EDGE, BRANCH_FACE, INK, MUTED, class_colour
from ..surrogate.rules import category_text

WRAP = 26


@dataclass
class _Box:
    text: str
    left: "_Box | None" = None
    right: "_Box | None" = None
    leaf_class: int = -1
    x: float = 0.0
    level: int = 0


def _boxes(cart, names: list[str], classes: list) -> _Box:
    """CART's nodes as boxes; ``cart.classes_`` are labels in ``classes`` (or indices)."""
    t = cart.tree_
    order = getattr(cart, "category_order", None)
    labels = list(cart.classes_)
    fitted = ([classes.index(c) for c in labels] if all(c in classes for c in labels)
              else [int(c) for c in labels])
    total = max(int(t.n_node_samples[0]), 1)

    def leaf(i: int) -> _Box:
        v = np.asarray(t.value[i][0], dtype=float)
        k = int(np.argmax(v))
        share = v[k] / v.sum() if v.sum() > 0 else float("nan")
        rows = int(t.n_node_samples[i])
        pct = 100.0 * rows / total
        return _Box(f"predict {classes[fitted[k]]}\n{rows} rows "
                    f"({'<1' if 0 < pct < 1 else f'{pct:.0f}'}%)\nweighted fidelity "
                    f"{share:.1%}", leaf_class=fitted[k])

    def visit(i: int) -> _Box:
        if t.children_left[i] < 0:
            return leaf(i)
        left, right = visit(int(t.children_left[i])), visit(int(t.children_right[i]))
        if left.left is None and right.left is None and left.leaf_class == right.leaf_class:
            return leaf(i)  # a split whose sides predict the same class decides nothing
        j = int(t.feature[i])
        if order is not None and order.is_categorical(j):  # ranks up to the cut go left
            rule = category_text(names[j], order.split_sets(j, float(t.threshold[i]), "<=")[0])
        else:
            rule = f"{names[j]} <= {float(t.threshold[i]):.6g}"
        return _Box(rule, left, right)
    return visit(0)


def _place(root: _Box) -> tuple[int, int]:
    count, deepest = [0], [0]

    def place(b: _Box, level: int) -> float:
        b.level = level
        deepest[0] = max(deepest[0], level)
        if b.left is None:
            b.x = count[0] + 0.5
            count[0] += 1
        else:
            b.x = (place(b.left, level + 1) + place(b.right, level + 1)) / 2.0
        return b.x
    place(root, 0)
    return count[0], deepest[0] + 1


def cart_tree_figure(cart, names: list[str], classes: list, title: str | None = None,
                     width: float = 10.0) -> Figure:
    """The fitted CART as a Figure (Agg canvas; no pyplot state)."""
    root = _boxes(cart, names, classes)
    n_leaves, n_levels = _place(root)
    height = 0.8 + 1.35 * n_levels
    fig = Figure(figsize=(width, height), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.01, 0.01, 0.98, 0.99 - 0.55 / height if title else 0.98))
    ax.set_xlim(0, max(n_leaves, 1))
    ax.set_ylim(-n_levels + 0.3, 0.4)
    ax.axis("off")
    if title:
        fig.text(0.01, 0.97, title, fontsize=13, fontweight="bold", color=INK, va="top")
    chars = max(14, int(WRAP * width / max(n_leaves, 1) / 2.4))
    _draw(ax, root, chars)
    return fig


def _draw(ax, b: _Box, chars: int) -> None:
    y = -b.level
    if b.left is not None:
        for child, word in ((b.left, "yes"), (b.right, "no")):
            cy = -child.level
            ax.annotate("", xy=(child.x, cy + 0.28), xytext=(b.x, y - 0.28),
                        arrowprops={"arrowstyle": "-|>", "color": BRANCH_EDGE, "lw": 1.1})
            ax.text((b.x + child.x) / 2, (y + cy) / 2, word, ha="center", va="center",
                    fontsize=8.5, color=MUTED,
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none"})
            _draw(ax, child, chars)
        text = "\n".join(textwrap.wrap(b.text, chars)) or b.text
        ax.text(b.x, y, text, ha="center", va="center", fontsize=9, color=INK,
                bbox={"boxstyle": "round,pad=0.45", "fc": BRANCH_FACE, "ec": BRANCH_EDGE,
                      "lw": 1.2})
        return
    ax.text(b.x, y, b.text, ha="center", va="center", fontsize=9, color=INK,
            bbox={"boxstyle": "round,pad=0.45", "fc": "white",
                  "ec": class_colour(b.leaf_class), "lw": 2.2})
