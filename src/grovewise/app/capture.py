"""Captures: a page saved as a high-resolution PNG for the audit file.

A capture is the page's header stacked over its whole body (scrolled-away parts included),
rendered at a device-pixel ratio of 2. Where the screen already has that ratio the widgets
paint natively; elsewhere (an ordinary screen, offscreen) they paint into a pixmap of twice
the size, and each figure (:class:`~.widgets.FigureView`) is drawn at that ratio first so
charts stay sharp rather than being scaled up.
"""

from __future__ import annotations

import re
from contextlib import contextmanager
from pathlib import Path

from PySide6.QtCore import QPoint
from PySide6.QtGui import QColor, QPainter, QPixmap
from PySide6.QtWidgets import QApplication, QWidget

from .widgets import FigureView

CAPTURE_RATIO = 2.0
MAX_HEIGHT = 6000  # logical pixels; a longer body is cut (its tables scroll anyway)


def capture_name(index: int, key: str) -> str:
    """File name of a page's capture, in page order: ``1-intake.png`` ..."""
    return f"{index}-{re.sub(r'[^a-z0-9]+', '-', key.lower()).strip('-')}.png"


@contextmanager
def _canvases_at(widgets: list[QWidget], ratio: float):
    """Draw every figure under ``widgets`` at ``ratio`` (here, in this thread), then let each
    draw for the screen again (in its worker)."""
    views = [v for w in widgets for v in w.findChildren(FigureView)
             if v.figure is not None and v.isVisible() and v.devicePixelRatioF() != ratio]
    for v in views:
        v.draw_now(ratio)
    try:
        yield
    finally:
        for v in views:
            v.redraw_later()


def render_stack(widgets: list[QWidget], ratio: float = CAPTURE_RATIO) -> QPixmap:
    """The widgets painted one under the other into one pixmap at ``ratio``."""
    QApplication.processEvents()
    width = max(w.width() for w in widgets)
    heights = [min(w.height(), MAX_HEIGHT) for w in widgets]
    total = min(sum(heights), MAX_HEIGHT)
    pix = QPixmap(int(width * ratio), int(total * ratio))
    pix.setDevicePixelRatio(ratio)
    pix.fill(QColor("#ffffff"))
    with _canvases_at(widgets, ratio):
        painter = QPainter(pix)
        painter.setRenderHint(QPainter.RenderHint.Antialiasing)
        y = 0
        for w, h in zip(widgets, heights):
            if y >= total:
                break
            w.render(painter, QPoint(0, y))
            y += h
        painter.end()
    return pix


def capture_page(page, path, ratio: float = CAPTURE_RATIO) -> Path:
    """Save ``page`` (a :class:`~grovewise.app.pages.base.Page`) as a PNG at ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    pix = render_stack(page.capture_widgets(), ratio)
    tmp = path.with_name(f".{path.name}.tmp.png")
    if not pix.save(str(tmp), "PNG"):
        raise OSError(f"could not write the capture {tmp}")
    tmp.replace(path)  # atomic: a half-written capture never stands in for a page
    return path


__all__ = ["CAPTURE_RATIO", "capture_name", "capture_page", "render_stack"]
