"""The anytime pipeline that produces the surrogate tree (issue 4).

The program alone, on a sample, loses to the greedy tree too often, so the surrogate is
the best of several candidates, every one scored the same way, on the full training set
(weighted disagreement + alpha * sparsity penalty, weights summing to 1):

1. ``greedy``: CART of the same depth on every row (the baseline, always reported).
   ``optimal_axis``: the exact optimal axis-aligned tree of the same depth (depth 1 and 2;
   :mod:`.optimal_axis`), the second baseline.
2. ``local_search``: node-by-node re-optimisation of the hyperplanes from the better of
   the two baselines (exact two-feature lines among the moves, :mod:`.pair_split`).
   Then the proof (:mod:`.proof`): a bound on the least disagreement any tree of the class
   reaches on every training row, within ``proof_share`` of the time.
3. ``program``: the MILP of SURROGATE_MILP.md on a representative weighted sample,
   warm-started (z included) from the best candidate so far.
4. ``polish``: the program's tree with offsets re-fit, then node-by-node search, on all rows.

The answer is the best candidate; ``winner`` names its stage, so a greedy win is said
plainly. Every stage's objective, fidelity and time are recorded.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..errors import SettingError
from .greedy import fit_greedy, oblique_from_greedy
from .optimal_axis import AxisTreeResult, optimal_axis_tree
from .proof import Proof, prove
from .local_search import SearchSettings, improve, refit_offsets, separated_groups
from .program import ProgramData, build_program, choose_margin
from ..sampling import stratified_rows
from .sample import Sample, auto_sample_size, build_sample, union_find_groups
from .solver import Cancel, Progress, SolveResult, compile_program, solve, write_compiled_mps
from .tree import (ObliqueTree, Scaling, depth_used, objective, reachable_splits,
                   trivial_tree, weighted_disagreement, with_majority_classes,
                   without_empty_splits)


@dataclass
class PipelineSettings:
    """Settings of one pipeline run (see :class:`~grovewise.surrogate.ObliqueSurrogate`)."""

    depth: int
    admissible: np.ndarray
    penalty: np.ndarray
    alpha: float = 0.0
    max_features: int | None = None
    min_leaf_size: int = 1
    time_limit: float = 30.0
    node_limit: int | None = None
    mip_gap: float | None = None
    seed: int = 0
    sample_size: int | None = None
    routing: str = "node"
    proximity_penalty: float | None = None
    local_search_share: float = 0.25
    polish_share: float = 0.1
    threads: int | None = None
    run_program: bool = True
    mps_path: str | None = None
    # Rows the node-by-node stages search on (a seeded sample, stratified by class, beyond
    # it); every candidate is still scored on every row. Keeps a stage's sweeps in seconds
    # on large data, so the program gets its share of the time limit.
    search_rows: int = 10_000
    started: float | None = None  # perf_counter() when the time limit began (default: now)
    # Features that may only split alone (bool per feature; None: none), such as categorical
    # features: every stage keeps them out of splits that use another feature (the greedy
    # tree is axis-aligned anyway).
    solo: np.ndarray | None = None
    proof_share: float = 0.2
    prove: bool = True  # False: no bound is proved (a re-fit that only needs the tree)
    axis_share: float = 0.15
    # above this many rows, the exact axis-aligned tree is searched on the search rows
    axis_rows: int = 50_000
    # Multi-feature splits must earn their place: the best candidate whose splits use two
    # features or more is kept over the best axis-aligned one only if it agrees with the
    # ensemble on significantly more training rows, at this level (one-sided exact McNemar
    # test on the rows where the two trees disagree). None: the lower objective wins.
    oblique_level: float | None = None

    @property
    def exact(self) -> bool:
        """A node limit asks for a result that does not depend on the clock: every stage
        then stops on counts (passes, nodes), never on time."""
        return self.node_limit is not None


@dataclass
class StageRecord:
    """One candidate: its stage, full-training objective and fidelity, and when it was ready.

    ``tree`` is the candidate as scored (leaf classes assigned, splits that decide nothing
    removed); ``depth_used`` its levels that split. ``to_dict`` leaves the tree out."""

    name: str
    objective: float
    fidelity: float
    elapsed: float
    duration: float
    separated_groups: int = 0
    note: str = ""
    depth_used: int | None = None
    tree: ObliqueTree | None = field(default=None, repr=False)

    def to_dict(self) -> dict:
        return {k: v for k, v in self.__dict__.items() if k != "tree"}


@dataclass
class PipelineResult:
    """The chosen tree and how it was found."""

    tree: ObliqueTree
    greedy_tree: ObliqueTree
    greedy: object
    winner: str
    status: str
    objective: float
    fidelity: float
    bound: float | None
    gap: float | None
    stages: list[StageRecord]
    certificate: dict | None
    sample: dict | None
    program_size: dict | None
    readback: dict | None
    first_candidate_time: float
    build_time: float
    solve_time: float
    total_time: float
    history: list[Progress] = field(default_factory=list)
    proof: Proof | None = None
    axis: AxisTreeResult | None = None  # the exact axis-aligned search (depth 1 and 2)
    axis_tree: ObliqueTree | None = None
    axis_note: str = ""
    disagreement: float = 0.0  # weighted disagreement of ``tree`` on every training row
    by_objective: str = ""  # the stage the objective alone would choose
    choice: str = ""  # why the answer is axis-aligned or not, in words (``oblique_level``)

    def to_dict(self) -> dict:
        return {
            "winner": self.winner, "status": self.status, "objective": self.objective,
            "fidelity": self.fidelity, "bound": self.bound, "gap": self.gap,
            "stages": [s.to_dict() for s in self.stages], "certificate": self.certificate,
            "sample": self.sample, "program_size": self.program_size, "readback": self.readback,
            "first_candidate_time": self.first_candidate_time, "build_time": self.build_time,
            "solve_time": self.solve_time, "total_time": self.total_time,
            "proof": None if self.proof is None else self.proof.to_dict(),
            "by_objective": self.by_objective, "choice": self.choice,
            "optimal_axis": None if self.axis is None else {
                "objective": self.axis.objective, "optimal": self.axis.optimal,
                "lower_bound": self.axis.lower_bound, "seconds": self.axis.seconds,
                "note": self.axis_note},
        }


# the status word when a baseline is the answer
_FALLBACK = {"greedy": "greedy_fallback", "optimal_axis": "axis_fallback"}
_STAGE_WORDS = {"greedy": "the greedy tree (CART)",
                "optimal_axis": "the exact optimal axis-aligned tree",
                "local_search": "the axis-aligned tree of the node-by-node search"}


def is_oblique(tree: ObliqueTree) -> bool:
    """Does some split that decides something use two features or more?"""
    return bool(((tree.coef != 0).sum(axis=1)[reachable_splits(tree)] > 1).any())


class _Board:
    """The candidates so far, and the best of them.

    Order: not below the greedy tree's weighted fidelity (the answer never loses to the
    baseline, whatever alpha or proximity asks); then fewer separated must-link groups; then
    the lower objective. So without must-link groups the answer's objective is never above
    the exact axis-aligned tree's (a candidate too); with them, a tree that keeps more groups
    wins over it. A must-link group is kept whenever a candidate that keeps it is at
    least as faithful as the greedy tree; the groups the answer separates are counted in its
    stage record (``separated_groups``), never dropped silently. With ``oblique_level``,
    :meth:`prefer_axis` may then hand the answer to the best axis-aligned candidate.
    """

    def __init__(self, Xs, y, wn, K, st: PipelineSettings, group, t0):
        self.Xs, self.y, self.wn, self.K, self.st, self.group, self.t0 = Xs, y, wn, K, st, group, t0
        self.stages: list[StageRecord] = []
        self.best: tuple | None = None  # (key, name, tree)
        self.floor: float | None = None  # the greedy tree's weighted fidelity

    def add(self, name: str, tree: ObliqueTree, started: float, note: str = "") -> ObliqueTree:
        tree = with_majority_classes(tree, self.Xs, self.y, self.wn, self.K)
        obj = objective(tree, self.Xs, self.y, self.wn, self.st.alpha, self.st.penalty)
        fid = 1.0 - weighted_disagreement(tree, self.Xs, self.y, self.wn)
        sep = separated_groups(tree, self.Xs, self.group)
        now = time.perf_counter()
        record = StageRecord(name=name, objective=obj, fidelity=fid, elapsed=now - self.t0,
                             duration=now - started, separated_groups=sep, note=note,
                             depth_used=depth_used(tree), tree=tree)
        self.stages.append(record)
        if self.floor is None:  # the greedy tree comes first
            self.floor = fid
        key = self.key_of(record)
        if self.best is None or key < self.best[0]:
            self.best = (key, name, tree)
        return tree

    def prefer_axis(self, level: float) -> str:
        """Keep the best axis-aligned candidate unless the best one, with multi-feature
        splits, agrees with the ensemble on significantly more training rows (one-sided
        exact McNemar test at ``level``); returns the choice in words ("" when the best
        candidate is axis-aligned already)."""
        from scipy.stats import binom

        key, name, tree = self.best
        if not is_oblique(tree):
            return ""
        # not below the greedy floor, and keeping at least as many must-link groups
        axis = [s for s in self.stages if s.tree is not None and not is_oblique(s.tree)
                and not self.key_of(s)[0] and s.separated_groups <= key[1]]
        if not axis:
            return ""
        pick = min(axis, key=self.key_of)
        a_name, a_tree = pick.name, pick.tree
        ok_best = tree.predict_index_scaled(self.Xs) == self.y
        ok_axis = a_tree.predict_index_scaled(self.Xs) == self.y
        gained = int(np.count_nonzero(ok_best & ~ok_axis))
        lost = int(np.count_nonzero(~ok_best & ok_axis))
        p = float(binom.sf(gained - 1, gained + lost, 0.5)) if gained + lost else 1.0
        axis_words = _STAGE_WORDS.get(a_name, f"the axis-aligned {a_name} tree")
        test = f"one-sided exact McNemar p = {p:.3g}"
        if p < level:
            return (f"Multi-feature splits kept: the tree agrees with the ensemble on {gained:,} "
                    f"training rows where {axis_words} does not, and disagrees on {lost:,} "
                    f"where it agrees ({test} < {level:g}).")
        self.best = (self.key_of(pick), a_name, a_tree)
        return (f"{axis_words[0].upper()}{axis_words[1:]} is the answer, over a tree with "
                f"multi-feature splits whose gain is not significant: that tree agrees with "
                f"the ensemble on {gained:,} training rows where this one does not, and "
                f"disagrees on {lost:,} where it agrees ({test}, not below {level:g}).")

    def key_of(self, s: StageRecord) -> tuple:
        return (s.fidelity < self.floor - 1e-12, s.separated_groups, s.objective)

    @property
    def objective(self) -> float:
        return self.best[0][2]

    @property
    def tree(self) -> ObliqueTree:
        return self.best[2]

    @property
    def name(self) -> str:
        return self.best[1]


def run_pipeline(X: np.ndarray, y: np.ndarray, w: np.ndarray, n_classes: int,
                 scaling: Scaling, st: PipelineSettings, *, must_link: np.ndarray | None = None,
                 soft_pairs: np.ndarray | None = None,
                 progress: Callable[[Progress], None] | None = None,
                 cancel: Cancel | None = None) -> PipelineResult:
    """Run the anytime pipeline on (X, y, w) in original units; ``y`` are class indices.

    ``must_link`` row pairs must share a leaf (hard); ``soft_pairs`` row pairs cost
    ``st.proximity_penalty`` each when separated (program stage only).
    """
    t0 = time.perf_counter() if st.started is None else st.started
    deadline = t0 + st.time_limit
    rng = np.random.default_rng(st.seed)
    Xs = scaling.transform(X)
    n = Xs.shape[0]
    wn = w / w.sum()
    row_group = union_find_groups(n, must_link)
    group = row_group if must_link is not None and len(must_link) else None
    board = _Board(Xs, y, wn, n_classes, st, group, t0)
    work = _SearchRows(Xs, y, wn, group, st)

    # what follows the last stage (scoring the answer on every row, rounding the rules) must
    # fit in the time limit too
    tail = min(1.0, 0.05 * st.time_limit + 0.1)

    def until(share_end: float | None) -> float | None:
        """The clock a stage stops at, or None (counts only) in exact mode."""
        if st.exact:
            return None
        return deadline if share_end is None else min(deadline, share_end)

    def emit(stage: str, note: str = "") -> None:
        if progress is not None:
            inc = board.objective if board.best is not None else None
            progress(Progress(elapsed=time.perf_counter() - t0, incumbent=inc, bound=None,
                              gap=None, stage=stage, note=note or "best on every training row"))

    last_beat = [0.0]

    def alive(stage: str, note: str = "") -> Callable[[], bool]:
        """A stage's stop check, which also reports it is running (at most every 0.5 s)."""
        def check() -> bool:
            now = time.perf_counter()
            if now - last_beat[0] >= 0.5:
                last_beat[0] = now
                emit(stage, note)
            return _stop(cancel)
        return check

    # 1. greedy on every row
    emit("greedy", f"fitting the greedy tree on {n:,} rows")
    s0 = time.perf_counter()
    greedy = fit_greedy(X, y, w, st.depth, st.min_leaf_size, random_state=st.seed,
                        usable=st.admissible.any(axis=0))
    gtree = board.add("greedy", oblique_from_greedy(greedy, scaling, st.depth), s0)
    first_time = time.perf_counter() - t0
    emit("greedy")
    if n_classes > 1 and not _stop(cancel):
        # the one-leaf tree is a candidate too: always feasible, whatever the groups
        board.add("trivial", trivial_tree(Xs.shape[1], st.depth, scaling), time.perf_counter())

    # 1b. the exact optimal axis-aligned tree (the second baseline)
    axis = axis_tree = None
    axis_note = ""
    start_tree = gtree
    if st.depth > 2:
        axis_note = "not computed: the exact axis-aligned search covers depths 1 and 2"
    elif n_classes > 1 and not _stop(cancel):
        s0 = time.perf_counter()
        emit("optimal_axis", f"the exact optimal axis-aligned tree on {n:,} rows")
        on_all = n <= st.axis_rows
        ax_X = X if on_all else X[work.rows]
        axis = optimal_axis_tree(ax_X, y if on_all else work.y, wn if on_all else work.w,
                                 depth=st.depth, n_classes=n_classes, admissible=st.admissible,
                                 min_leaf=st.min_leaf_size,
                                 deadline=until(s0 + st.axis_share * st.time_limit))
        axis_note = ("" if on_all else f"searched on {work.note or 'the search rows'}") + (
            "" if axis.optimal else "; stopped at its time share: best found, not proven")
        axis_note = axis_note.strip("; ")
        axis_tree = board.add("optimal_axis", axis.to_oblique(scaling), s0, note=axis_note)
        if board.name == "optimal_axis":
            start_tree = axis_tree
        emit("optimal_axis")

    # 2. node-by-node search from the greedy tree (and the exact axis tree when better)
    search = SearchSettings(admissible=st.admissible, penalty=st.penalty, alpha=st.alpha,
                            max_features=st.max_features, min_leaf_size=st.min_leaf_size,
                            solo=st.solo, seed=st.seed)
    if n_classes > 1 and not _stop(cancel):
        s0 = time.perf_counter()
        ls_deadline = until(s0 + st.local_search_share * st.time_limit)
        # from the better baseline; with must-link groups from the greedy tree, whose splits
        # keep groups that the exact axis tree's may separate (and a search from it could not
        # repair: wine with three forced pairs, 2 separated against 0)
        start = gtree if group is not None else start_tree
        t_ls, _ = improve(start, work.Xs, work.y, work.w, n_classes, search,
                          group=work.group,
                          deadline=ls_deadline, should_stop=alive("local_search"))
        board.add("local_search", t_ls, s0, note=" ".join(
            (["from the exact axis-aligned tree"] if start is not gtree else []) +
            [work.note]).strip())
        emit("local_search")
        if group is not None and not board.name.startswith("local_search") \
                and not _stop(cancel):
            # keeping every group costs too much fidelity: search without them as well
            s0 = time.perf_counter()
            t_free, _ = improve(start, work.Xs, work.y, work.w, n_classes, search,
                                deadline=until(s0 + st.local_search_share * st.time_limit),
                                should_stop=alive("local_search_free"))
            board.add("local_search_free", t_free, s0, note="must-link groups not enforced")
            emit("local_search_free")

    # the proof: a bound for every tree of the class, on every training row
    proof = None
    if st.prove and n_classes > 1 and not _stop(cancel):
        s0 = time.perf_counter()
        emit("proof", "proving a bound for every tree of this class on every training row")
        proof = prove(Xs, y, wn, n_classes, st.depth, st.admissible, st.max_features, st.solo,
                      deadline=until(s0 + st.proof_share * st.time_limit),
                      node_limit=st.node_limit, axis=axis if axis is not None and n <= st.axis_rows
                      else None, seed=st.seed,
                      should_stop=alive("proof", "proving a bound for every tree of this class"))
        emit("proof", f"bound on the disagreement {proof.disagreement_bound:.5f} "
                      f"({proof.method})")

    # 3. the program on a representative sample
    cert: SolveResult | None = None
    sample = prog = None
    readback = None
    build_time = solve_time = 0.0
    note = ""
    best_obj = board.objective
    if n_classes <= 1 or best_obj <= 1e-12:
        note = "skipped: a candidate already reaches objective 0, the least possible"
    elif not st.run_program:
        note = "skipped: not asked for"
    elif _stop(cancel):
        note = "skipped: cancelled"
    elif not st.exact and deadline - time.perf_counter() - st.polish_share * st.time_limit < 0.5:
        note = "skipped: less than 0.5 s of the time limit left for it"
    else:
        reserve = st.polish_share * st.time_limit
        s0 = time.perf_counter()
        size = st.sample_size or auto_sample_size(st.depth, int(st.admissible.any(axis=0).sum()),
                                                  st.time_limit)
        # groups go into the program only if the start keeps them (else it has no start)
        keep_groups = group is not None and board.best[0][1] == 0
        sample = build_sample(Xs, y, wn, n_classes, row_group if keep_groups else
                              np.arange(n), size, rng)
        emit("program", f"building the program on {sample.size:,} points")
        prog = _build(sample, st, n_classes, board, gtree, soft_pairs, n)
        cp = compile_program(prog)
        build_time = prog.build_time + cp.compile_time
        if st.mps_path:
            write_compiled_mps(cp, st.mps_path)
        left = deadline - time.perf_counter() - reserve
        if left < 0.5:
            note = f"skipped: {left:.1f} s left after building the program"
        else:
            start, start_from = _start(prog, cp, board, gtree)

            on_sample = (f"objective on the program's {sample.size:,} points, not on every "
                         "row")

            def relay(p: Progress) -> None:
                if progress is not None:
                    progress(Progress(elapsed=time.perf_counter() - t0, incumbent=p.incumbent,
                                      bound=p.bound, gap=p.gap, nodes=p.nodes, stage="program",
                                      note=on_sample))

            cert = solve(cp, start=start, time_limit=left, node_limit=st.node_limit,
                         mip_gap=st.mip_gap, seed=st.seed, threads=st.threads,
                         progress=relay, cancel=cancel)
            solve_time = cert.time
            if cert.status == "infeasible":
                _raise_infeasible(must_link, sample)
            if cert.values is not None:
                value = cp.value_getter(cert.values)
                t_prog = prog.tree_from_values(value, scaling)
                readback = _readback(prog, value, t_prog)
                note = f"start from {start_from}" if start_from else "no feasible start"
                t_prog = board.add("program", t_prog, s0, note=note)
                # 4. polish on every row
                if not _stop(cancel):
                    s1 = time.perf_counter()
                    pg = work.group if keep_groups else None
                    t_pol, _ = refit_offsets(t_prog, work.Xs, work.y, work.w, n_classes, search,
                                             group=pg)
                    t_pol, _ = improve(t_pol, work.Xs, work.y, work.w, n_classes, search,
                                       group=pg, deadline=until(deadline - tail),
                                       should_stop=alive("polish"))
                    board.add("polish", t_pol, s1, note=work.note)
                    emit("polish")
            else:
                note = f"the program found no incumbent ({cert.status})"

    by_objective = board.name
    choice = ("" if st.oblique_level is None or _stop(cancel) else
              board.prefer_axis(st.oblique_level))
    tree = board.tree
    status, bound, gap = _status(board, cert, prog, sample, cancel, note)
    obj = board.objective
    dis = weighted_disagreement(tree, Xs, y, wn)
    fid = 1.0 - dis
    if proof is not None:
        bound = objective_bound(proof, board, st)
        gap = 0.0 if obj - bound <= 1e-9 else float((obj - bound) / max(obj, 1e-12))
        if gap == 0.0 and status not in ("cancelled",):
            status = "optimal"
        elif status in ("optimal", "optimal_on_sample"):
            status = "optimal_on_sample" if sample is not None else status
    return PipelineResult(
        tree=tree, greedy_tree=gtree, greedy=greedy, winner=board.name, status=status,
        objective=obj, fidelity=fid, bound=bound, gap=gap, stages=board.stages,
        certificate=None if cert is None else {**cert.to_dict(), "note": note},
        sample=None if sample is None else sample.to_dict(),
        program_size=None if prog is None else prog.size(), readback=readback,
        first_candidate_time=first_time, build_time=build_time, solve_time=solve_time,
        total_time=time.perf_counter() - t0, history=[] if cert is None else cert.history,
        proof=proof, axis=axis, axis_tree=axis_tree, axis_note=axis_note, disagreement=dis,
        by_objective=by_objective, choice=choice)


