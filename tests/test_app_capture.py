"""The capture command: the window runs every step on the sample offscreen, saves one
non-blank, high-resolution PNG per page and exits 0."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("PySide6")

PAGES = ("1-intake", "2-anatomy", "3-proximity", "4-surrogate", "5-cases", "6-signoff")
SCRIPT = ("import sys; from grovewise.app.launch import run_window; "
          "sys.exit(run_window(sample=True, capture_dir=sys.argv[1], time_limit=3.0))")
KEEP = os.environ.get("GROVEWISE_KEEP_CAPTURES")  # a folder: keep the PNGs there to look at


def _gray(path: Path) -> np.ndarray:
    from PIL import Image  # matplotlib's own dependency

    with Image.open(path) as img:
        return np.asarray(img.convert("L"), dtype=np.float64)


def test_capture_command_saves_one_png_per_page(tmp_path):
    env = dict(os.environ)
    src = str(Path(__file__).resolve().parents[1] / "src")
    env["PYTHONPATH"] = src + os.pathsep + env.get("PYTHONPATH", "")
    env.update(QT_QPA_PLATFORM="offscreen", MPLBACKEND="Agg", XDG_CONFIG_HOME=str(tmp_path / "cfg"),
               GROVEWISE_LOG_DIR=str(tmp_path / "log"))
    env.pop("QT_SCALE_FACTOR", None)
    out = Path(KEEP) if KEEP else tmp_path / "captures"
    done = subprocess.run([sys.executable, "-c", SCRIPT, str(out)], env=env, capture_output=True,
                          text=True, timeout=240)
    assert done.returncode == 0, done.stderr[-2000:]
    files = sorted(out.glob("*.png"))
    assert [f.stem for f in files] == list(PAGES)
    printed = [line for line in done.stdout.splitlines() if line.endswith(".png")]
    assert printed == [str(f) for f in files]
    for f in files:
        g = _gray(f)
        # high resolution: the window is 1440 logical pixels wide, captured at ratio 2
        assert g.shape[1] >= 2000, f.name
        # not blank: a page of text and figures has dark ink on a light ground
        assert g.std() > 12, f.name
        assert (g < 100).mean() > 0.002, f.name
    assert "Traceback" not in done.stderr
