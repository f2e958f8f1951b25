"""The ``grovewise`` command line: the same pipeline as the window and the Python API.

Every command exits non-zero with a one-paragraph message (never a traceback) on bad input.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import textwrap
import warnings
from collections.abc import Sequence
from pathlib import Path

from .errors import GrovewiseError, SettingError

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3
LONG_COMMANDS = ("review", "demo", "surrogate", "reproduce", "batch", "decide", "effects")
DEMO_TIME_LIMIT = 30.0  # seconds for the demo's solve: the sample reaches its best tree sooner


def _say(message: str, stream=None) -> None:
    print(textwrap.fill(message, width=100, break_long_words=False, break_on_hyphens=False),
          file=stream or sys.stderr)


def _warn_if_trusted(args) -> None:
    if getattr(args, "trust", False):
        _say(f"warning: opening {args.model} as trusted: a pickle or joblib file can run code "
             "when opened; do this only for files whose origin you trust.")


def cmd_inspect(args) -> int:
    """Summary of a model (and of its predictions on DATA)."""
    from .loaders import from_estimator, load_data, load_native
    from .loaders.exactness import check_exactness
    from .summary import summarize

    _warn_if_trusted(args)
    _check_files(args.model, args.data)
    native = load_native(args.model, trusted=args.trust)
    forest = from_estimator(native)
    data = load_data(args.data, forest=forest, target=args.target) if args.data else None
    print(f"{args.model}")
    print(summarize(forest, None if data is None else data.X).text())
    if data is not None:
        print(f"Exactness  {check_exactness(forest, native, data.X).text()}")
        for note in data.notes:
            _say(f"note: {note}", sys.stdout)
    return 0


def cmd_anatomy(args) -> int:
    """Usage maps, importances, threshold profiles: figures and tables."""
    from .preflight import check_data, check_flags, check_model, check_out_folder
    from .report.anatomy_files import export_anatomy
    from .report.figure_files import check_dpi, check_formats

    _warn_if_trusted(args)
    # every input checked before the first figure is drawn
    dpi, formats = check_dpi(args.dpi), check_formats(tuple(args.formats.split(",")))
    if not 0 <= args.seed < 2**32:  # the range numpy's and scikit-learn's seeds take
        raise SettingError(f"--seed {args.seed}: give a whole number from 0 to {2**32 - 1}.")
    check_out_folder(args.out)
    _check_files(args.model, args.data)
    forest = check_model(args.model, args.trust)
    flags = check_flags(forest, _parse_flags(args.flag))
    data = check_data(args.data, forest, target=args.target) if args.data else None
    files = export_anatomy(forest, data, out_dir=args.out, flags=flags, dpi=dpi,
                           formats=formats, random_state=args.seed)
    print(f"wrote {len(files)} files to {args.out}")
    for f in files:
        print(f"  {f}")
    return 0


def cmd_effects(args) -> int:
    """The ensemble's own effects on a seeded sample: contributions, importance, interaction
    pairs, effect curves; tables (CSV, JSON) and figures (PNG, SVG)."""
    _warn_if_trusted(args)
    features = [f.strip() for f in (args.features or "").split(",") if f.strip()] or None
    out = Path(args.out)
    with TerminalProgress() as progress:
        checked = _check_effects(args, features, progress)
        written = _export_effects(args, out, checked, progress)
    print(f"effects of {args.model} on {args.data}")
    print(f"  sample        {written['sample']}")
    print(f"  relies on     {written['ranking']} (by mean |contribution|)")
    for note in written["notes"]:
        _say(f"  note: {note}", sys.stdout)
    print(f"wrote {len(written['files'])} files to {out}")
    for f in written["files"]:
        print(f"  {f.name}")
    return 0


EFFECTS_ROWS = (10, 100_000)  # as ReviewSettings.effects_rows
INTERACTION_ROWS = (1, 10_000)  # as ReviewSettings.interaction_rows


def _check_range(option: str, value: int, limits: tuple[int, int]) -> None:
    lo, hi = limits
    if not lo <= value <= hi:
        raise SettingError(f"{option} {value} is out of range; give a whole number from {lo:,} "
                           f"to {hi:,}.")


def _feature_indices(forest, features) -> list[int] | None:
    """``--features`` as indices into the model's features, each name checked."""
    if features is None:
        return None
    names = list(forest.feature_names)
    unknown = [f for f in features if f not in names]
    if unknown:
        shown = ", ".join(names[:12]) + (", ..." if len(names) > 12 else "")
        verb = "is" if len(unknown) == 1 else "are"
        raise SettingError(f"--features: {', '.join(unknown)} {verb} not among the model's "
                           f"features ({shown}); give names as the model has them, "
                           "comma-separated.")
    return list(dict.fromkeys(names.index(f) for f in features))


