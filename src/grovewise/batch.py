"""``grovewise batch``: many reviews listed in one small file, each run on an executor worker.

A batch file lists one review per CSV line or per TOML ``[[review]]`` entry: ``model`` and
``data``, optionally ``name``, ``target``, ``holdout``, ``second_model`` (a model reviewed
beside the first, as ``grovewise review --second-model``), ``trusted`` and any review setting
under its :class:`~grovewise.review.ReviewSettings` name. Relative paths start at the batch
file's folder. Every line is checked before anything runs; a line with a problem gets its
own error and the other lines still run.

Each review writes ``OUT/<name>/`` exactly as ``grovewise review --out`` does (both go through
:func:`write_review_folder`); a review that fails writes ``OUT/<name>/error.txt`` with its
one-paragraph message instead. At the end ``OUT/index.html`` and ``OUT/index.json`` list every
line with its verdict, holdout fidelities and certificate.

The reviews run on a local cluster of processes (a review is Python work that holds the GIL),
each with one job. When a worker process dies, dask's scheduler runs its review again on
another worker (``distributed.scheduler.allowed-failures``, 3 by default); a review that
already finished is recorded under ``OUT/.grovewise-batch/`` and is not run a second time.
"""

from __future__ import annotations

import csv
import datetime as _dt
import json
import math
import os
import shutil
import time
import tomllib
import uuid
import warnings
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from functools import cache, partial
from pathlib import Path

from .errors import GrovewiseError, SettingError
from .executor import Executor, resolve_jobs
from .report.atomic import write_atomic

ERROR_FILE = "error.txt"
STATE_DIR = ".grovewise-batch"  # one record per finished line, for the length of one batch
INDEX_FORMAT = "grovewise-batch-index/1"
SAVED_REVIEW = "review"  # the saved review's folder inside a review's --out folder
REQUIRED_COLUMNS = ("model", "data")
NAME_MAX = 100


class BatchFileError(GrovewiseError):
    """The batch file itself cannot be read: missing, of an unknown kind, or malformed."""


# ---------------------------------------------------------------------- one review's folder
def write_review_folder(inputs, settings, out, reviewer=None, *, progress=None, cancel=None,
                        jobs: int | None = None, checked=None):
    """Run every step of a review and write its folder: the saved review, the report (HTML,
    PDF) and the manifest. ``grovewise review``, ``demo`` and each batch line write this.

    ``jobs`` is the cores the steps may use (None: all); it never changes a result.
    ``checked``: what :func:`grovewise.preflight.check_review` read for these inputs (the
    data is then not read again).

    Returns
    -------
    (Review, dict)
        The review, and the report files written by kind (``html``, ``pdf``, ``manifest``).
    """
    from .progress import quiet
    from .review import Review

    report = progress or quiet
    review = Review(inputs, settings, reviewer)
    review.jobs = jobs
    if checked is not None:
        review.use_checked(checked)
    review.run(progress=report, cancel=cancel)
    files = save_review_folder(review, out, progress=report)
    return review, files


def save_review_folder(review, out, *, progress=None) -> dict[str, Path]:
    """Write a review's folder whole: the saved review, the report (HTML, PDF) and the
    manifest, into a hidden folder beside ``out`` that then takes its place
    (:func:`grovewise.report.atomic.atomic_folder`). A save over an earlier review that is
    killed at any point leaves the earlier review or the new one, whole, never a mix; other
    files kept in the earlier folder stay, its signature and error note do not.

    Returns the report files written, by kind (``html``, ``pdf``, ``manifest``).
    """
    from .progress import quiet
    from .report.atomic import atomic_folder
    from .report.content import export_report
    from .signing import SIGNATURE_FILE

    report = progress or quiet
    out = Path(out)
    report("report", 0.0, "saving the review")
    with atomic_folder(out, drop=(SIGNATURE_FILE, ERROR_FILE)) as staging:
        review.save(staging / SAVED_REVIEW)
        written = export_report(review, staging, progress=report,
                                saved_review=staging / SAVED_REVIEW)
    report("report", 1.0, "report: done")
    return {kind: out / path.name for kind, path in written.items()}


