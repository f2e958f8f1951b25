"""Where the bundled sample lives: invented patients and the two models trained on them.

The files are package data under ``grovewise/sample/`` (made by ``sample_models/make_sample.py``),
located through :mod:`importlib.resources`, so the demo finds them in an installed package as
well as in a checkout. The scenario and every row are invented (see ``sample_models/README.md``).
"""

from __future__ import annotations

from importlib.resources import files
from pathlib import Path

from .errors import GrovewiseError

SAMPLE_TARGET = "complication"
SAMPLE_ID_COLUMN = "record_id"
SAMPLE_FILES = {
    "forest": "clinic_forest.skops",
    "xgboost": "clinic_xgb.json",
    "data": "clinic_patients.csv",
    "holdout": "clinic_holdout.csv",
    "info": "sample_info.json",
}


def sample_dir() -> Path:
    """The folder that holds the bundled sample files."""
    return Path(str(files(__package__).joinpath("sample")))


def sample_paths() -> dict:
    """Paths of the bundled sample files and the name of its target column.

    Returns
    -------
    dict
        ``"forest"`` (scikit-learn random forest, ``.skops``), ``"xgboost"`` (XGBoost model,
        ``.json``), ``"data"`` (all rows, CSV), ``"holdout"`` (the rows held out of training,
        CSV), ``"info"`` (seed, scores and versions, JSON): each a :class:`pathlib.Path`;
        ``"target"``: the target column's name (``"complication"``); ``"id_column"``: the
        column that identifies a record and is not a feature (``"record_id"``).

    Raises
    ------
    GrovewiseError
        If a sample file is missing from the installation.
    """
    folder = sample_dir()
    paths: dict = {key: folder / name for key, name in SAMPLE_FILES.items()}
    missing = [str(p) for p in paths.values() if not p.is_file()]
    if missing:
        raise GrovewiseError(
            f"the bundled sample is incomplete: {', '.join(missing)} not found; reinstall "
            "Grovewise, or in a checkout run `PYTHONPATH=src python3 sample_models/make_sample.py`")
    paths["target"] = SAMPLE_TARGET
    paths["id_column"] = SAMPLE_ID_COLUMN
    return paths
