"""A report :class:`~grovewise.report.document.Document` as an A4 PDF with selectable text.

Pages are drawn with matplotlib's PDF backend (no extra dependency, and no Qt outside the
window). Text is embedded as TrueType (``pdf.fonttype`` 42), so it can be selected,
searched and read back with ``pdftotext``. The layout works in two steps:

1. *flow*: each block becomes a run of units (a line of text, a table row, a figure) of
   known height, measured with the same font metrics matplotlib uses to draw; units are
   placed top to bottom and a new page starts when the next one does not fit. Tables
   repeat their header after a page break, headings stay with what follows them.
   Where a table breaks, at least ``MIN_ROWS`` rows stay on each side; a table of at most
   ``KEEP_WHOLE`` of a page is moved whole rather than broken; and when the rows carried
   over would leave their page more than half empty, the break moves to where the emptier
   of the two pages is fullest (rows move over from the page before, or the whole table
   does). These rules re-run the flow with a page break moved earlier until none applies.
2. *draw*: once the page count is known, each page is drawn as one matplotlib figure
   with its running header (title, model) and footer (date, "Page N of M"); the list of
   contents gets its page numbers from the flow (its entries' heights do not depend on them).

Figures are embedded as 200 dpi images, scaled to their share of the text width; a figure
whose smallest text would print under ``MIN_PRINTED_TEXT`` points at that share is widened
(up to the text width) until it does not.
"""

from __future__ import annotations

import io
import os
import re
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from functools import lru_cache

import matplotlib
import numpy as np
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure as MplFigure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle
from matplotlib.text import Text as MplText
from matplotlib.textpath import text_to_path

from .atomic import atomic_path
from .document import (Code, Contents, Document, Figure, Heading, KeyValues, PageBreak, Paragraph, Table,
                       Title, format_value)

# A4 in PostScript points (ISO 216: 210 x 297 mm, 72 points to the inch).
PAGE_W, PAGE_H = 595.276, 841.890
MARGIN_X = 62.0
BODY_TOP, BODY_BOTTOM = 80.0, PAGE_H - 68.0
BODY_H = BODY_BOTTOM - BODY_TOP
TEXT_W = PAGE_W - 2 * MARGIN_X
HEADER_BASELINE, FOOTER_BASELINE = 46.0, PAGE_H - 38.0
FIGURE_DPI = 200

INK, MUTED, FAINT, RULE = "#1d2730", "#5b6670", "#8a949c", "#cfd6db"
ACCENT, WASH, WARN, WARN_WASH = "#2c5d6f", "#f4f6f8", "#b7791f", "#fbf4e6"

# DejaVu Sans: ascender 0.928 em, descender 0.236 em (from the font's own metrics).
ASCENT, DESCENT = 0.928, 0.236
CELL_PAD_X, CELL_PAD_Y = 5.0, 3.0
ROW_WHOLE_LINES, ROW_PIECE_LINES = 12, 6
HEADING_ALLOWANCE = 60.0  # a page-high figure still leaves room for the heading above it
MIN_PRINTED_TEXT = 6.0  # points: no figure text is printed smaller where widening helps
MIN_ROWS = 3  # rows of a table kept on each side of a page break
KEEP_WHOLE = 0.4  # a table at most this share of a page high is moved whole, never broken
HALF_PAGE = 0.5 * BODY_H + 12.0  # "at least half full", with a line to spare
MAX_PASSES = 40  # flows tried while moving page breaks earlier
TITLE_PAGE_DROP = 0.2 * BODY_H  # the title page's title starts this far down
CONTENTS_NUMBER_W = 34.0  # the column of page numbers in the list of contents


@dataclass(frozen=True)
class _Font:
    size: float
    weight: str = "normal"
    style: str = "normal"
    mono: bool = False
    color: str = INK

    @property
    def leading(self) -> float:
        return self.size * (1.32 if self.mono else 1.42)


BODY = _Font(9.5)
NOTE = _Font(8.5, style="oblique", color=MUTED)
CAUTION = _Font(9.0)
CAUTION_LABEL = _Font(7.0, weight="bold", color=WARN)
SMALL = _Font(8.0, color=MUTED)
CAPTION = _Font(8.0, color=MUTED)
CELL = _Font(8.3)
CELL_HEAD = _Font(8.3, weight="bold")
KEY = _Font(8.3, weight="bold", color=MUTED)
CODE = _Font(7.6, mono=True)
TITLE = _Font(21.0, weight="bold")
TITLE_PAGE = _Font(28.0, weight="bold")
PARTICULAR_KEY = _Font(9.5, weight="bold", color=MUTED)
PARTICULAR = _Font(10.0)
CONTENTS_ENTRY = {1: _Font(9.5, weight="bold"), 2: _Font(9.5), 3: _Font(8.5, color=MUTED)}
CONTENTS_INDENT = {1: 0.0, 2: 14.0, 3: 28.0}
SUBTITLE = _Font(11.5, color=MUTED)
HEADINGS = {1: _Font(14.5, weight="bold", color=ACCENT), 2: _Font(11.5, weight="bold"),
            3: _Font(10.0, weight="bold", color=MUTED)}
