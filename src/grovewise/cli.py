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

from .errors import GrovewiseError

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3
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
    from .loaders import load_data, load_model
    from .report.anatomy_files import export_anatomy

    _warn_if_trusted(args)
    forest = load_model(args.model, trusted=args.trust)
    data = load_data(args.data, forest=forest, target=args.target) if args.data else None
    flags = _parse_flags(args.flag)
    files = export_anatomy(forest, data, out_dir=args.out, flags=flags, dpi=args.dpi,
                           formats=tuple(args.formats.split(",")), random_state=args.seed)
    print(f"wrote {len(files)} files to {args.out}")
    for f in files:
        print(f"  {f}")
    return 0


class TerminalProgress:
    """Progress of long steps on the terminal: one line per step, solver lines every ~2 s."""

    def __init__(self, stream=None, every: float = 2.0) -> None:
        self.stream = stream or sys.stderr
        self.every = every
        self._last = 0.0

    def __call__(self, step: str, fraction: float, message: str, info=None) -> None:
        import time

        now = time.monotonic()
        final = fraction <= 0.0 or fraction >= 1.0
        if not final and now - self._last < self.every:
            return
        self._last = now
        print(f"  [{step:>9}] {message}", file=self.stream, flush=True)


def _settings_from(args):
    from .review import ReviewSettings

    return ReviewSettings(depth=args.depth, max_features_per_split=args.max_features_per_split,
                          alpha=args.alpha, proximity_threshold=args.proximity_threshold,
                          time_limit=args.time_limit, node_limit=args.node_limit,
                          holdout_share=args.holdout_share, seed=args.seed,
                          flags=_parse_flags(args.flag)).validate()


def _run_review(inputs, settings, out: str, reviewer=None):
    """Run every step with terminal progress, save the review and write the report."""
    import time

    from .report.content import export_report
    from .review import Review

    start = time.perf_counter()
    review = Review(inputs, settings, reviewer)
    review.run(progress=TerminalProgress())
    folder = Path(out)
    review.save(folder / "review")
    files = export_report(review, folder)
    sur = review.surrogate
    fid = sur.fidelity
    print(f"review of {inputs.model} on {inputs.data}: done in {time.perf_counter() - start:.1f} s")
    print(f"  exactness     {review.intake.exactness.text()}")
    print(f"  surrogate     fidelity {fid['surrogate']['train']:.3f} train, "
          f"{_fmt_optional(fid['surrogate']['holdout'])} holdout "
          f"({sur.certificate['status']}, winning stage {sur.winner})")
    print(f"  greedy tree   fidelity {fid['greedy']['train']:.3f} train, "
          f"{_fmt_optional(fid['greedy']['holdout'])} holdout")
    for kind, path in files.items():
        print(f"  {kind:<13} {path}")
    print(f"  saved review  {folder / 'review'}")
    return review, files


def _fmt_optional(v) -> str:
    return "n/a" if v is None else f"{v:.3f}"


def cmd_review(args) -> int:
    """The whole review: report and manifest."""
    from .review import ReviewInputs, Reviewer

    _warn_if_trusted(args)
    inputs = ReviewInputs(args.model, args.data, target=args.target, holdout=args.holdout,
                          trusted=args.trust)
    reviewer = Reviewer(name=args.reviewer or "", role=args.role or "")
    _run_review(inputs, _settings_from(args), args.out, reviewer)
    return 0


