"""The window's effects (issue "Effects"), offscreen: a Cases row's contributions beside its
surrogate path, importance by mean |contribution| and the effect curves on the Anatomy page,
the interaction pairs on the Surrogate page. One window runs the sample's steps once (module
fixture); the numbers on the pages are checked against scikit-learn's own model and a
contributions run of the test's own."""

from __future__ import annotations

import time

import numpy as np
import pytest

pytest.importorskip("pytestqt")

from PySide6.QtCore import QEventLoop, Qt, QTimer  # noqa: E402
from test_app_window import TickProbe, settings_home  # noqa: E402,F401 (settings_home: a fixture)

from grovewise.analysis.contributions import contributions  # noqa: E402
from grovewise.app.launch import wait_for_idle  # noqa: E402
from grovewise.app.main_window import MainWindow  # noqa: E402
from grovewise.app.pages import cases as cases_page  # noqa: E402
from grovewise.report.figures_effects import value_text  # noqa: E402
from grovewise.sample_data import sample_paths  # noqa: E402

SOLVE_SECONDS = 3.0  # the surrogate is not under test here: a short solve
STALL_LIMIT_S = 0.25  # DEVELOPERS.md: the window never stalls over 250 ms
ROWS_CLICKED = 40  # rows chosen one after another, as a reviewer holding the arrow key
CLICK_EVERY_MS = 15


def run_for(seconds: float) -> None:
    loop = QEventLoop()
    QTimer.singleShot(int(1000 * seconds), loop.quit)
    loop.exec()


@pytest.fixture(scope="module")
def sklearn_model():
    import skops.io as sio

    path = sample_paths()["forest"]
    return sio.load(path, trusted=sio.get_untrusted_types(file=path))


@pytest.fixture(scope="module")
def win(qapp, settings_home):
    """The sample open in a window with the anatomy, surrogate and cases steps run."""
    w = MainWindow()
    w.confirm_close = False
    w.resize(1360, 860)
    w.show()
    assert w.open_sample(time_limit=SOLVE_SECONDS)
    assert wait_for_idle(w, 120)
    assert w.run_steps(["anatomy", "surrogate", "cases"])
    assert wait_for_idle(w, 180)
    assert w.problems == []
    assert w.review.cases.effects is not None
    if not w.review.cases.disagreements.size:
        pytest.skip("the surrogate agrees with the ensemble on every row")
    yield w
    w.close()


def shown_row(page, row: int):
    """Choose ``row`` on the Cases page and wait until its contributions are on it."""
    assert page.select_row(row)
    assert page.window_.wait_until_prepared(page, 30)
    assert page.shown_contributions is not None and page.shown_contributions[0] == row
    return page.shown_contributions[1]


def test_a_disagreement_row_shows_what_drives_the_ensemble(win, sklearn_model):
    import pandas as pd

    page = win.pages["cases"]
    win.go("cases")
    r, c = win.review, win.review.cases
    X = r.case_rows()
    explained_by_step = set(np.asarray(c.effects.case_rows).tolist())
    # one row the cases step explained already, one the page works out when it is chosen
    on_demand = next(int(i) for i in c.disagreements if int(i) not in explained_by_step)
    rows = [on_demand] + ([int(c.effects.case_rows[0])] if explained_by_step else [])
    frame = pd.DataFrame(X, columns=sklearn_model.feature_names_in_)
    for row in rows:
        rc = shown_row(page, row)
        ours = contributions(r.forest, X[row:row + 1])  # the test's own run
        assert np.allclose(rc.values, ours.values[0], rtol=0, atol=1e-12)
        assert np.allclose(rc.base, ours.base, rtol=0, atol=1e-12)
        # outside reference: scikit-learn's predict_proba; the contributions add up to it
        # (the efficiency property of Shapley values; Lundberg, Erion, Lee 2018)
        proba = sklearn_model.predict_proba(frame.iloc[row:row + 1])[0]
        assert np.allclose(rc.base + rc.values.sum(axis=0), proba, rtol=0, atol=1e-9)
        # outside reference: the base value of path-dependent TreeSHAP is each tree's expected
        # value, its root node's class shares in scikit-learn's tree_.value, averaged
        roots = np.mean([t.tree_.value[0, 0] / t.tree_.value[0, 0].sum()
                         for t in sklearn_model.estimators_], axis=0)
        assert np.allclose(rc.base, roots, rtol=0, atol=1e-9)
        e, s = int(c.ensemble[row]), int(c.surrogate[row])
        assert e != s
        text = page.drive_html
        cls = [str(k) for k in r.forest.classes_]
        assert (f"The surrogate says {cls[s]}, the ensemble {cls[e]}.</b></span> "
                "What drives the ensemble here") in text
        v = ours.values[0][:, e]  # an averaging forest: the probability of its own class
        assert ours.output == "probability" and f"P({cls[e]})" in text
        assert f">{ours.base[e]:.4f}<" in text
        assert f"<b>{ours.explained[0, e]:.4f}</b>" in text
        assert abs(ours.explained[0, e] - proba[e]) < 1e-9
        top = np.argsort(-np.abs(v), kind="stable")[:cases_page.CONTRIBUTIONS_SHOWN]
        for j in top:
            name = r.forest.feature_names[j]
            assert (f"<td nowrap>{name}</td><td nowrap align='right'>"
                    f"{value_text(r.forest, int(j), float(X[row, j]))}</td>"
                    f"<td nowrap align='right'>{v[j]:+.4f}</td>") in text
        rest = np.setdiff1d(np.arange(v.size), top)
        assert f"{v[rest].sum():+.4f}" in text
        # the plain sentence names the largest contributions towards the ensemble's class
        toward = [j for j in np.argsort(-v, kind="stable") if v[j] > 0][:3]
        for j in toward:
            assert f"<b>{r.forest.feature_names[j]}</b> = " in text