HEADING_SPACE = {1: (20.0, 9.0), 2: (14.0, 5.0), 3: (10.0, 4.0)}  # (before, after)
BLOCK_GAP = 10.0


# --- ops: what a page holds, positioned in points from the page's top-left corner ----------

class _Op:
    """What a page holds; ``shifted`` moves it down by ``dy`` points (a dataclass with ``y``)."""

    def shifted(self, dy: float):
        return replace(self, y=self.y + dy)


@dataclass
class _Text(_Op):
    x: float
    y: float  # baseline
    text: str
    font: _Font
    ha: str = "left"


@dataclass
class _Rule(_Op):
    x0: float
    x1: float
    y: float
    width: float = 0.4
    color: str = RULE
    dotted: bool = False


@dataclass
class _Rect(_Op):
    x: float
    y: float  # top
    w: float
    h: float
    face: str
    edge: str | None = None


@dataclass
class _Image(_Op):
    x: float
    y: float  # top
    w: float
    h: float
    pixels: np.ndarray


@dataclass
class _PageRef(_Op):
    """The number of the page a heading lands on, drawn once the flow knows it."""

    x: float
    y: float  # baseline
    anchor: int
    font: _Font
    ha: str = "right"

    def resolved(self, pages: dict[int, int]) -> _Text:
        return _Text(self.x, self.y, str(pages.get(self.anchor, "")), self.font, self.ha)


@dataclass
class _Unit:
    """Something placed whole: its height and its ops relative to its own top."""

    height: float
    ops: list = field(default_factory=list)
    space_before: float = 0.0  # dropped at the top of a page


@dataclass
class _Run:
    """One block as units. ``lead`` units must start on the same page; after a page break
    inside the run at unit ``body_start`` or later, ``repeat`` units (a table's caption and
    header) are placed again; ``frame`` draws
    the background or rules of each piece (top y, bottom y) on a page. ``rows`` marks a
    table's run (its units after ``body_start`` are rows: they keep ``MIN_ROWS`` on each side
    of a break); ``anchor`` is the id of the heading the run shows."""

    units: list[_Unit]
    lead: int = 1
    repeat: list[_Unit] = field(default_factory=list)
    body_start: int = 0
    frame: Callable[[float, float], list] | None = None
    pad: tuple[float, float] = (0.0, 0.0)
    gap_after: float = BLOCK_GAP
    keep_with_next: bool = False
    page_break: bool = False
    rows: bool = False
    anchor: int | None = None

    def lead_height(self) -> float:
        units = self.units[: self.lead]
        return sum(u.height + u.space_before for u in units) + sum(self.pad)


# --- measuring and wrapping ---------------------------------------------------------------

@lru_cache(maxsize=None)
def _props(font: _Font) -> FontProperties:
    family = "DejaVu Sans Mono" if font.mono else "DejaVu Sans"
    return FontProperties(family=family, size=font.size, weight=font.weight, style=font.style)


@lru_cache(maxsize=65536)
def _width(text: str, font: _Font) -> float:
    if not text:
        return 0.0
    w, _, _ = text_to_path.get_text_width_height_descent(text, _props(font), ismath=False)
    return float(w)


def _wrap(text: str, font: _Font, width: float) -> list[str]:
    """Greedy word wrap to ``width`` points; a word wider than a line is cut by characters."""
    words = text.split()
    if not words:
        return [""]
    width += 0.01  # a column sized to its widest word must hold that word despite rounding
    space = _width(" ", font)
    lines: list[str] = []
    line, line_w = "", 0.0
    for word in words:
        pieces = _cut_word(word, font, width) if _width(word, font) > width else [word]
        for piece in pieces:
            piece_w = _width(piece, font)
            if line and line_w + space + piece_w <= width:
                line, line_w = f"{line} {piece}", line_w + space + piece_w
            else:
                if line:
                    lines.append(line)
                line, line_w = piece, piece_w
    lines.append(line)
    return lines


def _cut_word(word: str, font: _Font, width: float) -> list[str]:
    """A word too wide for its line, cut after ``_``, ``-``, ``/`` or ``.`` where it can be
    (``worst_`` ``radius``), by characters only where a part alone is still too wide."""
    pieces = _pack(_soft_parts(word), font, width)
    if len(pieces) > 1 and all(_width(p, font) <= width for p in pieces):
        return pieces
    return _pack(list(word), font, width)


def _pack(parts: list[str], font: _Font, width: float) -> list[str]:
    """Consecutive ``parts`` joined into pieces no wider than ``width`` where they can be."""
    pieces, current = [], ""
    for part in parts:
        if current and _width(current + part, font) > width:
            pieces.append(current)
            current = ""
        current += part
    return pieces + [current]


