"""Interrupted writes (issue 13, item 5): a review saved over an existing one and killed at
any point leaves the old review or the new one whole, never a mix; ``reproduce`` of a
half-written folder says so.

Each save runs in a forked copy of this process that is killed with SIGKILL (no clean-up
code runs, as when the power goes or the operating system ends the program): at every
file-system step of the save in turn (every rename, exchange, link, flush and removal), and
at several moments while a large arrays file is being written. The reference for "whole" is
the sha256 of every file of a complete save of each of the two reviews, taken with hashlib.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import time
from pathlib import Path

import numpy as np
import pytest

from grovewise.cli import main
from grovewise.report import atomic
from grovewise.report.atomic import atomic_folder, leftover_folders, restore_folder
from grovewise.review import REVIEW_FILE, Review, ReviewInputs, ReviewSettings
from grovewise.sample_data import sample_paths
from grovewise.storage import StorageError

pytestmark = pytest.mark.skipif(not hasattr(os, "fork"), reason="kills a forked process")

CHILD_TIMEOUT_S = 60.0
# the names of the file-system steps a kill may land just before
STEP_CALLS = (("os", "rename"), ("os", "replace"), ("os", "link"), ("os", "unlink"),
              ("os", "fsync"), ("shutil", "rmtree"), ("atomic", "_exchange"))


# ---------------------------------------------------------------------- killing a save
def _count_steps_then_die(at: int | None, no_exchange: bool = False) -> None:
    """In the child: count every file-system step; SIGKILL just before step ``at``."""
    import shutil as sh

    modules = {"os": os, "shutil": sh, "atomic": atomic}
    counter = [0]
    for mod_name, name in STEP_CALLS:
        module = modules[mod_name]
        real = getattr(module, name)

        def step(*args, _real=real, **kwargs):
            counter[0] += 1
            if at is not None and counter[0] == at:
                os.kill(os.getpid(), signal.SIGKILL)
            return _real(*args, **kwargs)

        setattr(module, name, step)
    if no_exchange:
        atomic._renameat2.cache_clear()
        atomic._renameat2 = lambda: None  # the two-rename path other systems take
    return counter


def _in_child(save, *, at: int | None = None, no_exchange: bool = False,
              kill_after_s: float | None = None) -> tuple[str, int]:
    """Run ``save()`` in a forked child; ("killed", 0) or ("done", steps it took)."""
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child: never returns into pytest
        code = 1
        try:
            os.close(read)
            counter = _count_steps_then_die(at, no_exchange)
            save()
            os.write(write, str(counter[0]).encode())
            code = 0
        finally:
            os._exit(code)
    os.close(write)
    if kill_after_s is not None:
        time.sleep(kill_after_s)
        try:
            os.kill(pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    deadline = time.monotonic() + CHILD_TIMEOUT_S
    while True:
        done, status = os.waitpid(pid, os.WNOHANG)
        if done:
            break
        if time.monotonic() > deadline:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
            pytest.fail("the saving child did not finish in time")
        time.sleep(0.005)
    reply = os.read(read, 64).decode()
    os.close(read)
    if os.WIFSIGNALED(status):
        assert os.WTERMSIG(status) == signal.SIGKILL
        return "killed", 0
    assert os.WEXITSTATUS(status) == 0, "the save failed in the child without being killed"
    return "done", int(reply)


def _files(folder: Path) -> dict[str, str]:
    """Every file below ``folder`` -> its sha256 (hashlib): the reference for "whole"."""
    out = {}
    for path in sorted(folder.rglob("*")):
        if path.is_file():
            out[path.relative_to(folder).as_posix()] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


# ---------------------------------------------------------------------- a whole folder
def _folder_payload(tag: str, size: int):
    """A review folder's shape: a saved review (document and arrays), a report, a manifest."""
    rng = np.random.default_rng(len(tag))

    def write(into: Path) -> None:
        (into / "review").mkdir()
        np.save(into / "review" / "arrays.npy", rng.standard_normal(size))
        (into / "review" / REVIEW_FILE).write_text(json.dumps({"tag": tag}))
        (into / "report.html").write_text(f"<p>{tag}</p>" * 200)
        (into / "manifest.json").write_text(json.dumps({"tag": tag}))
    return write