def objective_bound(proof: Proof, board: "_Board", st: PipelineSettings) -> float:
    """The proof in the objective's units: a tree that does not split scores the one-leaf
    tree's objective; one that splits pays at least the cheapest admissible feature's price
    on top of the least disagreement."""
    trivial = next((s.objective for s in board.stages if s.name == "trivial"), np.inf)
    pen = st.penalty[st.admissible] if st.admissible.any() else np.zeros(1)
    with_split = proof.disagreement_bound + st.alpha * float(pen.min())
    return float(max(proof.disagreement_bound, min(trivial, with_split)))


class _SearchRows:
    """The rows the node-by-node stages search on: every training row up to
    ``search_rows``, else a seeded sample stratified by class, its weights summing to 1."""

    def __init__(self, Xs, y, wn, group, st: PipelineSettings) -> None:
        n = Xs.shape[0]
        sample = stratified_rows(y, n, st.search_rows, st.seed, "class")
        rows = sample.rows
        self.rows = rows
        self.Xs, self.y = Xs[rows], y[rows]
        self.w = wn[rows] / wn[rows].sum()
        self.group = None if group is None else group[rows]
        self.note = (f"searched on {sample.describe()}; scored on every row"
                     if sample.sampled else "")


def _stop(cancel: Cancel | None) -> bool:
    return cancel is not None and cancel.cancelled


