"""Surrogate: settings, the solve with its live incumbent and bound, the tree and its rules,
fidelity beside the greedy tree (over all rows and per group of every protected feature and
group column), the certificate, exports, and (once the cases step has run) the feature pairs
the ensemble combines most beside those the surrogate puts in one split."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import (QDoubleSpinBox, QFileDialog, QFormLayout, QGridLayout,
                               QHBoxLayout, QHeaderView, QPlainTextEdit, QPushButton, QSpinBox,
                               QTableWidget, QTableWidgetItem, QVBoxLayout, QAbstractItemView)

from ..charts import SolveChart, stage_words
from ..theme import mono_font
from ...report.content import certificate_line, fidelity_text
from ...report.figures_surrogate import surrogate_tree_figure
from ...weak_spots import weak_spots
from ..tree_figure import cart_tree_figure
from ..widgets import (CautionBox, Card, FigureView, KeyValues, Verdict, fill_table,
                       readonly_table, wrapped)
from .base import Page

STATUS_WORDS = {
    "optimal": "proved optimal on every training row",
    "optimal_on_sample": "proved optimal for the program's sample of points (not for every row)",
    "time_limit": "time limit reached: the best tree found, not proved optimal",
    "node_limit": "node limit reached: the best tree found, not proved optimal",
    "gap_reached": "stopped at the gap target",
    "cancelled": "cancelled: the best tree found before the solve was stopped",
    "greedy_fallback": "the greedy tree (CART) is the answer: no other candidate beat it, "
                       "or not significantly (see below)",
    "axis_fallback": "the exact axis-aligned tree is the answer: no other candidate beat it, "
                     "or not significantly (see below)",
    "no_incumbent": "the program found no tree in time; the answer is the best other candidate",
    "skipped": "the program did not run; the answer is the best of the fast candidates",
}
EXPORTS = ("png", "svg", "json", "mps")


def _tree_width(res) -> float:
    return 2.6 * 2 ** int(res.surrogate.depth) + 0.6


def tree_figure(res):
    """The surrogate tree as the report draws it."""
    return surrogate_tree_figure(res.surrogate, width=_tree_width(res),
                                 title="Surrogate: holdout fidelity (unweighted) "
                                       f"{pct(res.fidelity['surrogate']['holdout'])}")


def greedy_figure(res):
    """The greedy tree (CART) drawn in the same manner, beside it."""
    est = res.surrogate
    return cart_tree_figure(res.greedy, list(est.feature_names_), list(est.classes_),
                            width=_tree_width(res), title="Greedy tree (CART): holdout "
                            f"fidelity (unweighted) {pct(res.fidelity['greedy']['holdout'])}")


def pct(v) -> str:
    return "—" if v is None else f"{100 * v:.1f}%"


def group_fidelity_text(group, tree: str) -> str:
    """A group's fidelity for ``tree`` with its 95% interval, as the report writes it."""
    low, high = group.interval[tree]
    return f"{pct(group.fidelity[tree])} ({pct(low)} to {pct(high)})"


def num(v, spec: str = ".4g") -> str:
    return "—" if v is None else format(v, spec)


