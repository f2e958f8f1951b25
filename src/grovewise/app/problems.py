"""Problems shown to the reviewer: a dialog that says what happened and what to do.

Grovewise's own errors (:class:`~grovewise.errors.GrovewiseError`) already name the file,
column or setting and the remedy, so their message is shown as it is, under a title that
says which kind of problem it is. Anything else is a fault of ours: the dialog gets a short
message and the traceback goes to a log file, never to the screen.
"""

from __future__ import annotations

import logging
import os
import sys
import traceback
from dataclasses import dataclass
from pathlib import Path

from ..errors import (DataError, GrovewiseError, ModelFileError, SettingError, UnsafeModelError,
                      UnsupportedModelError)

LOG_FILE = "grovewise-window.log"
_logger = logging.getLogger("grovewise.app")


@dataclass(frozen=True)
class Problem:
    """What a dialog says: a title, the message and what to do next."""

    title: str
    message: str
    advice: str
    expected: bool  # a Grovewise error (bad input), not a fault of the program

    def text(self) -> str:
        return f"{self.message}\n\n{self.advice}" if self.advice else self.message


def log_folder() -> Path:
    """Where the window's log file lives (``GROVEWISE_LOG_DIR`` overrides it)."""
    override = os.environ.get("GROVEWISE_LOG_DIR")
    if override:
        return Path(override)
    base = os.environ.get("XDG_STATE_HOME") or (Path.home() / ".local" / "state")
    if sys.platform == "win32":
        base = os.environ.get("LOCALAPPDATA", str(Path.home()))
    elif sys.platform == "darwin":
        base = Path.home() / "Library" / "Logs"
    return Path(base) / "grovewise"


def log_path() -> Path:
    return log_folder() / LOG_FILE


def setup_logging() -> Path:
    """Send the window's log (with tracebacks of unexpected faults) to :func:`log_path`."""
    path = log_path()
    if any(isinstance(h, logging.FileHandler) and Path(h.baseFilename) == path
           for h in _logger.handlers):
        return path
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handler: logging.Handler = logging.FileHandler(path, encoding="utf-8")
    except OSError:  # a read-only home: keep the details on stderr instead
        handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    _logger.addHandler(handler)
    _logger.setLevel(logging.INFO)
    return path


def log_fault(exc: BaseException, context: str) -> None:
    """Write an unexpected exception with its traceback to the log file."""
    tb = "".join(traceback.format_exception(type(exc), exc, exc.__traceback__))
    _logger.error("unexpected fault while %s:\n%s", context, tb)


_TITLES = (
    (UnsafeModelError, "This model file could run code"),
    (UnsupportedModelError, "This model is not supported"),
    (ModelFileError, "The model file cannot be used"),
    (DataError, "The data does not fit the model"),
    (SettingError, "A setting needs another value"),
)


def describe(exc: BaseException, context: str) -> Problem:
    """The dialog's words for ``exc``, raised while doing ``context`` ("the surrogate step")."""
    if isinstance(exc, GrovewiseError):
        title = next((t for cls, t in _TITLES if isinstance(exc, cls)), None)
        if title is None:
            title = ("The saved review cannot be opened" if type(exc).__name__ == "StorageError"
                     else f"Grovewise stopped {context}")
        advice = "Earlier results are kept." if "step" in context else ""
        return Problem(title, str(exc), advice, expected=True)
    if isinstance(exc, OSError):
        where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
        return Problem("A file could not be read or written",
                       f"{exc.strerror or exc}{where}.",
                       "Check that the folder exists and that you may write there, then try again.",
                       expected=True)
    log_fault(exc, context)
    return Problem(f"Something went wrong {context}",
                   f"Grovewise met an unexpected problem ({type(exc).__name__}). Earlier "
                   "results are kept.",
                   f"The details are in the log file {log_path()}; please send it with your "
                   "report of what you did.", expected=False)
