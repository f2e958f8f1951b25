"""Intake: the files, whether they were safe to open, whether the columns fit, whether
Grovewise reproduces the model exactly, and what the model is."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QGridLayout, QHBoxLayout, QLabel, QPushButton, QVBoxLayout, QFrame

from ...loaders.model_files import (CATBOOST_SUFFIXES, JSON_SUFFIXES, LIGHTGBM_SUFFIXES,
                                    ONNX_SUFFIXES, PICKLE_SUFFIXES, SKOPS_SUFFIXES,
                                    XGBOOST_SUFFIXES)
from ...summary import KIND_NAMES
from ..widgets import Card, KeyValues, Verdict, wrapped
from .base import Page


def safety_verdict(model: Path, trusted: bool) -> tuple[str, str]:
    """(kind, text): how the model file was opened, by its type and the trust choice."""
    suffix = Path(model).suffix.lower()
    if suffix in XGBOOST_SUFFIXES:
        return "good", ("XGBoost's own model format: read by XGBoost as data; no code in the "
                        "file runs.")
    if suffix in JSON_SUFFIXES:
        return "good", ("a JSON model (XGBoost, LightGBM's dump or CatBoost's export): read as "
                        "data; no code in the file runs.")
    if suffix in LIGHTGBM_SUFFIXES:
        return "good", ("LightGBM's model text: parsed by Grovewise first, then read by "
                        "LightGBM as data; no code in the file runs.")
    if suffix in CATBOOST_SUFFIXES:
        return "good", "CatBoost's model format: read by CatBoost as data; no code runs."
    if suffix in ONNX_SUFFIXES:
        return "good", ("an ONNX model: a graph of standard operators, read as data; no code "
                        "in the file runs.")
    if suffix in SKOPS_SUFFIXES:
        if trusted:
            return "neutral", ("skops file opened as trusted: types outside the expected set "
                               "were allowed because you said the file is trusted.")
        return "good", ("skops file: only the types a tree ensemble needs were accepted; no "
                        "code in the file runs.")
    if suffix in PICKLE_SUFFIXES:
        return "bad", ("pickle/joblib file: it can run code when opened and was opened only "
                       "because you marked it as trusted. Prefer skops or XGBoost files.")
    return "neutral", "unknown file type."


def short_hash(h: str | None) -> str:
    return "" if not h else f"{h[:16]}…{h[-8:]}"


class ProblemPanel(QFrame):
    """The problems met while opening files, listed on the Intake page itself: what went
    wrong (the same words the command line prints) and what to do, with a way to open other
    files at once. It never blocks the window: every page and menu stays usable."""

    def __init__(self, window) -> None:
        super().__init__()
        self.window_ = window
        self.setObjectName("problemPanel")
        self.setStyleSheet("QFrame#problemPanel { background: #f7e9e9; border: 1px solid "
                           "#c98c8c; border-left: 5px solid #9b2c2c; border-radius: 4px; }")
        lay = QVBoxLayout(self)
        lay.setContentsMargins(14, 10, 14, 10)
        lay.setSpacing(6)
        self.title = QLabel()
        self.title.setStyleSheet("font-size: 14px; font-weight: 600; color: #7a1f1f; "
                                 "border: none;")
        self.message = self._text()
        self.advice = self._text()
        self.advice.setStyleSheet("color: #5f2a2a; border: none;")
        lay.addWidget(self.title)
        lay.addWidget(self.message)
        lay.addWidget(self.advice)
        row = QHBoxLayout()
        self.open_button = QPushButton("Open other files…")
        self.open_button.clicked.connect(lambda: self.window_.ask_open())
        self.dismiss_button = QPushButton("Dismiss")
        self.dismiss_button.clicked.connect(self.clear)
        row.addWidget(self.open_button)
        row.addWidget(self.dismiss_button)
        row.addStretch(1)
        lay.addLayout(row)
        self.shown: list = []  # the problems of this attempt to open files, latest last
        self.setVisible(False)

    @staticmethod
    def _text() -> QLabel:
        label = wrapped("")  # selectable: the message can be copied into a report of it
        label.setStyleSheet("border: none;")
        return label

    def show_problem(self, problem) -> None:
        """List ``problem`` (a :class:`~..problems.Problem`) as the latest one."""
        self.shown.append(problem)
        self.title.setText(problem.title)
        self.message.setText(problem.message)
        self.advice.setText(problem.advice)
        self.advice.setVisible(bool(problem.advice))
        self.setVisible(True)

    def clear(self) -> None:
        self.shown = []
        self.setVisible(False)


class IntakePage(Page):
    key = "intake"
    title = "Intake"
    question = ("Were the files safe to open, do the data's columns fit the model, and does "
                "Grovewise reproduce the model's own predictions exactly?")
    step = "intake"

    def __init__(self, window) -> None:
        super().__init__(window)
        self.problem_panel = ProblemPanel(window)
        self.body_layout.addWidget(self.problem_panel)
        self.empty = self._empty_state()
        self.body_layout.addWidget(self.empty)
        self.grid = QGridLayout()
        self.grid.setSpacing(12)
        self.files = Card("Files")
        self.files_kv = KeyValues()
        self.files.body.addWidget(self.files_kv)
        self.safety = Card("Safety")
        self.safety_verdict = Verdict()
        self.safety.body.addWidget(self.safety_verdict)
        self.exact = Card("Exactness", note="Grovewise's own walk of the trees against the "
                                            "library's predict_proba on every review row.")
        self.exact_verdict = Verdict()
        self.exact_kv = KeyValues()
        self.exact.body.addWidget(self.exact_verdict)
        self.exact.body.addWidget(self.exact_kv)
        self.columns = Card("Columns")
        self.columns_verdict = Verdict()
        self.columns_kv = KeyValues()
        self.columns.body.addWidget(self.columns_verdict)
        self.columns.body.addWidget(self.columns_kv)
        self.model = Card("The model")
        self.model_kv = KeyValues()
        self.model.body.addWidget(self.model_kv)
        self.split = Card("Rows for the surrogate")
        self.split_kv = KeyValues()
        self.split.body.addWidget(self.split_kv)
        self.sample_note = wrapped("")
        self.sample_note.setStyleSheet("color: #5f6b75; font-style: italic;")
        self.grid.addWidget(self.files, 0, 0, 1, 2)
        self.grid.addWidget(self.safety, 1, 0)
        self.grid.addWidget(self.exact, 1, 1)
        self.grid.addWidget(self.columns, 2, 0)
        self.grid.addWidget(self.model, 2, 1)
        self.grid.addWidget(self.split, 3, 0)
        self.grid.setColumnStretch(0, 1)
        self.grid.setColumnStretch(1, 1)
        self.grid.setAlignment(Qt.AlignmentFlag.AlignTop)
        self.body_layout.addWidget(self.sample_note)
        self.body_layout.addLayout(self.grid)
        self.body_layout.addStretch(1)

    def _empty_state(self) -> QFrame:
        box = QFrame()
        box.setObjectName("emptyState")
        lay = QVBoxLayout(box)
        lay.setContentsMargins(28, 28, 28, 28)
        head = QLabel("Open a trained ensemble and the data it is reviewed on")
        head.setStyleSheet("font-size: 16px; font-weight: 600;")
        lay.addWidget(head)
        lay.addWidget(wrapped("Drop a model file (XGBoost .json or .ubj, LightGBM .txt or "
                              ".json, CatBoost .cbm or .json, ONNX .onnx, scikit-learn models "
                              "and pipelines as .skops; .pkl or .joblib only if "
                              "you trust it) and a data file (.csv, .parquet) anywhere on this "
                              "window, or drop the folder of a saved review.", muted=True))
        row = QHBoxLayout()
        for text, slot in (("Open model and data…", lambda: self.window_.ask_open()),
                           ("Open the bundled sample", lambda: self.window_.open_sample()),
                           ("Open a saved review…", lambda: self.window_.ask_open_review())):
            b = QPushButton(text)
            b.clicked.connect(slot)
            row.addWidget(b)
        row.addStretch(1)
        lay.addLayout(row)
        return box

    def refresh(self) -> None:
        r = self.review
        self.empty.setVisible(r is None)
        cards = (self.files, self.safety, self.exact, self.columns, self.model, self.split)
        for c in cards:
            c.setVisible(r is not None)
        self.sample_note.setVisible(r is not None and self.window_.is_sample)
        self.sample_note.setText("The bundled sample: invented patients of a fictional surgical "
                                 "network and two models trained on them. Nothing in it is a "
                                 "medical finding.")
        if r is None:
            return
        inp, res = r.inputs, r.intake
        files = [("Model file", str(inp.model)),
                 ("Review data", str(inp.data)),
                 ("Target column", inp.target or "none given")]
        if inp.holdout is not None:
            files.append(("Holdout file", str(inp.holdout)))
        if res is not None:
            files.insert(1, ("  sha256", short_hash(res.model_sha256)))
            files.insert(3, ("  sha256", short_hash(res.data_sha256)))
            if res.holdout_sha256:
                files.append(("  sha256", short_hash(res.holdout_sha256)))
        self.files_kv.set_rows(files)
        if res is None:
            note = ("Intake is running…" if self.window_.runner.busy else
                    "Intake stopped on the problem shown above: open other files, or correct "
                    "this one and press Run intake (Ctrl+R)." if "intake" in
                    self.window_.failed_steps else
                    "Intake has not run yet: press Run intake (Ctrl+R).")
            self.safety_verdict.set("neutral", note)
            for c in (self.exact, self.columns, self.model, self.split):
                c.setVisible(False)
            return
        kind, text = safety_verdict(inp.model, inp.trusted)
        self.safety_verdict.set(kind, text)
        ex = res.exactness
        self.exact_verdict.set("good" if ex.passed else "bad", ex.text())
        self.exact_kv.set_rows([
            ("Compared with", ex.library), ("Rows", f"{ex.rows:,}"),
            ("Largest probability difference", f"{ex.max_abs_proba_diff:.1e}"),
            ("Tolerance", f"{ex.tolerance:.0e}"),
            ("Predicted classes", "equal" if ex.predictions_equal else "differ"),
            ("Leaf ids", {True: "equal", False: "differ", None: "not compared"}[ex.leaves_equal])])
        self._columns(res)
        s = res.summary
        self.model_kv.set_rows([
            ("Kind", f"{KIND_NAMES.get(s.kind, s.kind)} ({s.library})"),
            ("Trees", f"{s.n_trees}, depth {s.depth_min} to {s.depth_max}"),
            ("Leaves", f"{s.leaves_total:,} ({s.leaves_per_tree_mean:.1f} per tree)"),
            ("Classes", ", ".join(str(c) for c in s.classes)),
            ("Features", f"{s.n_features}, {len(s.features_used)} used by some split"),
            ("Never used", ", ".join(s.features_never_used) or "none"),
            ("Predicted on the data", "; ".join(f"class {c}: {n:,}" for c, n in
                                               s.predicted_counts.items()))])
        self.split_kv.set_rows([
            ("Fit on", f"{res.train_rows.size:,} rows of the review data"),
            ("Held out", {"split": f"{res.holdout_rows.size:,} rows, stratified by the model's "
                                   f"class (seed {r.settings.seed})",
                          "file": "the holdout file",
                          "none": "nothing: fidelity is in-sample only"}[res.holdout_source])])

    def _columns(self, res) -> None:
        d = res.data_summary
        missing = d.get("missing_values") or {}
        extra = d.get("extra_columns") or []
        ok = d.get("matched_by") == "name"
        text = (f"{d.get('n_features')} features matched by {d.get('matched_by')}"
                + ("" if ok else ": check the column order against the model's features"))
        self.columns_verdict.set("good" if ok else "neutral", text)
        rows = [("Rows", f"{d.get('n_rows', 0):,}"),
                ("Target", d.get("target") or "none"),
                ("Ignored columns", ", ".join(extra) or "none"),
                ("Missing values", ", ".join(f"{k}: {v}" for k, v in missing.items()) or "none")]
        counts = d.get("class_counts") or {}
        if counts:
            rows.append(("Labels in the data", "; ".join(f"class {k}: {v:,}"
                                                         for k, v in counts.items())))
        for note in res.notes:
            rows.append(("Note", note))
        self.columns_kv.set_rows(rows)

    def status_note(self) -> str:
        res = self.review.intake if self.review is not None else None
        if res is None:
            return ""
        return ("exact" if res.exactness.passed else "NOT exact") + \
            f" · {res.exactness.rows:,} rows"
