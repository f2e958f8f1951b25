"""Property-based tests of every setting: ``ReviewSettings.validate``, a batch file's settings
columns, and every command's options as the command line parses them.

The property: a setting inside its documented range is accepted; one outside it is refused
with a ``SettingError`` (or argparse's own usage error) naming the setting or option; never
another exception, never an internal error (exit 3); and a command never writes a file
outside its ``--out`` folder before it starts its work.

Reference: the documented range of each setting (``SPEC`` below, written from the options'
help, ``ReviewSettings``' docstrings and messages), and, for the seed, numpy's
``RandomState`` and scikit-learn's ``random_state`` (a seed from 0 to 2**32 - 1, numpy
documentation of ``numpy.random.RandomState``), which the review's steps are given.
"""

from __future__ import annotations

import math
import os
import tempfile
from dataclasses import fields
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from grovewise.batch import read_batch
from grovewise.errors import GrovewiseError, SettingError
from grovewise.review import ReviewSettings
from property_cases import cases, snapshot


# ---------------------------------------------------------------------------- the ranges
def _whole(v) -> bool:
    return isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_))


def _real(v) -> bool:
    return (isinstance(v, (int, float, np.integer, np.floating))
            and not isinstance(v, (bool, np.bool_)) and math.isfinite(float(v)))


SEED_MAX = 2**32 - 1
SPEC = {
    "depth": lambda v: _whole(v) and 1 <= v <= 4,
    "max_features_per_split": lambda v: v is None or (_whole(v) and v >= 1),
    "alpha": lambda v: _real(v) and v >= 0,
    "oblique_level": lambda v: v is None or (_real(v) and 0 < v <= 1),
    "proximity_threshold": lambda v: _real(v) and 0 < v <= 1,
    "time_limit": lambda v: _real(v) and v > 0,
    "node_limit": lambda v: v is None or (_whole(v) and v >= 1),
    "holdout_share": lambda v: _real(v) and 0 <= v < 0.9,
    "seed": lambda v: _whole(v) and 0 <= v <= SEED_MAX,
    "group_columns": lambda v: isinstance(v, (list, tuple)) and all(
        isinstance(c, str) and c for c in v),
    "permutation_repeats": lambda v: _whole(v) and v >= 1,
    "permutation_rows": lambda v: _whole(v) and (v == 0 or v >= 10),
    "exactness_rows": lambda v: _whole(v) and (v == 0 or v >= 10),
    "proximity_rows": lambda v: _whole(v) and 2 <= v <= 20_000,
    "effects_rows": lambda v: _whole(v) and 10 <= v <= 100_000,
    "interaction_rows": lambda v: _whole(v) and 1 <= v <= 10_000,
    "stability_resamples": lambda v: _whole(v) and (v == 0 or 2 <= v <= 1_000),
    "stability_time_limit": lambda v: v is None or (_real(v) and v > 0),
    "leaf_min_holdout_rows": lambda v: _whole(v) and v >= 0,
    "leaf_fidelity_floor": lambda v: _real(v) and 0 <= v <= 1,
    "overfit_gap": lambda v: _real(v) and 0 <= v <= 1,
    "near_perfect_target": lambda v: _real(v) and 0 < v <= 1,
}

ODD = [None, True, False, 0, 1, -1, 2, 4, 5, 9, 10, 11, 20_000, 20_001, 100_000, 100_001,
       2**31, 2**32 - 1, 2**32, 2**63, -2**63, 10**30, 0.0, -0.0, 0.5, 0.9, 0.95, 1.0, 1.5,
       1e-300, 1e308, float("nan"), float("inf"), float("-inf"), "1", "0.5", "abc", "", "nan",
       [], ["a"], [""], [1], ("a",), {}, np.int64(3), np.float32(0.5), np.bool_(True),
       np.float64("nan")]
VALUES = st.one_of(st.sampled_from(ODD), st.integers(-10, 30), st.floats(-2, 2),
                   st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=3))


def test_spec_names_every_setting_but_the_flags():
    """The table covers ReviewSettings as it is: a new setting must get its range here."""
    assert set(SPEC) == {f.name for f in fields(ReviewSettings)} - {"flags"}


# ---------------------------------------------------------------------------- validate
@cases(400, deadline_ms=1_000)
@given(changes=st.dictionaries(st.sampled_from(sorted(SPEC)), VALUES, min_size=1, max_size=4))
def test_validate_accepts_the_range_and_names_what_is_outside(changes):
    settings = ReviewSettings(**changes)
    outside = sorted(k for k, v in changes.items() if not SPEC[k](v))
    try:
        settings.validate()
    except SettingError as exc:
        named = [k for k in outside if f"setting {k}=" in str(exc)]
        assert named, f"refused {changes}, but the message names none of {outside}: {exc}"
        return
    assert not outside, f"accepted {({k: changes[k] for k in outside})}, outside the range"


# ---------------------------------------------------------------------------- batch files
TEXT_VALUES = st.one_of(st.sampled_from(["1", "2", "0", "-1", "10", "0.5", "1.5", "nan", "inf",
                                         "-inf", "1e400", "none", "None", "abc", "", " 3 ",
                                         "4294967295", "4294967296", "99999999999999999999",
                                         "a;b", "true", "0x10", "1_000", "٣"]),
                        st.text(max_size=4))


