"""The report as plain data: a title, the review's particulars and a list of blocks.

The review pipeline composes one :class:`Document`; ``html_report.render_html`` and
``pdf_report.render_pdf`` turn the same document into a self-contained HTML page and a PDF.
Every string here is plain text (never markup): the renderers escape or typeset it.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import date, datetime, timezone
from typing import Any, Literal, Union

import numpy as np

from ..errors import SettingError

PARAGRAPH_STYLES = ("body", "note", "caution")
ALIGNMENTS = ("left", "right", "center")
HEADING_LEVELS = (1, 2, 3)
META_ORDER = ("model", "data", "hashes", "date", "reviewer")


@dataclass
class Title:
    """The document's opening title, with an optional subtitle under it.

    With ``own_page`` the title and the document's particulars (``Document.meta``: model,
    data, reviewer, decision, date) fill a title page of their own, and the next block starts
    on a new page.
    """

    text: str
    subtitle: str = ""
    own_page: bool = False


@dataclass
class Heading:
    """A section heading; level 1 is a chapter, 2 a section, 3 a subsection."""

    text: str
    level: int = 1

    def __post_init__(self) -> None:
        if self.level not in HEADING_LEVELS:
            raise SettingError(f"Heading level {self.level!r} for {self.text!r}: use 1, 2 or 3.")


@dataclass
class Paragraph:
    """Running text. A blank line starts a new paragraph, a single newline breaks the line.

    ``style`` is ``"body"`` for ordinary text, ``"note"`` for a quieter aside and
    ``"caution"`` for a boxed warning a reader must not miss.
    """

    text: str
    style: Literal["body", "note", "caution"] = "body"

    def __post_init__(self) -> None:
        if self.style not in PARAGRAPH_STYLES:
            raise SettingError(f"Paragraph style {self.style!r}: use one of {', '.join(PARAGRAPH_STYLES)}.")

    def paragraphs(self) -> list[list[str]]:
        """The text split into paragraphs, each a list of forced lines."""
        chunks = [c for c in clean_text(self.text).split("\n\n") if c.strip()]
        return [c.strip("\n").split("\n") for c in chunks]


@dataclass
class KeyValues:
    """A two-column list of labels and their values (settings, particulars)."""

    rows: list[tuple[str, str]]
    caption: str = ""


@dataclass
class Table:
    """A table of values; cells may be numbers, text, booleans or ``None`` (blank).

    Parameters
    ----------
    header : list of str
        One label per column.
    rows : list of list
        The cells, one list per row, each as long as ``header``.
    caption : str
        Shown above the table, numbered ("Table 2. ...") when given.
    align : list of {"left", "right", "center"}, optional
        Per column; by default numbers are right-aligned and anything else left-aligned.
    formats : list of str or None, optional
        A ``format()`` spec per column for numeric cells (``".3f"``, ``".1%"``, ``",d"``);
        ``None`` keeps the default (integers in full, floats to four significant digits).
    """

    header: list[str]
    rows: list[list]
    caption: str = ""
    align: list[str] | None = None
    formats: list[str | None] | None = None

    def __post_init__(self) -> None:
        n = len(self.header)
        if n == 0:
            raise SettingError(f"Table {self.caption!r} has no columns: give at least one header label.")
        for i, row in enumerate(self.rows):
            if len(row) != n:
                raise SettingError(f"Table {self.caption!r}: row {i} has {len(row)} cells, the header {n}.")
        if self.align is not None:
            bad = [a for a in self.align if a not in ALIGNMENTS]
            if len(self.align) != n or bad:
                raise SettingError(f"Table {self.caption!r}: align needs {n} values from {', '.join(ALIGNMENTS)}.")
        if self.formats is not None and len(self.formats) != n:
            raise SettingError(f"Table {self.caption!r}: formats needs {n} values (None keeps the default).")

    def cell_text(self, row: int, col: int) -> str:
        """The cell at ``(row, col)`` as the text both renderers show."""
        spec = self.formats[col] if self.formats is not None else None
        return format_value(self.rows[row][col], spec)

    def text_rows(self) -> list[list[str]]:
        """All cells as text, row by row."""
        return [[self.cell_text(r, c) for c in range(len(self.header))] for r in range(len(self.rows))]

    def alignments(self) -> list[str]:
        """The alignment of each column: as given, else right for numeric columns."""
        if self.align is not None:
            return list(self.align)
        out = []
        for c in range(len(self.header)):
            cells = [row[c] for row in self.rows if row[c] is not None]
            numeric = bool(cells) and all(_is_number(v) for v in cells)
            out.append("right" if numeric else "left")
        return out


@dataclass
class Figure:
    """A matplotlib figure, drawn at ``width`` (a share of the text width, 0 to 1)."""

    figure: Any
    caption: str = ""
    width: float = 1.0

    def __post_init__(self) -> None:
        if not 0.0 < self.width <= 1.0:
            raise SettingError(f"Figure {self.caption!r}: width {self.width!r} must be a share in (0, 1].")


@dataclass
class Code:
    """Text shown verbatim in a monospaced font, such as a listing of rules."""

    text: str
    caption: str = ""

    def lines(self) -> list[str]:
        return clean_text(self.text).rstrip("\n").split("\n")


@dataclass
class PageBreak:
    """Start the next block on a new page (PDF) or a new printed page (HTML)."""


@dataclass
class Contents:
    """The list of contents, placed here: the headings down to level ``levels`` (1 to 3),
    each with its page number in the PDF and a link in the HTML."""

    title: str = "Contents"
    levels: int = 2

    def __post_init__(self) -> None:
        if self.levels not in HEADING_LEVELS:
            raise SettingError(f"Contents levels {self.levels!r}: use 1, 2 or 3.")

    def entries(self, blocks: list) -> list["Heading"]:
        """The headings it lists, in reading order."""
        return [b for b in blocks if isinstance(b, Heading) and b.level <= self.levels]


Block = Union[Title, Heading, Paragraph, KeyValues, Table, Figure, Code, PageBreak, Contents]


@dataclass
class Document:
    """One report: its title, the review's particulars and its blocks in reading order.

    ``meta`` holds the particulars shown in the report's header: by convention the keys
    ``model``, ``data``, ``hashes`` (a mapping of file name to digest, or text), ``date``
    (a ``datetime``, ``date`` or ISO 8601 text; it also dates the PDF, so a fixed date gives
    the same file twice) and ``reviewer``; any other key is shown after them.
    """

    title: str
    meta: dict = field(default_factory=dict)
    blocks: list = field(default_factory=list)

    def add(self, *blocks: Block) -> "Document":
        """Append blocks and return the document (so calls can be chained)."""
        self.blocks.extend(blocks)
        return self

    def front(self) -> tuple[Title, list]:
        """The opening title (the first block, or one made from ``title``) and the blocks after it."""
        if self.blocks and isinstance(self.blocks[0], Title):
            return self.blocks[0], list(self.blocks[1:])
        return Title(self.title), list(self.blocks)

    def headings(self) -> list[Heading]:
        return [b for b in self.blocks if isinstance(b, Heading)]

    def meta_rows(self) -> list[tuple[str, str]]:
        """The particulars as (label, text) rows; a mapping value gives one row per entry."""
        keys = [k for k in META_ORDER if k in self.meta] + [k for k in self.meta if k not in META_ORDER]
        rows: list[tuple[str, str]] = []
        for key in keys:
            label, value = _label(key), self.meta[key]
            if isinstance(value, dict):
                rows.extend((f"{label}: {k}", format_value(v)) for k, v in value.items())
            elif key == "date" and self.created() is not None:
                rows.append((label, self.date_text()))
            else:
                rows.append((label, format_value(value)))
        return rows

    def created(self) -> datetime | None:
        """``meta["date"]`` as an aware datetime (UTC when no zone is given), or None."""
        value = self.meta.get("date")
        if value is None or value == "":
            return None
        if isinstance(value, datetime):
            moment = value
        elif isinstance(value, date):
            moment = datetime(value.year, value.month, value.day)
        else:
            try:
                moment = datetime.fromisoformat(str(value))
            except ValueError:
                raise SettingError(f"Report date {value!r}: give an ISO 8601 date such as 2025-03-14.") from None
        return moment if moment.tzinfo else moment.replace(tzinfo=timezone.utc)

    def date_text(self) -> str:
        """The date as the report prints it (ISO 8601; time and zone only when given)."""
        value = self.meta.get("date")
        if isinstance(value, datetime):
            return value.isoformat(sep=" ", timespec="minutes")
        if isinstance(value, date):
            return value.isoformat()
        return "" if value is None else str(value)

    def numbered_captions(self) -> dict[int, str]:
        """Caption text by ``id(block)``, numbered per kind ("Table 1. ...", "Figure 2. ...")."""
        counts: dict[str, int] = {}
        out: dict[int, str] = {}
        for block in self.blocks:
            kind = {Table: "Table", Figure: "Figure"}.get(type(block))
            if kind is not None and block.caption:
                counts[kind] = counts.get(kind, 0) + 1
                out[id(block)] = f"{kind} {counts[kind]}. {block.caption}"
            elif isinstance(block, (KeyValues, Code)) and block.caption:
                out[id(block)] = block.caption
        return out


def format_value(value: Any, spec: str | None = None) -> str:
    """A cell or particular as text: numbers by ``spec`` (or a readable default), None blank.

    A mapping or a list reads as plain text, never as code: ``{"age": "protected"}`` gives
    ``age: protected``, ``[1, 2]`` gives ``1, 2``, an empty one ``none``."""
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, Mapping):
        return "; ".join(f"{format_value(k)}: {setting_text(v, spec)}" for k, v in value.items()) or "none"
    if isinstance(value, (list, tuple, set, frozenset, np.ndarray)):
        items = sorted(value, key=str) if isinstance(value, (set, frozenset)) else list(value)
        return ", ".join(setting_text(v, spec) for v in items) or "none"
    if _is_number(value):
        if isinstance(value, numbers.Real) and math.isnan(float(value)):
            return "n/a"
        if spec:
            return format(value, spec)
        if isinstance(value, numbers.Integral):
            return str(int(value))
        return _default_float(float(value))
    return clean_text(str(value))


def setting_text(value: Any, spec: str | None = None) -> str:
    """A setting's value as text: like :func:`format_value`, but an unset value (None) reads
    ``none`` instead of a blank."""
    return "none" if value is None else format_value(value, spec)


def clean_text(text: str) -> str:
    """Text with tabs as spaces, line ends as ``\\n`` and other control characters removed."""
    text = str(text).replace("\r\n", "\n").replace("\r", "\n").replace("\t", "    ")
    return "".join(ch for ch in text if ch == "\n" or ch.isprintable())


def _default_float(v: float) -> str:
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    if v == 0.0:
        return "0"
    magnitude = math.floor(math.log10(abs(v)))
    if -3 <= magnitude < 6:
        text = f"{v:.{max(0, 3 - magnitude)}f}"
        return text.rstrip("0").rstrip(".") if "." in text else text
    return f"{v:.3e}"


def _is_number(value: Any) -> bool:
    return isinstance(value, numbers.Number) and not isinstance(value, (bool, np.bool_))


def _label(key: str) -> str:
    text = str(key).replace("_", " ")
    return text[:1].upper() + text[1:]
