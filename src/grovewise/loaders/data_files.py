"""Data files (CSV, Parquet) -> Dataset, with the columns checked against the model.

The file is read once into memory; its sha256 is taken over exactly those bytes and the
table is parsed from them, so the hash in a report always belongs to the data reviewed.
Columns are matched to the model's feature names by name; by position only when the model
has no names, and the Dataset then says so. Every problem raises :class:`DataError` naming
the file and the columns, and saying what to do. Nothing is written.
"""

from __future__ import annotations

import difflib
import hashlib
import io
import math
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from pandas.api import types as ptypes

from ..errors import DataError
from ..forest import FLOAT32_MAX, uncomparable

CSV_SUFFIXES = (".csv",)
PARQUET_SUFFIXES = (".parquet", ".pq")
SUFFIXES = CSV_SUFFIXES + PARQUET_SUFFIXES
MATCH_BY_NAME = "name"
MATCH_BY_POSITION = "position"
_BOOL_WORDS = {"true": 1.0, "false": 0.0}
_LIST_AT_MOST = 8  # names shown in one message before "and N more"


@dataclass(eq=False)
class Dataset:
    """A table ready for a model: feature matrix, optional target, and where it came from.

    Attributes
    ----------
    X : ndarray of float64, shape (n_rows, n_features)
        Feature values in the model's feature order; NaN where a cell is empty.
    y : ndarray or None
        Target labels, in the model's class labels (same dtype as ``forest.classes_``) when a
        model was given; None without a target column.
    feature_names : list of str
        The columns of ``X``: the model's names (matched by name or position), or the file's
        columns without a model.
    source : str
        The file's path as given.
    sha256 : str
        Hex digest of the file's bytes.
    extra_columns : list of str
        Columns of the file that are neither features nor the target (ignored).
    matched_by : str
        ``"name"`` or ``"position"``: how the file's columns were matched to the features.
    target : str or None
        Name of the target column.
    notes : list of str
        Things the reader should know (matching by position, extra columns, no model given).
    group_values : dict of str to ndarray
        The columns asked for as groups (``load_data(groups=...)``), as the file gives them
        (object arrays, None where a cell is empty); they need not be model inputs.
    """

    X: np.ndarray
    y: np.ndarray | None
    feature_names: list[str]
    source: str
    sha256: str
    extra_columns: list[str] = field(default_factory=list)
    matched_by: str = MATCH_BY_NAME
    target: str | None = None
    notes: list[str] = field(default_factory=list)
    group_values: dict = field(default_factory=dict)

    @property
    def n_rows(self) -> int:
        return int(self.X.shape[0])

    @property
    def n_features(self) -> int:
        return int(self.X.shape[1])

    @property
    def warning(self) -> str | None:
        """The note about matching by position, or None when columns were matched by name."""
        if self.matched_by != MATCH_BY_POSITION:
            return None
        return self.notes[0]

    def missing_counts(self) -> dict[str, int]:
        """Empty cells per feature, only for features that have any."""
        counts = np.isnan(self.X).sum(axis=0)
        return {n: int(c) for n, c in zip(self.feature_names, counts) if c}

    def class_counts(self) -> dict[str, int] | None:
        """Rows per target label (labels as text), or None without a target."""
        if self.y is None:
            return None
        labels, counts = np.unique(self.y, return_counts=True)
        return {str(_plain(v)): int(c) for v, c in zip(labels, counts)}

    def to_dict(self) -> dict:
        """A JSON-serialisable summary (no values): file, hash, shape, columns, notes."""
        return {
            "source": self.source,
            "sha256": self.sha256,
            "n_rows": self.n_rows,
            "n_features": self.n_features,
            "feature_names": list(self.feature_names),
            "target": self.target,
            "extra_columns": list(self.extra_columns),
            "matched_by": self.matched_by,
            "missing_values": self.missing_counts(),
            "class_counts": self.class_counts(),
            "notes": list(self.notes),
        }


