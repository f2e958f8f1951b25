"""Property-based tests of the model readers (``load_model``): any bytes, damaged models.

The property: ``load_model`` returns a Forest, or raises a ``GrovewiseError`` whose message
names the file; never another exception, never a crash of the process, never a hang (each
case under a deadline and a hard limit), and no file is created or changed beside the model
or in the working directory. When a damaged model is still accepted, the Forest predicts
what the library itself predicts from the same file (the exactness proof passes), so an
accepted model is one both read alike.

Inputs: random bytes under every model suffix; real model files with bytes flipped, cut or
inserted; XGBoost JSON models with a child out of range, a cycle, a key removed, a value of
the wrong type, a list cut short; LightGBM model texts with a number changed, a line
removed or repeated. References: XGBoost's and LightGBM's own ``predict`` on the same file
(through the exactness proof), and the real files those libraries write (``save_model``).
"""

from __future__ import annotations

import copy
import json
import re
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

import grovewise as gw
from grovewise.errors import GrovewiseError
from grovewise.loaders.exactness import check_exactness
from grovewise.loaders.model_files import SUFFIXES, load_native
from grovewise.loaders.estimators import from_estimator
from property_cases import cases, corpus_files, no_hang, outcome, remember, untouched

ROWS = np.random.default_rng(7).normal(size=(40, 4))
ROWS[::7, 1] = np.nan


# ---------------------------------------------------------------------------- real models
@pytest.fixture(scope="module")
def seeds(tmp_path_factory):
    """Small real model files, as each library writes them (the mutations start here)."""
    import lightgbm
    import xgboost
    from sklearn.ensemble import RandomForestClassifier

    folder = tmp_path_factory.mktemp("seeds")
    rng = np.random.default_rng(0)
    X = rng.normal(size=(300, 4))
    y2 = (X[:, 0] + X[:, 1] > 0).astype(int)
    y3 = np.digitize(X[:, 0] + 0.5 * X[:, 2], [-0.5, 0.5])
    frame = pd.DataFrame(X, columns=["a", "b", "c", "d"])
    frame["d"] = pd.Categorical(np.abs(X[:, 3] * 3).astype(int) % 5)
    files = {}
    xgboost.XGBClassifier(n_estimators=3, max_depth=2).fit(X, y2).save_model(folder / "x2.json")
    xgboost.XGBClassifier(n_estimators=2, max_depth=2).fit(X, y3).save_model(folder / "x3.json")
    xgboost.XGBClassifier(n_estimators=2, max_depth=2, enable_categorical=True,
                          tree_method="hist").fit(frame, y2).save_model(folder / "xc.json")
    named = frame.assign(d=pd.Categorical(np.array(["low", "mid", "high"])[
        np.digitize(X[:, 3], [-0.5, 0.5])]))
    xgboost.XGBClassifier(n_estimators=2, max_depth=2, enable_categorical=True,
                          tree_method="hist").fit(named, y2).save_model(folder / "xs.json")
    xgboost.XGBClassifier(n_estimators=3, max_depth=2).fit(X, y2).save_model(folder / "x2.ubj")
    files["xgboost_json"] = [folder / "x2.json", folder / "x3.json", folder / "xc.json",
                             folder / "xs.json"]
    files["ubj"] = [folder / "x2.ubj"]
    lightgbm.LGBMClassifier(n_estimators=3, num_leaves=4, verbose=-1).fit(X, y2) \
        .booster_.save_model(folder / "l2.txt")
    lightgbm.LGBMClassifier(n_estimators=2, num_leaves=4, verbose=-1).fit(X, y3) \
        .booster_.save_model(folder / "l3.txt")
    lightgbm.LGBMClassifier(n_estimators=2, num_leaves=4, min_data_per_group=5,
                            cat_smooth=1, verbose=-1).fit(frame, y2) \
        .booster_.save_model(folder / "lc.txt")
    files["lightgbm_text"] = [folder / "l2.txt", folder / "l3.txt", folder / "lc.txt"]
    import skops.io as sio

    sio.dump(RandomForestClassifier(3, max_depth=2, random_state=0).fit(X, y2),
             folder / "rf.skops")
    files["any"] = [*files["xgboost_json"], *files["ubj"], *files["lightgbm_text"],
                    folder / "rf.skops"]
    return files


