"""Fidelity per group of one column: is a tree as faithful to the ensemble for every group?

The rows are split by one column (quantile bins of a numeric column, or each value of a
categorical one, missing values apart) and each tree's fidelity (the share of rows where it
gives the ensemble's class) is counted per group, with its 95% Wilson interval. Groups with
fewer than ``min_rows`` rows are shown but too small to judge, and left out of the gap.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import DataError, SettingError
from ..plain import to_plain
from .intervals import wilson_interval

MISSING = "missing"
TREE_WORDS = {"surrogate": "the surrogate", "greedy": "the greedy tree",
              "optimal_axis": "the optimal axis-aligned tree"}


@dataclass
class RowGroup:
    """One group's rows and, per tree, its fidelity and 95% Wilson interval."""

    label: str
    rows: int
    agreeing: dict[str, int]
    fidelity: dict[str, float]
    interval: dict[str, tuple[float, float]]
    too_small: bool


@dataclass
class FidelityGap:
    """One tree's lowest and highest fidelity over the groups large enough to judge."""

    low: float
    low_label: str
    low_rows: int
    high: float
    high_label: str
    high_rows: int

    @property
    def gap(self) -> float:
        return self.high - self.low


@dataclass
class GroupFidelity:
    """Fidelity per group of the column ``name``.

    Attributes
    ----------
    name : str
        The column.
    trees : list of str
        The trees compared, in the order given.
    grouping : str
        ``"quantile bins"`` (a numeric column cut at ``edges``) or ``"values"`` (each value
        its own group).
    edges : list of float or None
        The bins' edges: bin i holds ``edges[i] <= x < edges[i + 1]``, the last also its
        upper edge. Bins no row falls in are left out.
    min_rows : int
        Groups with fewer rows are too small to judge.
    groups : list of RowGroup
        In the column's order (bins or values ascending, names as sorted or as coded), the
        missing values last.
    gaps : dict
        Per tree, its :class:`FidelityGap`, or None when fewer than two groups are large
        enough.
    """

    name: str
    trees: list[str]
    grouping: str
    edges: list[float] | None
    min_rows: int
    groups: list[RowGroup]
    gaps: dict[str, FidelityGap | None]

    def sentence(self) -> str:
        """The gaps (or why there are none) and the groups too small to judge, in words."""
        judged = [g for g in self.groups if not g.too_small]
        if len(judged) >= 2:
            parts = [_gap_words(self.gaps[t], TREE_WORDS.get(t, t), first=i == 0)
                     for i, t in enumerate(self.trees)]
            text = f"By {self.name}, {'; '.join(parts)}."
        elif judged:
            text = (f"By {self.name}, only one group ({judged[0].label}, "
                    f"{_rows(judged[0].rows)}) has at least {self.min_rows} rows, so no gap "
                    "between groups can be judged.")
        else:
            text = (f"By {self.name}, no group has at least {self.min_rows} rows, so no gap "
                    "between groups can be judged.")
        small = len(self.groups) - len(judged)
        if small:
            text += (f" {small} group{'s have' if small > 1 else ' has'} fewer than "
                     f"{self.min_rows} rows and {'are' if small > 1 else 'is'} too small to "
                     "judge.")
        return text

    def to_dict(self) -> dict:
        out = to_plain(self)
        for t, gap in self.gaps.items():
            if gap is not None:
                out["gaps"][t]["gap"] = float(gap.gap)
        return {"kind": "group_fidelity", **out, "sentence": self.sentence()}

    def group_of(self, value, categories=None) -> RowGroup | None:
        """The group that ``value`` (one row's value of the column) falls in, named as the
        grouping names it (``categories`` as given when grouping a coded column), or None when
        no group holds it: a number outside the bins' edges, or a value the rows grouped lack."""
        if pd.isna(value):
            label = MISSING
        elif categories is not None:
            try:
                label = str(categories[int(value)])
            except (KeyError, IndexError, ValueError):  # a code the categories do not name
                return None
        elif isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.number)):
            label = str(value)
        elif self.edges is not None:
            edges = np.asarray(self.edges, dtype=np.float64)
            if not edges[0] <= float(value) <= edges[-1]:
                return None
            i = min(int(np.searchsorted(edges, float(value), side="right")) - 1, edges.size - 2)
            text = _numbers_text(edges)
            label = f"{text[i]} to {text[i + 1]}"
        else:  # each value its own group, written with as many digits as the group needed
            texts = {_number(float(value), digits) for digits in range(3, 18)}
            label = next((g.label for g in self.groups if g.label in texts), None)
        return next((g for g in self.groups if g.label == label), None)

    def to_rows(self) -> list[dict]:
        """One row per group: its rows and, per tree, fidelity and interval."""
        out = []
        for g in self.groups:
            row = {"group": g.label, "rows": g.rows, "too_small": g.too_small}
            for t in self.trees:
                row[f"{t}_fidelity"] = g.fidelity[t]
                row[f"{t}_low"], row[f"{t}_high"] = g.interval[t]
            out.append(row)
        return out


