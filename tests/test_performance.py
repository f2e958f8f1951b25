"""The model's performance on review data (analysis/performance.py), against references."""

import json
import math

import numpy as np
import pytest
import sklearn
from sklearn.calibration import calibration_curve
from sklearn.datasets import load_breast_cancer, load_wine
from sklearn.ensemble import RandomForestClassifier
from sklearn.metrics import brier_score_loss, confusion_matrix, roc_auc_score
from sklearn.model_selection import train_test_split

from grovewise.analysis.performance import PERFORMANCE_CAUTION, model_performance
from grovewise.errors import DataError, SettingError

Z = 1.959964


def _forest_rows(load):
    """Held-out labels (as class names), probabilities and classes of a small random forest."""
    data = load()
    X_a, X_b, y_a, y_b = train_test_split(data.data, data.target, test_size=0.4,
                                          random_state=0, stratify=data.target)
    model = RandomForestClassifier(n_estimators=30, random_state=0).fit(X_a, y_a)
    return data.target_names[y_b], model.predict_proba(X_b), data.target_names


@pytest.fixture(scope="module")
def binary_rows():
    return _forest_rows(load_breast_cancer)


@pytest.fixture(scope="module")
def wine_rows():
    return _forest_rows(load_wine)


def _delong_reference(scores, positive):
    """DeLong et al. (1988), Biometrics 44:837-845, written out directly: the structural
    components of the Mann-Whitney kernel psi over all positive/negative pairs, O(n^2)."""
    x, y = scores[positive], scores[~positive]
    m, n = len(x), len(y)
    psi = (x[:, None] > y[None, :]) + 0.5 * (x[:, None] == y[None, :])
    auc = psi.mean()
    v10 = psi.mean(axis=1)  # one component per positive
    v01 = psi.mean(axis=0)  # one component per negative
    s10 = np.sum((v10 - auc) ** 2) / (m - 1)
    s01 = np.sum((v01 - auc) ** 2) / (n - 1)
    return auc, s10 / m + s01 / n


def _synthetic_binary(n=200, decimals=None, seed=1):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 2, size=n)
    p1 = 1 / (1 + np.exp(-(1.2 * y - 0.6 + rng.normal(size=n))))
    if decimals is not None:
        p1 = np.round(p1, decimals)
    return y, np.column_stack([1 - p1, p1])


# --- scikit-learn as reference ------------------------------------------------------------

def test_binary_matches_sklearn(binary_rows):
    # References: sklearn.metrics roc_auc_score, brier_score_loss, confusion_matrix and
    # sklearn.calibration calibration_curve(strategy="uniform") on the same rows.
    y, proba, classes = binary_rows
    result = model_performance(y, proba, classes, bins=10)
    positive = classes[1]
    assert result.n_rows == len(y)
    assert result.classes == [str(c) for c in classes]
    assert result.positive_class == positive
    assert result.roc_auc == pytest.approx(roc_auc_score(y == positive, proba[:, 1]), abs=1e-12)
    assert result.roc_auc_method == "DeLong"
    assert result.brier == pytest.approx(brier_score_loss(y == positive, proba[:, 1]), abs=1e-12)
    expected = confusion_matrix(y, classes[np.argmax(proba, axis=1)], labels=classes)
    np.testing.assert_array_equal(result.confusion, expected)
    assert result.accuracy == pytest.approx(np.trace(expected) / len(y))
    prob_true, prob_pred = calibration_curve(y == positive, proba[:, 1], n_bins=10,
                                             strategy="uniform")
    np.testing.assert_allclose([b.observed_share for b in result.reliability], prob_true)
    np.testing.assert_allclose([b.mean_predicted for b in result.reliability], prob_pred)
    assert sum(b.count for b in result.reliability) == len(y)
    for b in result.reliability:  # each bin holds exactly its rows: (lower, upper], first [0, .]
        inside = (proba[:, 1] <= b.upper) & ((proba[:, 1] > b.lower) | (b.lower == 0.0))
        assert b.count == int(inside.sum())


def test_three_classes_match_sklearn(wine_rows):
    # References: roc_auc_score(multi_class="ovr", average="macro"), confusion_matrix,
    # calibration_curve on (max probability, argmax right); the multi-class Brier score by
    # its definition (Brier 1950) and, from scikit-learn 1.7, brier_score_loss with labels.
    y, proba, classes = wine_rows
    result = model_performance(y, proba, classes, n_boot=200, bins=5)
    assert result.positive_class is None
    assert result.roc_auc == pytest.approx(
        roc_auc_score(y, proba, multi_class="ovr", average="macro", labels=classes), abs=1e-12)
    assert result.roc_auc_method == "bootstrap"
    onehot = (y[:, None] == classes[None, :]).astype(float)
    assert result.brier == pytest.approx(np.mean(np.sum((proba - onehot) ** 2, axis=1)))
    assert "multi-class" in result.brier_definition
    if tuple(int(v) for v in sklearn.__version__.split(".")[:2]) >= (1, 7):
        assert result.brier == pytest.approx(brier_score_loss(y, proba, labels=classes))
    predicted = classes[np.argmax(proba, axis=1)]
    np.testing.assert_array_equal(result.confusion, confusion_matrix(y, predicted, labels=classes))
    prob_true, prob_pred = calibration_curve(predicted == y, proba.max(axis=1), n_bins=5,
                                             strategy="uniform")
    np.testing.assert_allclose([b.observed_share for b in result.reliability], prob_true)
    np.testing.assert_allclose([b.mean_predicted for b in result.reliability], prob_pred)
    assert "confidence calibration" in result.reliability_definition