def _fit(text: str, font: _Font, width: float) -> str:
    """``text`` on one line of ``width`` points, shortened with an ellipsis if need be."""
    if _width(text, font) <= width:
        return text
    while text and _width(text + "\u2026", font) > width:
        text = text[:-1]
    return text.rstrip() + "\u2026"


def _baseline(font: _Font, top: float = 0.0) -> float:
    return top + (font.leading - (ASCENT + DESCENT) * font.size) / 2 + ASCENT * font.size


def _line_units(lines: list[str], font: _Font, x: float, first_space: float = 0.0) -> list[_Unit]:
    units = [_Unit(font.leading, [_Text(x, _baseline(font), line, font)]) for line in lines]
    if units:
        units[0].space_before = first_space
    return units


# --- blocks to runs -------------------------------------------------------------------------

def _title_runs(doc: Document, title: Title) -> list[_Run]:
    if title.own_page:
        return _title_page_runs(doc, title)
    units = _line_units(_wrap(title.text, TITLE, TEXT_W), TITLE, MARGIN_X)
    if title.subtitle:
        units += _line_units(_wrap(title.subtitle, SUBTITLE, TEXT_W), SUBTITLE, MARGIN_X, first_space=3.0)
    units.append(_Unit(14.0, [_Rule(MARGIN_X, MARGIN_X + TEXT_W, 7.0, 1.4, ACCENT)]))
    runs = [_Run(units, lead=len(units), gap_after=6.0)]
    if doc.meta_rows():
        runs.append(_key_values_run(doc.meta_rows(), ""))
    return runs


def _title_page_runs(doc: Document, title: Title) -> list[_Run]:
    """A page of its own: the title set a fifth of the way down, the subtitle, a rule and the
    particulars (model, data, hashes, date, reviewer, decision) in a larger type."""
    units = [_Unit(TITLE_PAGE_DROP)]
    units += _line_units(_wrap(title.text, TITLE_PAGE, TEXT_W), TITLE_PAGE, MARGIN_X)
    if title.subtitle:
        units += _line_units(_wrap(title.subtitle, SUBTITLE, TEXT_W), SUBTITLE, MARGIN_X, first_space=6.0)
    units.append(_Unit(26.0, [_Rule(MARGIN_X, MARGIN_X + TEXT_W, 12.0, 1.6, ACCENT)]))
    runs = [_Run(units, lead=len(units), gap_after=8.0)]
    if doc.meta_rows():
        runs.append(_key_values_run(doc.meta_rows(), "", PARTICULAR_KEY, PARTICULAR))
    return runs + [_Run([], lead=0, gap_after=0.0, page_break=True)]


def _contents_runs(block: Contents, body: list) -> list[_Run]:
    """The list of contents: each heading's text, a dotted leader and its page number (a
    ``_PageRef``, filled in once the flow has placed the heading)."""
    entries = block.entries(body)
    if not entries:
        return []
    head = _heading_run(Heading(block.title, 1))
    head.anchor = None  # the list does not list itself
    right = MARGIN_X + TEXT_W
    units = []
    for heading in entries:
        font, indent = CONTENTS_ENTRY[heading.level], CONTENTS_INDENT[heading.level]
        x = MARGIN_X + indent
        lines = _wrap(heading.text, font, TEXT_W - indent - CONTENTS_NUMBER_W)
        ops: list = [_Text(x, _baseline(font, i * font.leading), line, font) for i, line in enumerate(lines)]
        base = _baseline(font, (len(lines) - 1) * font.leading)
        leader_from = x + _width(lines[-1], font) + 5.0
        leader_to = right - _width("000", font) - 5.0
        if leader_to > leader_from:
            ops.append(_Rule(leader_from, leader_to, base, 0.9, FAINT, dotted=True))
        ops.append(_PageRef(right, base, id(heading), font))
        units.append(_Unit(len(lines) * font.leading + 1.0, ops,
                           space_before=5.0 if heading.level == 1 else 0.0))
    return [head, _Run(units, lead=min(MIN_ROWS, len(units)))]


def _heading_run(block: Heading) -> _Run:
    font = HEADINGS[block.level]
    before, after = HEADING_SPACE[block.level]
    lines = _wrap(block.text, font, TEXT_W)
    ops = [_Text(MARGIN_X, _baseline(font, i * font.leading), line, font) for i, line in enumerate(lines)]
    height = len(lines) * font.leading
    if block.level == 1:
        ops.append(_Rule(MARGIN_X, MARGIN_X + TEXT_W, height + 2.5, 0.6, RULE))
        height += 2.5
    return _Run([_Unit(height, ops, space_before=before)], gap_after=after, keep_with_next=True,
                anchor=id(block))


