"""A row's way through the surrogate, rule by rule, with each hyperplane's terms evaluated.

Plain Python over the fitted estimator's own rules (``rules_list_``, in the data's units):
at each branch node the terms ``coefficient x value`` are summed and compared with the cut
point; the rule holding sends the row left. The leaf reached is checked against the
estimator's own ``apply`` by the caller, so what the page shows is what the model does.

A categorical feature splits alone, as a set of categories: its term's ``value`` is the
rank of the row's category in the surrogate's category order (what the cut point is
compared with), ``text`` the category's name and ``code`` the row's code.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np


@dataclass
class Term:
    feature: str
    coef: float
    value: float
    product: float
    filled: bool = False  # the row's value was missing; ``value`` is the fill value
    text: str = ""  # the value as read: a category's name ("" for a number: the value itself)
    code: float = math.nan  # a categorical feature's code (``value`` is then its rank)


@dataclass
class PathStep:
    """One branch node on the path: its rule, the terms, their sum and where the row went."""

    node: int
    rule: str
    terms: list[Term] = field(default_factory=list)
    total: float = math.nan
    threshold: float = math.nan
    op: str = "<"
    holds: bool | None = None  # None: no split at this node (every row goes right)
    categories: list | None = None  # a categorical split: the categories that go left

    @property
    def missing(self) -> bool:
        return any(math.isnan(t.value) for t in self.terms)

    @property
    def filled(self) -> bool:
        return any(t.filled for t in self.terms)


def surrogate_path(est, x: np.ndarray, fill: np.ndarray | None = None
                   ) -> tuple[list[PathStep], int]:
    """The steps of row ``x`` (original units) through ``est`` and the leaf it reaches.

    ``fill`` gives, per feature, the value a missing entry takes for the surrogate (the
    review's ``fill_values``); without it a missing value leaves the step undecided.
    """
    names = est.feature_names_
    order = getattr(est, "category_order_", None)
    by_node = {r.node: r for r in est.rules_list_}
    nb = 2 ** int(est.tree_.depth) - 1
    node, steps = 0, []
    while node < nb:
        rule = by_node.get(node)
        if rule is None:
            steps.append(PathStep(node=node, rule="no split here: every row goes on"))
            node = 2 * node + 2
            continue
        terms = []
        for j, c in zip(rule.features, rule.coef):
            value, filled = float(x[j]), False
            if math.isnan(value) and fill is not None:
                value, filled = float(fill[j]), True
            if order is not None and order.is_categorical(j):
                rank = float(order.rank_of_codes(j, value))
                terms.append(Term(names[j], float(c), rank, float(c) * rank, filled,
                                  text=order.category_name(j, value), code=value))
            else:
                terms.append(Term(names[j], float(c), value, float(c) * value, filled))
        total = float(sum(t.product for t in terms))
        holds = total < rule.threshold if rule.op == "<" else total > rule.threshold
        if math.isnan(total):
            holds = False
        steps.append(PathStep(node=node, rule=rule.text(names), terms=terms, total=total,
                              threshold=float(rule.threshold), op=rule.op, holds=bool(holds),
                              categories=getattr(rule, "categories_left", None)))
        node = 2 * node + 1 if holds else 2 * node + 2
    return steps, node - nb