class SurrogatePage(Page):
    key = "surrogate"
    title = "Surrogate"
    question = ("Which shallow tree of readable rules agrees best with the ensemble, how close "
                "is it, and how far is it from proved optimal?")
    step = "surrogate"

    def __init__(self, window) -> None:
        super().__init__(window)
        self.run_button.setText("Solve")
        self.run_button.setToolTip("Find the surrogate tree with these settings (Ctrl+Return)")
        self.stop_button = self.add_button("Cancel", "Stop the solve; the best tree so far is "
                                                     "kept (Esc)")
        self.stop_button.clicked.connect(lambda: self.window_.cancel())
        self.stop_button.setEnabled(False)
        self._shortcut()
        self.chart = SolveChart()
        self._chart_dirty = False
        self._chart_timer = QTimer(self)
        self._chart_timer.setInterval(400)
        self._chart_timer.timeout.connect(self._draw_chart)
        self.points = []
        top = QHBoxLayout()
        top.setSpacing(12)
        top.addWidget(self._settings_card(), 0)
        live = Card("Solve", note="The objective: weighted disagreement with the ensemble plus "
                    "alpha times the sparsity cost (lower is better). Dots: each candidate tree "
                    "when it is ready, scored on every training row. Lines: the MILP's "
                    "incumbent and the bound it has proved, on its sample of points.")
        self.live_text = wrapped("")
        self.chart_view = FigureView(mark_updates=False)  # redrawn as points arrive: no mark
        live.body.addWidget(self.live_text)
        live.body.addWidget(self.chart_view)
        self._show_chart()
        top.addWidget(live, 1)
        self.body_layout.addLayout(top)
        self.caution = CautionBox()
        self.body_layout.addWidget(self.caution)
        self.result_card = Card("Result")
        self.verdict = Verdict()
        self.fidelity = QTableWidget(3, 4)
        self.fidelity.setHorizontalHeaderLabels(["tree", "train", "holdout", "all rows"])
        self.fidelity.verticalHeader().setVisible(False)
        self.fidelity.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.fidelity.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.fidelity_note = wrapped("", muted=True)
        self.cert = KeyValues()
        grid = QGridLayout()
        grid.addWidget(self.verdict, 0, 0, 1, 2)
        fid_box = QVBoxLayout()
        fid_box.addWidget(wrapped("Fidelity (unweighted): the share of rows where the tree "
                                  "gives the ensemble's class; below each, its 95% interval "
                                  "(Wilson)."))
        fid_box.addWidget(self.fidelity)
        fid_box.addWidget(self.fidelity_note)
        grid.addLayout(fid_box, 1, 0)
        cert_box = QVBoxLayout()
        cert_box.addWidget(wrapped("Certificate"))
        cert_box.addWidget(self.cert)
        grid.addLayout(cert_box, 1, 1)
        grid.setColumnStretch(0, 1)
        grid.setColumnStretch(1, 1)
        self.result_card.body.addLayout(grid)
        self.body_layout.addWidget(self.result_card)
        self.groups_card = Card("Faithfulness per group")
        self.groups_note = wrapped("", muted=True)
        self.groups_card.body.addWidget(self.groups_note)
        self.groups_box = QVBoxLayout()
        self.groups_box.setSpacing(6)
        self.groups_card.body.addLayout(self.groups_box)
        self.group_tables: dict[str, QTableWidget] = {}  # per grouping (column name)
        self.group_sentences: dict[str, object] = {}
        self.body_layout.addWidget(self.groups_card)
        self.stability_card = Card("Stability of the rules", note=(
            "The surrogate and the greedy tree fitted again on seeded bootstrap resamples of "
            "the training rows: how often each node's features recur, how much the re-fitted "
            "trees agree, and the spread of their fidelity. Cancel (Esc) stops it."))
        self.stability_text = wrapped("")
        self.stability_card.body.addWidget(self.stability_text)
        self.stability_button = QPushButton("Measure stability")
        self.stability_button.setToolTip("Re-fit both trees on the bootstrap resamples (the "
                                         "setting stability_resamples, 10 by default)")
        self.stability_button.clicked.connect(lambda: self.window_.run_steps(["stability"]))
        self.stability_card.body.addWidget(self.stability_button, 0, Qt.AlignmentFlag.AlignLeft)
        self.stability_tables = {}
        self.stability_titles = {}
        for name, title in (("surrogate", "The surrogate, per node"),
                            ("greedy", "The greedy tree, per node")):
            table = readonly_table(["node", "the review's features", "recur in",
                                    "most common over the re-fits", "its share"])
            self.stability_titles[name] = wrapped(f"<b>{title}</b>")
            self.stability_tables[name] = table
            self.stability_card.body.addWidget(self.stability_titles[name])
            self.stability_card.body.addWidget(table)
        self.body_layout.addWidget(self.stability_card)
        self.weak_card = Card("Weak spots", note="Where the figures above say less than they "
                              "seem: leaves with few or no holdout rows or a low 95% interval, "
                              "a train-holdout gap, data the model fits almost perfectly.")
        self.weak_text = wrapped("")
        self.weak_card.body.addWidget(self.weak_text)
        self.body_layout.addWidget(self.weak_card)
        self.tree_card = Card("The surrogate tree", note="Left branch (yes): the rule holds. "
                              "Coefficients and cut points are rounded for reading; the fidelity "
                              "shown is that of the rounded rules.")
        self.tree_view = FigureView()
        self.tree_card.body.addWidget(self.tree_view)
        ex = QHBoxLayout()
        self.export_buttons = {}
        for fmt in EXPORTS:
            b = QPushButton(f"Export {fmt.upper()}…")
            b.clicked.connect(lambda _=False, f=fmt: self.ask_export(f))
            ex.addWidget(b)
            self.export_buttons[fmt] = b
        ex.addStretch(1)
        self.tree_card.body.addLayout(ex)
        self.body_layout.addWidget(self.tree_card)
        self.greedy_card = Card("Beside it: the greedy tree of the same depth",
                                note="CART fit on the same targets (the ensemble's classes) "
                                     "and weights: the baseline the surrogate must beat.")
        self.greedy_view = FigureView()
        self.greedy_card.body.addWidget(self.greedy_view)
        self.body_layout.addWidget(self.greedy_card)
        self.rules_card = Card("Rules as text")
        self.rules = QPlainTextEdit()
        self.rules.setObjectName("rules")
        self.rules.setReadOnly(True)
        self.rules.setFont(mono_font())
        self.rules.setMinimumHeight(200)
        self.rules_card.body.addWidget(self.rules)
        self.body_layout.addWidget(self.rules_card)
        self.pairs_card = Card("Feature pairs: the ensemble's and the surrogate's",
                               note="How much the ensemble's output for one feature depends "
                               "on the other's value: the mean |Shapley interaction| "
                               "(Lundberg et al. 2020) over sampled rows. A surrogate split "
                               "that uses both features states their combination directly.")
        self.pair_statement = wrapped("")
        self.pairs = QTableWidget(0, 4)
        self.pairs.setHorizontalHeaderLabels(["rank", "pair", "mean |interaction|",
                                              "in one surrogate split"])
        self.pairs.verticalHeader().setVisible(False)
        self.pairs.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        header = self.pairs.horizontalHeader()
        header.setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        header.setSectionResizeMode(1, QHeaderView.ResizeMode.Stretch)
        self.pairs.setMaximumWidth(760)  # a wider table only spreads its four columns apart
        self.pairs_note = wrapped("", muted=True)
        for w in (self.pair_statement, self.pairs, self.pairs_note):
            self.pairs_card.body.addWidget(w)
        self.body_layout.addWidget(self.pairs_card)
        self.stages = KeyValues()
        stages_card = Card("How it was found (each candidate, scored on every training row)")
        stages_card.body.addWidget(self.stages)
        self.stages_card = stages_card
        self.body_layout.addWidget(stages_card)
        self.body_layout.addStretch(1)
        self._drawn_for = None

    def _shortcut(self) -> None:
        from PySide6.QtGui import QKeySequence, QShortcut

        sc = QShortcut(QKeySequence("Ctrl+Return"), self)
        sc.activated.connect(self.solve)

    # ------------------------------------------------------------------ settings
    def _settings_card(self) -> Card:
        card = Card("Settings")
        form = QFormLayout()
        self.depth = QSpinBox()
        self.depth.setRange(1, 4)
        self.depth.setToolTip("Depth of the tree: 2 gives four leaves, 3 eight")
        self.k = QSpinBox()
        self.k.setRange(0, 64)
        self.k.setSpecialValueText("any number")
        self.k.setToolTip("At most this many features in one split's rule (1: ordinary one-feature cuts)")
        self.alpha = QDoubleSpinBox()
        self.alpha.setDecimals(5)
        self.alpha.setRange(0.0, 1.0)
        self.alpha.setSingleStep(0.0005)
        self.alpha.setToolTip("Fidelity given up per unit of sparsity cost: higher gives fewer "
                              "features, favouring those the ensemble itself uses at that depth")
        self.tau = QDoubleSpinBox()
        self.tau.setDecimals(3)
        self.tau.setRange(0.05, 1.0)
        self.tau.setSingleStep(0.01)
        self.tau.setToolTip("Samples with at least this proximity must share a leaf")
        self.time_limit = QDoubleSpinBox()
        self.time_limit.setRange(1.0, 7200.0)
        self.time_limit.setDecimals(0)
        self.time_limit.setSuffix(" s")
        self.time_limit.setToolTip("Time for the whole search; the best tree found is kept")
        self.node_limit = QSpinBox()
        self.node_limit.setRange(0, 10_000_000)
        self.node_limit.setSpecialValueText("none")
        self.node_limit.setToolTip("Branch-and-bound nodes; set one well below what the time "
                                   "allows to make the solve reproducible")
        self.seed = QSpinBox()
        self.seed.setRange(0, 2_147_483_647)
        form.addRow("Depth", self.depth)
        form.addRow("Features per split", self.k)
        form.addRow("Alpha", self.alpha)
        form.addRow("Proximity threshold", self.tau)
        form.addRow("Time limit", self.time_limit)
        form.addRow("Node limit", self.node_limit)
        form.addRow("Seed", self.seed)
        card.body.addLayout(form)
        self.forbidden_note = wrapped("", muted=True)
        card.body.addWidget(self.forbidden_note)
        card.setMinimumWidth(290)
        card.setMaximumWidth(360)
        return card

    def load_settings(self) -> None:
        r = self.review
        if r is None:
            return
        s = r.settings
        self.depth.setValue(int(s.depth))
        self.k.setMaximum(max(r.forest.n_features if r.forest is not None else 64, 1))
        self.k.setValue(0 if s.max_features_per_split is None else int(s.max_features_per_split))
        self.alpha.setValue(float(s.alpha))
        self.tau.setValue(float(s.proximity_threshold))
        self.time_limit.setValue(float(s.time_limit))
        self.node_limit.setValue(0 if s.node_limit is None else int(s.node_limit))
        self.seed.setValue(int(s.seed))

    def settings_from_form(self) -> dict:
        return {"depth": int(self.depth.value()),
                "max_features_per_split": None if self.k.value() == 0 else int(self.k.value()),
                "alpha": float(self.alpha.value()),
                "proximity_threshold": float(self.tau.value()),
                "time_limit": float(self.time_limit.value()),
                "node_limit": None if self.node_limit.value() == 0 else int(self.node_limit.value()),
                "seed": int(self.seed.value())}

    def run(self) -> bool:
        return self.solve()

    def solve(self) -> bool:
        """Apply the form's settings and start the surrogate step (and the cases after it)."""
        if self.review is None or self.window_.runner.busy:
            return False
        if not self.window_.set_settings(**self.settings_from_form()):
            return False
        return self.window_.run_steps(["surrogate", "cases"])

    # ------------------------------------------------------------------ live chart
    def start_chart(self) -> None:
        self.points = []
        self.chart.reset(self.review.settings.time_limit)
        self.live_text.setText("Solving: the greedy tree first, then a node-by-node search, then "
                               "the MILP on a representative sample, then a polish on every row.")
        self._draw_chart()
        self._chart_timer.start()

    def add_point(self, point) -> None:
        self.points.append(point)
        self.chart.add(point)
        self._chart_dirty = True
        gap = "" if point.gap is None else f", gap {100 * point.gap:.0f}%"
        inc = "—" if point.incumbent is None else f"{point.incumbent:.4f}"
        limit = max(float(self.review.settings.time_limit), 1e-9) if self.review else 1.0
        self.window_.progress.setValue(int(1000 * min(point.elapsed / limit, 1.0)))
        self.live_text.setText(f"{point.elapsed:.1f} s · stage {point.stage or '—'} · incumbent "
                               f"{inc}" + ("" if point.bound is None else
                                           f" · bound {point.bound:.4f}") + gap)

    def _draw_chart(self) -> None:
        if self._chart_dirty or not self.points:
            self._show_chart()
        if not self.window_.runner.busy:
            self._chart_timer.stop()

    def _show_chart(self) -> None:
        """Draw the chart's points so far (made and drawn in the view's worker)."""
        self._chart_dirty = False
        self.chart_view.show_built(self.chart.snapshot().figure)

    def set_busy(self, busy: bool) -> None:
        super().set_busy(busy)
        solving = busy and self.window_.runner.kind == "steps"
        self.stop_button.setEnabled(solving)
        for b in self.export_buttons.values():
            b.setEnabled(not busy and self.review is not None and self.review.surrogate is not None)
        if not busy:
            self._update_exports()

    # ------------------------------------------------------------------ result
    def reset(self) -> None:
        self._drawn_for = None
        self.points = []
        self.tree_view.clear()
        self.greedy_view.clear()
        if self.review is not None:
            self.chart.reset(self.review.settings.time_limit)
            self._show_chart()

    def refresh(self) -> None:
        r = self.review
        self.load_settings()
        forbidden = [f for f, k in (r.settings.flags.items() if r else []) if k == "forbidden"]
        self.forbidden_note.setText(
            ("Kept out (forbidden on the Anatomy page): " + ", ".join(forbidden)) if forbidden
            else "No feature is forbidden (flag them on the Anatomy page).")
        res = r.surrogate if r is not None else None
        for w in (self.result_card, self.groups_card, self.stability_card, self.weak_card,
                  self.tree_card,
                  self.greedy_card, self.rules_card, self.stages_card, self.pairs_card):
            w.setVisible(res is not None)
        if r is None:
            self.live_text.setText("Open a model and its data first.")
            return
        if res is None:
            if not self.window_.runner.busy:
                self.live_text.setText("Not solved yet: check the settings and press Solve "
                                       "(Ctrl+Return).")
            return
        self._show_weak_spots()
        self._show_pairs()
        self._show_stability()
        if self._drawn_for is res:
            return
        self._drawn_for = res
        self._show_result(res)
        self._show_groups(res)
        if not self.points:
            self._replay(res)
        else:
            self.chart.finish(res.certificate.get("objective"))
            self._chart_dirty = True
            self._draw_chart()

    def _show_weak_spots(self) -> None:
        r = self.review
        spots = weak_spots(r) if r.cases is not None else []
        self.weak_text.setText("\n\n".join(s.text for s in spots) if spots else
                               "None found with the review's settings." if r.cases is not None
                               else "Shown once the cases step has run.")

    def _show_pairs(self) -> None:
        """The ensemble's strongest pairs (from the cases step's effects) beside the
        surrogate's, and the sentence that compares them."""
        r = self.review
        eff = getattr(r.cases, "effects", None) if r.cases is not None else None
        self.pairs.setVisible(eff is not None)
        if eff is None:
            self.pair_statement.setText("Shown once the cases step has run.")
            self.pairs_note.setText("")
            return
        self.pair_statement.setText(eff.pair_statement)
        theirs = {frozenset(p) for p in eff.surrogate_pairs}
        rows = [(f"#{i}", f"{p.first} & {p.second}", f"{p.mean_abs:.4g}",
                 "yes" if frozenset((p.first, p.second)) in theirs else "")
                for i, p in enumerate(eff.pairs, 1)]
        ranked = {frozenset((p.first, p.second)) for p in eff.pairs}
        rows += [("—", f"{a} & {b}", f"not among the {len(eff.pairs)} strongest", "yes")
                 for a, b in eff.surrogate_pairs if frozenset((a, b)) not in ranked]
        self.pairs.setRowCount(len(rows))
        for i, cells in enumerate(rows):
            for c, text in enumerate(cells):
                item = QTableWidgetItem(text)
                if c in (0, 2):
                    item.setTextAlignment(Qt.AlignmentFlag.AlignRight
                                          | Qt.AlignmentFlag.AlignVCenter)
                elif c == 3:
                    item.setTextAlignment(Qt.AlignmentFlag.AlignCenter)
                self.pairs.setItem(i, c, item)
        self.pairs.setFixedHeight(self.pairs.horizontalHeader().height()
                                  + 2 * self.pairs.frameWidth() + 2
                                  + sum(self.pairs.rowHeight(i) for i in range(len(rows))))
        self.pairs_note.setText(
            f"On the first {eff.interaction_rows:,} rows of "
            f"{eff.sample.get('description', 'the sample')}, in "
            f"{'probability' if eff.output == 'probability' else 'margin (log-odds)'} units, "
            "summed over the outputs.")

    def _replay(self, res) -> None:
        """A reopened review: draw the chart from the candidates it recorded."""
        from ..workers import SolverPoint

        self.chart.reset(float(res.settings.get("time_limit", self.review.settings.time_limit)))
        for s in res.stages:  # each candidate when it was ready; the solver's own log runs on
            # its own clock, which starts later, so it is not mixed in here
            name = "MILP tree" if s["name"] == "program" else s["name"]
            self.chart.add(SolverPoint(s["elapsed"], s["objective"], None, None, name))
        self.chart.finish(res.certificate.get("objective"))
        self._show_chart()
        status = res.certificate["status"]
        self.live_text.setText(f"Finished: {STATUS_WORDS.get(status, status)}. The chart shows "
                               "the candidates recorded with the review.")

    def _show_stability(self) -> None:
        """The stability step's finding per tree, in words and per node (the report's)."""
        r = self.review
        stab = r.stability
        busy = self.window_.runner.busy
        self.stability_button.setEnabled(not busy and r.settings.stability_resamples > 0)
        for name, table in self.stability_tables.items():
            table.setVisible(stab is not None)
            self.stability_titles[name].setVisible(stab is not None)
            if stab is not None:
                fill_table(table, stab.to_rows(name), right=(2, 4))
        if stab is not None:
            self.stability_text.setText("<br><br>".join(
                stab.sentence(name) for name in ("surrogate", "greedy")))
        elif r.settings.stability_resamples == 0:
            self.stability_text.setText("Left out: the setting stability_resamples is 0.")
        else:
            self.stability_text.setText(
                f"Not measured yet: press Measure stability to re-fit both trees on "
                f"{r.settings.stability_resamples} bootstrap resamples, "
                f"{r.settings.stability_seconds():g} s each.")

    def _show_groups(self, res) -> None:
        """Per protected feature and group column: each group's fidelity with its interval,
        the groups too small to judge, and the largest gap in words (the report's table)."""
        while self.groups_box.count():
            item = self.groups_box.takeAt(0)
            if item.widget() is not None:
                item.widget().deleteLater()
        self.group_tables, self.group_sentences = {}, {}
        found = getattr(res, "group_fidelity", None) or []
        st = self.review.settings
        wanted = [f for f, k in st.flags.items() if k == "protected"] + list(st.group_columns)
        later = [name for name in dict.fromkeys(wanted) if name not in {g.name for g in found}]
        if not found:
            self.groups_note.setText(
                "No feature is flagged protected and no group column is named, so there are "
                "no groups to compare. Flag a feature protected on the Anatomy page and solve "
                "again to see the trees' fidelity for each of its groups." if not later else
                f"Flagged or named after this solve: {', '.join(later)}; solve again to see "
                "the trees' fidelity for each of their groups.")
            return
        part = "holdout" if res.holdout_rows.size else "training"
        self.groups_note.setText(
            f"Fidelity (unweighted) on the {part} rows of each group, with its 95% Wilson "
            f"interval; a group of fewer than {found[0].min_rows} rows is marked too small to "
            "judge and left out of the gaps."
            + (f" Flagged or named after this solve: {', '.join(later)}; solve again to see "
               "their groups." if later else ""))
        for gf in found:
            trees = [t for t in ("surrogate", "greedy") if t in gf.trees]
            title = wrapped(f"<b>{gf.name}</b> ({gf.grouping})")
            sentence = wrapped(gf.sentence())
            table = readonly_table(["group", "rows"]
                                   + [f"{t} fidelity (95% interval)" for t in trees] + [""])
            fill_table(table, [[g.label, f"{g.rows:,}"]
                               + [group_fidelity_text(g, t) for t in trees]
                               + ["too small to judge" if g.too_small else ""]
                               for g in gf.groups], right=(1,))
            for w in (title, sentence, table):
                self.groups_box.addWidget(w)
            self.group_tables[gf.name] = table
            self.group_sentences[gf.name] = sentence

    def _show_result(self, res) -> None:
        est, cert = res.surrogate, res.certificate
        status = cert.get("status", "")
        words = STATUS_WORDS.get(status, status)
        f = res.fidelity
        head = (f"{words[:1].upper()}{words[1:]} (status {status}); the tree comes from the "
                f"{stage_words(res.winner)} stage. Holdout fidelity (unweighted) "
                f"{pct(f['surrogate']['holdout'])} against {pct(f['greedy']['holdout'])} for the "
                "greedy tree.")
        good = (f["surrogate"]["holdout"] or 0) >= (f["greedy"]["holdout"] or 0)
        self.verdict.set("good" if good else "neutral", head + (f"\n{res.note}" if res.note else ""))
        trees = [(name, label) for name, label in (
            ("surrogate", "surrogate (oblique)"), ("greedy", "greedy (CART)"),
            ("optimal_axis", "exact axis-aligned")) if name in f]
        self.fidelity.setRowCount(len(trees))
        for row, (name, label) in enumerate(trees):
            cells = [label] + [fidelity_text(res, part, name).replace(" (95% interval ", "\n(")
                               for part in ("train", "holdout")] + [pct(f[name]["full"])]
            for c, text in enumerate(cells):
                self.fidelity.setItem(row, c, QTableWidgetItem(text))
        self.fidelity.resizeRowsToContents()
        self.fidelity.setFixedHeight(self.fidelity.horizontalHeader().height() + sum(
            self.fidelity.rowHeight(r) for r in range(len(trees))) + 4)
        w = res.weighted_fidelity
        self.fidelity_note.setText(
            f"Weighted by the ensemble's confidence: surrogate {pct(w['surrogate']['holdout'])}, "
            f"greedy {pct(w['greedy']['holdout'])} on the holdout.")
        rb = cert.get("readback") or {}
        sample = cert.get("sample") or {}
        self.cert.set_rows([
            ("In words", certificate_line(self.review)),
            ("Status", status), ("Objective", num(cert.get("objective"))),
            ("Bound", f"{num(cert.get('bound'))} on every training row" + (
                f" (method: {cert['bound_method']})" if cert.get("bound_method") else "")),
            ("Gap", "—" if cert.get("gap") is None else f"{100 * cert['gap']:.1f}%" + (
                " (the bound has not left zero: nothing is proved about optimality yet)"
                if cert.get("bound") is not None and abs(cert["bound"]) < 1e-12
                and (cert.get("objective") or 0) > 0 else "")),
            ("Program's own bound", f"{num(cert.get('program_bound'))} on its sample only"),
            ("Time", f"{num(cert.get('time'), '.1f')} s (solve {num(cert.get('solve_time'), '.1f')} s, "
                     f"build {num(cert.get('build_time'), '.2f')} s)"),
            ("Program's sample", f"{sample.get('points', '—')} points for "
                                 f"{sample.get('rows_represented', '—')} rows"
             if sample else "not used"),
            ("Branch-and-bound nodes", str(cert.get("nodes") if cert.get("nodes") is not None else "—")),
            ("Read-back check", "—" if not rb else ("consistent" if rb.get("consistent") else
                                                   "NOT consistent")),
            ("Must-link pairs", f"{res.proximity.get('pairs', 0):,} at proximity "
                                f"{res.proximity.get('threshold')}, "
                                f"{res.proximity.get('separated_pairs', 0)} separated"),
            ("Solver", f"{cert.get('solver', '')} " + ", ".join(
                f"{k} {v}" for k, v in (cert.get("versions") or {}).items()))])
        self.tree_view.show_built(lambda: tree_figure(res))
        self.greedy_view.show_built(lambda: greedy_figure(res))
        self.rules.setPlainText(est.export_text())
        self.stages.set_rows([(stage_words(s["name"]), f"objective {s['objective']:.5f}, "
                                          f"weighted fidelity "
                                          f"{s['fidelity']:.1%}, ready at {s['elapsed']:.1f} s"
                                          + (f" ({s['note']})" if s.get("note") else ""))
                              for s in res.stages])
        self._update_exports()

    # ------------------------------------------------------------------ exports
    def _mps_writer(self):
        review = self.review
        if review is None or review.surrogate is None or not review.program_mps:
            return None
        return review.write_program

    def _update_exports(self) -> None:
        has = self.review is not None and self.review.surrogate is not None
        for fmt, b in self.export_buttons.items():
            b.setEnabled(has and not self.window_.runner.busy)
        if has and self._mps_writer() is None:
            b = self.export_buttons["mps"]
            b.setEnabled(False)
            b.setToolTip("The solve ended before the program stage; there is no program to export.")

    def ask_export(self, fmt: str) -> None:
        filters = {"png": "PNG image (*.png)", "svg": "SVG drawing (*.svg)",
                   "json": "JSON (*.json)", "mps": "MPS program (*.mps)"}
        path, _ = QFileDialog.getSaveFileName(self, f"Export the surrogate as {fmt.upper()}",
                                              f"surrogate.{fmt}", filters[fmt])
        if path:
            self.export(fmt, path)

    def export(self, fmt: str, path) -> Path | None:
        """Write the surrogate as PNG/SVG (the tree drawing), JSON or MPS to ``path``."""
        res = self.review.surrogate if self.review is not None else None
        if res is None:
            return None
        path = Path(path)
        try:
            if fmt in ("png", "svg"):
                from ...report.figure_files import save_figure

                stem = path.with_suffix("") if path.suffix.lower() == f".{fmt}" else path
                # a figure of its own at the design size (the one on screen is drawn in a
                # worker, at the width of the window)
                out = save_figure(tree_figure(res), stem, formats=(fmt,), dpi=200)[0]
            elif fmt == "json":
                from ...report.figure_files import write_atomically

                text = res.surrogate.export_json()
                out = write_atomically(path, lambda fh: fh.write(text), binary=False)
            else:
                writer = self._mps_writer()
                if writer is None:
                    self.window_.say("No program to export: the solve ended before the "
                                     "program stage.")
                    return None
                writer(str(path))
                out = path
        except Exception as exc:
            self.window_.show_problem(exc, f"exporting the surrogate as {fmt.upper()}")
            return None
        self.window_.say(f"Exported {out}.")
        return out

    def status_note(self) -> str:
        res = self.review.surrogate if self.review is not None else None
        if res is None:
            return ""
        h = res.fidelity["surrogate"]["holdout"]
        return f"{res.certificate.get('status', '')} · holdout {pct(h)}"
