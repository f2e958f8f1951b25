"""Proximity: which samples the ensemble treats alike (Breiman's proximity).

Choose a sample to see the samples most like it with their predictions and values; the pair
counts show how many pairs reach each threshold, the one the surrogate must keep together.
Finding a sample's neighbours compares it with every row in every tree, so it runs in a
worker; so do the figure and the classes of the closest pairs.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QAbstractItemView, QHBoxLayout, QHeaderView, QLabel, QSpinBox,
                               QTableWidget, QTableWidgetItem)

from ...analysis.proximity import most_similar
from ..charts import pairs_figure
from ..widgets import Card, FigureView, KeyValues, wrapped
from ..workers import LatestCall
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


def class_probabilities(review, rows: np.ndarray) -> np.ndarray:
    """The ensemble's probabilities for ``rows`` of the review data: from Cases when it has
    run, otherwise predicted for those rows alone."""
    c = review.cases
    if c is not None and c.proba.shape[0] >= review.data.n_rows:
        return c.proba[rows]
    return review.forest.predict_proba(review.data.X[rows])


@dataclass
class Neighbours:
    """What the page shows for one sample: its closest samples, the probabilities of the
    sample and of each neighbour (in that order), and whether the surrogate was fit on it."""

    row: int
    similar: object  # grovewise.analysis.proximity.SimilarSamples
    proba: np.ndarray
    where: str


def sample_neighbours(review, row: int, k: int) -> Neighbours:
    """The ``k`` samples closest to ``row`` over every row of the review data (a worker's job:
    each row walks every tree)."""
    sim = most_similar(review.forest, review.data.X, row, k=k)
    proba = class_probabilities(review, np.concatenate([[row], sim.neighbours]).astype(np.int64))
    where = "—"
    if review.intake is not None:
        where = "held out" if np.any(review.intake.holdout_rows == row) else "fit on"
    return Neighbours(row, sim, proba, where)


@dataclass
class ClosestPairs:
    """The closest pairs (review-data rows ``i``, ``j``), their proximity and the ensemble's
    class of each row, closest first."""

    i: np.ndarray
    j: np.ndarray
    p: np.ndarray
    class_i: np.ndarray
    class_j: np.ndarray


def closest_pairs(review, most: int = PAIRS_SHOWN) -> ClosestPairs:
    """The ``most`` closest pairs of the proximity step, with each row's predicted class."""
    px = review.proximity
    order = np.argsort(-px.pairs.p, kind="stable")[:most]
    i, j = px.rows[px.pairs.i[order]], px.rows[px.pairs.j[order]]
    pred = np.argmax(class_probabilities(review, np.concatenate([i, j])), axis=1)
    return ClosestPairs(i, j, px.pairs.p[order], pred[:i.size], pred[i.size:])


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
        self.lookup = LatestCall(self, exclusive=False)  # the chosen sample's neighbours
        self.pair_rows = LatestCall(self)  # the closest pairs with their classes
        self._shown = None  # (row, neighbours) on screen
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
    def reset(self) -> None:
        self._drawn_for = None
        self._shown = None
        self.lookup.drop()
        self.pair_rows.drop()
        self.pairs_view.clear()
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
        if (self._shown is None and not self.lookup.busy) or self._drawn_for is not r.proximity:
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
        self.pairs_view.show_built(lambda: pairs_figure(c, px.threshold, px.n_pairs_at_threshold))
        self.pairs.setRowCount(0)
        self.pair_rows.request(closest_pairs, r, done=self._fill_pairs)

    def _fill_pairs(self, found: "ClosestPairs") -> None:
        cls = self.review.forest.classes_
        self.pairs.setRowCount(found.i.size)
        for k, (i, j, p, ci, cj) in enumerate(zip(found.i, found.j, found.p, found.class_i,
                                                  found.class_j)):
            self.pairs.setItem(k, 0, _item(str(int(i)), True))
            self.pairs.setItem(k, 1, _item(str(int(j)), True))
            self.pairs.setItem(k, 2, _item(f"{p:.3f}", True))
            self.pairs.setItem(k, 3, _item(f"{cls[ci]} / {cls[cj]}"))
        fit_rows(self.pairs, 12)

    def _pair_chosen(self) -> None:
        rows = self.pairs.selectionModel().selectedRows()
        if rows:
            self.row.setValue(int(self.pairs.item(rows[0].row(), 0).text()))

    def show_sample(self) -> None:
        """Look up the chosen sample's closest samples (in the worker: every row is compared
        with it, tree by tree) and show them when found."""
        r = self.review
        if r is None or r.data is None:
            return
        i, k = int(self.row.value()), int(self.k.value())
        self.similar_card.title_label.setText(f"Most similar samples: finding those of row {i}…")
        self.lookup.request(sample_neighbours, r, i, k, done=self._show_neighbours)

    def _show_neighbours(self, found: "Neighbours") -> None:
        r = self.review
        cls = r.forest.classes_
        y = r.data.y
        i, sim, proba = found.row, found.similar, found.proba
        pred = np.argmax(proba, axis=1)
        self._shown = (i, sim.neighbours.size)
        self.similar_card.title_label.setText("Most similar samples")
        rows = [("Row", str(i)), ("Model's class", f"{cls[pred[0]]} (P = {proba[0, pred[0]]:.3f})"),
                ("Label", "—" if y is None else str(y[i])), ("Surrogate rows", found.where)]
        if sim.proximity.size:
            rows.append(("Closest", f"row {int(sim.neighbours[0])}, proximity "
                                    f"{sim.proximity[0]:.3f}"))
        self.sample_kv.set_rows(rows)
        self.similar.setRowCount(sim.neighbours.size)
        for k, (j, p) in enumerate(zip(sim.neighbours, sim.proximity)):
            j, c = int(j), int(pred[k + 1])
            cells = [str(k + 1), str(j), f"{p:.3f}", str(cls[c]), f"{proba[k + 1, c]:.3f}",
                     "—" if y is None else str(y[j])]
            for col, text in enumerate(cells):
                self.similar.setItem(k, col, _item(text, col in (0, 1, 2, 4)))
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
