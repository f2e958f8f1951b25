"""Sign-off: who reviewed, the decision and its conditions, notes, the cautions, the model's
own performance on the review data, a preview of the report (the real PDF), and its export
as HTML or PDF."""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

from PySide6.QtWidgets import (QButtonGroup, QFileDialog, QFormLayout, QHBoxLayout, QLineEdit,
                               QPlainTextEdit, QPushButton, QRadioButton, QVBoxLayout)

from ...errors import GrovewiseError
from ...report.figures_performance import reliability_figure
from ...review import DECISION_LABELS, DECISIONS, REPORT_STEPS, Reviewer
from .. import report_bridge, theme
from ..widgets import (CautionBox, Card, FigureView, KeyValues, PdfPreview, fill_table,
                       readonly_table, wrapped)
from ..workers import LatestCall
from .base import Page

PREVIEW_HEIGHT = 760  # the PDF's pages scroll inside it


class SignoffPage(Page):
    key = "signoff"
    title = "Sign-off"
    question = ("Who reviewed the model, what did they decide and on which conditions? The "
                "report records it with every result and setting.")

    def __init__(self, window) -> None:
        super().__init__(window)
        self.record_button = self.add_button("Record the decision", "Store the reviewer's "
                                             "fields and decision in the review (Ctrl+R)", True)
        self.record_button.clicked.connect(self.record)
        self.message = wrapped("", muted=True)
        self.body_layout.addWidget(self.message)
        row = QHBoxLayout()
        row.setSpacing(12)
        card = Card("The reviewer")
        form = QFormLayout()
        self.name = QLineEdit()
        self.role = QLineEdit()
        self.role.setPlaceholderText("e.g. model validator, clinical lead")
        form.addRow("Name", self.name)
        form.addRow("Role", self.role)
        card.body.addLayout(form)
        self.decision_group = QButtonGroup(self)
        self.decisions: dict[str, QRadioButton] = {}
        dec_box = QVBoxLayout()
        for d in DECISIONS:
            b = QRadioButton(DECISION_LABELS[d])
            self.decision_group.addButton(b)
            self.decisions[d] = b
            dec_box.addWidget(b)
            b.toggled.connect(self._decision_changed)
        card.body.addWidget(wrapped("Decision"))
        card.body.addLayout(dec_box)
        self.conditions = QPlainTextEdit()
        self.conditions.setPlaceholderText("The conditions of the approval, one per line")
        self.conditions.setMaximumHeight(110)
        self.notes = QPlainTextEdit()
        self.notes.setPlaceholderText("Notes for the record")
        self.notes.setMaximumHeight(130)
        card.body.addWidget(wrapped("Conditions"))
        card.body.addWidget(self.conditions)
        card.body.addWidget(wrapped("Notes"))
        card.body.addWidget(self.notes)
        self.signed = wrapped("", muted=True)
        card.body.addWidget(self.signed)
        card.setMinimumWidth(320)
        card.setMaximumWidth(460)
        row.addWidget(card)
        right = QVBoxLayout()
        self.caution = CautionBox()
        right.addWidget(self.caution)
        self.summary_card = Card("What the report will hold")
        self.summary = KeyValues()
        self.summary_card.body.addWidget(self.summary)
        right.addWidget(self.summary_card)
        ex = QHBoxLayout()
        self.export_html = QPushButton("Export HTML…")
        self.export_pdf = QPushButton("Export PDF…")
        self.export_both = QPushButton("Export both…")
        self.export_html.clicked.connect(lambda: self.ask_export(("html",)))
        self.export_pdf.clicked.connect(lambda: self.ask_export(("pdf",)))
        self.export_both.clicked.connect(lambda: self.ask_export(("html", "pdf")))
        for b in (self.export_html, self.export_pdf, self.export_both):
            ex.addWidget(b)
        ex.addStretch(1)
        right.addLayout(ex)
        right.addStretch(1)
        row.addLayout(right, 1)
        self.body_layout.addLayout(row)
        self.body_layout.addWidget(self._performance_card())
        self.preview_card = Card("Preview of the report", note="The PDF itself, as Export "
                                 "PDF writes it, with the fields above as they stand.")
        prow = QHBoxLayout()
        self.preview_button = QPushButton("Update the preview")
        self.preview_button.clicked.connect(self.update_preview)
        prow.addWidget(self.preview_button)
        prow.addStretch(1)
        self.preview_card.body.addLayout(prow)
        self.preview = PdfPreview()
        self.preview.view.setFixedHeight(PREVIEW_HEIGHT)  # hidden (no height) until a PDF
        self.preview.watch(window)  # its temporary files go when the window closes
        self.preview_card.body.addWidget(self.preview)
        self.body_layout.addWidget(self.preview_card)
        self.composer = LatestCall(self, exclusive=False)  # the report for the preview
        self.exported: list[Path] = []

    def _performance_card(self) -> Card:
        """The model's own performance on the review data (when it has the target)."""
        card = Card("The model's own performance")
        self.performance_card = card
        self._performance_for = None  # the result shown
        self.performance_text = wrapped("")
        card.body.addWidget(self.performance_text)
        self.performance_parts = QHBoxLayout()
        self.performance_parts.setSpacing(16)
        left = QVBoxLayout()
        left.addWidget(wrapped("Confusion matrix at the model's own rule (the class of largest "
                               "probability), review data", muted=True))
        self.confusion = readonly_table(["true class"])
        left.addWidget(self.confusion)
        self.performance_numbers = KeyValues()
        left.addWidget(self.performance_numbers)
        self.reliability_note = wrapped("", muted=True)
        left.addWidget(self.reliability_note)
        self.reliability = readonly_table(["from", "to", "rows", "mean predicted",
                                           "observed share"])
        left.addWidget(self.reliability)
        left.addStretch(1)
        self.performance_parts.addLayout(left, 0)
        right = QVBoxLayout()
        self.reliability_view = FigureView()
        self.reliability_view.setMaximumWidth(480)
        right.addWidget(self.reliability_view)
        right.addStretch(1)
        self.performance_parts.addLayout(right, 1)
        card.body.addLayout(self.performance_parts)
        self.performance_caution = wrapped("")
        self.performance_caution.setStyleSheet(f"color: {theme.CAUTION};")
        card.body.addWidget(self.performance_caution)
        return card

    # ------------------------------------------------------------------ fields
    def reset(self) -> None:
        r = self.review
        rv = r.reviewer if r is not None else Reviewer()
        self.name.setText(rv.name)
        self.role.setText(rv.role)
        self.decisions.get(rv.decision, self.decisions["pending"]).setChecked(True)
        self.conditions.setPlainText(rv.conditions)
        self.notes.setPlainText(rv.notes)
        self.composer.drop()
        self.preview.clear()
        self._performance_for = None
        self.reliability_view.clear()

    def _decision_changed(self) -> None:
        d = self.decision()
        self.conditions.setEnabled(d in ("approve_with_conditions", "reject", "pending"))

    def decision(self) -> str:
        return next((d for d, b in self.decisions.items() if b.isChecked()), "pending")

    def fields(self) -> Reviewer:
        return Reviewer(name=self.name.text().strip(), role=self.role.text().strip(),
                        decision=self.decision(), conditions=self.conditions.toPlainText().strip(),
                        notes=self.notes.toPlainText().strip(),
                        signed_at=self.review.reviewer.signed_at if self.review else "")

    def store_fields(self) -> None:
        """Keep what is typed in the review (saving calls this; no validation, no date)."""
        if self.review is not None:
            self.review.reviewer = self.fields()

    def record(self) -> bool:
        """Validate and record the decision with the time it was made."""
        if self.review is None:
            return False
        rv = self.fields()
        try:
            if not rv.name:
                from ...errors import SettingError

                raise SettingError("the sign-off needs the reviewer's name; fill in Name.")
            rv.validate()
        except GrovewiseError as exc:
            self.window_.show_problem(exc, "recording the sign-off")
            return False
        rv.signed_at = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        self.review.reviewer = rv
        self.window_.dirty = True
        self.window_.say(f"Recorded: {DECISION_LABELS[rv.decision]} by {rv.name}.")
        self.window_.refresh_pages()
        return True

    # ------------------------------------------------------------------ state
    def refresh(self) -> None:
        r = self.review
        has = r is not None
        idle = not self.window_.runner.busy
        done = [s for s in REPORT_STEPS if has and r.done(s)]
        missing = [s for s in REPORT_STEPS if s not in done]
        self.record_button.setEnabled(has and idle)
        for w in (self.export_html, self.export_pdf, self.export_both, self.preview_button):
            w.setEnabled(has and idle and not missing and report_bridge.available())
        if not has:
            self.message.setText("Open a model and its data first.")
            self.summary.set_rows([])
            self._show_performance()
            return
        self.message.setText("Every step has run: the report can be written." if not missing else
                             f"The report needs every step; not run yet: {', '.join(missing)} "
                             "(Steps ▸ Run every step, Ctrl+Shift+R).")
        if self.preview.path is None and not self.composer.busy:
            self.preview.set_message(
                "The report composer is not in this version of Grovewise yet; the preview "
                "appears here when it is." if not report_bridge.available() else
                "The preview of the report's PDF appears here once every step has run."
                if missing else "Press Update the preview to see the report's PDF here.")
        rv = r.reviewer
        self.signed.setText(f"Recorded {rv.signed_at}: {DECISION_LABELS.get(rv.decision, rv.decision)}"
                            if rv.signed_at else "Not recorded yet.")
        rows = [("Steps in it", ", ".join(done) or "none"),
                ("Model", str(r.inputs.model)), ("Data", str(r.inputs.data))]
        if r.surrogate is not None:
            cert = r.surrogate.certificate
            rows.append(("Surrogate", f"status {cert.get('status')}, holdout fidelity "
                                      "(unweighted) "
                         f"{_pct(r.surrogate.fidelity['surrogate']['holdout'])} (greedy "
                         f"{_pct(r.surrogate.fidelity['greedy']['holdout'])})"))
        rows.append(("Decision", DECISION_LABELS.get(rv.decision, rv.decision)
                     + (f" by {rv.name}" if rv.name else "")))
        rows.append(("Report", "HTML and PDF" if report_bridge.available() else
                     "the report composer is not in this version yet"))
        self.summary.set_rows(rows)
        self._show_performance()

    def _show_performance(self) -> None:
        """The performance the intake step measured, in the report's words; one line when
        there is none (no target, or no intake yet)."""
        r = self.review
        intake = r.intake if r is not None else None
        perf = getattr(intake, "performance", None)
        if perf is not None and self._performance_for is perf:
            return
        self._performance_for = perf
        shown = perf is not None
        for part in (self.confusion, self.performance_numbers, self.reliability_view,
                     self.reliability_note, self.reliability, self.performance_caution):
            part.setVisible(shown)
        if not shown:
            self.reliability_view.clear()
            self.performance_text.setText(_no_performance(r))
            return
        lines = [line for line in perf.text().splitlines() if line != perf.caution]
        self.performance_text.setText("\n".join(lines))
        self.performance_caution.setText(perf.caution)
        classes = list(perf.classes)
        self.confusion.setColumnCount(1 + len(classes))
        self.confusion.setHorizontalHeaderLabels(["true class"]
                                                 + [f"predicted {c}" for c in classes])
        fill_table(self.confusion, [[c] + [f"{int(v):,}" for v in row]
                                    for c, row in zip(classes, perf.confusion)],
                   right=range(1, 1 + len(classes)))
        self.performance_numbers.set_rows([("Brier score", perf.brier_definition)])
        self.reliability_note.setText(f"Reliability ({perf.reliability_definition})")
        fill_table(self.reliability, [[f"{b.lower:.2f}", f"{b.upper:.2f}", f"{b.count:,}",
                                       f"{b.mean_predicted:.3f}", f"{b.observed_share:.3f}"]
                                      for b in perf.reliability], right=range(5))
        self.reliability_view.show_built(lambda: reliability_figure(perf))

    def set_busy(self, busy: bool) -> None:
        super().set_busy(busy)
        self.refresh()

    # ------------------------------------------------------------------ preview and export
    def ready(self) -> bool:
        return self.review is not None and all(self.review.done(s) for s in REPORT_STEPS)

    def update_preview(self) -> bool:
        """Write the report's PDF for the preview (in the page's worker: it takes seconds);
        the preview shows it when written. False if it cannot."""
        if not self.ready():
            return False
        if not report_bridge.available():
            self._preview_ready(None)
            return False
        self.store_fields()
        self.preview.set_message("Writing the report's PDF for the preview…")
        self.composer.request(report_bridge.preview_pdf, self.review, self.preview.new_path(),
                              done=self._preview_ready, failed=self._preview_failed)
        return True

    def _preview_ready(self, path: Path | None) -> None:
        if path is None:
            self.preview.clear("The report composer is not in this version of Grovewise yet; "
                               "the preview appears here when it is.")
            return
        if self.preview.show_file(path):
            n = self.preview.page_count()
            self.preview.set_message(f"{n} page{'s' if n != 1 else ''}, written "
                                     f"{_dt.datetime.now().strftime('%H:%M:%S')}; press "
                                     "Update the preview after changing the fields above.")

    def _preview_failed(self, exc) -> None:
        self.preview.clear("The preview could not be written.")
        self.window_.show_problem(exc, "writing the report preview")

    def ask_export(self, formats) -> None:
        folder = QFileDialog.getExistingDirectory(self, "Export the report into a folder")
        if folder:
            self.export(folder, formats)

    def export(self, folder, formats=("html", "pdf")) -> bool:
        """Write the report in a worker; the status bar says where it went."""
        if not self.ready() or self.window_.runner.busy:
            self.window_.say("The report needs every step first (Ctrl+Shift+R runs them).")
            return False
        self.store_fields()
        def connect(worker) -> None:
            worker.succeeded.connect(self._exported)
            worker.failed.connect(self._export_failed)
        self.window_.runner.run_call(report_bridge.export_report, self.review, Path(folder),
                                     tuple(formats), kind="export", connect=connect)
        self.window_.say(f"Writing the report ({', '.join(formats)}) to {folder}…")
        return True

    def _export_failed(self, exc) -> None:
        self.window_.show_problem(exc, "writing the report")

    def _exported(self, files) -> None:
        self.exported = list(files)
        self.window_.say("Report written: " + ", ".join(str(f) for f in self.exported))

    def preparing(self) -> bool:
        return super().preparing() or self.preview.rendering

    def prepare_capture(self) -> None:
        if report_bridge.available() and self.ready() and self.preview.path is None \
                and not self.composer.busy:
            self.update_preview()

    def status_note(self) -> str:
        rv = self.review.reviewer if self.review is not None else None
        if rv is None:
            return ""
        return DECISION_LABELS.get(rv.decision, rv.decision) if rv.signed_at else "not recorded"


def _pct(v) -> str:
    return "—" if v is None else f"{100 * v:.1f}%"


def _no_performance(review) -> str:
    """Why the model's own performance is not shown, in one line."""
    if review is None or review.intake is None:
        return "Shown once the model and its data are open (it needs the data's target column)."
    if not review.inputs.target:
        return ("Not measured: the review data has no target column (name it when opening the "
                "data to see the model's AUC, Brier score, reliability and confusion matrix).")
    notes = [n for n in getattr(review.data, "notes", []) if "performance" in n]
    return notes[0] if notes else "Not measured on this review's data."
