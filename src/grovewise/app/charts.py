"""Figures the window draws that the report does not have: the live solve chart and the
pair counts by proximity threshold. Plain matplotlib (no Qt), in the window's colours."""

from __future__ import annotations

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from . import theme

# The report's progress figure draws the incumbent and bound in these colours too.
INCUMBENT, BOUND = "#2f6f8f", "#b0653a"
STAGE_WORDS = {"greedy": "greedy tree", "trivial": "one-leaf tree", "local_search": "node search",
               "program": "MILP", "polish": "polish",
               "optimal_axis": "exact axis-aligned tree", "proof": "proof"}


def _figure(width: float, height: float) -> Figure:
    fig = Figure(figsize=(width, height), layout="constrained", facecolor="white")
    FigureCanvasAgg(fig)
    return fig


def _quiet(ax) -> None:
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    for s in ("left", "bottom"):
        ax.spines[s].set_color(theme.RULE)
    ax.tick_params(labelsize=8, colors=theme.MUTED)
    ax.grid(True, color="#eef1f3", linewidth=0.8)
    ax.set_axisbelow(True)


def stage_words(stage: str) -> str:
    """A stage's name for people ("local_search" reads "node search")."""
    return STAGE_WORDS.get(stage, stage.replace("_", " "))


class SolveChart:
    """The solve as it happens: each candidate tree when it is ready (its objective on every
    training row), and the MILP's incumbent and bound while HiGHS works (on the program's
    sample). The tree finally returned is marked when the step ends.

    The objective is the program's: weighted disagreement with the ensemble plus alpha times
    the sparsity cost.

    The chart holds the points; :meth:`figure` draws them on a new Figure, so the window can
    make and draw a picture of a :meth:`snapshot` in a worker while points keep arriving.
    """

    def __init__(self, time_limit: float = 60.0) -> None:
        self.reset(time_limit)

    def reset(self, time_limit: float) -> None:
        self.time_limit = float(time_limit)
        self.candidates: list[tuple[float, float, str]] = []
        self.pt: list[float] = []
        self.inc: list[float] = []
        self.bt: list[float] = []
        self.bound: list[float] = []
        self.returned: float | None = None

    def add(self, point) -> None:
        if point.stage == "program":
            if point.incumbent is not None:
                self.pt.append(point.elapsed)
                self.inc.append(point.incumbent)
            if point.bound is not None:
                self.bt.append(point.elapsed)
                self.bound.append(point.bound)
        elif point.incumbent is not None:
            self.candidates.append((point.elapsed, point.incumbent, point.stage))

    def finish(self, objective: float | None) -> None:
        """Mark the objective of the tree the step returned."""
        self.returned = objective

    def snapshot(self) -> "SolveChart":
        """A copy of the points so far (to draw while more arrive)."""
        copy = SolveChart(self.time_limit)
        copy.candidates, copy.pt, copy.inc = list(self.candidates), list(self.pt), list(self.inc)
        copy.bt, copy.bound, copy.returned = list(self.bt), list(self.bound), self.returned
        return copy

    def figure(self) -> Figure:
        """The chart as a new Figure (fixed margins, no layout engine: it is drawn again
        several times a second while solving)."""
        fig = Figure(figsize=(7.5, 2.6), facecolor="white")
        FigureCanvasAgg(fig)
        fig.subplots_adjust(left=0.085, right=0.985, top=0.95, bottom=0.2)
        ax = fig.add_subplot(1, 1, 1)
        _quiet(ax)
        c = sorted(self.candidates)
        ax.plot([t for t, _, _ in c], [v for _, v, _ in c], linestyle="none", marker="o",
                markersize=5, color=theme.INK, label="candidate tree (all training rows)")
        ax.plot(self.pt, self.inc, color=INCUMBENT, linewidth=2.0, drawstyle="steps-post",
                label="MILP incumbent (program's sample)")
        ax.plot(self.bt, self.bound, color=BOUND, linewidth=1.4, linestyle=(0, (4, 2)),
                drawstyle="steps-post", label="MILP bound (proven floor)")
        ax.axhline(np.nan if self.returned is None else self.returned, color=theme.ACCENT,
                   linewidth=1.0, linestyle=":", label="tree returned")
        ax.set_xlabel("seconds since the solve started", fontsize=8.5, color=theme.INK)
        ax.set_ylabel("objective", fontsize=8.5, color=theme.INK)
        ax.legend(loc="upper right", fontsize=7.5, frameon=False)
        values = [v for _, v, _ in c] + self.inc + self.bound
        if self.returned is not None:
            values.append(self.returned)
        top = max(values) if values else 0.2
        ax.set_ylim(0, max(top * 1.3, 1e-3))
        right = max(max([self.time_limit] + [t for t, _, _ in c] + self.pt + self.bt), 1.0) * 1.02
        ax.set_xlim(0, right)
        for t, v, stage in c:  # labels near the right edge go to the dot's left
            late = t > 0.8 * right
            ax.annotate(stage_words(stage), (t, v), xytext=(-4 if late else 4, 4),
                        ha="right" if late else "left", textcoords="offset points",
                        fontsize=7.5, color=theme.MUTED)
        return fig


def pairs_figure(counts, threshold: float, n_at_threshold: int) -> Figure:
    """Pairs of samples at or above each proximity threshold, the chosen one marked."""
    fig = _figure(7.5, 2.5)
    ax = fig.add_subplot(1, 2, 1)
    _quiet(ax)
    t = np.asarray(counts.thresholds, dtype=float)
    n = np.asarray(counts.n_pairs, dtype=float)
    some = n > 0  # a threshold no pair reaches has no place on a log scale
    ax.plot(t[some], n[some], color=theme.ACCENT, marker="o", markersize=3.5, linewidth=1.6)
    ax.set_yscale("log")
    if not some.all():
        ax.annotate(f"no pair at {', '.join(f'{v:g}' for v in t[~some])}", (0.99, 0.04),
                    xycoords="axes fraction", ha="right", fontsize=7.5, color=theme.MUTED)
    ax.axvline(threshold, color=theme.CAUTION_EDGE, linewidth=1.2)
    ax.annotate(f"threshold {threshold:g}: {n_at_threshold:,} pairs", (threshold, 1),
                xytext=(-4, 8), textcoords="offset points", ha="right", fontsize=7.5,
                color=theme.CAUTION)
    ax.set_xlabel("proximity threshold", fontsize=8.5)
    ax.set_ylabel("pairs at or above", fontsize=8.5)
    ax2 = fig.add_subplot(1, 2, 2)
    _quiet(ax2)
    hist = np.asarray(counts.histogram, dtype=float)
    levels = np.arange(hist.shape[0]) / max(counts.n_trees, 1)
    ax2.bar(levels[1:], hist[1:], width=1.0 / max(counts.n_trees, 1), color=theme.GREEDY,
            linewidth=0)
    ax2.set_yscale("log")
    ax2.axvline(threshold, color=theme.CAUTION_EDGE, linewidth=1.2)
    ax2.set_xlabel("proximity (share of trees with a common leaf)", fontsize=8.5)
    ax2.set_ylabel("pairs", fontsize=8.5)
    ax2.set_xlim(0, 1.02)
    return fig
