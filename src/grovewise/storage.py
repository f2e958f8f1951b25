"""Results to JSON plus arrays and back, without pickle.

A review's results are Grovewise's own dataclasses (and a few of its own objects, such as the
fitted surrogate) holding numbers, strings and numpy arrays, and now and then a fitted
scikit-learn estimator (the greedy baseline tree), which is stored through skops and
reloaded only if it holds nothing beyond the tree-model allow-list. :func:`encode` turns such a value
into a JSON-ready tree and a dict of arrays (saved as ``.npz`` with ``allow_pickle=False``);
:func:`decode` rebuilds the same objects. Only classes defined inside the ``grovewise``
package are rebuilt, so a hostile results file cannot make Grovewise import or run anything
else.
"""

from __future__ import annotations

import dataclasses
import importlib
import json
import math
import zipfile
from pathlib import Path, PurePath
from typing import Any

import numpy as np

from .errors import GrovewiseError

PACKAGE = "grovewise"
ZIP_DATE = (1980, 1, 1, 0, 0, 0)  # the earliest date a zip entry can hold


class StorageError(GrovewiseError):
    """A saved results file is damaged or names something Grovewise does not rebuild."""


def _type_name(cls: type) -> str:
    return f"{cls.__module__}:{cls.__qualname__}"


def _resolve(name: str) -> type:
    module, _, qualname = name.partition(":")
    if not (module == PACKAGE or module.startswith(PACKAGE + ".")):
        raise StorageError(f"saved results name the type {name!r}, which is not one of "
                           "Grovewise's own; the file was not written by Grovewise.")
    try:
        obj: Any = importlib.import_module(module)
        for part in qualname.split("."):
            obj = getattr(obj, part)
    except (ImportError, AttributeError):
        raise StorageError(f"saved results name the type {name!r}, which this version of "
                           "Grovewise does not have; open them with the version that saved "
                           "them, or run the review again.") from None
    if not isinstance(obj, type):
        raise StorageError(f"saved results name {name!r}, which is not a type.")
    return obj


class _Encoder:
    def __init__(self, stable: bool = False) -> None:
        self.arrays: dict[str, np.ndarray] = {}
        self.stable = stable

    def array(self, a: np.ndarray) -> dict:
        if a.dtype == object:
            try:
                a = a.astype(str) if all(isinstance(v, str) for v in a.ravel()) else a.astype(float)
            except (TypeError, ValueError):
                raise StorageError("an array of mixed objects cannot be saved") from None
        key = f"a{len(self.arrays)}"
        self.arrays[key] = a
        return {"__array__": key}

    def __call__(self, obj: Any) -> Any:
        if obj is None or isinstance(obj, (bool, str, int)) and not isinstance(obj, np.generic):
            return obj
        if isinstance(obj, float):
            return obj if math.isfinite(obj) else {"__float__": repr(obj)}
        if isinstance(obj, np.generic):
            return self(obj.item())
        if isinstance(obj, np.ndarray):
            return self.array(obj)
        if isinstance(obj, PurePath):
            return {"__path__": str(obj)}
        if isinstance(obj, tuple):
            return {"__tuple__": [self(v) for v in obj]}
        if isinstance(obj, list):
            return [self(v) for v in obj]
        if isinstance(obj, dict):
            if all(isinstance(k, str) for k in obj):
                return {"__map__": {k: self(v) for k, v in obj.items()}}
            return {"__pairs__": [[self(k), self(v)] for k, v in obj.items()]}
        cls = type(obj)
        if cls.__module__.startswith("sklearn."):
            if self.stable:  # skops bytes vary run to run; the fitted state does not
                return {"__sklearn__": _type_name(cls), "state": self(_sklearn_state(obj))}
            return {"__skops__": self.array(np.frombuffer(_skops_bytes(obj), dtype=np.uint8))}
        if not cls.__module__.startswith(PACKAGE):
            raise StorageError(f"{_type_name(cls)} is not one of Grovewise's own types and "
                               "cannot be saved with the results.")
        if dataclasses.is_dataclass(obj):
            state = {f.name: getattr(obj, f.name) for f in dataclasses.fields(obj)}
        else:
            state = {k: v for k, v in vars(obj).items() if not k.startswith("__")}
        return {"__type__": _type_name(cls), "state": {k: self(v) for k, v in state.items()}}