def is_review_folder(folder) -> bool:
    """Whether ``folder`` holds a review written by :func:`save_review_folder` (or a batch
    line's error note in its place)."""
    from .review import REVIEW_FILE

    folder = Path(folder)
    return ((folder / "manifest.json").is_file() or (folder / ERROR_FILE).is_file()
            or (folder / SAVED_REVIEW / REVIEW_FILE).is_file())


# ---------------------------------------------------------------------- values of a line
def _whole(value) -> int:
    if isinstance(value, bool):
        raise ValueError
    if isinstance(value, float):
        if not value.is_integer():
            raise ValueError
        return int(value)
    return int(value) if isinstance(value, int) else int(str(value).strip())


def _whole_or_none(value) -> int | None:
    if isinstance(value, str) and value.strip().lower() == "none":
        return None
    return _whole(value)


def _number(value) -> float:
    if isinstance(value, bool):
        raise ValueError
    return float(value) if isinstance(value, (int, float)) else float(str(value).strip())


def _yes_no(value) -> bool:
    if isinstance(value, bool):
        return value
    text = str(value).strip().lower()
    if text in ("yes", "true", "1"):
        return True
    if text in ("no", "false", "0"):
        return False
    raise ValueError


def _text(value) -> str:
    if not isinstance(value, str):
        raise ValueError
    return value.strip()


def _number_or_none(value) -> float | None:
    if isinstance(value, str) and value.strip().lower() == "none":
        return None
    return _number(value)


# How a setting's value is read, by the type ReviewSettings declares for it.
def _names(value) -> list[str]:
    """Column names: a TOML list of strings, or text separated by semicolons (CSV)."""
    if isinstance(value, str):
        return [v.strip() for v in value.split(";") if v.strip()]
    if isinstance(value, list) and all(isinstance(v, str) and v.strip() for v in value):
        return [v.strip() for v in value]
    raise ValueError


READERS = {"int": (_whole, "a whole number"),
           "int | None": (_whole_or_none, "a whole number or none"),
           "float": (_number, "a number"),
           "float | None": (_number_or_none, "a number or none"),
           "list[str]": (_names, "column names separated by semicolons")}


@cache
def settings_readers() -> dict:
    """The review settings a line may set: every number of ReviewSettings and the group
    columns, by name (``flags``, a mapping, is not one), each with how to read it."""
    from dataclasses import fields

    from .review import ReviewSettings

    return {f.name: READERS[str(f.type)] for f in fields(ReviewSettings)
            if str(f.type) in READERS}


# The inputs of a line, each with how to read it.
INPUTS = {"name": (_text, "text"), "model": (_text, "a path"), "data": (_text, "a path"),
          "target": (_text, "a column name"), "holdout": (_text, "a path"),
          "second_model": (_text, "a path"), "trusted": (_yes_no, "yes or no")}
FILES = ("model", "data", "holdout", "second_model")


class _LineProblem(Exception):
    """One problem of one batch line (becomes the line's error; the batch goes on)."""


@dataclass
class BatchLine:
    """One review of a batch, as read and checked (``problem`` says why it cannot run)."""

    where: str  # "FILE, line 3" (CSV) or "FILE, review 2" (TOML)
    name: str
    model: Path | None = None
    data: Path | None = None
    target: str | None = None
    holdout: Path | None = None
    second_model: Path | None = None
    trusted: bool = False
    settings: dict = field(default_factory=dict)
    problem: str | None = None

    def inputs(self):
        from .review import ReviewInputs

        return ReviewInputs(self.model, self.data, target=self.target, holdout=self.holdout,
                            trusted=self.trusted, second_model=self.second_model)

    def review_settings(self):
        from .review import ReviewSettings

        return ReviewSettings(**self.settings).validate()


