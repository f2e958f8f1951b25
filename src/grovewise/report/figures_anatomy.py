"""Figures of the ensemble's anatomy: usage maps, node positions, cut points, importances.

Each function takes a result object from :mod:`grovewise.analysis` and returns a
:class:`matplotlib.figure.Figure` drawn on the Agg canvas; nothing touches pyplot's global
state, so figures can be made in worker threads and embedded in the window or a report.

Design: one sequential, perceptually uniform colour map (cividis, readable with colour
vision deficiency and in greyscale) for shares; a diverging map only for differences;
reviewer flags in two colours outside that map, each with its own glyph so the mark also
survives greyscale printing.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping, Sequence

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import Normalize, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.patches import FancyBboxPatch, Rectangle
from matplotlib.textpath import text_to_path
from matplotlib.ticker import MaxNLocator, PercentFormatter

from ..analysis.compare import ModelComparison
from ..analysis.importance import METHOD_MDI, ImportanceComparison
from ..analysis.thresholds import ThresholdProfiles
from ..analysis.usage import DepthUsage, PositionUsage

SHARE_CMAP = "cividis"
DIFF_CMAP = "PuOr"
INK = "#1f2328"
MUTED = "#6e7781"
GRID = "#d0d7de"
FLAG_STYLE = {"protected": ("◆", "#AA3377"), "forbidden": ("✖", "#CC3311")}
ACCENT = "#4477AA"
MAX_TEXT_COLUMNS = 24
MAX_TEXT_ROWS = 40
# Print size: the report's text width is 6.55 in and a figure may be 8.4 in high under its
# heading and caption, so figures drawn at most this size print at their own size, where no
# text is smaller than SMALLEST_TEXT points (the report's floor is 6 pt).
PRINT_WIDTH = 6.5
PRINT_HEIGHT = 8.2
SMALLEST_TEXT = 6.5


# ---------------------------------------------------------------------------- helpers
def new_figure(width: float, height: float) -> Figure:
    """A white Figure on the Agg canvas with constrained layout."""
    fig = Figure(figsize=(width, height), layout="constrained", facecolor="white")
    FigureCanvasAgg(fig)
    fig.get_layout_engine().set(h_pad=0.06, w_pad=0.06, hspace=0.02, wspace=0.02)
    return fig


def short_label(name: str, width: int = 28) -> str:
    """``name`` cut to ``width`` characters, keeping its start and its end (often a unit)."""
    name = str(name)
    if len(name) <= width:
        return name
    tail = max(4, width // 3)
    return name[: width - tail - 1] + "…" + name[-tail:]


def flag_label(name: str, flags: Mapping[str, str] | None, width: int = 28) -> str:
    """The label for a feature, with the glyph of its flag in front if it has one."""
    label = short_label(name, width)
    kind = (flags or {}).get(name)
    return f"{FLAG_STYLE[kind][0]} {label}" if kind else label


def _style_flagged_ticklabels(labels, names: Sequence[str], flags) -> None:
    for tick, name in zip(labels, names):
        kind = (flags or {}).get(name)
        if kind:
            tick.set_color(FLAG_STYLE[kind][1])
            tick.set_fontweight("bold")


def _flag_legend_text(flags, names: Sequence[str]) -> str:
    kinds = sorted({(flags or {}).get(n) for n in names} - {None})
    return "   ".join(f"{FLAG_STYLE[k][0]} {k}" for k in kinds)


def _text_colour(rgba) -> str:
    """Dark ink on light cells, white on dark ones (relative luminance, sRGB)."""
    r, g, b = rgba[:3]
    lum = 0.2126 * r + 0.7152 * g + 0.0722 * b
    return INK if lum > 0.5 else "white"


def _percent(value: float) -> str:
    if value <= 0:
        return ""
    pct = 100.0 * value
    return "<1" if pct < 1.0 else f"{pct:.0f}"


def _label_inches(labels: Sequence[str], fontsize: float = 9.0) -> float:
    """Rough width of the widest label (DejaVu Sans averages ~0.58 em per character)."""
    longest = max((len(s) for s in labels), default=1)
    return longest * fontsize * 0.58 / 72.0 + 0.25


def _footnote(fig: Figure, lines: Sequence[str], width: int = 130) -> None:
    text = "\n".join(textwrap.fill(s, width) for s in lines if s)
    if text:
        fig.supxlabel(text, fontsize=7.5, color=MUTED, ha="left", x=0.01)


def _title(fig: Figure, title: str, subtitle: str) -> None:
    """Bold title with a muted subtitle under it, wrapped to the figure's width. The title
    carries one blank line per subtitle line: that is the room constrained layout keeps."""
    size = 12.0
    chars = max(40, int(fig.get_figwidth() * 72.0 / (8.5 * 0.56)))
    lines = textwrap.wrap(subtitle, chars) or [""]
    # No y: constrained layout only makes room for a title it may place itself (at 0.98).
    fig.suptitle(title + "\n" * len(lines), fontsize=size, fontweight="bold", color=INK,
                 x=0.01, ha="left", va="top")
    line = 1.2 * size / 72.0 / fig.get_figheight()
    fig.text(0.012, 0.98 - 1.05 * line, "\n".join(lines), fontsize=8.5, color=MUTED,
             ha="left", va="top", linespacing=1.6)


def _sorted_rows(usage, max_features: int, flags=None) -> tuple[np.ndarray, int]:
    """Used features by overall share (largest first), capped at ``max_features`` but always
    keeping flagged ones; and how many used features were left out."""
    order = usage.order()
    used = order[usage.split_counts[order].sum(axis=1) > 0]
    keep = list(used[:max_features])
    flagged = [j for j in used[max_features:] if usage.feature_names[j] in (flags or {})]
    rows = np.array(keep + flagged, dtype=np.int64)
    return rows, int(used.shape[0] - rows.shape[0])


def _colour_ceiling(shares: np.ndarray, split_totals: np.ndarray) -> tuple[float, bool]:
    """Top of the colour scale: the largest share among depths holding at least 1% of the
    busiest depth's splits, so a deep level with a handful of splits (where one feature can
    hold 100%) does not wash out the rest; and whether any cell lies above it."""
    if shares.size == 0:
        return 1e-12, False
    busy = split_totals >= 0.01 * max(split_totals.max(), 1)
    top = float(shares[:, busy].max()) if busy.any() else float(shares.max())
    top = max(top, 1e-12)
    return top, bool(shares.max() > top * (1 + 1e-9))


def _scope_text(usage) -> str:
    weight = {"count": "count of split nodes", "gain": "split gain",
              "cover": "training samples reaching the split"}[usage.weight]
    return f"weight: {weight} · {usage.scope} ({usage.n_trees} trees)"


# ---------------------------------------------------------------------------- depth heat map
def depth_usage_figure(usage: DepthUsage, flags: Mapping[str, str] | None = None,
                       max_features: int = 25, title: str | None = None) -> Figure:
    """Heat map of features (rows, by overall share) x depths: each depth's share of splits.

    Cells print the share in percent when they are large enough to read; a marginal bar
    chart on the right gives each feature's share over all depths, one on top the splits
    per depth. Flagged features carry their glyph and colour and a frame around their row.
    """
    rows, hidden = _sorted_rows(usage, max_features, flags)
    names = [usage.feature_names[j] for j in rows]
    labels = [flag_label(n, flags) for n in names]
    shares = usage.shares[rows]
    n_rows, n_cols = max(len(rows), 1), usage.depths.shape[0]
    heat_in = PRINT_WIDTH - _label_inches(labels, 8.0) - 2.3  # less the bars and the scale
    with_text = n_cols <= MAX_TEXT_COLUMNS and n_rows <= MAX_TEXT_ROWS and heat_in / n_cols >= 0.24
    row_in = min(0.3, (PRINT_HEIGHT - 2.7) / n_rows)
    fig = new_figure(PRINT_WIDTH, max(row_in * n_rows + 2.7, 4.2))
    gs = fig.add_gridspec(2, 3, width_ratios=[heat_in, 1.5, 0.12],
                          height_ratios=[min(0.6, max(0.3, 0.06 * n_rows)), row_in * n_rows])
    ax = fig.add_subplot(gs[1, 0], label="heat map")
    top = fig.add_subplot(gs[0, 0], sharex=ax, label="splits per depth")
    side = fig.add_subplot(gs[1, 1], sharey=ax, label="all depths")
    cax = fig.add_subplot(gs[1, 2], label="colour scale")
    vmax, clipped = _colour_ceiling(shares, usage.split_counts.sum(axis=0))
    norm = Normalize(0.0, vmax, clip=True)
    cmap = colormaps[SHARE_CMAP]
    image = ax.imshow(shares if shares.size else np.zeros((1, n_cols)), cmap=cmap, norm=norm,
                      aspect="auto", interpolation="nearest")
    if with_text:
        for (r, c), v in np.ndenumerate(shares):
            ax.text(c, r, _percent(v), ha="center", va="center", fontsize=7,
                    color=_text_colour(cmap(norm(v))))
    _depth_axes(ax, usage.depths, names, labels, flags, with_text, max_ticks=int(heat_in / 0.2))
    _frame_flagged_rows(ax, names, flags, n_cols)
    _depth_totals(top, usage)
    _overall_bars(side, usage.overall_share[rows], names, flags)
    bar = fig.colorbar(image, cax=cax, extend="max" if clipped else "neither")
    bar.set_label("share of the splits at that depth" if n_rows >= 8 else "share at depth",
                  fontsize=8, color=INK)
    bar.ax.yaxis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 5, 10]))
    bar.ax.yaxis.set_major_formatter(PercentFormatter(xmax=1.0, decimals=0 if vmax >= 0.05 else 1))
    bar.ax.tick_params(labelsize=7)
    _title(fig, title or "Where the trees split on each feature, by depth", _scope_text(usage))
    notes = [] if with_text else ["Cells too small to print values; the CSV table has them."]
    if clipped:
        notes.append(f"Colour scale ends at {100 * vmax:.0f}%, the largest share at depths with "
                     "at least 1% of the busiest depth's splits; sparser deep levels can go "
                     "above it.")
    if hidden:
        notes.append(f"{hidden} more used features with smaller shares are not shown.")
    if usage.never_used:
        notes.append(f"Never used ({len(usage.never_used)}): " + ", ".join(usage.never_used))
    legend = _flag_legend_text(flags, names)
    if legend:
        notes.append("Flagged: " + legend)
    _footnote(fig, notes, width=int(PRINT_WIDTH * 17))
    return fig


def _depth_axes(ax, depths, names, labels, flags, with_text: bool,
                max_ticks: int | None = None) -> None:
    ax.set_yticks(range(len(names)), labels, fontsize=8)
    _style_flagged_ticklabels(ax.get_yticklabels(), names, flags)
    if max_ticks is None:  # wide figures: every depth up to 30, else about 25 labels
        step = 1 if len(depths) <= 30 else int(np.ceil(len(depths) / 25))
    else:
        step = max(1, int(np.ceil(len(depths) / max(max_ticks, 1))))
    ax.set_xticks(range(0, len(depths), step), [str(int(d)) for d in depths[::step]], fontsize=7.5)
    ax.set_xlabel("depth (root = 0)", fontsize=8, color=INK)
    ax.tick_params(length=0)
    for s in ax.spines.values():
        s.set_visible(False)
    if with_text:
        ax.set_xticks(np.arange(-0.5, len(depths), 1), minor=True)
        ax.set_yticks(np.arange(-0.5, len(names), 1), minor=True)
        ax.grid(which="minor", color="white", linewidth=1.2)
        ax.tick_params(which="minor", length=0)


def _frame_flagged_rows(ax, names, flags, n_cols: int) -> None:
    for r, name in enumerate(names):
        kind = (flags or {}).get(name)
        if kind:
            ax.add_patch(Rectangle((-0.5, r - 0.5), n_cols, 1.0, fill=False, linewidth=2.0,
                                   edgecolor=FLAG_STYLE[kind][1], zorder=3, clip_on=False))


def _depth_totals(ax, usage: DepthUsage) -> None:
    totals = usage.split_counts.sum(axis=0)
    ax.bar(range(len(totals)), totals, color=GRID, edgecolor=MUTED, linewidth=0.5, width=0.8)
    ax.set_ylabel("splits", fontsize=8, color=MUTED)
    ax.tick_params(which="both", labelbottom=False, length=0, labelsize=7, colors=MUTED)
    ax.set_yticks([0, int(totals.max()) if totals.size else 0])
    for s in ("top", "right", "bottom"):
        ax.spines[s].set_visible(False)


def _overall_bars(ax, values, names, flags) -> None:
    colours = [FLAG_STYLE[(flags or {})[n]][1] if (flags or {}).get(n) else ACCENT for n in names]
    ax.barh(range(len(values)), values, color=colours, height=0.65)
    vmax = float(values.max()) if len(values) else 1.0
    for r, v in enumerate(values):
        ax.text(v + 0.02 * vmax, r, f"{100 * v:.1f}%", va="center", fontsize=7, color=INK)
    ax.set_xlim(0, vmax * 1.45 if vmax > 0 else 1)
    ax.set_title("all depths", fontsize=8, color=MUTED, loc="left")
    ax.tick_params(which="both", labelleft=False, left=False, labelsize=7, colors=MUTED)
    ax.xaxis.set_major_formatter(lambda v, _: f"{100 * v:.0f}%")
    ax.set_xticks([0, vmax])
    for s in ("top", "right", "left"):
        ax.spines[s].set_visible(False)


# ---------------------------------------------------------------------------- position map
BOX_HALF = 0.3  # half a node box's height, in levels
BOX_LEAST_IN = 1.2  # a node box is at least this wide (inches): "feature_name  12%" fits
BOX_MOST_IN = 1.6
BOX_GAP = 0.015  # between neighbouring boxes, as a share of the map's width
STAGGER = 0.72  # levels between the staggered rows of one depth
LEVEL_IN = 0.95  # inches per level


def _position_rows(max_depth: int, inches: float) -> list[int]:
    """Rows per depth: a depth whose boxes would be narrower than ``BOX_LEAST_IN`` side by
    side puts every other box on a row of its own below."""
    return [2 if BOX_LEAST_IN * 2 ** d > inches + 1e-9 else 1 for d in range(max_depth + 1)]


def _position_layout(max_depth: int, inches: float) -> tuple[dict, float, float, float]:
    """Centre (x in 0..1 across, y in levels down) of every position; the box width (in
    units of x); the margin beyond 0 and 1 that the outermost boxes need; and the lowest y."""
    rows = _position_rows(max_depth, inches)
    box_w = min(min(rows[d] / 2 ** d for d in range(max_depth + 1)) - BOX_GAP, BOX_MOST_IN / inches)
    margin = max(0.0, box_w / 2 - 0.5 / 2 ** max_depth) + BOX_GAP / 4
    centres, base = {}, 0.0
    for d in range(max_depth + 1):
        for index in range(2 ** d):
            centres[2 ** d - 1 + index] = ((index + 0.5) / 2 ** d, base + (index % rows[d]) * STAGGER)
        bottom = base + (rows[d] - 1) * STAGGER
        base = bottom + 1.0
    return centres, box_w, margin, bottom


def _fitted(name: str, flags, suffix: str, fontsize: float, bold: bool, inches: float) -> str:
    """``name`` (with its flag's glyph) and ``suffix`` in at most ``inches`` at ``fontsize``,
    the name shortened (keeping both ends) until it fits, as measured with the font's own
    metrics."""
    prop = FontProperties(family="DejaVu Sans", size=fontsize, weight="bold" if bold else "normal")
    width = len(str(name)) + 2
    while True:
        text = f"{flag_label(name, flags, width)}{suffix}"
        w, _, _ = text_to_path.get_text_width_height_descent(text, prop, ismath=False)
        if w <= inches * 72.0 or width <= 6:
            return text
        width -= 1


def position_map_figure(usage: PositionUsage, flags: Mapping[str, str] | None = None,
                        title: str | None = None) -> Figure:
    """The top levels of a tree drawn as node boxes, at the report's print width.

    Each box names the features the trees split on at that position with their shares; a
    bar along its foot shows the leading feature's share (how much the trees agree there).
    Edge widths follow how many trees reach the position; flagged features are coloured and
    a box led by one is framed in the flag's colour. Where a level's boxes would be too
    narrow to name a feature side by side, they alternate between two rows. Up to four
    levels (the review's) it is drawn at the report's print width; deeper maps are wider.
    """
    md = usage.max_depth
    width = PRINT_WIDTH if md <= 3 else min(max(2 ** md * 1.25 + 0.6, 8.0), 26.0)
    inches = width - 0.15  # the map's own width
    centres, box_w, margin, bottom = _position_layout(md, inches)
    height = (bottom + 0.8) * LEVEL_IN + 1.5
    fig = new_figure(width, height)
    ax = fig.add_subplot(1, 1, 1, label="position map")
    fontsize = 7.0
    text_in = 0.95 * box_w * inches / (1 + 2 * margin)  # the width a box's text may take
    lines = 3 if md <= 3 else 2
    _position_edges(ax, usage, centres)
    shown = set()
    for c, pos in enumerate(usage.positions):
        shown |= _position_box(ax, usage, c, int(pos), centres[int(pos)], box_w, flags, lines,
                               text_in, fontsize)
    ax.set_xlim(-margin, 1 + margin)
    ax.set_ylim(bottom + 0.4, -0.4)
    ax.set_axis_off()
    _title(fig, title or "Which feature the trees split on at each node position",
           _scope_text(usage) + f" · top {md + 1} levels")
    notes = ["Left branch: the split's condition holds (value at or below the cut; below it for "
             "XGBoost). #: position; n: trees with a split there; bar: share of the leading "
             "feature; dashed box: no tree splits there."]
    legend = _flag_legend_text(flags, sorted(shown))
    if legend:
        notes.append("Flagged: " + legend)
    _footnote(fig, notes, width=int(width * 17))
    return fig


def _position_edges(ax, usage: PositionUsage, centres: dict) -> None:
    reach = usage.n_reached / max(usage.n_trees, 1)
    for c, pos in enumerate(usage.positions):
        if pos == 0:
            continue
        x, y = centres[int(pos)]
        px, py = centres[(int(pos) - 1) // 2]
        ax.plot([px, x], [py + BOX_HALF, y - BOX_HALF], color=GRID if reach[c] == 0 else MUTED,
                solid_capstyle="round", linewidth=0.6 + 3.0 * float(reach[c]), zorder=1)


def _position_box(ax, usage: PositionUsage, c: int, pos: int, centre: tuple[float, float],
                  box_w: float, flags, lines: int, text_in: float, fontsize: float) -> set[str]:
    """Draw one node box; returns the names of the features it shows."""
    x, d = centre
    col = usage.shares[:, c]
    order = [j for j in np.lexsort((np.arange(col.shape[0]), -col))[:lines] if col[j] > 0]
    lead_kind = (flags or {}).get(usage.feature_names[order[0]]) if order else None
    edge = FLAG_STYLE[lead_kind][1] if lead_kind else MUTED
    ax.add_patch(FancyBboxPatch(
        (x - box_w / 2, d - BOX_HALF), box_w, 2 * BOX_HALF,
        boxstyle="round,pad=0.0,rounding_size=0.01", facecolor="white", edgecolor=edge,
        linewidth=2.2 if lead_kind else 0.9, linestyle="-" if order else "--", zorder=2))
    small = max(fontsize - 1.0, SMALLEST_TEXT)
    if not order:
        ax.text(x, d, f"#{pos}\nno split", ha="center", va="center", fontsize=small,
                color=MUTED, zorder=3)
        return set()
    for k, j in enumerate(order):
        name = usage.feature_names[j]
        kind = (flags or {}).get(name)
        size = fontsize if k == 0 else small  # lines after the first: smaller, not bold
        ax.text(x, d - 0.2 + 0.13 * k, _fitted(name, flags, f"  {100 * col[j]:.0f}%", size, k == 0, text_in),
                ha="center", va="center", fontsize=size,
                color=FLAG_STYLE[kind][1] if kind else INK,
                fontweight="bold" if k == 0 else "normal", zorder=3)
    ax.text(x, d + 0.2, f"#{pos}   n={int(usage.n_reached[c])}", ha="center", va="center",
            fontsize=SMALLEST_TEXT, color=MUTED, zorder=3)
    inner = box_w * 0.86
    left = x - inner / 2
    ax.add_patch(Rectangle((left, d + 0.245), inner, 0.03, facecolor=GRID, linewidth=0,
                           zorder=3))
    ax.add_patch(Rectangle((left, d + 0.245), inner * float(col[order[0]]), 0.03,
                           facecolor=edge if lead_kind else ACCENT, linewidth=0, zorder=4))
    return {usage.feature_names[j] for j in order}


# ---------------------------------------------------------------------------- threshold strips
def _strip_features(profiles: ThresholdProfiles, features, max_features: int) -> list:
    if features is not None:
        return [profiles[name] for name in features]
    used = [f for f in profiles.features if f.n_splits > 0]
    used.sort(key=lambda f: (-f.n_splits, f.index))
    return used[:max_features]


def threshold_strips_figure(profiles: ThresholdProfiles, features: Sequence[str] | None = None,
                            max_features: int = 12, flags: Mapping[str, str] | None = None,
                            bins: int = 40, title: str | None = None) -> Figure:
    """One strip per feature: where its cut points fall on the review data's distribution.

    With review data the horizontal axis is the share of observed values at or below the
    cut (0 = the smallest value, 1 = the largest), the same for every feature; bars count
    splits per bin; cuts outside the observed range are marked at either end with their
    number. Without data each strip uses the feature's own values.
    """
    chosen = _strip_features(profiles, features, max_features)
    # categorical features first: their strips name their categories, not positions
    chosen = [f for f in chosen if f.is_categorical] + [f for f in chosen if not f.is_categorical]
    n = max(len(chosen), 1)
    labels = [flag_label(f.feature, flags, 26) for f in chosen]
    n_cat = sum(f.is_categorical for f in chosen)
    strip_in = min(0.62, (PRINT_HEIGHT - 2.2 - 0.25 * n_cat) / n)
    fig = new_figure(PRINT_WIDTH, strip_in * n + 0.25 * n_cat + 2.2)
    gs = fig.add_gridspec(n, 1, hspace=0.55 if n_cat else 0.0)
    axes, numeric = [], []
    for r, fc in enumerate(chosen):
        share = numeric[0] if numeric and profiles.has_data and not fc.is_categorical else None
        ax = fig.add_subplot(gs[r, 0], sharex=share, label=f"strip {fc.feature}")
        axes.append(ax)
        if not fc.is_categorical:
            numeric.append(ax)
        _one_strip(ax, fc, labels[r], profiles.has_data, bins, flags)
    axes = numeric
    if axes and profiles.has_data:
        for ax in axes[:-1]:
            ax.tick_params(labelbottom=False)
        axes[-1].set_xlabel("position of the cut in the review data (share of values sent "
                            "left, 0 = smallest, 1 = largest)", fontsize=8, color=INK)
        axes[-1].set_xticks(np.linspace(0.0, 1.0, 6))
        axes[-1].xaxis.set_major_formatter(PercentFormatter(xmax=1.0, decimals=0))
    sub = (f"review data: {profiles.n_rows} rows · rule: {profiles.rule}" if profiles.has_data
           else "no review data: each strip on the feature's own scale")
    _title(fig, title or "Where the cut points fall", sub)
    any_outside = any(f.outside.any() for f in chosen)
    notes = ["Bars: split nodes per bin (each strip scaled to its own tallest bar)."
             + (" ▲ at an end: cuts outside the observed range (the review data never tests "
                "them), with their number." if any_outside else "")
             + ("" if profiles.has_data else
                " Give review data to place the cuts on its distribution.")]
    if any(f.n_missing_only for f in chosen):
        notes.append("missing-only: splits with an infinite cut, which only set missing values "
                     "apart from all others; they are counted but not placed.")
    legend = _flag_legend_text(flags, [f.feature for f in chosen])
    if legend:
        notes.append("Flagged: " + legend)
    _footnote(fig, notes, width=int(PRINT_WIDTH * 17))
    return fig


def _category_strip(ax, fc, colour) -> None:
    """A categorical feature: per category, the share of the feature's splits sending it left
    (categories in code order, at most 16 named)."""
    n = max(fc.n_splits, 1)
    shown = np.arange(len(fc.categories))
    if shown.size > 16:
        shown = np.sort(np.argsort(-fc.left_counts, kind="stable")[:16])
    x = (np.arange(shown.size) + 0.5) / max(shown.size, 1)
    width = 0.8 / max(shown.size, 1)
    ax.bar(x, fc.left_counts[shown] / n, width=width, color=colour, linewidth=0, zorder=2)
    ax.set_xticks(x)
    ax.set_xticklabels([fc.categories[c][:12] for c in shown], fontsize=6.5)
    ax.set_xlim(-0.07, 1.07)


def _one_strip(ax, fc, label: str, has_data: bool, bins: int, flags) -> None:
    kind = (flags or {}).get(fc.feature)
    colour = FLAG_STYLE[kind][1] if kind else ACCENT
    if fc.is_categorical:
        _category_strip(ax, fc, colour)
        _strip_frame(ax, fc, label, kind, colour,
                     f"  {fc.n_splits} splits, {len(fc.category_sets)} sets\n"
                     "  bar: share of splits\n  sending it left")
        return
    inside = fc.placed
    if has_data:
        ax.axvspan(0, 1, color="#f3f4f6", zorder=0)
        x, lo, hi = fc.quantiles[inside], 0.0, 1.0
    else:
        x = fc.cuts[inside]
        lo, hi = (float(x.min()), float(x.max())) if x.size else (0.0, 1.0)
        hi = hi if hi > lo else lo + 1.0
    edges = np.linspace(lo, hi, bins + 1)
    heights, _ = np.histogram(x, bins=edges, weights=fc.counts[inside])
    top = max(float(heights.max()) if heights.size else 0.0, 1.0)
    ax.bar(edges[:-1], heights / top, width=np.diff(edges), align="edge", color=colour,
           linewidth=0, zorder=2)
    if has_data:
        _outside_marks(ax, fc)
        for q in (0.25, 0.5, 0.75):
            ax.axvline(q, color="white", linewidth=0.8, zorder=1)
        _summary_labels(ax, fc)
        ax.set_xlim(-0.07, 1.07)
    info = f"  {fc.n_splits} splits\n  {fc.cuts.shape[0]} cuts"
    if fc.n_missing_only:
        info += f"\n  {fc.n_missing_only} missing-only"
    _strip_frame(ax, fc, label, kind, colour, info)


def _strip_frame(ax, fc, label: str, kind, colour, info: str) -> None:
    ax.set_ylim(0, 1.25)
    ax.set_yticks([])
    ax.set_ylabel(label, rotation=0, ha="right", va="center", fontsize=8,
                  color=colour if kind else INK, fontweight="bold" if kind else "normal")
    ax.text(1.0, 0.5, info, transform=ax.transAxes, fontsize=SMALLEST_TEXT, color=MUTED,
            va="center", ha="left")
    for s in ("top", "right", "left"):
        ax.spines[s].set_visible(False)
    ax.spines["bottom"].set_color(GRID)
    ax.tick_params(labelsize=7, colors=MUTED, length=2)


def _outside_marks(ax, fc) -> None:
    for side, x, word in ((-1, -0.035, "below"), (1, 1.035, "above")):
        count = int(fc.counts[fc.side == side].sum())
        if count:
            ax.plot([x], [0.35], marker="^", color="#EE7733", markersize=6, zorder=3)
            ax.text(x, 0.75, str(count), ha="center", va="center", fontsize=7, color="#EE7733")


def _summary_labels(ax, fc) -> None:
    s = fc.data_summary
    if not s:
        return
    for q, key, align in ((0.0, "min", "left"), (0.5, "median", "center"), (1.0, "max", "right")):
        ax.text(q, 1.12, f"{key} {s[key]:.4g}", ha=align, va="center", fontsize=6.5,
                color=MUTED, zorder=3)


# ---------------------------------------------------------------------------- importances
def importance_figure(cmp: ImportanceComparison, flags: Mapping[str, str] | None = None,
                      max_features: int = 20, title: str | None = None) -> Figure:
    """Impurity and permutation importance side by side, features in impurity-rank order,
    each bar labelled with its rank, and the impurity caution printed beneath."""
    order = np.lexsort((np.arange(len(cmp.feature_names)), cmp.impurity_rank))[:max_features]
    names = [cmp.feature_names[j] for j in order]
    labels = [flag_label(n, flags) for n in names]
    n = max(len(order), 1)
    panels = 2 if cmp.has_permutation else 1
    width = PRINT_WIDTH
    panel_in = (width - _label_inches(labels, 8.0) - 0.3) / panels
    fig = new_figure(width, min(0.3, (PRINT_HEIGHT - 2.6) / n) * n + 2.6)
    gs = fig.add_gridspec(1, panels)
    ax = fig.add_subplot(gs[0, 0], label="impurity")
    mdi = cmp.impurity_method == METHOD_MDI
    _importance_panel(ax, cmp.impurity[order], None, cmp.impurity_rank[order], names, flags,
                      "impurity importance (share)" if mdi else "total split gain (share)",
                      panel_in)
    ax.set_yticks(range(len(names)), labels, fontsize=8)
    _style_flagged_ticklabels(ax.get_yticklabels(), names, flags)
    ax.invert_yaxis()
    if cmp.has_permutation:
        ax2 = fig.add_subplot(gs[0, 1], sharey=ax, label="permutation")
        s = cmp.permutation_setting
        _importance_panel(ax2, cmp.permutation_mean[order], cmp.permutation_std[order],
                          cmp.permutation_rank[order], names, flags,
                          f"permutation importance (drop in {s['scoring']})", panel_in)
        ax2.tick_params(labelleft=False)
    sub = cmp.impurity_method
    if cmp.has_permutation:
        s = cmp.permutation_setting
        against = "the model's own predictions" if s["target"] == "model predictions" else "labels"
        sub += (f" · permutation: {s['n_repeats']} repeats, seed {s['random_state']}, "
                f"{s['n_rows']} rows, scored against {against}; bars ± 1 s.d.")
    _title(fig, title or ("Feature importance, two ways" if cmp.has_permutation
                          else "Feature importance from the trees"), sub)
    notes = [cmp.caution, "#k: rank (1 = most important)."]
    if not cmp.has_permutation:
        notes.append("Permutation importance needs review data.")
    if len(cmp.feature_names) > len(order):
        notes.append(f"{len(cmp.feature_names) - len(order)} features with lower impurity "
                     "rank are not shown.")
    legend = _flag_legend_text(flags, names)
    if legend:
        notes.append("Flagged: " + legend)
    _footnote(fig, notes, width=int(width * 17))
    return fig


def _number(v: float) -> str:
    """Three significant digits, so small permutation drops stay readable."""
    return "0" if v == 0 else f"{v:.3g}".replace("-", "−")


def _importance_panel(ax, values, errors, ranks, names, flags, xlabel: str,
                      inches: float = 3.0) -> None:
    colours = [FLAG_STYLE[(flags or {})[n]][1] if (flags or {}).get(n) else ACCENT for n in names]
    y = np.arange(len(values))
    ax.barh(y, values, xerr=errors, color=colours, height=0.65,
            error_kw={"ecolor": INK, "elinewidth": 0.8, "capsize": 2})
    reach = values + (errors if errors is not None else 0)
    vmax = float(np.max(reach)) if len(values) else 1.0
    vmin = min(0.0, float(np.min(values - (errors if errors is not None else 0))) if len(values)
               else 0.0)
    span = max(vmax - vmin, 1e-12)
    for r, (v, e, k) in enumerate(zip(values, reach, ranks)):
        ax.text(max(e, v, 0) + 0.02 * span, r, f"{_number(v)}  #{int(k)}", va="center",
                fontsize=7, color=INK)
    ax.set_xlim(vmin - 0.02 * span, vmax + 0.5 * span)
    ax.axvline(0, color=MUTED, linewidth=0.8)
    ax.set_xlabel(textwrap.fill(xlabel, max(20, int(inches * 72 / (8 * 0.56)))), fontsize=8,
                  color=INK)
    ax.tick_params(axis="x", labelsize=7.5, colors=MUTED)
    ax.tick_params(axis="y", left=False, labelcolor=INK)
    ax.grid(axis="x", color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)
    for s in ("top", "right", "left"):
        ax.spines[s].set_visible(False)


# ---------------------------------------------------------------------------- two models
def comparison_figure(cmp: ModelComparison, flags: Mapping[str, str] | None = None,
                      max_features: int = 20, max_depths: int = 16,
                      title: str | None = None) -> Figure:
    """Model B against model A: change of depth-usage shares (percentage points) as a
    diverging heat map, and the move of each feature's importance rank as a slope chart."""
    key = np.maximum(cmp.overall_a, cmp.overall_b)
    order = np.lexsort((np.arange(key.shape[0]), -key))
    order = order[key[order] > 0][:max_features]
    names = [cmp.feature_names[j] for j in order]
    labels = [flag_label(n, flags) for n in names]
    n_cols = min(cmp.depths.shape[0], max_depths)
    diff = cmp.share_difference[order][:, :n_cols]
    n = max(len(order), 1)
    width = _label_inches(labels) * 2 + n_cols * 0.42 + 4.2
    fig = new_figure(max(width, 9.0), 0.3 * n + 2.8)
    gs = fig.add_gridspec(1, 3, width_ratios=[n_cols * 0.42, 0.12, 3.4])
    ax, cax, slope = (fig.add_subplot(gs[0, k], label=name)
                      for k, name in enumerate(("difference", "colour scale", "rank slopes")))
    lim = max(float(np.abs(diff).max()) if diff.size else 0.0, 0.01)
    norm, cmap = TwoSlopeNorm(0.0, -lim, lim), colormaps[DIFF_CMAP]
    image = ax.imshow(diff if diff.size else np.zeros((1, n_cols)), cmap=cmap, norm=norm,
                      aspect="auto", interpolation="nearest")
    for (r, c), v in np.ndenumerate(diff):
        if round(100 * v) != 0:
            ax.text(c, r, _points(v), ha="center", va="center", fontsize=7,
                    color=_text_colour(cmap(norm(v))))
    _depth_axes(ax, cmp.depths[:n_cols], names, labels, flags, True)
    ax.set_title(f"share at each depth: {cmp.labels[1]} − {cmp.labels[0]}", fontsize=9,
                 color=INK, loc="left")
    bar = fig.colorbar(image, cax=cax)
    bar.set_label("change (percentage points)", fontsize=8)
    bar.ax.yaxis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 5, 10]))
    bar.ax.yaxis.set_major_formatter(lambda v, _: _points(v))
    bar.ax.tick_params(labelsize=7.5)
    _rank_slopes(slope, cmp, order, flags)
    _title(fig, title or f"What changed from {cmp.labels[0]} to {cmp.labels[1]}",
           f"weight: {cmp.weight} · importance: impurity importance of each model")
    notes = []
    if cmp.depths.shape[0] > n_cols:
        notes.append(f"Depths beyond {n_cols - 1} are not drawn; the CSV table has them.")
    notes.append("Appeared (used only by " + cmp.labels[1] + "): " + (", ".join(cmp.appeared)
                                                                      or "none") + ".")
    notes.append("Vanished (used only by " + cmp.labels[0] + "): " + (", ".join(cmp.vanished)
                                                                      or "none") + ".")
    legend = _flag_legend_text(flags, names)
    if legend:
        notes.append("Flagged: " + legend)
    _footnote(fig, notes, width=int(max(width, 9.0) * 15))
    return fig


