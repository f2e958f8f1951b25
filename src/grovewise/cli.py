"""The ``grovewise`` command line: the same pipeline as the window and the Python API.

Every command exits non-zero with a one-paragraph message (never a traceback) on bad input.
"""

from __future__ import annotations

import argparse
import os
import sys
import textwrap
import warnings
from collections.abc import Sequence

from .errors import GrovewiseError

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3


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