@cases(200, deadline_ms=2_000)
@given(columns=st.dictionaries(st.sampled_from(sorted(SPEC)), TEXT_VALUES, min_size=1,
                               max_size=4),
       kind=st.sampled_from(["csv", "toml"]))
def test_batch_settings_are_a_review_or_a_named_problem(columns, kind):
    """A batch line's settings columns: the line runs with settings inside the range, or it
    carries a problem naming the file, the line and the setting; reading the batch file
    never raises anything else (reference: SPEC)."""
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        (folder / "m.json").write_text("{}")
        (folder / "d.csv").write_text("a\n1\n")
        path = folder / f"batch.{kind}"
        if kind == "csv":
            import csv

            with open(path, "w", newline="", encoding="utf-8") as handle:
                w = csv.writer(handle)
                w.writerow(["model", "data", *columns])
                w.writerow(["m.json", "d.csv", *columns.values()])
        else:
            import json

            body = "".join(f"{k} = {json.dumps(v)}\n" for k, v in columns.items())
            path.write_text(f'[[review]]\nmodel = "m.json"\ndata = "d.csv"\n{body}',
                            encoding="utf-8")
        before = snapshot(folder)
        try:
            lines = read_batch(path)
        except GrovewiseError as exc:
            assert str(path) in str(exc)
            return
        finally:
            assert snapshot(folder) == before
    (line,) = lines
    if line.problem is not None:
        assert line.where in line.problem
        assert any(k in line.problem for k in columns), line.problem
        return
    settings = line.review_settings()
    outside = {k: getattr(settings, k) for k in columns if not SPEC[k](getattr(settings, k))}
    assert not outside, f"the batch line runs with {outside}, outside the range"


# ---------------------------------------------------------------------------- the commands
class ReachedWork(BaseException):
    """Raised where a command's work begins: every setting was accepted by then."""


# Where each command's work begins (its settings are all checked before it).
WORK = {"review": "grovewise.batch.write_review_folder",
        "surrogate": "grovewise.review.Review.run_step",
        "effects": "grovewise.effects_summary.ensemble_effects",
        "anatomy": "grovewise.report.anatomy_files.export_anatomy"}
# Options the command line does not check yet (see the strict xfail test below, which
# shows the defect and fails once it is fixed: then take the pair out of this set).
UNCHECKED: set = set()
# The command line's own options beside ReviewSettings' (reference: each option's help).
CLI_SPEC = {
    "jobs": lambda v: v is None or (_whole(v) and v >= 0),  # 0 or none: every core
    "rows": lambda v: _whole(v) and 10 <= v <= 100_000,
    "interaction_rows": lambda v: _whole(v) and 1 <= v <= 10_000,
    "dpi": lambda v: _real(v) and 20 <= v <= 1200,
}
# A command's own range where it differs: the effects' sample takes any whole number as its
# seed (numpy's SeedSequence does), checked by running the command with -1 and 2**70.
COMMAND_SPEC = {("effects", "seed"): _whole}
OPTION_TEXT = st.one_of(st.sampled_from(
    ["0", "1", "2", "3", "4", "5", "9", "10", "11", "-1", "-0", "0.5", "0.9", "1.0", "1e-9",
     "20", "19.5", "1200", "1201", "20000", "20001", "100000", "100001", "1000", "1001",
     "4294967295", "4294967296", "99999999999999999999", "nan", "inf", "-inf", "1e400",
     "abc", "", " 2", "0x10", "1_0"]), st.integers(-5, 30).map(str))


FEATURES, COLUMNS = {"a", "b", "c"}, {"a", "b", "c", "y"}  # the small model's, its data's
# Options given as text, each with odd values and its range (reference: each option's help).
TEXT_OPTIONS = {
    "--formats": (["png", "svg,pdf", "PNG", ".svg", "", "jpg", "png,jpg", ",", "png,,svg"],
                  lambda v: all(f.lower().lstrip(".") in {"png", "svg", "pdf"}
                                for f in v.split(","))),
    "--flag": (["a=protected", "b=forbidden", "a=", "=protected", "z=protected", "a=other",
                "a", "a=b=protected"],
               lambda v: v.rpartition("=")[0] in FEATURES
               and v.rpartition("=")[2] in ("protected", "forbidden")),
    "--group": (["a", "y", "zz", "", " a"], lambda v: v in COLUMNS),
    "--features": (["a", "a,b", "zz", "a,zz", "", ",", " b "],
                   lambda v: all(f.strip() in FEATURES for f in v.split(",") if f.strip())),
}


def _options(command: str, text: bool = False) -> dict:
    """The numeric options of ``command`` as its parser defines them (with ``text``, also
    those of TEXT_OPTIONS it has): flag -> dest."""
    import argparse

    from grovewise.cli import build_parser

    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    return {a.option_strings[-1]: a.dest for a in sub.choices[command]._actions
            if a.option_strings and (a.type in (int, float)
                                     or (text and a.option_strings[-1] in TEXT_OPTIONS))}


