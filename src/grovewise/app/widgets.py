"""Small building blocks the pages share: cards, the caution box, key-value grids, figures."""

from __future__ import annotations

import sys
import tempfile
import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from PySide6.QtCore import QCoreApplication, QEvent, QRectF, QSize, Qt, QTimer
from PySide6.QtGui import QCursor, QImage, QPainter
from PySide6.QtWidgets import (QAbstractItemView, QAbstractScrollArea, QFrame, QGridLayout,
                               QHBoxLayout, QHeaderView, QLabel, QSizePolicy, QTableWidget,
                               QTableWidgetItem, QToolTip, QVBoxLayout, QWidget)

from . import theme
from .cautions import cautions

MAX_DPI = 100.0  # a figure is never drawn finer than this (logical dots per inch)
MIN_DPI = 55.0  # nor coarser (smaller text would not be readable)
MAX_STRETCH = 1.3  # at most this much wider than designed: wider only spreads it thin
MIN_WIDTH = 160  # a figure view is never narrower
QWIDGETSIZE_MAX = (1 << 24) - 1


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
    """A matplotlib Figure shown as a picture drawn off the GUI thread; hovering shows
    ``hover(event)``'s text.

    A figure with many artists takes a large share of a second to lay out and draw, so the
    view never draws in the GUI thread: :meth:`show_built` makes the figure in a worker
    (:class:`~.workers.LatestCall`) and draws it there; the view shows the pixels when they
    arrive ("drawing…" until then, or the previous picture, marked "updating…" unless
    ``mark_updates`` is off). A new width is drawn in the worker too. Hover events are
    rebuilt from the drawn figure's transforms, so hover functions get ``inaxes``, ``xdata``
    and ``ydata`` as from matplotlib.

    Figures are designed at a size in inches (the report's). Here a figure keeps those
    proportions: when the view is narrower than the design, it is drawn at a lower
    resolution (smaller text) rather than squeezed (overlapping text); it is never drawn
    above :data:`MAX_DPI`. Its height is fixed, so a page scrolls on a small screen.
    """

    def __init__(self, parent=None, mark_updates: bool = True) -> None:
        super().__init__(parent)
        from .workers import LatestCall

        self.lay = QVBoxLayout(self)
        self.lay.setContentsMargins(0, 0, 0, 0)
        self.placeholder = wrapped("", muted=True)
        self.lay.addWidget(self.placeholder)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Minimum)
        self.setMouseTracking(True)
        self.hover: Callable | None = None
        self.natural = (6.0, 3.0)
        self.mark_updates = mark_updates  # "updating…" over a picture about to be replaced
        self.lock = threading.Lock()  # held while the figure is drawn
        self.jobs = LatestCall(self)
        self._figure = None
        self._building = False
        self._image: QImage | None = None
        self._drawn: tuple | None = None  # (figure, width, ratio) the picture shows
        self._timer = QTimer(self)  # gathers the resizes of one layout pass into one drawing
        self._timer.setSingleShot(True)
        self._timer.setInterval(40)
        self._timer.timeout.connect(self._draw)

    @property
    def figure(self):
        return self._figure

    @property
    def pending(self) -> bool:
        """Whether the figure asked for is not on screen yet."""
        return (self._building or self.jobs.busy or self._timer.isActive()
                or (self._figure is not None and (self._drawn is None
                                                  or self._drawn[0] is not self._figure)))

    # ------------------------------------------------------------------ what to show
    def set_message(self, text: str) -> None:
        self.clear()
        self.placeholder.setText(text)
        self.placeholder.show()

    def clear(self) -> None:
        self.jobs.drop()
        self._timer.stop()
        self._figure, self.hover, self._building = None, None, False
        self._image, self._drawn = None, None
        self.setMinimumHeight(0)
        self.setMaximumHeight(QWIDGETSIZE_MAX)
        self.update()

    def show_built(self, build: Callable, hover: Callable | None = None) -> None:
        """Make the figure with ``build()`` in a worker, draw it there and show it;
        ``hover(figure)``, also called there, gives the figure's hover function."""
        self._building = True
        if self._image is None:
            self.placeholder.setText("Drawing the figure…")
            self.placeholder.show()
        spec = self._spec()
        self.jobs.request(_build_and_draw, build, hover, spec, self.lock, done=self._built,
                          failed=self._not_built)
        self.update()

    def _built(self, result) -> None:
        fig, natural, hover, drawn = result
        self._building = False
        self._figure, self.natural, self.hover = fig, natural, hover
        self.placeholder.hide()
        self._fit_height()
        if drawn is not None and drawn.key() == (fig, *(self._spec() or (0, 0.0))):
            self._show(drawn)
        else:
            self._schedule()

    def _not_built(self, exc) -> None:
        self._building = False
        self.set_message("This figure could not be drawn.")
        sys.excepthook(type(exc), exc, exc.__traceback__)  # the window logs it and says so

    # ------------------------------------------------------------------ drawing
    def _spec(self) -> tuple[int, float] | None:
        """(width, pixel ratio) to draw for, or None while the view is not laid out."""
        if not self.isVisible() or self.width() < 16:
            return None
        return int(self.width()), float(self.devicePixelRatioF())

    def fit_dpi(self) -> float:
        return figure_dpi(max(self.width(), 1), self.natural[0])

    def _fit_height(self) -> None:
        if self._figure is not None:
            self.setFixedHeight(int(round(self.natural[1] * self.fit_dpi())))

    def _schedule(self) -> None:
        if self._figure is not None and not self._building and self._spec() is not None:
            self._timer.start()
        self.update()

    def _draw(self) -> None:
        spec = self._spec()
        if self._figure is None or spec is None or self._building:
            return
        if self._drawn == (self._figure, *spec) and not self.jobs.busy:
            return
        self.jobs.request(draw_figure, self._figure, self.natural, *spec, self.lock,
                          done=self._drawn_now)

    def _drawn_now(self, drawn: "DrawnFigure") -> None:
        if drawn.figure is self._figure:
            self._show(drawn)
            if drawn.key() != (self._figure, *(self._spec() or (0, 0.0))):
                self._schedule()  # resized meanwhile

    def _show(self, drawn: "DrawnFigure") -> None:
        h, w = drawn.pixels.shape[:2]
        img = QImage(drawn.pixels.data, w, h, 4 * w, QImage.Format.Format_RGBA8888).copy()
        img.setDevicePixelRatio(drawn.ratio)
        self._image, self._drawn = img, drawn.key()
        self.placeholder.hide()
        self.update()

    def draw_now(self, ratio: float) -> None:
        """Draw the figure at ``ratio`` in this thread (a capture: sharp at ratio 2)."""
        if self._figure is None or self._building:
            return
        self._show(draw_figure(self._figure, self.natural, max(self.width(), 1), ratio,
                               self.lock))

    def redraw_later(self) -> None:
        """Draw again for the screen (after a capture drew at another ratio)."""
        self._drawn = None
        self._schedule()

    # ------------------------------------------------------------------ Qt
    def sizeHint(self) -> QSize:
        if self._figure is None:
            return super().sizeHint()
        dpi = self.fit_dpi()  # the figure's design size at the resolution it is drawn at
        return QSize(int(self.natural[0] * dpi), int(round(self.natural[1] * dpi)))

    def minimumSizeHint(self) -> QSize:
        if self._figure is None:
            return super().minimumSizeHint()
        return QSize(MIN_WIDTH, int(round(self.natural[1] * self.fit_dpi())))

    def showEvent(self, event) -> None:
        super().showEvent(event)
        self._schedule()

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if event.oldSize().width() != event.size().width():
            self._fit_height()
            self._schedule()

    def paintEvent(self, event) -> None:
        if self._image is None:
            return
        painter = QPainter(self)
        img = self._image
        ratio = img.devicePixelRatio()
        w, h = img.width() / ratio, img.height() / ratio
        if self._drawn is not None and self._drawn[1] != self.width():  # resized: a stopgap
            scale = min(self.width() / max(w, 1.0), self.height() / max(h, 1.0))
            w, h = w * scale, h * scale
            painter.setRenderHint(QPainter.RenderHint.SmoothPixmapTransform)
        painter.drawImage(QRectF(0, 0, w, h), img)
        if self.pending and self.mark_updates:
            painter.setPen(theme.qcolor(theme.MUTED))
            painter.drawText(QRectF(0, 2, self.width() - 6, 18),
                             int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignTop),
                             "updating…")
        painter.end()

    def mouseMoveEvent(self, event) -> None:
        super().mouseMoveEvent(event)
        text = None
        if self.hover is not None and not self.pending and self._image is not None:
            ev = self.event_at(event.position().x(), event.position().y())
            if ev is not None:
                try:
                    text = self.hover(ev)
                except (IndexError, KeyError, ValueError, TypeError):
                    text = None
        if text:
            QToolTip.showText(QCursor.pos(), text, self)
        else:
            QToolTip.hideText()

    def event_at(self, x: float, y: float):
        """The matplotlib-like event at view position (x, y): ``inaxes``, ``xdata``,
        ``ydata`` (None when the point is on no axes)."""
        fig, img = self._figure, self._image
        ratio = img.devicePixelRatio()
        px, py = x * ratio, img.height() - y * ratio  # matplotlib counts from the bottom
        if not (0 <= px < img.width() and 0 <= py < img.height()):
            return None
        if not self.lock.acquire(blocking=False):  # being drawn: no hover text meanwhile
            return None
        try:
            hits = [a for a in fig.axes if a.get_visible() and a.patch.contains_point((px, py))]
            if not hits:
                return None
            ax = max(reversed(hits), key=lambda a: a.get_zorder())  # the one drawn on top
            xdata, ydata = ax.transData.inverted().transform((px, py))
        finally:
            self.lock.release()
        return SimpleNamespace(inaxes=ax, xdata=float(xdata), ydata=float(ydata), x=px, y=py)


