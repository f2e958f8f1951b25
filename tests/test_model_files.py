"""Model files: unsafe formats refused, damaged files named, and no traceback on the command line."""

import json
import os
import pickle
import subprocess
import sys

import numpy as np
import pytest
import skops.io as sio
import xgboost as xgb
from sklearn.datasets import load_breast_cancer
from sklearn.ensemble import RandomForestClassifier

import grovewise as gw
from grovewise.cli import main


class _CreatesFile:
    """A pickle payload that would create a file when unpickled."""

    def __init__(self, target):
        self.target = str(target)

    def __reduce__(self):
        return (open, (self.target, "w"))


@pytest.fixture(scope="module")
def fitted():
    X, y = load_breast_cancer(return_X_y=True)
    return RandomForestClassifier(5, max_depth=3, random_state=0).fit(X, y), X


@pytest.mark.parametrize("suffix", [".pkl", ".pickle", ".joblib"])
def test_pickle_payload_is_refused_and_never_runs(tmp_path, suffix):
    marker = tmp_path / "created_by_payload.txt"
    path = tmp_path / f"evil{suffix}"
    path.write_bytes(pickle.dumps(_CreatesFile(marker)))
    with pytest.raises(gw.UnsafeModelError, match="trust"):
        gw.load_model(path)
    assert not marker.exists()
    assert isinstance(gw.UnsafeModelError("x"), gw.GrovewiseError)


def shifted(values):
    """A function of our own: skops stores it by name, and loading it would import this module."""
    return values + 1.0


def test_skops_with_unexpected_types_is_refused(tmp_path):
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import FunctionTransformer

    X, y = load_breast_cancer(return_X_y=True)
    pipe = make_pipeline(FunctionTransformer(shifted),
                         RandomForestClassifier(3, random_state=0)).fit(X, y)
    path = tmp_path / "pipe.skops"
    sio.dump(pipe, path)
    with pytest.raises(gw.UnsafeModelError, match="shifted"):
        gw.load_model(path)
    # Trusted, it loads, and is then refused for what it is: a step that cannot be folded.
    with pytest.raises(gw.UnsupportedModelError, match="FunctionTransformer"):
        gw.load_model(path, trusted=True)


def _bad_files(tmp_path, fitted):
    model, _ = fitted
    good_skops = tmp_path / "good.skops"
    sio.dump(model, good_skops)
    xgb_model = xgb.XGBClassifier(n_estimators=3, max_depth=2).fit(*load_breast_cancer(return_X_y=True))
    good_json = tmp_path / "good.json"
    xgb_model.save_model(good_json)
    good_ubj = tmp_path / "good.ubj"
    xgb_model.save_model(good_ubj)
    rng = np.random.default_rng(0)
    files = {}
    for suffix in (".json", ".ubj", ".skops"):
        empty = tmp_path / f"empty{suffix}"
        empty.write_bytes(b"")
        noise = tmp_path / f"noise{suffix}"
        noise.write_bytes(rng.bytes(4096))
        files[f"empty{suffix}"] = empty
        files[f"noise{suffix}"] = noise
    for name, good in (("truncated.json", good_json), ("truncated.ubj", good_ubj),
                       ("truncated.skops", good_skops)):
        p = tmp_path / name
        data = good.read_bytes()
        p.write_bytes(data[: len(data) // 2])
        files[name] = p
    wrong = tmp_path / "wrong.json"
    wrong.write_text(json.dumps({"name": "not a model", "trees": [1, 2]}))
    files["wrong.json"] = wrong
    listy = tmp_path / "list.json"
    listy.write_text("[1, 2, 3]")
    files["list.json"] = listy
    files["unknown.txt"] = tmp_path / "model.txt"
    files["unknown.txt"].write_text("hello")
    files["missing.json"] = tmp_path / "does_not_exist.json"
    return files


def test_damaged_and_unknown_files_raise_model_file_error(tmp_path, fitted):
    for name, path in _bad_files(tmp_path, fitted).items():
        with pytest.raises(gw.ModelFileError) as info:
            gw.load_model(path)
        assert str(path) in str(info.value), name


def test_command_line_shows_no_traceback(tmp_path, fitted, capsys):
    for name, path in _bad_files(tmp_path, fitted).items():
        code = main(["inspect", str(path)])
        err = capsys.readouterr().err
        assert code != 0, name
        assert "Traceback" not in err, name
        assert str(path) in err.replace("\n", " "), name
    evil = tmp_path / "evil.pkl"
    evil.write_bytes(pickle.dumps(_CreatesFile(tmp_path / "x")))
    assert main(["inspect", str(evil)]) != 0
    err = capsys.readouterr().err
    assert "--trust" in err and "Traceback" not in err
    assert not (tmp_path / "x").exists()


def test_trusted_pickle_warns_on_the_command_line(tmp_path, fitted, capsys):
    import joblib

    model, _ = fitted
    path = tmp_path / "model.joblib"
    joblib.dump(model, path)
    assert main(["inspect", str(path), "--trust"]) == 0
    captured = capsys.readouterr()
    assert "warning" in captured.err and "trusted" in captured.err
    assert "random forest" in captured.out and "Trees      5" in captured.out


def test_inspect_runs_as_a_program(tmp_path, fitted):
    model, _ = fitted
    path = tmp_path / "model.skops"
    sio.dump(model, path)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(sys.path))
    out = subprocess.run([sys.executable, "-m", "grovewise.cli", "inspect", str(path)],
                         capture_output=True, text=True, env=env, check=True).stdout
    assert "Trees      5, depth" in out
    bad = subprocess.run([sys.executable, "-m", "grovewise.cli", "inspect", str(tmp_path / "no.skops")],
                         capture_output=True, text=True, env=env)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr and "no such file" in " ".join(bad.stderr.split())


def test_inspect_proves_exactness_on_the_data(tmp_path, capsys):
    """The intake proof compares with the library's own predict_proba / pred_leaf."""
    import pandas as pd

    data = load_breast_cancer(as_frame=True)
    frame = data.data.copy()
    frame.iloc[::7, 3] = np.nan
    model = xgb.XGBClassifier(n_estimators=5, max_depth=3).fit(frame, data.target)
    path = tmp_path / "model.json"
    model.save_model(path)
    csv = tmp_path / "data.csv"
    frame.assign(target=data.target).to_csv(csv, index=False)
    assert main(["inspect", str(path), str(csv), "--target", "target"]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert "Exactness exact: on 569 rows" in out and "leaf ids equal" in out
    assert isinstance(frame, pd.DataFrame)
