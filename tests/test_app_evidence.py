"""The window shows the sign-off evidence (issue 12, items 1, 3 and 6), offscreen: the
Surrogate page's faithfulness per group and the Cases panel's group of a row, the Sign-off
page's card on the model's own performance, and the Sign-off preview of the real PDF.

One review of the sample runs once (module fixture, short settings) with a protected feature
and a group column of our own (the clinic site, added to a copy of the data, one site rare
enough to be too small to judge); the window is given the finished review. The numbers on
the pages are checked against scikit-learn's own model and metrics, and the preview against
the exported PDF read by poppler's ``pdfinfo``.

Set GROVEWISE_WINDOW_SHOTS to a folder to keep the screenshots (resources/ holds them).
"""

from __future__ import annotations

import dataclasses
import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytest.importorskip("PySide6.QtPdf")

from PySide6.QtCore import QEventLoop, QTimer  # noqa: E402
from PySide6.QtPdf import QPdfDocument  # noqa: E402
from test_app_window import settings_home  # noqa: E402,F401 (a fixture)

from grovewise.app import report_bridge  # noqa: E402
from grovewise.app.launch import wait_for_idle  # noqa: E402
from grovewise.app.main_window import MainWindow  # noqa: E402
from grovewise.report.figures_performance import RELIABILITY_LINE  # noqa: E402
from grovewise.review import Review, ReviewInputs, ReviewSettings  # noqa: E402
from grovewise.sample_data import sample_paths  # noqa: E402

SHOTS = os.environ.get("GROVEWISE_WINDOW_SHOTS")
PROTECTED = "age_years"
SITE = "clinic_site"  # a column of our own, not a model input
SITES = {"north": 0.45, "river": 0.35, "hill": 0.185, "island": 0.015}  # island: a few rows
needs_pdfinfo = pytest.mark.skipif(not shutil.which("pdfinfo"),
                                   reason="poppler-utils (pdfinfo) not installed; .ci/run "
                                          "installs it")


def run_for(ms: int) -> None:
    loop = QEventLoop()
    QTimer.singleShot(ms, loop.quit)
    loop.exec()


def fast_settings(**changes) -> ReviewSettings:
    """Short settings: the window is under test, not the solve or the importances."""
    quick = dict(time_limit=2.0, permutation_repeats=1, permutation_rows=500,
                 proximity_rows=500, effects_rows=100, interaction_rows=20, seed=3)
    names = {f.name for f in dataclasses.fields(ReviewSettings)}
    if "stability_resamples" in names:
        quick["stability_resamples"] = 0
    return ReviewSettings(**quick, **changes)


@pytest.fixture(scope="module")
def sklearn_model():
    import skops.io as sio

    path = sample_paths()["forest"]
    return sio.load(path, trusted=sio.get_untrusted_types(file=path))


@pytest.fixture(scope="module")
def data_file(tmp_path_factory):
    """The sample data with a clinic site per patient (seeded; one site rare)."""
    import pandas as pd

    table = pd.read_csv(sample_paths()["data"])
    rng = np.random.default_rng(12)
    table[SITE] = rng.choice(list(SITES), size=len(table), p=list(SITES.values()))
    path = tmp_path_factory.mktemp("evidence") / "clinic_patients_sites.csv"
    table.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def win(qapp, settings_home, data_file):  # noqa: F811 (settings_home: the imported fixture)
    paths = sample_paths()
    review = Review(ReviewInputs(paths["forest"], data_file, target=paths["target"]),
                    fast_settings(flags={PROTECTED: "protected"}, group_columns=[SITE]))
    review.run()
    w = MainWindow(review)
    w.confirm_close = False
    w.resize(1360, 860)
    w.show()
    assert w.problems == []
    yield w
    w.close()


def shot(widget, name: str, tmp_path: Path) -> Path:
    """A screenshot of ``widget`` (grab), into GROVEWISE_WINDOW_SHOTS when set."""
    run_for(100)  # laid out
    folder = Path(SHOTS) if SHOTS else tmp_path
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"window_{name}.png"
    assert widget.grab().save(str(path))
    return path


def holdout_agreement(win, sklearn_model) -> tuple[np.ndarray, np.ndarray]:
    """The holdout rows and, on each, whether the surrogate gives scikit-learn's class."""
    import pandas as pd

    r = win.review
    res = r.surrogate
    X = r.case_rows()
    theirs = sklearn_model.predict(pd.DataFrame(X, columns=sklearn_model.feature_names_in_))
    ours = res.surrogate.predict(r.filled(X))
    rows = res.holdout_rows
    return rows, (ours == theirs)[rows]