def cmd_demo(args) -> int:
    """The review of the bundled sample; opens the window when a display exists."""
    from .review import ReviewInputs
    from .sample_data import sample_paths

    paths = sample_paths()
    inputs = ReviewInputs(paths["forest"], paths["data"], target=paths["target"])
    review, files = _run_review(inputs, _settings_from(args), args.out)
    if args.no_window:
        return 0
    from .app.launch import has_display

    if not has_display():
        print("no display found: the window was not opened (the report is written above).")
        return 0
    return _open_window_process(Path(args.out) / "review")


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
    from .report.atomic import write_atomic
    from .report.figure_files import save_figure
    from .report.figures_surrogate import surrogate_tree_figure
    from .review import Review, ReviewInputs

    _warn_if_trusted(args)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    review = Review(ReviewInputs(args.model, args.data, target=args.target, trusted=args.trust),
                    _settings_from(args))
    progress = TerminalProgress()
    review.run_step("intake", progress)
    review.run_step("surrogate", progress)
    if review.program_mps:
        review.write_program(out / "program.mps")
    result = review.surrogate
    est = result.surrogate
    write_atomic(out / "rules.txt", est.export_text())
    write_atomic(out / "surrogate.json", json.dumps(result.to_dict(), indent=1))
    save_figure(surrogate_tree_figure(est, title=f"Surrogate of {Path(args.model).name}"),
                out / "tree", formats=("png", "svg"), dpi=args.dpi)
    fid = result.fidelity
    print(est.rules_)
    print(f"fidelity: surrogate {fid['surrogate']['train']:.3f} train, "
          f"{_fmt_optional(fid['surrogate']['holdout'])} holdout; greedy "
          f"{fid['greedy']['train']:.3f} train, {_fmt_optional(fid['greedy']['holdout'])} holdout")
    cert = result.certificate
    print(f"certificate: {cert['status']}, objective {cert['objective']:.5f}, bound "
          f"{_fmt_optional(cert['bound'])}, gap {_fmt_optional(cert['gap'])}; winning stage "
          f"{result.winner}")
    if result.note:
        print(result.note)
    written = sorted(p.name for p in out.iterdir() if not p.name.startswith("."))
    print(f"wrote {', '.join(written)} to {out}")
    return 0


def cmd_reproduce(args) -> int:
    """Re-run a review from its manifest and compare."""
    from .reproduce import reproduce

    _say(f"re-running the review of {args.manifest} ...", sys.stdout)
    verdict = reproduce(args.manifest, trusted=args.trust, progress=TerminalProgress())
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
            from .errors import SettingError

            raise SettingError("give both MODEL and DATA, or --sample, or neither.")
    return run_window(sample=args.sample, model=args.model, data=args.data,
                      target=args.target, capture_dir=args.capture)


def _add_solve_args(p: argparse.ArgumentParser) -> None:
    from .review import ReviewSettings

    d = ReviewSettings()
    p.add_argument("--depth", type=int, default=d.depth, help=f"surrogate depth (default {d.depth})")
    p.add_argument("--max-features-per-split", type=int, default=d.max_features_per_split,
                   help=f"features per split at most (default {d.max_features_per_split})")
    p.add_argument("--alpha", type=float, default=d.alpha,
                   help=f"price per feature used, against fidelity (default {d.alpha})")
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


def _parse_flags(items) -> dict[str, str]:
    """``--flag NAME=protected`` (or forbidden), repeated."""
    from .errors import SettingError

    flags = {}
    for item in items or []:
        name, sep, kind = item.rpartition("=")
        if not sep or not name:
            raise SettingError(f"--flag {item!r}: write it as FEATURE=protected or "
                               "FEATURE=forbidden.")
        flags[name] = kind
    return flags


def _add_model_args(p: argparse.ArgumentParser, data: str | None = "optional") -> None:
    p.add_argument("model", metavar="MODEL", help="model file (.json, .ubj, .skops; "
                   ".pkl/.joblib only with --trust)")
    if data == "optional":
        p.add_argument("data", metavar="DATA", nargs="?", help="review data (CSV or Parquet)")
    elif data == "required":
        p.add_argument("data", metavar="DATA", help="review data (CSV or Parquet)")
    p.add_argument("--trust", action="store_true",
                   help="open pickle/joblib or unusual skops files (they can run code)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="grovewise",
        description="Review a tree-ensemble classifier: intake, anatomy, proximity, an "
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

    p = sub.add_parser("review", help="the whole review: report, manifest")
    _add_model_args(p, data="required")
    p.add_argument("--target", help="name of the target column in DATA, if it has one")
    p.add_argument("--holdout", metavar="FILE", help="a separate holdout data file")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for the report")
    p.add_argument("--reviewer", help="the reviewer's name, for the report")
    p.add_argument("--role", help="the reviewer's role, for the report")
    _add_solve_args(p)
    p.set_defaults(func=cmd_review)

    p = sub.add_parser("demo", help="the review of the bundled sample")
    p.add_argument("--out", default="grovewise_demo", metavar="DIR",
                   help="folder for the report (default grovewise_demo)")
    p.add_argument("--no-window", action="store_true", help="do not open the window")
    _add_solve_args(p)
    p.set_defaults(func=cmd_demo, time_limit=DEMO_TIME_LIMIT)

    p = sub.add_parser("reproduce", help="re-run a review and say whether it matches")
    p.add_argument("manifest", metavar="MANIFEST", help="the manifest.json of a review")
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
    try:
        return int(args.func(args) or 0)
    except GrovewiseError as exc:
        _say(f"grovewise {args.command}: {exc}")
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
