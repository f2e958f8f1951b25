"""Small building blocks the pages share: cards, the caution box, key-value grids, figures."""

from __future__ import annotations

from collections.abc import Callable, Sequence

from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg
from PySide6.QtCore import Qt
from PySide6.QtGui import QCursor
from PySide6.QtWidgets import (QFrame, QGridLayout, QHBoxLayout, QLabel, QSizePolicy, QToolTip,
                               QVBoxLayout, QWidget)

from . import theme
from .cautions import cautions


class Card(QFrame):
    """A titled panel; put content in ``self.body`` (a QVBoxLayout)."""

    def __init__(self, title: str, parent=None, note: str = "") -> None:
        super().__init__(parent)
        self.setObjectName("card")
        outer = QVBoxLayout(self)
        outer.setContentsMargins(12, 10, 12, 12)
        outer.setSpacing(6)
        head = QLabel(title)
        head.setObjectName("cardTitle")
        outer.addWidget(head)
        self.title_label = head
        if note:
            n = wrapped(note, muted=True)
            outer.addWidget(n)
        self.body = QVBoxLayout()
        self.body.setSpacing(6)
        outer.addLayout(self.body)
        outer.addStretch(1)


def wrapped(text: str = "", muted: bool = False, selectable: bool = True) -> QLabel:
    """A word-wrapped label (selectable, so numbers can be copied)."""
    lab = QLabel(text)
    lab.setWordWrap(True)
    if muted:
        lab.setObjectName("muted")
    if selectable:
        lab.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
    return lab


class CautionBox(QFrame):
    """The usual cautions (RULES.md), boxed in amber; always visible where it is placed."""

    def __init__(self, parent=None, extra: Sequence[str] = ()) -> None:
        super().__init__(parent)
        self.setObjectName("caution")
        lay = QVBoxLayout(self)
        lay.setContentsMargins(14, 8, 12, 10)
        lay.setSpacing(4)
        title = QLabel("Before these results steer a decision")
        title.setObjectName("cautionTitle")
        lay.addWidget(title)
        self.items: list[QLabel] = []
        for text in list(cautions()) + list(extra):
            lab = QLabel("• " + text)
            lab.setObjectName("cautionText")
            lab.setWordWrap(True)
            lay.addWidget(lab)
            self.items.append(lab)

    def text(self) -> str:
        return "\n".join(l.text() for l in self.items)


class KeyValues(QWidget):
    """Labels and values in two columns; values are selectable text."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.grid = QGridLayout(self)
        self.grid.setContentsMargins(0, 0, 0, 0)
        self.grid.setHorizontalSpacing(16)
        self.grid.setVerticalSpacing(3)
        self.grid.setColumnStretch(1, 1)
        self.values: dict[str, QLabel] = {}

    def set_rows(self, rows: Sequence[tuple[str, str]]) -> None:
        while self.grid.count():
            item = self.grid.takeAt(0)
            if item.widget() is not None:
                item.widget().deleteLater()
        self.values = {}
        for r, (key, value) in enumerate(rows):
            k = QLabel(key)
            k.setObjectName("muted")
            k.setAlignment(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignTop)
            v = wrapped(str(value))
            self.grid.addWidget(k, r, 0)
            self.grid.addWidget(v, r, 1)
            self.values[key] = v


class Verdict(QFrame):
    """A one-line verdict with a mark: passed, failed or neutral."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(10, 6, 10, 6)
        self.mark = QLabel()
        self.mark.setAlignment(Qt.AlignmentFlag.AlignTop)
        self.text = wrapped()
        lay.addWidget(self.mark)
        lay.addWidget(self.text, 1)
        self.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Maximum)
        self.set("neutral", "")

    def set(self, kind: str, text: str) -> None:
        self.setObjectName({"good": "verdictGood", "bad": "verdictBad"}.get(kind, "verdictNeutral"))
        self.mark.setText({"good": "✔", "bad": "✘"}.get(kind, "•"))
        self.text.setText(text)
        self.style().unpolish(self)
        self.style().polish(self)


class FigureView(QWidget):
    """A matplotlib Figure embedded with its Qt canvas; hovering shows ``hover(event)``'s text.

    Figures are designed at a size in inches (the report's). Here a figure keeps those
    proportions: when the view is narrower than the design, it is drawn at a lower
    resolution (smaller text) rather than squeezed (overlapping text); it is never drawn
    above :data:`MAX_DPI`. Its height is fixed, so a page scrolls on a small screen.
    """

    MAX_DPI = 100.0
    MIN_DPI = 55.0
    MAX_STRETCH = 1.3  # at most this much wider than designed: wider only spreads it thin

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.lay = QVBoxLayout(self)
        self.lay.setContentsMargins(0, 0, 0, 0)
        self.canvas: FigureCanvasQTAgg | None = None
        self.hover: Callable | None = None
        self.natural = (6.0, 3.0)
        self.placeholder = wrapped("", muted=True)
        self.lay.addWidget(self.placeholder)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Minimum)

    @property
    def figure(self):
        return None if self.canvas is None else self.canvas.figure

    def set_message(self, text: str) -> None:
        self.clear()
        self.placeholder.setText(text)
        self.placeholder.show()

    def clear(self) -> None:
        if self.canvas is not None:
            self.lay.removeWidget(self.canvas)
            self.canvas.setParent(None)
            self.canvas.deleteLater()
            self.canvas = None

    def set_figure(self, fig, hover: Callable | None = None) -> None:
        self.clear()
        self.placeholder.hide()
        self.natural = tuple(float(v) for v in fig.get_size_inches())
        canvas = FigureCanvasQTAgg(fig)
        canvas.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Fixed)
        canvas.setMinimumWidth(160)
        self.hover = hover
        canvas.mpl_connect("motion_notify_event", self._on_motion)
        self.lay.addWidget(canvas)
        self.canvas = canvas
        self._fit()

    def fit_dpi(self) -> float:
        width = max(self.width(), 1)
        return max(self.MIN_DPI, min(self.MAX_DPI, width / self.natural[0]))

    def _fit(self) -> None:
        """Resolution and height for the current width (see the class docstring)."""
        canvas = self.canvas
        if canvas is None:
            return
        dpi = self.fit_dpi()
        fig = canvas.figure
        if abs(getattr(fig, "_original_dpi", dpi) - dpi) > 0.5 or canvas.height() <= 1:
            # matplotlib derives the drawing resolution from this base value times the
            # screen's pixel ratio (also when a capture redraws at ratio 2)
            fig._original_dpi = dpi
            fig.set_dpi(dpi * canvas.device_pixel_ratio)
            if canvas.width() > 1:
                fig.set_size_inches(canvas.width() / dpi, self.natural[1], forward=False)
        canvas.setFixedHeight(int(round(self.natural[1] * dpi)))
        canvas.setMaximumWidth(int(self.natural[0] * dpi * self.MAX_STRETCH))
        canvas.draw_idle()

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if event.oldSize().width() != event.size().width():
            self._fit()

    def _on_motion(self, event) -> None:
        if self.hover is None or event.inaxes is None:
            QToolTip.hideText()
            return
        try:
            text = self.hover(event)
        except (IndexError, KeyError, ValueError, TypeError):
            text = None
        if text:
            QToolTip.showText(QCursor.pos(), text, self.canvas)
        else:
            QToolTip.hideText()


def hline() -> QFrame:
    line = QFrame()
    line.setFrameShape(QFrame.Shape.HLine)
    line.setStyleSheet(f"color: {theme.RULE};")
    return line