def _check_effects(args, features, progress):
    """Every input of ``grovewise effects``, checked before any work: the row counts, the
    resolution, the cores, the folder, the model, ``--features`` and the data."""
    from types import SimpleNamespace

    from .preflight import STEP, check_data, check_model, check_out_folder
    from .report.figure_files import check_dpi

    _check_range("--rows", args.rows, EFFECTS_ROWS)
    _check_range("--interaction-rows", args.interaction_rows, INTERACTION_ROWS)
    dpi, jobs = check_dpi(args.dpi), _jobs(args)
    check_out_folder(args.out)
    _check_files(args.model, args.data)
    progress(STEP, 0.0, f"reading the model {Path(args.model).name}")
    forest = check_model(args.model, args.trust)
    chosen = _feature_indices(forest, features)
    progress(STEP, 0.4, f"reading the data {Path(args.data).name} against the model")
    data = check_data(args.data, forest, target=args.target)
    progress(STEP, 1.0, "every input checked")
    return SimpleNamespace(forest=forest, data=data, features=features, chosen=chosen,
                           dpi=dpi, jobs=jobs)


def _export_effects(args, out: Path, checked, progress) -> dict:
    """Compute the effects (grovewise.effects_summary.ensemble_effects: the review's own
    computation, without a surrogate) and write every table and figure into ``out``."""
    import numpy as np

    from .analysis.thresholds import threshold_profiles
    from .effects_summary import ensemble_effects
    from .progress import StepMeter
    from .report.anatomy_files import write_csv, write_json
    from .report.figure_files import save_figure
    from .report.figures_effects import effect_curves_figure, interaction_figure
    from .review import proba_in_blocks

    forest, data, chosen, dpi = checked.forest, checked.data, checked.chosen, checked.dpi
    features = checked.features
    X = data.X
    progress("effects", 0.0, f"predicting {X.shape[0]:,} rows of {Path(args.data).name}")
    meter = StepMeter(progress, "effects", X.shape[0], "rows predicted", start=0.03, span=0.05)
    predicted = np.argmax(proba_in_blocks(forest, X, meter), axis=1)
    fx, detail = ensemble_effects(
        forest, X, predicted, threshold_profiles(forest), rows=args.rows,
        interaction_rows=args.interaction_rows, seed=args.seed, features=chosen,
        jobs=checked.jobs, progress=lambda f, msg: progress("effects", 0.08 + 0.8 * f, msg))
    names = list(forest.feature_names)
    notes = [f"{names[j]} has no values in the sample: no curve for it." for j in (chosen or [])
             if j not in {c.index for c in fx.curves}]
    c = detail.contributions
    outputs = list(c.output_names)

    def column(name: str, o: int) -> str:
        return name if len(outputs) == 1 else f"{name} [{outputs[o]}]"

    classes = [str(k) for k in forest.classes_]
    table = []
    for r, i in enumerate(detail.sample.rows):
        row = {"row": int(i) + 1, "predicted class": classes[predicted[i]]}
        for o in range(len(outputs)):
            row.update({column(n, o): float(c.values[r, j, o]) for j, n in enumerate(names)})
        row.update({column("base", o): float(c.base[o]) for o in range(len(outputs))})
        table.append(row)
    ranking = fx.ranking()
    importance = [{"feature": n, "mean_abs_contribution": fx.importance[n], "rank": k + 1}
                  for k, n in enumerate(ranking)]
    pairs = [{"rank": k + 1, "first": pair.first, "second": pair.second,
              "mean_abs_interaction": pair.mean_abs} for k, pair in enumerate(detail.all_pairs)]
    files: list[Path] = []
    try:
        out.mkdir(parents=True, exist_ok=True)
        progress("effects", 0.9, "writing the tables")
        files.append(write_csv(out / "contributions.csv", table))
        files.append(write_csv(out / "contribution_importance.csv", importance))
        files.append(write_csv(out / "interaction_pairs.csv", pairs))
        files.append(write_json(out / "effect_curves.json", {
            "kind": "effect_curves", "sample": fx.sample, "output": "probability",
            "classes": classes, "curves": [curve.to_dict() for curve in fx.curves]}))
        progress("effects", 0.93, "drawing the figures")
        files.extend(save_figure(effect_curves_figure(fx, max_features=max(len(fx.curves), 1),
                                                      with_surrogate=False),
                                 out / "effect_curves", ("png", "svg"), dpi))
        files.extend(save_figure(interaction_figure(fx, with_surrogate=False),
                                 out / "interaction_pairs", ("png", "svg"), dpi))
        files.append(write_json(out / "effects.json", {
            "kind": "effects", "model": {"file": str(args.model), "kind": forest.kind,
                                         "n_trees": forest.n_trees, "classes": classes},
            "data": {"file": str(args.data), "sha256": data.sha256, "n_rows": int(X.shape[0])},
            "settings": {"rows": args.rows, "interaction_rows": args.interaction_rows,
                         "seed": args.seed, "features": features, "dpi": dpi},
            "sample": fx.sample, "interaction_rows": fx.interaction_rows,
            "output": fx.output, "output_names": outputs,
            "method": "path-dependent TreeSHAP (Shapley values, exact on the trees)",
            "importance": fx.importance, "pair_statement": fx.pair_statement,
            "files": [f.name for f in files]}))
    except OSError as exc:
        from .errors import GrovewiseError

        raise GrovewiseError(f"could not write the effects into {out} "
                             f"({exc.strerror or exc}); choose a folder you can write to, "
                             "with free space") from None
    progress("effects", 1.0, f"effects: {len(files)} files written")
    return {"files": files, "sample": fx.sample["description"],
            "ranking": ", ".join(ranking[:3]), "notes": notes}


