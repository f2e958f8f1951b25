"""Cases: one record at a time. A searchable, filterable table of every row; for the chosen
row the ensemble's probabilities and the surrogate's path with each rule's terms evaluated;
and the list of rows where the two disagree."""

from __future__ import annotations

import html
import math
import re

import numpy as np
from PySide6.QtCore import QAbstractTableModel, QModelIndex, QSortFilterProxyModel, Qt
from PySide6.QtGui import QKeySequence, QShortcut
from PySide6.QtWidgets import (QAbstractItemView, QComboBox, QFrame, QHBoxLayout, QLabel,
                               QLineEdit, QListWidget, QListWidgetItem, QScrollArea, QSplitter,
                               QTableView)

from .. import theme
from ..paths import surrogate_path
from ..widgets import Card, wrapped
from .base import Page

PARTS = {0: "fit on", 1: "held out", 2: "holdout file"}
SORT_ROLE = Qt.ItemDataRole.UserRole
DISAGREEMENTS_SHOWN = 500
_CONDITION = re.compile(r"^\s*([A-Za-z_][\w.]*)\s*(<=|>=|==|=|<|>|!=)\s*(-?[\d.]+(?:e-?\d+)?)\s*$")


class CasesModel(QAbstractTableModel):
    """The Cases result as a table: identifiers, answers, then the feature values."""

    def __init__(self) -> None:
        super().__init__()
        self.headers: list[str] = []
        self.columns: list[np.ndarray] = []
        self.kinds: list[str] = []  # "int", "float", "text"
        self.n = 0

    def load(self, review) -> None:
        self.beginResetModel()
        c = review.cases
        X = review.case_rows()
        cls = list(review.forest.classes_)
        y = review.data.y
        if y is not None and review.holdout_data is not None and review.holdout_data.y is not None:
            y = np.concatenate([y, review.holdout_data.y])
        elif y is not None and review.holdout_data is not None:
            y = None
        self.n = int(c.ensemble.shape[0])
        cols = [("row", np.arange(self.n), "int"),
                ("part", np.array([PARTS.get(int(s), "?") for s in c.split]), "text"),
                ("ensemble", np.array([str(cls[k]) for k in c.ensemble]), "text")]
        for k, name in enumerate(cls):
            cols.append((f"P({name})", c.proba[:, k], "float"))
        cols += [("surrogate", np.array([str(cls[k]) for k in c.surrogate]), "text"),
                 ("agree", np.where(c.surrogate == c.ensemble, "yes", "NO"), "text"),
                 ("leaf", c.surrogate_leaf, "int"),
                 ("greedy", np.array([str(cls[k]) for k in c.greedy]), "text")]
        if y is not None:
            cols.append(("label", np.array([str(v) for v in y]), "text"))
        for j, name in enumerate(review.data.feature_names):
            cols.append((name, X[:, j], "float"))
        self.headers = [h for h, _, _ in cols]
        self.columns = [v for _, v, _ in cols]
        self.kinds = [k for _, _, k in cols]
        self.endResetModel()

    def clear(self) -> None:
        self.beginResetModel()
        self.headers, self.columns, self.kinds, self.n = [], [], [], 0
        self.endResetModel()

    def rowCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else self.n

    def columnCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else len(self.headers)

    def column(self, name: str) -> int:
        return self.headers.index(name) if name in self.headers else -1

    def text(self, row: int, col: int) -> str:
        v = self.columns[col][row]
        if self.kinds[col] == "float":
            return "missing" if math.isnan(v) else f"{v:.4g}"
        return str(v)

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        if not index.isValid():
            return None
        r, c = index.row(), index.column()
        if role == Qt.ItemDataRole.DisplayRole:
            return self.text(r, c)
        if role == SORT_ROLE:
            v = self.columns[c][r]
            if self.kinds[c] == "float":
                return -math.inf if math.isnan(v) else float(v)
            return int(v) if self.kinds[c] == "int" else str(v)
        if role == Qt.ItemDataRole.TextAlignmentRole and self.kinds[c] != "text":
            return int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        if role == Qt.ItemDataRole.ForegroundRole and self.headers[c] == "agree" \
                and self.columns[c][r] == "NO":
            return theme.qcolor(theme.BAD)
        return None

    def headerData(self, section, orientation, role=Qt.ItemDataRole.DisplayRole):
        if role == Qt.ItemDataRole.DisplayRole and orientation == Qt.Orientation.Horizontal:
            return self.headers[section] if section < len(self.headers) else None
        return None