def load_data(path, forest=None, target: str | None = None, groups=()) -> Dataset:
    """Read a CSV or Parquet file into a :class:`Dataset` checked against ``forest``.

    Parameters
    ----------
    path : str or Path
        A ``.csv`` file (UTF-8, header line, comma-separated) or a ``.parquet`` / ``.pq`` file.
    forest : Forest, optional
        The model the data is for. Its ``feature_names`` select and order the columns (by
        name when ``forest.has_feature_names``, otherwise by position) and its ``classes_``
        are the labels the target may hold. Without it, every column except the target is a
        feature.
    target : str, optional
        Name of the column holding the true labels.
    groups : list of str, optional
        Columns kept as they are (``Dataset.group_values``), to measure faithfulness per group;
        any column of the file, a model input or not.

    Returns
    -------
    Dataset

    Raises
    ------
    DataError
        When the file is missing, of an unknown type, empty or unreadable; when feature
        columns are missing, hold non-numeric values or no values at all; when the target
        column is absent, has empty cells or labels the model does not know.
    """
    p = Path(path)
    raw = _read_bytes(p)
    table = _parse(raw, p)
    columns = [str(c) for c in table.columns]
    table.columns = columns
    _check_header(table, columns, p, csv=p.suffix.lower() in CSV_SUFFIXES)
    if target is not None and target not in columns:
        raise DataError(f"{p}: the target column {target!r} is not in the file"
                        f"{_close_hint([target], columns)}; the file's columns are "
                        f"{_names(columns)}. Give the name of the column with the true labels.")
    candidates = [c for c in columns if c != target]
    if forest is None:
        features, names, matched_by = candidates, candidates, MATCH_BY_NAME
        notes = ["no model given: every column except the target is taken as a feature"]
    elif forest.has_feature_names:
        features, names, matched_by = _match_by_name(forest, candidates, target, p), \
            list(forest.feature_names), MATCH_BY_NAME
        renamed = [f"{c!r} as {n!r}" for c, n in zip(features, names) if c != n]
        notes = [f"matched {len(renamed)} column(s) to the model's names with spaces read as "
                 f"underscores, as LightGBM stores names: {_names(renamed, quote=False)}"
                 ] if renamed else []
    else:
        features, names, matched_by = _match_by_position(forest, candidates, p), \
            list(forest.feature_names), MATCH_BY_POSITION
        notes = [f"{p}: the model has no feature names, so the file's columns were matched "
                 f"to its {forest.n_features} features by position (file column 1 is feature "
                 f"{names[0]}, and so on); check that the order is the one the model was "
                 "trained on"]
        warnings.warn(notes[0], UserWarning, stacklevel=2)
    extras = [c for c in candidates if c not in set(features)]
    if extras:
        notes.append(f"ignored {len(extras)} column(s) that are not features: {_names(extras)}")
    X = _feature_matrix(table, features, p, no_model=forest is None, forest=forest)
    _check_comparable(X, features, forest, p)
    y = None if target is None else _target_values(table[target], forest, target, p)
    missing = [g for g in groups if g not in columns]
    if missing:
        raise DataError(f"{p}: the group column(s) {_names(missing)} are not in the file"
                        f"{_close_hint(missing, columns)}; the file's columns are "
                        f"{_names(columns)}. Name a column of the data file.")
    group_values = {g: np.array([None if pd.isna(v) else v for v in table[g].tolist()],
                                dtype=object) for g in groups}
    return Dataset(X=X, y=y, feature_names=names, source=str(path),
                   sha256=hashlib.sha256(raw).hexdigest(), extra_columns=extras,
                   matched_by=matched_by, target=target, notes=notes,
                   group_values=group_values)


# ---------------------------------------------------------------------- reading
def _read_bytes(p: Path) -> bytes:
    if not p.exists():
        raise DataError(f"{p}: data file not found; check the path.")
    if not p.is_file():
        raise DataError(f"{p}: is not a file (a folder?); give a .csv or .parquet file.")
    if p.suffix.lower() not in SUFFIXES:
        raise DataError(f"{p}: unknown data file type {p.suffix or '(no extension)'!r}; "
                        "give a CSV file (.csv) or a Parquet file (.parquet, .pq).")
    return p.read_bytes()


def _parse(raw: bytes, p: Path) -> pd.DataFrame:
    if p.suffix.lower() in CSV_SUFFIXES:
        return _parse_csv(raw, p)
    return _parse_parquet(raw, p)


def _parse_csv(raw: bytes, p: Path) -> pd.DataFrame:
    if not raw.strip():
        raise DataError(f"{p}: the file is empty (no header line, no rows); "
                        "give a CSV file with a header line and one row per record.")
    try:
        table = pd.read_csv(io.BytesIO(raw), encoding="utf-8", low_memory=False)
        header = pd.read_csv(io.BytesIO(raw), encoding="utf-8", header=None, nrows=1,
                             dtype=str, keep_default_na=False).iloc[0].tolist()
    except UnicodeDecodeError:
        raise DataError(f"{p}: the file is not UTF-8 text; save it as UTF-8 CSV.") from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{p}: the file is empty (no header line, no rows); "
                        "give a CSV file with a header line and one row per record.") from None
    except (pd.errors.ParserError, ValueError) as exc:
        raise DataError(f"{p}: could not be read as CSV ({_first_line(exc)}); check that every "
                        "row has as many comma-separated fields as the header.") from None
    _check_duplicates([str(h) for h in header], p)
    return table