def _check_files(model, *data, must_exist: bool = False) -> None:
    """Every input file can be read, before any is opened (grovewise.preflight); the readers
    themselves name a missing file and say what it should be, unless ``must_exist``."""
    from .errors import DataError, ModelFileError
    from .preflight import check_readable

    check_readable(model, "model file", ModelFileError, must_exist)
    for path in data:
        if path:
            check_readable(path, "data file", DataError, must_exist)


class TerminalProgress:
    """Progress of long steps on the terminal, never silent for more than ``every`` seconds.

    Each line shows the step, a bar, the share done and the step's own message (a count and
    the time left, or the solver's incumbent and bound). A watch thread repeats the latest
    state with the seconds spent when a step has said nothing for ``every`` seconds, so a
    long library call (reading a file, building the program) never looks like a hang. Use
    it as a context manager to run the watch thread.
    """

    BAR = 20

    def __init__(self, stream=None, every: float = 2.0) -> None:
        self.stream = stream or sys.stderr
        self.every = every
        self._last = 0.0
        self._state: tuple[str, float, str] | None = None
        self._fresh = False  # a message came since the last line
        self._step_start = 0.0
        self._lock = __import__("threading").Lock()
        self._stop = None

    def __call__(self, step: str, fraction: float, message: str, info=None) -> None:
        import time

        now = time.monotonic()
        with self._lock:
            if self._state is None or self._state[0] != step or fraction <= 0.0:
                self._step_start = now
            self._state = (step, fraction, str(message))
            self._fresh = True
            final = fraction <= 0.0 or fraction >= 1.0
            if not final and now - self._last < self.every:
                return
            self._print(step, fraction, str(message), now)

    def _print(self, step: str, fraction: float, message: str, now: float) -> None:
        self._last = now
        self._fresh = False
        fraction = max(0.0, min(1.0, float(fraction)))
        filled = int(round(self.BAR * fraction))
        bar = "#" * filled + "." * (self.BAR - filled)
        print(f"  [{step:>9}] [{bar}] {100 * fraction:3.0f}%  {message}", file=self.stream,
              flush=True)

    def _watch(self) -> None:
        import time

        while not self._stop.wait(0.1):
            with self._lock:
                now = time.monotonic()
                # well before `every`: a busy interpreter may hand this thread the lock late
                if self._state is None or now - self._last < self.every * 0.7:
                    continue
                step, fraction, message = self._state
                if fraction >= 1.0:
                    continue
                if not self._fresh:
                    spent = now - self._step_start
                    message = f"{message} (still working, {spent:.0f} s into the {step} step)"
                self._print(step, fraction, message, now)

    def __enter__(self) -> "TerminalProgress":
        import threading

        self._stop = threading.Event()
        threading.Thread(target=self._watch, name="terminal-progress", daemon=True).start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()


def _settings_from(args):
    from .review import ReviewSettings

    return ReviewSettings(depth=args.depth, max_features_per_split=args.max_features_per_split,
                          alpha=args.alpha, oblique_level=args.oblique_level,
                          proximity_threshold=args.proximity_threshold,
                          time_limit=args.time_limit, node_limit=args.node_limit,
                          holdout_share=args.holdout_share, seed=args.seed,
                          flags=_parse_flags(args.flag),
                          group_columns=list(getattr(args, "group", None) or []),
                          permutation_rows=args.permutation_rows,
                          exactness_rows=args.exactness_rows,
                          proximity_rows=args.proximity_rows,
                          stability_resamples=args.stability_resamples,
                          stability_time_limit=args.stability_time_limit).validate()


