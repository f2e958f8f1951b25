"""What the property-based tests share: how many cases they run, the hard limit on one case,
the check that a reader changed no file, and the corpus of inputs that once failed.

Profiles (``GROVEWISE_HYPOTHESIS``): ``ci`` (default) keeps every property test together
within the CI budget; ``thorough`` runs many more cases on purpose:

    GROVEWISE_HYPOTHESIS=thorough python3 -m pytest -q -p no:cacheprovider \
        tests/test_properties_data.py tests/test_properties_models.py \
        tests/test_properties_settings.py --hypothesis-show-statistics

A case that fails is saved by hand under ``tests/corpus/`` (a small file each) and replayed
by the plain tests of each property file, so a defect found once stays fixed.
"""

from __future__ import annotations

import contextlib
import faulthandler
import os
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, event, settings
from hypothesis.control import currently_in_test_context

CORPUS = Path(__file__).parent / "corpus"
PROFILE = os.environ.get("GROVEWISE_HYPOTHESIS", "ci")
# A case that takes longer than this is a hang: the process stops with every thread's stack
# (faulthandler), so CI fails at once instead of waiting for its own time-out.
HANG_SECONDS = 60.0
_SCALE = {"ci": 1, "thorough": 20}[PROFILE]


def cases(n: int, deadline_ms: int = 5_000, **extra) -> settings:
    """The settings of one property test: ``n`` cases in the ``ci`` profile (``thorough``
    runs 20 times as many), each under ``deadline_ms``; no database (nothing written into
    the repository), a fixed seed in CI so that the cases are the same on every run."""
    return settings(max_examples=n * _SCALE, deadline=deadline_ms, database=None,
                    derandomize=PROFILE == "ci", print_blob=True,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.function_scoped_fixture],
                    **extra)


@contextlib.contextmanager
def no_hang(seconds: float = HANG_SECONDS):
    """Stop the whole process (with every thread's stack on stderr) if the block hangs."""
    faulthandler.dump_traceback_later(seconds, exit=True)
    try:
        yield
    finally:
        faulthandler.cancel_dump_traceback_later()


def snapshot(*folders: Path) -> dict:
    """Every file under ``folders`` with its size and modification time (ns)."""
    out = {}
    for folder in folders:
        for root, _dirs, files in os.walk(folder):
            for name in files:
                p = Path(root) / name
                st = p.stat()
                out[str(p)] = (st.st_size, st.st_mtime_ns)
    return out


@contextlib.contextmanager
def untouched(folder: Path):
    """Run the block with the working directory in a fresh temporary folder, and check that
    neither that folder nor ``folder`` (where the input lies) gained or changed a file."""
    with tempfile.TemporaryDirectory(prefix="gw-cwd-") as cwd:
        before = snapshot(folder, Path(cwd))
        old = os.getcwd()
        os.chdir(cwd)
        try:
            yield
        finally:
            os.chdir(old)
        after = snapshot(folder, Path(cwd))
        assert after == before, f"files changed by a reader: {_changes(before, after)}"


def _changes(before: dict, after: dict) -> list[str]:
    return sorted({k for k in set(before) | set(after) if before.get(k) != after.get(k)})


def outcome(text: str) -> None:
    """Count the case's outcome in hypothesis' statistics (``--hypothesis-show-statistics``
    shows the share of each); nothing outside a property test (the corpus replays)."""
    if currently_in_test_context():
        event(text)


def remember(path: Path) -> None:
    """Keep a copy of the case's input where ``GROVEWISE_HYPOTHESIS_LAST`` says (a folder),
    so that a case that crashes the whole process can be found and added to the corpus."""
    keep = os.environ.get("GROVEWISE_HYPOTHESIS_LAST")
    if keep:
        Path(keep).mkdir(parents=True, exist_ok=True)
        (Path(keep) / f"last{path.suffix}").write_bytes(path.read_bytes())


def corpus_files(kind: str) -> list[Path]:
    """The saved inputs of one kind (a sub-folder of tests/corpus), sorted by name."""
    folder = CORPUS / kind
    return sorted(p for p in folder.iterdir() if p.is_file() and p.name != "README.md") \
        if folder.is_dir() else []
