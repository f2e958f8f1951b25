"""Figures of the model's own performance on the review data: the reliability plot.

The function takes the saved :class:`~grovewise.analysis.performance.PerformanceResult`
(nothing is computed here beyond drawing it) and returns a :class:`matplotlib.figure.Figure`
on the Agg canvas, in the house style of :mod:`figures_anatomy`.

Drawn at ``WIDTH`` inches, the share of the report's text width it is placed at, so that the
report prints it at its own size; no text is set below 7.5 pt (the house's least is
``figures_anatomy.SMALLEST_TEXT``).
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from .figures_anatomy import ACCENT, GRID, INK, MUTED, PRINT_WIDTH, new_figure

SHARE = 0.62  # of the report's text width
WIDTH = round(PRINT_WIDTH * SHARE, 2)
RELIABILITY_LINE = "reliability"  # the gid of the plotted points, for readers of the figure


def reliability_figure(perf) -> Figure:
    """Observed share against mean predicted probability, one point per non-empty bin of the
    reliability table, beside the diagonal of perfect calibration; under it, the rows in each
    bin (a point from a few rows says little).

    Two classes: the probability of the positive class against the share of rows of that
    class. More classes: the largest probability (the confidence) against the share of rows
    whose largest-probability class is the true one.
    """
    bins = list(perf.reliability)
    binary = perf.positive_class is not None
    if binary:
        x_label = f"mean predicted probability of {perf.positive_class!r}"
        y_label = f"observed share of {perf.positive_class!r}"
    else:
        x_label = "mean largest probability (confidence)"
        y_label = "share predicted right"
    fig = new_figure(WIDTH, 3.9)
    grid = fig.add_gridspec(2, 1, height_ratios=[3.0, 1.0])
    ax = fig.add_subplot(grid[0], label="reliability")
    rows = fig.add_subplot(grid[1], sharex=ax, label="rows per bin")
    ax.plot([0, 1], [0, 1], linestyle=(0, (4, 3)), color=MUTED, linewidth=0.9,
            label="perfect calibration")
    predicted = np.array([b.mean_predicted for b in bins], dtype=float)
    observed = np.array([b.observed_share for b in bins], dtype=float)
    ax.plot(predicted, observed, color=ACCENT, marker="o", markersize=4.5, linewidth=1.6,
            label="this model", gid=RELIABILITY_LINE, clip_on=False, zorder=3)
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_ylabel(y_label, fontsize=8, color=INK)
    ax.tick_params(labelsize=7.5, colors=MUTED, labelbottom=False)
    ax.grid(color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)
    ax.legend(loc="upper left", frameon=False, fontsize=7.5)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)

    lower = np.array([b.lower for b in bins], dtype=float)
    width = np.array([b.upper - b.lower for b in bins], dtype=float)
    counts = np.array([b.count for b in bins], dtype=float)
    rows.bar(lower, counts, width=width * 0.92, align="edge", color=GRID, edgecolor=MUTED,
             linewidth=0.5)
    rows.set_ylabel("rows", fontsize=8, color=INK)
    rows.set_xlabel(x_label, fontsize=8, color=INK)
    rows.tick_params(labelsize=7.5, colors=MUTED)
    rows.set_yticks([0, int(counts.max()) if counts.size else 1])
    for side in ("top", "right"):
        rows.spines[side].set_visible(False)
    return fig