def _run_review(inputs, settings, out: str, reviewer=None, jobs: int | None = None):
    """Run every step with terminal progress, save the review and write the report."""
    import time

    from .batch import SAVED_REVIEW, write_review_folder
    from .preflight import check_review
    from .report.content import certificate_line, reliance_text, review_reliance
    from .weak_spots import weak_spots

    start = time.perf_counter()
    folder = Path(out)
    with TerminalProgress() as progress:
        checked = check_review(inputs, settings, folder, progress=progress)  # before work
        review, files = write_review_folder(inputs, settings, folder, reviewer,
                                            progress=progress, jobs=jobs, checked=checked)
    sur = review.surrogate
    print(f"review of {inputs.model} on {inputs.data}: done in {time.perf_counter() - start:.1f} s")
    print(f"  exactness     {review.intake.exactness.text()}")
    _print_fidelities(sur, "  ")
    if sur.note:
        print(f"  choice        {sur.note}")
    print(f"  certificate   {certificate_line(review)}")
    for gf in getattr(sur, "group_fidelity", None) or []:
        print(f"  by group      {gf.sentence()}")
    perf = getattr(review.intake, "performance", None)
    if perf is not None:
        print(f"  model         {perf.text().splitlines()[0]}")
    if review.stability is not None:
        for name in ("surrogate", "greedy"):
            print(f"  stability     {review.stability.sentence(name)}")
    if review.second_model is not None:
        print(f"  second model  {review.second_model.sentence()}")
    print(f"  relies on     {reliance_text(review_reliance(review))}")
    for spot in weak_spots(review):
        _say(f"  weak spot: {spot.text}", sys.stdout)
    for kind, path in files.items():
        print(f"  {kind:<13} {path}")
    print(f"  saved review  {folder / SAVED_REVIEW}")
    return review, files


def _jobs(args) -> int:
    """``--jobs``, checked (None or 0: every core)."""
    from .executor import resolve_jobs

    return resolve_jobs(args.jobs)


def _pct(v) -> str:
    """A share as the report prints it (imported late: the report module loads matplotlib)."""
    from .report.content import pct

    return pct(v)


def _fmt_optional(v) -> str:
    return "n/a" if v is None else f"{v:.3f}"


def cmd_review(args) -> int:
    """The whole review: report and manifest."""
    from .review import ReviewInputs

    _warn_if_trusted(args)
    inputs = ReviewInputs(args.model, args.data, target=args.target, holdout=args.holdout,
                          trusted=args.trust, second_model=args.second_model)
    reviewer = _reviewer_from(args)
    _run_review(inputs, _settings_from(args), args.out, reviewer, jobs=_jobs(args))
    return 0


def _reviewer_from(args):
    """The sign-off given on the command line (``--decision`` and friends), checked."""
    import datetime as _dt

    from .decision import decision_name
    from .review import Reviewer

    decision = decision_name(args.decision) if args.decision else "pending"
    signed = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds") \
        if decision != "pending" else ""
    return Reviewer(name=args.reviewer or "", role=args.role or "", decision=decision,
                    conditions=args.conditions or "", notes=args.note or "",
                    signed_at=signed).validate()


def cmd_decide(args) -> int:
    """Record or change the decision on a written review folder."""
    from .decision import decision_name, record_decision
    from .preflight import check_out_folder
    from .signing import is_signed

    decision_name(args.decision)  # checked before the review is opened or drawn again
    check_out_folder(args.folder, "FOLDER")
    signed = is_signed(args.folder)
    if signed and not args.sign:
        raise SettingError(f"{args.folder} is signed: recording a decision rewrites the files "
                           "the signature covers, so the signature would no longer hold. Add "
                           "--sign to sign the review again with your key after the decision.")
    files = record_decision(args.folder, args.decision, conditions=args.conditions or "",
                            notes=args.note, name=args.reviewer, role=args.role)
    print(f"decision recorded in {args.folder}: {args.decision}")
    for kind, path in files.items():
        print(f"  {kind:<13} {path}")
    if args.sign:
        _sign(args.folder)
    return 0


def cmd_sign(args) -> int:
    """Sign a written review with the reviewer's own key (made on first use)."""
    from .preflight import check_out_folder

    check_out_folder(args.folder, "FOLDER")  # the signature is written into it
    _sign(args.folder)
    return 0


