"""Fidelity per group of one column (analysis/group_fidelity.py), checked against pandas
group counts and scipy's Wilson interval."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binomtest

from grovewise.analysis.group_fidelity import group_fidelity
from grovewise.errors import DataError, SettingError


def _agreement(rng, n, rates):
    """Per tree, a boolean per row, true with the tree's rate."""
    return {t: rng.random(n) < p for t, p in rates.items()}


def _reference(keys: pd.Series, agree: dict, rows) -> pd.DataFrame:
    """Rows, agreeing rows, fidelity and the Wilson interval per group, by pandas and scipy."""
    frame = pd.DataFrame({"key": keys.to_numpy(),
                          **{t: a[rows].astype(int) for t, a in agree.items()}})
    out = frame.groupby("key", observed=True, dropna=False).agg(
        rows=("key", "size"), **{t: (t, "sum") for t in agree})
    for t in agree:
        out[f"{t}_fidelity"] = out[t] / out["rows"]
        ci = [binomtest(int(k), int(n)).proportion_ci(confidence_level=0.95, method="wilson")
              for k, n in zip(out[t], out["rows"])]
        out[f"{t}_low"] = [c.low for c in ci]
        out[f"{t}_high"] = [c.high for c in ci]
    return out


def _assert_matches(result, reference: pd.DataFrame, labels: list[str]) -> None:
    assert [g.label for g in result.groups] == labels and len(reference) == len(labels)
    for g, (_key, ref) in zip(result.groups, reference.iterrows()):
        assert g.rows == ref["rows"]
        for t in result.trees:
            assert g.agreeing[t] == ref[t]
            assert g.fidelity[t] == pytest.approx(ref[f"{t}_fidelity"], abs=1e-15)
            assert g.interval[t][0] == pytest.approx(ref[f"{t}_low"], abs=1e-12)
            assert g.interval[t][1] == pytest.approx(ref[f"{t}_high"], abs=1e-12)


def test_quantile_bins_match_pandas_groups_and_scipy_wilson_interval():
    # Reference: the bins recomputed here from np.quantile (numpy's default linear method,
    # Hyndman & Fan 1996 definition 7), rows grouped by pandas' cut and groupby, and each
    # interval from scipy's binomtest(k, n).proportion_ci(method="wilson") (Wilson 1927).
    rng = np.random.default_rng(7)
    n = 900
    age = rng.integers(18, 93, n).astype(float) + rng.choice([0.0, 0.5], n)
    agree = _agreement(rng, n, {"surrogate": 0.93, "greedy": 0.86})
    hold = np.sort(rng.permutation(n)[:500])
    result = group_fidelity(age, agree, name="age_years", rows=hold)
    edges = np.unique(np.quantile(age[hold], np.linspace(0, 1, 6)))
    assert result.grouping == "quantile bins" and result.edges == pytest.approx(edges.tolist())
    assert len(edges) == 6
    # Left-closed bins, the last one also closed on the right.
    keys = pd.cut(pd.Series(age[hold]), list(edges[:-1]) + [np.inf], right=False)
    ref = _reference(keys, agree, hold)
    assert int(ref["rows"].sum()) == 500
    labels = [f"{_text(lo)} to {_text(hi)}" for lo, hi in zip(edges[:-1], edges[1:])]
    _assert_matches(result, ref, labels)


def _text(v: float) -> str:
    return str(int(v)) if float(v).is_integer() else f"{v:.3g}"


def test_bin_labels_of_a_known_column():
    # Reference: by hand, the 0/20/40/60/80/100% quantiles of 0..99 under numpy's linear
    # method are (n - 1) * p = 0, 19.8, 39.6, 59.4, 79.2 and 99; each bin then has 20 rows.
    x = np.arange(100.0)
    result = group_fidelity(x, {"surrogate": x < 90}, name="x", min_rows=20)
    assert [g.label for g in result.groups] == ["0 to 19.8", "19.8 to 39.6", "39.6 to 59.4",
                                                "59.4 to 79.2", "79.2 to 99"]
    assert [g.rows for g in result.groups] == [20, 20, 20, 20, 20]
    # 80..89 agree, 90..99 do not: the last bin has 10 of 20.
    assert [g.fidelity["surrogate"] for g in result.groups] == [1, 1, 1, 1, 0.5]