def _parse_parquet(raw: bytes, p: Path) -> pd.DataFrame:
    if not raw:
        raise DataError(f"{p}: the file is empty (0 bytes); give a Parquet file with rows.")
    try:
        return pd.read_parquet(io.BytesIO(raw), engine="pyarrow")
    except Exception as exc:  # pyarrow raises several unrelated types for damaged files
        raise DataError(f"{p}: could not be read as Parquet ({_first_line(exc)}); "
                        "check that the file is a complete Parquet file.") from None


def _check_duplicates(header: list[str], p: Path) -> None:
    seen, dupes = set(), []
    for name in header:
        if name in seen and name not in dupes:
            dupes.append(name)
        seen.add(name)
    if dupes:
        raise DataError(f"{p}: the header names these columns more than once: {_names(dupes)}; "
                        "give each column a distinct name.")


def _check_header(table: pd.DataFrame, columns: list[str], p: Path, csv: bool) -> None:
    if len(set(columns)) != len(columns):
        _check_duplicates(columns, p)
    # A CSV whose first line is data has numbers for names; 0, 1, 2, ... is pandas' own header.
    if (csv and columns and all(_is_number_text(c) for c in columns)
            and columns != [str(i) for i in range(len(columns))]):
        raise DataError(f"{p}: the first line holds numbers ({_names(columns[:3])}), not column "
                        "names; add a header line with the column names.")
    if table.shape[0] == 0:
        raise DataError(f"{p}: the file has a header ({_names(columns)}) but no rows; "
                        "give a file with at least one record.")


# ---------------------------------------------------------------------- matching
def _match_by_name(forest, candidates: list[str], target: str | None, p: Path) -> list[str]:
    if target is not None and target in forest.feature_names:
        raise DataError(f"{p}: the target column {target!r} is also one of the model's "
                        "features; give the column that holds the true labels instead.")
    present = set(candidates)
    missing = [f for f in forest.feature_names if f not in present]
    if missing:
        renamed = _underscored(candidates)
        if all(renamed.get(f) for f in missing):
            # LightGBM stores a name's spaces as underscores: the file keeps the user's own
            return [f if f in present else renamed[f] for f in forest.feature_names]
        raise DataError(f"{p}: {len(missing)} of the model's {forest.n_features} feature "
                        f"column(s) are missing: {_names(missing)}"
                        f"{_close_hint(missing, candidates)}{_separator_hint(candidates)}. "
                        "Give a file with a column for each feature, named as in the model.")
    return list(forest.feature_names)


def _underscored(columns: list[str]) -> dict[str, str]:
    """The file's columns by their names with every run of white space written as one
    underscore each (as LightGBM stores feature names), where that name is unique."""
    out: dict[str, str | None] = {}
    for c in columns:
        key = re.sub(r"\s", "_", c)
        out[key] = None if key in out else c
    return {k: v for k, v in out.items() if v is not None}


def _match_by_position(forest, candidates: list[str], p: Path) -> list[str]:
    if len(candidates) != forest.n_features:
        raise DataError(f"{p}: the model has no feature names and expects {forest.n_features} "
                        f"feature columns in its training order, but the file has "
                        f"{len(candidates)} besides the target ({_names(candidates)})"
                        f"{_separator_hint(candidates)}; give exactly the model's features, "
                        "in order, and remove any other column (identifiers, notes), or name "
                        "the target column if one of them holds the labels.")
    return list(candidates)