def _sign(folder) -> None:
    from .signing import (default_key_path, key_fingerprint, load_or_create_key,
                          sign_review, written_review_files)

    key_path = default_key_path()
    key, created = load_or_create_key(key_path)
    names = written_review_files(folder)
    sign_review(folder, names, key=key)
    if created:
        print(f"made a signing key for you at {key_path} (keep it private; only its public "
              "half goes into reviews)")
    print(f"signed {len(names)} files of {folder} with key {key_fingerprint(key)}; "
          f"`grovewise verify {folder}` checks that none changed since")


def cmd_verify(args) -> int:
    """Say whether any file of a signed review changed after signing."""
    from .signing import check_signature

    check = check_signature(args.folder)
    print(check.text())
    return 0 if check.ok else 1


def cmd_demo(args) -> int:
    """The review of the bundled sample; opens the window when a display exists."""
    from .review import ReviewInputs
    from .sample_data import sample_paths

    paths = sample_paths()
    # the sample's XGBoost model, trained on the same rows, is reviewed beside the forest
    inputs = ReviewInputs(paths["forest"], paths["data"], target=paths["target"],
                          second_model=paths["xgboost"])
    review, files = _run_review(inputs, _settings_from(args), args.out, jobs=_jobs(args))
    if args.no_window:
        return 0
    from .app.launch import has_display

    if not has_display():
        print("no display found: the window was not opened (the report is written above).")
        return 0
    return _open_window_process(Path(args.out) / "review")


def cmd_batch(args) -> int:
    """Many reviews from one batch file (CSV or TOML), on a local or given dask cluster."""
    from types import SimpleNamespace

    from .batch import read_batch, run_batch

    for line in read_batch(args.file):
        if line.trusted and line.problem is None:
            _warn_if_trusted(SimpleNamespace(trust=True, model=line.model))

    def on_line(count: int, total: int, outcome) -> None:
        print(outcome.progress_text(count, total), flush=True)

    result = run_batch(args.file, args.out, jobs=args.jobs, scheduler=args.scheduler,
                       on_line=on_line)
    print(result.summary())
    return 0 if result.all_done else 1


# Qt's desktop plugin (xcb) needs these Debian/Ubuntu packages; without them Qt aborts.
XCB_PACKAGES = ("libxcb-cursor0 libxcb-icccm4 libxcb-image0 libxcb-keysyms1 libxcb-randr0 "
                "libxcb-render-util0 libxcb-shape0 libxcb-xinerama0 libxcb-xkb1 "
                "libxkbcommon-x11-0")


def _open_window_process(review_dir: Path) -> int:
    """Open the window on a saved review in a child process, so that a display Qt cannot use
    (it aborts the process) costs a message, not the review already written."""
    import subprocess

    code = subprocess.run([sys.executable, "-m", "grovewise.cli", "window", "--review",
                           str(review_dir)]).returncode
    if code != 0:
        _say(f"the window could not open on this display (exit {code}); the report and the "
             f"saved review are written. On Debian or Ubuntu, Qt's desktop plugin needs: "
             f"apt-get install {XCB_PACKAGES}. Then run: grovewise window --review {review_dir}")
    return 0


def cmd_surrogate(args) -> int:
    """Fit the surrogate and export it: rules as text and JSON, the tree as PNG and SVG, the
    program as MPS."""
    from .preflight import check_out_folder, check_review
    from .report.atomic import write_atomic
    from .report.figure_files import check_dpi, save_figure
    from .report.figures_surrogate import surrogate_tree_figure
    from .review import Review, ReviewInputs

    _warn_if_trusted(args)
    inputs = ReviewInputs(args.model, args.data, target=args.target, trusted=args.trust)
    settings, jobs, dpi = _settings_from(args), _jobs(args), check_dpi(args.dpi)
    out = check_out_folder(args.out)
    review = Review(inputs, settings)
    review.jobs = jobs
    with TerminalProgress() as progress:
        review.use_checked(check_review(inputs, settings, progress=progress))  # before the fit
        out.mkdir(parents=True, exist_ok=True)
        review.run_step("intake", progress)
        review.run_step("surrogate", progress)
    if review.program_mps:
        review.write_program(out / "program.mps")
    result = review.surrogate
    est = result.surrogate
    write_atomic(out / "rules.txt", est.export_text())
    write_atomic(out / "surrogate.json", json.dumps(result.to_dict(), indent=1))
    save_figure(surrogate_tree_figure(est, title=f"Surrogate of {Path(args.model).name}"),
                out / "tree", formats=("png", "svg"), dpi=dpi)
    print(est.rules_)
    _print_fidelities(result, "")
    cert = result.certificate
    print(f"certificate: {cert.get('statement') or ''} Status {cert['status']}, objective "
          f"{cert['objective']:.5f}, bound {_fmt_optional(cert['bound'])}, gap "
          f"{_fmt_optional(cert['gap'])}; winning stage {result.winner}")
    if est.proof_ is not None and est.proof_.parts:
        est.proof_.write_mps(out / "proof")
    if result.note:
        print(result.note)
    written = sorted(p.name for p in out.iterdir() if not p.name.startswith("."))
    print(f"wrote {', '.join(written)} to {out}")
    return 0


