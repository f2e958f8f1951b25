"""Cases: one record at a time. A searchable, filterable table of every row; for the chosen
row the ensemble's probabilities and the surrogate's path with each rule's terms evaluated,
beside what drives the ensemble there (the row's exact contributions); and the list of rows
where the two disagree."""

from __future__ import annotations

import html
import math
import re
import time
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from PySide6.QtCore import QAbstractTableModel, QModelIndex, Qt
from PySide6.QtGui import QKeySequence, QShortcut
from PySide6.QtWidgets import (QAbstractItemView, QComboBox, QFrame, QHeaderView, QHBoxLayout,
                               QLabel, QLineEdit, QListWidget, QListWidgetItem, QScrollArea,
                               QSplitter, QStyleOptionViewItem, QTableView, QTextBrowser)

from .. import theme
from ...analysis.contributions import OUTPUT_PROBABILITY, contributions
from ...report.figures_effects import value_text
from ..paths import surrogate_path
from ..widgets import Card, wrapped
from ..workers import LatestCall
from .base import Page

PARTS = {0: "fit on", 1: "held out", 2: "holdout file"}
SORT_ROLE = Qt.ItemDataRole.UserRole
DISAGREEMENTS_SHOWN = 500
FIT_ROWS = 60  # column widths fit the texts of this many rows
CONTRIBUTIONS_SHOWN = 8  # a row's features with the largest contributions, by size
CONTRIBUTIONS_KEPT = 4096  # rows whose contributions the page keeps (the latest chosen)
INLINE_LIMIT_S = 0.02  # a row explained faster than this (last measured) is explained at once
BAR_CELLS = 8  # the longest contribution bar, in spaces (on either side of the axis)
_CONDITION = re.compile(r"^\s*([A-Za-z_][\w.]*)\s*(<=|>=|==|=|<|>|!=)\s*(-?[\d.]+(?:e-?\d+)?)\s*$")


def coded(values) -> tuple[np.ndarray, list[str]]:
    """A column of few distinct values as codes into their texts (the texts sorted)."""
    values = np.asarray(values)
    try:
        distinct, codes = np.unique(values, return_inverse=True)
    except TypeError:  # values of mixed types: compare them as text
        distinct, codes = np.unique(values.astype(str), return_inverse=True)
    return codes.reshape(-1), [str(v) for v in distinct]


def _number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        return math.nan


@dataclass
class Column:
    """One column of the Cases table: numbers (``int``, ``float``) or ``text``, a text column
    held as ``values`` coding into ``labels``."""

    name: str
    kind: str
    values: np.ndarray
    labels: list[str] | None = None

    def text(self, row: int) -> str:
        v = self.values[row]
        if self.kind == "text":
            return self.labels[v]
        if self.kind == "float":
            return "missing" if math.isnan(v) else f"{v:.4g}"
        return str(v)

    def numbers(self) -> np.ndarray:
        """The values as numbers, for a condition (a text that is no number is NaN)."""
        if self.kind == "text":
            return np.array([_number(t) for t in self.labels], dtype=np.float64)[self.values]
        return self.values.astype(np.float64, copy=False)

    def sort_key(self) -> np.ndarray:
        """Numbers that sort as the column does: missing values first, texts by text."""
        if self.kind == "text":
            rank = np.empty(len(self.labels), dtype=np.float64)
            rank[sorted(range(len(self.labels)), key=self.labels.__getitem__)] = \
                np.arange(len(self.labels))
            return rank[self.values]
        v = self.values.astype(np.float64)
        return np.where(np.isnan(v), -np.inf, v)


def category_column(forest, j: int, name: str, codes: np.ndarray) -> Column:
    """A categorical feature's column: its category names (one text per code, no per-row
    Python), "missing" for an empty cell and "other" for a code the model does not name."""
    names = list(forest.categories[j])
    k = len(names)
    valid = ~np.isnan(codes) & (codes >= 0) & (codes < k)
    values = np.where(np.isnan(codes), k, k + 1).astype(np.int64)
    values[valid] = codes[valid].astype(np.int64)
    return Column(name, "text", values, names + ["missing", "other"])


# ---------------------------------------------------------------------------- contributions
@dataclass
class RowContributions:
    """One row's exact contributions (Shapley values, :mod:`grovewise.analysis.contributions`):
    ``values`` per feature and output, the ``base`` value per output, what the outputs are
    (``output``: probability or margin) and the seconds it took (None: from the cases step)."""

    values: np.ndarray  # (n_features, n_outputs)
    base: np.ndarray  # (n_outputs,)
    output: str
    output_names: list[str]
    seconds: float | None = None

    @property
    def explained(self) -> np.ndarray:
        """The output explained: ``base`` plus every contribution."""
        return self.base + self.values.sum(axis=0)


def explain_row(forest, x: np.ndarray) -> RowContributions:
    """The contributions of row ``x``, timed (one thread: one row gains nothing from more)."""
    start = time.perf_counter()
    c = contributions(forest, np.asarray(x, dtype=np.float64)[None, :], jobs=1)
    return RowContributions(c.values[0], c.base, c.output, list(c.output_names),
                            time.perf_counter() - start)