# ---------------------------------------------------------------------- values
def _feature_matrix(table: pd.DataFrame, features: list[str], p: Path,
                    no_model: bool = False, forest=None) -> np.ndarray:
    X = np.empty((table.shape[0], len(features)), dtype=np.float64)
    bad = []
    for j, name in enumerate(features):
        if forest is not None and forest.is_categorical(j):
            X[:, j] = _column_as_codes(table[name], forest.categories[j], name, p)
            continue
        col, problem = _column_as_float(table[name])
        if problem is not None:
            bad.append(f"{name!r} (first bad value {problem[1]!r} in data row {problem[0] + 1})")
        else:
            X[:, j] = col
    if bad:
        raise DataError(f"{p}: non-numeric values in feature column(s) {_names(bad, quote=False)}"
                        ", data rows counted from 1 after the header. Features must be numbers "
                        "(true/false read as 1/0, empty cells as missing); fix or empty those "
                        "cells" + ("; without a model every column except the target is a "
                                   "feature, so give the model to read only its features, or "
                                   "remove columns such as identifiers." if no_model else "."))
    empty = [n for j, n in enumerate(features) if np.isnan(X[:, j]).all()]
    if empty:
        raise DataError(f"{p}: feature column(s) {_names(empty)} have no values at all; "
                        "fill them, or check that the file is the one the model was meant for.")
    return X


def _check_comparable(X: np.ndarray, features: list[str], forest, p: Path) -> None:
    """Refuse the values the model cannot compare, naming each column and its first row:
    an infinite value for every model (and without one), and a number beyond float32's range
    for a model that compares in float32 (its library would refuse it, or read infinity)."""
    compare = None if forest is None else forest.compare
    bad = uncomparable(X, compare)
    if not bad.any():
        return
    shown = []
    for j in np.flatnonzero(bad.any(axis=0)):
        i = int(np.argmax(bad[:, j]))
        shown.append(f"{features[j]!r} (data row {i + 1}: {X[i, j]:g}, "
                     f"{int(bad[:, j].sum())} cell(s) in all)")
    finite = bool(np.isfinite(X[bad]).any())
    why = ("infinite values (inf, or a number beyond about 1.8e308), which no model can "
           "compare" if not finite else
           f"numbers beyond ±{FLOAT32_MAX:.7g} (or infinite values), outside the float32 "
           f"range this model ({forest.kind}) compares in")
    raise DataError(f"{p}: feature column(s) {_names(shown, quote=False)} hold {why}; data "
                    "rows counted from 1 after the header. Correct those cells (an entry or "
                    "unit mistake?), or empty them so that they are read as missing values.")


def _column_as_float(col: pd.Series) -> tuple[np.ndarray | None, tuple[int, object] | None]:
    """The column as float64 (NaN for empty), or (None, (row, value)) of its first bad cell."""
    if ptypes.is_bool_dtype(col.dtype) or (ptypes.is_numeric_dtype(col.dtype)
                                           and not ptypes.is_complex_dtype(col.dtype)):
        return col.to_numpy(dtype=np.float64, na_value=np.nan), None
    out = np.empty(col.shape[0], dtype=np.float64)
    for i, v in enumerate(col.astype(object).to_numpy()):
        x = _cell_as_float(v)
        if x is None:
            return None, (i, _plain(v))
        out[i] = x
    return out, None


def _category_key(v) -> str | None:
    """A cell as the text of a category name ("2" for 2 and 2.0), None when empty."""
    if v is None or v is pd.NA or v is pd.NaT or (isinstance(v, float) and math.isnan(v)):
        return None
    if isinstance(v, (bool, np.bool_)):
        return str(bool(v))
    if isinstance(v, (int, float, np.integer, np.floating)):
        f = float(v)
        return str(int(f)) if f.is_integer() else repr(f)
    text = str(v).strip()
    return text or None


def _column_as_codes(col: pd.Series, names: list[str], column: str, p: Path) -> np.ndarray:
    """A categorical feature's cells as the model's category codes (NaN when empty).

    Cells are matched to the category names as text (2, 2.0 and "2" are one name). When the
    model knows its categories only as codes (names "0", "1", ...), a whole number >= 0 beyond
    them is kept as a code, which the model sends its "other" way as its library does.
    """
    codes, uniques = pd.factorize(col.astype(object), sort=False, use_na_sentinel=True)
    index = {n: c for c, n in enumerate(names)}
    plain_codes = names == [str(c) for c in range(len(names))]
    mapped, unknown = np.empty(len(uniques)), []
    for u, value in enumerate(uniques):
        key = _category_key(value)
        if key is None:
            mapped[u] = np.nan
        elif key in index:
            mapped[u] = index[key]
        elif plain_codes and key.isdigit():
            mapped[u] = float(key)
        else:
            mapped[u] = np.nan
            unknown.append((u, _plain(value)))
    if unknown:
        rows = [int(np.flatnonzero(codes == u)[0]) + 1 for u, _ in unknown[:3]]
        shown = ", ".join(f"{v!r} (data row {r})" for (_, v), r in zip(unknown, rows))
        more = f" and {len(unknown) - 3} more" if len(unknown) > 3 else ""
        raise DataError(f"{p}: the categorical column {column!r} holds value(s) the model does "
                        f"not know: {shown}{more}; it knows {_names(names)}. Fix those cells, "
                        "empty them (a missing value), or check that the file is the one the "
                        "model was meant for.")
    out = np.full(col.shape[0], np.nan)
    seen = codes >= 0
    out[seen] = mapped[codes[seen]]
    return out