@dataclass
class DrawnFigure:
    """A figure's pixels (RGBA rows, top first) for a view ``width`` pixels wide at ``ratio``."""

    figure: object
    pixels: np.ndarray
    width: int
    ratio: float

    def key(self) -> tuple:
        return self.figure, self.width, self.ratio


def figure_dpi(width: float, natural_width: float) -> float:
    """Dots per inch for a figure designed ``natural_width`` inches wide in ``width`` pixels."""
    return max(MIN_DPI, min(MAX_DPI, width / max(natural_width, 1e-6)))


def draw_figure(fig, natural: tuple[float, float], width: int, ratio: float,
                lock: threading.Lock) -> DrawnFigure:
    """Lay out and draw ``fig`` with Agg for a view ``width`` pixels wide (no Qt: this runs
    in a worker thread). The figure is at most :data:`MAX_STRETCH` times its design width and
    keeps its design height in inches."""
    dpi = figure_dpi(width, natural[0])
    w = min(float(width), natural[0] * dpi * MAX_STRETCH)
    with lock:
        canvas = fig.canvas if type(fig.canvas) is FigureCanvasAgg else FigureCanvasAgg(fig)
        fig.set_dpi(dpi * ratio)
        fig.set_size_inches(w / dpi, natural[1], forward=False)
        canvas.draw()
        pixels = np.asarray(canvas.buffer_rgba()).copy()
    return DrawnFigure(fig, pixels, int(width), float(ratio))


