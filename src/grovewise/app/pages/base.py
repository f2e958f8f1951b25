"""What every page has: a header (title, the question it answers, its buttons) over a
scrolling body, a capture button, and ``show_review`` / ``refresh`` hooks the window calls.

A page's refresh stays quick whatever the size of the review: what takes longer (figures,
look-ups over every row) runs in the page's display jobs (:class:`~..workers.LatestCall`)
and :meth:`Page.preparing` says whether any is still under way."""

from __future__ import annotations

from PySide6.QtCore import Signal
from PySide6.QtWidgets import (QFrame, QHBoxLayout, QLabel, QPushButton, QScrollArea, QSizePolicy,
                               QVBoxLayout, QWidget)

from .. import theme
from ..widgets import FigureView
from ..workers import LatestCall


class Page(QWidget):
    """Base class of the pages.

    Subclasses set ``key``, ``title`` and ``question``, build their content into
    ``self.body_layout`` and implement :meth:`refresh`. ``self.window_`` is the main window
    (for its review, runner and problem dialogs).
    """

    key = ""
    title = ""
    question = ""
    step: str | None = None  # the review step this page runs, if any

    capture_requested = Signal(str)

    def __init__(self, window) -> None:
        super().__init__()
        self.window_ = window
        self.needs_refresh = False  # results changed while the page was not shown
        self.setObjectName("page")
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 0, 0)
        outer.setSpacing(0)
        self.header = QFrame()
        self.header.setObjectName("pageHeader")
        self.header.setStyleSheet(f"QFrame#pageHeader {{ background: {theme.PAPER};"
                                  f" border-bottom: 1px solid {theme.RULE}; }}")
        head = QHBoxLayout(self.header)
        head.setContentsMargins(18, 12, 14, 10)
        words = QVBoxLayout()
        words.setSpacing(2)
        self.title_label = QLabel(self.title)
        self.title_label.setObjectName("pageTitle")
        self.question_label = QLabel(self.question)
        self.question_label.setObjectName("pageQuestion")
        self.question_label.setWordWrap(True)
        words.addWidget(self.title_label)
        words.addWidget(self.question_label)
        head.addLayout(words, 1)
        self.buttons = QHBoxLayout()
        self.buttons.setSpacing(6)
        head.addLayout(self.buttons)
        if self.step is not None:
            self.run_button = QPushButton(f"Run {self.title.lower()}")
            self.run_button.setObjectName("primary")
            self.run_button.setToolTip("Run this step (Ctrl+R)")
            self.run_button.clicked.connect(self.run)
            self.buttons.addWidget(self.run_button)
        self.capture_button = QPushButton("Capture")
        self.capture_button.setToolTip("Save this page as a high-resolution PNG for the audit "
                                       "file (Ctrl+Shift+C)")
        self.capture_button.clicked.connect(lambda: self.capture_requested.emit(self.key))
        self.buttons.addWidget(self.capture_button)
        outer.addWidget(self.header)
        self.scroll = QScrollArea()
        self.scroll.setWidgetResizable(True)
        self.scroll.setFrameShape(QFrame.Shape.NoFrame)
        self.body = QWidget()
        self.body.setObjectName("pageBody")
        self.body.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.MinimumExpanding)
        self.body_layout = QVBoxLayout(self.body)
        self.body_layout.setContentsMargins(18, 14, 18, 18)
        self.body_layout.setSpacing(12)
        self.scroll.setWidget(self.body)
        outer.addWidget(self.scroll, 1)

    def run(self) -> bool:
        """Start this page's step (Run button, Ctrl+R)."""
        return self.window_.run_steps([self.step]) if self.step is not None else False

    @property
    def review(self):
        return self.window_.review

    def add_button(self, text: str, tip: str = "", primary: bool = False) -> QPushButton:
        """A header button, placed before Capture."""
        b = QPushButton(text)
        if primary:
            b.setObjectName("primary")
        if tip:
            b.setToolTip(tip)
        self.buttons.insertWidget(self.buttons.count() - 1, b)
        return b

    def set_busy(self, busy: bool) -> None:
        """Disable what may not start while a background job runs."""
        if self.step is not None:
            self.run_button.setEnabled(not busy and self.review is not None)

    def reset(self) -> None:
        """A new review is open (or none): forget what was drawn for the previous one."""

    def show_review(self) -> None:
        """A new review is open (or none): rebuild from scratch."""
        self.reset()
        self.refresh()

    def refresh(self) -> None:
        """Results changed: redraw what depends on them."""

    def preparing(self) -> bool:
        """Whether something the page shows is still being prepared in a worker (a figure in
        a part of the page that is hidden waits to be drawn until it is shown)."""
        return (any(job.busy for job in self.findChildren(LatestCall))
                or any(view.pending for view in self.findChildren(FigureView)
                       if view.isVisibleTo(self)))

    def capture_widgets(self) -> list[QWidget]:
        """The widgets a capture stacks top to bottom: the header and the whole body."""
        return [self.header, self.body]

    def prepare_capture(self) -> None:
        """Put the page in a state worth capturing (select a row, etc.)."""

    def status_note(self) -> str:
        """A short note for the step rail."""
        return ""