def explained_output(rc: RowContributions, ensemble_class: int) -> tuple[int, int]:
    """(column, sign): the output that reads the ensemble's class, and +1 when a positive
    contribution pushes the row towards that class (-1: a binary margin and the first class)."""
    if rc.values.shape[1] == 1:  # the margin of the second class, before the logistic
        return 0, (1 if ensemble_class == 1 else -1)
    return int(ensemble_class), 1


def _bar(width: int, colour: str) -> str:
    return f"<span style='background:{colour};'>{'&nbsp;' * width}</span>" if width else ""


def contributions_html(forest, x: np.ndarray, rc: RowContributions, ensemble_class: int,
                       surrogate_class: int, shown: int = CONTRIBUTIONS_SHOWN) -> str:
    """What drives the ensemble on one row, as rich text: the base value, the ``shown``
    largest contributions (signed, each with the row's value) and the rest summed, to the
    output explained; for a row where the surrogate disagrees, first in words what pushes
    the ensemble towards its own class."""
    cls = [str(c) for c in forest.classes_]
    names = list(forest.feature_names)
    e = int(ensemble_class)
    col, sign = explained_output(rc, e)
    v = rc.values[:, col]
    name = rc.output_names[col]
    prob = rc.output == OUTPUT_PROBABILITY
    what = html.escape(f"P({name})" if prob else name)
    out = []
    if int(surrogate_class) != e:
        def listed(js) -> str:
            return ", ".join(f"<b>{html.escape(names[j])}</b> = "
                             f"{html.escape(value_text(forest, j, float(x[j])))} ({v[j]:+.4f})"
                             for j in js)
        toward = [j for j in np.argsort(-sign * v, kind="stable") if sign * v[j] > 0][:3]
        away = [j for j in np.argsort(sign * v, kind="stable") if sign * v[j] < 0][:3]
        parts = [f"towards {html.escape(cls[e])}, {listed(toward)}" if toward else
                 f"no feature pushes towards {html.escape(cls[e])}"]
        if away:
            parts.append(f"away from it, {listed(away)}")
        out.append(f"<p><span style='color:{theme.BAD}'><b>The surrogate says "
                   f"{html.escape(cls[int(surrogate_class)])}, the ensemble "
                   f"{html.escape(cls[e])}.</b></span> What drives the ensemble here: "
                   f"{'; '.join(parts)}. From the base value {rc.base[col]:.4f} they end at "
                   f"{what} = {float(rc.explained[col]):.4f}.</p>")
    if prob:
        explains = (f"{what}, the ensemble's probability of its class {html.escape(cls[e])}, "
                    "from the base value (its average over the trees' training data):")
    else:
        explains = (f"{what}, log-odds before the "
                    f"{'logistic' if rc.values.shape[1] == 1 else 'softmax'} (the ensemble "
                    f"says {html.escape(cls[e])} here: {'positive' if sign > 0 else 'negative'}"
                    " contributions push towards it), from the base value (the starting score "
                    "plus the trees' average margin over their training data):")
    out.append(f"<p>{explains}</p>")
    order = np.argsort(-np.abs(v), kind="stable")[:shown]
    top = float(np.abs(v[order]).max()) if order.size else 0.0
    out.append("<table cellspacing='0' cellpadding='2'>"
               f"<tr style='color:{theme.MUTED}'><td>feature</td><td align='right'>value</td>"
               "<td align='right'>contribution</td><td colspan='3'></td></tr>"
               f"<tr><td colspan='2'>base value</td><td align='right'>{rc.base[col]:.4f}</td>"
               "<td></td><td></td><td></td></tr>")
    for j in order:
        c = float(v[j])
        width = int(round(BAR_CELLS * abs(c) / top)) if top > 0 else 0
        width = max(width, 1) if c != 0 else 0
        colour = theme.ACCENT if sign * c > 0 else theme.GREEDY
        left, right = (_bar(width, colour), "") if c < 0 else ("", _bar(width, colour))
        out.append(f"<tr><td nowrap>{html.escape(names[j])}</td>"
                   f"<td nowrap align='right'>{html.escape(value_text(forest, j, float(x[j])))}"
                   f"</td><td nowrap align='right'>{c:+.4f}</td>"
                   f"<td nowrap align='right'>{left}</td><td bgcolor='{theme.RULE}'></td>"
                   f"<td nowrap>{right}</td></tr>")
    rest = np.setdiff1d(np.arange(v.size), order)
    if rest.size:
        out.append(f"<tr style='color:{theme.MUTED}'><td colspan='2'>{rest.size} other "
                   f"feature{'s' if rest.size > 1 else ''}</td><td align='right'>"
                   f"{float(v[rest].sum()):+.4f}</td><td></td><td></td><td></td></tr>")
    out.append(f"<tr><td colspan='2'><b>= {what}</b> for this row</td><td align='right'><b>"
               f"{float(rc.explained[col]):.4f}</b></td><td></td><td></td><td></td></tr>"
               "</table>")
    return "".join(out)


