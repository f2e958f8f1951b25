"""Background work: review steps and other long calls run in a QThread, never in the GUI thread.

A :class:`StepWorker` calls ``review.run_step`` for each step in turn, relaying the core's
progress callback as Qt signals (queued into the GUI thread). Cancel sets the
``threading.Event`` the core polls; the surrogate step then returns its best incumbent.
:class:`TaskRunner` owns the thread and allows one job at a time. What the pages show (figures,
look-ups over every row) is prepared in :class:`LatestCall` jobs, each on a runner of its own.
"""

from __future__ import annotations

import gc
import math
import os
import re
import sys
import threading
import time
from collections.abc import Callable
from contextlib import contextmanager, nullcontext
from dataclasses import dataclass

from PySide6.QtCore import QObject, QThread, Signal, Slot

from ..review import CancelledError

_PAIR = re.compile(r"(\w+)\s*=\s*('[^']*'|\"[^\"]*\"|[^,;()\s]+)")
# The review's progress line while solving: "program: 2.5 s, incumbent 0.04512, bound 0.001"
_LINE = re.compile(r"^\s*(?P<stage>\w+):\s*(?P<elapsed>[-\d.eE+]+)\s*s\b")
_WORD = re.compile(r"\b(incumbent|bound|gap)\s+([-\d.eE+]+|None|nan)")
PROGRESS_EVERY = 0.05  # seconds between plain progress signals (solver points always pass)


@dataclass(frozen=True)
class SolverPoint:
    """One point of the live chart: when, the incumbent's objective, the bound, the stage."""

    elapsed: float
    incumbent: float | None
    bound: float | None
    gap: float | None
    stage: str

    @classmethod
    def from_info(cls, info) -> "SolverPoint | None":
        """From the solver's progress object, a mapping, or its text form; None if neither."""
        if isinstance(info, str):
            fields = {k: v.strip("'\"") for k, v in _PAIR.findall(info)}
            line = _LINE.match(info)
            if line and "elapsed" not in fields:
                fields = {"stage": line["stage"], "elapsed": line["elapsed"],
                          "incumbent": None, **dict(_WORD.findall(info))}
        elif isinstance(info, dict):
            fields = info
        else:
            fields = {k: getattr(info, k) for k in ("elapsed", "incumbent", "bound", "gap",
                                                    "stage") if hasattr(info, k)}
        if "elapsed" not in fields or "incumbent" not in fields:
            return None
        return cls(elapsed=_num(fields.get("elapsed")) or 0.0,
                   incumbent=_num(fields.get("incumbent")), bound=_num(fields.get("bound")),
                   gap=_num(fields.get("gap")), stage=str(fields.get("stage", "")))


BACKGROUND_NICENESS = 10


def lower_this_thread() -> None:
    """Run the calling (worker) thread, and the solver threads it starts, below the GUI
    thread's CPU priority, so a busy solve on every core still leaves the window its turn.

    Linux keeps a niceness per thread; elsewhere this does nothing (Qt's thread priorities
    are not honoured there either).
    """
    if not sys.platform.startswith("linux") or not hasattr(os, "setpriority"):
        return
    try:
        tid = threading.get_native_id()
        now = os.getpriority(os.PRIO_PROCESS, tid)
        os.setpriority(os.PRIO_PROCESS, tid, min(19, max(now, 0) + BACKGROUND_NICENESS))
    except OSError:  # not permitted in some sandboxes: run at the normal priority
        pass


# Steps that build large object graphs (the surrogate program in Pyomo): Python's cyclic
# collector, run from the worker, holds the interpreter lock for up to a fifth of a second
# per pass over that graph, which stops the GUI thread too. It is paused for these steps.
PAUSE_GC_STEPS = ("surrogate",)


@contextmanager
def collector_paused(pause: bool):
    """Pause Python's cyclic garbage collector (process-wide) for the block and resume it
    afterwards; a no-op when ``pause`` is false or the collector is already off."""
    if not pause or not gc.isenabled():
        yield
        return
    gc.disable()
    try:
        yield
    finally:
        gc.enable()


# Python hands its interpreter lock to a waiting thread after this long (its default: 5 ms).
# The GUI thread waits for the lock at every call from Qt into Python (a timer, a paint, a
# model's data); with figures made and drawn in workers, turns of 5 ms add up to stalls of a
# tenth of a second and more, turns of 1 ms keep the waits short.
GUI_SWITCH_INTERVAL_S = 0.001


def favour_gui_thread() -> None:
    """Shorten the interpreter's thread turns to :data:`GUI_SWITCH_INTERVAL_S` (process-wide;
    never lengthens them)."""
    sys.setswitchinterval(min(sys.getswitchinterval(), GUI_SWITCH_INTERVAL_S))


def settle_collector() -> None:
    """Collect garbage once, then exempt every object alive from later collections
    (``gc.freeze``): the modules, the window's own widgets and what is loaded at start.

    A full pass of the cyclic collector holds the interpreter lock over every tracked object,
    from whichever thread sets it off; over the half-million objects of the imported
    libraries that is a third of a second or more, a stall of the window each time. After
    this, a full pass walks only what was made since (figures, results). Called when the
    window is built, before its event loop turns, and when a saved review has been read (its
    libraries imported, the previous review's figures let go).
    """
    gc.collect()
    gc.freeze()


