"""Anatomy figures show the right labels and numbers, and files are written atomically.

The numbers drawn are checked against scikit-learn's fitted ``tree_`` arrays and
``feature_importances_`` on its bundled datasets (wine, iris, breast cancer).
"""

from __future__ import annotations

import csv
import json
import struct
from collections import Counter

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_iris, load_wine
from sklearn.ensemble import GradientBoostingClassifier, RandomForestClassifier

import grovewise as gw
from grovewise.analysis import (compare_models, depth_usage, importance_comparison,
                                impurity_importance, permutation_importance_result,
                                position_usage, threshold_profiles)
from grovewise.errors import SettingError
from grovewise.report.anatomy_files import export_anatomy
from grovewise.report.figure_files import save_figure
from grovewise.report.figures_anatomy import (FLAG_STYLE, comparison_figure, depth_usage_figure,
                                              importance_figure, position_map_figure,
                                              short_label, threshold_strips_figure)

LONG = "serum_measurement_of_a_very_long_laboratory_panel_value_mg_dl"


def axes_named(fig, label):
    return next(a for a in fig.axes if a.get_label() == label)


def footnote(fig) -> str:
    return fig._supxlabel.get_text() if fig._supxlabel is not None else ""


def sklearn_depth_counts(rf, n_features):
    """Split nodes per (feature, depth) from scikit-learn's tree_ arrays; a parent's id is
    always smaller than its children's (depth-first numbering), so one pass sets depths."""
    counts = {}
    for e in rf.estimators_:
        t = e.tree_
        depth = np.zeros(t.node_count, dtype=int)
        for node in range(t.node_count):
            if t.children_left[node] != -1:
                depth[t.children_left[node]] = depth[t.children_right[node]] = depth[node] + 1
                key = (int(t.feature[node]), int(depth[node]))
                counts[key] = counts.get(key, 0) + 1
    n_depths = max(d for _, d in counts) + 1
    grid = np.zeros((n_features, n_depths))
    for (f, d), c in counts.items():
        grid[f, d] = c
    return grid


@pytest.fixture(scope="module")
def wine_named():
    data = load_wine()
    names = [n.replace("/", "_") for n in data.feature_names]
    names[4] = LONG
    X = pd.DataFrame(data.data, columns=names)
    rf = RandomForestClassifier(n_estimators=10, max_depth=4, random_state=0).fit(X, data.target)
    return rf, X, data.target, names


def test_depth_heat_map_rows_cells_and_flags(wine_named):
    rf, X, _, names = wine_named
    forest = gw.from_estimator(rf)
    flags = {"alcohol": "protected", LONG: "forbidden"}
    fig = depth_usage_figure(depth_usage(forest), flags)
    ax = axes_named(fig, "heat map")
    grid = sklearn_depth_counts(rf, len(names))
    shares = grid / grid.sum(axis=0, keepdims=True)
    overall = grid.sum(axis=1) / grid.sum()
    order = [j for j in np.lexsort((np.arange(len(names)), -overall)) if overall[j] > 0]
    labels = [t.get_text() for t in ax.get_yticklabels()]
    expected = []
    for j in order:
        kind = flags.get(names[j])
        expected.append(f"{FLAG_STYLE[kind][0]} {short_label(names[j])}" if kind
                        else names[j])
    assert labels == expected
    cells = {(round(t.get_position()[0]), round(t.get_position()[1])): t.get_text()
             for t in ax.texts}
    for r, j in enumerate(order):
        for d in range(grid.shape[1]):
            v = 100 * shares[j, d]
            want = "" if v == 0 else "<1" if v < 1 else f"{v:.0f}"
            assert cells[(d, r)] == want
    flagged = [t for t in ax.get_yticklabels() if t.get_text().startswith("◆")]
    assert flagged and flagged[0].get_color() == FLAG_STYLE["protected"][1]
    assert [t.get_text() for t in ax.get_xticklabels()] == [str(d) for d in range(grid.shape[1])]
    assert "Flagged" in footnote(fig)


def test_long_names_are_shortened_keeping_both_ends():
    label = short_label(LONG)
    assert len(label) == 28 and "…" in label
    assert LONG.startswith(label.split("…")[0]) and LONG.endswith(label.split("…")[1])
    assert short_label("bmi") == "bmi"