@pytest.mark.parametrize("no_exchange", [False, True], ids=["exchange", "two-renames"])
def test_a_folder_replaced_while_killed_at_every_step_is_old_or_new_whole(tmp_path, no_exchange):
    """Reference: hashlib digests of a complete write of the old and of the new folder."""
    target = tmp_path / "Prüfung 1" / "review out"  # spaces and a letter outside ASCII
    with atomic_folder(target) as staging:
        _folder_payload("old", 20_000)(staging)
    (target / "notes.txt").write_text("the reviewer's own notes", encoding="utf-8")
    (target / "signature.json").write_text("{}")  # the old files' signature: must not outlive them
    old = _files(target)
    pristine = tmp_path / "pristine"
    shutil.copytree(target.parent, pristine, symlinks=True)

    def save() -> None:
        with atomic_folder(target, drop={"signature.json"}) as staging:
            _folder_payload("new", 30_000)(staging)

    outcome, steps = _in_child(save, no_exchange=no_exchange)
    assert outcome == "done" and steps >= 8  # fsyncs, the link of notes.txt, renames, removal
    new = _files(target)
    assert new["notes.txt"] == old["notes.txt"] and "signature.json" not in new
    assert new["manifest.json"] != old["manifest.json"]
    seen = set()
    for at in range(1, steps + 1):
        shutil.rmtree(target.parent)
        shutil.copytree(pristine, target.parent, symlinks=True)
        outcome, _ = _in_child(save, at=at, no_exchange=no_exchange)
        assert outcome == "killed"
        if not target.exists():  # only between the two renames of the fallback path
            assert no_exchange and restore_folder(target) is not None
        state = _files(target)
        assert state in (old, new), f"killed before step {at}: a mix of old and new"
        seen.add("old" if state == old else "new")
        # the next write removes whatever the killed one left beside the folder
        with atomic_folder(target) as staging:
            (staging / "x").write_text("x")
        assert leftover_folders(target) == []
    assert seen == {"old", "new"}  # the sweep crossed the moment the new folder took over


# ---------------------------------------------------------------------- Review.save
@pytest.fixture(scope="module")
def reviews(tmp_path_factory):
    """The sample after its intake step, as an old review and a changed new one."""
    paths = sample_paths()
    old = Review(ReviewInputs(paths["forest"], paths["data"], target=paths["target"]),
                 ReviewSettings(exactness_rows=200))
    old.run(steps=("intake",))
    old.program_mps = bytes(np.random.default_rng(1).integers(0, 256, 2_000_000, np.uint8))
    folder = tmp_path_factory.mktemp("saved")
    old.save(folder / "a")
    new = Review.open(folder / "a")
    new.reviewer.decision, new.reviewer.notes = "reject", "a new note"
    new.program_mps = bytes(np.random.default_rng(2).integers(0, 256, 3_000_000, np.uint8))
    new.save(folder / "b")
    large = Review.open(folder / "b")  # the new review with 24 MB of arrays: a longer save
    large.program_mps = bytes(np.random.default_rng(3).integers(0, 256, 24_000_000, np.uint8))
    large.save(folder / "c")
    return {"old": old, "new": new, "large": large, "old_files": _files(folder / "a"),
            "new_files": _files(folder / "b"), "large_files": _files(folder / "c")}


