"""The window says what the command line says (issue 13, item 4): each hostile file opened
through the Intake page shows, in the page's problem panel, the very message
``grovewise review`` prints for it, and the window stays usable: every page opens, and a
valid pair of files opens afterwards. Offscreen.

References: the command line's own output for the same files (``grovewise.cli.main``), the
cell where the hostile data file holds its infinite value, ``Review.open``'s own message for a
half-written saved review, and XGBoost's own predictions (the intake step's exactness check
of the valid model passes).
"""

from __future__ import annotations

import pytest

pytest.importorskip("pytestqt")

from PySide6.QtWidgets import QDialogButtonBox, QMessageBox, QPushButton  # noqa: E402

from grovewise.app.launch import wait_for_idle  # noqa: E402
from grovewise.app.main_window import PAGE_ORDER, MainWindow  # noqa: E402
from grovewise.app.open_dialog import OpenDialog  # noqa: E402
from grovewise.cli import EXIT_BAD_INPUT, main  # noqa: E402
from grovewise.review import REVIEW_FILE, Review  # noqa: E402
from grovewise.storage import StorageError  # noqa: E402
from test_app_window import close_dialogs, settings_home  # noqa: E402,F401 (a fixture)
from test_preflight import INF_COLUMN, INF_ROW, TARGET, files  # noqa: E402,F401 (a fixture)

HOSTILE = {"empty CSV": ("model", "empty"), "inf in a cell": ("model", "inf"),
           "random bytes as a model": ("random", "data"),
           "truncated XGBoost JSON": ("truncated", "data")}


def _command_line_says(model, data, out, capsys) -> str:
    """What ``grovewise review`` prints for these files (its exit code checked too)."""
    assert main(["review", str(model), str(data), "--target", TARGET, "--out", str(out)]) \
        == EXIT_BAD_INPUT
    said = [line for line in capsys.readouterr().err.splitlines()
            if line.startswith("grovewise review: ") and "loading the libraries" not in line]
    assert len(said) == 1
    return said[0][len("grovewise review: "):]


def _open_through_intake_page(window, button: QPushButton, model, data) -> OpenDialog:
    """Press an Intake page button that opens the dialog, fill it in and press Open."""
    button.click()
    dialog = [d for d in window._dialogs if isinstance(d, OpenDialog)][-1]
    dialog.model.edit.setText(str(model))
    dialog.data.edit.setText(str(data))
    dialog.target.setCurrentText(TARGET)
    dialog.findChild(QDialogButtonBox).button(QDialogButtonBox.StandardButton.Open).click()
    return dialog


def test_hostile_files_show_the_command_line_message_and_the_window_stays_usable(
        qapp, settings_home, files, tmp_path, capsys):
    """Reference: ``grovewise review``'s own message for each file, printed in this test."""
    w = MainWindow()
    w.confirm_close = False
    w.resize(1200, 820)
    w.show()
    page = w.pages["intake"]
    panel = page.problem_panel
    assert not panel.isVisibleTo(w)
    first = next(b for b in page.empty.findChildren(QPushButton)
                 if b.text() == "Open model and data…")
    button = first
    for case, (model_key, data_key) in HOSTILE.items():
        expected = _command_line_says(files[model_key], files[data_key], tmp_path / "out",
                                      capsys)
        _open_through_intake_page(w, button, files[model_key], files[data_key])
        assert wait_for_idle(w, 60)
        qapp.processEvents()
        assert panel.isVisibleTo(w), case
        assert panel.message.text() == expected, case
        assert w.problems[-1].message == expected and "Traceback" not in panel.message.text()
        assert w.current_key() == "intake"
        assert w.rail.stations["intake"].state == "failed"
        # nothing modal waits for an answer: the window is as usable as before
        assert not [d for d in w._dialogs if isinstance(d, QMessageBox) and d.isVisible()]
        if case == "inf in a cell":
            assert f"'{INF_COLUMN}'" in expected and f"data row {INF_ROW}" in expected
        for key in PAGE_ORDER:
            w.go(key)
            assert w.current_key() == key
        w.go("intake")
        button = panel.open_button  # the panel's own way to open other files
    # a valid pair opens afterwards, and the panel goes
    _open_through_intake_page(w, panel.open_button, files["model"], files["data"])
    assert wait_for_idle(w, 60)
    qapp.processEvents()
    assert w.review.done("intake") and w.review.intake.exactness.passed
    assert not panel.isVisibleTo(w)
    assert w.rail.stations["intake"].state == "done"
    # a saved review missing its document says "half-written" there too, as Review.open does
    saved = tmp_path / "saved"
    w.review.save(saved)
    (saved / REVIEW_FILE).unlink()
    with pytest.raises(StorageError) as caught:
        Review.open(saved)
    assert w.open_review(saved)
    assert wait_for_idle(w, 60)
    assert panel.isVisibleTo(w) and panel.message.text() == str(caught.value)
    assert "half-written" in panel.message.text()
    close_dialogs(w)
    w.close()