def test_choosing_rows_quickly_never_stalls_the_window(win, monkeypatch):
    page = win.pages["cases"]
    win.go("cases")
    r, c = win.review, win.review.cases
    X = r.case_rows()
    agree = np.flatnonzero(c.surrogate == c.ensemble)
    probe = TickProbe()
    order = np.concatenate([c.disagreements, agree])
    measured = {}
    # as the page decides (at once when a row was quick, else in a worker), then every row
    # in a worker (a forest whose rows take long)
    for label, limit in (("as it comes", cases_page.INLINE_LIMIT_S),
                         ("every row in a worker", 0.0)):
        monkeypatch.setattr(cases_page, "INLINE_LIMIT_S", limit)
        page._forget_contributions()  # nothing explained yet: each row is worked out anew
        start = len(measured) * ROWS_CLICKED
        rows = [int(i) for i in order[start:start + ROWS_CLICKED]]
        probe.start()
        began = time.perf_counter()
        for k, row in enumerate(rows):
            QTimer.singleShot(CLICK_EVERY_MS * k, lambda row=row: page.select_row(row))
        run_for(CLICK_EVERY_MS * len(rows) / 1000 + 0.1)
        assert win.wait_until_prepared(page, 30)
        run_for(0.1)
        probe.stop()
        seconds = [rc.seconds for rc in page._explained.values() if rc.seconds is not None]
        measured[label] = (probe.max_gap(began, time.perf_counter()), seconds)
        # the row chosen last is the one shown, with its own numbers
        assert page.shown_contributions[0] == rows[-1]
        ours = contributions(r.forest, X[rows[-1]:rows[-1] + 1])
        assert np.allclose(page.shown_contributions[1].values, ours.values[0], rtol=0,
                           atol=1e-12)
    print("\nmeasured: " + "; ".join(
        f"{label}: longest stall {1000 * gap:.0f} ms, {len(s)} rows worked out, median "
        f"{1000 * np.median(s):.1f} ms, longest {1000 * max(s):.1f} ms"
        for label, (gap, s) in measured.items()))
    for gap, _seconds in measured.values():
        assert gap < STALL_LIMIT_S


def test_the_anatomy_page_lists_mean_contribution_importance(win, sklearn_model):
    page = win.pages["anatomy"]
    win.go("anatomy")
    assert win.wait_until_prepared(page, 60)
    eff = win.review.cases.effects
    table = page.measures
    assert page.measures_card.isVisible() and table.rowCount() == len(eff.importance)
    names = [table.item(i, 0).data(Qt.ItemDataRole.UserRole) for i in range(table.rowCount())]
    assert names == eff.ranking()
    names_in = list(sklearn_model.feature_names_in_)
    for i, name in enumerate(names):
        assert table.item(i, 3).text() == f"{eff.importance[name]:.4g} (#{i + 1})"
        # outside reference: scikit-learn's feature_importances_ (mean decrease in impurity)
        imp = sklearn_model.feature_importances_[names_in.index(name)]
        assert table.item(i, 1).text().startswith(f"{imp:.4f} (#")
    shown = [float(table.item(i, 3).text().split()[0]) for i in range(table.rowCount())]
    assert shown == sorted(shown, reverse=True)
    # the effect curves: a panel per curve, and each surrogate cut's sentence beneath
    fig = page.curves_view.figure
    assert fig is not None
    titles = " ".join(ax.get_title(loc="left") for ax in fig.axes)
    for curve in eff.curves:
        assert curve.feature in titles
    statements = [cut.statement for curve in eff.curves for cut in curve.cuts]
    assert statements, "the sample's surrogate cuts one of the top features"
    for statement in statements:
        assert statement in page.cut_sentences.text()
    # hovering a bar of the importance figure tells the third measure too
    first = page.views["importance"].figure.axes[0]
    ticks = [t.get_text() for t in first.get_yticklabels()]
    row = next(i for i, t in enumerate(ticks) if t.endswith(names[0]))
    event = type("E", (), {"inaxes": first, "ydata": float(row), "xdata": 0.1})()
    assert f"mean |contribution| {eff.importance[names[0]]:.4g} (rank 1)" in \
        page.views["importance"].hover(event)


