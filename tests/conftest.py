"""Shared test set-up: Qt runs offscreen, matplotlib draws without a display."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("MPLBACKEND", "Agg")


def pytest_sessionstart(session):
    """Compile the surrogate's sweep once before any test's clock starts: tests with short
    time limits measure the search, not numba's first compilation (the review itself
    compiles it in the background while its first steps run)."""
    from grovewise.surrogate.sweep_kernel import warm_up

    warm_up()
