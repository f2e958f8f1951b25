"""Validate first, then work (issue 13, items 1b and 2): every command checks all it was
given before its first expensive step, and says what is wrong in one line, exit code 2.

References: the readers' own messages (each bad file is also read directly with
``load_model`` / ``load_data``, and the command must print exactly that message), the
settings' own check (``ReviewSettings.validate``), the model's own feature names, and the
files and folders each test makes. "Before the first expensive step" is measured twice: no
progress line of any review step appears (only the start line and the checks), and the
command returns within seconds (a review of the sample takes a minute).
"""

from __future__ import annotations

import os
import re
import shutil
import time
from pathlib import Path

import numpy as np
import pytest

from grovewise.analysis.flags import check_flags
from grovewise.batch import check_lines, read_batch
from grovewise.cli import EXIT_BAD_INPUT, main
from grovewise.errors import GrovewiseError
from grovewise.loaders import load_data, load_model
from grovewise.preflight import check_out_folder, check_review_folder
from grovewise.review import ReviewSettings
from grovewise.sample_data import sample_paths

TARGET = "complication"
INF_ROW, INF_COLUMN = 7, "bmi"  # where the hostile file holds an infinite value
CHECKS_SECONDS = 8.0  # generous: the checks read a 300 kB model and a 3,000-row file
ALLOWED_PROGRESS = {"start", "checks"}  # progress lines that may appear before any step


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """The sample's XGBoost model and its data, and hostile variants of them."""
    d = tmp_path_factory.mktemp("hostile")
    paths = sample_paths()
    # the sample's XGBoost model: it reads in a third of a second (its forest takes seconds)
    f = {"model": Path(shutil.copy(paths["xgboost"], d / "model.json")),
         "data": Path(shutil.copy(paths["data"], d / "data.csv"))}
    f["empty"] = d / "empty.csv"
    f["empty"].write_bytes(b"")
    lines = f["data"].read_text(encoding="utf-8").splitlines()
    col = lines[0].split(",").index(INF_COLUMN)
    cells = lines[INF_ROW].split(",")  # line INF_ROW of the file is data row INF_ROW
    cells[col] = "inf"
    lines[INF_ROW] = ",".join(cells)
    f["inf"] = d / "inf.csv"
    f["inf"].write_text("\n".join(lines) + "\n", encoding="utf-8")
    f["random"] = d / "random.skops"
    f["random"].write_bytes(np.random.default_rng(0).bytes(4096))
    xgb = paths["xgboost"].read_bytes()
    f["truncated"] = d / "truncated.json"
    f["truncated"].write_bytes(xgb[: len(xgb) // 2])
    f["a file"] = d / "a file"
    f["a file"].write_text("not a folder", encoding="utf-8")
    f["busy"] = d / "busy"
    f["busy"].mkdir()
    (f["busy"] / "notes.txt").write_text("someone's notes", encoding="utf-8")
    f["forest"] = load_model(f["model"])
    return f


def _message(call) -> str:
    """The message a reader (or a check) raises for a bad input: the reference."""
    with pytest.raises(GrovewiseError) as caught:
        call()
    return str(caught.value)


def _run(argv, capsys) -> tuple[int, str, float]:
    start = time.perf_counter()
    code = main(argv)
    return code, capsys.readouterr().err, time.perf_counter() - start


def _assert_stopped_before_work(code: int, err: str, seconds: float, command: str) -> str:
    """Exit 2, one line of message, no traceback, no step begun; returns the message."""
    assert code == EXIT_BAD_INPUT, err
    said = [line for line in err.splitlines() if line.startswith(f"grovewise {command}: ")
            and "loading the libraries" not in line]
    assert len(said) == 1, err
    assert "Traceback" not in err
    progress = set(re.findall(r"^\s*\[\s*([\w-]+)\]", err, flags=re.MULTILINE))
    assert progress <= ALLOWED_PROGRESS, f"a step began: {progress - ALLOWED_PROGRESS}"
    assert seconds < CHECKS_SECONDS
    return said[0][len(f"grovewise {command}: "):]


REVIEW_CASES = {
    # case: (arguments changed, the reference message: a callable given the files)
    "empty data file": ({"data": "empty"}, lambda f: _message(
        lambda: load_data(f["empty"], forest=f["forest"], target=TARGET))),
    "inf in a cell": ({"data": "inf"}, lambda f: _message(
        lambda: load_data(f["inf"], forest=f["forest"], target=TARGET))),
    "random bytes as a model": ({"model": "random"}, lambda f: _message(
        lambda: load_model(f["random"]))),
    "truncated XGBoost JSON": ({"model": "truncated"}, lambda f: _message(
        lambda: load_model(f["truncated"]))),
    "unknown target": ({"--target": "outcome"}, lambda f: _message(
        lambda: load_data(f["data"], forest=f["forest"], target="outcome"))),
    "unknown group column": ({"--group": "ward"}, lambda f: _message(
        lambda: load_data(f["data"], forest=f["forest"], target=TARGET, groups=["ward"]))),
    "missing holdout file": ({"--holdout": "nowhere.csv"}, lambda f: _message(
        lambda: load_data(f["data"].parent / "nowhere.csv", forest=f["forest"]))),
    "unknown flagged feature": ({"--flag": "shoe_size=protected"}, lambda f: _message(
        lambda: check_flags(f["forest"].feature_names, {"shoe_size": "protected"}))),
    "depth out of range": ({"--depth": "9"}, lambda f: _message(
        lambda: ReviewSettings(depth=9).validate())),
}


def _review_argv(files, tmp_path, change: dict) -> list[str]:
    model = files[change.get("model", "model")]
    data = files[change.get("data", "data")]
    argv = ["review", str(model), str(data), "--target", change.get("--target", TARGET),
            "--out", str(tmp_path / "out")]
    for option in ("--group", "--flag", "--depth"):
        if option in change:
            argv += [option, change[option]]
    if "--holdout" in change:
        argv += ["--holdout", str(files["data"].parent / change["--holdout"])]
    return argv


@pytest.mark.parametrize("case", list(REVIEW_CASES))
def test_review_refuses_a_bad_input_before_any_step(case, files, tmp_path, capsys):
    """Reference: the message the reader (or the settings' check) itself raises for the
    same input, called directly; the output folder the test named stays unmade."""
    change, reference = REVIEW_CASES[case]
    code, err, seconds = _run(_review_argv(files, tmp_path, change), capsys)
    message = _assert_stopped_before_work(code, err, seconds, "review")
    assert message == reference(files)
    assert not (tmp_path / "out").exists()  # nothing was written


def test_inf_is_named_by_column_and_row(files):
    """Reference: the column and data row where the fixture put the infinite value."""
    message = REVIEW_CASES["inf in a cell"][1](files)
    assert f"'{INF_COLUMN}'" in message and f"data row {INF_ROW}" in message


def test_an_unknown_flag_lists_the_model_features_in_one_line(files, tmp_path, capsys):
    """Reference: the model's own feature names."""
    code, err, seconds = _run(_review_argv(files, tmp_path, {"--flag": "shoe_size=protected"}),
                              capsys)
    message = _assert_stopped_before_work(code, err, seconds, "review")
    assert "'shoe_size'" in message
    assert message.endswith(", ".join(files["forest"].feature_names))


@pytest.mark.parametrize("where", ["a file", "below a file", "busy", "not writable"])
def test_the_output_folder_is_checked_before_any_step(where, files, tmp_path, capsys):
    """Reference: the file system as the test made it (a regular file, a folder holding
    someone's notes, a folder the system does not let anyone write in)."""
    out = {"a file": files["a file"], "below a file": files["a file"] / "reviews",
           "busy": files["busy"], "not writable": Path("/proc/grovewise-review")}[where]
    if where == "not writable" and not Path("/proc/self").is_dir():
        pytest.skip("needs Linux's /proc, where no file can be made")
    before = {p.name: p.read_bytes() for p in files["data"].parent.rglob("*") if p.is_file()}
    argv = ["review", str(files["model"]), str(files["data"]), "--target", TARGET,
            "--out", str(out)]
    code, err, seconds = _run(argv, capsys)
    message = _assert_stopped_before_work(code, err, seconds, "review")
    assert message.startswith(f"--out {out}")
    expected = {"a file": "is a file", "below a file": f"{files['a file']} is a file",
                "busy": "notes.txt", "not writable": "cannot write in /proc"}[where]
    assert expected in message
    after = {p.name: p.read_bytes() for p in files["data"].parent.rglob("*") if p.is_file()}
    assert after == before  # the file in the way and the notes are untouched


def test_surrogate_with_out_naming_a_file_stops_before_the_fit(files, capsys):
    """The issue's case: ``--out`` naming an existing regular file ended in an internal
    error (exit 3) after the whole surrogate fit. Reference: the file the test made."""
    argv = ["surrogate", str(files["model"]), str(files["data"]), "--target", TARGET,
            "--out", str(files["a file"]), "--time-limit", "30"]
    code, err, seconds = _run(argv, capsys)
    message = _assert_stopped_before_work(code, err, seconds, "surrogate")
    assert message == f"--out {files['a file']} is a file; give a folder (it is made if missing)."
    assert files["a file"].read_text(encoding="utf-8") == "not a folder"


def test_anatomy_and_effects_check_flags_features_and_folder_first(files, tmp_path, capsys):
    """Reference: the flag check's own message; the model's feature names."""
    base = [str(files["model"]), str(files["data"]), "--target", TARGET]
    code, err, seconds = _run(["anatomy", *base, "--out", str(tmp_path / "a"),
                               "--flag", "shoe_size=forbidden"], capsys)
    message = _assert_stopped_before_work(code, err, seconds, "anatomy")
    assert message == _message(lambda: check_flags(files["forest"].feature_names,
                                                   {"shoe_size": "forbidden"}))
    code, err, seconds = _run(["effects", *base, "--out", str(files["a file"])], capsys)
    assert "is a file" in _assert_stopped_before_work(code, err, seconds, "effects")
    code, err, seconds = _run(["effects", str(files["model"]), str(files["inf"]),
                               "--out", str(tmp_path / "e")], capsys)
    assert _assert_stopped_before_work(code, err, seconds, "effects") == \
        _message(lambda: load_data(files["inf"], forest=files["forest"]))
    assert not (tmp_path / "a").exists() and not (tmp_path / "e").exists()


def test_batch_checks_its_folder_and_every_line_before_running(files, tmp_path, capsys):
    """Reference: the readers' messages for the bad lines' files; a batch whose folder is a
    file stops before any cluster starts."""
    batch = tmp_path / "batch.csv"
    batch.write_text("name,model,data,target\n"
                     f"good,{files['model']},{files['data']},{TARGET}\n"
                     f"inf,{files['model']},{files['inf']},{TARGET}\n"
                     f"damaged,{files['truncated']},{files['data']},\n", encoding="utf-8")
    code, err, seconds = _run(["batch", str(batch), "--out", str(files["a file"])], capsys)
    assert "is a file" in _assert_stopped_before_work(code, err, seconds, "batch")
    lines = read_batch(batch)
    check_lines(lines, tmp_path / "batch out")
    good, inf, damaged = lines
    assert good.problem is None
    assert inf.problem == f"{inf.where}: " + _message(
        lambda: load_data(files["inf"], forest=files["forest"], target=TARGET))
    assert damaged.problem == f"{damaged.where}: " + _message(
        lambda: load_model(files["truncated"]))


def test_decide_and_window_check_their_folder_and_files(files, tmp_path, capsys):
    """Reference: the folders and files the test made (none of them a written review)."""
    code, err, seconds = _run(["decide", str(files["busy"]), "--decision", "reject"], capsys)
    assert "not a written review folder" in _assert_stopped_before_work(code, err, seconds,
                                                                        "decide")
    code, err, seconds = _run(["decide", str(files["a file"]), "--decision", "reject"], capsys)
    assert "is a file" in _assert_stopped_before_work(code, err, seconds, "decide")
    code, err, seconds = _run(["window", str(files["model"]), str(tmp_path / "none.csv")],
                              capsys)
    assert "none.csv" in _assert_stopped_before_work(code, err, seconds, "window")


def test_paths_with_spaces_and_other_alphabets_are_fine(files, tmp_path):
    """Reference: the file system after the check (nothing made, nothing left)."""
    out = tmp_path / "Prüfung 1" / "評価 結果"
    assert check_review_folder(out) == out
    assert list(tmp_path.iterdir()) == []  # the probe file was removed, no folder was made
    earlier = tmp_path / "earlier review"
    (earlier / "review").mkdir(parents=True)
    (earlier / "manifest.json").write_text("{}", encoding="utf-8")
    (earlier / "notes.txt").write_text("kept beside the report", encoding="utf-8")
    assert check_review_folder(earlier) == earlier  # an earlier review may be replaced
    assert check_out_folder(files["busy"]) == files["busy"]  # any folder takes loose files


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="needs a user whom file permissions bind")
def test_an_unreadable_file_is_named(files, tmp_path, capsys):
    """Reference: the permission the test took away."""
    locked = tmp_path / "locked.csv"
    shutil.copy(files["data"], locked)
    locked.chmod(0)
    try:
        code, err, seconds = _run(["review", str(files["model"]), str(locked), "--target",
                                   TARGET, "--out", str(tmp_path / "out")], capsys)
    finally:
        locked.chmod(0o600)
    message = _assert_stopped_before_work(code, err, seconds, "review")
    assert message.startswith(f"{locked}: the data file cannot be read")


@pytest.mark.skipif(not Path("/proc/self/mem").exists(), reason="needs Linux's /proc")
def test_a_file_the_system_refuses_to_read_is_named():
    """Reference: Linux refuses to read a process's own memory file from its start (an I/O
    error), whoever asks; a reader would otherwise fail with a raw OSError."""
    from grovewise.errors import DataError
    from grovewise.preflight import check_readable

    with pytest.raises(DataError, match=r"^/proc/self/mem: the data file cannot be read "
                                        r"\(Input/output error\)"):
        check_readable("/proc/self/mem", "data file")
