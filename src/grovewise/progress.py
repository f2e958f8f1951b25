"""Progress and cancel: one small protocol for every long step.

A step reports through a callable ``progress(step, fraction, message, info=None)`` and
stops when a ``threading.Event`` (the cancel event) is set. The terminal, the window and a
cluster worker all pass the same two things. :class:`StepMeter` turns a count of work units
(rows, passes, candidates) into that call: the share done, the count and an estimate of the
time left, at most every ``every`` seconds, and raises :class:`CancelledError` at the next
unit once the cancel event is set, so a cancel is honoured within one unit of work.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable

from .errors import CancelledError

__all__ = ["Progress", "StepMeter", "CancelledError", "check_cancel", "time_left_text",
           "quiet"]

# progress(step, fraction 0..1, message[, solver progress object while solving])
Progress = Callable[..., None]


def quiet(*_args, **_kwargs) -> None:
    """A progress callable that shows nothing."""


def check_cancel(cancel: threading.Event | None, step: str, what: str = "") -> None:
    """Raise :class:`CancelledError` when ``cancel`` is set."""
    if cancel is not None and cancel.is_set():
        where = f" during {what}" if what else ""
        raise CancelledError(f"the {step} step was cancelled{where}; earlier results are kept.")


def time_left_text(seconds: float | None) -> str:
    """``about 12 s left`` / ``about 3 min 05 s left``; empty when not yet known."""
    if seconds is None or seconds != seconds or seconds < 0:
        return ""
    s = int(round(seconds))
    if s < 60:
        return f"about {max(s, 1)} s left"
    return f"about {s // 60} min {s % 60:02d} s left"


class StepMeter:
    """Counts the work units of one part of a step and reports them.

    Parameters
    ----------
    progress : callable or None
        ``progress(step, fraction, message)``.
    step : str
        The step's name (``anatomy``, ``proximity``, ...).
    total : int
        Work units in this part.
    what : str
        What a unit is, in the plural, for the message (``"permutation passes"``).
    cancel : threading.Event, optional
        Checked at every :meth:`advance`.
    start, span : float
        The part covers fractions ``start .. start + span`` of the step.
    every : float
        Seconds between two reports at the least (the first and last always report).
    """

    def __init__(self, progress: Progress | None, step: str, total: int, what: str, *,
                 cancel: threading.Event | None = None, start: float = 0.0,
                 span: float = 1.0, every: float = 0.5) -> None:
        self.progress = progress or quiet
        self.step, self.what = step, what
        self.total = max(int(total), 0)
        self.cancel = cancel
        self.start, self.span, self.every = float(start), float(span), float(every)
        self.done = 0
        self._t0 = time.perf_counter()
        self._last = -1e9
        check_cancel(cancel, step, what)
        self._emit(force=True)

    @property
    def fraction(self) -> float:
        share = self.done / self.total if self.total else 1.0
        return self.start + self.span * min(1.0, share)

    def time_left(self) -> float | None:
        if self.done <= 0 or self.total <= 0:
            return None
        spent = time.perf_counter() - self._t0
        return spent / self.done * (self.total - self.done)

    def message(self) -> str:
        left = time_left_text(self.time_left()) if self.done < self.total else "done"
        return f"{self.what} {self.done:,}/{self.total:,}" + (f", {left}" if left else "")

    def advance(self, n: int = 1) -> None:
        """``n`` more units are done; reports if due; raises CancelledError if cancelled."""
        self.done = min(self.total, self.done + int(n)) if self.total else self.done + int(n)
        check_cancel(self.cancel, self.step, self.what)
        self._emit(force=self.done >= self.total)

    def _emit(self, force: bool = False) -> None:
        now = time.perf_counter()
        if not force and now - self._last < self.every:
            return
        self._last = now
        # fraction 1.0 is the step's own "done" signal: a part never claims it
        self.progress(self.step, min(self.fraction, 0.999), self.message())