# ---------------------------------------------------------------------- reading a batch file
def read_batch(path) -> list[BatchLine]:
    """Read and check a batch file (``.csv`` or ``.toml``), one :class:`BatchLine` per review.

    Raises
    ------
    BatchFileError
        When the file cannot be read as a whole (missing, unknown kind, malformed, no
        reviews); a problem of one line is kept in that line's ``problem`` instead.
    """
    path = Path(path)
    if not path.is_file():
        raise BatchFileError(f"{path}: the batch file does not exist; give the path of a .csv "
                             "or .toml file that lists one review per line.")
    kind = path.suffix.lower()
    if kind not in (".csv", ".toml"):
        raise BatchFileError(f"{path}: a batch file is CSV (.csv) or TOML (.toml); save it as "
                             "one of them.")
    entries = _read_csv(path) if kind == ".csv" else _read_toml(path)
    if not entries:
        raise BatchFileError(f"{path}: the batch file lists no reviews; give one line (CSV) or "
                             "one [[review]] entry (TOML) per review, with model and data.")
    lines = [_check(path.parent, where, values) for where, values in entries]
    _name(lines)
    return lines


def _read_csv(path: Path) -> list[tuple[str, dict]]:
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            reader = csv.reader(handle)
            header = _csv_header(path, next(reader, None))
            entries = []
            for row in reader:
                if not any(cell.strip() for cell in row) or row[0].lstrip().startswith("#"):
                    continue
                where = f"{path}, line {reader.line_num}"
                if len(row) > len(header):
                    entries.append((where, {"": f"{len(row)} cells, the header names "
                                                f"{len(header)}"}))
                    continue
                entries.append((where, {k: v for k, v in zip(header, row) if v.strip()}))
            return entries
    except (csv.Error, UnicodeDecodeError) as exc:
        raise BatchFileError(f"{path}: not a readable CSV file ({exc}); save it as UTF-8 CSV "
                             "with a header line.") from None


def _csv_header(path: Path, header: list[str] | None) -> list[str]:
    names = [_key(h) for h in header or []]
    missing = [c for c in REQUIRED_COLUMNS if c not in names]
    if missing:
        raise BatchFileError(f"{path}, line 1: the header has no {' or '.join(missing)} column; "
                             f"the first line names the columns, at least "
                             f"{', '.join(REQUIRED_COLUMNS)}.")
    twice = sorted({n for n in names if n and names.count(n) > 1})
    if twice:
        raise BatchFileError(f"{path}, line 1: the header names {', '.join(twice)} twice; "
                             "name each column once.")
    return names


def _read_toml(path: Path) -> list[tuple[str, dict]]:
    try:
        with open(path, "rb") as handle:
            doc = tomllib.load(handle)
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise BatchFileError(f"{path}: not valid TOML ({exc}); fix the file.") from None
    other = [k for k in doc if k != "review"]
    reviews = doc.get("review", [])
    if other or not isinstance(reviews, list) or not all(isinstance(r, dict) for r in reviews):
        raise BatchFileError(f"{path}: a TOML batch file holds only [[review]] entries (found "
                             f"{', '.join(other) or 'review as a single value'}); write each "
                             "review as a [[review]] table with model and data.")
    return [(f"{path}, review {k}", {_key(n): v for n, v in entry.items()})
            for k, entry in enumerate(reviews, start=1)]


def _key(name: str) -> str:
    """A column or key name as Grovewise spells it (``Time-Limit`` -> ``time_limit``)."""
    return str(name).strip().lower().replace("-", "_")


def _check(folder: Path, where: str, values: dict) -> BatchLine:
    """One line's values read and checked; a problem is kept in the line, not raised."""
    line = BatchLine(where=where, name="")
    settings = settings_readers()
    try:
        read = {k: _value(k, v) for k, v in values.items() if k in INPUTS}
        line.name = read.get("name", "")
        line.target = read.get("target") or None
        line.trusted = read.get("trusted", False)
        line.model, line.data, line.holdout, line.second_model = (
            _path(folder, read.get(k)) for k in FILES)
        if "" in values:
            raise _LineProblem(f"{values['']}; give one cell per header column.")
        unknown = [k for k in values if k not in INPUTS and k not in settings]
        if unknown:
            raise _LineProblem(
                f"unknown column {', '.join(unknown)}; a line has {', '.join(INPUTS)} and the "
                f"review settings {', '.join(settings)}.")
        for key in FILES:
            _check_file(folder, key, getattr(line, key), required=key in ("model", "data"))
        line.settings = {k: _value(k, v) for k, v in values.items() if k in settings}
        line.review_settings()
    except (_LineProblem, SettingError) as exc:
        line.problem = f"{where}: {exc}"
    return line