def group_fidelity(values, agree: dict[str, np.ndarray], *, name: str, rows=None,
                   max_bins: int = 5, min_rows: int = 30, categories=None) -> GroupFidelity:
    """Each tree's fidelity per group of the column ``values`` (one value per row).

    Parameters
    ----------
    values : array-like
        The column: numbers (NaN missing) or strings / objects (None or NaN missing).
    agree : dict of str to bool array
        Per tree, whether it gives the ensemble's class on each row.
    name : str
        The column's name, for the sentence and for messages.
    rows : int array or bool mask, optional
        The rows to use (e.g. the holdout rows); all by default.
    max_bins : int
        A numeric column with more distinct values is cut into at most this many quantile
        bins (equal edges merged, so there may be fewer); otherwise each value is a group.
    min_rows : int
        Groups with fewer rows are marked too small and left out of the gaps.
    categories : mapping or sequence, optional
        Names of integer codes (``categories[code]``): the column is then categorical.
    """
    if isinstance(max_bins, bool) or not isinstance(max_bins, (int, np.integer)) or max_bins < 2:
        raise SettingError(f"max_bins must be a whole number of at least 2 (got {max_bins!r}) "
                           f"for the groups of {name}")
    if isinstance(min_rows, bool) or not isinstance(min_rows, (int, np.integer)) or min_rows < 0:
        raise SettingError(f"min_rows must be a whole number of at least 0 (got {min_rows!r}) "
                           f"for the groups of {name}")
    array = values.to_numpy() if isinstance(values, pd.Series) else np.asarray(values)
    if array.ndim != 1:
        raise DataError(f"column {name} must hold one value per row (got shape {array.shape})")
    column = pd.Series(array)
    agree = _agreement(agree, len(column), name)
    used = _used_rows(rows, len(column), name)
    column = column.iloc[used].reset_index(drop=True)
    agree = {t: a[used] for t, a in agree.items()}
    missing = column.isna().to_numpy()
    if categories is not None:
        labels, order = _category_labels(column, missing, categories, name)
        grouping, edges = "values", None
    elif _numeric(column):
        labels, order, edges = _numeric_labels(column, missing, max_bins, name)
        grouping = "values" if edges is None else "quantile bins"
    else:
        labels = np.array([str(v) for v in column], dtype=object)
        order, grouping, edges = sorted(set(labels[~missing])), "values", None
    labels[missing] = MISSING
    if missing.any():
        order = [*order, MISSING]
    groups = []
    for label in order:
        member = labels == label
        if member.any():  # a bin between equal-valued rows can be empty
            groups.append(_group(label, member, agree, min_rows))
    gaps = {t: _gap([g for g in groups if not g.too_small], t) for t in agree}
    return GroupFidelity(name=name, trees=list(agree), grouping=grouping, edges=edges,
                         min_rows=int(min_rows), groups=groups, gaps=gaps)


def _agreement(agree, n: int, name: str) -> dict[str, np.ndarray]:
    if not isinstance(agree, Mapping) or not agree:
        raise SettingError(f"give at least one tree's agreement with the ensemble (a dict of "
                           f"tree name to a boolean per row) for the groups of {name}")
    out = {}
    for tree, a in agree.items():
        a = np.asarray(a)
        if a.ndim != 1 or a.shape[0] != n:
            raise DataError(f"column {name} has {n} values but the agreement of the tree "
                            f"{tree!r} has shape {a.shape}; give one value per row of the same "
                            "data")
        if a.dtype != bool and not np.isin(a, (0, 1)).all():
            raise DataError(f"the agreement of the tree {tree!r} (for the groups of {name}) "
                            "holds values other than true/false or 1/0; give a boolean per row")
        out[str(tree)] = a.astype(bool)
    return out


def _used_rows(rows, n: int, name: str) -> np.ndarray:
    if rows is None:
        used = np.arange(n)
    else:
        used = np.asarray(rows)
        if used.dtype == bool:
            if used.shape != (n,):
                raise DataError(f"the row mask for {name} has shape {used.shape} but the "
                                f"column has {n} values; give one true/false per row")
            used = np.flatnonzero(used)
        elif used.ndim != 1 or (used.size and not np.issubdtype(used.dtype, np.integer)):
            raise DataError(f"the rows for {name} must be a list of row numbers")
        elif used.size and (used.min() < 0 or used.max() >= n):
            raise DataError(f"the rows for {name} include numbers outside 0 to {n - 1}; "
                            "give row numbers of the same data")
    if used.size == 0:
        raise DataError(f"no rows selected for the groups of {name}; select at least one row")
    return used.astype(np.int64)