def test_strings_with_categories_missing_and_few_values_are_their_own_groups():
    # Reference: pandas' groupby over the values themselves (missing values as their own key,
    # dropna=False) and scipy's Wilson interval, as above.
    rng = np.random.default_rng(3)
    n = 400
    agree = _agreement(rng, n, {"surrogate": 0.9, "greedy": 0.8})
    everything = np.arange(n)

    region = rng.choice(["north", "south", "east", "west"], n).astype(object)
    region[rng.random(n) < 0.05] = None
    result = group_fidelity(region, agree, name="region")
    ref = _reference(pd.Series(region).fillna("~missing"), agree, everything)
    _assert_matches(result, ref, ["east", "north", "south", "west", "missing"])

    # Integer codes named by the column's categories: in code order, not name order.
    codes = rng.integers(0, 3, n).astype(float)
    codes[:7] = np.nan
    result = group_fidelity(codes, agree, name="plan", categories=["silver", "gold", "bronze"])
    ref = _reference(pd.Series(codes).fillna(99), agree, everything)
    _assert_matches(result, ref, ["silver", "gold", "bronze", "missing"])
    assert result.groups[-1].rows == 7

    # A numeric column with NaN: the missing rows are their own group, after the bins.
    income = rng.lognormal(10, 0.5, n)
    income[rng.random(n) < 0.1] = np.nan
    result = group_fidelity(income, agree, name="income")
    present = ~np.isnan(income)
    edges = np.unique(np.quantile(income[present], np.linspace(0, 1, 6)))
    keys = pd.cut(pd.Series(income), list(edges[:-1]) + [np.inf], right=False)
    keys = keys.cat.add_categories(["~missing"]).fillna("~missing")
    ref = _reference(keys, agree, everything)
    assert result.groups[-1].label == "missing"
    assert result.groups[-1].rows == int(np.isnan(income).sum())
    _assert_matches(result, ref, [g.label for g in result.groups])
    # Incomes above 1000 are shown whole, not as 3 significant digits in e-notation.
    assert "e+" not in result.groups[0].label

    # Three distinct numbers (at most max_bins): each value is a group, no bins.
    dose = rng.choice([0.5, 1.0, 2.25], n)
    result = group_fidelity(dose, agree, name="dose")
    assert result.grouping == "values" and result.edges is None
    _assert_matches(result, _reference(pd.Series(dose), agree, everything),
                    ["0.5", "1", "2.25"])


def test_ties_merge_equal_quantile_edges_into_fewer_bins():
    # Reference: np.unique of np.quantile's edges, rows grouped by pandas as above; and by
    # hand: 250 zeros and 1..250 (500 rows) have the 0, 20 and 40% quantiles 0 and, at
    # positions 299.4, 399.2 and 499 of the sorted rows, 50.4, 150.2 and 250 (numpy's linear
    # method): five bins become three.
    rng = np.random.default_rng(11)
    visits = rng.permutation(np.concatenate([np.zeros(250), np.arange(1.0, 251.0)]))
    agree = _agreement(rng, visits.size, {"surrogate": 0.9})
    result = group_fidelity(visits, agree, name="visits")
    edges = np.unique(np.quantile(visits, np.linspace(0, 1, 6)))
    assert edges.tolist() == pytest.approx([0, 50.4, 150.2, 250])
    keys = pd.cut(pd.Series(visits), list(edges[:-1]) + [np.inf], right=False)
    ref = _reference(keys, agree, np.arange(visits.size))
    _assert_matches(result, ref, ["0 to 50.4", "50.4 to 150", "150 to 250"])
    # Zeros and 1..50; 51..150; 151..250 (the last bin holds its upper edge).
    assert [g.rows for g in result.groups] == [300, 100, 100]


def _counted(groups: dict[str, tuple[int, int, int]]):
    """A column and two trees' agreement with given rows and agreeing rows per group."""
    values, sur, gre = [], [], []
    for label, (n, k_sur, k_gre) in groups.items():
        values += [label] * n
        sur += [True] * k_sur + [False] * (n - k_sur)
        gre += [True] * k_gre + [False] * (n - k_gre)
    return np.array(values, dtype=object), {"surrogate": np.array(sur), "greedy": np.array(gre)}


