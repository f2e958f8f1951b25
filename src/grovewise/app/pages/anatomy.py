"""Anatomy: how the ensemble uses each feature, with the reviewer's flags shown everywhere.

The figures are the report's own (:mod:`grovewise.report.figures_anatomy`), made and drawn in
the views' workers, so the window and the report show the same pictures and a forest of
hundreds of deep trees never holds up the window. Hovering a cell, box, strip or bar shows its
numbers. Ticking a feature as protected or forbidden updates the flag statements and every
figure.

Once the cases step has run, the ensemble's own effects join them (its
:class:`~grovewise.effects_summary.EffectsResult`): importance by mean |contribution| in a
table beside impurity and permutation importance, and the effect curves of the top features
with the surrogate's cuts drawn on them, each cut with its sentence.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import (QAbstractItemView, QCheckBox, QComboBox, QFileDialog,
                               QGridLayout, QHBoxLayout, QHeaderView, QLabel, QTableWidget,
                               QTableWidgetItem, QVBoxLayout, QWidget)

from ...analysis.flags import check_flags, flag_report
from ...report import figures_anatomy as figs
from ...report.figures_effects import effect_curves_figure
from ..theme import flag_style
from ..widgets import Card, FigureView, wrapped
from .base import Page

WEIGHT_WORDS = {"count": "number of splits", "gain": "split gain",
                "cover": "training samples reaching the split"}


# ---------------------------------------------------------------------------- hover text
def _labels(names, flags) -> dict[str, int]:
    return {figs.flag_label(n, flags): j for j, n in enumerate(names)}


def _row_feature(event, image_ax, labels: dict[str, int]) -> int | None:
    ticks = [t.get_text() for t in image_ax.get_yticklabels()]
    r = int(round(event.ydata))
    if not 0 <= r < len(ticks):
        return None
    return labels.get(ticks[r])


def _image_axes(fig):
    return next((ax for ax in fig.axes if ax.images), None)


def usage_hover(usage, flags, fig):
    """Hover text for the depth heat map and its side bars."""
    labels = _labels(usage.feature_names, flags)
    image_ax = _image_axes(fig)

    def hover(event) -> str | None:
        ax = event.inaxes
        if image_ax is None or not (ax is image_ax or ax.get_shared_y_axes().joined(ax, image_ax)):
            return None
        j = _row_feature(event, image_ax, labels)
        if j is None:
            return None
        name = usage.feature_names[j]
        if ax is not image_ax:
            return (f"{name}: {usage.overall_share[j]:.1%} of all splits "
                    f"(by {WEIGHT_WORDS[usage.weight]})")
        c = int(round(event.xdata))
        if not 0 <= c < usage.depths.shape[0]:
            return None
        return (f"{name} at depth {int(usage.depths[c])}\n"
                f"{usage.shares[j, c]:.1%} of that depth's {WEIGHT_WORDS[usage.weight]}\n"
                f"{int(usage.split_counts[j, c])} split nodes")
    return hover


def position_hover(usage):
    """Hover text for the node-position map: the features splitting at that position."""
    def hover(event) -> str | None:
        d = int(round(event.ydata))
        if not 0 <= d <= usage.max_depth or not 0 <= event.xdata <= 1:
            return None
        pos = 2 ** d - 1 + min(int(event.xdata * 2 ** d), 2 ** d - 1)
        hits = np.flatnonzero(usage.positions == pos)
        if not hits.size:
            return None
        c = int(hits[0])
        col = usage.shares[:, c]
        top = [j for j in np.argsort(-col)[:4] if col[j] > 0]
        lines = [f"position {pos} (depth {d}): {int(usage.n_reached[c])} of {usage.n_trees} "
                 "trees split here"]
        lines += [f"  {usage.feature_names[j]}: {col[j]:.1%} ({int(usage.split_counts[j, c])})"
                  for j in top]
        return "\n".join(lines)
    return hover


def strips_hover(profiles, flags):
    """Hover text for the threshold strips: the cuts under the pointer."""
    labels = {figs.flag_label(f.feature, flags, 26): f for f in profiles.features}

    def hover(event) -> str | None:
        fc = labels.get(event.inaxes.get_ylabel())
        if fc is None or not fc.cuts.size:
            return None
        x = event.xdata
        where = fc.quantiles if profiles.has_data else fc.cuts
        span = 1.0 if profiles.has_data else float(np.ptp(fc.cuts) or 1.0)
        near = np.flatnonzero(np.abs(where - x) <= 0.0125 * span)
        if not near.size:
            return f"{fc.feature}: {fc.n_splits} splits over {fc.cuts.size} distinct cuts"
        lines = [f"{fc.feature}:"]
        for k in near[np.argsort(-fc.counts[near])][:5]:
            q = "" if np.isnan(fc.quantiles[k]) else f", sends {fc.quantiles[k]:.0%} of values left"
            lines.append(f"  cut {fc.cuts[k]:.5g}: {int(fc.counts[k])} splits{q}")
        if near.size > 5:
            lines.append(f"  … {near.size - 5} more cuts here")
        return "\n".join(lines)
    return hover


def importance_hover(cmp, flags, fig, effects=None):
    """Hover text for the importance bars (with the mean |contribution| once the cases step
    has run)."""
    labels = _labels(cmp.feature_names, flags)
    first = fig.axes[0] if fig.axes else None

    def hover(event) -> str | None:
        if first is None:
            return None
        ticks = [t.get_text() for t in first.get_yticklabels()]
        r = int(round(event.ydata))
        if not 0 <= r < len(ticks) or ticks[r] not in labels:
            return None
        j = labels[ticks[r]]
        text = (f"{cmp.feature_names[j]}\nimpurity importance {cmp.impurity[j]:.4f} "
                f"(rank {int(cmp.impurity_rank[j])})")
        if cmp.has_permutation:
            text += (f"\npermutation importance {cmp.permutation_mean[j]:.4f} ± "
                     f"{cmp.permutation_std[j]:.4f} (rank {int(cmp.permutation_rank[j])})")
        if effects is not None and cmp.feature_names[j] in effects.importance:
            ranks = contribution_ranks(effects)
            text += (f"\nmean |contribution| {effects.importance[cmp.feature_names[j]]:.4g} "
                     f"(rank {ranks[cmp.feature_names[j]]})")
        return text
    return hover


def contribution_ranks(effects) -> dict[str, int]:
    """Each feature's rank by mean |contribution| (1 = largest; ties by feature order)."""
    return {name: r + 1 for r, name in enumerate(effects.ranking())}