def _build(sample: Sample, st: PipelineSettings, K: int, board: _Board, gtree: ObliqueTree,
           soft_pairs, n_rows: int):
    soft = np.zeros((0, 2), dtype=np.int64)
    if soft_pairs is not None and len(soft_pairs) and st.proximity_penalty:
        rg = sample.row_groups(n_rows)
        sp = rg[np.asarray(soft_pairs, dtype=np.int64).reshape(-1, 2)]
        sp = sp[(sp[:, 0] >= 0) & (sp[:, 1] >= 0) & (sp[:, 0] != sp[:, 1])]
        soft = np.unique(np.sort(sp, axis=1), axis=0) if sp.size else soft
    mu = choose_margin(sample.Xs, st.admissible, [board.tree, gtree])
    data = ProgramData(Xs=sample.Xs, group=sample.group, class_weight=sample.class_weight,
                       count=sample.count, depth=st.depth, n_classes=K,
                       admissible=st.admissible, penalty=st.penalty, alpha=st.alpha,
                       max_features=st.max_features, min_leaf_size=st.min_leaf_size,
                       soft_pairs=soft, beta=float(st.proximity_penalty or 0.0), mu=mu,
                       routing=st.routing, solo=st.solo)
    return build_program(data)


def _start(prog, cp, board: _Board, gtree: ObliqueTree):
    """The best candidate as an exact MIP start (z included), else the greedy tree, else none."""
    for name, tree in ((board.name, board.tree), ("greedy", gtree)):
        vals, _ = prog.start_values(tree)
        if vals is not None:
            return cp.vector(vals), name
    return None, None


