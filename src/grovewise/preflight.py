"""Checks of everything a command was given, before its first expensive step.

Validate first, then work: the settings are in range, every input file exists and can be
read, the model file is a readable model, the data fits the model (columns, values, the
target and group columns), flagged features are features of the model, and the output
folder can be written. A wrong input then costs a second, not a finished surrogate fit.

The messages are the readers' own (:mod:`grovewise.loaders`), so the command line, a batch
line and the window say the same thing about the same file. Nothing here writes anything
but a probe file, removed at once, in the output folder (or its nearest existing parent).
"""

from __future__ import annotations

import os
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

from .errors import DataError, GrovewiseError, ModelFileError, SettingError

# Files a desktop puts in any folder it shows; they never make a folder "someone's".
STEP = "checks"  # the name progress lines give these checks
DESKTOP_FILES = frozenset({".DS_Store", "Thumbs.db", "desktop.ini"})
_SHOWN = 4  # names listed in one message


@dataclass
class Checked:
    """What the checks read, for a command that uses it as it is (no second read)."""

    forest: object = None  # grovewise.forest.Forest
    data: object = None  # grovewise.loaders.Dataset
    holdout: object = None


# ---------------------------------------------------------------------- files
def check_readable(path, what: str, error: type[GrovewiseError] = DataError,
                   must_exist: bool = False) -> Path:
    """``path`` can be opened for reading. A missing file is left to its reader, whose
    message says what the file should be, unless ``must_exist`` (no reader comes soon)."""
    p = Path(path)
    try:
        with open(p, "rb") as handle:
            handle.read(1)
    except (FileNotFoundError, IsADirectoryError, NotADirectoryError):
        if must_exist and not p.is_file():
            raise error(f"{p}: no such {what}; check the path.") from None
    except OSError as exc:
        raise error(f"{p}: the {what} cannot be read ({exc.strerror or exc}); check that the "
                    "file is there and that you may read it.") from None
    return p


def check_model(path, trusted: bool = False):
    """The model file read into a Forest (the readers' own checks and messages)."""
    from .loaders import load_model

    check_readable(path, "model file", ModelFileError)
    return load_model(path, trusted=trusted)


def check_data(path, forest, *, target: str | None = None, groups=(), what: str = "data file"):
    """The data file read and checked against ``forest``: columns, values, target, groups."""
    from .loaders import load_data

    check_readable(path, what, DataError)
    return load_data(path, forest=forest, target=target, groups=list(groups or ()))


def check_flags(forest, flags) -> dict[str, str]:
    """``flags`` checked against the model's features (the message lists them in one line)."""
    from .analysis.flags import check_flags as against_features

    return against_features(forest.feature_names, flags)


# ---------------------------------------------------------------------- output folders
def check_out_folder(out, option: str = "--out") -> Path:
    """``out`` is, or can become, a folder Grovewise may write in.

    It must not be a file; its path must be one this system's file names can hold (spaces
    and letters of any alphabet are fine under a UTF-8 locale); a probe file is made and
    removed in it, or in its nearest existing parent when it does not exist yet.
    """
    out = Path(out)
    try:
        os.fsencode(str(out))
    except UnicodeEncodeError:
        raise SettingError(
            f"{option} {out}: the path holds letters that this system's file names cannot "
            f"hold (file name encoding {sys.getfilesystemencoding()}); run Grovewise under a "
            "UTF-8 locale (for example LANG=C.UTF-8) or choose a path of plain letters.") from None
    if out.exists() and not out.is_dir():
        raise SettingError(f"{option} {out} is a file; give a folder (it is made if missing).")
    probe = Path(os.path.abspath(out))
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    if not probe.is_dir():
        raise SettingError(f"{option} {out}: {probe} is a file, so no folder can be made "
                           "inside it; give another folder.")
    try:
        fd, name = tempfile.mkstemp(prefix=".grovewise-check-", dir=probe)
        os.close(fd)
        os.unlink(name)
    except OSError as exc:
        raise SettingError(f"{option} {out}: Grovewise cannot write in {probe} "
                           f"({exc.strerror or exc}); choose a folder you may write to.") from None
    return out


def check_review_folder(out, option: str = "--out") -> Path:
    """``out`` can take a written review: a writable folder that is new, empty, or the
    folder of an earlier review (a review's folder is written whole and replaces the old
    one; other files in an earlier review's folder are kept)."""
    from .batch import is_review_folder

    out = check_out_folder(out, option)
    if out.is_dir() and not is_review_folder(out):
        others = sorted(e.name for e in out.iterdir() if e.name not in DESKTOP_FILES)
        if others:
            shown = ", ".join(others[:_SHOWN]) + (f" and {len(others) - _SHOWN} more"
                                                  if len(others) > _SHOWN else "")
            raise SettingError(f"{option} {out} already holds files that are not a review "
                               f"({shown}); a review is written into a folder of its own. "
                               "Give a new or empty folder (it is made if missing), or the "
                               "folder of an earlier review to replace it.")
    return out


# ---------------------------------------------------------------------- a whole review
def check_review(inputs, settings, out=None, option: str = "--out", progress=None) -> Checked:
    """Everything a review needs, checked in order of cost: the settings, the output folder,
    that every file can be read, the model, the flags against its features, then the data
    and any holdout file against the model (columns, values, target, group columns) and any
    second model. Raises the first problem found (a GrovewiseError); returns what was read.
    ``progress(step, fraction, message)`` hears of each file read (step ``"checks"``).
    """
    report = progress or (lambda *_: None)
    report(STEP, 0.0, "checking the settings and the output folder")
    settings.validate()
    if out is not None:
        check_review_folder(out, option)
    second = getattr(inputs, "second_model", None)
    check_readable(inputs.model, "model file", ModelFileError)
    for path, what, error in ((inputs.data, "data file", DataError),
                              (inputs.holdout, "holdout file", DataError),
                              (second, "second model file", ModelFileError)):
        if path is not None:
            check_readable(path, what, error)
    report(STEP, 0.05, f"reading the model {Path(inputs.model).name}")
    forest = check_model(inputs.model, inputs.trusted)
    check_flags(forest, settings.flags)
    groups = settings.group_columns
    report(STEP, 0.3, f"reading the data {Path(inputs.data).name} against the model")
    data = check_data(inputs.data, forest, target=inputs.target, groups=groups)
    holdout = None
    if inputs.holdout is not None:
        report(STEP, 0.7, f"reading the holdout file {Path(inputs.holdout).name}")
        holdout = check_data(inputs.holdout, forest, target=inputs.target, groups=groups,
                             what="holdout file")
    if second is not None:
        report(STEP, 0.9, f"reading the second model {Path(second).name}")
        check_model(second, inputs.trusted)
    report(STEP, 1.0, "every input checked")
    return Checked(forest=forest, data=data, holdout=holdout)
