"""Figures of the ensemble's effects: its effect curves with its own and the surrogate's cuts,
the feature pairs it combines, and one row's contributions.

Each function takes the saved :class:`~grovewise.effects_summary.EffectsResult` (nothing is
computed here beyond drawing it) and returns a :class:`matplotlib.figure.Figure` on the Agg
canvas, in the house style of :mod:`figures_anatomy` (its ink, grid, accent colour, title
and footnote).

Drawn at ``WIDTH`` inches, about the report's text width, so that the report prints them at
their own size: no text is set below ``SMALL`` (6.5 pt).

Design:

- an effect curve is one small panel per feature: the partial dependence as a solid line with
  a dot per grid value, accumulated local effects as a dashed line shifted to that curve's
  mean, the interval where the partial dependence changes most lightly shaded, the
  ensemble's own cut points as a rug of ticks along the foot (taller where more split nodes
  use the cut), and each surrogate cut as a vertical line tagged with its node and explained
  under the panel;
- a categorical feature's panel has a bar per category, dark where a surrogate node sends the
  category left;
- signed contributions use the two ends of the house's map for differences (PuOr): purple
  raises the output, orange lowers it, and the lowering bars are hatched as well, so the
  sign also survives greyscale printing.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping

import numpy as np
from matplotlib import colormaps
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .figures_anatomy import (ACCENT, DIFF_CMAP, FLAG_STYLE, GRID, INK, MUTED, PRINT_WIDTH,
                              SMALLEST_TEXT, _footnote, _title, flag_label, new_figure,
                              short_label)

WIDTH = PRINT_WIDTH  # inches: the report's text width is 6.55 in, so it prints at this size
SMALL = SMALLEST_TEXT  # the smallest text drawn (points at print size)
OTHER_CLASSES = "#9aa4ad"
STEEP_FILL = "#e4ebf3"
SURROGATE_CUT = "#b0653a"
LIGHT_BAR = "#c9d4df"
RAISES = colormaps[DIFF_CMAP](0.86)
LOWERS = colormaps[DIFF_CMAP](0.18)
MAX_CATEGORIES = 16


def value_text(forest, j: int, v: float) -> str:
    """A row's value of feature ``j`` as the data gives it: a category by its name."""
    if forest.is_categorical(j):
        return forest.category_name(j, v)
    return "missing" if v != v else f"{v:.4g}"


def _minus(text: str) -> str:
    return text.replace("-", "\u2212")


def _shown_classes(n_classes: int, class_index: int) -> tuple[int, list[int]]:
    """The class drawn bold and the classes drawn thin. With two classes the second is drawn
    (the first is its mirror image, and changes steeply exactly where it does)."""
    if n_classes <= 1:
        return 0, []
    if n_classes == 2:
        return 1, []
    return class_index, [k for k in range(n_classes) if k != class_index]


def _wrap(text: str, inches: float, size: float = SMALL) -> str:
    chars = max(20, int(inches * 72.0 / (size * 0.55)))
    return "\n".join(textwrap.wrap(text, chars, break_on_hyphens=False))