def _value(key: str, raw):
    read, what = settings_readers().get(key) or INPUTS[key]
    try:
        return read(raw)
    except (TypeError, ValueError):
        raise _LineProblem(f"{key} {raw!r} is not {what}; fix the value.") from None


def _path(folder: Path, text: str | None) -> Path | None:
    """A path of a line, absolute (a relative one starts at the batch file's folder)."""
    if not text:
        return None
    return Path(os.path.abspath(folder / Path(text).expanduser()))  # folder / "/abs" is "/abs"


def _check_file(folder: Path, key: str, path: Path | None, required: bool) -> None:
    if path is None:
        if required:
            raise _LineProblem(f"no {key} file given; every line names its model and data "
                               "files.")
        return
    if not path.is_file():
        raise _LineProblem(f"the {key.replace('_', ' ')} file {path} does not exist; fix the "
                           "path (a relative path starts at the batch file's folder, "
                           f"{folder.absolute()}).")


def check_lines(lines: list[BatchLine], out: Path) -> None:
    """Check each line's review as ``grovewise review`` checks its own, before any runs
    (:func:`grovewise.preflight.check_review`): the model read, the data against it (columns,
    values, target, group columns), the settings and the line's folder ``OUT/<name>``. A
    problem becomes that line's own; the other lines still run."""
    from .preflight import check_review

    for line in lines:
        if line.problem is not None:
            continue
        try:
            check_review(line.inputs(), line.review_settings(), Path(out) / line.name,
                         option="the review's folder")
        except GrovewiseError as exc:
            line.problem = f"{line.where}: {exc}"
        except Exception as exc:  # one line's surprise must not stop the batch
            line.problem = _unexpected(line, exc)


def _name(lines: list[BatchLine]) -> None:
    """Give every line a folder name: its own if valid and unused, else one made from the
    model file's name (``-2``, ``-3`` ... added to keep it unique)."""
    taken: set[str] = set()
    for line in lines:
        if not line.name:
            continue
        bad = _bad_name(line.name) or (
            f"the name {line.name!r} is used by an earlier line; give each line its own "
            "name." if line.name.casefold() in taken else None)
        if bad:
            line.problem = line.problem or f"{line.where}: {bad}"
            line.name = ""
        else:
            taken.add(line.name.casefold())
    for k, line in enumerate(lines, start=1):
        if line.name:
            continue
        stem = "".join(c if c.isalnum() or c in "._-" else "_"
                       for c in (line.model.stem if line.model else f"line-{k}"))
        base = stem.strip("._-")[:NAME_MAX - 8] or f"line-{k}"
        name, n = base, 1
        while name.casefold() in taken:
            n += 1
            name = f"{base}-{n}"
        line.name = name
        taken.add(name.casefold())


def _bad_name(name: str) -> str | None:
    ok = (len(name) <= NAME_MAX and name[0].isalnum() and name[-1] not in ". "
          and all(c.isalnum() or c in " ._-" for c in name))
    if ok:
        return None
    return (f"the name {name!r} cannot name a folder; use up to {NAME_MAX} letters, digits, "
            "spaces, dots, dashes and underscores, starting with a letter or digit.")


# ---------------------------------------------------------------------- outcomes
@dataclass
class LineOutcome:
    """How one line of a batch ended, as the index lists it."""

    name: str
    where: str
    model: str | None
    data: str | None
    verdict: str  # "done" or "failed"
    message: str = ""
    seconds: float = 0.0
    surrogate_holdout_fidelity: float | None = None
    greedy_holdout_fidelity: float | None = None
    certificate_status: str | None = None
    certificate_gap: float | None = None
    report_html: str | None = None  # relative to the batch's folder
    report_pdf: str | None = None
    error_file: str | None = None

    @property
    def done(self) -> bool:
        return self.verdict == "done"

    def to_dict(self) -> dict:
        return asdict(self)

    def progress_text(self, count: int, total: int) -> str:
        """The terminal line for this outcome, ``[batch] 3/8 done: name (12.3 s)``."""
        text = f"[batch] {count}/{total} {self.verdict}: {self.name} ({self.seconds:.1f} s)"
        return text if self.done else f"{text}: {self.message}"


