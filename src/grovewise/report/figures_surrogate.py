"""Figures of the surrogate: the tree with its rules, and the solver's progress over time.

Functions take result objects and return a matplotlib Figure (no pyplot state), so the
window and the report draw the same pictures.
"""

from __future__ import annotations

import textwrap
from collections.abc import Sequence

import numpy as np
from matplotlib.figure import Figure

INK = "#1f2a33"
MUTED = "#66737d"
BRANCH_FACE = "#eef3f6"
BRANCH_EDGE = "#5b7083"
# Font sizes (points): rules and leaves, and the rest. The report places the tree drawn 7.5 in
# wide at 85% of its 6.55 in text width, where 8.5 pt prints at 6.3 pt.
RULE_SIZE = 10.0
SMALL_SIZE = 8.5
LEAF_EDGES = ("#2f6f8f", "#b0653a", "#6b8e3d", "#7d5a9e", "#a8494f", "#3d8e86",
              "#8c7a2e", "#4f5fa8", "#9e5a84", "#5a6b3d")


def class_colour(k: int) -> str:
    """The colour of class index ``k`` (the same in every surrogate figure)."""
    return LEAF_EDGES[k % len(LEAF_EDGES)]


def _wrap(text: str, width: int) -> str:
    return "\n".join(textwrap.wrap(text, width=width, break_long_words=True,
                                   break_on_hyphens=False)) or text


def surrogate_tree_figure(est, title: str | None = None, width: float = 10.0) -> Figure:
    """The fitted surrogate drawn as a tree: each split's rule in original units (what
    ``rules_`` says), yes to the left; each leaf's class, training rows and fidelity.

    A node that does not split sends every row on to the rightmost leaf below it, so that
    leaf is drawn in the node's place: the picture has the depth the tree uses."""
    tree = est.tree_
    depth = int(tree.depth)
    nb = 2 ** depth - 1
    names = list(est.feature_names_)
    rules = {r.node: r for r in est.rules_list_}
    classes = list(est.classes_)
    n_leaves = 2 ** depth

    def leaf_of(node: int) -> int:
        """The leaf a node stands for when it does not split (itself, if a leaf)."""
        while node < nb:
            node = 2 * node + 2
        return node - nb

    def levels(node: int) -> int:
        if node in rules:
            return 1 + max(levels(2 * node + 1), levels(2 * node + 2))
        return 0

    used = levels(0)
    height = 0.8 + 1.35 * (used + 1)
    fig = Figure(figsize=(width, height), dpi=100)
    ax = fig.add_axes((0.01, 0.01, 0.98, 0.99 - 0.55 / height if title else 0.98))
    ax.set_xlim(0, n_leaves)
    ax.set_ylim(-used - 0.7, 0.4)
    ax.axis("off")
    if title:
        fig.text(0.01, 0.97, title, fontsize=13, fontweight="bold", color=INK, va="top")
    chars = max(14, int(13 * 9.0 / RULE_SIZE * width / max(2 ** used, 1)))

    def pos(node: int) -> tuple[float, float]:
        level = int(np.floor(np.log2(node + 1)))
        index = node - (2 ** level - 1)
        span = n_leaves / 2 ** level
        return span * (index + 0.5), -level

    rows = getattr(est, "leaf_rows_", np.zeros(n_leaves))
    fidelity = getattr(est, "leaf_fidelity_", np.full(n_leaves, np.nan))
    total = max(float(np.sum(rows)), 1.0)

    def draw(node: int) -> None:
        x, y = pos(node)
        if node in rules:
            for child, word in ((2 * node + 1, "yes"), (2 * node + 2, "no")):
                cx, cy = pos(child)
                ax.annotate("", xy=(cx, cy + 0.28), xytext=(x, y - 0.28),
                            arrowprops={"arrowstyle": "-|>", "color": BRANCH_EDGE, "lw": 1.1})
                ax.text((x + cx) / 2, (y + cy) / 2, word, ha="center", va="center",
                        fontsize=SMALL_SIZE, color=MUTED,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none"})
                draw(child)
            ax.text(x, y, _wrap(rules[node].text(names), chars), ha="center", va="center",
                    fontsize=RULE_SIZE, color=INK, family="DejaVu Sans",
                    bbox={"boxstyle": "round,pad=0.45", "fc": BRANCH_FACE, "ec": BRANCH_EDGE,
                          "lw": 1.2})
            return
        leaf = leaf_of(node)
        k = int(tree.leaf_class[leaf])
        share = 100 * rows[leaf] / total
        share_text = "<1%" if 0 < share < 1 else f"{share:.0f}%"
        every = " for every row" if node == 0 else ""
        lines = [f"predict {classes[k]}{every}", f"{int(rows[leaf])} rows ({share_text})"]
        if np.isfinite(fidelity[leaf]):
            lines.append(f"fidelity {fidelity[leaf]:.1%}")
        ax.text(x, y, "\n".join(lines), ha="center", va="center", fontsize=RULE_SIZE, color=INK,
                bbox={"boxstyle": "round,pad=0.45", "fc": "white", "ec": class_colour(k),
                      "lw": 2.2})
        ax.text(x, y - 0.42, f"leaf {leaf}", ha="center", va="center", fontsize=SMALL_SIZE,
                color=MUTED)

    draw(0)
    ax.text(0.0, -used - 0.68, "Leaf fidelity: weighted by the ensemble's confidence, on the "
            "training rows.", ha="left", va="bottom", fontsize=SMALL_SIZE, color=MUTED)
    return fig


def solver_progress_figure(trace: Sequence[dict], title: str | None = None) -> Figure:
    """Incumbent and bound over time from the solver's progress reports
    (each a mapping with ``elapsed``, ``incumbent`` and ``bound``)."""
    fig = Figure(figsize=(6.4, 3.2), dpi=100)
    ax = fig.add_subplot(1, 1, 1)
    t = np.array([float(p.get("elapsed", np.nan)) for p in trace], dtype=float)
    for key, colour, label in (("incumbent", "#2f6f8f", "incumbent (best tree found)"),
                               ("bound", "#b0653a", "bound (proven)")):
        v = np.array([np.nan if p.get(key) is None else float(p[key]) for p in trace])
        if np.isfinite(v).any():
            ax.step(t, v, where="post", color=colour, lw=1.8, label=label)
    ax.set_xlabel("seconds")
    ax.set_ylabel("objective (weighted disagreement)")
    ax.spines[["top", "right"]].set_visible(False)
    ax.grid(alpha=0.25)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(frameon=False, fontsize=8)
    if title:
        ax.set_title(title, loc="left", fontsize=11, color=INK)
    fig.tight_layout()
    return fig