def test_group_table_holds_each_groups_fidelity(win, sklearn_model, tmp_path):
    """References: the GroupFidelity rows the report prints (to_rows, sentence), and for the
    protected feature's bins the surrogate's agreement with scikit-learn's own predict on the
    holdout rows of each bin, counted here."""
    page = win.pages["surrogate"]
    win.go("surrogate")
    res = win.review.surrogate
    found = {gf.name: gf for gf in res.group_fidelity}
    assert set(found) == {PROTECTED, SITE}
    assert page.groups_card.isVisible()
    for name, gf in found.items():
        table = page.group_tables[name]
        assert page.group_sentences[name].text() == gf.sentence()
        expected = gf.to_rows()
        assert table.rowCount() == len(expected)
        headers = [table.horizontalHeaderItem(c).text() for c in range(table.columnCount())]
        assert headers[:4] == ["group", "rows", "surrogate fidelity (95% interval)",
                               "greedy fidelity (95% interval)"]
        for i, row in enumerate(expected):
            cells = [table.item(i, c).text() for c in range(table.columnCount())]
            assert cells[0] == row["group"]
            assert int(cells[1].replace(",", "")) == row["rows"]
            for c, tree in ((2, "surrogate"), (3, "greedy")):
                assert cells[c] == (f"{100 * row[f'{tree}_fidelity']:.1f}% "
                                    f"({100 * row[f'{tree}_low']:.1f}% to "
                                    f"{100 * row[f'{tree}_high']:.1f}%)")
            assert (cells[4] == "too small to judge") == row["too_small"]
    # the rare site has fewer than 30 holdout rows: shown, marked, left out of the gap
    island = next(g for g in found[SITE].groups if g.label == "island")
    assert island.too_small and "too small to judge" in found[SITE].sentence()
    # outside check: each bin's surrogate fidelity from scikit-learn's own classes
    rows, agree = holdout_agreement(win, sklearn_model)
    gf = found[PROTECTED]
    j = win.review.forest.feature_names.index(PROTECTED)
    x = win.review.case_rows()[rows, j]
    edges = np.asarray(gf.edges)
    for i, group in enumerate(gf.groups):
        upper = x <= edges[i + 1] if i == len(gf.groups) - 1 else x < edges[i + 1]
        member = (x >= edges[i]) & upper
        assert group.rows == int(member.sum())
        assert page.group_tables[PROTECTED].item(i, 2).text().startswith(
            f"{100 * agree[member].mean():.1f}%")
    path = shot(page.groups_card, "surrogate_groups", tmp_path)
    assert path.stat().st_size > 10_000


def test_group_of_puts_each_row_in_the_group_that_counted_it():
    """Reference: group_fidelity's own row count of each group (every row's group, as the
    Cases panel finds it, counted here), for each kind of grouping."""
    from grovewise.analysis.group_fidelity import group_fidelity

    rng = np.random.default_rng(5)
    n = 400
    agree = {"surrogate": rng.random(n) < 0.9}
    numbers = rng.normal(50, 10, n)
    numbers[:7] = np.nan
    few = rng.choice([1.25, 2.5, 3.125], n)  # numeric, each value its own group
    words = rng.choice(np.array(["north", "river", None], dtype=object), n)
    codes = rng.integers(0, 3, n).astype(float)
    names = {0: "none", 1: "some", 2: "many"}
    rows = rng.permutation(n)[:300]
    for values, cats in ((numbers, None), (few, None), (words, None), (codes, names)):
        gf = group_fidelity(values, agree, name="c", rows=rows, categories=cats)
        counts = {}
        for k in rows:
            label = gf.group_of(values[k], cats).label
            counts[label] = counts.get(label, 0) + 1
        assert counts == {g.label: g.rows for g in gf.groups}
    bins = group_fidelity(numbers, agree, name="c", rows=rows)
    assert bins.grouping == "quantile bins"
    assert bins.group_of(bins.edges[-1] + 1.0) is None  # beyond the bins: no group
    assert group_fidelity(codes, agree, name="c", categories=names).group_of(7.0, names) is None


def test_cases_panel_names_the_rows_groups(win):
    """Reference: the GroupFidelity's own groups; a row's group must hold as many holdout rows
    as the group says it has (every holdout row's group counted here)."""
    page = win.pages["cases"]
    win.go("cases")
    r = win.review
    res = r.surrogate
    site = next(gf for gf in res.group_fidelity if gf.name == SITE)
    sites = np.asarray(r.data.group_values[SITE], dtype=object)
    counts = {}
    for k in res.holdout_rows:
        label = site.group_of(sites[k]).label
        counts[label] = counts.get(label, 0) + 1
    assert counts == {g.label: g.rows for g in site.groups}
    row = int(next(k for k in res.holdout_rows if sites[k] == "island"))
    assert page.select_row(row)
    text = page.detail.text()
    island = next(g for g in site.groups if g.label == "island")
    low, high = island.interval["surrogate"]
    assert (f"{SITE}: <b>island</b>, fidelity {island.fidelity['surrogate']:.1%} "
            f"({low:.1%} to {high:.1%}) on {island.rows} rows") in text
    assert "too small to judge" in text
    age = next(gf for gf in res.group_fidelity if gf.name == PROTECTED)
    j = r.forest.feature_names.index(PROTECTED)
    x = r.case_rows()[row, j]
    group = age.group_of(x)
    k = age.groups.index(group)  # the bin between its edges holds the row's age
    assert age.edges[k] <= x <= age.edges[k + 1]
    assert f"{PROTECTED}: <b>{group.label}</b>, fidelity {group.fidelity['surrogate']:.1%}" in text


