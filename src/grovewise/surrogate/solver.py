"""Solving the surrogate program with HiGHS: limits, warm start, progress and cancellation.

The Pyomo model is compiled to matrix form by Pyomo's own standard-form compiler and handed
to a ``highspy.Highs`` object we own, so that HiGHS's callbacks are ours: the improving-
solution callback keeps the last incumbent (an interrupted solve may not hand it back
otherwise), and the interrupt callback polls a cancellation flag set from another thread
and reports progress (elapsed time, incumbent, bound, gap) to the caller.
"""

from __future__ import annotations

import importlib.metadata
import threading
import time
from dataclasses import dataclass, field
from typing import Callable

import highspy
import numpy as np
import pyomo
import scipy.sparse as sp
from pyomo.repn.plugins.standard_form import LinearStandardFormCompiler

from .program import Program

_STATUS = {
    highspy.HighsModelStatus.kOptimal: "optimal",
    highspy.HighsModelStatus.kTimeLimit: "time_limit",
    highspy.HighsModelStatus.kSolutionLimit: "node_limit",
    highspy.HighsModelStatus.kInterrupt: "cancelled",
    highspy.HighsModelStatus.kInfeasible: "infeasible",
    highspy.HighsModelStatus.kUnboundedOrInfeasible: "infeasible",
    highspy.HighsModelStatus.kObjectiveTarget: "gap_reached",
}


@dataclass(frozen=True)
class Progress:
    """One progress report from the solver."""

    elapsed: float
    incumbent: float | None
    bound: float | None
    gap: float | None
    nodes: int = 0
    stage: str = "program"
    note: str = ""  # what the numbers are measured on, or what the stage is doing

    def to_dict(self) -> dict:
        return {"elapsed": self.elapsed, "incumbent": self.incumbent, "bound": self.bound,
                "gap": self.gap, "nodes": self.nodes, "stage": self.stage, "note": self.note}


class Cancel:
    """A flag another thread sets to stop a solve; the best incumbent is kept."""

    def __init__(self, event: threading.Event | None = None) -> None:
        self._event = event if event is not None else threading.Event()

    def cancel(self) -> None:
        self._event.set()

    @property
    def cancelled(self) -> bool:
        return self._event.is_set()


@dataclass
class SolveResult:
    """What HiGHS returned: status, incumbent values (by column) and the certificate."""

    status: str
    objective: float | None
    bound: float | None
    gap: float | None
    time: float
    nodes: int
    values: np.ndarray | None
    start_accepted: bool | None
    compile_time: float
    solver: str = "HiGHS"
    versions: dict = field(default_factory=dict)
    history: list[Progress] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"status": self.status, "objective": self.objective, "bound": self.bound,
                "gap": self.gap, "time": self.time, "nodes": self.nodes,
                "start_accepted": self.start_accepted, "compile_time": self.compile_time,
                "solver": self.solver, "versions": dict(self.versions),
                "history": [p.to_dict() for p in self.history]}


def versions() -> dict:
    """Versions of the solver stack, for certificates."""
    try:
        highspy_version = importlib.metadata.version("highspy")
    except importlib.metadata.PackageNotFoundError:  # pragma: no cover - source installs
        highspy_version = _highs_version()
    return {"highs": _highs_version(), "highspy": highspy_version,
            "pyomo": pyomo.version.version}


_STDOUT_LOCK = threading.Lock()


def quiet_highs() -> highspy.Highs:
    """A HiGHS instance with its output off. HiGHS prints a banner to the process's standard
    output when an instance is made, before any option can be set; the banner would land in
    the middle of Grovewise's own output, so standard output is pointed at /dev/null for that
    moment."""
    import os
    import sys

    with _STDOUT_LOCK:
        sys.stdout.flush()
        saved = os.dup(1)
        try:
            with open(os.devnull, "wb") as null:
                os.dup2(null.fileno(), 1)
                h = highspy.Highs()
        finally:
            os.dup2(saved, 1)
            os.close(saved)
    h.setOptionValue("output_flag", False)
    return h


