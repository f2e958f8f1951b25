"""The window runs the stability of the rules and a second model as review steps, offscreen:
the Surrogate page's stability card shows the step's own figures (its tables equal
``RuleStability.to_rows``), and a model compared on the Anatomy page becomes the review's
second model, saved with it (the agreement counted again from XGBoost's own ``predict``).
"""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("pytestqt")

from test_app_window import settings_home  # noqa: E402,F401 (a fixture)

from grovewise.app.launch import wait_for_idle  # noqa: E402
from grovewise.app.main_window import MainWindow  # noqa: E402
from grovewise.review import Review, ReviewInputs, ReviewSettings  # noqa: E402
from grovewise.sample_data import sample_paths  # noqa: E402


@pytest.fixture(scope="module")
def win(qapp, settings_home):  # noqa: F811
    paths = sample_paths()
    review = Review(ReviewInputs(paths["forest"], paths["data"], target=paths["target"]),
                    ReviewSettings(time_limit=2.0, permutation_repeats=1, permutation_rows=300,
                                   proximity_rows=300, effects_rows=100, interaction_rows=20,
                                   stability_resamples=3, stability_time_limit=0.5, seed=3))
    review.run(steps=("intake", "anatomy", "proximity", "surrogate", "cases"))
    w = MainWindow(review)
    w.confirm_close = False
    w.resize(1360, 860)
    w.show()
    yield w
    w.close()


def test_the_stability_card_runs_the_step_and_shows_its_figures(win, tmp_path):
    page = win.pages["surrogate"]
    win.go("surrogate")
    assert win.review.stability is None
    assert "Not measured yet" in page.stability_text.text()
    page.stability_button.click()
    assert wait_for_idle(win, 120)
    stab = win.review.stability
    assert stab is not None and stab.resamples == 3 and win.problems == []
    for name, table in page.stability_tables.items():
        shown = [[table.item(i, c).text() for c in range(table.columnCount())]
                 for i in range(table.rowCount())]
        assert shown == stab.to_rows(name)
    assert stab.sentence("surrogate") in page.stability_text.text()
    assert page.stability_card.grab().save(str(tmp_path / "stability.png"))


def test_a_compared_model_becomes_the_reviews_second_model(win, tmp_path, qtbot):
    import xgboost as xgb

    paths = sample_paths()
    page = win.pages["anatomy"]
    win.go("anatomy")
    assert page.compare_with(paths["xgboost"])
    # the comparison, then the second_model step it starts
    qtbot.waitUntil(lambda: win.review.second_model is not None, timeout=120_000)
    assert wait_for_idle(win, 120)
    sm = win.review.second_model
    assert sm is not None and win.problems == []
    assert win.review.inputs.second_model == paths["xgboost"]
    booster = xgb.Booster()
    booster.load_model(str(paths["xgboost"]))
    X = win.review.case_rows()
    names = list(win.review.forest.feature_names)
    order = [names.index(n) for n in booster.feature_names]
    theirs = (booster.predict(xgb.DMatrix(X[:, order], feature_names=booster.feature_names))
              > 0.5).astype(int)
    ours = win.review.forest.predict(X)
    assert int(np.trace(sm.cross)) == int(np.sum(theirs == ours))
    assert win.save_to(tmp_path / "saved")
    again = Review.open(tmp_path / "saved")
    assert again.second_model is not None and again.inputs.second_model == paths["xgboost"]


def test_the_stability_step_cancels_and_keeps_the_review(win, qtbot):
    import time

    page = win.pages["surrogate"]
    win.go("surrogate")
    before = win.review.stability
    win.review.settings.stability_resamples, win.review.settings.stability_time_limit = 8, 1.5
    try:
        page.stability_button.setEnabled(True)
        page.stability_button.click()
        qtbot.waitUntil(lambda: win.runner.busy, timeout=10_000)
        qtbot.wait(1500)
        asked = time.perf_counter()
        win.cancel()
        assert wait_for_idle(win, 60)
        assert time.perf_counter() - asked < 5.0  # the executor drops the re-fits left
    finally:
        win.review.settings.stability_resamples = 3
        win.review.settings.stability_time_limit = 0.5
    # a cancelled step keeps what the review had, and the window stays usable
    assert win.review.stability is before
    assert win.review.surrogate is not None and not win.runner.busy