def test_position_map_root_box_names_the_most_common_root_feature(wine_named):
    rf, _, _, names = wine_named
    fig = position_map_figure(position_usage(gw.from_estimator(rf), 3))
    ax = axes_named(fig, "position map")
    # scikit-learn's tree_.feature[0] is each tree's root split.
    roots = Counter(int(e.tree_.feature[0]) for e in rf.estimators_)
    (top, count), = [max(roots.items(), key=lambda kv: (kv[1], -kv[0]))]
    root_texts = [t.get_text() for t in ax.texts if abs(t.get_position()[0] - 0.5) < 1e-9
                  and t.get_position()[1] < 0]
    share = f"{100 * count / len(rf.estimators_):.0f}%"
    label, shown_share = root_texts[0].rsplit("  ", 1)
    assert shown_share == share
    assert label == names[top] or names[top].startswith(label.split("…")[0])
    assert any(t.get_text() == f"#0   n={len(rf.estimators_)}" for t in ax.texts)
    assert sum(t.get_text().startswith("#") for t in ax.texts) == 15


def test_threshold_strips_show_split_counts_from_tree_arrays(wine_named):
    rf, X, _, names = wine_named
    forest = gw.from_estimator(rf)
    fig = threshold_strips_figure(threshold_profiles(forest, X.to_numpy()), max_features=5)
    per_feature = Counter(int(f) for e in rf.estimators_
                          for f in e.tree_.feature[e.tree_.children_left != -1])
    top5 = sorted(per_feature, key=lambda j: (-per_feature[j], j))[:5]
    strips = [a for a in fig.axes if a.get_label().startswith("strip ")]
    assert [a.get_label()[6:] for a in strips] == [names[j] for j in top5]
    for ax, j in zip(strips, top5):
        assert any(t.get_text().strip().startswith(f"{per_feature[j]} splits") for t in ax.texts)
        assert ax.get_ylabel() == short_label(names[j], 26)
    assert "review data: 178 rows" in " ".join(t.get_text() for t in fig.texts)


def test_importance_figure_orders_by_sklearn_importances_and_prints_ranks(wine_named):
    rf, X, y, names = wine_named
    forest = gw.from_estimator(rf)
    cmp = importance_comparison(impurity_importance(forest),
                                permutation_importance_result(forest, X.to_numpy(), y,
                                                              n_repeats=2))
    fig = importance_figure(cmp, max_features=8)
    ax = axes_named(fig, "impurity")
    order = np.argsort(-rf.feature_importances_, kind="stable")[:8]
    assert [t.get_text() for t in ax.get_yticklabels()] == [short_label(names[j]) for j in order]
    values = [t.get_text() for t in ax.texts]
    assert values[0] == f"{rf.feature_importances_[order[0]]:.3g}  #1"
    assert len(axes_named(fig, "permutation").texts) == 8
    assert "Strobl et al. 2007" in footnote(fig)


def test_comparison_figure_names_vanished_features_and_differences(wine_named):
    rf, X, y, names = wine_named
    X2 = X.copy()
    X2["alcohol"] = 0.0
    rf2 = RandomForestClassifier(n_estimators=10, max_depth=4, random_state=1).fit(X2, y)
    a, b = gw.from_estimator(rf), gw.from_estimator(rf2)
    cmp = compare_models(a, b, labels=("first", "second"))
    fig = comparison_figure(cmp)
    assert "Vanished (used only by first): alcohol" in footnote(fig)
    ax = axes_named(fig, "difference")
    diff = (sklearn_depth_counts(rf2, 13) / sklearn_depth_counts(rf2, 13).sum(axis=0)
            - sklearn_depth_counts(rf, 13) / sklearn_depth_counts(rf, 13).sum(axis=0))
    labels = [t.get_text() for t in ax.get_yticklabels()]
    r = labels.index("flavanoids")
    cells = {(round(t.get_position()[0]), round(t.get_position()[1])): t.get_text()
             for t in ax.texts}
    j = names.index("flavanoids")
    for d in range(diff.shape[1]):
        p = round(100 * diff[j, d])
        assert cells.get((d, r), "") == ("" if p == 0 else f"{p:+d}".replace("-", "−"))
    slope_texts = [t.get_text() for t in axes_named(fig, "rank slopes").texts]
    assert any(t.endswith("alcohol (gone)") for t in slope_texts)


def _png_size(path):
    with open(path, "rb") as fh:
        head = fh.read(24)
    assert head[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, section 5.2)
    return struct.unpack(">II", head[16:24])  # IHDR width and height