def effects_of(review):
    """The review's effects (from the cases step), or None."""
    cases = review.cases if review is not None else None
    return getattr(cases, "effects", None) if cases is not None else None


def output_words(effects) -> str:
    return ("probability, summed over the classes" if effects.output == "probability"
            else "margin (log-odds), summed over the outputs")


def comparison_hover(cmp, flags, fig):
    labels = _labels(cmp.feature_names, flags)
    image_ax = _image_axes(fig)

    def hover(event) -> str | None:
        if event.inaxes is not image_ax:
            return None
        j = _row_feature(event, image_ax, labels)
        c = int(round(event.xdata))
        if j is None or not 0 <= c < cmp.depths.shape[0]:
            return None
        return (f"{cmp.feature_names[j]} at depth {int(cmp.depths[c])}\n"
                f"{cmp.labels[0]}: {cmp.shares_a[j, c]:.1%}   {cmp.labels[1]}: "
                f"{cmp.shares_b[j, c]:.1%}\nchange {100 * cmp.share_difference[j, c]:+.1f} points")
    return hover


def cut_sentences(effects) -> str:
    """Each surrogate cut on an effect curve in words, then the top features it leaves out."""
    lines = [f"• {cut.statement}" for curve in effects.curves for cut in curve.cuts]
    uncut = [curve.feature for curve in effects.curves if not curve.cuts]
    if uncut:
        lines.append(f"The surrogate does not split on {', '.join(uncut)}.")
    return "\n".join(lines)