def test_argmax_ties_go_to_first_class():
    # Reference: numpy argmax (first of equal maxima), the model's own rule.
    y = np.array(["a", "b", "b", "a"])
    proba = np.array([[0.5, 0.5], [0.5, 0.5], [0.2, 0.8], [0.9, 0.1]])
    result = model_performance(y, proba, ["a", "b"])
    np.testing.assert_array_equal(result.confusion, [[2, 0], [1, 1]])
    assert result.accuracy == 0.75


# --- DeLong's interval ----------------------------------------------------------------------

@pytest.mark.parametrize("decimals", [None, 1, 2])
def test_delong_matches_quadratic_reference(decimals):
    # Reference: _delong_reference above (DeLong et al. 1988, all pairs); decimals=1 and 2 round
    # the probabilities so many scores tie, which the midranks (Sun & Xu 2014) must handle.
    y, proba = _synthetic_binary(decimals=decimals)
    if decimals == 1:
        assert len(np.unique(proba[:, 1])) <= 11
    auc_ref, var_ref = _delong_reference(proba[:, 1], y == 1)
    result = model_performance(y, proba, [0, 1])
    assert result.roc_auc == pytest.approx(auc_ref, abs=1e-12)
    assert result.roc_auc == pytest.approx(roc_auc_score(y, proba[:, 1]), abs=1e-12)
    assert result.roc_auc_variance == pytest.approx(var_ref, rel=1e-10)
    half = Z * math.sqrt(var_ref)
    low, high = result.roc_auc_interval
    assert low == pytest.approx(max(0.0, auc_ref - half), abs=1e-6)
    assert high == pytest.approx(min(1.0, auc_ref + half), abs=1e-6)


def test_delong_interval_is_clipped_to_one():
    # Reference: the quadratic DeLong formula; a nearly separated sample reaches past 1.
    rng = np.random.default_rng(3)
    y = np.r_[np.zeros(30, int), np.ones(30, int)]
    p1 = np.clip(np.r_[rng.uniform(0, 0.55, 30), rng.uniform(0.45, 1, 30)], 0, 1)
    auc_ref, var_ref = _delong_reference(p1, y == 1)
    assert auc_ref + Z * math.sqrt(var_ref) > 1
    result = model_performance(y, np.column_stack([1 - p1, p1]), [0, 1])
    assert result.roc_auc_interval[1] == 1.0
    assert result.roc_auc_interval[0] == pytest.approx(auc_ref - Z * math.sqrt(var_ref),
                                                       abs=1e-6)


# --- bootstrap for more classes -------------------------------------------------------------

def test_bootstrap_is_reproducible_and_holds_the_auc(wine_rows):
    # Reference: the point AUC (roc_auc_score, macro one-vs-rest) and the same seed twice.
    y, proba, classes = wine_rows
    first = model_performance(y, proba, classes, seed=7, n_boot=300)
    again = model_performance(y, proba, classes, seed=7, n_boot=300)
    other = model_performance(y, proba, classes, seed=8, n_boot=300)
    assert first.roc_auc_interval == again.roc_auc_interval
    assert first.roc_auc_interval != other.roc_auc_interval
    low, high = first.roc_auc_interval
    assert 0.0 <= low <= first.roc_auc <= high <= 1.0
    assert 0 < first.roc_auc_resamples <= 300


def test_bootstrap_skips_resamples_missing_a_class():
    # Reference: with one row of class "c" in 20, a resample misses it with probability
    # (19/20)^20 = 0.36, so about a third of 400 resamples are skipped.
    rng = np.random.default_rng(0)
    y = np.array(["a"] * 10 + ["b"] * 9 + ["c"])
    proba = rng.dirichlet([1, 1, 1], size=20)
    result = model_performance(y, proba, ["a", "b", "c"], seed=0, n_boot=400)
    assert 200 < result.roc_auc_resamples < 320
    low, high = result.roc_auc_interval
    assert low <= high


# --- missing classes, output types, text --------------------------------------------------