def test_save_figure_writes_each_format_atomically(tmp_path, wine_named):
    rf, _, _, _ = wine_named
    fig = depth_usage_figure(depth_usage(gw.from_estimator(rf)))
    paths = save_figure(fig, tmp_path / "usage", formats=("png", "svg"), dpi=80)
    assert [p.name for p in paths] == ["usage.png", "usage.svg"]
    w, h = _png_size(paths[0])
    fig_w, fig_h = fig.get_size_inches()
    assert abs(w - fig_w * 80) <= 1 and abs(h - fig_h * 80) <= 1
    assert paths[1].read_text(encoding="utf-8").lstrip().startswith("<?xml")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["usage.png", "usage.svg"]
    again = save_figure(fig, tmp_path / "usage", formats=("svg",), dpi=80)
    assert again[0].read_bytes() == paths[1].read_bytes()  # reproducible bytes
    with pytest.raises(SettingError, match="format"):
        save_figure(fig, tmp_path / "x", formats=("gif",))
    with pytest.raises(SettingError, match="dpi"):
        save_figure(fig, tmp_path / "x", dpi=0)


def test_failed_save_keeps_the_previous_file(tmp_path, wine_named, monkeypatch):
    rf, _, _, _ = wine_named
    fig = depth_usage_figure(depth_usage(gw.from_estimator(rf)))
    (path,) = save_figure(fig, tmp_path / "keep", formats=("png",), dpi=40)
    before = path.read_bytes()

    def broken(fname, **kwargs):
        with open(fname, "wb") as fh:
            fh.write(b"half a file")
        raise OSError("disk full")

    monkeypatch.setattr(fig, "savefig", broken)
    with pytest.raises(OSError):
        save_figure(fig, tmp_path / "keep", formats=("png",), dpi=40)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["keep.png"]


def test_export_anatomy_writes_figures_and_tables(tmp_path):
    X, y = load_iris(return_X_y=True)
    rf = RandomForestClassifier(n_estimators=8, max_depth=3, random_state=0).fit(X, y)
    forest = gw.from_estimator(rf)
    files = export_anatomy(forest, X, out_dir=tmp_path / "out", y=y, flags={"x2": "protected"},
                           formats=("png",), dpi=40, n_repeats=2)
    names = {p.name for p in files}
    for stem in ("depth_usage_count", "depth_usage_gain", "depth_usage_cover", "position_map",
                 "threshold_strips", "importance"):
        assert f"{stem}.png" in names
    for stem in ("depth_usage_count", "position_usage", "threshold_profiles",
                 "impurity_importance", "permutation_importance", "importance_comparison",
                 "proximity_pair_counts", "flagged_features"):
        assert {f"{stem}.csv", f"{stem}.json"} <= names
    with open(tmp_path / "out" / "impurity_importance.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    # Reference: scikit-learn's feature_importances_.
    np.testing.assert_allclose([float(r["importance"]) for r in rows], rf.feature_importances_,
                               atol=1e-12)
    with open(tmp_path / "out" / "depth_usage_count.csv", newline="") as fh:
        usage_rows = list(csv.DictReader(fh))
    grid = sklearn_depth_counts(rf, 4)
    assert sum(int(r["splits"]) for r in usage_rows) == grid.sum()
    index = json.loads((tmp_path / "out" / "anatomy.json").read_text())
    assert files[-1].name == "anatomy.json"
    assert index["files"] == [p.name for p in files[:-1]]
    assert index["flags"] == {"x2": "protected"} and index["data"]["n_rows"] == 150
    assert not any(p.name.endswith(".part") for p in (tmp_path / "out").iterdir())


def test_export_anatomy_without_data_and_per_class(tmp_path):
    Xw, yw = load_wine(return_X_y=True)
    gb = GradientBoostingClassifier(n_estimators=3, max_depth=2, random_state=0).fit(Xw, yw)
    files = export_anatomy(gw.from_estimator(gb), out_dir=tmp_path, formats=("png",), dpi=40)
    names = {p.name for p in files}
    assert {f"depth_usage_count_class_{k}.csv" for k in range(3)} <= names
    assert "permutation_importance.csv" not in names
    assert "proximity_pair_counts.csv" not in names
    with pytest.raises(SettingError, match="not a feature"):
        export_anatomy(gw.from_estimator(gb), out_dir=tmp_path / "bad", flags={"zz": "protected"})
    assert not (tmp_path / "bad").exists()


def test_write_atomically_replaces_whole_files_only(tmp_path):
    from grovewise.report.figure_files import write_atomically

    path = write_atomically(tmp_path / "sub" / "t.json", lambda fh: fh.write('{"a": 1}'),
                            binary=False)
    with pytest.raises(ZeroDivisionError):
        write_atomically(path, lambda fh: (fh.write("half"), 1 / 0), binary=False)
    assert path.read_text(encoding="utf-8") == '{"a": 1}'
    assert [p.name for p in path.parent.iterdir()] == ["t.json"]