def test_the_undamaged_models_load_and_predict_as_their_library(seeds):
    """The starting points themselves: each file is accepted and the proof passes (the
    property alone would also hold if a reader refused every file)."""
    for path in seeds["any"]:
        assert isinstance(read(path), gw.Forest), path


def read(path: Path, exact: bool = True):
    """``load_model`` under the property: a Forest, or a GrovewiseError naming the file. An
    accepted model predicts as its library does on rows of random numbers and NaN."""
    remember(path)
    with no_hang(), untouched(path.parent), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            native = load_native(path)
            forest = from_estimator(native)
        except GrovewiseError as exc:
            assert str(path) in str(exc), f"the message does not name the file: {exc}"
            outcome(f"refused: {type(exc).__name__}")
            return exc
        outcome("accepted")
        X = np.resize(ROWS, (ROWS.shape[0], forest.n_features))
        forest.predict_proba(X)
        if exact:
            check = check_exactness(forest, native, X)
            assert check.passed, f"{path}: accepted, but {check.text()}"
        return forest


def read_as(name: str, data: bytes) -> None:
    """``data`` written as file ``name`` in a fresh folder, then read under the property."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / name
        path.write_bytes(data)
        read(path)


# ---------------------------------------------------------------------------- any bytes
@cases(200)
@given(data=st.one_of(st.binary(max_size=600),
                      st.sampled_from([b"{", b"[", b"tree\n", b"PK\x03\x04", b"\x08\x07",
                                       b"{L\x00\x00\x00\x00\x00\x00\x00\x07learner{"])
                      .flatmap(lambda head: st.binary(max_size=400).map(lambda t: head + t))),
       suffix=st.sampled_from(SUFFIXES))
def test_any_bytes_are_a_model_or_a_named_error(data, suffix):
    read_as(f"model{suffix}", data)


@st.composite
def damaged_bytes(draw, raw: bytes):
    """``raw`` with a few bytes flipped, cut, inserted or dropped."""
    out = bytearray(raw)
    for _ in range(draw(st.integers(1, 4))):
        op = draw(st.sampled_from(["flip", "set", "cut", "insert", "drop"]))
        at = draw(st.integers(0, max(len(out) - 1, 0)))
        if op == "flip" and out:
            out[at] ^= 1 << draw(st.integers(0, 7))
        elif op == "set" and out:
            out[at] = draw(st.integers(0, 255))
        elif op == "cut":
            del out[at:]
        elif op == "insert":
            out[at:at] = draw(st.binary(min_size=1, max_size=8))
        elif op == "drop" and out:
            del out[at:at + draw(st.integers(1, 16))]
    return bytes(out)


@cases(300)
@given(data=st.data())
def test_real_model_files_with_damaged_bytes_are_a_model_or_a_named_error(seeds, data):
    source = data.draw(st.sampled_from(seeds["any"]), label="file")
    damaged = data.draw(damaged_bytes(source.read_bytes()), label="bytes")
    read_as(source.name, damaged)


# ---------------------------------------------------------------------------- XGBoost JSON
ODD_VALUES = [-1, -2, 0, 1, 2, 3, 7, 99, 2**31 - 1, 2**31, -2**31, 2**63 - 1, 1.5, -0.0, "1",
              "x", "", None, True, [], [1], {}, 1e39, float("nan"), float("inf")]


def _paths(value, prefix=()):
    """Every path (keys and list indices) into a JSON value, leaves and containers."""
    yield prefix
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value[:12]):  # a dozen entries of a list are enough to reach
            yield from _paths(v, prefix + (i,))


def _at(doc, path):
    for k in path:
        doc = doc[k]
    return doc


@st.composite
def damaged_xgboost(draw, doc: dict):
    """XGBoost's JSON with 1-4 damages: a tree's child out of range or pointing back up (a
    cycle), then a key removed, a value replaced by one of another type or range, a list cut
    or grown."""
    doc = copy.deepcopy(doc)
    trees = doc["learner"]["gradient_booster"]["model"]["trees"]
    structural = draw(st.integers(0, 2))
    for _ in range(structural):
        t = draw(st.sampled_from(trees))
        side = draw(st.sampled_from(["left_children", "right_children"]))
        k = draw(st.sampled_from([k for k, c in enumerate(t[side]) if c >= 0] or [0]))
        n = len(t[side])
        t[side][k] = draw(st.one_of(st.sampled_from([n, n + 3, -5, 2**31 - 1, k]),
                                    st.integers(0, k)))  # out of range, or back up: a cycle
    for _ in range(draw(st.integers(0 if structural else 1, 2))):
        op = draw(st.sampled_from(["remove", "replace", "cut", "grow"]))
        path = draw(st.sampled_from([p for p in _paths(doc) if p]))
        parent, key = _at(doc, path[:-1]), path[-1]
        if op == "remove":
            del parent[key]
        elif op == "replace":
            parent[key] = draw(st.one_of(st.sampled_from(ODD_VALUES), st.integers(-10, 10)))
        elif op == "cut" and isinstance(parent[key], list):
            del parent[key][draw(st.integers(0, len(parent[key]))):]
        elif op == "grow" and isinstance(parent[key], list):
            parent[key].append(draw(st.sampled_from(ODD_VALUES)))
    return doc


@cases(300)
@given(data=st.data())
def test_damaged_xgboost_json_is_a_model_or_a_named_error(seeds, data):
    source = data.draw(st.sampled_from(seeds["xgboost_json"]), label="model")
    doc = data.draw(damaged_xgboost(json.loads(source.read_text())), label="damaged")
    read_as("model.json", json.dumps(doc).encode())


# ---------------------------------------------------------------------------- LightGBM text
NUMBER = re.compile(r"-?\d+(\.\d+)?(e[-+]?\d+)?")


@st.composite
def damaged_lightgbm(draw, text: str):
    """LightGBM's model text with 1-3 damages: a number of a line changed (a child, a
    feature, a count, a decision type, a category bit set), a line removed or repeated."""
    lines = text.split("\n")
    end = lines.index("end of trees") if "end of trees" in lines else len(lines)
    for _ in range(draw(st.integers(1, 3))):
        k = draw(st.integers(0, end - 1))
        op = draw(st.sampled_from(["number", "number", "remove", "repeat", "word"]))
        if op == "number":
            found = list(NUMBER.finditer(lines[k]))
            if not found:
                continue
            m = draw(st.sampled_from(found))
            new = str(draw(st.one_of(
                st.sampled_from([-1, -2, 0, 1, 2, 3, 4, 7, 8, 31, 32, 99, 2**31, -2**31,
                                 2**63, 1e39, "nan", "inf", "1.5"]),
                st.integers(-10, 10))))
            lines[k] = lines[k][:m.start()] + new + lines[k][m.end():]
        elif op == "remove":
            del lines[k]
            end -= 1
        elif op == "repeat":
            lines.insert(k, lines[k])
            end += 1
        else:
            lines[k] = lines[k] + draw(st.sampled_from([" x", " 1", "=", " -1"]))
        if end <= 0:
            break
    return "\n".join(lines)


@cases(300)
@given(data=st.data())
def test_damaged_lightgbm_text_is_a_model_or_a_named_error(seeds, data):
    source = data.draw(st.sampled_from(seeds["lightgbm_text"]), label="model")
    text = data.draw(damaged_lightgbm(source.read_text()), label="damaged")
    read_as("model.txt", text.encode())


# ---------------------------------------------------------------------------- the corpus
@pytest.mark.parametrize("path", corpus_files("models"), ids=lambda p: p.name)
def test_corpus_model_files_are_a_model_or_a_named_error(path, tmp_path):
    """Every model file that once broke a reader (tests/corpus/models) now gives a Forest that
    predicts as its library does, or a GrovewiseError naming the file."""
    copy_ = tmp_path / path.name
    copy_.write_bytes(path.read_bytes())
    read(copy_)


def test_a_cycle_and_a_child_out_of_range_name_the_file_the_tree_and_the_node(seeds, tmp_path):
    """The two damages the issue names, one by one: XGBoost's own reader accepts both and then
    crashes the process when it predicts (seen with xgboost 3.2: a segmentation fault), so
    Grovewise refuses them before it asks XGBoost anything."""
    doc = json.loads(seeds["xgboost_json"][0].read_text())
    for value, words in ((99, "node 1 has child 99, but the tree has 7 nodes"),
                         (0, "node 1 has the root (node 0) as its child: a cycle")):
        bad = copy.deepcopy(doc)
        bad["learner"]["gradient_booster"]["model"]["trees"][2]["left_children"][1] = value
        path = tmp_path / "model.json"
        path.write_text(json.dumps(bad))
        with pytest.raises(gw.ModelFileError) as info:
            gw.load_model(path)
        assert f"{path}, tree 2: its nodes do not form a tree: {words}" in str(info.value)
