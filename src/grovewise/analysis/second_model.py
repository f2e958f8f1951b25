"""A second model reviewed beside the first (a retrained version, a challenger).

Three questions, each answered on the review's own rows:

1. **How does it use the features?** Depth usage and importance side by side
   (:func:`~grovewise.analysis.compare.compare_models`).
2. **Does it decide alike?** The share of rows on which the two models predict the same class,
   with its 95% Wilson interval, and the table of the first model's class against the
   second's.
3. **Does the first model's surrogate explain it?** The surrogate's (and the greedy tree's)
   agreement with the second model on the holdout rows (the training rows without a
   holdout), beside its agreement with the first.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import DataError
from ..forest import Forest
from .compare import ModelComparison, compare_models, feature_order
from .intervals import wilson_interval


@dataclass
class SecondModel:
    """The second model and what it was compared on.

    Attributes
    ----------
    label : str
        The second model's file name.
    sha256 : str
    forest : Forest
        The second model (columns in its own order).
    comparison : ModelComparison
        Feature usage of the first (A) and the second (B).
    classes : list
        The models' classes (the same set; in the first model's order).
    cross : ndarray (K, K) of int
        Rows by the first model's class (rows of the table) and the second's (columns).
    explains : dict
        ``{"surrogate": {...}, "greedy": {...}}`` each with ``rows``, ``to_second``,
        ``to_second_ci``, ``to_first``, ``to_first_ci``: the tree's share of evaluation rows
        that predict the second model's (the first model's) class.
    evaluated_on : str
        ``"holdout"`` or ``"training"``: the rows of ``explains``.
    """

    label: str
    sha256: str
    forest: Forest
    comparison: ModelComparison
    classes: list
    cross: np.ndarray
    explains: dict
    evaluated_on: str
    exactness: str = ""  # the check of the second model against its own library

    @property
    def rows(self) -> int:
        return int(self.cross.sum())

    @property
    def agreement(self) -> float:
        return float(np.trace(self.cross) / self.rows) if self.rows else 0.0

    @property
    def agreement_ci(self) -> tuple[float, float] | None:
        return wilson_interval(int(np.trace(self.cross)), self.rows)

    def sentence(self) -> str:
        s = self.explains.get("surrogate", {})
        lo, hi = self.agreement_ci or (0.0, 0.0)
        words = (f"The two models predict the same class on {self.agreement:.1%} of the "
                 f"{self.rows:,} rows (95% interval {lo:.1%} to {hi:.1%}).")
        if s:
            gap = s["to_first"] - s["to_second"]
            verdict = ("explains the second about as well as the first" if abs(gap) <= 0.02
                       else "explains the second less well than the first" if gap > 0
                       else "explains the second better than the first")
            words += (f" The first model's surrogate agrees with the second on "
                      f"{s['to_second']:.1%} of the {s['rows']:,} {self.evaluated_on} rows "
                      f"(with the first: {s['to_first']:.1%}): it {verdict}.")
        if self.comparison.appeared or self.comparison.vanished:
            words += (" Features only the second uses: "
                      f"{', '.join(self.comparison.appeared) or 'none'}; only the first: "
                      f"{', '.join(self.comparison.vanished) or 'none'}.")
        return words


def aligned_input(first: Forest, second: Forest, X: np.ndarray) -> np.ndarray:
    """``X`` (the first model's columns) in the second model's column order."""
    return np.asarray(X)[:, feature_order(second, first)]


def check_second(first: Forest, second: Forest, label: str) -> None:
    """Raise a DataError naming ``label`` when the second model cannot be compared: other
    features, other classes, or categories coded otherwise."""
    try:
        feature_order(first, second)
    except DataError as exc:
        raise DataError(f"{label}: {exc}") from None
    a, b = list(first.classes_.tolist()), list(second.classes_.tolist())
    if sorted(map(str, a)) != sorted(map(str, b)) or len(a) != len(b):
        raise DataError(f"{label}: the second model predicts the classes {b}, the first "
                        f"{a}; compare models of the same classes.")
    cats_a = getattr(first, "categories", None) or {}
    cats_b = getattr(second, "categories", None) or {}
    names_b = list(second.feature_names)
    for j, cats in cats_a.items():
        name = first.feature_names[j]
        other = cats_b.get(names_b.index(name))
        if other is not None and list(other) != list(cats):
            raise DataError(f"{label}: the categories of {name} are coded differently in the "
                            "two models; compare models trained on the same encoding.")


def second_model(first: Forest, second: Forest, X: np.ndarray, *, label: str, sha256: str,
                 trees: dict | None = None, eval_rows: np.ndarray | None = None,
                 evaluated_on: str = "holdout", X_trees: np.ndarray | None = None,
                 exactness: str = "", first_classes: np.ndarray | None = None) -> SecondModel:
    """Compare ``second`` with ``first`` on the rows ``X`` (the first model's columns).

    ``trees`` maps a tree name to an object with ``predict`` (the first model's surrogate
    and greedy tree), scored on ``X_trees[eval_rows]`` (``X`` with missing values filled, as
    the trees were fitted) against both models' classes. ``first_classes``: the first
    model's classes on ``X`` when already known (predicted here otherwise).
    """
    check_second(first, second, label)
    X = np.asarray(X, dtype=np.float64)
    pa = first.predict(X) if first_classes is None else np.asarray(first_classes)
    pb = second.predict(aligned_input(first, second, X))
    classes = list(first.classes_.tolist())
    index = {c: i for i, c in enumerate(classes)}
    ia = np.array([index[c] for c in pa.tolist()], dtype=np.int64)
    ib = np.array([index[_match(c, classes)] for c in pb.tolist()], dtype=np.int64)
    pb = np.asarray(classes, dtype=object)[ib]  # the second's classes as the first names them
    pa = np.asarray(pa, dtype=object)
    K = len(classes)
    cross = np.bincount(ia * K + ib, minlength=K * K).reshape(K, K)
    explains = {}
    if trees and eval_rows is not None and eval_rows.size:
        Xt = X if X_trees is None else np.asarray(X_trees, dtype=np.float64)
        for name, tree in trees.items():
            got = np.asarray(tree.predict(Xt[eval_rows]), dtype=object)
            n = int(eval_rows.size)
            hits_b = int(np.sum(got == pb[eval_rows]))
            hits_a = int(np.sum(got == pa[eval_rows]))
            explains[name] = {"rows": n, "to_second": hits_b / n,
                              "to_second_ci": wilson_interval(hits_b, n),
                              "to_first": hits_a / n, "to_first_ci": wilson_interval(hits_a, n)}
    return SecondModel(label=label, sha256=sha256, forest=second,
                       comparison=compare_models(first, second, labels=("first", label)),
                       classes=classes, cross=cross, explains=explains,
                       evaluated_on=evaluated_on, exactness=exactness)


def _match(c, classes: list):
    """The first model's class equal to the second's ``c`` (matched as text when the types
    differ, e.g. 1 and "1")."""
    if c in classes:
        return c
    for k in classes:
        if str(k) == str(c):
            return k
    raise DataError(f"the second model predicted the class {c!r}, which the first does not "
                    "have.")