def _outcome(line: BatchLine, verdict: str, message: str, seconds: float, **more) -> LineOutcome:
    return LineOutcome(name=line.name, where=line.where,
                       model=None if line.model is None else str(line.model),
                       data=None if line.data is None else str(line.data), verdict=verdict,
                       message=message, seconds=round(seconds, 3), **more)


def _done(line: BatchLine, review, files: dict, out: Path, seconds: float) -> LineOutcome:
    sur = review.surrogate
    fid, cert = sur.fidelity, sur.certificate

    def link(kind: str) -> str | None:
        return Path(files[kind]).relative_to(out).as_posix() if kind in files else None

    return _outcome(line, "done", "", seconds,
                    surrogate_holdout_fidelity=_finite(fid["surrogate"]["holdout"]),
                    greedy_holdout_fidelity=_finite(fid["greedy"]["holdout"]),
                    certificate_status=cert.get("status"),
                    certificate_gap=_finite(cert.get("gap")),
                    report_html=link("html"), report_pdf=link("pdf"))


def _finite(value) -> float | None:
    """A number for the index, None when there is none (JSON has no NaN or infinity)."""
    return None if value is None or not math.isfinite(float(value)) else float(value)


def _failed(line: BatchLine, message: str, seconds: float, out: Path) -> LineOutcome:
    """A failed line: its message in ``OUT/<name>/error.txt`` (when that can be written)."""
    error_file = None
    try:
        folder = out / line.name
        folder.mkdir(parents=True, exist_ok=True)
        write_atomic(folder / ERROR_FILE, message + "\n")
        error_file = f"{line.name}/{ERROR_FILE}"
    except (OSError, GrovewiseError) as exc:
        message = f"{message} (the error file could not be written: {exc})"
    return _outcome(line, "failed", message, seconds, error_file=error_file)


# ---------------------------------------------------------------------- one line, on a worker
def run_line(line: BatchLine, out: str, run_id: str) -> LineOutcome:
    """Run one batch line's review into ``OUT/<name>/`` (on a worker; prints nothing).

    A line this batch (``run_id``) already finished is not run again: its recorded outcome
    is returned (dask re-runs the tasks of a worker that died, and a task's result can be
    lost with its worker after the review was written).
    """
    out = Path(out)
    record = out / STATE_DIR / f"{line.name}.json"
    earlier = _recorded(record, run_id)
    if earlier is not None:
        return earlier
    start = time.perf_counter()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", category=UserWarning)  # as the command line does
            review, files = write_review_folder(line.inputs(), line.review_settings(),
                                                out / line.name, jobs=1)
        outcome = _done(line, review, files, out, time.perf_counter() - start)
        (out / line.name / ERROR_FILE).unlink(missing_ok=True)  # from an earlier batch
    except GrovewiseError as exc:
        outcome = _failed(line, str(exc), time.perf_counter() - start, out)
    except Exception as exc:  # one review's surprise must not stop the batch
        outcome = _failed(line, _unexpected(line, exc), time.perf_counter() - start, out)
    record.parent.mkdir(parents=True, exist_ok=True)
    write_atomic(record, json.dumps({"run": run_id, "outcome": outcome.to_dict()}))
    return outcome


def _unexpected(line: BatchLine, exc: BaseException) -> str:
    return (f"{line.where}: an unexpected error stopped this review ({type(exc).__name__}: "
            f"{exc}). Run it alone with grovewise review and GROVEWISE_DEBUG=1 to see the "
            "details, and please report it.")