class CasesModel(QAbstractTableModel):
    """The Cases result as a table: identifiers, answers, then the feature values.

    Columns stay numpy arrays (the answers as class codes); a cell's text is made only when
    the view asks for it, so a table of 200,000 rows loads as fast as one of 200.
    """

    def __init__(self) -> None:
        super().__init__()
        self.cols: list[Column] = []
        self.headers: list[str] = []
        self.kinds: list[str] = []  # "int", "float", "text"
        self.n = 0
        self.X: np.ndarray | None = None  # the feature values of every row, in table order
        self._keys: dict[int, np.ndarray] = {}

    def load(self, review) -> None:
        self.beginResetModel()
        c = review.cases
        X = review.case_rows()
        cls = [str(k) for k in review.forest.classes_]
        y = review.data.y
        if y is not None and review.holdout_data is not None and review.holdout_data.y is not None:
            y = np.concatenate([y, review.holdout_data.y])
        elif y is not None and review.holdout_data is not None:
            y = None
        self.n = int(c.ensemble.shape[0])
        parts = [PARTS.get(k, "?") for k in range(int(c.split.max(initial=0)) + 1)]
        # rows numbered from 1 in the order of the data file, as in the report and messages
        cols = [Column("row", "int", np.arange(1, self.n + 1)),
                Column("part", "text", c.split, parts),
                Column("ensemble", "text", c.ensemble, cls)]
        cols += [Column(f"P({name})", "float", c.proba[:, k]) for k, name in enumerate(cls)]
        cols += [Column("surrogate", "text", c.surrogate, cls),
                 Column("agree", "text", (c.surrogate != c.ensemble).astype(np.int8),
                        ["yes", "NO"]),
                 Column("leaf", "int", c.surrogate_leaf),
                 Column("greedy", "text", c.greedy, cls)]
        if y is not None:
            cols.append(Column("label", "text", *coded(y)))
        cols += [category_column(review.forest, j, name, X[:, j])
                 if review.forest.is_categorical(j) else Column(name, "float", X[:, j])
                 for j, name in enumerate(review.data.feature_names)]
        self.cols, self.X, self._keys = cols, X, {}
        self.headers = [col.name for col in cols]
        self.kinds = [col.kind for col in cols]
        self.endResetModel()

    def clear(self) -> None:
        self.beginResetModel()
        self.cols, self.headers, self.kinds, self.n, self.X, self._keys = [], [], [], 0, None, {}
        self.endResetModel()

    def rowCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else self.n

    def columnCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else len(self.headers)

    def column(self, name: str) -> int:
        return self.headers.index(name) if name in self.headers else -1

    def text(self, row: int, col: int) -> str:
        return self.cols[col].text(row)

    def sort_key(self, col: int) -> np.ndarray:
        if col not in self._keys:
            self._keys[col] = self.cols[col].sort_key()
        return self._keys[col]

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        return self.cell(index.row(), index.column(), role)

    def cell(self, r: int, c: int, role):
        col = self.cols[c]
        if role == Qt.ItemDataRole.DisplayRole:
            return col.text(r)
        if role == SORT_ROLE:
            return float(self.sort_key(c)[r])
        if role == Qt.ItemDataRole.TextAlignmentRole and col.kind != "text":
            return int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        if role == Qt.ItemDataRole.ForegroundRole and col.name == "agree" and col.values[r]:
            return theme.qcolor(theme.BAD)
        return None

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if role == Qt.ItemDataRole.DisplayRole and orientation == Qt.Orientation.Horizontal:
            return self.headers[section] if section < len(self.headers) else None
        return None


_NUMBER_CHARS = set("0123456789.-+einf")


def text_matches(cols: list[Column], needle: str, stale=None) -> np.ndarray | None:
    """Rows with ``needle`` in the text of any cell, ignoring case, as a boolean mask (None
    when ``stale()`` says the search was overtaken).

    Text columns are matched through their few labels; number columns only when the needle
    could be part of a number, by writing each distinct value as the table shows it: the
    one search that is a Python call per value, so the page runs it in a worker.
    """
    needle = needle.lower()
    n = cols[0].values.shape[0] if cols else 0
    mask = np.zeros(n, dtype=bool)
    numeric = set(needle) <= _NUMBER_CHARS
    for col in cols:
        if stale is not None and stale():
            return None
        if col.kind == "text":
            hits = [k for k, label in enumerate(col.labels) if needle in label.lower()]
            if hits:
                mask |= np.isin(col.values, hits)
            continue
        if col.kind == "float" and needle in "missing":
            mask |= np.isnan(col.values)
        if not numeric:
            continue
        distinct, codes = np.unique(col.values, return_inverse=True)
        texts = [_cell_text(col.kind, v) for v in distinct.tolist()]
        hit = np.fromiter((needle in t for t in texts), dtype=bool, count=len(texts))
        if col.kind == "float":
            hit &= ~np.isnan(distinct)  # written "missing", matched above
        mask |= hit[codes.reshape(-1)]
    return mask


def _cell_text(kind: str, v) -> str:
    return f"{v:.4g}" if kind == "float" else str(v)