def test_small_groups_are_left_out_of_the_gap_and_the_sentence_names_it():
    # Reference: the counts are set by hand; shares and gaps computed by hand below.
    values, agree = _counted({"A": (100, 90, 80), "B": (50, 49, 45), "C": (10, 0, 10),
                              "D": (5, 5, 0), "E": (400, 380, 300)})
    result = group_fidelity(values, agree, name="branch", min_rows=30)
    assert [g.too_small for g in result.groups] == [False, False, True, True, False]
    # Surrogate: A 90%, B 98%, E 95% (C's 0% and D's 100% are too small to count).
    sur = result.gaps["surrogate"]
    assert (sur.low_label, sur.high_label) == ("A", "B")
    assert sur.gap == pytest.approx(0.98 - 0.90)
    # Greedy: A 80%, B 90%, E 75%.
    gre = result.gaps["greedy"]
    assert (gre.low_label, gre.high_label) == ("E", "B")
    assert gre.gap == pytest.approx(0.90 - 0.75)
    assert result.sentence() == (
        "By branch, the surrogate's fidelity ranges from 90.0% (A, 100 rows) to 98.0% "
        "(B, 50 rows): a gap of 8.0 points; the greedy tree's from 75.0% (E, 400 rows) to "
        "90.0% (B, 50 rows): a gap of 15.0 points. 2 groups have fewer than 30 rows and are "
        "too small to judge.")


def test_fewer_than_two_groups_large_enough_says_so():
    # Reference: the counts are set by hand.
    values, agree = _counted({"A": (100, 90, 80), "B": (20, 19, 18)})
    result = group_fidelity(values, agree, name="branch", min_rows=30)
    assert result.gaps == {"surrogate": None, "greedy": None}
    assert result.sentence() == (
        "By branch, only one group (A, 100 rows) has at least 30 rows, so no gap between "
        "groups can be judged. 1 group has fewer than 30 rows and is too small to judge.")
    result = group_fidelity(values, agree, name="branch", min_rows=200)
    assert result.sentence().startswith("By branch, no group has at least 200 rows")


def test_to_dict_holds_plain_values_only():
    # Reference: JSON's own types (common practice, no source): the dict survives a round trip.
    values, agree = _counted({"A": (100, 90, 80), "B": (50, 49, 45)})
    d = group_fidelity(values, agree, name="branch").to_dict()
    assert json.loads(json.dumps(d)) == d
    assert d["gaps"]["surrogate"]["gap"] == pytest.approx(0.08)
    ci = binomtest(90, 100).proportion_ci(method="wilson")  # scipy's Wilson interval
    assert d["groups"][0]["interval"]["surrogate"] == pytest.approx([ci.low, ci.high], abs=1e-12)


def test_bad_inputs_name_the_column_or_setting():
    # Reference: the project's rule that every bad input names its column or setting.
    values, agree = _counted({"A": (40, 30, 30), "B": (40, 30, 30)})
    short = {"surrogate": agree["surrogate"][:-1]}
    with pytest.raises(DataError, match="column branch has 80 values .*'surrogate'"):
        group_fidelity(values, short, name="branch")
    with pytest.raises(DataError, match="no rows selected for the groups of branch"):
        group_fidelity(values, agree, name="branch", rows=np.array([], dtype=int))
    with pytest.raises(DataError, match="rows for branch include numbers outside 0 to 79"):
        group_fidelity(values, agree, name="branch", rows=[3, 80])
    with pytest.raises(SettingError, match="max_bins must be .* at least 2 .*branch"):
        group_fidelity(values, agree, name="branch", max_bins=1)
    with pytest.raises(SettingError, match="at least one tree"):
        group_fidelity(values, {}, name="branch")
    with pytest.raises(DataError, match="'greedy' .*branch.* boolean"):
        group_fidelity(values, {"greedy": np.full(80, 0.5)}, name="branch")
    with pytest.raises(DataError, match="column plan holds 3.0, which is not one of the codes"):
        group_fidelity(np.array([0.0, 1.0, 3.0]), {"surrogate": np.ones(3, bool)},
                       name="plan", categories=["silver", "gold"])