def _paragraph_run(block: Paragraph) -> _Run:
    if block.style == "caution":
        return _caution_run(block)
    font = NOTE if block.style == "note" else BODY
    units: list[_Unit] = []
    for i, forced in enumerate(block.paragraphs()):
        lines = [w for line in forced for w in _wrap(line, font, TEXT_W)]
        units += _line_units(lines, font, MARGIN_X, first_space=0.55 * font.leading if i else 0.0)
    return _Run(units or [_Unit(0.0)], lead=min(2, len(units)) or 1)


def _caution_run(block: Paragraph) -> _Run:
    inset = 14.0
    width = TEXT_W - inset - 10.0
    units = [_Unit(CAUTION_LABEL.leading + 1.0,
                   [_Text(MARGIN_X + inset, _baseline(CAUTION_LABEL), "CAUTION", CAUTION_LABEL)])]
    for i, forced in enumerate(block.paragraphs()):
        lines = [w for line in forced for w in _wrap(line, CAUTION, width)]
        units += _line_units(lines, CAUTION, MARGIN_X + inset, first_space=4.0 if i else 0.0)

    def frame(y0: float, y1: float) -> list:
        return [_Rect(MARGIN_X, y0, TEXT_W, y1 - y0, WARN_WASH), _Rect(MARGIN_X, y0, 3.0, y1 - y0, WARN)]

    return _Run(units, lead=len(units), frame=frame, pad=(7.0, 7.0))


def _caption_unit(text: str, width: float = TEXT_W, x: float = MARGIN_X, space: float = 0.0) -> list[_Unit]:
    lines = _wrap(text, CAPTION, width)
    ops = [_Text(x, _baseline(CAPTION, i * CAPTION.leading), line, CAPTION) for i, line in enumerate(lines)]
    return [_Unit(len(lines) * CAPTION.leading + 3.0, ops, space_before=space)]


def _key_values_run(rows: list[tuple[str, str]], caption: str, key_font: _Font = KEY,
                    value_font: _Font = CELL) -> _Run:
    key_w = min(max((_width(format_value(k), key_font) for k, _ in rows), default=0.0) + 14.0, 0.34 * TEXT_W)
    units = _caption_unit(caption) if caption else []
    start = len(units)
    for k, v in rows:
        cells = [_wrap(format_value(k), key_font, key_w - 14.0), _wrap(format_value(v), value_font, TEXT_W - key_w)]
        units += _row_units(cells, [key_font, value_font], [MARGIN_X, MARGIN_X + key_w],
                            [key_w, TEXT_W - key_w], ["left", "left"], rule=True, pad_x=0.0)
    return _Run(units, lead=_rows_lead(units, start), body_start=start, rows=True)


def _rows_lead(units: list[_Unit], body_start: int) -> int:
    """Units that must start on one page: all of a short table (it moves whole), else its
    caption, header and first ``MIN_ROWS`` rows."""
    if sum(u.height for u in units) <= KEEP_WHOLE * BODY_H:
        return len(units)
    return min(len(units), body_start + MIN_ROWS)