def _which(folder: Path, reviews) -> str:
    """"old" or "new" when ``folder`` opens as one of them whole; fails on anything else."""
    review = Review.open(folder)  # raises on a half-written or mixed folder
    doc = json.loads((folder / REVIEW_FILE).read_text(encoding="utf-8"))
    pair = {REVIEW_FILE: _files(folder)[REVIEW_FILE],
            doc["arrays"]: _files(folder)[doc["arrays"]]}
    for name in ("old", "new", "large"):
        if pair.items() <= reviews[f"{name}_files"].items():
            assert review.reviewer.decision == reviews[name].reviewer.decision
            return name
    pytest.fail("the saved review is neither the old one nor the new one")


def test_a_review_saved_over_another_and_killed_at_every_step_reopens_whole(tmp_path, reviews):
    """Reference: the digests of complete saves of the old and the new review."""
    folder = tmp_path / "saved review"

    def save() -> None:
        reviews["new"].save(folder)

    def fresh() -> None:
        shutil.rmtree(folder, ignore_errors=True)
        reviews["old"].save(folder)

    fresh()
    outcome, steps = _in_child(save)
    assert outcome == "done" and _which(folder, reviews) == "new"
    seen = []
    for at in range(1, steps + 1):
        fresh()
        assert _in_child(save, at=at)[0] == "killed"
        seen.append(_which(folder, reviews))
    assert seen[0] == "old" and seen[-1] == "new"
    # the next complete save leaves nothing of the killed ones: the document and one arrays file
    reviews["new"].save(folder)
    assert sorted(_files(folder)) == sorted(reviews["new_files"])


def test_kills_at_moments_across_a_large_save_leave_old_or_new(tmp_path, reviews):
    """SIGKILL at four moments spread over a save of about 24 MB of arrays; reference as
    above. The moments are shares of the time one uninterrupted save took here."""
    folder = tmp_path / "große Prüfung"
    reviews["old"].save(folder)
    start = time.perf_counter()
    assert _in_child(lambda: reviews["large"].save(folder))[0] == "done"
    took = time.perf_counter() - start
    outcomes = []
    for share in (0.15, 0.4, 0.65, 0.9):
        shutil.rmtree(folder)
        reviews["old"].save(folder)
        outcomes.append(_in_child(lambda: reviews["large"].save(folder),
                                  kill_after_s=share * took)[0])
        assert _which(folder, reviews) in ("old", "large")
    assert "killed" in outcomes


# ---------------------------------------------------------------------- half-written folders
def _written(tmp_path: Path, reviews) -> Path:
    """A review's folder as a save writes it: the saved review, then the manifest (made by
    the manifest's own builder; this review ran its intake step only, so no report)."""
    from grovewise.report.manifest import build_manifest, saved_review_entry

    out = tmp_path / "review out"
    with atomic_folder(out) as staging:
        reviews["old"].save(staging / "review")
        manifest = build_manifest(reviews["old"])  # the inputs by their absolute paths
        manifest["saved_review"] = saved_review_entry(staging / "review", staging)
        (staging / "manifest.json").write_text(json.dumps(manifest, indent=1))
    return out


def test_reproduce_says_plainly_that_a_folder_is_half_written(tmp_path, reviews, capsys):
    """Reference: the states a save killed midway leaves (no manifest yet; a listed file
    gone; a document without its arrays); exit code 2 is the command line's for bad input."""
    out = _written(tmp_path, reviews)
    arrays = next((out / "review").glob("arrays-*.npz"))

    (out / "manifest.json").rename(tmp_path / "kept.json")
    for given in (out / "manifest.json", out):  # the manifest, or the folder itself
        assert main(["reproduce", str(given)]) == 2
        err = capsys.readouterr().err
        assert "half-written" in err and "no manifest.json" in err and "Traceback" not in err
    (tmp_path / "kept.json").rename(out / "manifest.json")

    arrays.rename(tmp_path / "kept.npz")
    assert main(["reproduce", str(out / "manifest.json")]) == 2
    err = capsys.readouterr().err
    assert "half-written" in err and f"review/{arrays.name}" in err and "Traceback" not in err
    with pytest.raises(StorageError, match="half-written"):
        Review.open(out / "review")
    (tmp_path / "kept.npz").rename(arrays)

    (out / "review" / REVIEW_FILE).unlink()  # a first save killed before its commit point
    with pytest.raises(StorageError, match="half-written.*no review.json"):
        Review.open(out / "review")