def _numeric(column: pd.Series) -> bool:
    if pd.api.types.is_bool_dtype(column):
        return False
    if pd.api.types.is_numeric_dtype(column):
        return True
    return pd.api.types.infer_dtype(column, skipna=True) in ("integer", "floating",
                                                             "mixed-integer-float", "decimal")


def _numeric_labels(column: pd.Series, missing: np.ndarray, max_bins: int, name: str):
    """Labels of a numeric column's rows: its values, or its quantile bins."""
    x = pd.to_numeric(column).to_numpy(dtype=np.float64)
    if np.isinf(x).any():
        raise DataError(f"column {name} holds infinite values; make them missing (NaN) or "
                        "finite numbers")
    labels = np.empty(x.shape[0], dtype=object)
    present = x[~missing]
    distinct = np.unique(present)
    if distinct.size <= max_bins:
        text = _numbers_text(distinct)
        labels[~missing] = np.array(text, dtype=object)[np.searchsorted(distinct, present)]
        return labels, text, None
    edges = np.unique(np.quantile(present, np.linspace(0.0, 1.0, max_bins + 1)))
    text = _numbers_text(edges)
    names = [f"{text[i]} to {text[i + 1]}" for i in range(edges.size - 1)]
    bins = np.clip(np.searchsorted(edges, present, side="right") - 1, 0, edges.size - 2)
    labels[~missing] = np.array(names, dtype=object)[bins]
    return labels, names, edges.tolist()


def _category_labels(column: pd.Series, missing: np.ndarray, categories, name: str):
    """Labels of a coded column's rows: the names of its codes, in code order."""
    if not isinstance(categories, (Mapping, Sequence)) or isinstance(categories, str):
        raise SettingError(f"categories for {name} must map each code to its name (a dict "
                           "or a list indexed by code)")
    codes = pd.to_numeric(column[~missing], errors="coerce").to_numpy(dtype=np.float64)
    known = (set(categories) if isinstance(categories, Mapping)
             else set(range(len(categories))))
    whole = np.isfinite(codes) & (codes == np.round(codes))
    bad = [v for v, c, ok in zip(column[~missing], codes, whole) if not ok or int(c) not in known]
    if bad:
        raise DataError(f"column {name} holds {bad[0]!r}, which is not one of the codes its "
                        f"categories name ({len(known)} codes); give the column's categories "
                        "in full")
    labels = np.empty(column.shape[0], dtype=object)
    labels[~missing] = [str(categories[int(c)]) for c in codes]
    order = [str(categories[int(c)]) for c in np.unique(codes)]
    return labels, list(dict.fromkeys(order))


def _numbers_text(values: np.ndarray) -> list[str]:
    """Each number as text: whole numbers in full, others to 3 significant digits (more
    where two would read the same)."""
    for digits in range(3, 18):
        text = [_number(float(v), digits) for v in values]
        if len(set(text)) == len(text):
            break
    return text


def _number(v: float, digits: int) -> str:
    if v.is_integer():
        return str(int(v))
    if abs(v) >= 10 ** digits:
        return f"{v:.{digits - 3}f}"
    return f"{v:.{digits}g}"


def _group(label: str, member: np.ndarray, agree: dict, min_rows: int) -> RowGroup:
    n = int(member.sum())
    k = {t: int(a[member].sum()) for t, a in agree.items()}
    return RowGroup(label=str(label), rows=n, agreeing=k,
                    fidelity={t: k[t] / n for t in agree},
                    interval={t: wilson_interval(k[t], n) for t in agree},
                    too_small=n < min_rows)


def _gap(judged: list[RowGroup], tree: str) -> FidelityGap | None:
    if len(judged) < 2:
        return None
    low = min(judged, key=lambda g: g.fidelity[tree])
    high = max(judged, key=lambda g: g.fidelity[tree])
    return FidelityGap(low=low.fidelity[tree], low_label=low.label, low_rows=low.rows,
                       high=high.fidelity[tree], high_label=high.label, high_rows=high.rows)


def _gap_words(gap: FidelityGap, tree: str, first: bool) -> str:
    if gap.gap == 0:
        return f"{tree}'s fidelity is {_pct(gap.low)} in every group large enough to judge"
    whose = f"{tree}'s fidelity ranges" if first else f"{tree}'s"
    return (f"{whose} from {_pct(gap.low)} ({gap.low_label}, "
            f"{_rows(gap.low_rows)}) to {_pct(gap.high)} ({gap.high_label}, "
            f"{_rows(gap.high_rows)}): a gap of {100 * gap.gap:.1f} points")


def _pct(v: float) -> str:
    return f"{100 * v:.1f}%"


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"