def _build_and_draw(build: Callable, hover: Callable | None, spec, lock: threading.Lock):
    """A worker's job: the figure, its design size (before drawing changes it), its hover
    function and, when the view's width is known, its pixels."""
    fig = build()
    natural = tuple(float(v) for v in fig.get_size_inches())
    how = hover(fig) if hover is not None else None
    drawn = draw_figure(fig, natural, *spec, lock) if spec is not None else None
    return fig, natural, how, drawn


def hline() -> QFrame:
    line = QFrame()
    line.setFrameShape(QFrame.Shape.HLine)
    line.setStyleSheet(f"color: {theme.RULE};")
    return line


def readonly_table(headers: Sequence[str]) -> QTableWidget:
    """A small table of results: not editable, no row numbers, as large as its contents (it
    sits in a scrolling page, so it has no vertical scroll bar of its own); each column as
    wide as its header or its widest text."""
    table = QTableWidget(0, len(headers))
    table.setHorizontalHeaderLabels(list(headers))
    table.verticalHeader().setVisible(False)
    table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
    table.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
    table.setSizeAdjustPolicy(QAbstractScrollArea.SizeAdjustPolicy.AdjustToContents)
    table.setSizePolicy(QSizePolicy.Policy.Maximum, QSizePolicy.Policy.Fixed)
    table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
    table.verticalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
    table.setWordWrap(False)
    return table


def fill_table(table: QTableWidget, rows: Sequence[Sequence[str]],
               right: Sequence[int] = ()) -> None:
    """Put ``rows`` of texts in ``table`` (the columns in ``right`` aligned right, as numbers
    are)."""
    table.setRowCount(len(rows))
    for i, cells in enumerate(rows):
        for c, text in enumerate(cells):
            item = QTableWidgetItem(str(text))
            if c in right:
                item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
            table.setItem(i, c, item)