def _recorded(record: Path, run_id: str) -> LineOutcome | None:
    try:
        doc = json.loads(record.read_text(encoding="utf-8"))
        return LineOutcome(**doc["outcome"]) if doc.get("run") == run_id else None
    except (OSError, ValueError, KeyError, TypeError):
        return None


# ---------------------------------------------------------------------- the whole batch
@dataclass
class BatchResult:
    """Every line's outcome, in the batch file's order, and the index files written."""

    outcomes: list[LineOutcome]
    index_html: Path
    index_json: Path
    executor: str
    seconds: float

    @property
    def n_done(self) -> int:
        return sum(o.done for o in self.outcomes)

    @property
    def all_done(self) -> bool:
        return self.n_done == len(self.outcomes)

    def summary(self) -> str:
        n = len(self.outcomes)
        return (f"batch: {self.n_done} of {n} reviews done, {n - self.n_done} failed, in "
                f"{self.seconds:.1f} s ({self.executor}); index: {self.index_html}")


OnLine = Callable[[int, int, LineOutcome], None]  # (lines settled, lines in all, outcome)


def run_batch(batch_file, out, *, jobs: int | None = None, scheduler: str | None = None,
              executor: Executor | None = None, on_line: OnLine | None = None,
              cancel=None) -> BatchResult:
    """Run every review of a batch file into ``out`` and write its index.

    Parameters
    ----------
    batch_file : path-like
        The ``.csv`` or ``.toml`` batch file.
    out : path-like
        The batch's folder: one folder per line, ``index.html`` and ``index.json``.
    jobs, scheduler : optional
        As ``--jobs`` and ``--scheduler``: a local cluster of processes, at most one worker
        per line to run, or an existing cluster. Ignored when ``executor`` is given.
    executor : Executor, optional
        Where the reviews run (left open for the caller to close).
    on_line : callable, optional
        ``on_line(settled, total, outcome)`` as each line ends, in the calling thread.
    cancel : threading.Event, optional
        Stops the batch; finished reviews stay on disk and in the index.

    Raises
    ------
    BatchFileError
        The batch file cannot be read as a whole.
    SettingError
        ``--jobs`` or ``--scheduler`` is wrong.
    """
    from .preflight import check_out_folder

    start = time.perf_counter()
    jobs = resolve_jobs(jobs)
    out = check_out_folder(out)
    lines = read_batch(batch_file)
    check_lines(lines, out)
    ready = [line for line in lines if line.problem is None]
    own = executor is None and bool(ready)
    if own:
        executor = Executor(min(jobs, len(ready)), scheduler, processes=True)
    try:
        if ready:
            executor.start()  # a wrong --scheduler stops the batch before anything is written
        _make_folder(out)
        return _run(lines, ready, out, executor, on_line, cancel, start, Path(batch_file))
    finally:
        if own:
            executor.close()


def _run(lines, ready, out: Path, executor, on_line, cancel, start: float,
         batch_file: Path) -> BatchResult:
    outcomes: dict[int, LineOutcome] = {}

    def settle(i: int, outcome: LineOutcome) -> None:
        outcomes[i] = outcome
        if on_line is not None:
            on_line(len(outcomes), len(lines), outcome)

    position = {id(line): i for i, line in enumerate(lines)}
    for i, line in enumerate(lines):
        if line.problem is not None:
            settle(i, _failed(line, line.problem, 0.0, out))

    def on_item(k: int, ok: bool, value) -> None:
        line = ready[k]
        if not ok:  # the worker died too often (dask's KilledWorker) or the task was lost
            value = _failed(line, f"{line.where}: the review did not finish on the cluster "
                            f"({type(value).__name__}: {value}); run the batch again.", 0.0, out)
        settle(position[id(line)], value)

    run_id = uuid.uuid4().hex
    description = "nothing run" if executor is None else executor.description
    try:
        if ready:
            executor.map_settled(partial(run_line, out=str(out), run_id=run_id), ready,
                                 on_item=on_item, cancel=cancel)
    finally:
        for i, line in enumerate(lines):
            if i not in outcomes:
                outcomes[i] = _outcome(line, "failed", "not run: the batch stopped before "
                                       "this review finished.", 0.0)
        result = BatchResult([outcomes[i] for i in range(len(lines))], out / "index.html",
                             out / "index.json", description, time.perf_counter() - start)
        _write_index(result, batch_file)
        shutil.rmtree(out / STATE_DIR, ignore_errors=True)
    return result