# ---------------------------------------------------------------------------- effect curves
def effect_curves_figure(effects, flags: Mapping[str, str] | None = None,
                         max_features: int = 6, with_surrogate: bool = True,
                         title: str | None = None) -> Figure:
    """One small panel per feature (the curves of ``effects``, at most ``max_features``):
    partial dependence, accumulated local effects, the ensemble's cut points, the steepest
    interval and the surrogate's cuts (see the module). ``with_surrogate=False`` when no
    surrogate was fit (the panels then say nothing of one)."""
    curves = list(effects.curves[:max_features])
    n = max(len(curves), 1)
    cols = 1 if n == 1 else 2
    rows = int(np.ceil(n / cols))
    panel_w = (WIDTH - 0.3) / cols
    fig = new_figure(WIDTH, 1.9 * rows + 2.3)
    gs = fig.add_gridspec(rows + 1, cols, height_ratios=[0.16] + [1.9] * rows)
    _curve_legend(fig.add_subplot(gs[0, :], label="legend"), with_surrogate)
    n_classes = len(curves[0].partial.classes) if curves else 2
    classes = [str(c) for c in curves[0].partial.classes] if curves else []
    for i, effect in enumerate(curves):
        ax = fig.add_subplot(gs[1 + i // cols, i % cols], label=f"curve {effect.feature}")
        k, others = _shown_classes(n_classes, effect.class_index)
        if effect.partial.categories is not None:
            _category_panel(ax, effect, k, others, with_surrogate, panel_w)
        else:
            _numeric_panel(ax, effect, k, others, with_surrogate, panel_w)
        _panel_title(ax, effect, flags)
        if i % cols == 0:
            ax.set_ylabel(f"P({classes[k]})" if n_classes == 2 else "mean probability",
                          fontsize=7.5, color=INK)
    if not curves:
        ax = fig.add_subplot(gs[1, 0])
        ax.text(0.5, 0.5, "no feature moves the ensemble's output on the sample",
                ha="center", va="center", fontsize=9, color=MUTED, transform=ax.transAxes)
        ax.set_axis_off()
    sample = effects.sample.get("description", "")
    what = (f"probability of class {classes[1]}" if n_classes == 2 else
            "probability of each class (bold: the class that moves most)")
    _title(fig, title or "How the ensemble's output moves with each feature",
           f"{len(curves)} features it relies on most (mean |contribution|) · partial "
           f"dependence of the {what} · {sample}")
    notes = [
        "Solid: partial dependence, the mean predicted probability over the sampled rows with "
        "the feature set to each value (dots; the 5th to 95th percentile of the sample). "
        "Dashed: accumulated local effects (centred), drawn shifted to the mean of the solid "
        "curve so the shapes compare; read its rises and falls, not its level. Shaded: where "
        "the solid curve changes most. Ticks along the foot: the ensemble's own cut points, "
        "taller where more split nodes use the cut; \u2039 n and n \u203a count the cut "
        "points beyond the sampled values."]
    if n_classes == 2:
        notes.append(f"The probability of class {classes[0]} is the mirror image.")
    legend = ", ".join(f"{FLAG_STYLE[kind][0]} {kind}" for kind in sorted(
        {(flags or {}).get(c.feature) for c in curves} - {None}))
    if legend:
        notes.append("Flagged: " + legend)
    _footnote(fig, notes, width=int(WIDTH * 17))
    return fig


def _panel_title(ax, effect, flags) -> None:
    kind = (flags or {}).get(effect.feature)
    ax.set_title(flag_label(effect.feature, flags, 30), loc="left", fontsize=8.5,
                 fontweight="bold", color=FLAG_STYLE[kind][1] if kind else INK)
    ax.set_title(f"mean |contribution| {effect.importance:.3g}", loc="right", fontsize=SMALL,
                 color=MUTED)


def _style_panel(ax) -> None:
    ax.tick_params(labelsize=SMALL, colors=MUTED, length=2)
    ax.grid(axis="y", color=GRID, linewidth=0.5)
    ax.set_axisbelow(True)
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    for s in ("left", "bottom"):
        ax.spines[s].set_color(GRID)


def _numeric_panel(ax, effect, k: int, others: list[int], with_surrogate: bool,
                   panel_w: float) -> None:
    pd_, ale = effect.partial, effect.accumulated
    grid, avg = np.asarray(pd_.grid, float), np.asarray(pd_.average, float)
    lo, hi = float(grid[0]), float(grid[-1])
    if ale is not None:
        lo, hi = min(lo, float(ale.edges[0])), max(hi, float(ale.edges[-1]))
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
    pad = 0.03 * (hi - lo)
    x0, x1 = lo - pad, hi + pad
    s0, s1 = effect.steepest
    if s1 > s0:
        ax.axvspan(s0, s1, color=STEEP_FILL, linewidth=0, zorder=0)
    drawn = [avg[:, k]]
    for o in others:
        ax.plot(grid, avg[:, o], color=OTHER_CLASSES, linewidth=0.8, zorder=2)
        ax.text(grid[-1], avg[-1, o], f" {pd_.classes[o]}", fontsize=SMALL, color=MUTED,
                va="center", ha="left", clip_on=False)
        drawn.append(avg[:, o])
    ax.plot(grid, avg[:, k], color=ACCENT, linewidth=1.6, marker="o", markersize=2.4, zorder=4)
    if others:
        ax.text(grid[-1], avg[-1, k], f" {pd_.classes[k]}", fontsize=SMALL, color=ACCENT,
                va="center", ha="left", fontweight="bold", clip_on=False)
    if ale is not None:
        shifted = np.asarray(ale.effect, float)[:, k] + float(avg[:, k].mean())
        ax.plot(ale.edges, shifted, color=INK, linewidth=1.0, linestyle=(0, (4, 2)), zorder=3)
        drawn.append(shifted)
    values = np.concatenate(drawn)
    bottom, top = float(values.min()), float(values.max())
    span = max(top - bottom, 0.02)
    ax.set_ylim(bottom - 0.38 * span, top + 0.3 * span)
    ax.set_xlim(x0, x1)
    _cut_rug(ax, effect, x0, x1)
    notes = _surrogate_lines(ax, effect, x0, x1) if with_surrogate else []
    if with_surrogate and not effect.cuts:
        notes = ["not tested by the surrogate"]
    if notes:
        ax.set_xlabel(_wrap("; ".join(notes), 0.8 * panel_w), fontsize=SMALL, color=SURROGATE_CUT,
                      loc="left")
    _style_panel(ax)


def _cut_rug(ax, effect, x0: float, x1: float) -> None:
    """The ensemble's cut points as ticks along the foot of the panel."""
    cuts = np.asarray(effect.ensemble_cuts, float)
    counts = np.asarray(effect.ensemble_cut_counts, float)
    if not cuts.size:
        return
    inside = (cuts >= x0) & (cuts <= x1)
    foot = ax.get_xaxis_transform()
    if inside.any():
        height = 0.03 + 0.13 * counts[inside] / counts[inside].max()
        ax.vlines(cuts[inside], 0.0, height, transform=foot, color=MUTED, linewidth=0.6,
                  zorder=3)
    below, above = int(counts[cuts < x0].sum()), int(counts[cuts > x1].sum())
    if below:
        ax.text(0.0, 0.2, f"\u2039 {below}", transform=ax.transAxes, fontsize=SMALL,
                color=MUTED, ha="left", va="bottom")
    if above:
        ax.text(1.0, 0.2, f"{above} \u203a", transform=ax.transAxes, fontsize=SMALL,
                color=MUTED, ha="right", va="bottom")


def _surrogate_lines(ax, effect, x0: float, x1: float) -> list[str]:
    """Each surrogate cut as a vertical line tagged with its node; returns one explanation
    per cut for the text under the panel."""
    notes = []
    top = ax.get_xaxis_transform()
    for i, cut in enumerate(c for c in effect.cuts if c.value is not None):
        y = 0.97 - 0.13 * i
        tag = f"node {cut.node}"
        if x0 <= cut.value <= x1:
            ax.axvline(cut.value, color=SURROGATE_CUT, linewidth=1.2, zorder=5)
            right = (cut.value - x0) / (x1 - x0) > 0.6
            ax.text(cut.value, y, f"{tag} " if right else f" {tag}", transform=top,
                    fontsize=SMALL, color=SURROGATE_CUT, ha="right" if right else "left",
                    va="top", zorder=6)
            where = ""
        else:
            below = cut.value < x0
            ax.text(0.0 if below else 1.0, y, f"\u25c2 {tag}" if below else f"{tag} \u25b8",
                    transform=ax.transAxes, fontsize=SMALL, color=SURROGATE_CUT,
                    ha="left" if below else "right", va="top", zorder=6)
            where = ", beyond the sampled values"
        oblique = f" (oblique, at median of {cut.other})" if cut.other else ""
        notes.append(f"node {cut.node}: {cut.value:.4g}{oblique}{where}")
    return notes


def _category_panel(ax, effect, k: int, others: list[int], with_surrogate: bool,
                    panel_w: float) -> None:
    pd_ = effect.partial
    avg = np.asarray(pd_.average, float)
    names = [str(c) for c in pd_.categories]
    shown = np.arange(len(names))
    if shown.size > MAX_CATEGORIES:  # the categories that depart most from the mean
        dev = np.abs(avg[:, k] - avg[:, k].mean())
        shown = np.sort(np.argsort(-dev, kind="stable")[:MAX_CATEGORIES])
    nodes: dict[str, list[int]] = {}
    for cut in effect.cuts:
        for c in cut.categories or []:
            nodes.setdefault(str(c), []).append(cut.node)
    x = np.arange(shown.size)
    left = [names[c] in nodes for c in shown]
    ax.bar(x, avg[shown, k], width=0.7, color=[ACCENT if f else LIGHT_BAR for f in left],
           edgecolor=ACCENT, linewidth=0.6, zorder=2)
    for o in others:
        ax.plot(x, avg[shown, o], linestyle="none", marker="_", markersize=9,
                color=OTHER_CLASSES, zorder=3)
    top = float(avg[shown][:, [k] + others].max()) if shown.size else 1.0
    ax.set_ylim(0, top * 1.3 if top > 0 else 1.0)
    for xi, c, f in zip(x, shown, left):
        if f:
            ax.text(xi, avg[c, k] + 0.03 * top, "n" + ",".join(str(n) for n in nodes[names[c]]),
                    ha="center", va="bottom", fontsize=SMALL, color=SURROGATE_CUT)
    ax.set_xticks(x, [short_label(names[c], 12) for c in shown], rotation=35, ha="right")
    ax.set_xlim(-0.6, shown.size - 0.4)
    notes = []
    if with_surrogate:
        notes = [f"node {cut.node} sends the dark bars left" for cut in effect.cuts
                 if cut.categories]
        if not notes:
            notes = ["not tested by the surrogate"]
    if shown.size < len(names):
        notes.append(f"{shown.size} of {len(names)} categories (those furthest from the mean)")
    if notes:
        ax.set_xlabel(_wrap("; ".join(notes), 0.8 * panel_w), fontsize=SMALL, color=SURROGATE_CUT,
                      loc="left")
    _style_panel(ax)


def _curve_legend(ax, with_surrogate: bool) -> None:
    """The key to the panels, in a row of its own under the title."""
    handles = [Line2D([], [], color=ACCENT, linewidth=1.6, marker="o", markersize=2.4,
                      label="partial dependence"),
               Line2D([], [], color=INK, linewidth=1.0, linestyle=(0, (4, 2)),
                      label="accumulated local effects (shifted)"),
               Patch(facecolor=STEEP_FILL, label="steepest change"),
               Line2D([], [], color=MUTED, linestyle="none", marker="|", markersize=6,
                      label="the ensemble's cut points")]
    if with_surrogate:
        handles.append(Line2D([], [], color=SURROGATE_CUT, linewidth=1.2,
                              label="the surrogate's cut (node)"))
    ax.set_axis_off()
    ax.legend(handles=handles, loc="center left", ncols=3, fontsize=7, frameon=False,
              handlelength=2.2, columnspacing=1.4, labelcolor=INK, borderaxespad=0.0,
              bbox_to_anchor=(0.0, 0.5))


# ---------------------------------------------------------------------------- interactions
def _pair_nodes(effects) -> dict[frozenset, list[int]]:
    """The surrogate nodes whose split holds a pair, as far as the curves' cuts name them."""
    out: dict[frozenset, list[int]] = {}
    for curve in effects.curves:
        for cut in curve.cuts:
            for other in (cut.other or "").split(", "):
                if other:
                    nodes = out.setdefault(frozenset((curve.feature, other)), [])
                    if cut.node not in nodes:
                        nodes.append(cut.node)
    return out


def interaction_figure(effects, flags: Mapping[str, str] | None = None, max_pairs: int = 10,
                       with_surrogate: bool = True, title: str | None = None) -> Figure:
    """The pairs the ensemble combines most (mean |Shapley interaction value|) as horizontal
    bars, strongest on top; a pair the surrogate puts in one split is drawn dark and says
    which node."""
    pairs = list(effects.pairs[:max_pairs])
    shared = {frozenset(p) for p in effects.surrogate_pairs}
    nodes = _pair_nodes(effects)
    n = max(len(pairs), 1)
    fig = new_figure(WIDTH, 0.27 * n + 1.9)
    ax = fig.add_subplot(1, 1, 1, label="pairs")
    values = np.array([p.mean_abs for p in pairs], float)
    top = float(values.max()) if values.size and values.max() > 0 else 1.0
    labels = [f"{flag_label(p.first, flags, 24)} \u00d7 {flag_label(p.second, flags, 24)}"
              for p in pairs]
    together = [frozenset((p.first, p.second)) in shared for p in pairs]
    y = np.arange(len(pairs))
    ax.barh(y, values, height=0.62, color=[ACCENT if t else LIGHT_BAR for t in together],
            zorder=2)
    side = ax.get_yaxis_transform()
    for r, (p, v, t) in enumerate(zip(pairs, values, together)):
        ax.text(v + 0.015 * top, r, f"{v:.3g}", va="center", fontsize=7,
                color=INK if t else MUTED)
        if t:
            where = nodes.get(frozenset((p.first, p.second)))
            ax.text(1.02, r, "one surrogate split" + (
                f" (node {', '.join(map(str, where))})" if where else ""), transform=side,
                va="center", ha="left", fontsize=7, color=INK)
    ax.set_yticks(y, labels, fontsize=7.5)
    ax.invert_yaxis()
    ax.set_xlim(0, top * 1.18)
    ax.set_xlabel("mean |interaction| (Shapley interaction values, both halves, summed over "
                  "the outputs)", fontsize=7.5, color=INK)
    ax.tick_params(axis="x", labelsize=SMALL, colors=MUTED)
    ax.tick_params(axis="y", left=False, labelcolor=INK)
    ax.grid(axis="x", color=GRID, linewidth=0.5)
    ax.set_axisbelow(True)
    for s in ("top", "right", "left"):
        ax.spines[s].set_visible(False)
    if not pairs:
        ax.text(0.5, 0.5, "no interaction on the sample", transform=ax.transAxes,
                ha="center", va="center", fontsize=9, color=MUTED)
    p_features = len(effects.importance)
    _title(fig, title or "Which features the ensemble combines",
           f"the {len(pairs)} strongest of {p_features * (p_features - 1) // 2:,} pairs · "
           f"on the first {effects.interaction_rows:,} of the sampled rows")
    notes = []
    if with_surrogate:
        missing = [f"{a} \u00d7 {b}" for a, b in effects.surrogate_pairs
                   if frozenset((a, b)) not in {frozenset((p.first, p.second)) for p in pairs}]
        notes.append("Dark bars: pairs the surrogate puts in one split."
                     + (f" It also pairs {', '.join(missing)}, not among these."
                        if missing else ""))
    _footnote(fig, notes, width=int(WIDTH * 17))
    return fig


# ---------------------------------------------------------------------------- one row
def output_label(effects, o: int) -> str:
    """What output ``o`` of the contributions is, in words."""
    name = str(effects.output_names[o])
    if effects.output == "probability":
        return f"probability of class {name}"
    inner = name[len("margin("):-1] if name.startswith("margin(") else name
    return f"log-odds of class {inner}" if len(effects.output_names) == 1 else \
        f"margin of class {inner}"


def case_output(effects, case: int) -> int:
    """The output a row's contributions are read on: the ensemble's class for this row (the
    largest explained output), or the one output of a binary boosted model."""
    if effects.case_base.shape[0] == 1:
        return 0
    total = effects.case_base + effects.case_values[case].sum(axis=0)
    return int(np.argmax(total))


def case_contributions_figure(effects, forest, row_values, case: int = 0, k: int = 8,
                              row_label: str | None = None,
                              flags: Mapping[str, str] | None = None) -> Figure:
    """One explained row (``case``: its index in ``effects.case_rows``; ``row_values`` its
    values): its ``k`` largest contributions as signed bars from zero, each labelled with
    the row's value in the data's units, the rest summed in one grey bar; base and total
    stated in the subtitle."""
    values = np.asarray(effects.case_values[case], float)
    o = case_output(effects, case)
    v = values[:, o]
    base = float(effects.case_base[o])
    total = base + float(v.sum())
    names = list(forest.feature_names)
    order = [int(j) for j in np.argsort(-np.abs(v), kind="stable")[:k]]
    rest = float(v.sum() - v[order].sum())
    labels = [f"{short_label(names[j], 24)} = "
              f"{short_label(value_text(forest, j, row_values[j]), 16)}" for j in order]
    shown = list(v[order])
    if len(names) > len(order):
        labels.append(f"the other {len(names) - len(order)} features")
        shown.append(rest)
    shown = np.array(shown)
    fig = new_figure(WIDTH, 0.27 * len(shown) + 2.0)
    ax = fig.add_subplot(1, 1, 1, label="contributions")
    y = np.arange(len(shown))
    is_rest = np.arange(len(shown)) >= len(order)
    colours = [GRID if r else (RAISES if s >= 0 else LOWERS) for s, r in zip(shown, is_rest)]
    bars = ax.barh(y, shown, height=0.62, color=colours, zorder=2)
    for bar, s, r in zip(bars, shown, is_rest):
        if s < 0 and not r:
            bar.set_hatch("////")
            bar.set_edgecolor("white")
            bar.set_linewidth(0)
    reach = float(np.abs(shown).max()) if shown.size else 1.0
    reach = reach if reach > 0 else 1.0
    for r, s in enumerate(shown):
        ax.text(s + (0.02 if s >= 0 else -0.02) * reach, r, _minus(f"{s:+.3f}"), va="center",
                ha="left" if s >= 0 else "right", fontsize=7, color=INK)
    ax.set_xlim(-1.3 * reach, 1.3 * reach)
    ax.axvline(0, color=INK, linewidth=0.8, zorder=3)
    ax.set_yticks(y, labels, fontsize=7.5)
    for tick, j in zip(ax.get_yticklabels(), order):
        kind = (flags or {}).get(names[j])
        if kind:
            tick.set_color(FLAG_STYLE[kind][1])
    ax.invert_yaxis()
    quantity = output_label(effects, o)
    ax.set_xlabel(f"contribution to the {quantity} (left: lowers it, right: raises it)",
                  fontsize=7.5, color=INK)
    ax.tick_params(axis="x", labelsize=SMALL, colors=MUTED)
    ax.tick_params(axis="y", left=False)
    ax.grid(axis="x", color=GRID, linewidth=0.5)
    ax.set_axisbelow(True)
    for s in ("top", "right", "left"):
        ax.spines[s].set_visible(False)
    label = row_label or "One row"
    _title(fig, f"{label}: what moves the ensemble's {quantity}",
           f"base {_minus(f'{base:.3f}')} + contributions {_minus(f'{total - base:+.3f}')} = "
           f"{_minus(f'{total:.3f}')}, the ensemble's {quantity} for this row")
    _footnote(fig, ["Contributions: Shapley values computed exactly on the ensemble's trees "
                    "(path-dependent TreeSHAP). Base: the trees' average output over their "
                    "training data; base plus every contribution is the ensemble's output "
                    "for the row. Hatched bars lower the output."], width=int(WIDTH * 17))
    return fig
