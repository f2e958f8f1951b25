"""Write a model's anatomy to a folder: every figure, and every table as CSV and JSON.

This is what ``grovewise anatomy MODEL [DATA] --out DIR`` produces. Without review data the
folder holds what the trees alone tell (usage maps, cut points, impurity importance); with
data it adds the cuts' place on the data, permutation importance and proximity pair counts.
Each file is written atomically; ``anatomy.json`` (written last) lists them with the
settings used.
"""

from __future__ import annotations

import csv
import io
import json
import re
from collections.abc import Mapping, Sequence
from pathlib import Path


from ..analysis.flags import check_flags, flag_report
from ..analysis.importance import (importance_comparison, impurity_importance,
                                   permutation_importance_result)
from ..analysis.proximity import pairs_above_thresholds
from ..analysis.thresholds import threshold_profiles
from ..analysis.usage import WEIGHTS, depth_usage, position_usage
from ..errors import GrovewiseError
from ..forest import LINK_SOFTMAX, Forest
from . import figures_anatomy as figs
from .atomic import write_atomic
from .figure_files import check_dpi, check_formats, save_figure
from ..plain import to_plain

PAIR_THRESHOLDS = (0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 0.99, 1.0)


def write_json(path: Path, obj: dict) -> Path:
    return write_atomic(path, json.dumps(to_plain(obj), indent=1, allow_nan=False) + "\n")


def write_csv(path: Path, rows: Sequence[dict]) -> Path:
    """A CSV table with a header from the first row's keys (an empty file for no rows)."""
    buf = io.StringIO()
    if rows:
        writer = csv.DictWriter(buf, fieldnames=list(rows[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows(to_plain(list(rows)))
    return write_atomic(path, buf.getvalue())


def _safe_name(label) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", str(label)).strip("_") or "class"


class _Writer:
    """Writes tables and figures into one folder and remembers what it wrote."""

    def __init__(self, out_dir: Path, formats, dpi: float):
        self.out_dir, self.formats, self.dpi = out_dir, formats, dpi
        self.files: list[Path] = []

    def table(self, stem: str, result, rows=None) -> None:
        self.files.append(write_csv(self.out_dir / f"{stem}.csv",
                                    result.to_rows() if rows is None else rows))
        self.files.append(write_json(self.out_dir / f"{stem}.json", result.to_dict()))

    def figure(self, stem: str, fig) -> None:
        self.files.extend(save_figure(fig, self.out_dir / stem, self.formats, self.dpi))


def _review_arrays(forest: Forest, X, y):
    """``X`` and ``y`` as arrays; a loaded Dataset (``.X``, ``.y``) gives both."""
    if X is not None and hasattr(X, "X"):
        y = getattr(X, "y", None) if y is None else y
        X = X.X
    return (None if X is None else forest.check_X(X)), y


def _usage_outputs(w: _Writer, forest: Forest, flags, position_depth: int) -> None:
    for weight in WEIGHTS:
        usage = depth_usage(forest, weight)
        w.table(f"depth_usage_{weight}", usage)
        w.figure(f"depth_usage_{weight}", figs.depth_usage_figure(usage, flags))
    if forest.link == LINK_SOFTMAX:
        for usage in depth_usage(forest, "count", per_class=True):
            stem = f"depth_usage_count_class_{_safe_name(usage.class_label)}"
            w.table(stem, usage)
            w.figure(stem, figs.depth_usage_figure(usage, flags))
    positions = position_usage(forest, position_depth, "count")
    w.table("position_usage", positions)
    w.figure("position_map", figs.position_map_figure(positions, flags))


def export_anatomy(forest: Forest, X=None, *, out_dir, flags: Mapping[str, str] | None = None,
                   y=None, dpi: float = 150, formats: Sequence[str] = ("png", "svg"),
                   random_state: int = 0, n_repeats: int = 5, position_depth: int = 3,
                   pair_thresholds: Sequence[float] = PAIR_THRESHOLDS) -> list[Path]:
    """Write the anatomy of ``forest`` (and of its behaviour on ``X``) into ``out_dir``.

    Parameters
    ----------
    forest : Forest
    X : array-like of shape (n, n_features) or Dataset, optional
        Review data. A Dataset's labels are used when ``y`` is not given.
    out_dir : path-like
        Created if missing; existing files of the same names are replaced atomically.
    flags : mapping of feature name to ``"protected"`` / ``"forbidden"``, optional
    y : array-like, optional
        Labels for permutation importance; without them it measures fidelity to the
        forest's own predictions.
    dpi : float
    formats : sequence of {"png", "svg", "pdf"}
    random_state : int
        Seed of permutation importance.
    n_repeats : int
        Permutation repeats.
    position_depth : int
        Deepest level of the position map (root 0).
    pair_thresholds : sequence of float
        Proximity thresholds whose pair counts are tabulated (with data).

    Returns
    -------
    list of Path
        Every file written; ``anatomy.json`` last.

    Raises
    ------
    SettingError, DataError
        For bad settings, flags or data (nothing is written then).
    GrovewiseError
        When the folder cannot be written.
    """
    formats, dpi = check_formats(formats), check_dpi(dpi)
    flags = check_flags(forest.feature_names, flags)
    X, y = _review_arrays(forest, X, y)
    out = Path(out_dir)
    w = _Writer(out, formats, dpi)
    try:
        out.mkdir(parents=True, exist_ok=True)
        _usage_outputs(w, forest, flags, position_depth)
        profiles = threshold_profiles(forest, X)
        w.table("threshold_profiles", profiles)
        w.figure("threshold_strips", figs.threshold_strips_figure(profiles, flags=flags))
        impurity = impurity_importance(forest)
        w.table("impurity_importance", impurity)
        permutation = None
        if X is not None:
            permutation = permutation_importance_result(forest, X, y, n_repeats=n_repeats,
                                                        random_state=random_state)
            w.table("permutation_importance", permutation)
            w.table("proximity_pair_counts", pairs_above_thresholds(forest, X, pair_thresholds))
        comparison = importance_comparison(impurity, permutation)
        w.table("importance_comparison", comparison)
        w.figure("importance", figs.importance_figure(comparison, flags))
        if flags:
            w.table("flagged_features",
                    flag_report(forest, flags, comparison, position_depth=position_depth))
        w.files.append(write_json(out / "anatomy.json", _index(forest, X, y, flags, w.files, {
            "dpi": dpi, "formats": list(formats), "random_state": random_state,
            "n_repeats": n_repeats, "position_depth": position_depth,
            "pair_thresholds": list(pair_thresholds)})))
    except OSError as exc:
        raise GrovewiseError(f"could not write the anatomy into {out} ({exc.strerror or exc}); "
                             "choose a folder you can write to, with free space") from None
    return w.files


def _index(forest: Forest, X, y, flags, files: list[Path], settings: dict) -> dict:
    return {
        "kind": "anatomy",
        "model": {"kind": forest.kind, "n_trees": forest.n_trees,
                  "n_features": forest.n_features, "classes": forest.classes_.tolist(),
                  "source": dict(forest.source)},
        "data": None if X is None else {"n_rows": int(X.shape[0]), "labels": y is not None},
        "flags": dict(flags), "settings": settings,
        "files": [p.name for p in files],
    }
