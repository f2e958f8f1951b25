"""The points the program sees: groups from must-link pairs, and a representative sample.

The program can move in its time limit on a few hundred points, not on every row
(SURROGATE_MILP.md, "Large data"). When the rows fit, all of them go in, and must-link
groups share leaf variables. When they do not, a group of rows the ensemble treats alike
becomes one weighted point (the member nearest the group's weighted mean), and the units
are sampled stratified by predicted class, then reweighted so each class keeps its share.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .tree import n_branch_nodes


def union_find_groups(n: int, pairs: np.ndarray | None) -> np.ndarray:
    """Group id (0 .. G - 1, in order of first row) per row, chaining pairs (union-find)."""
    parent = np.arange(n)

    def find(a: int) -> int:
        root = a
        while parent[root] != root:
            root = parent[root]
        while parent[a] != root:
            parent[a], a = root, parent[a]
        return root

    if pairs is not None:
        for i, j in np.asarray(pairs, dtype=np.int64).reshape(-1, 2):
            ri, rj = find(int(i)), find(int(j))
            if ri != rj:
                parent[max(ri, rj)] = min(ri, rj)
    roots = np.array([find(i) for i in range(n)])
    _, gid = np.unique(roots, return_inverse=True)
    return gid.astype(np.int64)


def auto_sample_size(depth: int, n_admissible: int, time_limit: float) -> int:
    """Points the program gets: about 400 at depth 2 with 60 s, fewer for deeper trees.

    The size scales with the routing rows per point (``2 (2**D - 1)``) and their length (the
    admissible features), measured on the prototype: from 500 points up HiGHS found nothing
    better than its start in 60 s.
    """
    rows_per_point = 2 * n_branch_nodes(depth) * (min(n_admissible, 30) + 2 ** depth)
    budget_nnz = 60_000.0 * np.sqrt(max(time_limit, 1.0) / 60.0)
    return int(np.clip(budget_nnz / max(rows_per_point, 1), 40, 600))


@dataclass
class Sample:
    """Distinct points for the program, each standing for some training rows.

    ``rows[i]`` lists the training rows point i stands for; ``group[i]`` its leaf-variable
    group; ``class_weight[g]`` the fidelity weight per class of group g (summing to 1 over
    the sample); ``count[g]`` the training rows group g stands for.
    """

    Xs: np.ndarray
    group: np.ndarray
    class_weight: np.ndarray
    count: np.ndarray
    rows: list[np.ndarray]
    covers_all_rows: bool
    merged_groups: int

    def row_groups(self, n_rows: int) -> np.ndarray:
        """Group of the sample each training row is represented by (-1: not in the sample)."""
        out = np.full(n_rows, -1, dtype=np.int64)
        for i, r in enumerate(self.rows):
            out[r] = self.group[i]
        return out

    @property
    def size(self) -> int:
        return int(self.Xs.shape[0])

    def to_dict(self) -> dict:
        return {"points": self.size, "groups": int(self.class_weight.shape[0]),
                "rows_represented": int(sum(r.size for r in self.rows)),
                "covers_all_rows": self.covers_all_rows, "merged_groups": self.merged_groups}


def build_sample(Xs: np.ndarray, y: np.ndarray, w: np.ndarray, n_classes: int,
                 row_group: np.ndarray, size: int, rng: np.random.Generator) -> Sample:
    """The program's points: every row if they fit, else a stratified, merged sample."""
    n = Xs.shape[0]
    if n <= size:
        return _all_rows(Xs, y, w, n_classes, row_group)
    return _stratified(Xs, y, w, n_classes, row_group, size, rng)


def _all_rows(Xs, y, w, K, row_group) -> Sample:
    """Every row; identical rows are one point, and must share a leaf, so they join a group."""
    uniq, inv = np.unique(Xs, axis=0, return_inverse=True)
    inv = inv.reshape(-1)
    links = _chain_by(inv) + _chain_by(row_group)
    gid = union_find_groups(Xs.shape[0], np.array(links, dtype=np.int64).reshape(-1, 2))
    point_group = np.zeros(uniq.shape[0], dtype=np.int64)
    point_group[inv] = gid
    rows = _members(inv, uniq.shape[0])
    G = int(gid.max()) + 1
    cw = np.zeros((G, K))
    np.add.at(cw, (gid, y), w)
    count = np.bincount(gid, minlength=G).astype(np.float64)
    return Sample(Xs=uniq, group=point_group, class_weight=cw / cw.sum(), count=count,
                  rows=rows, covers_all_rows=True, merged_groups=0)


def _members(labels: np.ndarray, n_labels: int) -> list[np.ndarray]:
    """The rows of each label 0 .. n_labels - 1, ascending (one sort, not a scan per label)."""
    order = np.argsort(labels, kind="stable")
    counts = np.bincount(labels, minlength=n_labels)
    return np.split(order, np.cumsum(counts)[:-1])


def _chain_by(key: np.ndarray) -> list[tuple[int, int]]:
    """Pairs linking every row to the first row with the same key."""
    order = np.argsort(key, kind="stable")
    k = key[order]
    starts = np.r_[0, np.flatnonzero(k[1:] != k[:-1]) + 1]
    first = np.repeat(order[starts], np.diff(np.r_[starts, k.size]))
    return [(int(a), int(b)) for a, b in zip(first, order) if a != b]


def _stratified(Xs, y, w, K, row_group, size, rng) -> Sample:
    G = int(row_group.max()) + 1
    members = _members(row_group, G)
    # a unit per group: its medoid-like representative, weights per class, rows, class
    rep = np.empty(G, dtype=np.int64)
    cw = np.zeros((G, K))
    np.add.at(cw, (row_group, y), w)
    for g, idx in enumerate(members):
        if idx.size == 1:
            rep[g] = idx[0]
            continue
        centre = np.average(Xs[idx], axis=0, weights=w[idx])
        rep[g] = idx[int(np.argmin(((Xs[idx] - centre) ** 2).sum(axis=1)))]
    count = np.array([m.size for m in members], dtype=np.float64)
    unit_class = np.argmax(cw, axis=1)
    class_total = np.bincount(unit_class, weights=cw.sum(axis=1), minlength=K)
    class_count = np.bincount(unit_class, weights=count, minlength=K)
    share = class_total / class_total.sum()
    alloc = np.maximum(np.round(share * size).astype(int), np.minimum(3, np.bincount(unit_class, minlength=K)))
    chosen = []
    for k in range(K):
        units = np.flatnonzero(unit_class == k)
        take = min(int(alloc[k]), units.size)
        if take == 0:
            continue
        pw = cw[units].sum(axis=1)
        pick = rng.choice(units, size=take, replace=False, p=pw / pw.sum())
        chosen.append(np.sort(pick))
    chosen = np.concatenate(chosen)
    cw_s = cw[chosen].copy()
    cnt_s = count[chosen].copy()
    uc = unit_class[chosen]
    for k in range(K):  # each class keeps its weight share and its row count
        sel = uc == k
        if sel.any():
            cw_s[sel] *= class_total[k] / cw_s[sel].sum()
            cnt_s[sel] *= class_count[k] / cnt_s[sel].sum()
    return Sample(Xs=Xs[rep[chosen]], group=np.arange(chosen.size), class_weight=cw_s / cw_s.sum(),
                  count=cnt_s, rows=[members[g] for g in chosen], covers_all_rows=False,
                  merged_groups=int(sum(members[g].size > 1 for g in chosen)))