def _readback(prog, value, tree: ObliqueTree) -> dict:
    """Does the tree read from the solution route the program's points as its z did, and
    does it, with its splits that decide nothing removed, still predict what the program
    counted? (Routing is checked on the tree as read; pruning moves points between leaves
    of one class, so the disagreement is taken from the pruned tree.)"""
    d = prog.data
    z_leaf = prog.program_leaves(value)
    t_leaf = tree.route_scaled(d.Xs)
    mismatch = int(np.count_nonzero(z_leaf != t_leaf))
    pruned = without_empty_splits(tree)
    p_leaf = pruned.route_scaled(d.Xs)
    changed = int(np.count_nonzero(pruned.leaf_class[p_leaf] != tree.leaf_class[t_leaf]))
    g_leaf = np.zeros(d.n_groups, dtype=np.int64)
    g_leaf[d.group] = p_leaf
    pred = pruned.leaf_class[g_leaf]
    tree_dis = float(d.class_weight.sum() - d.class_weight[np.arange(d.n_groups), pred].sum())
    prog_dis = prog.program_disagreement(value)
    removed = int(np.count_nonzero(tree.splits & ~pruned.splits))
    return {"points": int(d.Xs.shape[0]), "routing_mismatches": mismatch,
            "splits_removed": removed, "pruning_prediction_changes": changed,
            "tree_disagreement": tree_dis, "program_disagreement": prog_dis,
            "consistent": mismatch == 0 and changed == 0 and abs(tree_dis - prog_dis) <= 1e-6}


