"""Results survive a save and reopen as the same objects, without pickle."""

import json

import numpy as np
import pytest
from sklearn.datasets import load_wine
from sklearn.ensemble import RandomForestClassifier

import grovewise as gw
from grovewise.storage import StorageError, decode, encode, load_arrays, save_arrays


def _roundtrip(obj, tmp_path):
    tree, arrays = encode(obj)
    text = json.dumps(tree)
    save_arrays(tmp_path / "a.npz", arrays)
    return decode(json.loads(text), load_arrays(tmp_path / "a.npz"))


def test_forest_roundtrip_predicts_the_same(tmp_path):
    X, y = load_wine(return_X_y=True)
    forest = gw.from_estimator(RandomForestClassifier(10, random_state=0).fit(X, y))
    forest.predict(X[:3])  # fills the cached flat layout, which must not be saved
    back = _roundtrip(forest, tmp_path)
    assert isinstance(back, gw.Forest) and back.kind == "random_forest"
    np.testing.assert_array_equal(back.predict_proba(X), forest.predict_proba(X))
    np.testing.assert_array_equal(back.classes_, forest.classes_)


def test_plain_values_roundtrip(tmp_path):
    value = {"a": [1, 2.5, float("nan"), None, True], "b": (1, "x"), 3: "int key",
             "arr": np.arange(6).reshape(2, 3), "names": np.array(["p", "q"], dtype=object)}
    back = _roundtrip(value, tmp_path)
    assert back["a"][:2] == [1, 2.5] and np.isnan(back["a"][2]) and back["a"][3:] == [None, True]
    assert back["b"] == (1, "x") and back[3] == "int key"
    np.testing.assert_array_equal(back["arr"], value["arr"])
    assert list(back["names"]) == ["p", "q"]


def test_sklearn_estimators_go_through_skops(tmp_path):
    from sklearn.tree import DecisionTreeClassifier

    X, y = load_wine(return_X_y=True)
    tree = DecisionTreeClassifier(max_depth=2, random_state=0).fit(X, y)
    back = _roundtrip({"greedy": tree}, tmp_path)["greedy"]
    np.testing.assert_array_equal(back.predict_proba(X), tree.predict_proba(X))


def test_foreign_types_are_refused():
    import collections

    with pytest.raises(StorageError, match="not one of Grovewise's own"):
        encode(collections.Counter("ab").most_common)
    with pytest.raises(StorageError, match="not one of Grovewise's own"):
        decode({"__type__": "os:system", "state": {}}, {})