def _print_fidelities(result, indent: str) -> None:
    """Each tree's unweighted fidelity with its 95% Wilson interval, train and holdout."""
    from .report.content import fidelity_text

    names = {"surrogate": f"surrogate (winning stage {result.winner})",
             "greedy": "greedy tree (CART)", "optimal_axis": "exact axis-aligned tree"}
    for model, name in names.items():
        if model in result.fidelity:
            print(f"{indent}{name}: fidelity (unweighted) {fidelity_text(result, 'train', model)}"
                  f" train, {fidelity_text(result, 'holdout', model)} holdout")


def cmd_reproduce(args) -> int:
    """Re-run a review from its manifest and compare."""
    from .reproduce import reproduce

    _say(f"re-running the review of {args.manifest} ...", sys.stdout)
    with TerminalProgress() as progress:
        verdict = reproduce(args.manifest, trusted=args.trust, progress=progress)
    print(verdict.text())
    return 0 if verdict.passed else 1


def cmd_window(args) -> int:
    """The desktop window."""
    from .app.launch import run_window

    if args.review:
        from .review import Review

        return run_window(review=Review.open(args.review), capture_dir=args.capture)
    if not args.sample and not (args.model and args.data):
        if args.model or args.data:
            raise SettingError("give both MODEL and DATA, or --sample, or neither.")
    if args.model and args.data and not args.sample:
        _check_files(args.model, args.data, must_exist=True)  # before the window opens
    return run_window(sample=args.sample, model=args.model, data=args.data,
                      target=args.target, capture_dir=args.capture)


def _level_or_none(text: str) -> float | None:
    """A significance level, or None for 'none' (checked with the other settings)."""
    if text.strip().lower() == "none":
        return None
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number or 'none'") from None


def _add_solve_args(p: argparse.ArgumentParser) -> None:
    from .review import ReviewSettings

    d = ReviewSettings()
    p.add_argument("--depth", type=int, default=d.depth, help=f"surrogate depth (default {d.depth})")
    p.add_argument("--max-features-per-split", type=int, default=d.max_features_per_split,
                   help=f"features per split at most (default {d.max_features_per_split})")
    p.add_argument("--alpha", type=float, default=d.alpha,
                   help=f"price per feature used, against fidelity (default {d.alpha})")
    p.add_argument("--oblique-level", type=_level_or_none, default=d.oblique_level,
                   metavar="P", help="keep multi-feature splits only when they agree on "
                   "significantly more training rows than the best axis-aligned tree, at this "
                   f"level; none: the lower objective wins (default {d.oblique_level})")
    p.add_argument("--proximity-threshold", type=float, default=d.proximity_threshold,
                   help=f"records this alike share a leaf (default {d.proximity_threshold})")
    p.add_argument("--time-limit", type=float, default=d.time_limit,
                   help=f"seconds for the whole surrogate fit (default {d.time_limit:g})")
    p.add_argument("--node-limit", type=int, default=d.node_limit,
                   help="branch-and-bound nodes at most: makes the solve reproducible exactly")
    p.add_argument("--holdout-share", type=float, default=d.holdout_share,
                   help=f"share of rows held out to measure fidelity (default {d.holdout_share})")
    p.add_argument("--seed", type=int, default=d.seed, help=f"seed of every random step (default {d.seed})")
    p.add_argument("--flag", action="append", metavar="FEATURE=KIND",
                   help="mark a feature protected or forbidden (repeatable)")
    p.add_argument("--group", action="append", metavar="COL",
                   help="a column of the data (a model input or not) whose groups get their "
                        "own fidelity, beside every protected feature (repeatable)")
    p.add_argument("--stability-resamples", type=int, default=d.stability_resamples,
                   metavar="B", help="bootstrap re-fits of the surrogate and the greedy tree "
                   f"that measure how stable the rules are (default {d.stability_resamples}; "
                   "0 leaves them out)")
    p.add_argument("--stability-time-limit", type=float, default=d.stability_time_limit,
                   metavar="S", help="seconds for each re-fit (default: the time limit / "
                   "(2 x B), at least 1)")
    p.add_argument("--jobs", type=int, default=None, metavar="N",
                   help="CPU cores the steps use (default: all); results do not depend on it")
    for name, what in (("permutation_rows", "permutation importance"),
                       ("exactness_rows", "the exactness check"),
                       ("proximity_rows", "proximity pairs")):
        p.add_argument(f"--{name.replace('_', '-')}", type=int, default=getattr(d, name),
                       metavar="N", help=f"rows for {what}: larger data is sampled (seeded, "
                       f"stratified; default {getattr(d, name):,}" +
                       (", 0 for every row)" if name != "proximity_rows" else ")"))