def _num(value) -> float | None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


class StepWorker(QObject):
    """Runs review steps in order in its thread; stops at the first failure or a cancel."""

    progressed = Signal(str, float, str)
    solver_point = Signal(object)
    step_started = Signal(str)
    step_done = Signal(str)
    failed = Signal(str, object)
    finished = Signal(str)  # "done", "cancelled" or "failed"

    def __init__(self, review, steps, cancel: threading.Event) -> None:
        super().__init__()
        self.review = review
        self.steps = list(steps)
        self.cancel = cancel
        self._last = 0.0
        self.times: dict[str, tuple[float, float]] = {}  # step -> (start, end), perf_counter

    def _progress(self, step: str, fraction: float, message, *rest) -> None:
        info = rest[0] if rest else getattr(message, "info", None)
        point = SolverPoint.from_info(info if info is not None else message) \
            if step == "surrogate" else None
        if point is not None:
            self.solver_point.emit(point)
        now = time.perf_counter()
        if point is not None or fraction in (0.0, 1.0) or now - self._last >= PROGRESS_EVERY:
            self._last = now
            self.progressed.emit(step, float(fraction), str(message))

    @Slot()
    def run(self) -> None:
        lower_this_thread()
        outcome = "done"
        finished: list[str] = []
        for step in self.steps:
            if self.cancel.is_set() and not _follows_cancel(step, finished):
                outcome = "cancelled"
                break
            self.step_started.emit(step)
            start = time.perf_counter()
            try:
                with collector_paused(step in PAUSE_GC_STEPS):
                    self.review.run_step(step, progress=self._progress, cancel=self.cancel)
            except CancelledError:
                outcome = "cancelled"
                break
            except BaseException as exc:  # shown as a dialog by the window, never re-raised
                self.failed.emit(step, exc)
                outcome = "failed"
                break
            finally:
                self.times[step] = (start, time.perf_counter())
            finished.append(step)
            self.step_done.emit(step)
        if outcome == "done" and self.cancel.is_set():
            outcome = "cancelled"
        self.finished.emit(outcome)


def _follows_cancel(step: str, finished: list[str]) -> bool:
    """A cancelled solve still hands back its best tree; the cases (a second's work) are then
    remade from it, so the Cases page never shows rows of an older tree."""
    return step == "cases" and "surrogate" in finished


class CallWorker(QObject):
    """Runs one function in its thread and hands back the result or the exception."""

    succeeded = Signal(object)
    failed = Signal(object)
    finished = Signal(str)

    def __init__(self, fn: Callable, args=(), kwargs=None) -> None:
        super().__init__()
        self.fn, self.args, self.kwargs = fn, tuple(args), dict(kwargs or {})

    @Slot()
    def run(self) -> None:
        lower_this_thread()
        try:
            result = self.fn(*self.args, **self.kwargs)
        except BaseException as exc:
            self.failed.emit(exc)
            self.finished.emit("failed")
            return
        self.succeeded.emit(result)
        self.finished.emit("done")


class TaskRunner(QObject):
    """One background job at a time, each in a fresh QThread.

    ``busy_changed(bool)`` tells the window to enable or disable what may not run while a
    job is under way; ``job_finished(kind, outcome)`` follows every job.
    """

    busy_changed = Signal(bool)
    job_finished = Signal(str, str)
    worker_ready = Signal(object)  # a new worker, before its thread starts (connect here)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self._thread: QThread | None = None
        self._worker: QObject | None = None
        self.last_worker: QObject | None = None  # kept after the job, for its timings
        self._kind = ""
        self.cancel_event = threading.Event()
        self.cancel_requested_at: float | None = None

    @property
    def busy(self) -> bool:
        return self._thread is not None

    @property
    def kind(self) -> str:
        return self._kind if self.busy else ""

    def run_steps(self, review, steps, connect: Callable | None = None) -> StepWorker:
        """Start ``steps``; ``connect(worker)`` runs before the thread starts, so no early
        signal is missed."""
        self.cancel_event = threading.Event()
        worker = StepWorker(review, steps, self.cancel_event)
        self._start(worker, "steps", connect)
        return worker

    def run_call(self, fn: Callable, *args, kind: str = "call", connect: Callable | None = None,
                 **kwargs) -> CallWorker:
        worker = CallWorker(fn, args, kwargs)
        self._start(worker, kind, connect)
        return worker

    def cancel(self) -> None:
        if self.busy and not self.cancel_event.is_set():
            self.cancel_requested_at = time.perf_counter()
            self.cancel_event.set()

    def wait(self, timeout_ms: int = 30000) -> bool:
        """Block until the current job's thread ends (for closing the window).

        The thread's loop is told to quit here: the quit queued by the job's end waits for
        the GUI thread, which is blocked in this very call, so waiting on it alone would
        take the whole timeout (and leave the thread running when the window goes)."""
        if self._thread is None:
            return True
        self._thread.quit()  # takes effect once the job under way returns
        return self._thread.wait(timeout_ms)

    def _start(self, worker: QObject, kind: str, connect: Callable | None = None) -> None:
        if self.busy:
            raise RuntimeError("a background job is already running")
        if connect is not None:
            connect(worker)
        self.worker_ready.emit(worker)
        thread = QThread()
        worker.moveToThread(thread)
        thread.started.connect(worker.run)
        worker.finished.connect(thread.quit)
        worker.finished.connect(self._on_worker_finished)  # queued into the GUI thread
        self._thread, self._worker, self._kind = thread, worker, kind
        self.last_worker = worker
        self.cancel_requested_at = None
        self.busy_changed.emit(True)
        thread.start()

    @Slot(str)
    def _on_worker_finished(self, outcome: str) -> None:
        kind, thread = self._kind, self._thread
        if thread is not None:
            thread.wait(5000)
        self._thread, self._worker = None, None
        self.busy_changed.emit(False)
        self.job_finished.emit(kind, outcome)


