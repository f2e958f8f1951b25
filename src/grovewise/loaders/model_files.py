"""Model files -> Forest, refusing files that could run code unless the user trusts them.

- ``.json``: XGBoost's model, LightGBM's ``dump_model()`` or CatBoost's JSON export, told
  apart by their content (read as data; no code runs).
- ``.ubj``: XGBoost's binary JSON; ``.txt``: LightGBM's model text; ``.cbm``: CatBoost's
  model; ``.onnx``: an ONNX model holding a tree ensemble classifier.
- ``.skops``: scikit-learn models saved with skops; only the types a tree ensemble needs are
  accepted unless the file is trusted.
- ``.pkl`` / ``.pickle`` / ``.joblib``: can run code on load; refused unless trusted.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

from ..errors import GrovewiseError, ModelFileError, UnsafeModelError
from ..forest import Forest
from .estimators import from_estimator
from .families import DAMAGE, as_model_error

JSON_SUFFIXES = (".json",)
XGBOOST_SUFFIXES = (".ubj",)
LIGHTGBM_SUFFIXES = (".txt",)
CATBOOST_SUFFIXES = (".cbm",)
ONNX_SUFFIXES = (".onnx",)
SKOPS_SUFFIXES = (".skops",)
PICKLE_SUFFIXES = (".pkl", ".pickle", ".joblib")
# Files whose model is converted by load_native after its library read it (the other readers
# convert the file's content themselves, before the library sees it).
CHECKED_HERE = SKOPS_SUFFIXES + PICKLE_SUFFIXES + ONNX_SUFFIXES
SUFFIXES = (JSON_SUFFIXES + XGBOOST_SUFFIXES + LIGHTGBM_SUFFIXES + CATBOOST_SUFFIXES
            + ONNX_SUFFIXES + SKOPS_SUFFIXES + PICKLE_SUFFIXES)

# Types beyond skops' own defaults that a supported scikit-learn tree model holds.
SKOPS_ALLOWED = frozenset({
    "sklearn.tree._tree.Tree",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
    "sklearn.ensemble._hist_gradient_boosting.binning._BinMapper",
    "sklearn._loss.loss.HalfBinomialLoss",
    "sklearn._loss.loss.HalfMultinomialLoss",
    "sklearn._loss.link.LogitLink",
    "sklearn._loss.link.MultinomialLogit",
    "sklearn._loss.link.Interval",
    "sklearn.dummy.DummyClassifier",
    "sklearn.ensemble._gb.BinomialDeviance",
    "sklearn.ensemble._gb.MultinomialDeviance",
    "numpy.dtype",
    "numpy.random.mtrand.RandomState",
    "builtins.object",
    # histogram boosting with categorical features keeps its fitted encoder's check function
    "functools.partial",
    "sklearn.utils.validation.check_array",
})

EXPECTED = ("an XGBoost model (.json or .ubj), a LightGBM model (its model text .txt, or "
            "dump_model .json), a CatBoost model (.cbm or .json), an ONNX model (.onnx), a "
            "scikit-learn model or pipeline saved with skops (.skops), or, only when you trust "
            "its origin, a pickle/joblib file (.pkl, .pickle, .joblib)")


def load_model(path, *, trusted: bool = False) -> Forest:
    """Read a model file into a :class:`~grovewise.forest.Forest`.

    Parameters
    ----------
    path : str or Path
        The model file; its suffix selects the format (see module docstring).
    trusted : bool
        Say that the file comes from a trusted source: allows pickle/joblib files and skops
        files holding types outside the tree-ensemble allow-list. Loading such a file can
        run code.

    Raises
    ------
    UnsafeModelError
        A pickle/joblib file, or a skops file with unexpected types, without ``trusted``.
    ModelFileError
        Missing, empty, damaged or unknown files, naming the file and what was expected.
    UnsupportedModelError
        A readable model of a kind or variant Grovewise cannot reproduce exactly.
    """
    forest = from_estimator(load_native(path, trusted=trusted))
    forest.source["file"] = str(Path(path))
    return forest


def load_native(path, *, trusted: bool = False):
    """Read a model file into the library's own object (an estimator or an XGBoost Booster).

    The same checks and errors as :func:`load_model`, which converts what this returns. The
    model is converted once here too (XGBoost, LightGBM and CatBoost files by their readers,
    before their library reads them), so that a damaged model is refused with the file's
    name before its library predicts with it: a library that trusts a damaged tree can crash
    the whole process.
    """
    p = Path(path)
    try:
        native = _read_native(p, trusted)
        if p.suffix.lower() in CHECKED_HERE:
            from_estimator(native)
    except (GrovewiseError, *DAMAGE) as exc:  # the library's objects hold what the file held
        raise as_model_error(exc, str(p), "file's") from None
    return native


def _read_native(p: Path, trusted: bool):
    suffix = p.suffix.lower()
    if suffix not in SUFFIXES:
        raise ModelFileError(f"{p}: unknown model file type {p.suffix or '(no suffix)'!r}; "
                             f"expected {EXPECTED}.")
    if not p.is_file():
        raise ModelFileError(f"{p}: no such file; check the path.")
    if p.stat().st_size == 0:
        raise ModelFileError(f"{p}: the file is empty; expected {EXPECTED}.")
    if suffix in PICKLE_SUFFIXES:
        if not trusted:
            raise UnsafeModelError(
                f"{p}: pickle and joblib files can run code when opened, so Grovewise does not "
                "open them by default. Save the model with skops (.skops) or XGBoost's "
                "save_model (.json), or, only if you trust where the file comes from, open it "
                "as trusted (--trust on the command line).")
        return _load_pickle(p)
    if suffix in SKOPS_SUFFIXES:
        return _load_skops(p, trusted)
    if suffix in JSON_SUFFIXES:
        return _load_json(p)
    if suffix in LIGHTGBM_SUFFIXES:
        from .lightgbm_models import read_lightgbm_text

        return read_lightgbm_text(p)
    if suffix in CATBOOST_SUFFIXES:
        from .catboost_models import read_catboost_file

        return read_catboost_file(p)
    if suffix in ONNX_SUFFIXES:
        from .onnx_models import read_onnx_file

        return read_onnx_file(p)
    return _load_xgboost(p)


def _load_json(p: Path):
    """A JSON model file: XGBoost's, LightGBM's dump or CatBoost's, told apart by content."""
    try:
        doc = json.loads(p.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ModelFileError(f"{p}: not valid JSON ({exc}); expected {EXPECTED}.") from None
    except RecursionError:
        raise ModelFileError(f"{p}: JSON nested too deeply to be a model; expected "
                             f"{EXPECTED}.") from None
    if isinstance(doc, dict) and "learner" in doc:
        return _load_xgboost(p, doc)
    if isinstance(doc, dict) and "tree_info" in doc:
        from .lightgbm_models import read_lightgbm_dump

        return read_lightgbm_dump(doc, p)
    if isinstance(doc, dict) and ("oblivious_trees" in doc
                                  or ("trees" in doc and "features_info" in doc)):
        from .catboost_models import read_catboost_json

        return read_catboost_json(doc, p)
    raise ModelFileError(f"{p}: JSON, but not a model Grovewise knows (no 'learner' entry as "
                         "in XGBoost's save_model, no 'tree_info' as in LightGBM's dump_model, "
                         "no 'oblivious_trees' or 'features_info' as in CatBoost's JSON export).")


def _load_xgboost(p: Path, doc: dict | None = None):
    """XGBoost's Booster, once the model (``doc``: the JSON already read; else the UBJSON
    file) converted without a problem: XGBoost's reader can crash the process on a damaged
    model, so it only sees one that Grovewise has read and checked whole."""
    import xgboost

    from .ubjson import read_ubjson
    from .xgboost_models import forest_from_xgboost_json

    if doc is None:
        try:
            doc = read_ubjson(p.read_bytes())
        except ValueError as exc:
            raise ModelFileError(f"{p}: not a readable XGBoost binary model (UBJSON: {exc}); it "
                                 "may be damaged or truncated; save the model again with "
                                 "save_model.") from None
        if not isinstance(doc, dict) or "learner" not in doc:
            raise ModelFileError(f"{p}: UBJSON, but not an XGBoost model (no 'learner' entry); "
                                 "give a file written by XGBoost's save_model.")
    forest_from_xgboost_json(doc, where=str(p))
    booster = xgboost.Booster()
    try:
        booster.load_model(str(p))
    except (xgboost.core.XGBoostError, ValueError, OSError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise ModelFileError(f"{p}: XGBoost could not read this file ({first[:200]}); it may be "
                             "damaged or truncated; save the model again with save_model.") from None
    return booster


def _load_skops(p: Path, trusted: bool):
    import skops.io as sio

    try:
        found = sio.get_untrusted_types(file=str(p))
    except (zipfile.BadZipFile, KeyError, ValueError, OSError, json.JSONDecodeError) as exc:
        raise ModelFileError(f"{p}: not a readable skops file ({type(exc).__name__}: {exc}); "
                             "it may be damaged or truncated; save the model again with "
                             "skops.io.dump.") from None
    unexpected = sorted(set(found) - SKOPS_ALLOWED)
    if unexpected and not trusted:
        raise UnsafeModelError(
            f"{p}: the file holds types outside those a tree ensemble needs "
            f"({', '.join(unexpected[:6])}{', ...' if len(unexpected) > 6 else ''}); Grovewise "
            "does not load them by default. Open it as trusted (--trust) only if you trust "
            "where the file comes from.")
    try:
        return sio.load(str(p), trusted=list(found))
    except Exception as exc:  # skops raises many kinds on damaged content
        raise ModelFileError(f"{p}: skops could not load the model ({type(exc).__name__}: "
                             f"{exc}); save it again with skops.io.dump.") from None


def _load_pickle(p: Path):
    import joblib

    try:
        return joblib.load(p)
    except Exception as exc:  # any unpickling failure
        raise ModelFileError(f"{p}: the pickle/joblib file could not be read ({type(exc).__name__}: "
                             f"{exc}); it may be damaged or written by other library versions.") from None