def write_compiled_mps(compiled: "CompiledProgram", path: str) -> None:
    """Write the compiled program (what HiGHS solves) as MPS, by HiGHS itself: much faster
    than Pyomo's writer, which would hold up the window's event loop for a tenth of a second."""
    h = quiet_highs()
    h.passModel(compiled.lp)
    h.writeModel(str(path))


def _highs_version() -> str:
    return f"{highspy.HIGHS_VERSION_MAJOR}.{highspy.HIGHS_VERSION_MINOR}.{highspy.HIGHS_VERSION_PATCH}"


@dataclass
class CompiledProgram:
    """The program in matrix form, with the Pyomo variable of each column."""

    lp: highspy.HighsLp
    columns: list
    column_of: dict
    offset: float
    compile_time: float

    def vector(self, values: dict) -> np.ndarray:
        """Column vector from ``{id(pyomo var): value}``; unset columns take their lower bound."""
        x = np.array(self.lp.col_lower_, dtype=np.float64)
        x = np.where(np.isfinite(x), x, 0.0)
        for key, val in values.items():
            col = self.column_of.get(key)
            if col is not None:
                x[col] = val
        return x

    def value_getter(self, x: np.ndarray) -> Callable:
        """``value(var)`` for a column vector; fixed or eliminated variables give their value."""
        def value(var) -> float:
            col = self.column_of.get(id(var))
            if col is None:
                return float(var.value) if var.value is not None else 0.0
            return float(x[col])
        return value


def compile_program(program: Program) -> CompiledProgram:
    """Pyomo model -> HighsLp through Pyomo's standard-form compiler (rows in mixed form)."""
    t0 = time.perf_counter()
    info = LinearStandardFormCompiler().write(program.model, mixed_form=True, set_sense=None)
    A = sp.csc_matrix(info.A)
    n_cols = A.shape[1]
    rhs = np.asarray(info.rhs, dtype=np.float64)
    kind = np.array([r[1] for r in info.rows], dtype=np.int64)
    # mixed form: +1 is "row <= rhs", -1 is "row >= rhs", 0 is "row == rhs"
    row_lo = np.where(kind == 1, -np.inf, rhs)
    row_hi = np.where(kind == -1, np.inf, rhs)
    cols = list(info.columns)
    lp = highspy.HighsLp()
    lp.num_col_ = n_cols
    lp.num_row_ = A.shape[0]
    cost = np.asarray(sp.csr_matrix(info.c).toarray()).reshape(-1) if n_cols else np.zeros(0)
    lp.col_cost_ = cost
    lp.col_lower_ = np.array([-np.inf if v.lb is None else v.lb for v in cols], dtype=np.float64)
    lp.col_upper_ = np.array([np.inf if v.ub is None else v.ub for v in cols], dtype=np.float64)
    lp.row_lower_ = row_lo
    lp.row_upper_ = row_hi
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = A.indptr.astype(np.int32)
    lp.a_matrix_.index_ = A.indices.astype(np.int32)
    lp.a_matrix_.value_ = A.data.astype(np.float64)
    lp.a_matrix_.num_col_ = n_cols
    lp.a_matrix_.num_row_ = A.shape[0]
    lp.integrality_ = [highspy.HighsVarType.kInteger if v.is_integer() else
                       highspy.HighsVarType.kContinuous for v in cols]
    offset = float(np.asarray(info.c_offset).reshape(-1)[0]) if np.size(info.c_offset) else 0.0
    lp.offset_ = offset
    return CompiledProgram(lp=lp, columns=cols, column_of={id(v): i for i, v in enumerate(cols)},
                           offset=offset, compile_time=time.perf_counter() - t0)