class CasesFilter(QSortFilterProxyModel):
    """Rows by part, by agreement and by class; then by a search: a row number, a condition
    on a column (``age_years > 70``) or any text in the row."""

    MODES = ("all", "disagree", "fit", "held", "ens", "sur")

    def __init__(self) -> None:
        super().__init__()
        self.mode = "all"
        self.value = None
        self.condition = None
        self.setSortRole(SORT_ROLE)
        self.setFilterCaseSensitivity(Qt.CaseSensitivity.CaseInsensitive)
        self.setFilterKeyColumn(-1)

    def _refilter(self, change) -> None:
        """Apply ``change()`` to the criteria and filter again (Qt 6.10's way when it has it)."""
        if hasattr(self, "beginFilterChange"):
            self.beginFilterChange()
            change()
            self.endFilterChange(QSortFilterProxyModel.Direction.Rows)
        else:  # pragma: no cover - Qt before 6.10
            change()
            self.invalidateFilter()

    def set_mode(self, mode: str, value=None) -> None:
        def change() -> None:
            self.mode, self.value = mode, value
        self._refilter(change)

    def set_search(self, text: str) -> None:
        m = _CONDITION.match(text)
        src = self.sourceModel()
        condition, fixed = None, text.strip()
        if m and src is not None and src.column(m.group(1)) >= 0:
            condition, fixed = (src.column(m.group(1)), m.group(2), float(m.group(3))), ""
        elif text.strip().isdigit():
            condition, fixed = (0, "==", float(text.strip())), ""

        def change() -> None:
            self.condition = condition
        self._refilter(change)
        self.setFilterFixedString(fixed)

    def filterAcceptsRow(self, row: int, parent) -> bool:
        m: CasesModel = self.sourceModel()
        if self.mode == "disagree" and m.text(row, m.column("agree")) != "NO":
            return False
        if self.mode == "fit" and m.text(row, m.column("part")) != "fit on":
            return False
        if self.mode == "held" and m.text(row, m.column("part")) == "fit on":
            return False
        if self.mode == "ens" and m.text(row, m.column("ensemble")) != self.value:
            return False
        if self.mode == "sur" and m.text(row, m.column("surrogate")) != self.value:
            return False
        if self.condition is not None:
            col, op, ref = self.condition
            v = m.columns[col][row]
            v = float(v)
            if math.isnan(v):
                return False
            ok = {"<": v < ref, "<=": v <= ref, ">": v > ref, ">=": v >= ref, "==": v == ref,
                  "=": v == ref, "!=": v != ref}[op]
            if not ok:
                return False
        return super().filterAcceptsRow(row, parent)


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
        self.proxy = CasesFilter()
        self.proxy.setSourceModel(self.model)
        self.table = QTableView()
        self.table.setModel(self.proxy)
        self.table.setSortingEnabled(True)
        self.table.sortByColumn(0, Qt.SortOrder.AscendingOrder)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(22)
        self.table.horizontalHeader().setResizeContentsPrecision(60)  # width from 60 rows
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
        detail_scroll.setMinimumWidth(320)
        self.split = QSplitter(Qt.Orientation.Horizontal)
        self.split.addWidget(self.table)
        self.split.addWidget(detail_scroll)
        self.split.setStretchFactor(0, 3)
        self.split.setStretchFactor(1, 2)
        self.split.setSizes([760, 440])
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
            return
        if c is None:
            self.message.setText("Cases need the surrogate: solve it on the Surrogate page, then "
                                 "run cases (Ctrl+R here)." if r.surrogate is None else
                                 "Cases have not run yet: press Run cases (Ctrl+R).")
            self.model.clear()
            self._shown_for = None
            return
        if self._shown_for is c:
            return
        self._shown_for = c
        self.message.setText(f"{c.ensemble.size:,} rows; the surrogate agrees with the ensemble "
                             f"on {c.agreement:.1%} of them ({c.disagreements.size:,} "
                             "disagreements).")
        self.model.load(r)
        self._fill_filter(list(r.forest.classes_))
        self._fill_disagreements()
        self.table.resizeColumnsToContents()
        self._update_count()

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
            it = QListWidgetItem(f"row {i} ({PARTS.get(int(c.split[i]), '')}): ensemble "
                                 f"{cls[e]} with P = {c.proba[i, e]:.3f}; surrogate {cls[s]} "
                                 f"(leaf {int(c.surrogate_leaf[i])})")
            it.setData(Qt.ItemDataRole.UserRole, i)
            self.dis.addItem(it)
        if c.disagreements.size > DISAGREEMENTS_SHOWN:
            self.dis.addItem(f"… {c.disagreements.size - DISAGREEMENTS_SHOWN:,} more: filter the "
                             "table by 'disagreements only'")

    def _search(self, text: str) -> None:
        self.proxy.set_search(text)
        self._update_count()

    def _filter(self, _index: int) -> None:
        mode, value = self.filter.currentData() or ("all", None)
        self.proxy.set_mode(mode, value)
        self._update_count()

    def _update_count(self) -> None:
        self.count.setText(f"{self.proxy.rowCount():,} of {self.model.rowCount():,} rows")

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

    def describe(self, row: int) -> str:
        """The chosen row as rich text: probabilities, the path and its terms, the leaf."""
        r = self.review
        c, res = r.cases, r.surrogate
        est = res.surrogate
        cls = list(r.forest.classes_)
        x = r.case_rows()[row]
        e = int(c.ensemble[row])
        out = [f"<h3 style='margin:0'>Row {row} <span style='color:{theme.MUTED};"
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
                out.append(f"<p style='color:{theme.CAUTION}'>A value here is missing: the "
                           "surrogate uses the median of the rows it was fit on.</p>")
            elif st.missing:
                out.append(f"<p style='color:{theme.CAUTION}'>A value here is missing; the row "
                           "goes where the cases step sent it.</p>")
        s = int(c.surrogate[row])
        computed_leaf = int(c.surrogate_leaf[row])
        fid = est.leaf_fidelity_[computed_leaf]
        out.append(f"<p>Leaf {computed_leaf}: class <b>{html.escape(str(cls[s]))}</b>, "
                   f"{int(est.leaf_rows_[computed_leaf]):,} training rows"
                   + ("" if np.isnan(fid) else f", fidelity {fid:.1%}") + "</p>")
        if leaf != computed_leaf and not any(st.missing for st in steps):
            out.append(f"<p style='color:{theme.BAD}'>The rules as written lead to leaf {leaf}, "
                       f"the estimator to leaf {computed_leaf}: the row sits on a cut point "
                       "(rounding).</p>")
        agree = "agrees with" if s == e else "<b style='color:%s'>disagrees with</b>" % theme.BAD
        g = int(c.greedy[row])
        out.append(f"<p>The surrogate {agree} the ensemble. The greedy tree says "
                   f"{html.escape(str(cls[g]))}.</p>")
        return "".join(out)

    def prepare_capture(self) -> None:
        c = self.review.cases if self.review is not None else None
        if c is not None and self.selected_row is None:
            self.select_row(int(c.disagreements[0]) if c.disagreements.size else 0)

    def capture_widgets(self):
        return [self.header, self.body]

    def status_note(self) -> str:
        c = self.review.cases if self.review is not None else None
        return "" if c is None else f"{c.agreement:.1%} agree · {c.disagreements.size:,} differ"