class CasesFilter(QAbstractTableModel):
    """The rows of a :class:`CasesModel` the reviewer asked for, in the chosen order.

    Rows by part, by agreement and by class; then by a search: a row number, a condition on a
    column (``age_years > 70``) or any text in the row. The rows shown are a numpy array of
    source rows (``rows``), chosen with masks and ordered with a stable sort, so filtering
    and sorting take milliseconds on any length of table; only a text search runs in a
    worker (:func:`text_matches`; :meth:`set_text_mask` brings its answer).
    """

    MODES = ("all", "disagree", "fit", "held", "ens", "sur")

    def __init__(self) -> None:
        super().__init__()
        self._src: CasesModel | None = None
        self.mode = "all"
        self.value = None
        self.condition = None
        self.text = ""  # the text searched for ("": none)
        self._text_mask: tuple[str, np.ndarray] | None = None  # (text, its rows)
        self.sort_column = 0
        self.sort_order = Qt.SortOrder.AscendingOrder
        self.rows = np.zeros(0, dtype=np.int64)
        self.pos = np.zeros(0, dtype=np.int64)  # source row -> row here (-1: hidden)

    # ------------------------------------------------------------------ source
    def setSourceModel(self, model: CasesModel) -> None:
        self.beginResetModel()
        self._src = model
        model.modelAboutToBeReset.connect(self.beginResetModel)
        model.modelReset.connect(self._source_reset)
        self._choose()
        self.endResetModel()

    def sourceModel(self) -> CasesModel | None:
        return self._src

    def _source_reset(self) -> None:
        self._text_mask = None
        self._choose()
        self.endResetModel()

    def mapToSource(self, index) -> QModelIndex:
        if not index.isValid() or not 0 <= index.row() < self.rows.size:
            return QModelIndex()
        return self._src.index(int(self.rows[index.row()]), index.column())

    def mapFromSource(self, index) -> QModelIndex:
        if not index.isValid() or not 0 <= index.row() < self.pos.size:
            return QModelIndex()
        r = int(self.pos[index.row()])
        return self.index(r, index.column()) if r >= 0 else QModelIndex()

    # ------------------------------------------------------------------ the table
    def rowCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else int(self.rows.size)

    def columnCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() or self._src is None else self._src.columnCount()

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid() or not 0 <= index.row() < self.rows.size:
            return None
        return self._src.cell(int(self.rows[index.row()]), index.column(), role)

    def cell_text(self, row: int, col: int) -> str:
        """The text of the cell in ``row`` (counted here) and ``col``."""
        return self._src.text(int(self.rows[row]), col)

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        return None if self._src is None else self._src.headerData(section, orientation, role)

    def sort(self, column: int, order=Qt.SortOrder.AscendingOrder) -> None:
        if (int(column), order) == (self.sort_column, self.sort_order):
            return  # the view asks twice for one click; the rows are in this order already
        self.sort_column, self.sort_order = int(column), order
        self._relayout()

    # ------------------------------------------------------------------ criteria
    def set_mode(self, mode: str, value=None) -> None:
        self.mode, self.value = mode, value
        self._relayout()

    def set_search(self, text: str) -> bool:
        """Search for ``text``; True when it is a text search, whose rows come later through
        :meth:`set_text_mask` (the rows shown stay as they are until then)."""
        m = _CONDITION.match(text)
        src = self._src
        condition, fixed = None, text.strip()
        if m and src is not None and src.column(m.group(1)) >= 0:
            condition, fixed = (src.column(m.group(1)), m.group(2), float(m.group(3))), ""
        elif text.strip().isdigit():
            condition, fixed = (0, "==", float(text.strip())), ""
        self.condition, self.text = condition, fixed
        if self.searching:
            return True
        self._relayout()
        return False

    @property
    def searching(self) -> bool:
        """Whether the rows of the text searched for are still to come."""
        return bool(self.text) and (self._text_mask is None or self._text_mask[0] != self.text)

    def set_text_mask(self, text: str, mask: np.ndarray) -> None:
        """The rows holding ``text`` (from :func:`text_matches`)."""
        self._text_mask = (text, mask)
        if text == self.text:
            self._relayout()

    def chosen(self) -> np.ndarray:
        """Source rows that pass the criteria, in source order."""
        m = self._src
        if m is None or m.n == 0:
            return np.zeros(0, dtype=np.int64)
        keep = np.ones(m.n, dtype=bool)
        if self.mode == "disagree":
            keep &= m.cols[m.column("agree")].values == 1
        elif self.mode in ("fit", "held"):
            fit = m.cols[m.column("part")].values == 0
            keep &= fit if self.mode == "fit" else ~fit
        elif self.mode in ("ens", "sur"):
            col = m.cols[m.column("ensemble" if self.mode == "ens" else "surrogate")]
            keep &= col.values == (col.labels.index(self.value)
                                   if self.value in col.labels else -1)
        if self.condition is not None:
            c, op, ref = self.condition
            v = m.cols[c].numbers()
            with np.errstate(invalid="ignore"):
                keep &= {"<": v < ref, "<=": v <= ref, ">": v > ref, ">=": v >= ref,
                         "==": v == ref, "=": v == ref, "!=": v != ref}[op] & ~np.isnan(v)
        if self.text and self._text_mask is not None and self._text_mask[0] == self.text:
            keep &= self._text_mask[1]
        return np.flatnonzero(keep)

    def _choose(self) -> None:
        rows = self.chosen()
        if rows.size and self._src is not None and self.sort_column < self._src.columnCount():
            key = self._src.sort_key(self.sort_column)[rows]
            if self.sort_order == Qt.SortOrder.DescendingOrder:
                key = -key
            rows = rows[np.argsort(key, kind="stable")]
        self.rows = rows
        self.pos = np.full(self._src.n if self._src is not None else 0, -1, dtype=np.int64)
        self.pos[rows] = np.arange(rows.size)

    def _relayout(self) -> None:
        """Choose the rows again; the selection follows its rows (or goes if they do)."""
        if self.searching:
            return
        self.layoutAboutToBeChanged.emit()
        before = self.persistentIndexList()
        sources = [int(self.rows[i.row()]) if 0 <= i.row() < self.rows.size else -1
                   for i in before]
        self._choose()
        after = [self.index(int(self.pos[s]), i.column()) if s >= 0 and self.pos[s] >= 0
                 else QModelIndex() for s, i in zip(sources, before)]
        self.changePersistentIndexList(before, after)
        self.layoutChanged.emit()


