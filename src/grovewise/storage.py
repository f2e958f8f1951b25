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
from pathlib import Path, PurePath
from typing import Any

import numpy as np

from .errors import GrovewiseError

PACKAGE = "grovewise"


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


def save_arrays(path: Path, arrays: dict[str, np.ndarray]) -> None:
    """Write ``arrays`` as an uncompressed ``.npz`` (no pickled objects)."""
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)


def load_arrays(path: Path) -> dict[str, np.ndarray]:
    """Read a ``.npz`` written by :func:`save_arrays`, refusing pickled objects."""
    try:
        with np.load(path, allow_pickle=False) as data:
            return {k: data[k] for k in data.files}
    except (OSError, ValueError) as exc:
        raise StorageError(f"{path}: the arrays file could not be read ({exc}); it may be "
                           "damaged; run the review again.") from None
