"""Data intake: CSV/Parquet -> Dataset, column matching, and every DataError case.

Outside references: scikit-learn's bundled breast cancer data (``load_breast_cancer``, the
Wisconsin diagnostic breast cancer set) as the table, scikit-learn's own ``predict_proba`` on
the same frame as the check that columns reach the model in the right order, Python's
``hashlib`` (FIPS 180-4 SHA-256) for the file hash, and pandas' own reading of the file.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.ensemble import RandomForestClassifier
from sklearn.metrics import roc_auc_score

import grovewise as gw
from grovewise.errors import DataError
from grovewise.loaders.data_files import load_data
from grovewise.loaders.estimators import from_estimator
from grovewise.sample_data import sample_paths

TARGET = "target"


@pytest.fixture(scope="module")
def cancer():
    """scikit-learn's bundled breast cancer data as a DataFrame, with an identifier column."""
    bunch = load_breast_cancer(as_frame=True)
    frame = bunch.frame.copy()
    frame.insert(0, "record_id", [f"BC-{i:04d}" for i in range(len(frame))])
    return frame, list(bunch.feature_names)


@pytest.fixture(scope="module")
def named_model(cancer):
    """A small random forest fit on a DataFrame, so it knows its feature names."""
    frame, features = cancer
    est = RandomForestClassifier(n_estimators=8, max_depth=4, random_state=0)
    est.fit(frame[features], frame[TARGET])
    return est, from_estimator(est)


@pytest.fixture(scope="module")
def unnamed_model(cancer):
    """The same kind of forest fit on a bare array: no feature names."""
    frame, features = cancer
    est = RandomForestClassifier(n_estimators=8, max_depth=4, random_state=0)
    est.fit(frame[features].to_numpy(), frame[TARGET].to_numpy())
    return est, from_estimator(est)


