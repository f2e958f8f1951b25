"""Colours, fonts and the style sheet of the window, in one place.

The palette is our own: slate ink on paper, one deep teal for Grovewise's own marks (the
accent of the report as well), amber only for cautions, and two colours for the reviewer's
flags taken from the anatomy figures so a flag looks the same on every screen and page.
"""

from __future__ import annotations

from PySide6.QtGui import QColor, QFont, QFontDatabase

INK = "#1f2a33"
MUTED = "#5f6b75"
RULE = "#d3d9de"
PAPER = "#ffffff"
WASH = "#f1f4f6"
RAIL = "#e7ecef"
ACCENT = "#2c5d6f"
ACCENT_WASH = "#e3eef1"
CAUTION = "#9a6416"
CAUTION_WASH = "#fbf4e6"
CAUTION_EDGE = "#d9a441"
GOOD = "#2f6b3a"
BAD = "#9b2c2c"
GREEDY = "#7c8790"  # the greedy tree wherever it stands beside the surrogate


def flag_style(kind: str) -> tuple[str, str]:
    """(glyph, colour) of a reviewer flag, the same as the anatomy figures use."""
    from ..report.figures_anatomy import FLAG_STYLE

    return FLAG_STYLE[kind]


def qcolor(hex_: str, alpha: int = 255) -> QColor:
    c = QColor(hex_)
    c.setAlpha(alpha)
    return c


def mono_font() -> QFont:
    font = QFontDatabase.systemFont(QFontDatabase.SystemFont.FixedFont)
    return font


STYLE = f"""
QMainWindow, QWidget#page, QWidget#pageBody {{ background: {PAPER}; color: {INK}; }}
QWidget#rail {{ background: {RAIL}; }}
QLabel#pageTitle {{ font-size: 20px; font-weight: 600; color: {INK}; }}
QLabel#pageQuestion {{ color: {MUTED}; }}
QLabel#muted {{ color: {MUTED}; }}
QLabel#railTitle {{ font-weight: 600; color: {INK}; padding: 2px 4px; }}
QLabel#railSub {{ color: {MUTED}; padding: 0 4px; }}
QFrame#card {{ background: {PAPER}; border: 1px solid {RULE}; border-radius: 4px; }}
QLabel#cardTitle {{ font-weight: 600; color: {ACCENT}; }}
QFrame#caution {{ background: {CAUTION_WASH}; border: 1px solid {CAUTION_EDGE};
                  border-left: 4px solid {CAUTION_EDGE}; border-radius: 3px; }}
QLabel#cautionTitle {{ color: {CAUTION}; font-weight: 700; }}
QLabel#cautionText {{ color: {INK}; }}
QFrame#verdictGood {{ background: #eaf3ec; border: 1px solid #b9d6bf; border-radius: 3px; }}
QFrame#verdictBad {{ background: #f7e9e9; border: 1px solid #ddb4b4; border-radius: 3px; }}
QFrame#verdictNeutral {{ background: {WASH}; border: 1px solid {RULE}; border-radius: 3px; }}
QFrame#emptyState {{ background: {WASH}; border: 2px dashed {RULE}; border-radius: 6px; }}
QPushButton#primary {{ background: {ACCENT}; color: white; border: 1px solid {ACCENT};
                       border-radius: 3px; padding: 5px 14px; font-weight: 600; }}
QPushButton#primary:disabled {{ background: #9fb3bb; border-color: #9fb3bb; }}
QPlainTextEdit#rules, QTextEdit#rules {{ background: {WASH}; border: 1px solid {RULE}; }}
QTableView {{ gridline-color: {RULE}; selection-background-color: {ACCENT_WASH};
              selection-color: {INK}; }}
QHeaderView::section {{ background: {WASH}; border: 0; border-bottom: 1px solid {RULE};
                        padding: 3px 6px; font-weight: 600; }}
QStatusBar {{ background: {WASH}; color: {INK}; }}
"""