# ---------------------------------------------------------------------------- the page
class FlagGrid(QWidget):
    """Every feature with two checkboxes, protected and forbidden (at most one of them)."""

    COLUMNS = 4

    def __init__(self, on_change) -> None:
        super().__init__()
        self.grid = QGridLayout(self)
        self.grid.setContentsMargins(0, 0, 0, 0)
        self.grid.setHorizontalSpacing(18)
        self.grid.setVerticalSpacing(2)
        self.on_change = on_change
        self.boxes: dict[tuple[str, str], QCheckBox] = {}
        # one style sheet for every box (a sheet per box costs a style of its own per box)
        self.setStyleSheet("".join(f'QCheckBox[flag="{kind}"] {{ color: {flag_style(kind)[1]}; }}'
                                   for kind in ("protected", "forbidden")))

    def fill(self, names: list[str], flags: dict[str, str]) -> None:
        while self.grid.count():
            item = self.grid.takeAt(0)
            if item.widget() is not None:
                item.widget().deleteLater()
        self.boxes = {}
        for i, name in enumerate(names):
            r, c = divmod(i, self.COLUMNS)
            label = QLabel(name)
            label.setToolTip(name)
            self.grid.addWidget(label, r, 3 * c)
            for k, kind in enumerate(("protected", "forbidden")):
                box = QCheckBox(flag_style(kind)[0])
                box.setProperty("flag", kind)
                box.setChecked(flags.get(name) == kind)
                box.setToolTip(f"Flag {name} as {kind}")
                box.setAccessibleName(f"{name} {kind}")
                box.toggled.connect(lambda on, n=name, kd=kind: self._toggled(n, kd, on))
                self.grid.addWidget(box, r, 3 * c + 1 + k)
                self.boxes[(name, kind)] = box
        for c in range(self.COLUMNS):
            self.grid.setColumnStretch(3 * c, 1)

    def _toggled(self, name: str, kind: str, on: bool) -> None:
        other = "forbidden" if kind == "protected" else "protected"
        box = self.boxes[(name, other)]
        if on and box.isChecked():
            box.blockSignals(True)
            box.setChecked(False)
            box.blockSignals(False)
        self.on_change(self.flags())

    def set_flag(self, name: str, kind: str | None) -> None:
        """Tick ``kind`` for ``name`` (None clears both), as a click would."""
        if kind is None:
            for k in ("protected", "forbidden"):
                self.boxes[(name, k)].setChecked(False)
        else:
            self.boxes[(name, kind)].setChecked(True)

    def flags(self) -> dict[str, str]:
        return {name: kind for (name, kind), box in self.boxes.items() if box.isChecked()}