def _add_decision_args(p: argparse.ArgumentParser, required: bool = False) -> None:
    p.add_argument("--decision", required=required,
                   choices=["approve", "approve-with-conditions", "reject"],
                   help="the reviewer's decision")
    p.add_argument("--conditions", help="the conditions, for approve-with-conditions")
    p.add_argument("--note", help="the reviewer's note, for the report")


def _parse_flags(items) -> dict[str, str]:
    """``--flag NAME=protected`` (or forbidden), repeated."""
    flags = {}
    for item in items or []:
        name, sep, kind = item.rpartition("=")
        if not sep or not name:
            raise SettingError(f"--flag {item!r}: write it as FEATURE=protected or "
                               "FEATURE=forbidden.")
        flags[name] = kind
    return flags


def _add_model_args(p: argparse.ArgumentParser, data: str | None = "optional") -> None:
    p.add_argument("model", metavar="MODEL", help="model file: XGBoost .json/.ubj, LightGBM "
                   ".txt or dump .json, CatBoost .cbm/.json, ONNX .onnx, scikit-learn model or "
                   "pipeline .skops; .pkl/.joblib only with --trust")
    if data == "optional":
        p.add_argument("data", metavar="DATA", nargs="?", help="review data (CSV or Parquet)")
    elif data == "required":
        p.add_argument("data", metavar="DATA", help="review data (CSV or Parquet)")
    p.add_argument("--trust", action="store_true",
                   help="open pickle/joblib or unusual skops files (they can run code)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="grovewise",
        description="Review a tree-ensemble classifier: intake, anatomy, effects, proximity, an "
                    "optimal sparse oblique surrogate tree, cases, and a sign-off report.")
    from . import __version__

    parser.add_argument("--version", action="version", version=f"grovewise {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    p = sub.add_parser("inspect", help="summary of a model (and of its predictions on DATA)")
    _add_model_args(p)
    p.add_argument("--target", help="name of the target column in DATA, if it has one")
    p.set_defaults(func=cmd_inspect)

    p = sub.add_parser("anatomy", help="usage maps, importances, figures and tables")
    _add_model_args(p)
    p.add_argument("--target", help="name of the target column in DATA, if it has one")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for figures and tables")
    p.add_argument("--flag", action="append", metavar="FEATURE=KIND",
                   help="mark a feature protected or forbidden (repeatable)")
    p.add_argument("--dpi", type=float, default=150, help="resolution of PNG figures")
    p.add_argument("--formats", default="png,svg", help="figure formats, comma-separated")
    p.add_argument("--seed", type=int, default=0, help="seed of permutation importance")
    p.set_defaults(func=cmd_anatomy)

    p = sub.add_parser("surrogate", help="fits and exports the surrogate")
    _add_model_args(p, data="required")
    p.add_argument("--target", help="name of the target column in DATA, if it has one")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for the exports")
    p.add_argument("--dpi", type=float, default=150, help="resolution of the PNG tree")
    _add_solve_args(p)
    p.set_defaults(func=cmd_surrogate)

    from .effects_summary import EFFECT_FEATURES
    from .review import ReviewSettings

    d = ReviewSettings()
    p = sub.add_parser("effects", help="the ensemble's own effects on a seeded sample: "
                       "contributions, importance, interaction pairs, effect curves")
    _add_model_args(p, data="required")
    p.add_argument("--target", help="name of the target column in DATA, if it has one")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for figures and tables")
    p.add_argument("--rows", type=int, default=d.effects_rows, metavar="N",
                   help=f"rows the effects are computed on: larger data is sampled (seeded, "
                   f"stratified by the predicted class; default {d.effects_rows:,})")
    p.add_argument("--interaction-rows", type=int, default=d.interaction_rows, metavar="N",
                   help=f"the first N of those rows give the interaction pairs (default "
                   f"{d.interaction_rows:,})")
    p.add_argument("--features", metavar="A,B",
                   help="effect curves of these features (comma-separated; default: the "
                   f"{EFFECT_FEATURES} the ensemble relies on most by mean |contribution|)")
    p.add_argument("--seed", type=int, default=d.seed,
                   help=f"seed of the sample (default {d.seed})")
    p.add_argument("--jobs", type=int, default=None, metavar="N",
                   help="CPU cores the contributions use (default: all); results do not "
                   "depend on it")
    p.add_argument("--dpi", type=float, default=150, help="resolution of PNG figures")
    p.set_defaults(func=cmd_effects)

    p = sub.add_parser("review", help="the whole review: report, manifest")
    _add_model_args(p, data="required")
    p.add_argument("--target", help="name of the target column in DATA, if it has one")
    p.add_argument("--holdout", metavar="FILE", help="a separate holdout data file")
    p.add_argument("--second-model", metavar="FILE", help="a second model over the same "
                   "features (a retrained version, a challenger), reviewed beside the first")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for the report")
    p.add_argument("--reviewer", help="the reviewer's name, for the report")
    p.add_argument("--role", help="the reviewer's role, for the report")
    _add_decision_args(p)
    _add_solve_args(p)
    p.set_defaults(func=cmd_review)

    p = sub.add_parser("decide", help="record or change the decision on a written review")
    p.add_argument("folder", metavar="FOLDER", help="the --out folder of a review")
    p.add_argument("--reviewer", help="the reviewer's name (kept if not given)")
    p.add_argument("--role", help="the reviewer's role (kept if not given)")
    _add_decision_args(p, required=True)
    p.add_argument("--sign", action="store_true",
                   help="sign the review again with your key after recording the decision "
                        "(needed when the review was signed)")
    p.set_defaults(func=cmd_decide)

    p = sub.add_parser("sign", help="sign a written review with your own key (made on first "
                                    "use, kept outside the review)")
    p.add_argument("folder", metavar="FOLDER", help="the --out folder of a review")
    p.set_defaults(func=cmd_sign)

    p = sub.add_parser("verify", help="say whether any file of a signed review changed after "
                                      "signing")
    p.add_argument("folder", metavar="FOLDER", help="the --out folder of a signed review")
    p.set_defaults(func=cmd_verify)

    p = sub.add_parser("demo", help="the review of the bundled sample")
    p.add_argument("--out", default="grovewise_demo", metavar="DIR",
                   help="folder for the report (default grovewise_demo)")
    p.add_argument("--no-window", action="store_true", help="do not open the window")
    _add_solve_args(p)
    p.set_defaults(func=cmd_demo, time_limit=DEMO_TIME_LIMIT)

    p = sub.add_parser("batch", help="many reviews listed in a CSV or TOML file")
    p.add_argument("file", metavar="FILE", help="the batch file: one review per CSV line or "
                   "TOML [[review]] entry (model, data, optional name, target, settings)")
    p.add_argument("--out", required=True, metavar="DIR",
                   help="folder for one folder per review, index.html and index.json")
    p.add_argument("--jobs", type=int, default=None, metavar="N",
                   help="reviews at once on a local cluster (default: one per CPU core)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run on the dask cluster at ADDRESS (tcp://host:port) instead")
    p.set_defaults(func=cmd_batch)

    p = sub.add_parser("reproduce", help="re-run a review and say whether it matches")
    p.add_argument("manifest", metavar="MANIFEST", help="the manifest.json of a review (or "
                   "the review's folder)")
    p.add_argument("--trust", action="store_true",
                   help="allow a review whose model was opened as trusted")
    p.set_defaults(func=cmd_reproduce)

    p = sub.add_parser("window", help="the desktop window")
    p.add_argument("model", metavar="MODEL", nargs="?", help="model file")
    p.add_argument("data", metavar="DATA", nargs="?", help="review data")
    p.add_argument("--sample", action="store_true", help="open the bundled sample")
    p.add_argument("--review", metavar="DIR", help="open a saved review (a folder)")
    p.add_argument("--target", help="name of the target column in DATA")
    p.add_argument("--capture", metavar="DIR",
                   help="go through every page, save one PNG per page there, and exit")
    p.set_defaults(func=cmd_window)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    warnings.filterwarnings("ignore", category=UserWarning)
    if args.command in LONG_COMMANDS:  # the numeric libraries take a second or two to load
        print(f"  [{'start':>9}] grovewise {args.command}: loading the libraries", file=sys.stderr,
              flush=True)
    try:
        return int(args.func(args) or 0)
    except GrovewiseError as exc:
        # one line, not wrapped: a list of names (features, columns) stays on it whole
        print(f"grovewise {args.command}: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        _say(f"grovewise {args.command}: interrupted; results written so far are kept.")
        return 130
    except Exception as exc:  # never a traceback to a user
        if os.environ.get("GROVEWISE_DEBUG"):
            raise
        _say(f"grovewise {args.command}: an unexpected error stopped the command "
             f"({type(exc).__name__}: {exc}). Nothing already written was changed. Please "
             "report it with the command you ran; set GROVEWISE_DEBUG=1 to see the details.")
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
