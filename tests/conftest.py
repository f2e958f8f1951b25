"""Shared test set-up: Qt runs offscreen, matplotlib draws without a display."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("MPLBACKEND", "Agg")