def test_absent_class_gives_no_auc_with_reason():
    y = np.array(["a", "a", "b", "b"])
    proba = np.array([[0.7, 0.2, 0.1], [0.5, 0.3, 0.2], [0.2, 0.6, 0.2], [0.3, 0.4, 0.3]])
    result = model_performance(y, proba, ["a", "b", "c"])
    assert result.roc_auc is None and result.roc_auc_interval is None
    assert "'c'" in result.roc_auc_note
    assert "not available" in result.text()
    binary = model_performance(["a", "a"], [[0.6, 0.4], [0.9, 0.1]], ["a", "b"])
    assert binary.roc_auc is None and "'b'" in binary.roc_auc_note
    assert binary.brier == pytest.approx((0.4 ** 2 + 0.1 ** 2) / 2)


def test_separated_classes_say_the_interval_has_no_width():
    # Reference: the quadratic DeLong formula gives variance 0 when every positive outranks
    # every negative.
    y = np.array([0, 0, 0, 1, 1, 1])
    p1 = np.array([0.1, 0.2, 0.3, 0.7, 0.8, 0.9])
    assert _delong_reference(p1, y == 1) == (1.0, 0.0)
    result = model_performance(y, np.column_stack([1 - p1, p1]), [0, 1])
    assert result.roc_auc_interval == (1.0, 1.0) and result.roc_auc_variance == 0.0
    assert "no width" in result.roc_auc_note
    assert len(result.text().splitlines()) == 3


def test_one_row_of_a_class_gives_auc_without_interval():
    # DeLong's variance needs two rows of each class (sample variances).
    result = model_performance([0, 0, 1], [[0.8, 0.2], [0.4, 0.6], [0.3, 0.7]], [0, 1])
    assert result.roc_auc == pytest.approx(1.0)
    assert result.roc_auc_interval is None and "two rows" in result.roc_auc_note


def test_to_dict_is_plain_and_text_reads(binary_rows):
    y, proba, classes = binary_rows
    result = model_performance(y, proba, classes)
    d = result.to_dict()
    assert json.loads(json.dumps(d)) == d  # only plain types survive the round trip unchanged

    def plain(value):
        if isinstance(value, dict):
            return all(isinstance(k, str) and plain(v) for k, v in value.items())
        if isinstance(value, list):
            return all(plain(v) for v in value)
        return value is None or type(value) in (str, int, float, bool)

    assert plain(d)
    assert d["caution"] == PERFORMANCE_CAUTION and "not the model's validation" in d["caution"]
    lines = result.text().splitlines()
    assert 2 <= len(lines) <= 4
    low, high = result.roc_auc_interval
    assert lines[0].startswith(f"ROC AUC {result.roc_auc:.3f} (95% interval {low:.3f} to "
                               f"{high:.3f}, DeLong) on {len(y):,} rows; Brier score ")
    assert f"accuracy {100 * result.accuracy:.1f}% at the model's own rule" in lines[0]


# --- bad input ------------------------------------------------------------------------------

GOOD_Y = ["a", "b", "a", "b"]
GOOD_P = [[0.8, 0.2], [0.3, 0.7], [0.6, 0.4], [0.1, 0.9]]


@pytest.mark.parametrize("y, proba, classes, words", [
    (GOOD_Y[:3], GOOD_P, ["a", "b"], "3 rows but proba has 4"),
    (GOOD_Y, [[0.8, 0.3], [0.3, 0.7], [0.6, 0.4], [0.1, 0.9]], ["a", "b"], "do not sum to 1"),
    (GOOD_Y, [[0.8, 0.2], [np.nan, 0.7], [0.6, 0.4], [0.1, 0.9]], ["a", "b"], "NaN"),
    (["a", None, "a", "b"], GOOD_P, ["a", "b"], "missing value"),
    ([0.0, np.nan, 1.0, 1.0], GOOD_P, [0, 1], "missing value"),
    (["a", "b", "a", "x"], GOOD_P, ["a", "b"], "not among the model's classes ('x')"),
    (["a"], [[0.8, 0.2]], ["a", "b"], "at least 2 rows"),
    (GOOD_Y, [[1.2, -0.2], [0.3, 0.7], [0.6, 0.4], [0.1, 0.9]], ["a", "b"], "outside 0 to 1"),
    (GOOD_Y, GOOD_P, ["a", "b", "c"], "3 classes"),
    (GOOD_Y, [[1.0], [1.0], [1.0], [1.0]], ["a"], "at least two classes"),
    (GOOD_Y, GOOD_P, ["a", "a"], "appears twice"),
])
def test_bad_input_raises_data_error(y, proba, classes, words):
    with pytest.raises(DataError) as info:
        model_performance(y, proba, classes)
    assert words in str(info.value)


@pytest.mark.parametrize("setting", [{"n_boot": 0}, {"bins": 0}, {"bins": 2.5}])
def test_bad_setting_raises_setting_error(setting):
    with pytest.raises(SettingError):
        model_performance(GOOD_Y, GOOD_P, ["a", "b"], **setting)