def _row_units(cells: list[list[str]], fonts: list[_Font], xs: list[float], widths: list[float],
               aligns: list[str], rule: bool, pad_x: float = CELL_PAD_X, budget: float | None = None) -> list[_Unit]:
    """One table row as units; a row taller than ``budget`` is split into several units."""
    leading = max(f.leading for f in fonts)
    budget = budget if budget is not None else (BODY_BOTTOM - BODY_TOP) * 0.8
    n = max(len(c) for c in cells)
    # An ordinary row stays whole; a very tall one flows in short pieces so pages stay full.
    per_unit = n if n <= ROW_WHOLE_LINES else ROW_PIECE_LINES
    per_unit = max(1, min(per_unit, int((budget - 2 * CELL_PAD_Y) // leading)))
    units = []
    for start in range(0, n, per_unit):
        count = min(per_unit, n - start)
        top = CELL_PAD_Y if start == 0 else 0.0  # pieces of one row join without a gap
        bottom = CELL_PAD_Y if start + count >= n else 0.0
        ops: list = [_Rule(MARGIN_X, xs[-1] + widths[-1], 0.0, 0.3, RULE)] if rule and start == 0 else []
        for lines, font, x, w, align in zip(cells, fonts, xs, widths, aligns):
            for i, line in enumerate(lines[start:start + count]):
                y = _baseline(font, top + i * leading)
                ops.append(_aligned(line, font, x, w, align, pad_x, y))
        units.append(_Unit(top + count * leading + bottom, ops))
    return units


def _aligned(text: str, font: _Font, x: float, w: float, align: str, pad: float, y: float) -> _Text:
    if align == "right":
        return _Text(x + w - pad, y, text, font, "right")
    if align == "center":
        return _Text(x + w / 2, y, text, font, "center")
    return _Text(x + pad, y, text, font)


def _column_widths(header: list[str], rows: list[list[str]]) -> list[float]:
    """Auto layout: natural widths when they fit, else minimum (longest word) plus a fair share."""
    columns = list(zip(header, *rows)) if rows else [(h,) for h in header]
    natural, minimum = [], []
    for col in columns:
        fonts = [CELL_HEAD] + [CELL] * (len(col) - 1)
        natural.append(max(_width(t, f) for t, f in zip(col, fonts)) + 2 * CELL_PAD_X)
        longest = max((_width(w, f) for t, f in zip(col, fonts) for w in t.split()
                       for w in _soft_parts(w)), default=0.0)
        minimum.append(longest + 2 * CELL_PAD_X)  # no word is cut while the words fit
    total, least = sum(natural), sum(minimum)
    if total <= TEXT_W:
        stretch = TEXT_W / total if total > 0.7 * TEXT_W else 1.0
        return [w * stretch for w in natural]
    if least >= TEXT_W:
        return [w * TEXT_W / least for w in minimum]
    share = (TEXT_W - least) / (total - least)
    return [m + (n - m) * share for n, m in zip(natural, minimum)]


def _soft_parts(word: str) -> list[str]:
    """The pieces a word may be cut into without breaking mid-word (after ``_ - / .``)."""
    return re.findall(r"[^_\-/.]*[_\-/.]|[^_\-/.]+$", word) or [word]


def _table_run(block: Table, caption: str) -> _Run:
    texts = block.text_rows()
    widths = _column_widths([format_value(h) for h in block.header], texts)
    xs = list(MARGIN_X + np.concatenate([[0.0], np.cumsum(widths)[:-1]]))
    aligns = block.alignments()
    right = MARGIN_X + sum(widths)
    head_cells = [_wrap(format_value(h), CELL_HEAD, w - 2 * CELL_PAD_X) for h, w in zip(block.header, widths)]
    head = _row_units(head_cells, [CELL_HEAD] * len(widths), xs, widths, aligns, rule=False)
    head[0].ops.insert(0, _Rule(MARGIN_X, right, 0.0, 0.8, INK))
    for unit in head:
        unit.ops.append(_Rule(MARGIN_X, right, unit.height, 0.55, INK))
    caption_w = max(right - MARGIN_X, 0.6 * TEXT_W)
    cap = _caption_unit(caption, caption_w) if caption else []
    budget = BODY_BOTTOM - BODY_TOP - sum(u.height for u in head + cap) - 12.0
    body: list[_Unit] = []
    for i, row in enumerate(texts):
        cells = [_wrap(t, CELL, w - 2 * CELL_PAD_X) for t, w in zip(row, widths)]
        body += _row_units(cells, [CELL] * len(widths), xs, widths, aligns, rule=i > 0, budget=budget)
    repeat = (_caption_unit(f"{caption} (continued)", caption_w) if caption else []) + head

    def frame(y0: float, y1: float) -> list:
        return [_Rule(MARGIN_X, right, y1, 0.8, INK)]

    units = cap + head + body
    start = len(cap) + len(head)
    return _Run(units, lead=_rows_lead(units, start), repeat=repeat, body_start=start, frame=frame,
                rows=True)


def _figure_run(block: Figure, caption: str) -> _Run:
    pixels = _rasterize(block.figure)
    h_px, w_px = pixels.shape[:2]
    width = _figure_width(block)
    height = width * h_px / w_px
    cap_h = _caption_height(caption, width)
    room = (BODY_BOTTOM - BODY_TOP) - cap_h - HEADING_ALLOWANCE
    if height > room:  # a tall figure shrinks to a page, its caption re-wrapped to the new width
        width, height = width * room / height, room
        cap_h = _caption_height(caption, width)
    x = MARGIN_X + (TEXT_W - width) / 2
    ops: list = [_Image(x, 0.0, width, height, pixels)]
    for unit in _caption_unit(caption, width, x) if caption else []:
        ops += [op.shifted(height + 6.0) for op in unit.ops]
    return _Run([_Unit(height + cap_h, ops, space_before=2.0)], gap_after=BLOCK_GAP + 2.0)


def _figure_width(block: Figure) -> float:
    """The figure's share of the text width, widened (up to the whole width) where its
    smallest text would otherwise print under ``MIN_PRINTED_TEXT`` points."""
    width = block.width * TEXT_W
    smallest = _smallest_text(block.figure)
    if smallest:
        natural = block.figure.get_figwidth() * 72.0  # points at the figure's own size
        width = min(TEXT_W, max(width, MIN_PRINTED_TEXT * natural / smallest))
    return width


def _smallest_text(figure) -> float | None:
    """The smallest font size (points, at the figure's own size) of the text a drawn
    matplotlib figure shows, or None when it shows none."""
    sizes = [t.get_fontsize() for t in figure.findobj(MplText) if t.get_visible() and t.get_text().strip()]
    return min(sizes) if sizes else None


def _caption_height(caption: str, width: float) -> float:
    return (sum(u.height for u in _caption_unit(caption, width)) + 6.0) if caption else 0.0


def _rasterize(figure) -> np.ndarray:
    """The figure drawn at ``FIGURE_DPI`` on white, as RGB pixels (matplotlib's raw RGBA
    output: the same pixels as its PNG, without encoding and decoding one)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="rgba", dpi=FIGURE_DPI, facecolor="white")
    data = np.frombuffer(buffer.getbuffer(), dtype=np.uint8)
    width = figure.get_figwidth() * FIGURE_DPI  # Agg's canvas is int(width) pixels wide
    w_px = next(w for w in (int(width), round(width), int(width) + 1) if w and (data.size // 4) % w == 0)
    return data.reshape(-1, w_px, 4)[..., :3].copy()


def _code_runs(block: Code, caption: str) -> list[_Run]:
    pad = 8.0
    columns = max(10, int((TEXT_W - 2 * pad) // _width("0", CODE)))
    lines = [piece for line in block.lines() for piece in _cut_code(line, columns)]

    def frame(y0: float, y1: float) -> list:
        return [_Rect(MARGIN_X, y0, TEXT_W, y1 - y0, WASH, RULE)]

    units = _line_units(lines, CODE, MARGIN_X + pad)
    runs = [_Run(_caption_unit(caption), gap_after=1.0, keep_with_next=True)] if caption else []
    return runs + [_Run(units, lead=min(3, len(units)), frame=frame, pad=(6.0, 6.0))]


def _cut_code(line: str, columns: int) -> list[str]:
    """A code line in pieces of ``columns`` characters, cut at a space when one is near the end;
    each continuation starts with an arrow."""
    pieces, width = [], columns
    while len(line) > width:
        cut = line.rfind(" ", int(width * 0.6), width + 1)
        cut = cut if cut > 0 else width
        pieces.append(line[:cut].rstrip())
        line = line[cut:].lstrip()
        width = columns - 2
    pieces.append(line)
    return [p if i == 0 else "\u21aa " + p for i, p in enumerate(pieces)]


def _runs(doc: Document) -> list[_Run]:
    title, body = doc.front()
    captions = doc.numbered_captions()
    runs = _title_runs(doc, title)
    for block in body:
        caption = captions.get(id(block), "")
        if isinstance(block, Heading):
            runs.append(_heading_run(block))
        elif isinstance(block, Title):
            runs += _title_runs(Document(doc.title), block)
        elif isinstance(block, Paragraph):
            runs.append(_paragraph_run(block))
        elif isinstance(block, KeyValues):
            runs.append(_key_values_run(block.rows, caption))
        elif isinstance(block, Table):
            runs.append(_table_run(block, caption))
        elif isinstance(block, Figure):
            runs.append(_figure_run(block, caption))
        elif isinstance(block, Code):
            runs += _code_runs(block, caption)
        elif isinstance(block, PageBreak):
            runs.append(_Run([], lead=0, gap_after=0.0, page_break=True))
        elif isinstance(block, Contents):
            runs += _contents_runs(block, body)
        else:
            raise TypeError(f"The report cannot show a block of type {type(block).__name__}.")
    return runs


# --- flow: runs to pages --------------------------------------------------------------------

class _Flow:
    """Places runs top to bottom on pages; a page is a list of ops.

    ``breaks`` maps a run's index to the unit that must start a new page: a table's break
    earlier than the page would make it, or 0 to start the run (the first of a chain of
    headings and what they head) on a new page. The flow records what the rules of
    ``_layout`` look at: the height used on each page, where each run's pieces fall and
    starts, and each heading's page.
    """

    def __init__(self, breaks: dict[int, int] | None = None) -> None:
        self.breaks = dict(breaks or {})
        self.pages: list[list] = []
        self.used: list[float] = []  # per page: the height taken, from the body's top
        self.anchors: dict[int, int] = {}  # heading id -> page number (from 1)
        self.pieces: dict[int, list[tuple[int, int, int]]] = {}  # run -> (page, first unit, end)
        self.starts: dict[int, tuple[int, float]] = {}  # run -> (page, height used before it)
        self.new_page()

    def new_page(self) -> None:
        self.pages.append([])
        self.used.append(0.0)
        self.y = BODY_TOP
        self.fresh = True

    @property
    def ops(self) -> list:
        return self.pages[-1]

    def room(self) -> float:
        return BODY_BOTTOM - self.y

    def place_all(self, runs: list[_Run]) -> list[list]:
        for i, run in enumerate(runs):
            if run.page_break:
                if not self.fresh:
                    self.new_page()
                continue
            if not self.fresh and (self.breaks.get(i) == 0 or self._needed(runs, i) > self.room()):
                self.new_page()
            self.starts[i] = (len(self.pages) - 1, self.used[-1])
            self.place(run, i)
        return self.pages

    def _needed(self, runs: list[_Run], i: int) -> float:
        """Height that must fit: the run's lead, plus the next run's while headings chain."""
        need, j = 0.0, i
        while j < len(runs):
            run = runs[j]
            if run.page_break:
                break
            need += run.lead_height() + (run.gap_after if run.keep_with_next else 0.0)
            if not run.keep_with_next:
                break
            j += 1
        return need

    def place(self, run: _Run, index: int = -1) -> None:
        piece = self._open(run)
        first = 0
        pieces = self.pieces.setdefault(index, [])
        for k, unit in enumerate(run.units):
            space = 0.0 if self.fresh else unit.space_before
            forced = 0 < k == self.breaks.get(index)
            if not self.fresh and (forced or space + unit.height + run.pad[1] > self.room()):
                self._close(run, piece)
                pieces.append((len(self.pages) - 1, first, k))
                self.new_page()
                piece, first = self._open(run), k
                for repeated in run.repeat if 0 < k and run.body_start <= k else []:
                    self._put(repeated, 0.0)
                space = 0.0
            self._put(unit, space)
            if k == 0 and run.anchor is not None:
                self.anchors[run.anchor] = len(self.pages)
        self._close(run, piece)
        pieces.append((len(self.pages) - 1, first, len(run.units)))
        self.y = min(self.y + run.gap_after, BODY_BOTTOM)

    def _open(self, run: _Run) -> tuple[int, float]:
        start = (len(self.ops), self.y)
        self.y += run.pad[0]
        return start

    def _close(self, run: _Run, piece: tuple[int, float]) -> None:
        index, top = piece
        self.y += run.pad[1]
        if run.frame is not None and len(self.ops) > index:
            self.ops[index:index] = run.frame(top, self.y)
        self.used[-1] = max(self.used[-1], self.y - BODY_TOP)

    def _put(self, unit: _Unit, space: float) -> None:
        self.y += space
        self.ops.extend(op.shifted(self.y) for op in unit.ops)
        self.y += unit.height
        self.used[-1] = max(self.used[-1], self.y - BODY_TOP)
        self.fresh = False


def _layout(runs: list[_Run]) -> _Flow:
    """Flow the runs, then move a table's page break earlier while a rule asks for it
    (``_earlier_break``), and flow again."""
    breaks: dict[int, int] = {}
    flow = _Flow(breaks)
    flow.place_all(runs)
    for _ in range(MAX_PASSES):
        moved = _earlier_break(runs, flow, breaks)
        if moved is None:
            break
        breaks[moved[0]] = moved[1]
        flow = _Flow(breaks)
        flow.place_all(runs)
    return flow


def _earlier_break(runs: list[_Run], flow: _Flow, breaks: dict[int, int]) -> tuple[int, int] | None:
    """The first table whose last page break breaks a rule, with the unit that should start
    its last page instead; None when every table is laid out well.

    Rules: the rows carried over to the table's last page are at least ``MIN_ROWS``; and
    when they leave that page more than half empty, the break moves to where the emptier of
    the two pages is fullest: rows move over (``MIN_ROWS`` stay behind), or the whole table
    with the headings chained to it (then unit 0 of the chain's first run is returned)."""
    for i, run in enumerate(runs):
        pieces = flow.pieces.get(i, [])
        if not run.rows or len(pieces) < 2:
            continue
        (p0, a0, _), (p1, a1, b1) = pieces[-2], pieces[-1]
        first_body = max(a0, run.body_start)  # the earliest unit that may start the last page
        k = None
        if b1 - a1 < MIN_ROWS:
            widow = len(run.units) - MIN_ROWS
            if widow - first_body >= MIN_ROWS:
                k = widow
        elif flow.used[p1] < HALF_PAGE:
            k, low = _balanced_break(run, flow, p0, p1, a1, first_body)
            j = _chain_start(runs, i)
            page, before = flow.starts[j]
            if len(pieces) == 2 and _whole_height(run) <= BODY_H and page == p0 and breaks.get(j) != 0:
                whole = min(before, flow.used[p1] + flow.used[p0] - before)
                if whole > low:
                    return j, 0
        if k is not None and k < min(a1, breaks.get(i, len(run.units))):
            return i, k
    return None


def _balanced_break(run: _Run, flow: _Flow, p0: int, p1: int, a1: int, first_body: int) -> tuple[int, float]:
    """The unit to start the table's last page ``p1`` with (at or before ``a1``) so that the
    emptier of ``p0`` and ``p1`` is as full as it can be, the fewest rows moved; and that
    page's height used."""
    best_k, best = a1, min(flow.used[p0], flow.used[p1])
    moved = 0.0
    for k in range(a1 - 1, first_body + MIN_ROWS - 1, -1):
        moved += run.units[k].height
        low = min(flow.used[p0] - moved, flow.used[p1] + moved)
        if low > best:
            best_k, best = k, low
        if flow.used[p1] + moved >= HALF_PAGE:
            break
    return best_k, best


def _chain_start(runs: list[_Run], i: int) -> int:
    """The first of the headings chained to run ``i`` (``i`` itself when none is)."""
    while i > 0 and runs[i - 1].keep_with_next and not runs[i - 1].page_break:
        i -= 1
    return i


def _whole_height(run: _Run) -> float:
    return sum(u.height for u in run.units) + sum(run.pad)


# --- drawing --------------------------------------------------------------------------------

def _furniture(doc: Document, number: int, total: int) -> list:
    """The running header (not on the first page) and the footer of page ``number``."""
    right = MARGIN_X + TEXT_W
    model = format_value(doc.meta.get("model", ""))
    ops: list = [_Rule(MARGIN_X, right, FOOTER_BASELINE - 11.0, 0.4, RULE),
                 _Text(MARGIN_X, FOOTER_BASELINE, _fit(doc.date_text(), SMALL, TEXT_W / 2 - 10), SMALL),
                 _Text(right, FOOTER_BASELINE, f"Page {number} of {total}", SMALL, "right")]
    if number > 1:
        model_text = _fit(model, SMALL, TEXT_W * 0.45)
        title_w = TEXT_W - _width(model_text, SMALL) - 16.0
        ops += [_Text(MARGIN_X, HEADER_BASELINE, _fit(doc.title, SMALL, title_w), SMALL),
                _Text(right, HEADER_BASELINE, model_text, SMALL, "right"),
                _Rule(MARGIN_X, right, HEADER_BASELINE + 7.0, 0.4, RULE)]
    return ops


def _draw_page(ops: list) -> MplFigure:
    fig = MplFigure(figsize=(PAGE_W / 72.0, PAGE_H / 72.0), dpi=72)
    fig.patch.set_facecolor("white")
    for op in ops:
        _draw(fig, op)
    return fig


def _draw(fig: MplFigure, op: object) -> None:
    def fx(x: float) -> float:
        return x / PAGE_W

    def fy(y: float) -> float:
        return 1.0 - y / PAGE_H

    if isinstance(op, _Text):
        fig.text(fx(op.x), fy(op.y), op.text, fontproperties=_props(op.font), color=op.font.color,
                 ha=op.ha, va="baseline", parse_math=False, usetex=False)
    elif isinstance(op, _Rule):
        fig.add_artist(Line2D([fx(op.x0), fx(op.x1)], [fy(op.y), fy(op.y)], transform=fig.transFigure,
                              linewidth=op.width, color=op.color, solid_capstyle="butt",
                              dash_capstyle="round", linestyle=(0, (0.01, 2.6)) if op.dotted else "-"))
    elif isinstance(op, _Rect):
        fig.add_artist(Rectangle((fx(op.x), fy(op.y + op.h)), op.w / PAGE_W, op.h / PAGE_H,
                                 transform=fig.transFigure, facecolor=op.face,
                                 edgecolor=op.edge or "none", linewidth=0.5 if op.edge else 0.0))
    elif isinstance(op, _Image):
        ax = fig.add_axes((fx(op.x), fy(op.y + op.h), op.w / PAGE_W, op.h / PAGE_H))
        ax.imshow(op.pixels, interpolation="none", aspect="auto")
        ax.set_axis_off()


def _metadata(doc: Document) -> dict:
    title, _ = doc.front()
    model = format_value(doc.meta.get("model", ""))
    created = doc.created()
    meta = {"Title": doc.title, "Author": format_value(doc.meta.get("reviewer", "")),
            "Subject": title.subtitle or (f"Review of {model}" if model else doc.title),
            "Creator": "Grovewise"}
    if created is not None:
        meta["CreationDate"] = created
        meta["ModDate"] = created
    return meta


def render_pdf(doc: Document, path: str | os.PathLike) -> int:
    """Render ``doc`` as an A4 PDF at ``path``, written atomically; return the page count.

    Parameters
    ----------
    doc : Document
        The report. ``meta["date"]`` dates the file (CreationDate), so a fixed date gives
        byte-identical output; ``meta["reviewer"]`` becomes the PDF's Author.
    path : path-like
        The PDF to (re)write. It is replaced only once the whole file is written, so a
        failure midway leaves the previous file as it was.

    Returns
    -------
    int
        The number of pages.
    """
    flow = _layout(_runs(doc))
    total = len(flow.pages)
    with matplotlib.rc_context({"pdf.fonttype": 42, "pdf.compression": 6}):
        with atomic_path(path) as temp:
            with PdfPages(temp, metadata=_metadata(doc)) as pdf:
                for number, ops in enumerate(flow.pages, start=1):
                    ops = [op.resolved(flow.anchors) if isinstance(op, _PageRef) else op for op in ops]
                    fig = _draw_page(_furniture(doc, number, total) + ops)
                    pdf.savefig(fig)
    return total