def _cell_as_float(v) -> float | None:
    """A cell as a float (NaN when empty), or None when it is not a number."""
    if v is None or v is pd.NA or v is pd.NaT:
        return math.nan
    if isinstance(v, (bool, np.bool_)):
        return float(v)
    if isinstance(v, (int, float, np.integer, np.floating)):
        return float(v)
    if isinstance(v, str):
        s = v.strip()
        if not s:
            return math.nan
        if s.lower() in _BOOL_WORDS:
            return _BOOL_WORDS[s.lower()]
        try:
            return float(s)
        except ValueError:
            return None
    return None


def _target_values(col: pd.Series, forest, target: str, p: Path) -> np.ndarray:
    empty = np.flatnonzero(col.isna().to_numpy())
    if empty.size:
        raise DataError(f"{p}: the target column {target!r} has {empty.size} empty cell(s) "
                        f"(first in row {empty[0] + 1}); fill them or drop those rows.")
    if forest is None:
        return col.to_numpy()
    classes = np.asarray(forest.classes_)
    index = _class_index(classes)
    codes, uniques = pd.factorize(col.astype(object), sort=False)
    found = [index.get(_label_key(u)) for u in uniques]
    unknown = [_plain(u) for u, k in zip(uniques, found) if k is None]
    if unknown:
        shown = ", ".join(repr(u) for u in unknown[:_LIST_AT_MOST])
        more = f" and {len(unknown) - _LIST_AT_MOST} more" if len(unknown) > _LIST_AT_MOST else ""
        raise DataError(f"{p}: the target column {target!r} holds label(s) the model does not "
                        f"know: {shown}{more}; the model's classes are "
                        f"{', '.join(repr(_plain(c)) for c in classes)}. Check the column, or "
                        "that the model is the one trained for this target.")
    return classes[np.asarray(found, dtype=np.int64)[codes]]


def _label_key(v) -> tuple:
    """A comparison key under which 1, 1.0, '1', True and 'true' are one label."""
    if isinstance(v, (bool, np.bool_, int, float, np.integer, np.floating)):
        return ("number", float(v))
    s = str(v).strip()
    if s.lower() in _BOOL_WORDS:
        return ("number", _BOOL_WORDS[s.lower()])
    try:
        return ("number", float(s))
    except ValueError:
        return ("text", s)


def _class_index(classes: np.ndarray) -> dict[tuple, int]:
    index: dict[tuple, int] = {}
    for i, c in enumerate(classes):
        index.setdefault(_label_key(c), i)
    return index


# ---------------------------------------------------------------------- messages
def _plain(v):
    """A numpy scalar as the Python value it holds (for messages and JSON)."""
    return v.item() if isinstance(v, np.generic) else v


def _names(names: list[str], quote: bool = True) -> str:
    shown = [repr(n) if quote else str(n) for n in names[:_LIST_AT_MOST]]
    more = f" and {len(names) - _LIST_AT_MOST} more" if len(names) > _LIST_AT_MOST else ""
    return ", ".join(shown) + more


def _close_hint(wanted: list[str], have: list[str]) -> str:
    pairs = []
    lowered = {h.strip().lower(): h for h in have}
    for w in wanted[:_LIST_AT_MOST]:
        near = lowered.get(w.strip().lower()) or next(
            iter(difflib.get_close_matches(w, have, n=1, cutoff=0.8)), None)
        if near is not None and near != w:
            pairs.append(f"{w!r} (the file has {near!r})")
    return f"; near misses: {', '.join(pairs)}" if pairs else ""


def _separator_hint(columns: list[str]) -> str:
    if len(columns) == 1 and any(s in columns[0] for s in (";", "\t", "|")):
        return "; the file seems to use another separator than the comma: save it comma-separated"
    return ""


def _is_number_text(s: str) -> bool:
    try:
        float(s)
    except ValueError:
        return False
    return True


def _first_line(exc: Exception) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__