def write_csv(tmp_path, frame, name="data.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


def raises_data_error(*needles, **kwargs):
    """Call load_data and return the DataError message after checking it names every needle."""
    with pytest.raises(DataError) as info:
        load_data(**kwargs)
    message = str(info.value)
    for needle in needles:
        assert needle in message, f"{needle!r} not in {message!r}"
    return message


# ---------------------------------------------------------------------- matching by name
def test_csv_by_name_matches_sklearn(tmp_path, cancer, named_model):
    frame, features = cancer
    est, forest = named_model
    path = write_csv(tmp_path, frame)
    data = load_data(path, forest=forest, target=TARGET)
    assert data.matched_by == "name"
    assert data.feature_names == features
    assert data.extra_columns == ["record_id"]
    assert data.n_rows == 569  # load_breast_cancer: 569 samples, 30 features (its DESCR)
    assert data.X.shape == (569, 30) and data.X.dtype == np.float64
    # Reference: the bundled frame itself and scikit-learn's predict_proba on it.
    np.testing.assert_array_equal(data.X, frame[features].to_numpy(dtype=float))
    np.testing.assert_array_equal(data.y, frame[TARGET].to_numpy())
    np.testing.assert_allclose(forest.predict_proba(data.X), est.predict_proba(frame[features]),
                               rtol=0, atol=1e-12)
    # Reference: Python's hashlib over the same file's bytes.
    assert data.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert data.source == str(path)


def test_columns_in_another_order_are_put_in_model_order(tmp_path, cancer, named_model):
    frame, features = cancer
    est, forest = named_model
    shuffled = frame[[TARGET, *features[::-1], "record_id"]]
    data = load_data(write_csv(tmp_path, shuffled), forest=forest, target=TARGET)
    # Reference: scikit-learn's predict_proba on the frame in training order.
    np.testing.assert_allclose(forest.predict_proba(data.X), est.predict_proba(frame[features]),
                               rtol=0, atol=1e-12)
    assert data.feature_names == features


def test_parquet_by_name(tmp_path, cancer, named_model):
    frame, features = cancer
    est, forest = named_model
    path = tmp_path / "data.parquet"
    frame.to_parquet(path, index=False)
    data = load_data(path, forest=forest, target=TARGET)
    np.testing.assert_array_equal(data.X, frame[features].to_numpy(dtype=float))
    np.testing.assert_array_equal(data.y, frame[TARGET].to_numpy())
    assert data.extra_columns == ["record_id"]
    assert data.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()  # reference: hashlib


def test_missing_values_stay_nan_and_predict_like_sklearn(tmp_path, cancer):
    frame, features = cancer
    holed = frame.copy()
    rng = np.random.default_rng(3)
    mask = rng.random((len(holed), 3)) < 0.1
    for j, col in enumerate(features[:3]):
        holed.loc[mask[:, j], col] = np.nan
    # scikit-learn random forests accept NaN (since 1.4): its own predict_proba is the reference.
    est = RandomForestClassifier(n_estimators=8, max_depth=4, random_state=1)
    est.fit(holed[features], holed[TARGET])
    forest = from_estimator(est)
    data = load_data(write_csv(tmp_path, holed), forest=forest, target=TARGET)
    np.testing.assert_array_equal(np.isnan(data.X[:, :3]), mask)
    np.testing.assert_allclose(forest.predict_proba(data.X), est.predict_proba(holed[features]),
                               rtol=0, atol=1e-12)
    assert data.to_dict()["missing_values"] == {c: int(mask[:, j].sum())
                                                for j, c in enumerate(features[:3])}


def test_to_dict_is_json_and_load_writes_nothing(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = write_csv(tmp_path, frame)
    before = sorted(p.name for p in tmp_path.iterdir())
    data = load_data(path, forest=named_model[1], target=TARGET)
    assert sorted(p.name for p in tmp_path.iterdir()) == before
    summary = json.loads(json.dumps(data.to_dict()))
    # load_breast_cancer: 212 malignant (0), 357 benign (1) (its DESCR).
    assert summary["class_counts"] == {"0": 212, "1": 357}
    assert summary["extra_columns"] == ["record_id"]
    assert summary["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()


def test_without_a_model_every_other_column_is_a_feature(tmp_path, cancer):
    frame, features = cancer
    path = write_csv(tmp_path, frame.drop(columns="record_id"))
    data = load_data(path, target=TARGET)
    assert data.feature_names == features
    assert data.extra_columns == []
    np.testing.assert_array_equal(data.X, frame[features].to_numpy(dtype=float))
    np.testing.assert_array_equal(data.y, frame[TARGET].to_numpy())
    assert load_data(path).feature_names == [*features, TARGET]


def test_without_a_model_an_identifier_column_is_named(tmp_path, cancer):
    frame, _ = cancer
    raises_data_error("'record_id'", "BC-0000", "row 1", "give the model",
                      path=write_csv(tmp_path, frame), target=TARGET)


# ---------------------------------------------------------------------- matching by position
def test_by_position_when_the_model_has_no_names(tmp_path, cancer, unnamed_model):
    frame, features = cancer
    est, forest = unnamed_model
    assert not forest.has_feature_names
    renamed = frame[features + [TARGET]].copy()
    renamed.columns = [f"column {i}" for i in range(30)] + [TARGET]
    path = write_csv(tmp_path, renamed)
    with pytest.warns(UserWarning, match="by position"):
        data = load_data(path, forest=forest, target=TARGET)
    assert data.matched_by == "position"
    assert data.warning is not None and "by position" in data.warning
    assert any("by position" in n for n in data.notes)
    assert data.feature_names == forest.feature_names
    # Reference: scikit-learn's predict_proba on the array the model was fit on.
    np.testing.assert_allclose(forest.predict_proba(data.X),
                               est.predict_proba(frame[features].to_numpy()), rtol=0, atol=1e-12)


def test_by_position_parquet(tmp_path, cancer, unnamed_model):
    frame, features = cancer
    est, forest = unnamed_model
    path = tmp_path / "plain.parquet"
    frame[features].to_parquet(path, index=False)
    with pytest.warns(UserWarning, match="by position"):
        data = load_data(path, forest=forest)
    assert data.matched_by == "position" and data.y is None
    np.testing.assert_array_equal(data.X, frame[features].to_numpy(dtype=float))


def test_pandas_default_integer_header_is_accepted(tmp_path, cancer, unnamed_model):
    frame, features = cancer
    # pd.DataFrame(array).to_csv writes the header 0,1,2,...: pandas' own convention.
    path = write_csv(tmp_path, pd.DataFrame(frame[features].to_numpy()))
    with pytest.warns(UserWarning):
        data = load_data(path, forest=unnamed_model[1])
    np.testing.assert_array_equal(data.X, frame[features].to_numpy(dtype=float))


def test_by_position_with_extra_columns_is_refused(tmp_path, cancer, unnamed_model):
    frame, _ = cancer
    raises_data_error("no feature names", "expects 30", "31 besides the target", "'record_id'",
                      path=write_csv(tmp_path, frame), forest=unnamed_model[1], target=TARGET)


def test_by_position_with_too_few_columns_is_refused(tmp_path, cancer, unnamed_model):
    frame, features = cancer
    raises_data_error("expects 30", "28 besides the target",
                      path=write_csv(tmp_path, frame[features[:28] + [TARGET]]),
                      forest=unnamed_model[1], target=TARGET)


# ---------------------------------------------------------------------- file problems
def test_missing_file(tmp_path, named_model):
    raises_data_error("nothere.csv", "not found", path=tmp_path / "nothere.csv",
                      forest=named_model[1])


def test_folder_is_refused(tmp_path):
    folder = tmp_path / "folder.csv"
    folder.mkdir()
    raises_data_error("not a file", path=folder)


def test_unknown_extension(tmp_path):
    path = tmp_path / "data.xlsx"
    path.write_bytes(b"a,b\n1,2\n")
    raises_data_error("data.xlsx", "'.xlsx'", ".csv", ".parquet", path=path)


@pytest.mark.parametrize("content", [b"", b"\n\n  \n"])
def test_empty_csv(tmp_path, content):
    path = tmp_path / "empty.csv"
    path.write_bytes(content)
    raises_data_error("empty.csv", "empty", "header", path=path)


def test_csv_with_header_and_no_rows(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = write_csv(tmp_path, frame.iloc[:0])
    raises_data_error("no rows", "'mean radius'", path=path, forest=named_model[1])


def test_empty_parquet(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = tmp_path / "empty.parquet"
    frame.iloc[:0].to_parquet(path, index=False)
    raises_data_error("no rows", path=path, forest=named_model[1])
    zero = tmp_path / "zero.parquet"
    zero.write_bytes(b"")
    raises_data_error("zero.parquet", "empty", path=zero)


def test_damaged_parquet(tmp_path, cancer):
    frame, _ = cancer
    path = tmp_path / "cut.parquet"
    frame.to_parquet(path, index=False)
    path.write_bytes(path.read_bytes()[:200])
    raises_data_error("cut.parquet", "could not be read as Parquet", path=path)


def test_csv_that_is_not_utf8(tmp_path):
    path = tmp_path / "latin.csv"
    path.write_bytes("größe,target\n1,0\n".encode("latin-1"))
    raises_data_error("latin.csv", "UTF-8", path=path)


def test_csv_without_header_line(tmp_path, cancer, unnamed_model):
    frame, features = cancer
    path = tmp_path / "noheader.csv"
    frame[features].iloc[:5].to_csv(path, index=False, header=False)
    raises_data_error("numbers", "header line", path=path, forest=unnamed_model[1])


def test_duplicate_column_names(tmp_path):
    path = tmp_path / "dupes.csv"
    path.write_text("a,b,a,target\n1,2,3,0\n", encoding="utf-8")
    raises_data_error("more than once", "'a'", path=path)


# ---------------------------------------------------------------------- column problems
def test_missing_columns_are_named(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = write_csv(tmp_path, frame.drop(columns=["mean area", "worst symmetry"]))
    message = raises_data_error("2 of the model's 30", "'mean area'", "'worst symmetry'",
                                path=path, forest=named_model[1], target=TARGET)
    assert "'mean radius'" not in message


def test_missing_column_with_a_close_name_is_hinted(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = write_csv(tmp_path, frame.rename(columns={"mean area": "Mean Area"}))
    raises_data_error("'mean area' (the file has 'Mean Area')", path=path,
                      forest=named_model[1], target=TARGET)


def test_semicolon_file_gets_a_separator_hint(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = tmp_path / "semi.csv"
    frame.to_csv(path, index=False, sep=";")
    raises_data_error("separator", path=path, forest=named_model[1])


def test_non_numeric_value_names_column_value_and_row(tmp_path, cancer, named_model):
    frame, _ = cancer
    bad = frame.copy()
    bad["mean area"] = bad["mean area"].astype(object)
    bad.loc[7, "mean area"] = "n.d."
    raises_data_error("'mean area'", "'n.d.'", "row 8", path=write_csv(tmp_path, bad),
                      forest=named_model[1], target=TARGET)


def test_non_numeric_value_in_parquet(tmp_path, cancer, named_model):
    frame, _ = cancer
    bad = frame.copy()
    bad["worst area"] = bad["worst area"].astype(str)
    bad.loc[3, "worst area"] = "high"
    path = tmp_path / "bad.parquet"
    bad.to_parquet(path, index=False)
    raises_data_error("'worst area'", "'high'", "row 4", path=path, forest=named_model[1])


def test_non_numeric_in_an_extra_column_is_ignored(tmp_path, cancer, named_model):
    frame, features = cancer
    noted = frame.assign(comment="see chart")
    data = load_data(write_csv(tmp_path, noted), forest=named_model[1], target=TARGET)
    assert data.extra_columns == ["record_id", "comment"]
    np.testing.assert_array_equal(data.X, frame[features].to_numpy(dtype=float))


def test_all_empty_column(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = write_csv(tmp_path, frame.assign(**{"mean texture": np.nan}))
    raises_data_error("'mean texture'", "no values", path=path, forest=named_model[1])


def test_boolean_features_read_as_zero_one(tmp_path):
    frame = pd.DataFrame({"flag": [True, False, True, None], "size": [1.5, 2.0, 3.0, 4.0],
                          "word": ["TRUE", "false", " ", "True"]})
    path = write_csv(tmp_path, frame)
    data = load_data(path)
    expected = np.array([[1, 1.5, 1], [0, 2.0, 0], [1, 3.0, np.nan], [np.nan, 4.0, 1]])
    np.testing.assert_array_equal(data.X, expected)
    parquet = tmp_path / "flags.parquet"
    frame.to_parquet(parquet, index=False)
    np.testing.assert_array_equal(load_data(parquet).X, expected)


# ---------------------------------------------------------------------- target problems
def test_target_column_absent(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = write_csv(tmp_path, frame.drop(columns=TARGET))
    raises_data_error("target column 'target'", "not in the file", path=path,
                      forest=named_model[1], target=TARGET)


def test_target_absent_close_name_hinted(tmp_path, cancer, named_model):
    frame, _ = cancer
    path = write_csv(tmp_path, frame.rename(columns={TARGET: "Target"}))
    raises_data_error("(the file has 'Target')", path=path, forest=named_model[1], target=TARGET)


def test_target_with_unknown_classes_names_them(tmp_path, cancer, named_model):
    frame, _ = cancer
    bad = frame.copy()
    bad.loc[[5, 9], TARGET] = [2, 7]
    message = raises_data_error("'target'", "2", "7", "classes are 0, 1",
                                path=write_csv(tmp_path, bad), forest=named_model[1],
                                target=TARGET)
    assert "does not know" in message


def test_target_text_label_unknown_to_numeric_model(tmp_path, cancer, named_model):
    frame, _ = cancer
    bad = frame.assign(**{TARGET: frame[TARGET].map({0: "malignant", 1: "benign"})})
    raises_data_error("'malignant'", "'benign'", path=write_csv(tmp_path, bad),
                      forest=named_model[1], target=TARGET)


def test_target_with_empty_cells(tmp_path, cancer, named_model):
    frame, _ = cancer
    bad = frame.astype({TARGET: float})
    bad.loc[11, TARGET] = np.nan
    raises_data_error("1 empty cell", "row 12", path=write_csv(tmp_path, bad),
                      forest=named_model[1], target=TARGET)


@pytest.mark.parametrize("spelling", [
    {0: 0.0, 1: 1.0},          # floats, as a column with a gap elsewhere would read
    {0: "0", 1: "1"},          # text
    {0: False, 1: True},       # booleans as 0/1
    {0: "false", 1: "true"},
])
def test_numeric_labels_in_other_spellings_are_accepted(tmp_path, cancer, named_model, spelling):
    frame, _ = cancer
    spelled = frame.assign(**{TARGET: frame[TARGET].map(spelling)})
    for path in (write_csv(tmp_path, spelled), tmp_path / "t.parquet"):
        if path.suffix == ".parquet":
            spelled.to_parquet(path, index=False)
        data = load_data(path, forest=named_model[1], target=TARGET)
        assert data.y.dtype == named_model[1].classes_.dtype
        np.testing.assert_array_equal(data.y, frame[TARGET].to_numpy())


def test_text_classes(tmp_path, cancer):
    frame, features = cancer
    names = load_breast_cancer().target_names  # ['malignant', 'benign'] in the bundle
    labelled = frame.assign(**{TARGET: names[frame[TARGET].to_numpy()]})
    est = RandomForestClassifier(n_estimators=4, max_depth=3, random_state=0)
    est.fit(labelled[features], labelled[TARGET])
    forest = from_estimator(est)
    path = write_csv(tmp_path, labelled)
    data = load_data(path, forest=forest, target=TARGET)
    np.testing.assert_array_equal(data.y, labelled[TARGET].to_numpy())
    # Reference: scikit-learn's own predictions on the frame.
    np.testing.assert_array_equal(forest.predict(data.X), est.predict(labelled[features]))
    bad = labelled.copy()
    bad.loc[0, TARGET] = "unclear"
    raises_data_error("'unclear'", "'benign', 'malignant'", path=write_csv(tmp_path, bad),
                      forest=forest, target=TARGET)


def test_target_that_is_a_feature_is_refused(tmp_path, cancer, named_model):
    frame, _ = cancer
    raises_data_error("'mean radius'", "also one of the model's features",
                      path=write_csv(tmp_path, frame), forest=named_model[1],
                      target="mean radius")


# ---------------------------------------------------------------------- the bundled sample
def test_bundled_sample_loads_and_predicts_like_its_libraries():
    import skops.io
    import xgboost

    paths = sample_paths()
    assert paths["target"] == "complication"
    total = sum(paths[k].stat().st_size for k in ("forest", "xgboost", "data", "holdout", "info"))
    assert total < 5 * 2**20
    raw = pd.read_csv(paths["holdout"])
    forest_est = skops.io.load(paths["forest"], trusted=["sklearn.tree._tree.Tree"])
    boost_est = xgboost.XGBClassifier()
    boost_est.load_model(paths["xgboost"])
    for key, est, tol in (("forest", forest_est, 1e-12), ("xgboost", boost_est, 2e-6)):
        forest = gw.load_model(paths[key])
        data = load_data(paths["holdout"], forest=forest, target=paths["target"])
        assert data.extra_columns == [paths["id_column"]]
        assert 12 <= data.n_features <= 16 and data.n_rows == 600
        assert np.isnan(data.X).any()  # the sample has gaps in a few columns
        # Reference: the library's own predict_proba on the frame pandas reads.
        reference = est.predict_proba(raw[forest.feature_names])
        np.testing.assert_allclose(forest.predict_proba(data.X), reference, rtol=0, atol=tol)
        # Plausible, not perfect: held-out AUC (scikit-learn's roc_auc_score).
        assert 0.75 <= roc_auc_score(data.y, reference[:, 1]) <= 0.92


def test_group_columns_are_kept_as_the_file_gives_them(tmp_path, cancer, named_model):
    # Reference: the frame written to the file (a column that is not a model input, with
    # empty cells) read back by pandas.
    frame, _ = cancer
    _, forest = named_model
    frame = frame.copy()
    frame["site"] = np.where(np.arange(len(frame)) % 3 == 0, "north", "south")
    frame.loc[5, "site"] = None
    path = write_csv(tmp_path, frame)
    data = load_data(path, forest=forest, target=TARGET, groups=["site", "record_id"])
    site = data.group_values["site"]
    assert site[5] is None and site[0] == "north" and site[1] == "south"
    assert (site == "north").sum() == (frame["site"] == "north").sum()
    assert data.group_values["record_id"].tolist() == frame["record_id"].tolist()
    raises_data_error("'clinic'", "not in the file", path=path, forest=forest, target=TARGET,
                      groups=["clinic"])