@pytest.mark.parametrize("command", sorted(WORK))
def test_every_numeric_option_has_a_range(command):
    """A new numeric option of a command must get its documented range here."""
    missing = [f for f, dest in _options(command).items() if dest not in {**SPEC, **CLI_SPEC}]
    assert not missing, f"grovewise {command}: no range for {missing}"


@pytest.fixture(scope="module")
def small_review_files(tmp_path_factory):
    """A small XGBoost model (its own save_model file) and data with its target."""
    import pandas as pd
    import xgboost

    folder = tmp_path_factory.mktemp("cli")
    rng = np.random.default_rng(3)
    X = rng.normal(size=(60, 3))
    y = (X[:, 0] > 0).astype(int)
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    xgboost.XGBClassifier(n_estimators=2, max_depth=2).fit(frame, y).save_model(
        folder / "model.json")
    frame.assign(y=y).to_csv(folder / "data.csv", index=False)
    return folder / "model.json", folder / "data.csv"


@pytest.mark.parametrize("command", sorted(WORK))
@cases(25, deadline_ms=10_000)
@given(data=st.data())
def test_every_command_accepts_its_ranges_and_names_what_is_outside(
        command, data, small_review_files, monkeypatch):
    """``grovewise COMMAND`` with its numeric and text options drawn from odd text:
    argparse's usage error or a message naming an option (or its value) outside its range
    (exit 2), or the command's work begins with every option inside (reference: SPEC,
    CLI_SPEC, TEXT_OPTIONS); never exit 3, and no file beside ``--out``."""
    import contextlib
    import io

    from grovewise.cli import main

    options = {f: dest for f, dest in _options(command, text=True).items()
               if (command, dest) not in UNCHECKED}
    flags = data.draw(st.lists(st.sampled_from(sorted(options)), min_size=1, max_size=3,
                               unique=True), label="options")
    chosen = {f: data.draw(st.sampled_from(TEXT_OPTIONS[f][0]) if f in TEXT_OPTIONS
                           else OPTION_TEXT, label=f) for f in flags}
    model, table = small_review_files

    def reached(*args, **kwargs):
        raise ReachedWork()

    monkeypatch.setattr(WORK[command], reached)
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        argv = [command, str(model), str(table), "--out", str(folder / "out")]
        if command in ("review", "surrogate", "effects"):
            argv += ["--target", "y"]
        for flag, text in chosen.items():
            argv.append(f"{flag}={text}")
        before = snapshot(folder, model.parent)
        stderr = io.StringIO()
        try:
            with contextlib.redirect_stderr(stderr), contextlib.redirect_stdout(io.StringIO()):
                code = main(argv)
        except SystemExit as exc:  # argparse: a value of the wrong type, named
            assert exc.code == 2 and any(f in stderr.getvalue() for f in chosen), stderr.getvalue()
            return
        except ReachedWork:
            code = None
        finally:
            after = {k: v for k, v in snapshot(folder, model.parent).items()
                     if not k.startswith(str(folder / "out"))}
            assert after == before, "a file changed outside --out"
    spec = {**SPEC, **CLI_SPEC, **{d: f for (c, d), f in COMMAND_SPEC.items() if c == command}}
    inside = {flag: TEXT_OPTIONS[flag][1](text) if flag in TEXT_OPTIONS
              else spec[options[flag]](_parse(options[flag], text))
              for flag, text in chosen.items()}
    outside = [flag for flag, ok in inside.items() if not ok]
    message = stderr.getvalue()
    if code is None:
        assert not outside, f"grovewise {command} began its work with {outside} out of range"
        return
    assert code == 2, f"exit {code}: {message}"
    names = [f for f in outside if f in message or options[f] in message
             or (f == "--formats" and "figure format" in message)  # named in words
             or (chosen[f].strip() and chosen[f].strip(" ,=") in message)]
    assert names, f"refused, but the message names none of {outside or 'the options'}: {message}"


def _parse(dest: str, text: str):
    """The value argparse made of ``text`` for option ``dest`` (it already accepted it)."""
    kind = int if dest in ("depth", "max_features_per_split", "node_limit", "seed", "jobs",
                           "rows", "interaction_rows", "permutation_rows", "exactness_rows",
                           "proximity_rows", "stability_resamples") else float
    return kind(text)


@pytest.mark.parametrize("seed", ["-1", "4294967296"])
def test_a_seed_out_of_range_is_refused_before_the_work(seed, small_review_files,
                                                        monkeypatch, capsys):
    """Reference: numpy's RandomState takes seeds from 0 to 2**32 - 1 (numpy documentation)."""
    from grovewise.cli import main

    def reached(*args, **kwargs):
        raise ReachedWork()

    monkeypatch.setattr(WORK["anatomy"], reached)
    model, table = small_review_files
    with tempfile.TemporaryDirectory() as folder:
        try:
            code = main(["anatomy", str(model), str(table), "--out", f"{folder}/out",
                         f"--seed={seed}"])
        except ReachedWork:
            code = None
    assert code == 2 and "--seed" in capsys.readouterr().err