def test_the_surrogate_page_shows_the_pairs_beside_the_surrogates(win):
    page = win.pages["surrogate"]
    win.go("surrogate")
    eff = win.review.cases.effects
    est = win.review.surrogate.surrogate
    assert page.pairs_card.isVisible()
    assert page.pair_statement.text() == eff.pair_statement
    table = page.pairs
    pairs = [table.item(i, 1).text() for i in range(table.rowCount())]
    assert pairs[:len(eff.pairs)] == [f"{p.first} & {p.second}" for p in eff.pairs]
    # the pairs marked as one surrogate split are those the estimator's own rules hold
    names = list(est.feature_names_)
    theirs = {frozenset(names[f] for f in pair)
              for rule in est.rules_list_ for pair in
              [(a, b) for i, a in enumerate(rule.features) for b in rule.features[i + 1:]]}
    marked = {frozenset(table.item(i, 1).text().split(" & ")) for i in range(table.rowCount())
              if table.item(i, 3).text() == "yes"}
    assert marked == theirs


def test_a_boosted_rows_contributions_read_as_margin_with_category_names():
    """The same panel for a boosted model on a table with categorical columns: the output is
    the margin (log-odds), a category shows by its name, and the numbers are XGBoost's own."""
    import re

    import xgboost as xgb
    from test_categorical_models import BAND, _codes, _table, _typed_dmatrix

    import grovewise as gw

    X, y = _table("breast_cancer")  # Wolberg et al., UCI; bundled with scikit-learn
    model = xgb.XGBClassifier(n_estimators=25, max_depth=4, tree_method="hist",
                              enable_categorical=True, max_cat_to_onehot=1, random_state=0,
                              n_jobs=1).fit(X, y)
    forest = gw.from_estimator(model)
    A = _codes(X, forest.categories)
    # a row whose band weighs among its largest contributions, so the panel shows its name
    c = contributions(forest, A)
    rank = np.argsort(np.argsort(-np.abs(c.values[:, :, 0]), axis=1), axis=1)[:, BAND]
    row = int(np.flatnonzero((rank < 3) & ~np.isnan(A[:, BAND]))[0])
    rc = cases_page.explain_row(forest, A[row])
    # outside reference: XGBoost's own TreeSHAP (pred_contribs; float32 there)
    ref = model.get_booster().predict(_typed_dmatrix(A[row:row + 1], forest),
                                      pred_contribs=True)[0]
    p = forest.n_features
    assert rc.output == "margin" and rc.output_names == ["margin(1)"]
    np.testing.assert_allclose(rc.values[:, 0], ref[:p], rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(rc.base[0], ref[p], rtol=1e-5, atol=1e-6)
    # outside reference: the explained margin is XGBoost's raw output for the row
    margin = model.get_booster().predict(_typed_dmatrix(A[row:row + 1], forest),
                                         output_margin=True)[0]
    assert abs(rc.explained[0] - margin) < 1e-5
    e = int(margin > 0)
    text = cases_page.contributions_html(forest, A[row], rc, e, 1 - e)
    band = forest.category_name(BAND, A[row, BAND])
    assert band in X["band"].cat.categories  # a name, not a code
    assert (f"<td nowrap>band</td><td nowrap align='right'>{band}</td>"
            f"<td nowrap align='right'>{rc.values[BAND, 0]:+.4f}</td>") in text
    towards = "positive" if e == 1 else "negative"
    assert (f"margin(1), log-odds before the logistic (the ensemble says "
            f"{forest.classes_[e]} here: {towards} contributions push towards it)") in text
    assert f"<b>{rc.explained[0]:.4f}</b>" in text
    # the plain sentence lists contributions towards the ensemble's class only
    lead = text.split("away from it")[0]
    shown = [float(v) for v in re.findall(r"\(([+-]\d\.\d{4})\)", lead)]
    assert shown and all((v > 0) == (e == 1) for v in shown)
