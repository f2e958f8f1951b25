"""Writing figures to disk atomically, in the formats and resolution asked for.

Each file goes through :func:`grovewise.report.atomic.atomic_path`: it is written to a
temporary file in the destination folder and moved over the final name with
:func:`os.replace`, so a reader never sees a half-written figure and a failed write leaves
the previous version intact.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from pathlib import Path

import matplotlib
from matplotlib.figure import Figure

from ..errors import SettingError
from .atomic import atomic_path

FIGURE_FORMATS = ("png", "svg", "pdf")
# No creation dates or tool versions inside the files: the same figure gives the same bytes.
METADATA = {"png": {"Software": None}, "svg": {"Date": None, "Creator": None},
            "pdf": {"CreationDate": None, "Creator": None, "Producer": None}}


def write_atomically(path: str | os.PathLike, write: Callable[[object], None],
                     binary: bool = True) -> Path:
    """Create ``path`` (and its folder) by calling ``write(file)`` on a temporary file beside
    it, moved into place by :func:`grovewise.report.atomic.atomic_path` once complete.

    Parameters
    ----------
    path : path-like
    write : callable
        Receives the open file (binary, or UTF-8 text with ``binary=False``).
    binary : bool
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    text = {} if binary else {"encoding": "utf-8", "newline": ""}
    with atomic_path(path) as temp, open(temp, "wb" if binary else "w", **text) as fh:
        write(fh)
    return path


def check_formats(formats: Sequence[str]) -> tuple[str, ...]:
    """Lower-cased formats, or a SettingError naming the accepted ones."""
    if isinstance(formats, str):
        formats = (formats,)
    out = tuple(str(f).lower().lstrip(".") for f in formats)
    bad = [f for f in out if f not in FIGURE_FORMATS]
    if bad or not out:
        raise SettingError(f"--formats: figure format(s) {', '.join(bad) or 'none'} not "
                           f"supported; use {', '.join(FIGURE_FORMATS)}")
    return out


def check_dpi(dpi) -> float:
    try:
        value = float(dpi)
    except (TypeError, ValueError):
        value = 0.0
    if not 20 <= value <= 1200:
        raise SettingError(f"dpi={dpi!r} must be a number from 20 to 1200")
    return value


def save_figure(fig: Figure, path_stem: str | os.PathLike, formats: Sequence[str] = ("png", "svg"),
                dpi: float = 150) -> list[Path]:
    """Write ``fig`` as ``path_stem.<format>`` for each format, atomically.

    SVG and PDF carry no creation date and SVG ids are salted with a fixed string, so the
    same figure gives the same bytes each time (hashes in a manifest stay meaningful).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path_stem : path-like
        Destination without extension.
    formats : sequence of {"png", "svg", "pdf"}
    dpi : float
        Resolution of raster output (PNG), 20 to 1200.

    Returns
    -------
    list of Path
        The files written, in the order of ``formats``.
    """
    formats, dpi = check_formats(formats), check_dpi(dpi)
    stem = Path(path_stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    written = []
    for fmt in formats:
        target = stem.with_name(f"{stem.name}.{fmt}")
        with atomic_path(target) as temp, matplotlib.rc_context(
                {"svg.hashsalt": "grovewise", "svg.fonttype": "path"}):
            fig.savefig(temp, format=fmt, dpi=dpi, metadata=METADATA[fmt])
        written.append(target)
    return written