def encode(obj: Any, stable: bool = False) -> tuple[Any, dict[str, np.ndarray]]:
    """``obj`` as (a JSON-ready tree, the arrays it refers to by key).

    ``stable=True`` gives a form for digests only (not for :func:`decode`): the same
    content always encodes the same way, scikit-learn estimators included.
    """
    enc = _Encoder(stable)
    tree = enc(obj)
    return tree, enc.arrays


def decode(tree: Any, arrays: dict[str, np.ndarray]) -> Any:
    """Rebuild what :func:`encode` produced."""
    if isinstance(tree, list):
        return [decode(v, arrays) for v in tree]
    if not isinstance(tree, dict):
        return tree
    if "__array__" in tree:
        try:
            return np.asarray(arrays[tree["__array__"]])
        except KeyError:
            raise StorageError(f"saved results refer to array {tree['__array__']!r}, which is "
                               "missing from the arrays file.") from None
    if "__float__" in tree:
        return float(tree["__float__"])
    if "__path__" in tree:
        return Path(tree["__path__"])
    if "__tuple__" in tree:
        return tuple(decode(v, arrays) for v in tree["__tuple__"])
    if "__map__" in tree:
        return {k: decode(v, arrays) for k, v in tree["__map__"].items()}
    if "__pairs__" in tree:
        return {_hashable(decode(k, arrays)): decode(v, arrays) for k, v in tree["__pairs__"]}
    if "__skops__" in tree:
        return _skops_object(decode(tree["__skops__"], arrays).tobytes())
    if "__type__" in tree:
        cls = _resolve(tree["__type__"])
        obj = cls.__new__(cls)
        obj.__dict__.update({k: decode(v, arrays) for k, v in tree["state"].items()})
        return obj
    raise StorageError("saved results hold an entry Grovewise does not recognise; the file "
                       "may be damaged.")


def _sklearn_state(obj: Any) -> dict:
    """A scikit-learn estimator's fitted state as plain values (its compiled tree as arrays)."""
    state = {}
    for key, value in vars(obj).items():
        if type(value).__module__.startswith("sklearn.tree._tree"):
            tree_state = value.__getstate__()
            value = {"nodes": tree_state["nodes"], "values": tree_state["values"]}
        state[key] = value
    return state


def _skops_bytes(obj: Any) -> bytes:
    import skops.io as sio

    return sio.dumps(obj)


def _skops_object(data: bytes) -> Any:
    import skops.io as sio

    from .loaders.model_files import SKOPS_ALLOWED

    found = sio.get_untrusted_types(data=data)
    unexpected = sorted(set(found) - SKOPS_ALLOWED)
    if unexpected:
        raise StorageError(f"saved results hold an estimator with unexpected types "
                           f"({', '.join(unexpected[:5])}); Grovewise does not load it.")
    return sio.loads(data, trusted=list(found))


def _hashable(v: Any) -> Any:
    return tuple(v) if isinstance(v, list) else v


def read_document(path: Path, fmt: str, what: str, missing_hint: str) -> dict:
    """A JSON document of Grovewise's format ``fmt`` (a saved review, a manifest), or a
    StorageError naming the file and what is wrong with it."""
    try:
        doc = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise StorageError(f"{path}: no {what} here; {missing_hint}") from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise StorageError(f"{path}: not a readable {what} ({exc}).") from None
    if not isinstance(doc, dict) or doc.get("format") != fmt:
        found = doc.get("format") if isinstance(doc, dict) else None
        raise StorageError(f"{path}: not a Grovewise {what} (format {found!r}, expected {fmt}).")
    return doc


# ---------------------------------------------------------------------- a saved folder
# A saved review's folder holds its document (JSON, written last: the commit point) and one
# arrays file named after its own sha256, so a save never overwrites the arrays the previous
# document names: killed at any point, the folder opens as the old review or the new one.
ARRAYS_GLOB = "arrays-*.npz"


