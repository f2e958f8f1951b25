"""A proven bound on how faithful any tree of the fitted class can be, on every training row.

The class: trees of depth D whose splits use at most k features (the admissible ones at each
depth; a "solo" feature alone), whose leaves hold at least the minimum leaf size. The bound
is on the least weighted disagreement with the ensemble that any tree of the class reaches on
*all* the training rows (weights summing to 1); one minus it bounds the weighted fidelity.
Every route below is valid on its own, and the certificate takes the largest:

``classes``
    A tree has ``2**D`` leaves, each predicting one class, so the rows of every class but
    the ``2**D`` heaviest disagree whatever the splits.
``parts``
    Dropping rows never raises the least disagreement, and one tree serves every row, so the
    proven optima of *disjoint* parts of the rows add up to a bound on the whole (the
    decomposition behind Quant-BnB, Mazumder, Meng, Wang, ICML 2022, and the sample
    decomposition of Hua, Ren, Cao, NeurIPS 2022). Each part is solved by the surrogate
    program in its relaxed form (``ProgramData.for_bound``: no margin, ``|a|_1 = 1``, no
    minimum leaf size), whose every optimum is at most the class's, and HiGHS's proven dual
    bound of each part is what counts (a part stopped early still contributes its bound).
    The rows outside every part add their ``classes`` bound. Small data (at most
    ``ALL_ROWS`` rows) is one part; larger data is cut into parts of conflicting
    neighbours: rows close in the admissible features that the ensemble labels differently.
``axis``
    With one feature per split and depth 1 or 2, the exact optimal axis-aligned tree
    (:mod:`.optimal_axis`) *is* the least disagreement of the class (its proven lower bound
    when it was stopped early).

Each part's program can be written as MPS (:meth:`PartProof.write_mps`) and re-solved
anywhere; its optimum is the number the certificate used.
"""

from __future__ import annotations

import gzip
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .program import ProgramData, build_program
from .solver import compile_program, solve, write_compiled_mps
from .tree import n_leaves

ALL_ROWS = 200  # data up to this many rows is proved as one part
PART_SIZE = 24  # rows per part of conflicting neighbours
PART_SECONDS = 2.0  # at most this long on one of several parts
# Parts are tried most conflicting first; after this many in a row that prove nothing, the
# rest (less conflicting still) are not tried, and the time goes to the search instead.
IDLE_PARTS = 5


@dataclass
class PartProof:
    """One part of the rows and what HiGHS proved for it."""

    rows: np.ndarray
    bound: float  # proven least disagreement of the part (weights of the whole, summing to 1)
    objective: float | None  # the best tree found for the part
    status: str
    seconds: float
    nodes: int
    # the part's program as MPS text, gzipped (bytes as uint8, which the results store keeps)
    mps: np.ndarray | None = field(default=None, repr=False)

    def write_mps(self, path) -> Path:
        """Write this part's program as an MPS file."""
        from ..report.atomic import write_atomic

        return write_atomic(Path(path), gzip.decompress(self.mps.tobytes()))

    def to_dict(self) -> dict:
        return {"rows": int(self.rows.size), "bound": self.bound, "objective": self.objective,
                "status": self.status, "seconds": self.seconds, "nodes": self.nodes}


