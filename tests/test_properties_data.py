"""Property-based tests of the data reader (``load_data``): any CSV text, any table.

The property: ``load_data`` returns a Dataset, or raises a ``DataError`` whose message names
the file; never another exception, never a hang (each case under a deadline and a hard
limit), and no file is created or changed beside the input or in the working directory.
When it returns, the values are the file's own (checked against the values the test wrote),
with no infinite value, and within float32's range for a model that compares in float32.

References: the values each case writes (its own frame), pandas' writers (``to_csv``,
``to_parquet``) for the files, and numpy's ``finfo(float32).max`` (IEEE 754 binary32's
largest finite number, 3.4028235e38) for the float32 range.
"""

from __future__ import annotations

import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from grovewise.errors import DataError
from grovewise.forest import (COMPARE_LE_FLOAT32, COMPARE_LE_FLOAT64, COMPARE_LT_FLOAT32,
                              LINK_MEAN, Forest, Tree)
from grovewise.loaders.data_files import load_data
from property_cases import cases, corpus_files, no_hang, outcome, untouched

F32_MAX = float(np.finfo(np.float32).max)
FLOAT32_COMPARES = (COMPARE_LE_FLOAT32, COMPARE_LT_FLOAT32)
COMPARES = (COMPARE_LE_FLOAT32, COMPARE_LE_FLOAT64, COMPARE_LT_FLOAT32)


def stump(names: list[str], compare: str, named: bool = True) -> Forest:
    """A one-split model on the first feature: enough to carry names and a comparison rule."""
    n = 3
    tree = Tree(feature=np.array([0, -1, -1]), threshold=np.array([0.5, 0.0, 0.0]),
                left=np.array([1, -1, -1]), right=np.array([2, -1, -1]),
                missing_left=np.zeros(n, dtype=bool),
                value=np.array([[0.5, 0.5], [1.0, 0.0], [0.0, 1.0]]),
                depth=np.array([0, 1, 1]), gain=np.zeros(n), cover=np.ones(n))
    return Forest(trees=[tree], classes_=np.array([0, 1]), feature_names=names,
                  has_feature_names=named, kind="decision_tree", link=LINK_MEAN,
                  compare=compare)


def read(path: Path, **kw):
    """``load_data`` under the property: a Dataset, or a DataError naming the file."""
    with no_hang(), untouched(path.parent), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # matching by position warns, as it should
        try:
            data = load_data(path, **kw)
        except DataError as exc:
            assert str(path) in str(exc), f"the message does not name the file: {exc}"
            outcome("refused")
            return exc
        outcome("read")
        return data


def check_values(data, forest: Forest | None) -> None:
    """What a returned Dataset always holds: float64 values, no infinite value, and within
    float32's range for a model that compares in float32."""
    assert data.X.dtype == np.float64 and data.X.ndim == 2
    assert not np.isinf(data.X).any()
    if forest is not None:
        assert data.X.shape[1] == forest.n_features
        if forest.compare in FLOAT32_COMPARES:
            assert not (np.abs(data.X) > F32_MAX).any()


# ---------------------------------------------------------------------------- any CSV text
TOKENS = ["a", "b", "c", ",", ",", ",", "\n", "\n", "\r\n", '"', " ", "1", "2.5", "-3", "0",
          "1e39", "-1e39", "3.4028235e38", "3.5e38", "1e308", "1e400", "inf", "-inf", "Infinity",
          "nan", "NaN", "NA", "", "true", "False", "x", "é", "名", "\x00", ";", "\t", "#",
          "1_0", "0x10", "١٢"]


NUMBERS = ["1", "2.5", "-3", "0", "-0", "1e39", "-1e39", "3.4028235e38", "3.5e38", "1e308",
           "1e400", "inf", "-inf", "Infinity", "nan", "NaN", "NA", "", "true", "False", " 7 "]
# Free text, and rows of two number-like cells under the header "a,b" (a table to read).
CSV_TEXT = st.one_of(
    st.lists(st.one_of(st.sampled_from(TOKENS), st.text(max_size=3)), max_size=60)
    .map("".join),
    st.lists(st.lists(st.sampled_from(NUMBERS), min_size=2, max_size=2).map(",".join),
             min_size=1, max_size=6).map(lambda rows: "\n".join(["a,b", *rows])))


@cases(250)
@given(text=CSV_TEXT,
       encoding=st.sampled_from(["utf-8", "utf-16", "latin-1"]),
       model=st.sampled_from([None, "named", "unnamed"]),
       compare=st.sampled_from(COMPARES))
def test_any_csv_text_reads_or_names_the_file(text, encoding, model, compare):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "data.csv"
        path.write_bytes(text.encode(encoding, errors="replace"))
        forest = None if model is None else stump(["a", "b"], compare, named=model == "named")
        got = read(path, forest=forest)
        if not isinstance(got, DataError):
            check_values(got, forest)


# ---------------------------------------------------------------------------- any table
SPECIAL = [np.inf, -np.inf, np.nan, 1e39, -1e39, F32_MAX, 3.5e38, 1e308, -0.0, 5e-324,
           1e-45]
FLOATS = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.sampled_from(SPECIAL))
TEXTS = st.one_of(st.sampled_from(["", " ", "inf", "-inf", "1e39", "1e400", "nan", "NA",
                                   "true", "FALSE", " 3 ", "abc", "1,5", "名前"]),
                  st.text(max_size=4))
NAMES = st.one_of(st.sampled_from(["a", "b", "a b", "a_b", "0", "1.5", "", " ", "x0",
                                   "Unnamed: 0", "名", "é"]), st.text(min_size=1, max_size=5))