def test_a_folder_left_between_two_renames_is_restored_and_reproduce_says_so(tmp_path,
                                                                              reviews, capsys):
    """Reference: the fallback swap's own intermediate state (old folder renamed aside, the
    complete new one not yet renamed in), made by renaming as the swap does."""
    out = _written(tmp_path, reviews)
    expected = _files(out)
    ready = out.with_name(f".{out.name}{atomic.FOLDER_TAG}test{atomic.READY}")
    out.rename(ready)
    assert main(["reproduce", str(out / "manifest.json")]) in (0, 1)  # it could be checked
    captured = capsys.readouterr()
    assert "interrupted between its last two steps" in captured.out
    assert "Traceback" not in captured.err
    assert _files(out) == expected and not ready.exists()


# ---------------------------------------------------------------------- end to end (slow)
@pytest.mark.slow
def test_decide_over_a_written_review_killed_at_several_steps(tmp_path, capsys):
    """The whole path: ``grovewise review`` into a folder whose path has spaces and letters
    of two other alphabets, then ``grovewise decide`` over it, killed at six steps spread
    over its save. Reference: the file digests of the review before and of a complete
    decide after; ``reproduce``'s checks of every file against the manifest pass on
    whatever a kill left."""
    from dataclasses import fields

    from grovewise.decision import record_decision
    from grovewise.reproduce import reproduce

    paths = sample_paths()
    out = tmp_path / "Prüfung 1" / "評価 結果"
    quick = {"--depth": "1", "--time-limit": "5", "--node-limit": "5",
             "--permutation-rows": "100", "--exactness-rows": "200", "--proximity-rows": "100"}
    if "stability_resamples" in {f.name for f in fields(ReviewSettings)}:
        quick["--stability-resamples"] = "0"
    argv = ["review", str(paths["forest"]), str(paths["data"]), "--target", paths["target"],
            "--out", str(out)] + [x for kv in quick.items() for x in kv]
    assert main(argv) == 0, capsys.readouterr().err
    (out / "notes.txt").write_text("kept", encoding="utf-8")
    old = _files(out)
    pristine = tmp_path / "pristine"
    shutil.copytree(out, pristine)

    def decide() -> None:
        record_decision(out, "reject", notes="killed while saving")

    outcome, steps = _in_child(decide)
    assert outcome == "done"
    new = _files(out)
    assert new["notes.txt"] == old["notes.txt"] and new["manifest.json"] != old["manifest.json"]

    def shape(files: dict) -> list[str]:  # the arrays file is named after its content
        return sorted("review/arrays.npz" if n.startswith("review/arrays-") else n for n in files)

    seen = []
    for at in sorted({1, steps // 5, 2 * steps // 5, 3 * steps // 5, 4 * steps // 5, steps}):
        shutil.rmtree(out)
        shutil.copytree(pristine, out)
        assert _in_child(decide, at=max(at, 1))[0] == "killed"
        state = _files(out)
        verdict = reproduce(out / "manifest.json", refit=False)
        files = [(name, ok) for name, ok, _ in verdict.checks if " file" in name]
        assert len(files) >= 6 and all(ok for _, ok in files), verdict.text()
        if state == old:
            seen.append("old")
            continue
        # a new review written whole: its own manifest (the decision and its time stamp make
        # each decide's bytes its own), every file of it matching, the same files as the
        # complete decide wrote
        manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
        assert manifest["reviewer"]["decision"] == "reject", f"step {at}: a mix"
        assert shape(state) == shape(new), f"step {at}: a mix"
        seen.append("new")
    assert seen[0] == "old" and seen[-1] == "new", (steps, seen)