@dataclass
class Proof:
    """The bound, how it was found, and the sentence that states it."""

    disagreement_bound: float  # no tree of the class disagrees (weighted) with less
    method: str  # "classes", "parts", "axis" or "none"
    covers: str  # what the bound covers, in words
    n_rows: int
    depth: int
    max_features: int | None
    routes: dict  # every route's bound
    parts: list[PartProof] = field(default_factory=list)
    seconds: float = 0.0

    @property
    def fidelity_bound(self) -> float:
        return 1.0 - self.disagreement_bound

    def gap(self, disagreement: float) -> float:
        """Relative gap of a tree with this weighted disagreement (0 when it is proven best)."""
        if disagreement <= self.disagreement_bound + 1e-12:
            return 0.0
        return float((disagreement - self.disagreement_bound) / disagreement)

    def sentence(self, disagreement: float) -> str:
        """The certificate in words, for a tree with this weighted disagreement."""
        k = ("with any number of features per split" if self.max_features is None else
             f"with at most {self.max_features} feature{'s' if self.max_features != 1 else ''}"
             " per split")
        if self.disagreement_bound <= 0:
            return (f"Nothing is proven: no tree of depth {self.depth} {k} was shown to fall "
                    f"short of agreeing with the ensemble on every one of the {self.n_rows:,} "
                    f"training rows. Tried: {self.tried()}. This tree agrees on "
                    f"{100 * (1 - disagreement):.1f}% (weighted); gap "
                    f"{self.gap(disagreement):.2f}.")
        return (f"No tree of depth {self.depth} {k} agrees with the ensemble on more than "
                f"{100 * self.fidelity_bound:.1f}% (weighted) of the {self.n_rows:,} training "
                f"rows; this tree agrees on {100 * (1 - disagreement):.1f}%; gap "
                f"{self.gap(disagreement):.2f}. Bound: {self.covers}.")

    def tried(self) -> str:
        """What was tried for a bound, in words (for a certificate that proves nothing)."""
        said = [f"every class can have a leaf of its own at depth {self.depth}"]
        if "axis" in self.routes:
            said.append("the exact axis-aligned search found a tree that agrees everywhere")
        if self.parts:
            if len(self.parts) == 1 and self.parts[0].rows.size == self.n_rows:
                said.append(f"the program's bound on every row stayed 0 "
                            f"({self.parts[0].seconds:.1f} s, {self.parts[0].status})")
            else:
                solved = sum(p.status == "optimal" for p in self.parts)
                said.append(f"the program proved 0 on each of {len(self.parts)} parts of "
                            f"conflicting neighbours, {solved} of them solved to optimality "
                            f"(a tree of the class fits each without a disagreement)")
        return "; ".join(said)

    def write_mps(self, folder) -> list[Path]:
        """Write every proven part's program as ``part_NN.mps`` into ``folder``."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        return [p.write_mps(folder / f"part_{i + 1:02d}.mps")
                for i, p in enumerate(self.parts) if p.mps is not None]

    def to_dict(self) -> dict:
        return {"disagreement_bound": self.disagreement_bound,
                "fidelity_bound": self.fidelity_bound, "method": self.method,
                "covers": self.covers, "rows": self.n_rows, "routes": dict(self.routes),
                "parts": [p.to_dict() for p in self.parts], "seconds": self.seconds}


def classes_bound(y: np.ndarray, w: np.ndarray, n_classes: int, depth: int) -> float:
    """Weight outside the ``2**depth`` heaviest classes: every tree disagrees on it."""
    per = np.sort(np.bincount(y, weights=w, minlength=n_classes))[::-1]
    return float(per[n_leaves(depth):].sum())


def conflict_parts(Xs: np.ndarray, y: np.ndarray, features: np.ndarray,
                   size: int = PART_SIZE) -> list[np.ndarray]:
    """Disjoint parts of conflicting neighbours, most conflicting first.

    Every row is matched with its nearest row of another class (in the given features),
    closest pairs first; a part starts from the closest unused pair and takes the unused
    pairs nearest to it until it holds ``size`` rows."""
    from sklearn.neighbors import NearestNeighbors

    Z = Xs[:, features]
    cand = []
    for k in np.unique(y):
        a, b = np.flatnonzero(y == k), np.flatnonzero(y != k)
        if a.size == 0 or b.size == 0:
            continue
        dist, j = NearestNeighbors(n_neighbors=1).fit(Z[b]).kneighbors(Z[a])
        cand.extend(zip(dist[:, 0], a, b[j[:, 0]]))
    cand.sort(key=lambda c: (c[0], c[1], c[2]))
    used = np.zeros(len(y), dtype=bool)
    pairs = []
    for _, i, j in cand:
        if not used[i] and not used[j]:
            used[i] = used[j] = True
            pairs.append((i, j))
    if not pairs:
        return []
    pairs = np.array(pairs, dtype=np.int64)
    mid = 0.5 * (Z[pairs[:, 0]] + Z[pairs[:, 1]])
    free = np.ones(len(pairs), dtype=bool)
    per = max(1, size // 2)
    parts = []
    for s in range(len(pairs)):
        if not free[s]:
            continue
        d = np.abs(mid - mid[s]).sum(axis=1)
        d[~free] = np.inf
        take = np.argsort(d, kind="stable")[:per]
        take = take[np.isfinite(d[take])]
        free[take] = False
        parts.append(np.sort(pairs[take].reshape(-1)))
    return parts


def prove(Xs: np.ndarray, y: np.ndarray, wn: np.ndarray, n_classes: int, depth: int,
          admissible: np.ndarray, max_features: int | None, solo: np.ndarray | None = None,
          *, deadline: float | None = None, node_limit: int | None = None,
          axis=None, seed: int = 0, should_stop=None) -> Proof:
    """The best valid bound within the time (``deadline``) or, in exact mode, ``node_limit``
    branch-and-bound nodes per part. ``axis`` is the exact axis-aligned tree's result for
    these rows and class, when it was computed (used when ``max_features == 1``)."""
    t0 = time.perf_counter()
    n = Xs.shape[0]
    routes: dict = {}
    cls = classes_bound(y, wn, n_classes, depth)
    routes["classes"] = cls
    best, method = cls, "classes"
    covers = {"classes": f"at most {n_leaves(depth)} classes can be predicted by "
                         f"{n_leaves(depth)} leaves"}
    if axis is not None and max_features == 1 and np.isfinite(axis.lower_bound):
        routes["axis"] = float(axis.lower_bound)
        covers["axis"] = ("the exact optimal axis-aligned tree of this depth"
                          + ("" if axis.optimal else " (its search stopped early: its bound)"))
        if routes["axis"] > best:
            best, method = routes["axis"], "axis"
    parts: list[PartProof] = []
    if n_classes > 1 and (max_features is None or max_features >= 2 or axis is None):
        features = np.flatnonzero(admissible.any(axis=0))
        chosen = [np.arange(n)] if n <= ALL_ROWS else conflict_parts(Xs, y, features)
        total = 0.0
        idle = 0  # parts in a row that added nothing
        for rows in chosen:
            if len(chosen) > 1 and idle >= IDLE_PARTS:
                break
            left = None if deadline is None else deadline - time.perf_counter()
            if (left is not None and left < 0.2) or (should_stop is not None and should_stop()):
                break
            if np.unique(y[rows]).size < 2:
                continue
            if left is not None and len(chosen) > 1:
                left = min(left, PART_SECONDS)
            part = _prove_part(Xs, y, wn, rows, n_classes, depth, admissible, max_features,
                               solo, left, node_limit, seed)
            parts.append(part)
            total += part.bound
            idle = idle + 1 if part.bound <= 0 else 0
        in_part = np.zeros(n, dtype=bool)
        for p in parts:
            in_part[p.rows] = True
        rest = classes_bound(y[~in_part], wn[~in_part], n_classes, depth)
        routes["parts"] = total + rest
        proved = sum(p.status == "optimal" for p in parts)
        covers["parts"] = (
            f"the sum of what the program proved on {len(parts)} disjoint part"
            f"{'s' if len(parts) != 1 else ''} of the rows ({int(in_part.sum()):,} rows; "
            f"{proved} solved to optimality)"
            + ("" if not (~in_part).any() else ", and the classes bound on the other rows"))
        if routes["parts"] > best:
            best, method = routes["parts"], "parts"
    return Proof(disagreement_bound=float(max(best, 0.0)), method=method, covers=covers[method],
                 n_rows=n, depth=depth, max_features=max_features, routes=routes, parts=parts,
                 seconds=time.perf_counter() - t0)


def _prove_part(Xs, y, wn, rows, K, depth, admissible, max_features, solo, time_left,
                node_limit, seed) -> PartProof:
    data = ProgramData(Xs=Xs[rows], group=np.arange(rows.size),
                       class_weight=np.eye(K)[y[rows]] * wn[rows, None],
                       count=np.ones(rows.size), depth=depth, n_classes=K,
                       admissible=admissible, penalty=np.ones_like(admissible, dtype=float),
                       max_features=max_features, solo=solo, for_bound=True)
    cp = compile_program(build_program(data))
    limit = 3600.0 if time_left is None else max(time_left, 0.05)
    res = solve(cp, time_limit=limit, node_limit=node_limit, seed=seed, threads=1)
    bound = max(float(res.bound or 0.0), 0.0)
    return PartProof(rows=rows, bound=bound, objective=res.objective, status=res.status,
                     seconds=res.time, nodes=res.nodes, mps=_mps_bytes(cp))


def _mps_bytes(compiled) -> np.ndarray:
    """The program as MPS text (HiGHS's own writer), gzipped, so it can be kept and saved."""
    with tempfile.TemporaryDirectory() as scratch:
        path = Path(scratch) / "part.mps"
        write_compiled_mps(compiled, path)
        packed = gzip.compress(path.read_bytes(), compresslevel=1, mtime=0)
    return np.frombuffer(packed, dtype=np.uint8).copy()
