"""Check a review against what it states, then re-run it.

In order, and with no tolerance anywhere (every check here is deterministic):

1. **Files.** The model, data and holdout files, the report (HTML, PDF) and every file of the
   saved review have the sha256 the manifest recorded; a changed file is named.
2. **Stated figures.** The manifest's figures (fidelity, certificate, every step's digest)
   equal the saved review's own results, figure by figure.
3. **Re-scoring.** The saved surrogate and greedy trees are scored again on the data file, by
   a path of their own (not the one that made the figures): every fidelity must be equal.
4. **Re-fit.** The review runs again. The steps without a clock (intake, anatomy, proximity)
   must give identical digests, and so must the surrogate and the cases when the solve was
   bounded by a node limit (every stage then stops on counts). A clock-bounded re-fit is
   reported for information only ("the re-fit reached objective X against Y recorded"); it
   never excuses a stated figure.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import GrovewiseError
from .hashing import sha256_of
from .plain import to_plain
from .report.manifest import FORMAT, _strip_undigested, build_manifest, digest
from .review import Review, ReviewInputs, ReviewSettings
from .signing import check_signature, is_signed
from .storage import StorageError, read_document

EXACT_STEPS = ("intake", "anatomy", "proximity")
FIDELITY_PARTS = ("train", "holdout", "full")


@dataclass
class Verdict:
    """The outcome of a reproduction: one line per check, and whether all passed.

    ``info`` lines (a clock-bounded re-fit) are shown but never decide the verdict."""

    checks: list[tuple[str, bool, str]] = field(default_factory=list)
    info: list[tuple[str, str]] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return bool(self.checks) and all(ok for _, ok, _ in self.checks)

    def add(self, name: str, ok: bool, detail: str) -> None:
        self.checks.append((name, ok, detail))

    def note(self, name: str, detail: str) -> None:
        self.info.append((name, detail))

    def failed(self) -> list[str]:
        return [name for name, ok, _ in self.checks if not ok]

    def text(self) -> str:
        lines = [f"{'ok  ' if ok else 'FAIL'} {name}: {detail}" for name, ok, detail in self.checks]
        lines += [f"info {name}: {detail}" for name, detail in self.info]
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


def _check_file(verdict: Verdict, label: str, path: Path, recorded: str) -> bool:
    if not path.is_file():
        verdict.add(label, False, f"{path} is missing")
        return False
    actual = sha256_of(path)
    same = actual == recorded
    verdict.add(label, same, f"sha256 {actual[:16]}... " + (
        "matches" if same else f"differs from the recorded {recorded[:16]}...: {path} was "
        "changed after the review"))
    return same


def reproduce(manifest_path, *, trusted: bool = False, progress=None,
              refit: bool = True) -> Verdict:
    """Check and re-run the review that ``manifest_path`` describes (see module docstring)."""
    manifest_path = Path(manifest_path)
    manifest = read_manifest(manifest_path)
    base = manifest_path.parent
    verdict = Verdict()
    inputs = manifest["inputs"]
    files = {k: _resolve(base, inputs.get(k)) for k in ("model", "data", "holdout")}
    for kind, path in files.items():
        if path is not None:
            _check_file(verdict, f"{kind} file", path, inputs[kind]["sha256"])
    for kind, entry in sorted((manifest.get("report_files") or {}).items()):
        _check_file(verdict, f"report file {entry['path']}", base / entry["path"],
                    entry["sha256"])
    saved_entry = manifest.get("saved_review")
    for name, sha in sorted(((saved_entry or {}).get("files") or {}).items()):
        _check_file(verdict, f"saved review file {saved_entry['path']}/{name}",
                    base / saved_entry["path"] / name, sha)
    if is_signed(base):  # the reviewer's signature: no file changed since signing
        check = check_signature(base)
        verdict.add("signature", check.ok, "; ".join(check.problems) if check.problems
                    else check.text())
    if not verdict.passed:
        return verdict
    if inputs.get("trusted") and not trusted:
        raise GrovewiseError(f"{manifest_path}: the review opened its model as trusted (a file "
                             "that can run code); re-run with --trust only if you trust it.")
    saved = _open_saved(verdict, base, saved_entry)
    if saved is not None:
        _check_stated(verdict, manifest, saved)
        _rescore(verdict, saved, files)
    if not verdict.passed or not refit:
        return verdict
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
            verdict.add(f"re-fit {step} results", got == recorded,
                        "identical" if got == recorded else "differ from the recorded results")
    if not manifest.get("deterministic") and review.surrogate is not None:
        rec = (manifest.get("certificate") or {}).get("objective")
        new = review.surrogate.certificate.get("objective")
        verdict.note("re-fit surrogate (bounded by the clock, so not expected to be "
                     "identical)", f"the re-fit reached objective {new:.6g} against "
                     f"{rec:.6g} recorded" if rec is not None and new is not None else
                     "no objective to compare")
    return verdict


def _open_saved(verdict: Verdict, base: Path, entry: dict | None) -> Review | None:
    if not entry:
        return None
    folder = base / entry["path"]
    try:
        return Review.open(folder)
    except (StorageError, OSError) as exc:
        verdict.add(f"saved review {entry['path']}", False,
                    f"cannot be opened ({exc}); it may be half-written: save the review again")
        return None


def _check_stated(verdict: Verdict, manifest: dict, saved: Review) -> None:
    """The manifest's figures, one by one, against the saved review's own results."""
    sur = saved.surrogate
    stated = manifest.get("fidelity") or {}
    actual = to_plain(sur.fidelity) if sur is not None else {}
    wrong = [f"{model} {part} fidelity {stated.get(model, {}).get(part)!r} stated, "
             f"{actual.get(model, {}).get(part)!r} saved"
             for model in sorted(set(stated) | set(actual))
             for part in FIDELITY_PARTS
             if stated.get(model, {}).get(part) != actual.get(model, {}).get(part)]
    cert_stated = _strip_undigested(manifest.get("certificate") or {})
    cert_saved = _strip_undigested(to_plain(sur.certificate) if sur is not None else {})
    wrong += [f"certificate {k} {cert_stated.get(k)!r} stated, {cert_saved.get(k)!r} saved"
              for k in sorted(set(cert_stated) | set(cert_saved))
              if cert_stated.get(k) != cert_saved.get(k)]
    for step, recorded in (manifest.get("digests") or {}).items():
        result = saved.results.get(step)
        if result is None or digest(result) != recorded:
            wrong.append(f"{step} results differ from the digest stated")
    verdict.add("manifest.json figures against the saved review", not wrong,
                "every stated figure equals the saved result" if not wrong else
                "; ".join(wrong))


def _rescore(verdict: Verdict, saved: Review, files: dict) -> None:
    """Score the saved trees again on the data file and compare every fidelity exactly."""
    from .loaders import load_data

    sur = saved.surrogate
    if sur is None:
        return
    target = saved.inputs.target
    X = load_data(files["data"], forest=saved.forest, target=target).X
    if files.get("holdout") is not None:
        X = np.vstack([X, load_data(files["holdout"], forest=saved.forest, target=target).X])
    filled = saved.filled(X)
    ensemble = saved.forest.predict(X)
    parts = {"train": sur.train_rows, "holdout": sur.holdout_rows,
             "full": np.arange(X.shape[0])}
    wrong = []
    for name, model in (("surrogate", sur.surrogate), ("greedy", sur.greedy)):
        agree = model.predict(filled) == ensemble
        for part, rows in parts.items():
            again = float(np.mean(agree[rows])) if rows.size else None
            stated = sur.fidelity[name][part]
            if again != stated:
                wrong.append(f"{name} {part} fidelity {stated!r} saved, {again!r} re-scored")
    verdict.add("saved trees re-scored on the data", not wrong,
                "every fidelity equals its re-scoring" if not wrong else "; ".join(wrong))
