"""Proximity: which samples the ensemble treats alike (Breiman's proximity).

Choose a sample to see the samples most like it with their predictions and values; the pair
counts show how many pairs reach each threshold, the one the surrogate must keep together.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QAbstractItemView, QHBoxLayout, QHeaderView, QLabel, QSpinBox,
                               QTableWidget, QTableWidgetItem)

from ...analysis.proximity import most_similar
from ..charts import pairs_figure
from ..widgets import Card, FigureView, KeyValues, wrapped
from .base import Page

PAIRS_SHOWN = 300
VALUE_COLUMNS = 5


def _item(value, align_right: bool = False) -> QTableWidgetItem:
    it = QTableWidgetItem(value if isinstance(value, str) else f"{value}")
    it.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable)
    if align_right:
        it.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
    return it


def _table(headers: list[str]) -> QTableWidget:
    t = QTableWidget(0, len(headers))
    t.setHorizontalHeaderLabels(headers)
    t.verticalHeader().setVisible(False)
    t.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
    t.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
    t.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
    t.horizontalHeader().setStretchLastSection(False)
    t.verticalHeader().setDefaultSectionSize(22)
    return t


def fit_rows(t: QTableWidget, most: int) -> None:
    """Make ``t`` tall enough for ``most`` rows (it scrolls beyond that)."""
    rows = min(t.rowCount(), most)
    t.setFixedHeight(t.horizontalHeader().height() + 22 * max(rows, 3) + 6)


def fmt(v) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return "missing"
    return f"{v:.4g}" if isinstance(v, (float, np.floating)) else str(v)


class ProximityPage(Page):
    key = "proximity"
    title = "Proximity"
    question = ("Which samples does the ensemble treat alike? Two samples are close when they "
                "reach the same leaf in most trees.")
    step = "proximity"

    def __init__(self, window) -> None:
        super().__init__(window)
        self._proba = None
        self._proba_for = None
        self.message = wrapped("", muted=True)
        self.body_layout.addWidget(self.message)
        pick = QHBoxLayout()
        pick.addWidget(QLabel("Sample (row of the review data)"))
        self.row = QSpinBox()
        self.row.setRange(0, 0)
        self.row.setKeyboardTracking(False)
        self.row.valueChanged.connect(lambda _: self.show_sample())
        pick.addWidget(self.row)
        pick.addSpacing(16)
        pick.addWidget(QLabel("Most similar"))
        self.k = QSpinBox()
        self.k.setRange(1, 50)
        self.k.setValue(10)
        self.k.valueChanged.connect(lambda _: self.show_sample())
        pick.addWidget(self.k)
        pick.addStretch(1)
        self.body_layout.addLayout(pick)
        top = QHBoxLayout()
        top.setSpacing(12)
        self.sample_card = Card("The sample")
        self.sample_kv = KeyValues()
        self.sample_card.body.addWidget(self.sample_kv)
        self.sample_card.setMinimumWidth(260)
        self.sample_card.setMaximumWidth(380)
        self.similar_card = Card("Most similar samples",
                                 note="Proximity: the share of trees in which the two samples "
                                      "reach the same leaf.")
        self.similar = _table(["#", "row", "proximity", "model's class", "P(class)", "label"])
        self.similar_card.body.addWidget(self.similar)
        top.addWidget(self.sample_card, 0, Qt.AlignmentFlag.AlignTop)
        top.addWidget(self.similar_card, 1)
        self.body_layout.addLayout(top)
        self.values_card = Card("Their values", note="The sample beside its closest "
                                f"{VALUE_COLUMNS} neighbours, feature by feature.")
        self.values = _table(["feature"])
        self.values_card.body.addWidget(self.values)
        self.body_layout.addWidget(self.values_card)
        self.pairs_card = Card("Pairs against the threshold")
        self.pairs_text = wrapped("")
        self.pairs_view = FigureView()
        self.pairs = _table(["row", "row", "proximity", "model's classes"])
        self.pairs.itemSelectionChanged.connect(self._pair_chosen)
        self.pairs_card.body.addWidget(self.pairs_text)
        self.pairs_card.body.addWidget(self.pairs_view)
        self.pairs_card.body.addWidget(QLabel("Closest pairs (select one to show its first sample)"))
        self.pairs_card.body.addWidget(self.pairs)
        self.body_layout.addWidget(self.pairs_card)
        self.body_layout.addStretch(1)
        self._drawn_for = None

    # ------------------------------------------------------------------ data
    def proba(self) -> np.ndarray:
        """The ensemble's probabilities on the review data (from Cases when it has run)."""
        r = self.review
        if r.cases is not None and r.cases.proba.shape[0] >= r.data.n_rows:
            return r.cases.proba[: r.data.n_rows]
        if self._proba_for is not r.forest:
            self._proba = r.forest.predict_proba(r.data.X)
            self._proba_for = r.forest
        return self._proba

    def reset(self) -> None:
        self._drawn_for = None
        self.similar.setRowCount(0)

    def refresh(self) -> None:
        r = self.review
        ready = r is not None and r.data is not None
        for w in (self.sample_card, self.similar_card, self.values_card):
            w.setVisible(ready)
        self.row.setEnabled(ready)
        self.k.setEnabled(ready)
        if not ready:
            self.message.setText("Open a model and its data and run intake first.")
            self.pairs_card.setVisible(False)
            return
        self.message.setText(f"Proximity here is computed over all {r.forest.n_trees} trees. "
                             "Choose any row of the review data.")
        self.row.setRange(0, r.data.n_rows - 1)
        self.pairs_card.setVisible(r.proximity is not None)
        if r.proximity is not None and self._drawn_for is not r.proximity:
            self._show_pairs()
        if self.similar.rowCount() == 0 or self._drawn_for is not r.proximity:
            self.show_sample()
        self._drawn_for = r.proximity

    def _show_pairs(self) -> None:
        r = self.review
        px = r.proximity
        c = px.counts
        share = 100.0 * px.n_pairs_at_threshold / max(c.n_total_pairs, 1)
        sub = "" if px.rows.size == r.data.n_rows else \
            f" (on {px.rows.size:,} rows sampled with seed {r.settings.seed})"
        self.pairs_text.setText(
            f"{px.n_pairs_at_threshold:,} of {c.n_total_pairs:,} pairs ({share:.2g}%) reach "
            f"proximity {px.threshold:g}{sub}; the surrogate keeps each such pair in one leaf. "
            f"Proximity: the {px.definition}.")
        self.pairs_view.set_figure(pairs_figure(c, px.threshold, px.n_pairs_at_threshold))
        proba = self.proba()
        cls = r.forest.classes_
        pred = np.argmax(proba, axis=1)
        order = np.argsort(-px.pairs.p, kind="stable")[:PAIRS_SHOWN]
        self.pairs.setRowCount(order.size)
        for k, idx in enumerate(order):
            i, j = int(px.rows[px.pairs.i[idx]]), int(px.rows[px.pairs.j[idx]])
            self.pairs.setItem(k, 0, _item(str(i), True))
            self.pairs.setItem(k, 1, _item(str(j), True))
            self.pairs.setItem(k, 2, _item(f"{px.pairs.p[idx]:.3f}", True))
            self.pairs.setItem(k, 3, _item(f"{cls[pred[i]]} / {cls[pred[j]]}"))
        fit_rows(self.pairs, 12)

    def _pair_chosen(self) -> None:
        rows = self.pairs.selectionModel().selectedRows()
        if rows:
            self.row.setValue(int(self.pairs.item(rows[0].row(), 0).text()))

    def show_sample(self) -> None:
        r = self.review
        if r is None or r.data is None:
            return
        i = int(self.row.value())
        sim = most_similar(r.forest, r.data.X, i, k=int(self.k.value()))
        proba = self.proba()
        cls = r.forest.classes_
        pred = np.argmax(proba, axis=1)
        y = r.data.y
        where = "—"
        if r.intake is not None:
            where = "held out" if i in set(r.intake.holdout_rows.tolist()) else "fit on"
        rows = [("Row", str(i)), ("Model's class", f"{cls[pred[i]]} (P = {proba[i, pred[i]]:.3f})"),
                ("Label", "—" if y is None else str(y[i])), ("Surrogate rows", where)]
        if sim.proximity.size:
            rows.append(("Closest", f"row {int(sim.neighbours[0])}, proximity "
                                    f"{sim.proximity[0]:.3f}"))
        self.sample_kv.set_rows(rows)
        self.similar.setRowCount(sim.neighbours.size)
        for k, (j, p) in enumerate(zip(sim.neighbours, sim.proximity)):
            j = int(j)
            cells = [str(k + 1), str(j), f"{p:.3f}", str(cls[pred[j]]), f"{proba[j, pred[j]]:.3f}",
                     "—" if y is None else str(y[j])]
            for c, text in enumerate(cells):
                self.similar.setItem(k, c, _item(text, c in (0, 1, 2, 4)))
        fit_rows(self.similar, 12)
        self._values(i, sim.neighbours[:VALUE_COLUMNS])

    def _values(self, i: int, neighbours) -> None:
        r = self.review
        X, names = r.data.X, r.data.feature_names
        cols = [i] + [int(j) for j in neighbours]
        self.values.setColumnCount(1 + len(cols))
        self.values.setHorizontalHeaderLabels(["feature", f"row {i}"] +
                                              [f"row {j}" for j in cols[1:]])
        self.values.setRowCount(len(names))
        for r_, name in enumerate(names):
            self.values.setItem(r_, 0, _item(name))
            for c, j in enumerate(cols):
                self.values.setItem(r_, c + 1, _item(fmt(float(X[j, r_])), True))
        fit_rows(self.values, 40)

    def prepare_capture(self) -> None:
        r = self.review
        if r is not None and r.proximity is not None and len(r.proximity.pairs):
            top = int(np.argmax(r.proximity.pairs.p))
            self.row.setValue(int(r.proximity.rows[r.proximity.pairs.i[top]]))

    def status_note(self) -> str:
        px = self.review.proximity if self.review is not None else None
        return "" if px is None else f"{px.n_pairs_at_threshold:,} pairs ≥ {px.threshold:g}"