class PdfPreview(QWidget):
    """A PDF file shown page under page, fitted to the width (Qt's PDF module).

    The preview owns the files it shows: each comes from :meth:`new_path` (a file in a
    temporary folder of the preview's own) and is deleted when a newer one is shown, when the
    preview is cleared, and when the window it watches (:meth:`watch`) closes or the program
    quits. Files of previews that were overtaken before they were shown go with them.
    """

    PREFIX = "preview-"

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        from PySide6.QtPdf import QPdfDocument
        from PySide6.QtPdfWidgets import QPdfView

        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(4)
        self.status = wrapped("", muted=True)
        lay.addWidget(self.status)
        self.document = QPdfDocument(self)
        self.view = QPdfView(self)
        self.view.setDocument(self.document)
        self.view.setPageMode(QPdfView.PageMode.MultiPage)
        self.view.setZoomMode(QPdfView.ZoomMode.FitToWidth)
        self.view.setPageSpacing(12)
        self.view.setStyleSheet(f"background: {theme.RAIL};")
        lay.addWidget(self.view, 1)
        self.view.hide()
        # The view draws a page in a thread the first time it shows it; its renderer (a child
        # the view makes, not public API) says when a page is drawn. Until then, or a few
        # seconds, the preview counts as being prepared (a capture waits for it).
        self.rendering = False
        self._settle = QTimer(self)
        self._settle.setSingleShot(True)
        self._settle.setInterval(3000)
        self._settle.timeout.connect(self._rendered)
        from PySide6.QtPdf import QPdfPageRenderer

        renderer = self.view.findChild(QPdfPageRenderer)
        if renderer is not None:
            renderer.pageRendered.connect(self._rendered)
        self._knows_rendering = renderer is not None
        self.path: Path | None = None  # the file shown
        self._folder: tempfile.TemporaryDirectory | None = None
        self._serial = 0
        self._watched: QWidget | None = None
        app = QCoreApplication.instance()
        if app is not None:
            app.aboutToQuit.connect(self.discard)

    # ------------------------------------------------------------------ files
    def new_path(self) -> Path:
        """A new file name for the next preview (in the preview's temporary folder)."""
        if self._folder is None:
            self._folder = tempfile.TemporaryDirectory(prefix="grovewise-preview-")
        self._serial += 1
        return Path(self._folder.name) / f"{self.PREFIX}{self._serial:06d}.pdf"

    def show_file(self, path) -> bool:
        """Show the PDF at ``path`` (one from :meth:`new_path`); the one shown before and any
        older unshown ones are deleted. False (and a message) if Qt cannot read it."""
        from PySide6.QtPdf import QPdfDocument

        path = Path(path)
        self.document.close()
        self._remove_older(path)
        self.path = path
        error = self.document.load(str(path))
        if error != QPdfDocument.Error.None_:
            self.document.close()
            self.view.hide()
            self.status.setText(f"The preview {path.name} could not be read ({error.name}); "
                                "export the PDF to look at it.")
            return False
        self.view.show()
        self.rendering = self._knows_rendering
        self._settle.start()
        QTimer.singleShot(0, self, self._prime)
        return True

    def _prime(self) -> None:
        """Paint the view once, off screen: the view renders a page the first time it paints
        it (in a thread), so a preview scrolled out of sight would be blank in a capture."""
        if self.path is not None and self.view.isVisibleTo(self.window()):
            self.view.viewport().grab()
        else:
            self._rendered()  # not on screen: nothing to wait for

    def _rendered(self, *_page) -> None:
        self.rendering = False
        self._settle.stop()

    def page_count(self) -> int:
        return int(self.document.pageCount())

    def set_message(self, text: str) -> None:
        """Say ``text`` above the preview (the PDF shown stays until replaced or cleared)."""
        self.status.setText(text)

    def clear(self, text: str = "") -> None:
        """Show nothing; the file shown is deleted."""
        self._rendered()
        self.document.close()
        self.view.hide()
        if self.path is not None:
            self.path.unlink(missing_ok=True)
            self.path = None
        self.status.setText(text)

    def discard(self) -> None:
        """Clear and delete the temporary folder with every preview file in it."""
        self.clear()
        if self._folder is not None:
            self._folder.cleanup()
            self._folder = None

    def _remove_older(self, path: Path) -> None:
        if self.path is not None and self.path != path:
            self.path.unlink(missing_ok=True)
        if self._folder is None or not path.name.startswith(self.PREFIX):
            return
        for old in Path(self._folder.name).glob(f"{self.PREFIX}*.pdf"):
            if old.name < path.name:  # a preview overtaken before it was shown
                old.unlink(missing_ok=True)

    # ------------------------------------------------------------------ the window closing
    def watch(self, window: QWidget) -> None:
        """Delete the preview's files when ``window`` closes."""
        self._watched = window
        window.installEventFilter(self)

    def eventFilter(self, obj, event) -> bool:
        if obj is self._watched and event.type() == QEvent.Type.Close:
            QTimer.singleShot(0, self, self._after_close)  # the window may yet refuse
        return False

    def _after_close(self) -> None:
        if self._watched is not None and not self._watched.isVisible():
            self.discard()