class AnatomyPage(Page):
    key = "anatomy"
    title = "Anatomy"
    question = ("Which features does the ensemble split on, at which depths and node positions, "
                "with which cut points, and how important are they?")
    step = "anatomy"

    def __init__(self, window) -> None:
        super().__init__(window)
        self.comparison = None
        self.compare_button = self.add_button("Compare with a second model…",
                                              "Open another model over the same features and "
                                              "see what changed")
        self.compare_button.clicked.connect(self.ask_second_model)
        self.message = wrapped("", muted=True)
        self.body_layout.addWidget(self.message)
        p_glyph, f_glyph = flag_style("protected")[0], flag_style("forbidden")[0]
        flags_card = Card("Flagged features", note=f"Tick {p_glyph} for a feature the model "
                          f"should not decide on (protected), {f_glyph} for one it must not use "
                          "(forbidden). Every figure marks them; forbidden features are kept "
                          "out of the surrogate.")
        self.flag_table = FlagGrid(self._flags_changed)
        flags_card.body.addWidget(self.flag_table)
        self.statements = wrapped("")
        flags_card.body.addWidget(self.statements)
        self.body_layout.addWidget(flags_card)
        self.flags_card = flags_card
        right = QVBoxLayout()
        right.setSpacing(12)
        weight_row = QHBoxLayout()
        weight_row.addWidget(QLabel("Weigh the depth map by"))
        self.weight = QComboBox()
        for w, words in WEIGHT_WORDS.items():
            self.weight.addItem(f"{w}: {words}", w)
        self.weight.currentIndexChanged.connect(lambda _: self.redraw())
        weight_row.addWidget(self.weight)
        weight_row.addStretch(1)
        right.addLayout(weight_row)
        self.views = {k: FigureView() for k in ("depth", "position", "strips", "importance",
                                                  "comparison")}
        for k, v in self.views.items():
            right.addWidget(v)
        self.views["comparison"].setVisible(False)
        right.insertWidget(right.indexOf(self.views["importance"]) + 1, self._measures_card())
        right.insertWidget(right.indexOf(self.measures_card) + 1, self._curves_card())
        self.body_layout.addLayout(right)
        self.body_layout.addStretch(1)
        self._redraw_timer = QTimer(self)
        self._redraw_timer.setSingleShot(True)
        self._redraw_timer.setInterval(150)
        self._redraw_timer.timeout.connect(self.redraw)
        self._drawn_for = None
        self._filled_for = None
        self._effects_for: tuple = ()

    def _measures_card(self) -> Card:
        self.measures_card = Card("Importance, three ways", note="Impurity importance comes "
                                  "from the training splits, permutation importance from "
                                  "shuffling a column of the review data, mean |contribution| "
                                  "from the ensemble's own output row by row. Where their "
                                  "ranks part, look at that feature closely.")
        self.measures_note = wrapped("", muted=True)
        self.measures = QTableWidget(0, 4)
        self.measures.setHorizontalHeaderLabels(["feature", "impurity (rank)",
                                                 "permutation (rank)",
                                                 "mean |contribution| (rank)"])
        self.measures.verticalHeader().setVisible(False)
        self.measures.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.measures.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.measures.setMaximumWidth(900)
        self.measures_card.body.addWidget(self.measures_note)
        self.measures_card.body.addWidget(self.measures)
        return self.measures_card

    def _curves_card(self) -> Card:
        self.curves_card = Card("What the ensemble does with its top features")
        self.curves_note = wrapped("", muted=True)
        self.curves_view = FigureView()
        self.cut_sentences = wrapped("")
        for w in (self.curves_note, self.curves_view, self.cut_sentences):
            self.curves_card.body.addWidget(w)
        return self.curves_card

    # ------------------------------------------------------------------ state
    def reset(self) -> None:
        self.comparison = None
        self._drawn_for = None
        self._filled_for = None
        self._effects_for = ()
        self.curves_view.clear()
        for view in self.views.values():
            view.clear()
        self.views["comparison"].setVisible(False)

    def refresh(self) -> None:
        r = self.review
        has = r is not None and r.anatomy is not None
        self.compare_button.setEnabled(r is not None and r.forest is not None)
        if r is None:
            self.message.setText("Open a model and its data first.")
        elif not has:
            self.message.setText("Anatomy has not run yet: press Run anatomy (Ctrl+R). It maps "
                                 "the splits and computes permutation importance on the review "
                                 "data.")
        else:
            self.message.setText(f"{r.forest.n_trees} trees, {r.forest.n_features} features. "
                                 "Hover over any figure for its numbers.")
        if r is not None and r.forest is not None:
            names = list(r.forest.feature_names)
            if self._filled_for is not r.forest:
                self.flag_table.fill(names, dict(r.settings.flags))
                self._filled_for = r.forest
        saved = getattr(r, "second_model", None) if r is not None else None
        if saved is not None and self.comparison is not saved.comparison:
            self.comparison = saved.comparison
            self._drawn_for = None  # draw the comparison with the rest
        for v in self.views.values():
            v.setVisible(has and (v is not self.views["comparison"] or self.comparison is not None))
        if has and self._drawn_for is not r.anatomy:
            self.redraw()
        self.show_effects()

    def _flags_changed(self, flags: dict[str, str]) -> None:
        r = self.review
        if r is None or r.forest is None:
            return
        try:
            flags = check_flags(r.forest.feature_names, flags)
        except Exception as exc:
            self.window_.show_problem(exc, "flagging features")
            return
        if not self.window_.set_settings(flags=flags):
            return
        if r.anatomy is not None:
            r.anatomy.flags = flag_report(r.forest, flags, r.anatomy.importance)
        self._redraw_timer.start()
        self.window_.refresh_pages()

    # ------------------------------------------------------------------ drawing
    def flags(self) -> dict[str, str]:
        return dict(self.review.settings.flags) if self.review is not None else {}

    def redraw(self) -> None:
        """Draw every figure again (in the views' workers; each shows when it is ready)."""
        r = self.review
        if r is None or r.anatomy is None:
            return
        a, flags = r.anatomy, self.flags()
        usage = a.depth_usage[self.weight.currentData() or "count"]
        views = self.views
        views["depth"].show_built(lambda: figs.depth_usage_figure(usage, flags),
                                  lambda fig: usage_hover(usage, flags, fig))
        views["position"].show_built(lambda: figs.position_map_figure(a.position_usage, flags),
                                     lambda fig: position_hover(a.position_usage))
        views["strips"].show_built(lambda: figs.threshold_strips_figure(a.thresholds, flags=flags),
                                   lambda fig: strips_hover(a.thresholds, flags))
        views["importance"].show_built(
            lambda: figs.importance_figure(a.importance, flags),
            lambda fig: importance_hover(a.importance, flags, fig, effects_of(r)))
        cmp = self.comparison
        if cmp is not None:
            views["comparison"].show_built(lambda: figs.comparison_figure(cmp, flags),
                                           lambda fig: comparison_hover(cmp, flags, fig))
        self.statements.setText("\n".join(f.statement() for f in a.flags.features)
                                or "No feature is flagged.")
        self._drawn_for = a
        self.show_effects()

    # ------------------------------------------------------------------ effects
    def show_effects(self) -> None:
        """The importance table and the effect curves, for the review's anatomy and effects
        (drawn again only when either, or the flags, changed)."""
        r = self.review
        a = r.anatomy if r is not None else None
        eff = effects_of(r)
        show = a is not None or eff is not None
        self.measures_card.setVisible(show)
        self.curves_card.setVisible(show)
        flags = self.flags()
        key = (a, eff, tuple(sorted(flags.items())))
        if not show or (len(self._effects_for) == 3 and key[0] is self._effects_for[0]
                        and key[1] is self._effects_for[1] and key[2] == self._effects_for[2]):
            return
        self._effects_for = key
        self._fill_measures(a.importance if a is not None else None, eff, flags)
        view = self.views["importance"]
        if a is not None and view.figure is not None:  # the hover tells the third measure too
            view.hover = importance_hover(a.importance, flags, view.figure, eff)
        if eff is None:
            self.curves_note.setText("")
            self.curves_view.set_message("The effect curves appear after the cases step "
                                         "(run it on the Cases page: Ctrl+R there).")
            self.cut_sentences.setText("")
            return
        self.curves_note.setText(f"From the cases step, on "
                                 f"{eff.sample.get('description', 'a sample of the rows')}. "
                                 "The surrogate's cuts are drawn where they fall; each one in "
                                 "words under the figure.")
        self.curves_view.show_built(lambda: effect_curves_figure(eff, flags))
        self.cut_sentences.setText(cut_sentences(eff))

    def _fill_measures(self, cmp, eff, flags) -> None:
        names = list(cmp.feature_names if cmp is not None else eff.importance)
        if eff is not None:
            order, ranks = eff.ranking(), contribution_ranks(eff)
            self.measures_note.setText(
                f"Mean |contribution|: the average size of each feature's exact Shapley value "
                f"(TreeSHAP) over {eff.sample.get('description', 'the sample')}, in "
                f"{output_words(eff)}. Rows by mean |contribution|.")
        else:
            order = [names[j] for j in np.lexsort((np.arange(len(names)), cmp.impurity_rank))]
            ranks = {}
            self.measures_note.setText("Mean |contribution| appears after the cases step (run "
                                       "it on the Cases page). Rows in impurity order.")
        self.measures.setRowCount(len(order))
        for i, name in enumerate(order):
            cells = [figs.flag_label(name, flags, 40), "—", "—",
                     f"{eff.importance[name]:.4g} (#{ranks[name]})" if eff is not None
                     else "after the cases step"]
            if cmp is not None and name in cmp.feature_names:
                j = cmp.feature_names.index(name)
                cells[1] = f"{cmp.impurity[j]:.4f} (#{int(cmp.impurity_rank[j])})"
                if cmp.has_permutation:
                    cells[2] = (f"{cmp.permutation_mean[j]:.4f} ± {cmp.permutation_std[j]:.4f} "
                                f"(#{int(cmp.permutation_rank[j])})")
            for c, text in enumerate(cells):
                item = QTableWidgetItem(text)
                item.setData(Qt.ItemDataRole.UserRole, name)
                if c:
                    item.setTextAlignment(Qt.AlignmentFlag.AlignRight
                                          | Qt.AlignmentFlag.AlignVCenter)
                self.measures.setItem(i, c, item)
        shown = min(len(order), 20)  # taller tables scroll
        self.measures.setFixedHeight(self.measures.horizontalHeader().height()
                                     + 2 * self.measures.frameWidth() + 2
                                     + sum(self.measures.rowHeight(i) for i in range(shown)))

    # ------------------------------------------------------------------ second model
    def ask_second_model(self) -> None:
        from ..open_dialog import MODEL_FILTER

        if self.review is None or self.review.forest is None:
            self.window_.say("Open a model and run intake before comparing with another.")
            return
        path, _ = QFileDialog.getOpenFileName(self, "Open a second model over the same "
                                              "features", "", MODEL_FILTER)
        if path:
            self.compare_with(path)

    def compare_with(self, path, trusted: bool = False) -> bool:
        """Load ``path`` in a worker and show how it differs from the reviewed model; it
        becomes the review's second model (saved, reported and re-checked with it)."""
        self._second_path = Path(path)
        if self.window_.runner.busy:
            self.window_.say("Wait for the running step before opening a second model.")
            return False
        from ...analysis.compare import compare_models
        from ...loaders import load_model

        forest_a = self.review.forest
        label_a = Path(self.review.inputs.model).name
        label_b = Path(path).name
        if label_b == label_a:
            label_b = f"{label_b} (second)"

        def work():
            return compare_models(forest_a, load_model(path, trusted=trusted),
                                  labels=(label_a, label_b))

        def connect(worker) -> None:
            worker.succeeded.connect(self._compared)
            worker.failed.connect(self._compare_failed)
        self.window_.runner.run_call(work, kind="compare", connect=connect)
        self.window_.say(f"Reading {Path(path).name}…")
        return True

    def _compare_failed(self, exc) -> None:
        self.window_.show_problem(exc, "opening the second model")

    def _compared(self, cmp) -> None:
        self.comparison = cmp
        self._record_second_model()
        view = self.views["comparison"]
        view.setVisible(True)
        flags = self.flags()
        view.show_built(lambda: figs.comparison_figure(cmp, flags),
                        lambda fig: comparison_hover(cmp, flags, fig))
        self.window_.say(f"Compared with {cmp.labels[1]}: appeared {', '.join(cmp.appeared) or 'none'}; "
                         f"vanished {', '.join(cmp.vanished) or 'none'}.")

    def _record_second_model(self) -> None:
        """Make the compared file the review's second model; once the surrogate has run, the
        second_model step adds the two models' agreement and what the surrogate explains."""
        r, path = self.review, getattr(self, "_second_path", None)
        if r is None or path is None:
            return
        if self.window_.runner.busy:  # the comparison's own worker is still closing
            QTimer.singleShot(50, self._record_second_model)
            return
        r.inputs.second_model = path
        r.results.pop("second_model", None)
        self.window_.dirty = True
        if r.done("surrogate"):
            self.window_.run_steps(["second_model"])
        else:
            self.window_.say(f"{path.name} is the review's second model: its agreement with "
                             "the first is measured once the surrogate has run.")

    def status_note(self) -> str:
        r = self.review
        if r is None or r.anatomy is None:
            return ""
        n = len(r.settings.flags)
        return f"{n} flagged" if n else "no flags"