class CasesPage(Page):
    key = "cases"
    title = "Cases"
    question = ("For one record: what does the ensemble say, which rules does the surrogate "
                "apply, and where do the two disagree?")
    step = "cases"

    def __init__(self, window) -> None:
        super().__init__(window)
        self.message = wrapped("", muted=True)
        self.body_layout.addWidget(self.message)
        bar = QHBoxLayout()
        self.search = QLineEdit()
        self.search.setPlaceholderText("Search: a row number, a condition such as age_years > 70, "
                                       "or any text   (Ctrl+F)")
        self.search.setClearButtonEnabled(True)
        self.search.textChanged.connect(self._search)
        self.filter = QComboBox()
        self.filter.currentIndexChanged.connect(self._filter)
        self.count = QLabel("")
        self.count.setObjectName("muted")
        bar.addWidget(self.search, 2)
        bar.addWidget(self.filter, 1)
        bar.addWidget(self.count)
        self.body_layout.addLayout(bar)
        QShortcut(QKeySequence.StandardKey.Find, self, activated=self.search.setFocus)
        self.model = CasesModel()
        self.searcher = LatestCall(self, exclusive=False)  # a text search over every cell
        self.proxy = CasesFilter()
        self.proxy.setSourceModel(self.model)
        self.table = QTableView()
        self.table.setModel(self.proxy)
        self.table.setSortingEnabled(True)
        self.table.sortByColumn(0, Qt.SortOrder.AscendingOrder)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Fixed)
        self.table.verticalHeader().setDefaultSectionSize(22)
        self.table.setMinimumHeight(340)
        self.table.selectionModel().currentRowChanged.connect(self._row_changed)
        self.detail = wrapped("")
        self.detail.setTextFormat(Qt.TextFormat.RichText)
        self.detail.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        detail_card = Card("The chosen row")
        detail_card.body.addWidget(self.detail)
        detail_card.body.addStretch(1)
        detail_scroll = QScrollArea()
        detail_scroll.setWidgetResizable(True)
        detail_scroll.setFrameShape(QFrame.Shape.NoFrame)
        detail_scroll.setWidget(detail_card)
        detail_scroll.setMinimumWidth(300)
        # a text browser, not a label: it lays its text out once per change (a label in a
        # scroll area does so several times, a quarter of the time of choosing a row)
        drive_card = Card("What drives the ensemble", note="Exact Shapley values (TreeSHAP) "
                          "of the ensemble's own output. Teal: towards the ensemble's class; "
                          "grey: away from it.")
        self.drive = QTextBrowser()
        self.drive.setFrameShape(QFrame.Shape.NoFrame)
        self.drive.setOpenLinks(False)
        self.drive.document().setDocumentMargin(0)
        drive_card.body.addWidget(self.drive)
        lay = drive_card.layout()  # the browser, not the card's closing stretch, takes the room
        lay.setStretch(lay.count() - 2, 1)
        lay.setStretch(lay.count() - 1, 0)
        drive_card.setMinimumWidth(320)  # its table of numbers and bars fits
        self.drive_html = ""  # what the browser shows, as set
        self.split = QSplitter(Qt.Orientation.Horizontal)
        self.split.addWidget(self.table)
        self.split.addWidget(detail_scroll)
        self.split.addWidget(drive_card)
        for i, stretch in enumerate((3, 2, 2)):
            self.split.setStretchFactor(i, stretch)
        self.split.setSizes([480, 330, 400])
        self.split.setMinimumHeight(480)
        self.body_layout.addWidget(self.split, 1)
        self.dis_card = Card("Disagreements", note="Rows where the surrogate's class differs "
                             "from the ensemble's; select one to show it above.")
        self.dis = QListWidget()
        self.dis.setMinimumHeight(150)
        self.dis.currentItemChanged.connect(self._dis_chosen)
        self.dis_card.body.addWidget(self.dis)
        self.body_layout.addWidget(self.dis_card)
        self._shown_for = None
        self.selected_row: int | None = None
        # a row's contributions: worked out at once when that is quick (as last measured),
        # otherwise in a worker; kept for the rows chosen last
        self.explainer = LatestCall(self, exclusive=False)
        self._explained: OrderedDict[int, RowContributions] = OrderedDict()
        self._explain_inline = False
        self.shown_contributions: tuple[int, RowContributions] | None = None

    # ------------------------------------------------------------------ filling
    def refresh(self) -> None:
        r = self.review
        c = r.cases if r is not None else None
        for w in (self.split, self.dis_card, self.search, self.filter):
            w.setVisible(c is not None)
        if r is None:
            self.message.setText("Open a model and its data first.")
            self.model.clear()
            self._shown_for = None
            self._forget_contributions()
            return
        if c is None:
            self.message.setText("Cases need the surrogate: solve it on the Surrogate page, then "
                                 "run cases (Ctrl+R here)." if r.surrogate is None else
                                 "Cases have not run yet: press Run cases (Ctrl+R).")
            self.model.clear()
            self._shown_for = None
            self._forget_contributions()
            return
        if self._shown_for is c:
            return
        self._shown_for = c
        self._forget_contributions(getattr(c, "effects", None))
        self.message.setText(f"{c.ensemble.size:,} rows; the surrogate agrees with the ensemble "
                             f"on {c.agreement:.1%} of them ({c.disagreements.size:,} "
                             "disagreements).")
        self.searcher.drop()
        self.model.load(r)
        self._fill_filter(list(r.forest.classes_))
        self._fill_disagreements()
        self._fit_columns()
        self._search(self.search.text())  # the search typed applies to the new rows too

    def _fit_columns(self) -> None:
        """Each column as wide as its header or its widest text in the first rows, as
        ``resizeColumnsToContents`` makes it, asking the delegate about one cell per column
        (Qt's own way asks for every role of every sampled cell: a quarter second here)."""
        view, model = self.table, self.proxy
        fm = view.fontMetrics()
        option = QStyleOptionViewItem()
        option.font = view.font()
        option.fontMetrics = fm
        option.widget = view
        grid = 1 if view.showGrid() else 0
        rows = min(model.rowCount(), FIT_ROWS)
        for c in range(model.columnCount()):
            width = view.horizontalHeader().sectionSizeHint(c)
            if rows:
                widest = max(range(rows), key=lambda r: fm.horizontalAdvance(model.cell_text(r, c)))
                cell = view.itemDelegate().sizeHint(option, model.index(widest, c)).width()
                width = max(width, cell + grid)
            view.setColumnWidth(c, width)

    def _fill_filter(self, classes) -> None:
        self.filter.blockSignals(True)
        self.filter.clear()
        self.filter.addItem("every row", ("all", None))
        self.filter.addItem("disagreements only", ("disagree", None))
        self.filter.addItem("rows the surrogate was fit on", ("fit", None))
        self.filter.addItem("held-out rows", ("held", None))
        for k in classes:
            self.filter.addItem(f"ensemble says {k}", ("ens", str(k)))
        for k in classes:
            self.filter.addItem(f"surrogate says {k}", ("sur", str(k)))
        self.filter.blockSignals(False)
        self.proxy.set_mode("all")

    def _fill_disagreements(self) -> None:
        r, c = self.review, self.review.cases
        cls = list(r.forest.classes_)
        self.dis.clear()
        for i in c.disagreements[:DISAGREEMENTS_SHOWN]:
            i = int(i)
            e, s = int(c.ensemble[i]), int(c.surrogate[i])
            it = QListWidgetItem(f"row {i + 1} ({PARTS.get(int(c.split[i]), '')}): ensemble "
                                 f"{cls[e]} with P = {c.proba[i, e]:.3f}; surrogate {cls[s]} "
                                 f"(leaf {int(c.surrogate_leaf[i])})")
            it.setData(Qt.ItemDataRole.UserRole, i)
            self.dis.addItem(it)
        if c.disagreements.size > DISAGREEMENTS_SHOWN:
            self.dis.addItem(f"… {c.disagreements.size - DISAGREEMENTS_SHOWN:,} more: filter the "
                             "table by 'disagreements only'")

    def _search(self, text: str) -> None:
        if self.proxy.set_search(text):
            needle = self.proxy.text
            self.searcher.request(text_matches, self.model.cols, needle, stale_check=True,
                                  done=lambda mask: self._found(needle, mask))
        else:
            self.searcher.drop()
        self._update_count()

    def _found(self, needle: str, mask) -> None:
        if mask is not None:
            self.proxy.set_text_mask(needle, mask)
            self._update_count()

    def _filter(self, _index: int) -> None:
        mode, value = self.filter.currentData() or ("all", None)
        self.proxy.set_mode(mode, value)
        self._update_count()

    def _update_count(self) -> None:
        self.count.setText(f"searching {self.model.rowCount():,} rows…" if self.proxy.searching
                           else f"{self.proxy.rowCount():,} of {self.model.rowCount():,} rows")

    # ------------------------------------------------------------------ one row
    def select_row(self, row: int) -> bool:
        """Show source row ``row`` (clearing the search and filter if they hide it)."""
        src = self.model.index(int(row), 0)
        idx = self.proxy.mapFromSource(src)
        if not idx.isValid():
            self.search.clear()
            self.filter.setCurrentIndex(0)
            idx = self.proxy.mapFromSource(src)
        if not idx.isValid():
            return False
        self.table.setCurrentIndex(idx)
        self.table.scrollTo(idx)
        return True

    def _dis_chosen(self, item, _prev=None) -> None:
        if item is not None and item.data(Qt.ItemDataRole.UserRole) is not None:
            self.select_row(int(item.data(Qt.ItemDataRole.UserRole)))

    def _row_changed(self, current, _previous=None) -> None:
        if not current.isValid():
            return
        row = self.proxy.mapToSource(current).row()
        self.selected_row = row
        self.detail.setText(self.describe(row))
        self._show_contributions(row)

    # ------------------------------------------------------------------ contributions
    def _forget_contributions(self, effects=None) -> None:
        """New cases (or none): drop the rows explained so far; keep those the cases step
        explained already (its disagreement rows)."""
        self.explainer.drop()
        self._explained.clear()
        self._explain_inline = False
        self.shown_contributions = None
        self._set_drive("")
        if effects is not None:
            for k, row in enumerate(np.asarray(effects.case_rows).tolist()):
                self._explained[int(row)] = RowContributions(
                    np.asarray(effects.case_values[k]), np.asarray(effects.case_base),
                    effects.output, list(effects.output_names))

    def _show_contributions(self, row: int) -> None:
        rc = self._explained.get(row)
        if rc is not None:
            self._explained.move_to_end(row)
        elif self._explain_inline:
            rc = self._keep(row, explain_row(self.review.forest, self.model.X[row]))
        if rc is not None:
            self.explainer.drop()  # a row asked for earlier must not replace this one
            self._render_contributions(row, rc)
            return
        self._set_drive(f"<p style='color:{theme.MUTED}'>Working out the contributions of "
                        f"row {row + 1}…</p>")
        self.explainer.request(explain_row, self.review.forest, self.model.X[row].copy(),
                               done=lambda rc_, r=row: self._explained_row(r, rc_),
                               failed=self._not_explained)

    def _keep(self, row: int, rc: RowContributions) -> RowContributions:
        if rc.seconds is not None:  # the next row is worked out at once if this one was quick
            self._explain_inline = rc.seconds < INLINE_LIMIT_S
        self._explained[row] = rc
        while len(self._explained) > CONTRIBUTIONS_KEPT:
            self._explained.popitem(last=False)
        return rc

    def _explained_row(self, row: int, rc: RowContributions) -> None:
        self._keep(row, rc)
        if row == self.selected_row:
            self._render_contributions(row, rc)

    def _not_explained(self, exc) -> None:
        self._set_drive("The contributions of this row could not be worked out.")
        self.window_.show_problem(exc, "working out the row's contributions")

    def _render_contributions(self, row: int, rc: RowContributions) -> None:
        c = self.review.cases
        self._set_drive(contributions_html(self.review.forest, self.model.X[row], rc,
                                           int(c.ensemble[row]), int(c.surrogate[row])))
        self.shown_contributions = (row, rc)

    def _set_drive(self, text: str) -> None:
        self.drive_html = text
        self.drive.setHtml(text)

    def describe(self, row: int) -> str:
        """The chosen row as rich text: probabilities, the path and its terms, the leaf."""
        r = self.review
        c, res = r.cases, r.surrogate
        est = res.surrogate
        cls = list(r.forest.classes_)
        x = self.model.X[row]
        e = int(c.ensemble[row])
        out = [f"<h3 style='margin:0'>Row {row + 1} <span style='color:{theme.MUTED};"
               f"font-weight:normal'>({PARTS.get(int(c.split[row]), '')})</span></h3>",
               "<p><b>The ensemble</b></p><table cellspacing='0' cellpadding='2'>"]
        for k, name in enumerate(cls):
            p = float(c.proba[row, k])
            bar = f"<span style='background:{theme.ACCENT if k == e else theme.GREEDY};'>" \
                  f"{'&nbsp;' * max(1, int(round(p * 30)))}</span>"
            out.append(f"<tr><td>P({html.escape(str(name))})</td><td align='right'>{p:.3f}</td>"
                       f"<td>{bar}</td></tr>")
        out.append(f"</table><p>class <b>{html.escape(str(cls[e]))}</b></p>")
        fill = getattr(c, "fill_values", None)
        steps, leaf = surrogate_path(est, x, fill)
        out.append("<p><b>The surrogate's path</b> (yes: the rule holds, the row goes left)</p>")
        for i, st in enumerate(steps, 1):
            if st.holds is None:
                out.append(f"<p style='color:{theme.MUTED}'>{i}. node {st.node}: {st.rule}</p>")
                continue
            out.append(f"<p style='margin-bottom:2px'>{i}. <code>{html.escape(st.rule)}</code></p>"
                       "<table cellspacing='0' cellpadding='3' style='margin-left:12px'>"
                       f"<tr style='color:{theme.MUTED}'><td>coefficient</td><td>feature</td>"
                       "<td align='right'>value</td><td align='right'>term</td></tr>")
            for t in st.terms:
                val = "missing" if math.isnan(t.value) else f"{t.value:.5g}"
                if t.text:  # a category: its name, and the rank the cut compares
                    val = f"{html.escape(t.text)} (rank {t.value:g})"
                if t.filled:
                    val = f"missing → {val}"
                out.append(f"<tr><td nowrap>{t.coef:.4g}</td><td nowrap>{html.escape(t.feature)}"
                           f"</td><td nowrap align='right'>{val}</td><td nowrap align='right'>"
                           f"{t.product:.5g}</td></tr>")
            total = "missing" if math.isnan(st.total) else f"{st.total:.5g}"
            verdict = "yes: left" if st.holds else "no: right"
            test = html.escape(f"sum {total} {st.op} {st.threshold:.6g} ?")
            out.append(f"<tr><td colspan='3' nowrap>{test}</td>"
                       f"<td nowrap align='right'><b>{verdict}</b></td></tr></table>")
            if st.filled:
                used = ("the most frequent category" if any(t.text for t in st.terms)
                        else "the median")
                out.append(f"<p style='color:{theme.CAUTION}'>A value here is missing: the "
                           f"surrogate uses {used} of the rows it was fit on.</p>")
            elif st.missing:
                out.append(f"<p style='color:{theme.CAUTION}'>A value here is missing; the row "
                           "goes where the cases step sent it.</p>")
        s = int(c.surrogate[row])
        computed_leaf = int(c.surrogate_leaf[row])
        fid = est.leaf_fidelity_[computed_leaf]
        out.append(f"<p>Leaf {computed_leaf}: class <b>{html.escape(str(cls[s]))}</b>, "
                   f"{int(est.leaf_rows_[computed_leaf]):,} training rows"
                   + ("" if np.isnan(fid) else f", weighted fidelity {fid:.1%} on its "
                                               "training rows") + "</p>")
        if leaf != computed_leaf and not any(st.missing for st in steps):
            out.append(f"<p style='color:{theme.BAD}'>The rules as written lead to leaf {leaf}, "
                       f"the estimator to leaf {computed_leaf}: the row sits on a cut point "
                       "(rounding).</p>")
        agree = "agrees with" if s == e else "<b style='color:%s'>disagrees with</b>" % theme.BAD
        g = int(c.greedy[row])
        out.append(f"<p>The surrogate {agree} the ensemble. The greedy tree says "
                   f"{html.escape(str(cls[g]))}.</p>")
        out.extend(self._groups_of(row))
        return "".join(out)

    def _groups_of(self, row: int) -> list[str]:
        """The row's group of each protected feature and group column, with the surrogate's
        fidelity in that group (the Surrogate page's "Faithfulness per group")."""
        r = self.review
        res = r.surrogate
        names = list(r.forest.feature_names)
        categories = getattr(r.forest, "categories", None) or {}
        part = "holdout" if res.holdout_rows.size else "training"
        lines = []
        for gf in getattr(res, "group_fidelity", None) or []:
            if gf.name in names:
                j = names.index(gf.name)
                cats = categories.get(j)
                group = gf.group_of(self.model.X[row, j],
                                    None if cats is None else dict(enumerate(cats)))
            else:  # a group column: the data's rows, then the holdout file's
                values, k = r.data.group_values.get(gf.name), row
                if values is not None and k >= len(values) and r.holdout_data is not None:
                    values, k = r.holdout_data.group_values.get(gf.name), k - len(values)
                group = gf.group_of(values[k]) if values is not None and k < len(values) \
                    else None
            if group is None or "surrogate" not in group.fidelity:
                continue
            low, high = group.interval["surrogate"]
            small = (f" <span style='color:{theme.CAUTION}'>too small to judge</span>"
                     if group.too_small else "")
            lines.append(f"<p style='margin:2px 0 2px 12px'>{html.escape(gf.name)}: "
                         f"<b>{html.escape(group.label)}</b>, fidelity "
                         f"{group.fidelity['surrogate']:.1%} ({low:.1%} to {high:.1%}) on "
                         f"{group.rows:,} rows{small}</p>")
        if not lines:
            return []
        return [f"<p style='margin-bottom:2px'><b>Its groups</b> (the surrogate's fidelity on "
                f"each group's {part} rows, with its 95% interval)</p>", *lines]

    def prepare_capture(self) -> None:
        c = self.review.cases if self.review is not None else None
        if c is not None and self.selected_row is None:
            self.select_row(int(c.disagreements[0]) if c.disagreements.size else 0)

    def capture_widgets(self):
        return [self.header, self.body]

    def status_note(self) -> str:
        c = self.review.cases if self.review is not None else None
        return "" if c is None else f"{c.agreement:.1%} agree · {c.disagreements.size:,} differ"