def write_arrays_file(folder: Path, arrays: dict[str, np.ndarray]) -> tuple[str, str]:
    """Write ``arrays`` into ``folder`` as ``arrays-<sha256 prefix>.npz``, atomically.

    Returns
    -------
    (str, str)
        The file's name and its full sha256.
    """
    from .hashing import sha256_of
    from .report.atomic import atomic_named

    digest: list[str] = []

    def name_for(temp: Path) -> str:
        digest.append(sha256_of(temp))
        return f"arrays-{digest[0][:16]}.npz"

    with atomic_named(folder, name_for, prefix=".arrays.") as temp:
        save_arrays(temp, arrays)
    return f"arrays-{digest[0][:16]}.npz", digest[0]


def tidy_saved_folder(folder: Path, doc_name: str, arrays_name: str) -> None:
    """Remove what earlier or killed saves left in ``folder``: arrays files other than
    ``arrays_name`` and this module's hidden temporary files (never anything else)."""
    from .report.atomic import TEMP_SUFFIX

    left = [p for p in folder.glob(ARRAYS_GLOB) if p.name != arrays_name]
    for pattern in (f".arrays.*{TEMP_SUFFIX}", f".{doc_name}.*{TEMP_SUFFIX}",
                    ".arrays-*.npz.tmp", f".{doc_name}-*.tmp"):  # the last two: older versions
        left += folder.glob(pattern)
    for p in left:
        p.unlink(missing_ok=True)


def open_saved(path, fmt: str, doc_name: str, what: str = "saved review"
               ) -> tuple[Path, dict, dict[str, np.ndarray]]:
    """The saved document at ``path`` (its folder or the file) and its arrays, both whole.

    A folder whose write was killed between its last two renames is put right first
    (:func:`grovewise.report.atomic.restore_folder`). A folder holding only part of a save
    raises a StorageError that says it is half-written.

    Returns
    -------
    (Path, dict, dict)
        The document's path, the document and its arrays.
    """
    from .hashing import sha256_of
    from .report.atomic import TEMP_SUFFIX, restore_folder

    given = Path(path)
    missing = [given] + [p for p in given.parents[:2]]
    for p in reversed(missing):
        if not p.exists():
            restore_folder(p)
    doc_path = given / doc_name if given.is_dir() else given
    folder = doc_path.parent
    if not doc_path.exists() and folder.is_dir():
        parts = sorted(p.name for p in folder.iterdir()
                       if p.match(ARRAYS_GLOB) or p.name.endswith((TEMP_SUFFIX, ".tmp")))
        if parts:
            raise StorageError(f"{folder}: the {what} is half-written: it holds "
                               f"{', '.join(parts[:3])} but no {doc_name}, which a save writes "
                               f"last, so the save was interrupted before it finished. Save "
                               "the review again (or run it again).")
    doc = read_document(doc_path, fmt, what, "choose the folder a review was saved to.")
    arrays_path = folder / str(doc.get("arrays"))
    if not arrays_path.is_file():
        raise StorageError(f"{folder}: the {what} is half-written: {doc_name} names the arrays "
                           f"file {doc.get('arrays')}, which is not there (a save or a copy "
                           "stopped before it finished, or the file was removed). Save the "
                           "review again (or run it again).")
    if sha256_of(arrays_path) != doc.get("arrays_sha256"):
        raise StorageError(f"{arrays_path}: the arrays file does not match {doc_path.name} "
                           "(its sha256 differs): it was changed, or only partly copied. Copy "
                           "the saved review again, or run the review again.")
    return doc_path, doc, load_arrays(arrays_path)


def save_arrays(path: Path, arrays: dict[str, np.ndarray]) -> None:
    """Write ``arrays`` as an uncompressed ``.npz`` (no pickled objects), the same bytes for
    the same arrays: the zip entries carry a fixed date, not the clock's (``np.savez`` stamps
    each with the time of writing), so a saved review's files keep their sha256."""
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        for key, value in arrays.items():
            entry = zipfile.ZipInfo(f"{key}.npy", date_time=ZIP_DATE)
            with zf.open(entry, "w", force_zip64=True) as handle:
                np.lib.format.write_array(handle, np.asanyarray(value), allow_pickle=False)


def load_arrays(path: Path) -> dict[str, np.ndarray]:
    """Read a ``.npz`` written by :func:`save_arrays`, refusing pickled objects."""
    try:
        with np.load(path, allow_pickle=False) as data:
            return {k: data[k] for k in data.files}
    except (OSError, ValueError) as exc:
        raise StorageError(f"{path}: the arrays file could not be read ({exc}); it may be "
                           "damaged; run the review again.") from None
