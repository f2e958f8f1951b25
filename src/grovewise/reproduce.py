"""Re-run a review from its manifest and say whether it gives the same answer.

The files must be byte-identical (sha256). The steps that involve no clock (intake,
anatomy, proximity) must give identical digests. The surrogate and the cases must too when
the solve was bounded by a node limit (deterministic); when the clock bounded it, the
re-run's fidelity must be within ``FIDELITY_TOLERANCE`` of the recorded one.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .errors import GrovewiseError
from .report.manifest import FORMAT, build_manifest
from .storage import read_document
from .hashing import sha256_of
from .review import Review, ReviewInputs, ReviewSettings

FIDELITY_TOLERANCE = 0.02  # absolute, on train and holdout fidelity, for clock-bounded solves
EXACT_STEPS = ("intake", "anatomy", "proximity")


@dataclass
class Verdict:
    """The outcome of a reproduction: one line per check, and whether all passed."""

    checks: list[tuple[str, bool, str]] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return bool(self.checks) and all(ok for _, ok, _ in self.checks)

    def add(self, name: str, ok: bool, detail: str) -> None:
        self.checks.append((name, ok, detail))

    def text(self) -> str:
        lines = [f"{'ok  ' if ok else 'FAIL'} {name}: {detail}" for name, ok, detail in self.checks]
        lines.append("verdict: reproduced" if self.passed else "verdict: NOT reproduced")
        return "\n".join(lines)


def read_manifest(path) -> dict:
    return read_document(Path(path), FORMAT, "manifest",
                         "give the manifest.json that a review wrote.")


def _resolve(base: Path, entry: dict | None) -> Path | None:
    if not entry:
        return None
    p = Path(entry["path"])
    return p if p.is_absolute() else (base / p)


def reproduce(manifest_path, *, trusted: bool = False, progress=None) -> Verdict:
    """Re-run the review that ``manifest_path`` describes and compare (see module docstring)."""
    manifest_path = Path(manifest_path)
    manifest = read_manifest(manifest_path)
    base = manifest_path.parent
    verdict = Verdict()
    inputs = manifest["inputs"]
    files = {k: _resolve(base, inputs.get(k)) for k in ("model", "data", "holdout")}
    for kind, path in files.items():
        if path is None:
            continue
        recorded = inputs[kind]["sha256"]
        if not path.is_file():
            verdict.add(f"{kind} file", False, f"{path} is missing")
            continue
        actual = sha256_of(path)
        verdict.add(f"{kind} file", actual == recorded,
                    f"sha256 {actual[:16]}... {'matches' if actual == recorded else 'differs from the recorded ' + recorded[:16] + '...'}")
    if not verdict.passed:
        return verdict
    if inputs.get("trusted") and not trusted:
        raise GrovewiseError(f"{manifest_path}: the review opened its model as trusted (a file "
                             "that can run code); re-run with --trust only if you trust it.")
    settings = ReviewSettings(**manifest["settings"])
    review = Review(ReviewInputs(files["model"], files["data"], target=inputs.get("target"),
                                 holdout=files["holdout"], trusted=bool(inputs.get("trusted"))),
                    settings)
    review.run(steps=tuple(manifest["digests"]), progress=progress)
    again = build_manifest(review)
    exact = set(EXACT_STEPS) | ({"surrogate", "cases"} if manifest.get("deterministic") else set())
    for step, recorded in manifest["digests"].items():
        got = again["digests"].get(step)
        if step in exact:
            verdict.add(f"{step} results", got == recorded,
                        "identical" if got == recorded else "differ from the recorded results")
    if not manifest.get("deterministic") and manifest.get("fidelity"):
        _compare_fidelity(verdict, manifest["fidelity"], again["fidelity"])
    return verdict


def _compare_fidelity(verdict: Verdict, recorded: dict, again: dict) -> None:
    for model in ("surrogate", "greedy"):
        for part, value in (recorded.get(model) or {}).items():
            new = (again.get(model) or {}).get(part)
            if value is None or new is None:
                continue
            ok = abs(new - value) <= FIDELITY_TOLERANCE
            verdict.add(f"{model} {part} fidelity", ok,
                        f"{new:.4f} against {value:.4f} recorded (tolerance {FIDELITY_TOLERANCE})")
