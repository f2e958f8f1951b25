"""The main window: a step rail on the left, the six pages on the right, and the workers.

The window owns one :class:`~grovewise.review.Review` at a time. Every step runs in a
worker thread (:mod:`.workers`); the window only routes the results to the pages, keeps the
rail's states, and turns problems into dialogs, or, for files that cannot be opened, into
the Intake page's problem panel (:mod:`.problems`).
"""

from __future__ import annotations

import copy
import dataclasses
import time
from pathlib import Path

from PySide6.QtCore import QEventLoop, QSettings, QTimer, Signal, Slot
from PySide6.QtWidgets import (QApplication, QFileDialog, QHBoxLayout, QLabel, QMainWindow,
                               QMessageBox, QProgressBar, QPushButton, QStackedWidget, QWidget)

from ..errors import GrovewiseError, UnsafeModelError
from ..loaders.model_files import SUFFIXES as MODEL_SUFFIXES
from ..review import (FROM_SURROGATE, REQUIRES, REVIEW_FILE, STEPS, Review, ReviewInputs,
                      ReviewSettings)
from . import problems, recent, report_bridge, theme
from .capture import capture_name, capture_page
from .icon import app_icon
from .menus import build_menus
from .open_dialog import DATA_SUFFIXES, OpenDialog
from .pages.anatomy import AnatomyPage
from .pages.cases import CasesPage
from .pages.intake import IntakePage
from .pages.proximity import ProximityPage
from .pages.signoff import SignoffPage
from .pages.surrogate import SurrogatePage
from .rail import StepRail
from .workers import LatestCall, TaskRunner, favour_gui_thread, settle_collector

PAGE_ORDER = ("intake", "anatomy", "proximity", "surrogate", "cases", "signoff")
# Problems of these contexts are listed on the Intake page's problem panel, not in a dialog.
PANEL_CONTEXTS = frozenset({"opening the files", "opening the sample", "opening the saved review",
                            "in the intake step"})
# The settings each step's result depends on: changing one marks the result "stale".
DEPENDS = {
    "intake": ("holdout_share", "seed"),
    "anatomy": ("permutation_repeats", "seed"),
    "proximity": ("proximity_threshold", "seed"),
    "surrogate": ("depth", "max_features_per_split", "alpha", "proximity_threshold",
                  "time_limit", "node_limit", "seed", "flags", "holdout_share"),
    "cases": ("depth", "max_features_per_split", "alpha", "proximity_threshold",
              "time_limit", "node_limit", "seed", "flags", "holdout_share"),
}


def sample_review(time_limit: float | None = None) -> Review:
    """A review of the bundled sample (the scikit-learn forest on the invented clinic data)."""
    from ..sample_data import sample_paths

    paths = sample_paths()
    settings = ReviewSettings() if time_limit is None else ReviewSettings(time_limit=time_limit)
    return Review(ReviewInputs(paths["forest"], paths["data"], paths["target"]), settings)


def is_sample_review(review: Review) -> bool:
    """Whether ``review`` reviews the bundled sample's files."""
    from ..sample_data import sample_dir

    try:
        return Path(review.inputs.data).resolve().parent == sample_dir().resolve()
    except OSError:
        return False