def _status(board: _Board, cert, prog, sample, cancel, note):
    """Status word, bound and gap for the chosen tree (see ObliqueSurrogate.status_)."""
    if cert is None:
        if "objective 0" in note:
            return "optimal", 0.0, 0.0
        if _stop(cancel):
            return "cancelled", None, None
        return _FALLBACK.get(board.name, "skipped"), None, None
    bound = cert.bound
    gap = None
    if bound is not None:
        vals, obj = prog.start_values(board.tree)
        if vals is not None:
            gap = 0.0 if obj - bound <= 1e-6 else float((obj - bound) / max(obj, 1e-12))
        elif cert.gap is not None:
            gap = cert.gap
    if cert.status == "cancelled":
        return "cancelled", bound, gap
    if gap is not None and gap <= 1e-6 and sample is not None:
        return ("optimal" if sample.covers_all_rows else "optimal_on_sample"), bound, gap
    if cert.values is None:
        return (_FALLBACK.get(board.name, "no_incumbent")), bound, gap
    if board.name in _FALLBACK:
        return _FALLBACK[board.name], bound, gap
    return cert.status, bound, gap


def _raise_infeasible(must_link, sample: Sample) -> None:
    pairs = [] if must_link is None else np.asarray(must_link).reshape(-1, 2)[:10].tolist()
    raise SettingError(
        "the surrogate program is infeasible with the hard must-link pairs "
        f"(first pairs: {pairs}); these rows cannot all share leaves under the other settings. "
        "Use soft proximity (proximity_penalty=...) or a higher proximity threshold.")
