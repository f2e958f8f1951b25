"""The step rail: the six pages as stations on a line, each with its state and a short note.

A station is a ring on the line. Its state reads without colour too: an empty ring (not run
yet), a ring with an arc (running, the arc is the share done), a filled ring with a tick
(done), a ring with a gap (done, but settings changed since), a ring with a cross
(failed). The note under the name says the one number that matters for that step.
"""

from __future__ import annotations

from PySide6.QtCore import QRectF, QSize, Qt, Signal
from PySide6.QtGui import QFontMetrics, QPainter, QPainterPath, QPen
from PySide6.QtWidgets import QAbstractButton, QButtonGroup, QLabel, QSizePolicy, QVBoxLayout, QWidget

from . import theme

STATES = ("waiting", "ready", "running", "done", "stale", "failed")
STATE_WORDS = {"waiting": "needs an earlier step", "ready": "ready to run",
               "running": "running", "done": "done", "stale": "settings changed: run again",
               "failed": "failed: see the message"}


class Station(QAbstractButton):
    """One page of the rail: a ring with its state, the page's name and a note."""

    def __init__(self, key: str, title: str, shortcut_hint: str, parent=None) -> None:
        super().__init__(parent)
        self.key, self.title, self.hint = key, title, shortcut_hint
        self.state = "waiting"
        self.note = ""
        self.fraction = 0.0
        self.first = self.last = False
        self.setCheckable(True)
        self.setCursor(Qt.CursorShape.PointingHandCursor)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Fixed)
        self.setAccessibleName(title)

    def set_state(self, state: str, note: str = "", fraction: float = 0.0) -> None:
        self.state, self.note, self.fraction = state, note, fraction
        self.setToolTip(f"{self.title}: {STATE_WORDS.get(state, state)}"
                        + (f"\n{note}" if note else "") + f"\n{self.hint}")
        self.setAccessibleDescription(f"{STATE_WORDS.get(state, state)}. {note}")
        self.update()

    def sizeHint(self) -> QSize:
        fm = QFontMetrics(self.font())
        return QSize(210, int(fm.height() * 2 + 22))

    def minimumSizeHint(self) -> QSize:
        return QSize(150, self.sizeHint().height())

    def paintEvent(self, _event) -> None:
        p = QPainter(self)
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        r = self.rect()
        if self.isChecked():
            p.fillRect(r.adjusted(6, 2, -4, -2), theme.qcolor(theme.PAPER))
        if self.hasFocus():
            p.setPen(QPen(theme.qcolor(theme.ACCENT), 1, Qt.PenStyle.DotLine))
            p.drawRect(r.adjusted(6, 2, -5, -3))
        cx, cy, rad = 24.0, r.height() / 2.0, 8.0
        line = QPen(theme.qcolor(theme.RULE), 2)
        p.setPen(line)
        if not self.first:
            p.drawLine(int(cx), 0, int(cx), int(cy - rad - 2))
        if not self.last:
            p.drawLine(int(cx), int(cy + rad + 2), int(cx), r.height())
        self._ring(p, cx, cy, rad)
        fm = QFontMetrics(self.font())
        x = int(cx + rad + 12)
        width = r.width() - x - 8
        bold = self.font()
        bold.setBold(True)
        p.setFont(bold)
        p.setPen(theme.qcolor(theme.INK if self.isChecked() else theme.INK))
        top = int(cy - fm.height() + 2)
        p.drawText(x, top, width, fm.height(), Qt.AlignmentFlag.AlignLeft, self.title)
        p.setFont(self.font())
        p.setPen(theme.qcolor(theme.MUTED))
        note = fm.elidedText(self.note or STATE_WORDS.get(self.state, ""),
                             Qt.TextElideMode.ElideRight, width)
        p.drawText(x, int(cy + 2), width, fm.height(), Qt.AlignmentFlag.AlignLeft, note)

    def _ring(self, p: QPainter, cx: float, cy: float, rad: float) -> None:
        box = QRectF(cx - rad, cy - rad, 2 * rad, 2 * rad)
        accent, muted = theme.qcolor(theme.ACCENT), theme.qcolor(theme.MUTED)
        p.setBrush(theme.qcolor(theme.RAIL))
        if self.state == "done":
            p.setPen(QPen(accent, 2))
            p.setBrush(accent)
            p.drawEllipse(box)
            tick = QPainterPath()
            tick.moveTo(cx - 4, cy)
            tick.lineTo(cx - 1, cy + 3)
            tick.lineTo(cx + 4, cy - 3)
            p.setPen(QPen(theme.qcolor("#ffffff"), 2))
            p.setBrush(Qt.BrushStyle.NoBrush)
            p.drawPath(tick)
        elif self.state == "running":
            p.setPen(QPen(theme.qcolor(theme.RULE), 2))
            p.drawEllipse(box)
            p.setPen(QPen(accent, 3))
            span = max(0.08, min(1.0, self.fraction)) * 360.0
            p.drawArc(box, 90 * 16, int(-span * 16))
        elif self.state == "stale":
            p.setPen(QPen(accent, 2))
            p.drawArc(box, 120 * 16, 300 * 16)
        elif self.state == "failed":
            p.setPen(QPen(theme.qcolor(theme.BAD), 2))
            p.drawEllipse(box)
            p.drawLine(int(cx - 3), int(cy - 3), int(cx + 3), int(cy + 3))
            p.drawLine(int(cx - 3), int(cy + 3), int(cx + 3), int(cy - 3))
        else:
            p.setPen(QPen(accent if self.state == "ready" else muted, 2,
                          Qt.PenStyle.SolidLine if self.state == "ready" else Qt.PenStyle.DotLine))
            p.drawEllipse(box)


class StepRail(QWidget):
    """The column of stations; ``chosen(key)`` when the reviewer picks a page."""

    chosen = Signal(str)

    def __init__(self, pages: list[tuple[str, str]], parent=None) -> None:
        super().__init__(parent)
        self.setObjectName("rail")
        self.setAttribute(Qt.WidgetAttribute.WA_StyledBackground, True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 10, 4, 10)
        lay.setSpacing(0)
        self.heading = QLabel("Review")
        self.heading.setObjectName("railTitle")
        self.subject = QLabel("nothing open")
        self.subject.setObjectName("railSub")
        self.subject.setWordWrap(True)
        lay.addWidget(self.heading)
        lay.addWidget(self.subject)
        lay.addSpacing(10)
        self.group = QButtonGroup(self)
        self.group.setExclusive(True)
        self.stations: dict[str, Station] = {}
        for i, (key, title) in enumerate(pages):
            st = Station(key, title, f"Ctrl+{i + 1}")
            st.first, st.last = i == 0, i == len(pages) - 1
            st.clicked.connect(lambda _=False, k=key: self.chosen.emit(k))
            self.group.addButton(st)
            self.stations[key] = st
            lay.addWidget(st)
        lay.addStretch(1)
        self.legend = QLabel("○ not run   ● done\n◌ settings changed")
        self.legend.setObjectName("muted")
        lay.addWidget(self.legend)
        self.setMinimumWidth(170)

    def select(self, key: str) -> None:
        self.stations[key].setChecked(True)

    def set_subject(self, text: str) -> None:
        self.subject.setText(text)
        self.subject.setToolTip(text)