@st.composite
def tables(draw):
    """A table of 1-4 columns and 0-6 rows; each column all floats, all texts, all bools or
    all whole numbers (so that Parquet can hold it); names may repeat."""
    n_cols = draw(st.integers(1, 4))
    n_rows = draw(st.integers(0, 6))
    names = draw(st.lists(NAMES, min_size=n_cols, max_size=n_cols))
    kinds = draw(st.lists(st.sampled_from(["float", "text", "bool", "int"]), min_size=n_cols,
                          max_size=n_cols))
    cells = {"float": FLOATS, "text": st.one_of(TEXTS, st.none()), "bool": st.booleans(),
             "int": st.integers(-2**63, 2**63 - 1)}
    columns = [draw(st.lists(cells[k], min_size=n_rows, max_size=n_rows)) for k in kinds]
    return names, kinds, columns


def _frame(names, kinds, columns) -> pd.DataFrame:
    dtypes = {"float": "float64", "text": "object", "bool": "bool", "int": "int64"}
    frame = pd.DataFrame({i: pd.Series(col, dtype=dtypes[k])
                          for i, (k, col) in enumerate(zip(kinds, columns))})
    frame.columns = names
    return frame


@cases(250)
@given(table=tables(), fmt=st.sampled_from(["csv", "parquet"]),
       model=st.sampled_from([None, "named", "unnamed"]), compare=st.sampled_from(COMPARES),
       data=st.data())
def test_any_table_reads_or_names_the_file(table, fmt, model, compare, data):
    names, kinds, columns = table
    frame = _frame(names, kinds, columns)
    forest = None
    if model == "named":
        unique = list(dict.fromkeys(n for n in names if n.strip()))
        chosen = data.draw(st.lists(st.sampled_from(unique), unique=True, min_size=1),
                           label="features") if unique else ["a"]
        forest = stump(chosen, compare)
    elif model == "unnamed":
        forest = stump([f"x{j}" for j in range(data.draw(st.integers(1, 4)))], compare,
                       named=False)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / f"data.{fmt}"
        try:
            frame.to_csv(path, index=False) if fmt == "csv" else frame.to_parquet(path)
        except (ValueError, TypeError):
            return  # pyarrow holds no repeated names nor names that are not text: no file
        got = read(path, forest=forest)
    if isinstance(got, DataError):
        return
    check_values(got, forest)
    # Every float column read as a feature holds the values written (NaN where missing).
    for j, name in enumerate(got.feature_names):
        source = name if model != "unnamed" else None
        if source is None or names.count(source) != 1:
            continue
        k = names.index(source)
        if kinds[k] == "float":
            np.testing.assert_allclose(got.X[:, j], np.asarray(columns[k], dtype=float),
                                       rtol=2.3e-16, atol=0)


# ---------------------------------------------------------------------------- one bad cell
@cases(150)
@given(n_rows=st.integers(1, 6), n_cols=st.integers(1, 4), compare=st.sampled_from(COMPARES),
       bad=st.sampled_from([np.inf, -np.inf, 1e39, -1e39, 3.5e38, 1e308, -1.7976931348623157e308,
                            "1e400", "-1e400", "inf", "Infinity"]),
       fmt=st.sampled_from(["csv", "parquet"]), data=st.data())
def test_an_infinite_or_out_of_range_cell_is_named_by_column_and_row(n_rows, n_cols, compare,
                                                                      bad, fmt, data):
    """inf is refused for every model; a finite value beyond float32's range only for a model
    that compares in float32; the message names the file, the column and the data row."""
    names = [f"feature {j}" for j in range(n_cols)]
    values = np.asarray(data.draw(st.lists(
        st.lists(st.floats(-1e6, 1e6), min_size=n_cols, max_size=n_cols),
        min_size=n_rows, max_size=n_rows), label="values"), dtype=float)
    row, col = data.draw(st.integers(0, n_rows - 1)), data.draw(st.integers(0, n_cols - 1))
    frame = pd.DataFrame(values, columns=names).astype(object)
    frame.iat[row, col] = bad
    if fmt == "parquet" and isinstance(bad, str):
        fmt = "csv"  # text in a number column is a CSV matter
    if fmt == "parquet":
        frame = frame.astype(float)
    value = float(bad)
    refused = np.isinf(value) or (compare in FLOAT32_COMPARES and abs(value) > F32_MAX)
    forest = stump(names, compare)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / f"data.{fmt}"
        frame.to_csv(path, index=False) if fmt == "csv" else frame.to_parquet(path)
        got = read(path, forest=forest)
    if not refused:
        assert not isinstance(got, DataError), got
        assert got.X[row, col] == value
        return
    assert isinstance(got, DataError), "an infinite or out-of-range value was read"
    message = str(got)
    assert repr(names[col]) in message and f"data row {row + 1}" in message, message


# ---------------------------------------------------------------------------- the corpus
@pytest.mark.parametrize("path", corpus_files("data"), ids=lambda p: p.name)
def test_corpus_data_files_read_or_name_the_file(path, tmp_path):
    """Every data file that once broke the reader (tests/corpus/data) now reads or is refused
    with a DataError naming it, with and without a model."""
    copy = tmp_path / path.name
    copy.write_bytes(path.read_bytes())
    for forest in (None, stump(["a", "b"], COMPARE_LT_FLOAT32),
                   stump(["x0", "x1"], COMPARE_LE_FLOAT64, named=False)):
        got = read(copy, forest=forest)
        if not isinstance(got, DataError):
            check_values(got, forest)