def _points(v: float) -> str:
    """A share difference in whole percentage points with its sign ("+4", "−12", "0")."""
    p = round(100 * v)
    return "0" if p == 0 else f"{p:+d}".replace("-", "−")


def _rank_slopes(ax, cmp: ModelComparison, order, flags) -> None:
    ra, rb = cmp.rank_a, cmp.rank_b
    shown = list(order)
    for j in shown:
        name = cmp.feature_names[j]
        kind = (flags or {}).get(name)
        moved = ra[j] - rb[j]
        colour = (FLAG_STYLE[kind][1] if kind else ACCENT if moved > 0
                  else "#EE7733" if moved < 0 else MUTED)
        ax.plot([0, 1], [ra[j], rb[j]], color=colour, linewidth=1.6, marker="o", markersize=3.5)
        status = cmp.status(name)
        tag = {"appeared": " (new)", "vanished": " (gone)"}.get(status, "")
        ax.text(-0.04, ra[j], f"{short_label(name, 22)} {ra[j]}", ha="right", va="center",
                fontsize=7.5, color=colour)
        ax.text(1.04, rb[j], f"{rb[j]} {short_label(name, 22)}{tag}", ha="left", va="center",
                fontsize=7.5, color=colour)
    top = max([int(max(ra[j], rb[j])) for j in shown], default=1)
    ax.set_ylim(top + 0.6, 0.4)
    ax.set_xlim(-0.9, 1.9)
    ax.set_xticks([0, 1], [f"rank in {cmp.labels[0]}", f"rank in {cmp.labels[1]}"], fontsize=8.5)
    ax.set_yticks([])
    ax.tick_params(length=0)
    for s in ax.spines.values():
        s.set_visible(False)