def test_performance_card_matches_scikit_learn(win, sklearn_model, tmp_path):
    """References: scikit-learn's roc_auc_score, brier_score_loss, confusion_matrix and
    calibration_curve (10 uniform bins) on the review data's rows, with the probabilities of
    scikit-learn's own predict_proba of the sample model."""
    import pandas as pd
    from sklearn.calibration import calibration_curve
    from sklearn.metrics import brier_score_loss, confusion_matrix, roc_auc_score

    page = win.pages["signoff"]
    win.go("signoff")
    assert win.wait_until_prepared(page, 60)
    table = pd.read_csv(sample_paths()["data"])
    y = table[sample_paths()["target"]].to_numpy()
    p = sklearn_model.predict_proba(table[list(sklearn_model.feature_names_in_)])
    text = page.performance_text.text()
    auc = float(re.search(r"ROC AUC (\d\.\d{3}) \(95% interval", text).group(1))
    assert auc == pytest.approx(roc_auc_score(y, p[:, 1]), abs=5e-4)
    brier = float(re.search(r"Brier score (\d\.\d{3})", text).group(1))
    assert brier == pytest.approx(brier_score_loss(y, p[:, 1]), abs=5e-4)
    assert page.performance_caution.text() == win.review.intake.performance.caution
    cm = confusion_matrix(y, sklearn_model.classes_[np.argmax(p, axis=1)],
                          labels=sklearn_model.classes_)
    shown = [[int(page.confusion.item(i, c).text().replace(",", ""))
              for c in range(1, page.confusion.columnCount())]
             for i in range(page.confusion.rowCount())]
    assert shown == cm.tolist()
    prob_true, prob_pred = calibration_curve(y, p[:, 1], n_bins=10, strategy="uniform")
    line = next(x for ax in page.reliability_view.figure.axes for x in ax.lines
                if x.get_gid() == RELIABILITY_LINE)  # the report's figure, drawn in the window
    assert np.allclose(line.get_xdata(), prob_pred) and np.allclose(line.get_ydata(), prob_true)
    table = page.reliability  # the reliability table: mean predicted, observed share per bin
    assert table.rowCount() == prob_pred.size
    assert [float(table.item(i, 3).text()) for i in range(table.rowCount())] == \
        pytest.approx(prob_pred, abs=5e-4)
    assert [float(table.item(i, 4).text()) for i in range(table.rowCount())] == \
        pytest.approx(prob_true, abs=5e-4)
    path = shot(page.performance_card, "signoff_performance", tmp_path)
    assert path.stat().st_size > 10_000


def test_without_a_target_the_card_says_so_in_one_line(qapp, settings_home):  # noqa: F811
    """Reference: the review's own inputs (no target given, so no performance measured)."""
    paths = sample_paths()
    review = Review(ReviewInputs(paths["forest"], paths["data"]), fast_settings())
    review.run_step("intake")
    assert review.intake.performance is None
    w = MainWindow(review)
    w.confirm_close = False
    w.show()
    w.go("signoff")
    page = w.pages["signoff"]
    assert "no target column" in page.performance_text.text()
    assert "\n" not in page.performance_text.text()
    assert not page.confusion.isVisible() and not page.reliability_view.isVisible()
    w.close()


@needs_pdfinfo
@pytest.mark.skipif(not report_bridge.available(), reason="no report composer in this version")
def test_preview_is_the_exported_pdf(win, tmp_path):
    """Reference: poppler's pdfinfo page count of the PDF the window exports; the preview's
    temporary files go when replaced and when the window closes."""
    page = win.pages["signoff"]
    win.go("signoff")
    assert page.update_preview()
    assert win.wait_until_prepared(page, 120)
    doc = page.preview.document
    assert doc.status() == QPdfDocument.Status.Ready
    shown = page.preview.path
    assert shown is not None and shown.is_file()
    assert page.export(tmp_path, ("pdf",))
    assert wait_for_idle(win, 120)
    pdf = tmp_path / "report.pdf"
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True)
    pages = int(re.search(r"^Pages:\s+(\d+)", info.stdout, re.M).group(1))
    assert doc.pageCount() == pages > 1
    assert f"{pages} pages" in page.preview.status.text()
    run_for(300)  # the view renders its first pages
    out = shot(page.preview_card, "signoff_preview", tmp_path)
    assert out.stat().st_size > 20_000
    # a newer preview replaces the file shown; closing the window removes the rest
    newer = page.preview.new_path()
    shutil.copy(pdf, newer)
    assert page.preview.show_file(newer)
    assert not shown.exists() and newer.is_file()
    folder = newer.parent
    win.close()
    run_for(50)
    assert not folder.exists()
