"""The window's icon, drawn here as SVG (kept in code so it ships with the module)."""

from __future__ import annotations

from PySide6.QtCore import QByteArray
from PySide6.QtGui import QIcon, QPixmap

# Three trees of a grove on a slate tile, the middle one split by a straight cut: an
# ensemble and the one readable rule drawn through it.
SVG = """<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 64 64" width="64" height="64">
  <rect x="2" y="2" width="60" height="60" rx="12" fill="#2c5d6f"/>
  <path d="M14 44 L21 24 L28 44 Z" fill="#cfe3e6"/>
  <path d="M25 46 L32 14 L39 46 Z" fill="#ffffff"/>
  <path d="M36 44 L43 26 L50 44 Z" fill="#cfe3e6"/>
  <rect x="20" y="44" width="2" height="6" fill="#cfe3e6"/>
  <rect x="31" y="46" width="2" height="6" fill="#ffffff"/>
  <rect x="42" y="44" width="2" height="6" fill="#cfe3e6"/>
  <path d="M9 38 L55 28" stroke="#e3b04b" stroke-width="3" stroke-linecap="round"/>
</svg>"""


def app_icon() -> QIcon:
    icon = QIcon()
    for size in (16, 24, 32, 48, 64, 128, 256):
        pix = QPixmap(size, size)
        pix.loadFromData(QByteArray(SVG.replace('width="64" height="64"',
                                                f'width="{size}" height="{size}"').encode()),
                         "SVG")
        icon.addPixmap(pix)
    return icon
