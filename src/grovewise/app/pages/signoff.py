"""Sign-off: who reviewed, the decision and its conditions, notes, the cautions, a preview of
the report, and its export as HTML or PDF."""

from __future__ import annotations

import base64
import datetime as _dt
from pathlib import Path

from PySide6.QtCore import QByteArray, QUrl
from PySide6.QtGui import QImage, QTextDocument
from PySide6.QtWidgets import (QButtonGroup, QFileDialog, QFormLayout, QHBoxLayout, QLineEdit,
                               QPlainTextEdit, QPushButton, QRadioButton, QTextBrowser,
                               QVBoxLayout)

from ...errors import GrovewiseError
from ...review import DECISION_LABELS, DECISIONS, STEPS, Reviewer
from .. import report_bridge
from ..widgets import CautionBox, Card, KeyValues, wrapped
from ..workers import LatestCall
from .base import Page


class ReportPreview(QTextBrowser):
    """A QTextBrowser that shows the report's embedded (``data:``) images."""

    def loadResource(self, kind: int, url: QUrl):
        text = url.toString()
        if kind == QTextDocument.ResourceType.ImageResource.value and text.startswith("data:"):
            _, _, payload = text.partition(",")
            img = QImage()
            img.loadFromData(QByteArray(base64.b64decode(payload)))
            if img.width() > 900:
                img = img.scaledToWidth(900)
            return img
        return super().loadResource(kind, url)


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
        self.preview_card = Card("Preview of the report")
        prow = QHBoxLayout()
        self.preview_button = QPushButton("Update the preview")
        self.preview_button.clicked.connect(self.update_preview)
        prow.addWidget(self.preview_button)
        prow.addStretch(1)
        self.preview_card.body.addLayout(prow)
        self.preview = ReportPreview()
        self.preview.setOpenLinks(False)
        self.preview.setMinimumHeight(460)
        self.preview_card.body.addWidget(self.preview)
        self.body_layout.addWidget(self.preview_card)
        self.composer = LatestCall(self, exclusive=False)  # the report for the preview
        self.exported: list[Path] = []

    # ------------------------------------------------------------------ fields
    def reset(self) -> None:
        r = self.review
        rv = r.reviewer if r is not None else Reviewer()
        self.name.setText(rv.name)
        self.role.setText(rv.role)
        self.decisions.get(rv.decision, self.decisions["pending"]).setChecked(True)
        self.conditions.setPlainText(rv.conditions)
        self.notes.setPlainText(rv.notes)
        self.preview.setHtml("")
        self.composer.drop()

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
        done = [s for s in STEPS if has and r.done(s)]
        missing = [s for s in STEPS if s not in done]
        self.record_button.setEnabled(has and idle)
        for w in (self.export_html, self.export_pdf, self.export_both, self.preview_button):
            w.setEnabled(has and idle and not missing and report_bridge.available())
        if not has:
            self.message.setText("Open a model and its data first.")
            self.summary.set_rows([])
            return
        self.message.setText("Every step has run: the report can be written." if not missing else
                             f"The report needs every step; not run yet: {', '.join(missing)} "
                             "(Steps ▸ Run every step, Ctrl+Shift+R).")
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

    def set_busy(self, busy: bool) -> None:
        super().set_busy(busy)
        self.refresh()

    # ------------------------------------------------------------------ preview and export
    def ready(self) -> bool:
        return self.review is not None and all(self.review.done(s) for s in STEPS)

    def update_preview(self) -> bool:
        """Compose the report for the preview (in the page's worker: its figures take
        seconds on a large review); the preview shows it when ready. False if it cannot."""
        if not self.ready():
            return False
        if not report_bridge.available():
            self._preview_ready(None)
            return False
        self.store_fields()
        self.preview.setPlainText("Composing the preview…")
        self.composer.request(report_bridge.preview_html, self.review, done=self._preview_ready,
                              failed=self._preview_failed)
        return True

    def _preview_ready(self, text: str | None) -> None:
        if text is None:
            self.preview.setPlainText("The report composer is not in this version of Grovewise "
                                      "yet; the preview appears here when it is.")
            return
        self.preview.setHtml(text)

    def _preview_failed(self, exc) -> None:
        self.preview.setPlainText("")
        self.window_.show_problem(exc, "composing the report preview")

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

    def prepare_capture(self) -> None:
        if report_bridge.available() and self.ready() and not self.preview.toPlainText():
            self.update_preview()

    def status_note(self) -> str:
        rv = self.review.reviewer if self.review is not None else None
        if rv is None:
            return ""
        return DECISION_LABELS.get(rv.decision, rv.decision) if rv.signed_at else "not recorded"


def _pct(v) -> str:
    return "—" if v is None else f"{100 * v:.1f}%"
