"""Open a saved review in the window (offscreen) and go through every page, measuring the
longest stall of the event loop with a 10 ms timer: while the review is read and shown
("open"), then after each page switch until the page has prepared what it shows (and at
least 1.5 s). Run as a script by the scale benchmark:
``python -m tests.bench.window_probe REVIEW_DIR`` prints one JSON line."""

from __future__ import annotations

import json
import os
import sys
import time

PAGES = ("intake", "anatomy", "proximity", "surrogate", "cases", "signoff")
SETTLE_S = 1.5  # each page is watched at least this long after its switch
PREPARE_LIMIT_S = 120.0  # and at most this long for it to finish preparing
OPEN_SETTLE_S = 0.3  # the opening is watched this long after the review is shown


def main(folder: str) -> None:
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from PySide6.QtCore import QTimer
    from PySide6.QtWidgets import QApplication

    from grovewise.app.main_window import MainWindow

    app = QApplication.instance() or QApplication([])
    win = MainWindow()
    win.confirm_close = False
    win.resize(1360, 860)
    win.show()
    ticks: list[float] = []
    timer = QTimer()
    timer.setInterval(10)
    timer.timeout.connect(lambda: ticks.append(time.perf_counter()))

    def longest_gap(first: int) -> float:
        seen = ticks[first:]
        gaps = [b - a for a, b in zip(seen, seen[1:])]
        return max(gaps) if gaps else float("inf")

    app.processEvents()
    timer.start()
    ticks.append(time.perf_counter())
    t0 = time.perf_counter()
    first = len(ticks) - 1
    ok = win.open_review(folder)
    while ok and (win.runner.busy or win.review is None) and time.perf_counter() - t0 < 300:
        app.processEvents()
        time.sleep(0.002)
    opened = time.perf_counter() - t0
    ok = ok and win.review is not None
    while time.perf_counter() - t0 < opened + OPEN_SETTLE_S:  # what follows the opening
        app.processEvents()
        time.sleep(0.002)
    stalls = {"open": longest_gap(first)}
    prepared = {}
    for key in PAGES:
        preparing = getattr(win.pages[key], "preparing", lambda: False)  # older windows: none
        start = time.perf_counter()
        first = len(ticks) - 1  # the last tick before the switch
        QTimer.singleShot(0, lambda k=key: win.go(k))
        app.processEvents()
        while (time.perf_counter() - start < SETTLE_S or len(ticks) < first + 20
               or (preparing() and time.perf_counter() - start < PREPARE_LIMIT_S)):
            app.processEvents()
            time.sleep(0.002)
        prepared[key] = round(time.perf_counter() - start, 2)
        stalls[key] = longest_gap(first)
    timer.stop()
    win.close()
    pages = {k: v for k, v in stalls.items() if k != "open"}
    print(json.dumps({"opened": ok, "open_seconds": opened, "open_stall": stalls["open"],
                      "page_stall": pages, "page_ready_seconds": prepared,
                      "max_stall": max(stalls.values())}))


if __name__ == "__main__":
    main(sys.argv[1])
