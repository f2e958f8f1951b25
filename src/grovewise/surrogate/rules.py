"""Readable rules: the tree's hyperplanes in original units, rounded, and re-scored.

A split ``a . xs < b`` in scaled space reads ``c . x < threshold`` in the data's units. For
reading, the coefficients are divided by the largest one (so the leading feature has
coefficient 1 and needs none written) and rounded to two significant digits, and the
threshold is the shortest decimal that still sends the training points reaching the node
the way the exact split did. If two digits change where a point goes, more are used (up
to six); if even that fails, the exact values are kept. The rounded tree is what the
surrogate predicts with, so the fidelity reported is that of the rules people read.

A split on a categorical feature (which always splits alone; its column holds the rank of
the category, :mod:`.categories`) is a set of categories: its cut is put halfway between two
ranks (``k + 0.5``), on the side of the exact cut and between the ranks of the training
points reaching the node that go left and right, so the sets are exact and no point moves.
It reads ``region in {north, east}``, the categories that go left.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .tree import ObliqueTree, depth_used, n_branch_nodes, node_depth


@dataclass
class Rule:
    """One split in original units: ``sum coef[j] * x[j]  op  threshold`` sends a point left.

    On a categorical feature (alone, its value the category's rank) ``categories_left`` and
    ``categories_right`` name the categories each side gets (in code order), and
    ``other_codes_left`` says whether a code outside the known categories goes left; None for a
    split on numeric features."""

    node: int
    features: list[int]
    coef: list[float]
    threshold: float
    op: str  # "<" or ">"
    digits: int
    categories_left: list | None = None
    categories_right: list | None = None
    other_codes_left: bool | None = None

    @property
    def categorical(self) -> bool:
        return self.categories_left is not None

    def text(self, names: list[str]) -> str:
        if self.categorical:
            return category_text(names[self.features[0]], self.categories_left)
        terms = []
        for k, (j, c) in enumerate(zip(self.features, self.coef)):
            mag = abs(c)
            word = names[j] if mag == 1.0 else f"{_fmt(mag)} * {names[j]}"
            if k == 0:
                terms.append(word if c > 0 else f"-{word}")
            else:
                terms.append(("+ " if c > 0 else "- ") + word)
        return f"{' '.join(terms)} {self.op} {_fmt(self.threshold)}"

    def to_dict(self, names: list[str]) -> dict:
        out = {"node": self.node, "features": [names[j] for j in self.features],
               "feature_index": list(self.features), "coef": list(self.coef),
               "threshold": self.threshold, "op": self.op, "digits": self.digits,
               "text": self.text(names)}
        if self.categorical:  # the threshold is then in ranks of the category order
            out.update(categorical=True, categories_left=list(self.categories_left),
                       categories_right=list(self.categories_right),
                       other_codes_left=bool(self.other_codes_left))
        return out


def category_text(name: str, left: list) -> str:
    """A split on a categorical feature as the set of categories that go left."""
    return f"{name} in {{{', '.join(str(c) for c in left)}}}"


def _fmt(v: float) -> str:
    return f"{v:.6g}"


def round_sig(v: np.ndarray, digits: int) -> np.ndarray:
    """Round to ``digits`` significant digits, element-wise."""
    v = np.asarray(v, dtype=np.float64)
    out = np.zeros_like(v)
    nz = v != 0
    mag = np.floor(np.log10(np.abs(v[nz])))
    scale = 10.0 ** (digits - 1 - mag)
    out[nz] = np.round(v[nz] * scale) / scale
    return out


def shortest_between(lo: float, hi: float) -> float | None:
    """The coarsest decimal x with lo < x < hi (None when the interval is empty)."""
    if not hi > lo:
        return None
    if lo < 0 < hi:
        return 0.0
    top = max(abs(lo), abs(hi))
    k = math.floor(math.log10(top)) + 1 if top > 0 else 0
    for e in range(k, k - 17, -1):
        step = 10.0 ** e
        x = math.floor(lo / step + 1.0) * step
        x = float(f"{x:.15g}")
        if lo < x < hi:
            return x
    return None


def round_tree(tree: ObliqueTree, Xs: np.ndarray, order=None) -> tuple[ObliqueTree, list[Rule]]:
    """The rounded tree (in scaled space, for predicting) and its rules in original units.

    ``Xs`` are the scaled training points; each node keeps their routing where rounding allows.
    ``order`` (a :class:`~.categories.CategoryOrder`, or None) says which features are
    categorical: a split on one of them alone becomes a set of categories.
    """
    sc = tree.scaling
    X = Xs * sc.span + sc.low
    out = tree.copy()
    rules: list[Rule] = []
    node = np.zeros(Xs.shape[0], dtype=np.int64)
    exact_proj = Xs @ tree.coef.T
    paths = [node.copy()]
    for _ in range(tree.depth):  # the node each point reaches at every level, exact tree
        rows = np.arange(Xs.shape[0])
        left = exact_proj[rows, node] < tree.offset[node]
        node = np.where(left, 2 * node + 1, 2 * node + 2)
        paths.append(node.copy())
    for t in range(n_branch_nodes(tree.depth)):
        if not tree.splits[t]:
            continue
        here = paths[node_depth(t)] == t
        goes_left = exact_proj[here, t] < tree.offset[t]
        c, thr = sc.to_original(tree.coef[t], tree.offset[t])
        used = np.flatnonzero(c)
        if order is not None and used.size == 1 and order.is_categorical(int(used[0])):
            rule, c_r, thr_r = _category_split(t, int(used[0]), c, thr, X[here], goes_left,
                                               order)
        else:
            rule, c_r, thr_r = _round_split(t, c, thr, X[here], goes_left)
        a_s, b_s = sc.to_scaled(c_r, thr_r)
        out.coef[t] = a_s
        out.offset[t] = b_s
        rules.append(rule)
    return out, rules


def _round_split(t: int, c: np.ndarray, thr: float, Xh: np.ndarray, goes_left: np.ndarray):
    feats = np.flatnonzero(c)
    lead = np.max(np.abs(c[feats]))
    cn, tn = c / lead, thr / lead
    for digits in range(2, 7):
        cr = round_sig(cn, digits)
        cr[np.abs(cr) < 10.0 ** (-digits)] = 0.0
        if not np.any(cr):
            continue
        v = Xh @ cr
        lo = v[goes_left].max() if goes_left.any() else -np.inf
        hi = v[~goes_left].min() if (~goes_left).any() else np.inf
        if np.isinf(lo) and np.isinf(hi):
            x = float(round_sig(np.array([tn]), digits)[0])
        elif np.isinf(lo):
            x = shortest_between(hi - max(1.0, abs(hi)), hi)
        elif np.isinf(hi):
            x = shortest_between(lo, lo + max(1.0, abs(lo)))
        else:
            x = shortest_between(lo, hi)
        if x is not None:
            return _rule(t, cr, x, digits), cr, x
    return _rule(t, cn, tn, 0), cn, tn


def _category_split(t: int, j: int, c: np.ndarray, thr: float, Xh: np.ndarray,
                    goes_left: np.ndarray, order):
    """A split ``c[j] * rank < thr`` as a cut halfway between two ranks, and its sets.

    With ``sign = sign(c[j])`` the split is ``v < thr / |c[j]|`` for ``v = sign * rank``.
    The cut is the half-integer nearest that threshold, kept between the largest ``v`` of
    the points going left and the smallest of those going right (ranks are whole numbers,
    so there is always one), and within the ranks the feature can take."""
    sign = 1.0 if c[j] > 0 else -1.0
    tn = thr / abs(c[j])
    v = sign * np.round(Xh[:, j])  # ranks read back from the scaling, made whole again
    last = float(order.unknown_rank(j))
    lo_dom, hi_dom = (-0.5, last + 0.5) if sign > 0 else (-last - 0.5, 0.5)
    cut = float(np.clip(np.floor(tn) + 0.5, lo_dom, hi_dom))
    if goes_left.any():
        cut = max(cut, float(v[goes_left].max()) + 0.5)
    if (~goes_left).any():
        cut = min(cut, float(v[~goes_left].min()) - 0.5)
    cr = np.zeros_like(c)
    cr[j] = sign
    rule = _rule(t, cr, cut, 1)
    left, right, other = order.split_sets(j, rule.threshold, rule.op)
    rule.categories_left, rule.categories_right, rule.other_codes_left = left, right, other
    return rule, cr, cut


def _rule(t: int, cr: np.ndarray, x: float, digits: int) -> Rule:
    feats = np.flatnonzero(cr)
    coef = cr[feats]
    if coef[0] < 0 and feats.size == 1:  # "-x < -3" reads better as "x > 3"
        return Rule(node=t, features=feats.tolist(), coef=[1.0], threshold=-x, op=">",
                    digits=digits)
    return Rule(node=t, features=feats.tolist(), coef=[float(v) for v in coef], threshold=x,
                op="<", digits=digits)


def depth_words(used: int, depth: int) -> str:
    """The depth a tree uses, said plainly next to the depth it was allowed."""
    if used >= depth:
        return f"depth {depth}"
    why = ("no split changes the answer, so the tree is one leaf" if used == 0 else
           "a split whose sides predict the same class is left out")
    return f"depth {used} used of the {depth} allowed: {why}"


def tree_text(tree: ObliqueTree, rules: list[Rule], names: list[str], classes: list,
              leaf_rows: np.ndarray | None = None, leaf_fidelity: np.ndarray | None = None) -> str:
    """The tree as nested if/else text, in original units.

    The first line says the depth the tree uses beside the depth it was allowed; a tree
    that is one leaf reads ``predict X for every row``.
    Nodes that do not split are skipped (every point goes right), so only the splits
    that decide something are written."""
    by_node = {r.node: r for r in rules}
    nb = n_branch_nodes(tree.depth)
    used = depth_used(tree)
    lines: list[str] = [f"# {depth_words(used, tree.depth)}"]

    def leaf_line(node: int, indent: str) -> None:
        l = node - nb
        extra = []
        if leaf_rows is not None:
            extra.append(f"{int(leaf_rows[l])} rows")
        if leaf_fidelity is not None and np.isfinite(leaf_fidelity[l]):
            extra.append(f"weighted fidelity {100 * leaf_fidelity[l]:.1f}% on training rows")
        tail = f"  ({', '.join(extra)})" if extra else ""
        every = " for every row" if used == 0 else ""
        lines.append(f"{indent}predict {classes[int(tree.leaf_class[l])]}{every}  "
                     f"[leaf {l}]{tail}")

    def visit(node: int, indent: str) -> None:
        if node >= nb:
            leaf_line(node, indent)
            return
        if node not in by_node:  # no split: every point goes right
            visit(2 * node + 2, indent)
            return
        lines.append(f"{indent}if {by_node[node].text(names)}:")
        visit(2 * node + 1, indent + "    ")
        lines.append(f"{indent}else:")
        visit(2 * node + 2, indent + "    ")

    visit(0, "")
    return "\n".join(lines)