def solve(compiled: CompiledProgram, *, start: np.ndarray | None = None,
          time_limit: float = 30.0, node_limit: int | None = None, mip_gap: float | None = None,
          seed: int | None = None, threads: int | None = None,
          progress: Callable[[Progress], None] | None = None, cancel: Cancel | None = None,
          report_every: float = 0.5) -> SolveResult:
    """Solve a compiled program with HiGHS; always returns the best incumbent HiGHS found.

    Parameters
    ----------
    start : ndarray, optional
        A full column vector (integer and continuous values) handed to HiGHS as MIP start.
    time_limit : float
        Seconds. With ``node_limit`` set well below what the time allows, a solve is
        reproducible: HiGHS's branch and bound is deterministic for a given seed.
    node_limit : int, optional
        Branch-and-bound nodes (HiGHS ``mip_max_nodes``).
    mip_gap : float, optional
        Stop at this relative gap (HiGHS ``mip_rel_gap``, default 1e-4).
    seed : int, optional
        HiGHS ``random_seed``.
    progress : callable, optional
        Called with :class:`Progress` on every improving incumbent and every
        ``report_every`` seconds, from the solving thread.
    cancel : Cancel, optional
        Set from any thread to stop; the result then has status ``"cancelled"``.
    """
    h = quiet_highs()
    h.passModel(compiled.lp)
    h.setOptionValue("time_limit", float(max(time_limit, 0.01)))
    if node_limit is not None:
        h.setOptionValue("mip_max_nodes", int(node_limit))
    if mip_gap is not None:
        h.setOptionValue("mip_rel_gap", float(mip_gap))
    if seed is not None:
        h.setOptionValue("random_seed", int(seed) % 2147483647)
    if threads is not None:
        h.setOptionValue("threads", int(threads))
    best: dict = {"x": None, "obj": None}
    history: list[Progress] = []
    last = [0.0]

    def report(data, force: bool) -> None:
        now = data.running_time
        if not force and now - last[0] < report_every:
            return
        last[0] = now
        inc = best["obj"]
        bound = data.mip_dual_bound if np.isfinite(data.mip_dual_bound) else None
        gap = data.mip_gap if (inc is not None and np.isfinite(data.mip_gap)) else None
        p = Progress(elapsed=float(now), incumbent=inc, bound=bound, gap=gap,
                     nodes=int(data.mip_node_count))
        history.append(p)
        if progress is not None:
            progress(p)

    def on_improving(e) -> None:
        best["x"] = np.array(e.data_out.mip_solution, dtype=np.float64, copy=True)
        best["obj"] = float(e.data_out.objective_function_value)
        report(e.data_out, True)

    def on_interrupt(e) -> None:
        if cancel is not None and cancel.cancelled:
            e.interrupt()
        report(e.data_out, False)

    h.cbMipImprovingSolution.subscribe(on_improving)
    h.cbMipInterrupt.subscribe(on_interrupt)
    start_ok = None
    if start is not None:
        sol = highspy.HighsSolution()
        sol.col_value = np.asarray(start, dtype=np.float64)
        sol.value_valid = True
        start_ok = h.setSolution(sol) == highspy.HighsStatus.kOk
    t0 = time.perf_counter()
    if cancel is not None and cancel.cancelled:
        status_word = "cancelled"
    else:
        h.run()
        status_word = _STATUS.get(h.getModelStatus(), "unknown")
    elapsed = time.perf_counter() - t0
    info = h.getInfo()
    sol = h.getSolution()
    x = np.array(sol.col_value, dtype=np.float64) if sol.value_valid else best["x"]
    obj = float(info.objective_function_value) if sol.value_valid else best["obj"]
    if x is not None and best["obj"] is not None and obj is not None and best["obj"] < obj - 1e-12:
        x, obj = best["x"], best["obj"]
    bound = float(info.mip_dual_bound) if np.isfinite(info.mip_dual_bound) else None
    if status_word == "optimal" and obj is not None:
        bound = obj if bound is None else bound
    gap = None
    if obj is not None and bound is not None:
        gap = 0.0 if abs(obj - bound) <= 1e-9 else abs(obj - bound) / max(abs(obj), 1e-9)
    history.append(Progress(elapsed=elapsed, incumbent=obj, bound=bound, gap=gap,
                            nodes=max(int(info.mip_node_count), 0)))
    return SolveResult(status=status_word, objective=obj, bound=bound, gap=gap, time=elapsed,
                       nodes=max(int(info.mip_node_count), 0), values=x, start_accepted=start_ok,
                       compile_time=compiled.compile_time, versions=versions(), history=history)