# ---------------------------------------------------------------------------- display jobs
# What a page shows is prepared off the GUI thread too: figures to draw, rows to look up,
# a search over a long table. Figures, made and drawn in Python, take turns in one slot: on
# two cores, several Python-heavy threads at once would each take the interpreter lock from
# the GUI thread in turn. Long look-ups (seconds) run beside them rather than hold them up.
DISPLAY_SLOT = threading.Lock()


class _Overtaken(Exception):
    """A display request that a newer one replaced before it started."""


class LatestCall(QObject):
    """One display job of a page or a view, in a worker thread (:meth:`TaskRunner.run_call`).

    ``request(fn, *args, done=..., **kwargs)`` runs ``fn`` in the worker and hands its result
    to ``done`` in the GUI thread. One call runs at a time; a request made meanwhile waits,
    replacing any request already waiting, and only the newest request's result is handed
    on: a reviewer who clicks through ten rows sees the tenth, not ten redraws. With
    ``exclusive``, calls take turns with the other exclusive ones in :data:`DISPLAY_SLOT`.
    """

    def __init__(self, parent=None, exclusive: bool = True) -> None:
        super().__init__(parent)
        self.exclusive = exclusive
        self.runner = TaskRunner(self)
        self.runner.job_finished.connect(self._start_next)
        self._serial = 0
        self._waiting: tuple | None = None
        self._running: tuple | None = None  # (serial, done, failed) of the call under way

    @property
    def busy(self) -> bool:
        """Whether a request is running or waiting."""
        return self.runner.busy or self._waiting is not None

    def request(self, fn: Callable, *args, done: Callable | None = None,
                failed: Callable | None = None, stale_check: bool = False, **kwargs) -> int:
        """Run ``fn(*args, **kwargs)`` in the worker; ``done(result)`` or ``failed(exc)``
        follow in the GUI thread unless a newer request came first. With ``stale_check``,
        ``fn`` also gets ``stale``, a callable saying whether a newer request has come (a long
        call checks it now and then and gives up). Returns the request's number."""
        self._serial += 1
        self._waiting = (self._serial, fn, args, kwargs, done, failed, stale_check)
        self._start_next()
        return self._serial

    def drop(self) -> None:
        """Forget every request: a call under way finishes, but its result is not handed on."""
        self._serial += 1
        self._waiting = None

    def wait(self, timeout_ms: int = 30000) -> bool:
        return self.runner.wait(timeout_ms)

    def _stale(self, serial: int) -> bool:
        return serial != self._serial

    def _start_next(self, *_ignored) -> None:
        if not self.runner.busy:  # let go of the last call's arguments (a figure, a review)
            self.runner.last_worker, self._running = None, None
        if self._waiting is None or self.runner.busy:
            return
        serial, fn, args, kwargs, done, failed, stale_check = self._waiting
        self._waiting = None
        if stale_check:
            kwargs = {**kwargs, "stale": lambda: self._stale(serial)}

        def call():
            with DISPLAY_SLOT if self.exclusive else nullcontext():
                if self._stale(serial):
                    raise _Overtaken()
                return fn(*args, **kwargs)

        self._running = (serial, done, failed)

        def connect(worker) -> None:
            worker.succeeded.connect(self._succeeded)  # queued into the GUI thread
            worker.failed.connect(self._failed)
        self.runner.run_call(call, kind="display", connect=connect)

    @Slot(object)
    def _succeeded(self, result) -> None:
        serial, done, _failed = self._running or (None, None, None)
        if not self._stale(serial) and done is not None:
            done(result)

    @Slot(object)
    def _failed(self, exc) -> None:
        serial, _done, failed = self._running or (None, None, None)
        if self._stale(serial) or isinstance(exc, _Overtaken):
            return
        if failed is not None:
            failed(exc)
        else:  # a fault of the window's own: the window's hook logs it and says so
            sys.excepthook(type(exc), exc, exc.__traceback__)
