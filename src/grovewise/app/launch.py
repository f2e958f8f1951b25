"""Starting the window: ``grovewise window [--sample | MODEL DATA] [--capture DIR]``.

With a capture folder the window runs every step (the sample's settings, a short time limit
for the solve), saves one PNG per page and exits, without needing a display: the tests and
the README's screenshots come from this.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

CAPTURE_TIME_LIMIT = 10.0  # seconds for the solve when capturing
CAPTURE_SIZE = (1440, 940)  # logical pixels of the window when capturing
STEP_TIMEOUT_S = 600.0


def has_display() -> bool:
    """Whether a window can be shown here (a desktop session, or a Qt platform that draws)."""
    platform = os.environ.get("QT_QPA_PLATFORM", "").split(":")[0].strip().lower()
    if platform:
        return platform not in ("offscreen", "minimal")
    if sys.platform in ("win32", "darwin"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def _application(capture: bool):
    """The QApplication (made here when none exists; at ratio 2 when capturing)."""
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance()
    if app is None:
        if capture:
            if not has_display():
                os.environ["QT_QPA_PLATFORM"] = "offscreen"
            os.environ.setdefault("QT_SCALE_FACTOR", "2")
        app = QApplication(sys.argv[:1])
    app.setOrganizationName("Grovewise")
    app.setApplicationName("Grovewise")
    app.setApplicationDisplayName("Grovewise")
    from .icon import app_icon

    app.setWindowIcon(app_icon())
    return app


def _install_excepthook(window) -> None:
    """Unexpected exceptions in the event loop become a dialog; details go to the log."""
    def hook(kind, exc, tb):
        if issubclass(kind, KeyboardInterrupt):
            sys.__excepthook__(kind, exc, tb)
            return
        exc.__traceback__ = tb
        window.show_problem(exc, "in the window")
    sys.excepthook = hook


def run_window(sample: bool = False, model=None, data=None, target=None, capture_dir=None,
               *, time_limit: float | None = None, review=None) -> int:
    """Open the window; returns the exit code.

    Parameters
    ----------
    sample : bool
        Open the bundled sample (the forest on the invented clinic data).
    model, data : path-like, optional
        A model file and its review data (ignored with ``sample``).
    target : str, optional
        The data's target column.
    capture_dir : path-like, optional
        Run every step, save one PNG per page into this folder and exit (0 when every page
        was saved, 1 when a step failed, 2 on bad input).
    time_limit : float, optional
        Seconds for the solve (default: the review's setting; 10 s when capturing).
    review : Review, optional
        A review already run (``grovewise demo``): shown as it is, nothing is re-run.
    """
    from .problems import setup_logging

    capture = capture_dir is not None
    if not capture and not has_display():
        print("grovewise window: no display found. Run it on a desktop, or render the pages to "
              "PNG files with --capture DIR.", file=sys.stderr)
        return 2
    setup_logging()
    app = _application(capture)
    from ..review import ReviewInputs, ReviewSettings
    from .main_window import MainWindow

    window = MainWindow()
    _install_excepthook(window)
    if capture:
        window.confirm_close = False
        window.resize(*CAPTURE_SIZE)
    else:
        from PySide6.QtCore import QSettings

        geometry = QSettings().value("window/geometry")
        if geometry:
            window.restoreGeometry(geometry)
    limit = time_limit if time_limit is not None else (CAPTURE_TIME_LIMIT if capture else None)
    started = True
    if review is not None:
        window.set_review(review)
    elif sample:
        started = window.open_sample(time_limit=limit)
    elif model is not None and data is not None:
        settings = ReviewSettings() if limit is None else ReviewSettings(time_limit=limit)
        started = window.open_inputs(ReviewInputs(model, data, target), settings)
    if capture:
        if review is None and not (sample or (model is not None and data is not None)):
            print("grovewise window --capture: give --sample or MODEL DATA.", file=sys.stderr)
            return 2
        return capture_tour(window, Path(capture_dir)) if started else _report_problems(window, 2)
    window.show()
    return app.exec()


def _report_problems(window, code: int) -> int:
    for p in window.problems:
        print(f"grovewise window: {p.title}: {p.text()}", file=sys.stderr)
    return code


def wait_for_idle(window, timeout_s: float = STEP_TIMEOUT_S) -> bool:
    """Let the event loop run until no background job is left (False on timeout)."""
    import time

    from PySide6.QtCore import QEventLoop, QTimer

    deadline = time.monotonic() + timeout_s
    while window.runner.busy:
        if time.monotonic() > deadline:
            return False
        loop = QEventLoop()
        window.runner.job_finished.connect(loop.quit)
        QTimer.singleShot(200, loop.quit)
        loop.exec()
        try:
            window.runner.job_finished.disconnect(loop.quit)
        except (RuntimeError, TypeError):
            pass
    return True


def capture_tour(window, folder: Path) -> int:
    """Run every step of the open review, capture every page into ``folder``, close."""
    from ..review import STEPS

    window.show()
    if not wait_for_idle(window):
        return _report_problems(window, 1)
    if window.review is None or not window.review.done("intake"):
        return _report_problems(window, 1)
    missing = [s for s in STEPS if not window.review.done(s)]
    if missing:
        window.run_steps(missing)
        if not wait_for_idle(window):
            print("grovewise window --capture: the steps did not finish in time.", file=sys.stderr)
            return 1
    code = 0 if all(window.review.done(s) for s in STEPS) else 1
    try:
        files = window.capture_all(folder)
    except OSError as exc:
        print(f"grovewise window --capture: {exc}", file=sys.stderr)
        return 2
    for f in files:
        print(f)
    if code:
        _report_problems(window, code)
    window.dirty = False
    window.close()
    return code
