"""The dialog that opens a model and its review data (and, if wanted, a holdout file)."""

from __future__ import annotations

import csv
from pathlib import Path

from PySide6.QtWidgets import (QCheckBox, QComboBox, QDialog, QDialogButtonBox, QDoubleSpinBox,
                               QFileDialog, QFormLayout, QHBoxLayout, QLabel, QLineEdit,
                               QPushButton, QVBoxLayout, QWidget)

from ..loaders.model_files import PICKLE_SUFFIXES, SUFFIXES
from ..review import ReviewInputs, ReviewSettings
from .widgets import wrapped

MODEL_FILTER = ("Model files (" + " ".join(f"*{s}" for s in SUFFIXES) + ");;All files (*)")
DATA_SUFFIXES = (".csv", ".parquet", ".pq")
DATA_FILTER = "Data files (*.csv *.parquet *.pq);;All files (*)"
NO_TARGET = "(no target column)"


def data_columns(path: str) -> list[str]:
    """The column names of a CSV or Parquet file (empty if it cannot be read)."""
    p = Path(path)
    try:
        if p.suffix.lower() in (".parquet", ".pq"):
            import pyarrow.parquet as pq

            return list(pq.read_schema(p).names)
        with open(p, newline="", encoding="utf-8-sig") as fh:
            return next(csv.reader(fh), [])
    except (OSError, UnicodeDecodeError, csv.Error, ValueError, ImportError):
        return []


class PathField(QWidget):
    """A path line edit with a Browse button."""

    def __init__(self, caption: str, filter_: str, parent=None) -> None:
        super().__init__(parent)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        self.edit = QLineEdit()
        self.edit.setMinimumWidth(320)
        browse = QPushButton("Browse…")
        browse.clicked.connect(self._browse)
        lay.addWidget(self.edit, 1)
        lay.addWidget(browse)
        self.caption, self.filter = caption, filter_

    def _browse(self) -> None:
        start = str(Path(self.edit.text()).parent) if self.edit.text() else ""
        path, _ = QFileDialog.getOpenFileName(self, self.caption, start, self.filter)
        if path:
            self.edit.setText(path)

    def text(self) -> str:
        return self.edit.text().strip()


class OpenDialog(QDialog):
    """Model file, data file, target column, holdout (file or share) and the trust choice."""

    def __init__(self, parent=None, model: str = "", data: str = "", target: str | None = None,
                 holdout: str = "", share: float | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Open a model and its review data")
        lay = QVBoxLayout(self)
        lay.addWidget(wrapped("Choose the trained model and the data it is reviewed on. The "
                              "data's columns must match the model's features; a target column "
                              "is optional."))
        form = QFormLayout()
        self.model = PathField("Model file", MODEL_FILTER)
        self.data = PathField("Review data", DATA_FILTER)
        self.holdout = PathField("Holdout data", DATA_FILTER)
        self.target = QComboBox()
        self.target.setEditable(True)
        self.share = QDoubleSpinBox()
        self.share.setRange(0.0, 0.85)
        self.share.setSingleStep(0.05)
        self.share.setValue(ReviewSettings().holdout_share if share is None else share)
        self.share.setSuffix("  of the rows")
        self.trusted = QCheckBox("I trust where this model file comes from (allows formats that "
                                 "can run code when opened)")
        self.trust_note = wrapped("", muted=True)
        form.addRow("Model file", self.model)
        form.addRow("Review data", self.data)
        form.addRow("Target column", self.target)
        form.addRow("Holdout file (optional)", self.holdout)
        form.addRow("Or hold out", self.share)
        lay.addLayout(form)
        lay.addWidget(self.trusted)
        lay.addWidget(self.trust_note)
        self.problem = QLabel()
        self.problem.setStyleSheet("color: #9b2c2c;")
        self.problem.setWordWrap(True)
        lay.addWidget(self.problem)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Open
                                   | QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self._check_and_accept)
        buttons.rejected.connect(self.reject)
        lay.addWidget(buttons)
        self.data.edit.textChanged.connect(self._fill_targets)
        self.model.edit.textChanged.connect(self._note_trust)
        self.model.edit.setText(model)
        self.data.edit.setText(data)
        self.holdout.edit.setText(holdout or "")
        if target:
            self.target.setCurrentText(target)
        self._note_trust()

    def _fill_targets(self) -> None:
        current = self.target.currentText()
        self.target.clear()
        self.target.addItem(NO_TARGET)
        self.target.addItems(data_columns(self.data.text()))
        if current and current != NO_TARGET:
            self.target.setCurrentText(current)

    def _note_trust(self) -> None:
        unsafe = Path(self.model.text()).suffix.lower() in PICKLE_SUFFIXES
        self.trust_note.setText(
            "This file type (pickle or joblib) can run code when it is opened: Grovewise refuses "
            "it unless you tick the box above." if unsafe else
            "XGBoost and skops files are opened without running code; tick the box only for a "
            "skops file holding types outside the expected set.")

    def _check_and_accept(self) -> None:
        model, data = self.model.text(), self.data.text()
        missing = [name for name, p in (("model file", model), ("review data", data))
                   if not p or not Path(p).is_file()]
        if missing:
            self.problem.setText(f"Choose an existing {' and '.join(missing)}.")
            return
        if self.holdout.text() and not Path(self.holdout.text()).is_file():
            self.problem.setText("The holdout file does not exist; choose it again or leave it empty.")
            return
        self.accept()

    def inputs(self) -> ReviewInputs:
        target = self.target.currentText().strip()
        return ReviewInputs(model=Path(self.model.text()), data=Path(self.data.text()),
                            target=None if target in ("", NO_TARGET) else target,
                            holdout=self.holdout.text() or None, trusted=self.trusted.isChecked())

    def holdout_share(self) -> float:
        return float(self.share.value())
