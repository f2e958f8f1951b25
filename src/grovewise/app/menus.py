"""The window's menus, keyboard shortcuts and help boxes.

Every command is a QAction added to the window itself, so its shortcut works on any page;
``build_menus`` returns them by name (the tests and the shortcut list read them there).
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import QMessageBox

from ..review import STEPS
from . import problems


def _action(window, text: str, slot, shortcut=None, tip: str = "") -> QAction:
    act = QAction(text, window)
    if shortcut is not None:
        act.setShortcut(QKeySequence(shortcut))
        act.setShortcutContext(Qt.ShortcutContext.WindowShortcut)
    if tip:
        act.setStatusTip(tip)
        act.setToolTip(tip)
    act.triggered.connect(lambda _=False: slot())
    window.addAction(act)
    return act


def build_menus(w) -> dict[str, QAction]:
    """File, Steps, Go and Help menus of the main window ``w``; the actions by name."""
    from .main_window import PAGE_ORDER

    m = w.menuBar()
    a: dict[str, QAction] = {}
    file = m.addMenu("&File")
    a["open"] = _action(w, "&Open model and data…", w.ask_open, QKeySequence.StandardKey.Open)
    a["sample"] = _action(w, "Open the bundled &sample", w.open_sample)
    a["open_review"] = _action(w, "Open a saved &review…", w.ask_open_review, "Ctrl+Shift+O")
    for key in ("open", "sample", "open_review"):
        file.addAction(a[key])
    w.recent_menu = file.addMenu("Open &recent")
    w.recent_menu.aboutToShow.connect(w._fill_recent)
    file.addSeparator()
    a["save"] = _action(w, "&Save review", w.save, QKeySequence.StandardKey.Save)
    a["save_as"] = _action(w, "Save review &as…", w.save_as, "Ctrl+Shift+S")
    a["export"] = _action(w, "&Export the report…", w.export_report, "Ctrl+E")
    for key in ("save", "save_as", "export"):
        file.addAction(a[key])
    file.addSeparator()
    a["capture"] = _action(w, "&Capture this page…", lambda: w.capture_current(ask=True),
                           "Ctrl+Shift+C")
    a["capture_all"] = _action(w, "Capture &every page…", w.capture_all_ask)
    file.addAction(a["capture"])
    file.addAction(a["capture_all"])
    file.addSeparator()
    a["quit"] = _action(w, "&Quit", w.close, QKeySequence.StandardKey.Quit)
    file.addAction(a["quit"])

    steps = m.addMenu("&Steps")
    a["run"] = _action(w, "&Run this page's step", w.run_current, "Ctrl+R")
    a["run_all"] = _action(w, "Run &every step", lambda: w.run_steps(list(STEPS)), "Ctrl+Shift+R")
    a["cancel"] = _action(w, "&Cancel the running step", w.cancel, "Esc")
    a["compare"] = _action(w, "Compare with a &second model…",
                           lambda: w.pages["anatomy"].ask_second_model())
    for key in ("run", "run_all", "cancel"):
        steps.addAction(a[key])
    steps.addSeparator()
    steps.addAction(a["compare"])

    go = m.addMenu("&Go")
    for i, key in enumerate(PAGE_ORDER):
        a[f"go_{key}"] = _action(w, f"&{i + 1} {w.pages[key].title}", lambda k=key: w.go(k),
                                 f"Ctrl+{i + 1}")
        go.addAction(a[f"go_{key}"])
    go.addSeparator()
    a["next"] = _action(w, "&Next page", lambda: w.step_page(1), "Ctrl+PgDown")
    a["previous"] = _action(w, "&Previous page", lambda: w.step_page(-1), "Ctrl+PgUp")
    go.addAction(a["next"])
    go.addAction(a["previous"])

    help_ = m.addMenu("&Help")
    a["keys"] = _action(w, "&Keyboard shortcuts", lambda: show_shortcuts(w, a), "F1")
    a["log"] = _action(w, "Where is the &log file?", lambda: show_log_place(w))
    a["about"] = _action(w, "&About Grovewise", lambda: show_about(w))
    for key in ("keys", "log", "about"):
        help_.addAction(a[key])
    return a


def _box(w, title: str, text: str) -> QMessageBox:
    box = QMessageBox(QMessageBox.Icon.Information, title, text, QMessageBox.StandardButton.Ok, w)
    w._keep(box)
    box.open()
    return box


def show_shortcuts(w, actions: dict[str, QAction]) -> QMessageBox:
    native = QKeySequence.SequenceFormat.NativeText
    rows = [(act.shortcut().toString(native), act.text().replace("&", ""))
            for act in actions.values() if not act.shortcut().isEmpty()]
    width = max(len(k) for k, _ in rows)
    box = _box(w, "Keyboard shortcuts", "\n".join(f"{k:<{width}}   {name}" for k, name in rows))
    box.setStyleSheet("QLabel { font-family: monospace; }")
    return box


def show_log_place(w) -> QMessageBox:
    return _box(w, "The log file", "Details of unexpected problems are written to\n"
                f"{problems.log_path()}")


def show_about(w) -> QMessageBox:
    from .. import __version__

    return _box(w, "About Grovewise", f"Grovewise {__version__}: review tree-ensemble "
                "classifiers and sign them off.")