class MainWindow(QMainWindow):
    """The Grovewise window over one review."""

    review_changed = Signal()
    results_changed = Signal()
    problem_shown = Signal(str, str)  # title, text (for tests and the log)

    def __init__(self, review: Review | None = None) -> None:
        super().__init__()
        from ..surrogate import warm_up

        warm_up()  # before the window shows: loading compiled code mid-solve stalled it
        self.setWindowTitle("Grovewise")
        self.setWindowIcon(app_icon())
        self.setAcceptDrops(True)
        self.setStyleSheet(theme.STYLE)
        self.review: Review | None = None
        self.review_folder: Path | None = None
        self.dirty = False
        self.confirm_close = True
        self.is_sample = False
        self.ran_with: dict[str, dict] = {}
        self.failed_steps: set[str] = set()
        self.problems: list[problems.Problem] = []
        self.last_outcome = ""
        self.last_cancel_seconds: float | None = None
        self._dialogs: list[QWidget] = []
        self._pending_drop: dict[str, str] = {}
        self.runner = TaskRunner(self)
        self.runner.busy_changed.connect(self._on_busy)
        self._job_started = 0.0
        self._running_step = ""
        self._opening: Path | None = None  # the saved review being read
        self._build_pages()
        self._build_status()
        self._build_menus()
        self._tick = QTimer(self)
        self._tick.setInterval(250)
        self._tick.timeout.connect(self._update_elapsed)
        self.resize(1360, 860)
        self.setMinimumSize(720, 480)
        self.go("intake")
        if review is not None:
            self.set_review(review)
        else:
            self.show_review()
        report_bridge.available()  # imports the report's libraries now, not on a later click
        favour_gui_thread()
        settle_collector()

    # ------------------------------------------------------------------ layout
    def _build_pages(self) -> None:
        self.pages = {p.key: p for p in (IntakePage(self), AnatomyPage(self), ProximityPage(self),
                                         SurrogatePage(self), CasesPage(self), SignoffPage(self))}
        self.rail = StepRail([(k, self.pages[k].title) for k in PAGE_ORDER])
        self.rail.chosen.connect(self.go)
        self.stack = QStackedWidget()
        for key in PAGE_ORDER:
            page = self.pages[key]
            self.stack.addWidget(page)
            page.capture_requested.connect(lambda key: self.capture_current(ask=True))
        central = QWidget()
        lay = QHBoxLayout(central)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(0)
        lay.addWidget(self.rail)
        lay.addWidget(self.stack, 1)
        self.setCentralWidget(central)

    def _build_status(self) -> None:
        bar = self.statusBar()
        self.status_text = QLabel("Open a model and its data to begin.")
        self.progress = QProgressBar()
        self.progress.setRange(0, 1000)
        self.progress.setMaximumWidth(220)
        self.progress.setTextVisible(False)
        self.elapsed_label = QLabel("")
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setToolTip("Stop the running step; a solve keeps its best tree (Esc)")
        self.cancel_button.clicked.connect(self.cancel)
        bar.addWidget(self.status_text, 1)
        bar.addPermanentWidget(self.elapsed_label)
        bar.addPermanentWidget(self.progress)
        bar.addPermanentWidget(self.cancel_button)
        self._on_busy(False)

    def _build_menus(self) -> None:
        self.actions_ = build_menus(self)

    # ------------------------------------------------------------------ pages
    def go(self, key: str) -> None:
        page = self.pages[key]
        if page.needs_refresh:
            page.needs_refresh = False
            page.refresh()
        self.stack.setCurrentWidget(page)
        self.rail.select(key)

    def current_key(self) -> str:
        return self.stack.currentWidget().key

    def step_page(self, delta: int) -> None:
        i = PAGE_ORDER.index(self.current_key())
        self.go(PAGE_ORDER[(i + delta) % len(PAGE_ORDER)])

    def show_review(self) -> None:
        for page in self.pages.values():
            page.reset()
        self.refresh_pages()
        self.update_rail()
        self._update_title()
        self._on_busy(self.runner.busy)

    def refresh_pages(self) -> None:
        """Redraw the page on screen; the others redraw when they are next shown (drawing
        every page's figures at once would hold up the window for seconds)."""
        current = self.stack.currentWidget()
        for page in self.pages.values():
            if page is current:
                page.needs_refresh = False
                page.refresh()
            else:
                page.needs_refresh = True
        self.update_rail()
        self._update_title()

    def _update_title(self) -> None:
        if self.review is None:
            self.setWindowTitle("Grovewise")
            self.rail.set_subject("nothing open")
            return
        name = Path(self.review.inputs.model).name
        where = f" — {self.review_folder}" if self.review_folder else ""
        self.setWindowTitle(f"{'* ' if self.dirty else ''}{name}{where} · Grovewise")
        data = Path(self.review.inputs.data).name
        self.rail.set_subject(f"{name}\non {data}" + ("\n(invented sample)" if self.is_sample else ""))

    # ------------------------------------------------------------------ rail states
    def step_state(self, step: str) -> str:
        r = self.review
        if r is None:
            return "waiting"
        if self.runner.busy and self._running_step == step:
            return "running"
        if step in self.failed_steps and not r.done(step):
            return "failed"
        if r.done(step):
            return "stale" if self.is_stale(step) else "done"
        return "ready" if all(r.done(s) for s in REQUIRES[step]) else "waiting"

    def is_stale(self, step: str) -> bool:
        """Whether a setting the step's result depends on changed since it ran."""
        if self.review is None or step not in self.ran_with:
            return False
        now = dataclasses.asdict(self.review.settings)
        then = self.ran_with[step]
        return any(now.get(k) != then.get(k) for k in DEPENDS.get(step, ()))

    def update_rail(self) -> None:
        for key in PAGE_ORDER:
            page = self.pages[key]
            if key == "signoff":
                state = "waiting" if self.review is None else (
                    "done" if self.review.reviewer.signed_at else "ready")
            else:
                state = self.step_state(key)
            self.rail.stations[key].set_state(state, page.status_note() if self.review else "",
                                              self.progress.value() / 1000.0)

    # ------------------------------------------------------------------ opening
    def set_review(self, review: Review, folder: Path | None = None,
                   sample: bool | None = None) -> None:
        """Show ``review`` (nothing is run here)."""
        self.review = review
        self.review_folder = folder
        self.is_sample = is_sample_review(review) if sample is None else sample
        self.dirty = folder is None
        snapshot = dataclasses.asdict(review.settings)
        self.ran_with = {s: copy.deepcopy(snapshot) for s in STEPS if review.done(s)}
        self.failed_steps = set()
        self.pages["intake"].problem_panel.clear()  # a new review: earlier problems are past
        done = [s for s in STEPS if review.done(s)]
        self.say(f"{Path(review.inputs.model).name} on {Path(review.inputs.data).name}: "
                 + (f"{len(done)} of {len(STEPS)} steps done." if done else "no step run yet."))
        self.show_review()
        self.review_changed.emit()

    def open_inputs(self, inputs: ReviewInputs, settings: ReviewSettings | None = None,
                    sample: bool = False) -> bool:
        """Start a new review of ``inputs`` and run its intake. False if it could not start."""
        if not self._may_replace():
            return False
        try:
            review = Review(inputs, settings or ReviewSettings())
        except GrovewiseError as exc:
            self.show_problem(exc, "opening the files")
            return False
        self.set_review(review, sample=sample)
        if not sample:
            recent.add({"kind": "inputs", "model": str(inputs.model), "data": str(inputs.data),
                        "target": inputs.target, "holdout": str(inputs.holdout or "")})
        self.go("intake")
        self.run_steps(["intake"])
        return True

    def open_sample(self, time_limit: float | None = None) -> bool:
        try:
            review = sample_review(time_limit)
        except GrovewiseError as exc:
            self.show_problem(exc, "opening the sample")
            return False
        return self.open_inputs(review.inputs, review.settings, sample=True)

    def ask_open(self, model: str = "", data: str = "", target: str | None = None) -> OpenDialog:
        """Show the open dialog (not blocking); it opens the review when accepted."""
        dlg = OpenDialog(self, model=model, data=data, target=target)
        dlg.accepted.connect(lambda: self.open_inputs(
            dlg.inputs(), ReviewSettings(holdout_share=dlg.holdout_share())))
        self._keep(dlg)
        dlg.open()
        return dlg

    def ask_open_review(self) -> None:
        folder = QFileDialog.getExistingDirectory(self, "Open a saved review (its folder)")
        if folder:
            self.open_review(folder)

    def open_review(self, folder) -> bool:
        """Open the review saved in ``folder``. It is read in a worker (a large review's arrays
        take seconds to check and read) and shown when read; False if it could not start."""
        if not self._may_replace():
            return False
        folder = Path(folder)
        if folder.is_file():
            folder = folder.parent
        self._opening = folder

        def connect(worker) -> None:
            worker.succeeded.connect(self._review_read)
            worker.failed.connect(self._review_not_read)
        self.runner.run_call(Review.open, folder, kind="open", connect=connect)
        self.say(f"Reading the review saved in {folder}…")
        return True

    @Slot(object)
    def _review_read(self, review: Review) -> None:
        folder = self._opening
        self.set_review(review, folder=folder)
        settle_collector()  # the libraries the review needed, and the previous one's leftovers
        recent.add({"kind": "review", "path": str(folder)})
        self.say(f"Opened the review saved in {folder}.")

    @Slot(object)
    def _review_not_read(self, exc: BaseException) -> None:
        # a damaged file of ours must not end the window either: every fault is a dialog
        self.show_problem(exc, "opening the saved review")

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        items = recent.entries()
        if not items:
            act = self.recent_menu.addAction("(nothing yet)")
            act.setEnabled(False)
            return
        for e in items:
            act = self.recent_menu.addAction(recent.label(e))
            act.triggered.connect(lambda _=False, e=e: self.open_recent(e))
        self.recent_menu.addSeparator()
        self.recent_menu.addAction("Clear the list").triggered.connect(lambda: recent.clear())

    def open_recent(self, entry: dict) -> bool:
        if entry.get("kind") == "review":
            return self.open_review(entry["path"])
        return self.open_inputs(ReviewInputs(entry["model"], entry["data"], entry.get("target"),
                                             entry.get("holdout") or None))

    def _may_replace(self) -> bool:
        if self.runner.busy:
            self.say("A step is running; cancel it (Esc) before opening something else.")
            return False
        return True

    # ------------------------------------------------------------------ drag and drop
    def dragEnterEvent(self, event) -> None:
        if event.mimeData().hasUrls() and any(u.isLocalFile() for u in event.mimeData().urls()):
            event.acceptProposedAction()

    def dropEvent(self, event) -> None:
        paths = [u.toLocalFile() for u in event.mimeData().urls() if u.isLocalFile()]
        event.acceptProposedAction()
        self.handle_dropped(paths)

    def handle_dropped(self, paths: list[str]) -> str:
        """Open what was dropped: a saved review, or a model and/or data file.

        Returns what happened: ``"review"``, ``"dialog"`` (the open dialog, prefilled),
        ``"waiting"`` (one file kept until its partner arrives) or ``"ignored"``.
        """
        for p in map(Path, paths):
            if (p.is_dir() and (p / REVIEW_FILE).is_file()) or p.name == REVIEW_FILE:
                return "review" if self.open_review(p) else "ignored"
        for p in map(Path, paths):
            suffix = p.suffix.lower()
            if suffix in DATA_SUFFIXES:
                self._pending_drop["data"] = str(p)
            elif suffix in MODEL_SUFFIXES:
                self._pending_drop["model"] = str(p)
        if not self._pending_drop:
            self.say("Dropped files are not a model, data or saved review Grovewise knows; "
                     "see File ▸ Open for the kinds it reads.")
            return "ignored"
        model = self._pending_drop.get("model") or (
            str(self.review.inputs.model) if self.review is not None else "")
        data = self._pending_drop.get("data") or (
            str(self.review.inputs.data) if self.review is not None else "")
        if model and data:
            self._pending_drop = {}
            self.ask_open(model, data)
            return "dialog"
        missing = "data file" if model else "model file"
        self.say(f"Kept {Path(model or data).name}; now drop the {missing} (or use File ▸ Open).")
        return "waiting"

    # ------------------------------------------------------------------ running
    def run_current(self) -> None:
        page = self.stack.currentWidget()
        if page.key == "signoff":
            self.pages["signoff"].record()
        else:
            page.run()

    def run_steps(self, steps: list[str]) -> bool:
        """Run ``steps`` (with any missing earlier step they need) in a worker."""
        if self.review is None:
            self.say("Open a model and its data first (File ▸ Open, Ctrl+O).")
            return False
        if self.runner.busy:
            self.say("A step is already running; wait for it or cancel it (Esc).")
            return False
        todo: list[str] = []
        for step in steps:
            for need in REQUIRES[step]:
                if not self.review.done(need) and need not in todo:
                    todo.append(need)
            if step not in todo:
                todo.append(step)
        if "surrogate" in todo:  # what was made from the surrogate follows it
            todo += [s for s in ("cases",) + FROM_SURROGATE
                     if s not in todo and self.review.done(s)]
        order = [s for s in STEPS if s in todo]
        self._job_started = time.perf_counter()

        def connect(worker) -> None:
            worker.step_started.connect(self._on_step_started)
            worker.progressed.connect(self._on_progress)
            worker.solver_point.connect(self.pages["surrogate"].add_point)
            worker.step_done.connect(self._on_step_done)
            worker.failed.connect(self._on_step_failed)
            worker.finished.connect(self._on_steps_finished)
        self.runner.run_steps(self.review, order, connect)
        return True

    def cancel(self) -> None:
        if self.runner.busy:
            self.runner.cancel()
            self.say("Cancelling… a solve hands back its best tree within a few seconds.")

    def _on_busy(self, busy: bool) -> None:
        self.progress.setVisible(busy)
        self.cancel_button.setVisible(busy)
        self.elapsed_label.setVisible(busy)
        for key in ("open", "sample", "open_review", "save", "save_as", "export", "run", "run_all"):
            if hasattr(self, "actions_"):
                self.actions_[key].setEnabled(not busy)
        if hasattr(self, "actions_"):
            for key in ("save", "save_as", "export", "run", "run_all"):
                self.actions_[key].setEnabled(not busy and self.review is not None)
        for page in getattr(self, "pages", {}).values():
            page.set_busy(busy)
        if busy:
            self._tick.start() if hasattr(self, "_tick") else None
        elif hasattr(self, "_tick"):
            self._tick.stop()

    def _update_elapsed(self) -> None:
        self.elapsed_label.setText(f"{time.perf_counter() - self._job_started:.0f} s")

    def _on_step_started(self, step: str) -> None:
        self._running_step = step
        self.failed_steps.discard(step)
        self.ran_with[step] = copy.deepcopy(dataclasses.asdict(self.review.settings))
        if step == "surrogate":
            self.pages["surrogate"].start_chart()
        self.progress.setValue(0)
        self.update_rail()

    def _on_progress(self, step: str, fraction: float, message: str) -> None:
        self.progress.setValue(int(1000 * max(0.0, min(1.0, fraction))))
        self.status_text.setText(message)
        st = self.rail.stations.get(step)
        if st is not None:
            st.set_state("running", st.note, fraction)

    def _on_step_done(self, step: str) -> None:
        self.dirty = True
        if step == "intake":  # later results were dropped by the core; the files are fine
            self.pages["intake"].problem_panel.clear()
            for later in STEPS[1:]:
                self.ran_with.pop(later, None)
        self.refresh_pages()
        self.results_changed.emit()

    def _on_step_failed(self, step: str, exc: BaseException) -> None:
        self.failed_steps.add(step)
        self._running_step = ""
        if isinstance(exc, UnsafeModelError) and step == "intake":
            self.ask_trust(exc)
            return
        self.show_problem(exc, f"in the {step} step")

    def _on_steps_finished(self, outcome: str) -> None:
        self.last_outcome = outcome
        if outcome == "cancelled" and self.runner.cancel_requested_at is not None:
            self.last_cancel_seconds = time.perf_counter() - self.runner.cancel_requested_at
            self.say(f"Cancelled; results so far are kept "
                     f"({self.last_cancel_seconds:.1f} s to stop).")
        elif outcome == "done":
            self.say(f"Done in {time.perf_counter() - self._job_started:.1f} s.")
        self._running_step = ""
        QTimer.singleShot(0, self.refresh_pages)

    def ask_trust(self, exc: UnsafeModelError) -> QMessageBox:
        """The trust question for a model file that could run code (not blocking)."""
        box = QMessageBox(QMessageBox.Icon.Warning, "This model file could run code",
                          str(exc), QMessageBox.StandardButton.Cancel, self)
        box.setInformativeText("Open it only if you know where it came from and trust it. "
                               "Grovewise will then load it as it is, running whatever it holds.")
        trust = box.addButton("Open as trusted", QMessageBox.ButtonRole.AcceptRole)
        box.setDefaultButton(QMessageBox.StandardButton.Cancel)

        def answered(_result=None) -> None:
            if box.clickedButton() is trust and self.review is not None:
                self.review.inputs.trusted = True
                self.run_steps(["intake"])
        box.finished.connect(answered)
        self._keep(box)
        box.open()
        self.problems.append(problems.Problem(box.windowTitle(), str(exc), "", True))
        self.problem_shown.emit(box.windowTitle(), str(exc))
        return box

    # ------------------------------------------------------------------ settings from pages
    def set_settings(self, **changes) -> bool:
        """Change review settings (validated); False after showing why not."""
        if self.review is None:
            return False
        new = dataclasses.replace(self.review.settings, **changes)
        try:
            new.validate()
        except GrovewiseError as exc:
            self.show_problem(exc, "checking the settings")
            return False
        self.review.settings = new
        self.dirty = True
        self.update_rail()
        self._update_title()
        return True

    # ------------------------------------------------------------------ saving
    def save(self) -> bool:
        if self.review is None:
            return False
        if self.review_folder is None:
            return self.save_as()
        return self.save_to(self.review_folder)

    def save_as(self) -> bool:
        if self.review is None:
            return False
        folder = QFileDialog.getExistingDirectory(self, "Save the review into a folder")
        return self.save_to(folder) if folder else False

    def save_to(self, folder) -> bool:
        if self.runner.busy:
            self.say("Wait for the running step (or cancel it) before saving.")
            return False
        try:
            self.pages["signoff"].store_fields()
            self.review.save(folder)
        except Exception as exc:
            self.show_problem(exc, "saving the review")
            return False
        self.review_folder = Path(folder)
        self.dirty = False
        recent.add({"kind": "review", "path": str(self.review_folder)})
        self._update_title()
        self.say(f"Saved the review to {self.review_folder}.")
        return True

    def export_report(self) -> None:
        self.go("signoff")
        self.pages["signoff"].ask_export(("html", "pdf"))

    # ------------------------------------------------------------------ captures
    def capture_current(self, ask: bool = False, path=None) -> Path | None:
        key = self.current_key()
        if path is None:
            name = capture_name(PAGE_ORDER.index(key) + 1, key)
            if ask:
                path, _ = QFileDialog.getSaveFileName(self, "Save a capture of this page",
                                                      name, "PNG image (*.png)")
                if not path:
                    return None
            else:
                path = name
        try:
            self.wait_until_prepared(self.pages[key])
            out = capture_page(self.pages[key], path)
        except Exception as exc:
            self.show_problem(exc, "saving the capture")
            return None
        self.say(f"Saved the capture {out}.")
        return out

    def capture_all(self, folder) -> list[Path]:
        """One PNG per page into ``folder``, in page order."""
        folder = Path(folder)
        out = []
        here = self.current_key()
        for i, key in enumerate(PAGE_ORDER):
            self.go(key)
            page = self.pages[key]
            page.prepare_capture()
            QApplication.processEvents()
            self.wait_until_prepared(page)
            out.append(capture_page(page, folder / capture_name(i + 1, key)))
        self.go(here)
        return out

    def wait_until_prepared(self, page, timeout_s: float = 300.0) -> bool:
        """Let the event loop run until ``page`` has drawn what it shows (its figures and
        look-ups run in workers), so a capture never shows "drawing…". False on timeout."""
        deadline = time.monotonic() + timeout_s
        while page.preparing():
            if time.monotonic() > deadline:
                return False
            loop = QEventLoop()
            QTimer.singleShot(20, loop.quit)
            loop.exec()
        return True

    def capture_all_ask(self) -> None:
        folder = QFileDialog.getExistingDirectory(self, "Save a capture of every page into")
        if folder:
            try:
                files = self.capture_all(folder)
            except Exception as exc:
                self.show_problem(exc, "saving the captures")
                return
            self.say(f"Saved {len(files)} captures to {folder}.")

    # ------------------------------------------------------------------ messages
    def say(self, text: str) -> None:
        self.status_text.setText(text)

    def show_problem(self, exc: BaseException, context: str) -> QMessageBox | None:
        """Say what went wrong and what to do, without blocking: a problem met opening files
        or in the intake step goes to the Intake page's problem panel (the window stays as
        it was, ready for other files); any other problem is a dialog."""
        pr = problems.describe(exc, context)
        self.problems.append(pr)
        if context in PANEL_CONTEXTS:
            self.pages["intake"].problem_panel.show_problem(pr)
            self.go("intake")
            self.say(pr.title + ".")
            self.update_rail()
            self.problem_shown.emit(pr.title, pr.text())
            return None
        box = QMessageBox(QMessageBox.Icon.Warning if pr.expected else QMessageBox.Icon.Critical,
                          pr.title, pr.message, QMessageBox.StandardButton.Ok, self)
        if pr.advice:
            box.setInformativeText(pr.advice)
        self._keep(box)
        box.open()
        self.say(pr.title + ".")
        self.update_rail()
        self.problem_shown.emit(pr.title, pr.text())
        return box

    def _keep(self, dialog: QWidget) -> None:
        self._dialogs = [d for d in self._dialogs if d.isVisible()] + [dialog]

    # ------------------------------------------------------------------ closing
    def closeEvent(self, event) -> None:
        if self.runner.busy:
            self.runner.cancel()
            self.runner.wait(15000)
        for job in self.findChildren(LatestCall):  # what the pages were preparing
            job.drop()
            job.wait(15000)
        if self.confirm_close and self.dirty and self.review is not None:
            answer = QMessageBox.question(
                self, "Save the review?", "The review has changes that are not saved. Save "
                "them before closing?", QMessageBox.StandardButton.Save
                | QMessageBox.StandardButton.Discard | QMessageBox.StandardButton.Cancel)
            if answer == QMessageBox.StandardButton.Cancel or (
                    answer == QMessageBox.StandardButton.Save and not self.save()):
                event.ignore()
                return
        QSettings().setValue("window/geometry", self.saveGeometry())
        event.accept()
