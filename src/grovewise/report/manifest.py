"""The manifest: what anyone needs to re-run a review and check that it gives the same answer.

It records the files' sha256, every setting and seed, the library versions, the solver's
certificate and a digest of each step's results. Digests cover what a step concluded, not
how long it took, so a deterministic re-run gives the same digests byte for byte.
"""

from __future__ import annotations

import hashlib
import json
import platform
import sys
from importlib import metadata
from pathlib import Path

import numpy as np

from ..hashing import sha256_of
from ..storage import encode
from ..plain import to_plain

FORMAT = "grovewise-manifest/1"
LIBRARIES = ("grovewise", "numpy", "scipy", "scikit-learn", "xgboost", "xgboost-cpu", "pyomo",
             "highspy", "numba", "skops", "pandas", "pyarrow", "matplotlib")
# Keys whose values are timings, clock readings or file locations: left out of digests, so
# that a re-run elsewhere, on the same files, gives the same digests.
UNDIGESTED_KEYS = frozenset({"time", "seconds", "elapsed", "wall_time", "build_time",
                             "solve_time", "time_to_first", "timings", "started_at",
                             "finished_at", "trace", "duration", "first_candidate_time",
                             "compile_time", "total_time", "source", "file", "path",
                             "history", "threads", "counters"})
# history: the progress reports, as many as the clock allowed; threads: the cores a solve used;
# counters: how much work the exact axis-aligned search did, which depends on which of its
# threads found a better tree first (its answer does not)


def library_versions() -> dict[str, str]:
    """Versions of Python, HiGHS and the libraries a review's numbers depend on."""
    versions = {"python": platform.python_version(), "platform": sys.platform}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            continue
    from ..surrogate.solver import versions as solver_versions

    versions["HiGHS"] = solver_versions()["highs"]
    return versions


def _strip_undigested(tree):
    if isinstance(tree, dict):
        return {k: _strip_undigested(v) for k, v in tree.items() if k not in UNDIGESTED_KEYS}
    if isinstance(tree, list):
        return [_strip_undigested(v) for v in tree]
    return tree


def digest(obj) -> str:
    """sha256 of a result's content (timings and paths left out), stable across re-runs."""
    tree, arrays = encode(obj, stable=True)
    tree = _strip_undigested(tree)
    h = hashlib.sha256(json.dumps(tree, sort_keys=True, separators=(",", ":")).encode())
    used = set()
    _collect_array_keys(tree, used)
    for key in sorted(used, key=lambda k: int(k[1:])):
        a = np.ascontiguousarray(arrays[key])
        if a.dtype.names:  # a record array's padding bytes are whatever memory held
            from numpy.lib.recfunctions import repack_fields

            a = np.ascontiguousarray(repack_fields(a))
        h.update(f"{a.dtype.str}{a.shape}".encode())
        h.update(a.tobytes())
    return h.hexdigest()


def _collect_array_keys(tree, out: set) -> None:
    if isinstance(tree, dict):
        if "__array__" in tree:
            out.add(tree["__array__"])
        for v in tree.values():
            _collect_array_keys(v, out)
    elif isinstance(tree, list):
        for v in tree:
            _collect_array_keys(v, out)


def build_manifest(review, report_files: dict | None = None) -> dict:
    """The manifest of a review that has run (a ``grovewise.review.Review``)."""
    from .. import __version__

    inp, st = review.inputs, review.settings
    intake = review.intake

    def file_entry(path, sha):
        return None if path is None else {"path": str(path), "sha256": sha}

    surrogate = review.surrogate
    certificate = to_plain(getattr(surrogate, "certificate", None)) if surrogate else None
    return {
        "format": FORMAT,
        "created_at": review.created_at,
        "grovewise": __version__,
        "inputs": {
            "model": file_entry(inp.model, intake.model_sha256 if intake else None),
            "data": file_entry(inp.data, intake.data_sha256 if intake else None),
            "holdout": file_entry(inp.holdout, intake.holdout_sha256 if intake else None),
            "target": inp.target,
            "trusted": inp.trusted,
            "second_model": file_entry(
                getattr(inp, "second_model", None),
                getattr(getattr(review, "second_model", None), "sha256", None)),
        },
        "settings": to_plain(st),
        "seeds": {"review": st.seed, "holdout_split": st.seed, "permutation_importance": st.seed,
                  "proximity_sample": st.seed, "surrogate": st.seed},
        "deterministic": deterministic(review),
        # how it ran; never part of a result (results are equal for any number of cores)
        "run": {"jobs": getattr(review, "jobs", None)},
        "versions": library_versions(),
        "certificate": certificate,
        "fidelity": to_plain(getattr(surrogate, "fidelity", None)) if surrogate else None,
        "stability": stated_stability(getattr(review, "stability", None)),
        "second_model": stated_second_model(getattr(review, "second_model", None)),
        "digests": {step: digest(result) for step, result in review.results.items()},
        "reviewer": to_plain(review.reviewer),
        "report_files": report_files or {},
    }


def stated_stability(stability) -> dict | None:
    """The stability figures the report states, per tree (None when the step did not run)."""
    if stability is None:
        return None
    stated = {name: {"root_recurrence": t.root_recurrence, "unstable": t.unstable,
                     "pairwise_agreement": t.pairwise_agreement,
                     "reference_fidelity": t.reference_fidelity,
                     "fidelity": t.fidelity_spread(),
                     "recurrence": [float(v) for v in t.recurrence()]}
              for name, t in stability.trees.items()}
    stated["surrogate"]["handed_to_axis"] = int(stability.handed_to_axis)
    return stated


def stated_second_model(second) -> dict | None:
    """The second model's figures the report states (None without a second model)."""
    if second is None:
        return None
    return to_plain({"label": second.label, "agreement": second.agreement,
                     "rows": second.rows, "cross": second.cross, "explains": second.explains})


def deterministic(review) -> bool:
    """True when the solve was bounded by the node limit, not the clock, so a re-run on the
    same machine and library versions gives the same tree."""
    surrogate = review.surrogate
    if review.settings.node_limit is None or surrogate is None:
        return False
    status = str(getattr(getattr(surrogate, "surrogate", None), "status_", ""))
    return status not in ("time_limit", "cancelled")


def saved_review_entry(folder, base) -> dict | None:
    """``{"path": ..., "files": {name: sha256}}`` of a saved review folder, the path relative
    to ``base`` (the manifest's folder) when it lies below it; None without such a folder."""
    folder = Path(folder)
    if not folder.is_dir():
        return None
    names = sorted(p.name for p in folder.iterdir() if p.is_file() and not p.name.startswith("."))
    try:
        rel = folder.resolve().relative_to(Path(base).resolve()).as_posix()
    except ValueError:
        rel = str(folder.resolve())
    return {"path": rel, "files": {n: sha256_of(folder / n) for n in names}}