def _make_folder(out: Path) -> None:
    if out.exists() and not out.is_dir():
        raise SettingError(f"--out {out} is a file; give a folder for the batch's reviews.")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SettingError(f"--out {out}: the folder cannot be made ({exc}); choose another "
                           "folder.") from None


# ---------------------------------------------------------------------- the index
def _write_index(result: BatchResult, batch_file: Path) -> None:
    created = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0)
    doc = {"format": INDEX_FORMAT, "batch_file": str(batch_file.absolute()),
           "created_at": created.isoformat(), "executor": result.executor,
           "seconds": round(result.seconds, 3),
           "counts": {"lines": len(result.outcomes), "done": result.n_done,
                      "failed": len(result.outcomes) - result.n_done},
           "reviews": [o.to_dict() for o in result.outcomes]}
    write_atomic(result.index_json, json.dumps(doc, indent=1, allow_nan=False))
    write_atomic(result.index_html, index_html(result, batch_file, created))


def index_html(result: BatchResult, batch_file: Path, created: _dt.datetime) -> str:
    """The batch's index as one self-contained page in the report's own frame and style: a
    row per line with its verdict, holdout fidelities, certificate and links to its files."""
    from .cautions import CAUTIONS
    from .report.document import Document, Paragraph, Title
    # the report page's frame (head with style sheet and CSP, header, footer) and escaping
    from .report.html_report import _e, _footer, _front, _head, _paragraph

    n = len(result.outcomes)
    doc = Document(title="Batch of reviews",
                   meta={"batch file": str(batch_file), "date": created,
                         "run on": result.executor})
    title = Title("Batch of reviews", subtitle=f"{result.n_done} of {n} reviews done, "
                  f"{n - result.n_done} failed, in {result.seconds:.1f} s")
    header = ["Review", "Verdict", "Surrogate fidelity (holdout)", "Greedy fidelity (holdout)",
              "Certificate", "Gap", "Files", "Model", "Data"]
    align = ["l", "l", "r", "r", "l", "r", "l", "l", "l"]
    head = "".join(f'<th scope="col" class="{a}">{_e(h)}</th>' for h, a in zip(header, align))
    body = "".join("<tr>" + "".join(f'<td class="{a}">{cell}</td>'
                                    for cell, a in zip(_index_cells(o), align)) + "</tr>"
                   for o in result.outcomes)
    table = (f'<div class="table-wrap"><table><thead><tr>{head}</tr></thead>'
             f"<tbody>{body}</tbody></table></div>")
    parts = [_head(doc), "<body>", _front(doc, title), "<main>", table,
             _paragraph(Paragraph(CAUTIONS, style="caution")), "</main>", _footer(doc),
             "</body>", "</html>", ""]
    return "\n".join(parts)


def _index_cells(o: LineOutcome) -> list[str]:
    """One index row's cells as HTML (every text escaped, every link quoted)."""
    from urllib.parse import quote

    from .report.html_report import _e

    def number(v) -> str:
        return "n/a" if v is None else f"{v:.3f}"

    def link(path: str | None, label: str) -> str:
        return f'<a href="{_e(quote(path))}">{label}</a>' if path else ""

    verdict = (_e(o.verdict) if o.done else
               f"<strong>{_e(o.verdict)}</strong><br><small>{_e(o.message)}</small>")
    files = " ".join(x for x in (link(o.report_html, "HTML"), link(o.report_pdf, "PDF"),
                                 link(o.error_file, "error")) if x)
    return [_e(o.name), verdict, number(o.surrogate_holdout_fidelity),
            number(o.greedy_holdout_fidelity), _e(o.certificate_status or ""),
            number(o.certificate_gap), files, _e(Path(o.model).name if o.model else ""),
            _e(Path(o.data).name if o.data else "")]
