"""Seeded, stratified row samples: how every step keeps its work in proportion to the data.

Steps whose cost grows with the rows times something large (permutation importance: rows x
features x repeats predictions; the exactness proof: the library's own prediction; proximity:
pairs of rows) run on a sample when the data is larger than their setting. The sample keeps
each class's share (stratified by a label: the given target or the model's predicted class),
is drawn with the review's seed, and is recorded as a :class:`RowSample` with the result, so
the report can say which figures used a sample and how large.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class RowSample:
    """Which rows a figure was computed on."""

    rows: np.ndarray  # sorted indices into the data
    n_total: int
    seed: int
    stratified_by: str  # "target", "predicted class" or "" when every row was used

    @property
    def size(self) -> int:
        return int(self.rows.shape[0])

    @property
    def sampled(self) -> bool:
        return self.size < self.n_total

    def describe(self) -> str:
        """``"all 3,000 rows"`` or ``"a sample of 10,000 of 200,000 rows (seed 0, stratified by
        the predicted class)"``."""
        if not self.sampled:
            return f"all {self.n_total:,} rows"
        how = f", stratified by the {self.stratified_by}" if self.stratified_by else ""
        return f"a sample of {self.size:,} of {self.n_total:,} rows (seed {self.seed}{how})"

    def to_dict(self) -> dict:
        return {"kind": "row_sample", "size": self.size, "n_total": self.n_total,
                "seed": self.seed, "stratified_by": self.stratified_by,
                "sampled": self.sampled, "description": self.describe()}


def stratified_rows(labels: np.ndarray | None, n: int, size: int | None, seed: int,
                    stratified_by: str = "predicted class") -> RowSample:
    """At most ``size`` of ``n`` rows (all of them when ``size`` is None, 0 or at least ``n``).

    Each label keeps its share, rounded, with at least one row for every label present (when
    ``size`` allows); rows within a label are drawn uniformly with ``seed``. The result is
    sorted, and the same for the same inputs on any machine.
    """
    if not size or size >= n:
        return RowSample(np.arange(n, dtype=np.int64), n, int(seed), "")
    rng = np.random.default_rng(seed)
    if labels is None:
        rows = rng.choice(n, size, replace=False)
        return RowSample(np.sort(rows).astype(np.int64), n, int(seed), "")
    labels = np.asarray(labels).reshape(-1)
    values, inverse, counts = np.unique(labels, return_inverse=True, return_counts=True)
    take = np.maximum(np.floor(counts * size / n).astype(np.int64), 1)
    take = np.minimum(take, counts)
    # hand out what rounding left over to the largest remainders, in label order on ties
    short = size - int(take.sum())
    if short > 0:
        remainder = counts * size / n - np.floor(counts * size / n)
        for k in np.argsort(-remainder, kind="stable"):
            if short == 0:
                break
            if take[k] < counts[k]:
                take[k] += 1
                short -= 1
    parts = []
    for k in range(values.shape[0]):
        members = np.flatnonzero(inverse == k)
        parts.append(rng.choice(members, int(take[k]), replace=False))
    rows = np.sort(np.concatenate(parts)).astype(np.int64)
    return RowSample(rows, n, int(seed), stratified_by)
