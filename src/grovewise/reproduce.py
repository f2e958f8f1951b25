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
from .report.manifest import (FORMAT, _strip_undigested, build_manifest, digest,
                              stated_second_model, stated_stability)
from .review import Review, ReviewInputs, ReviewSettings
from .signing import check_signature, is_signed
from .storage import StorageError, read_document

MANIFEST_FILE = "manifest.json"
EXACT_STEPS = ("intake", "anatomy", "proximity")
# steps made from the surrogate's tree: exact when the solve was bounded by a node limit
FROM_TREE = ("surrogate", "cases", "second_model", "stability")
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


def whole_folder(manifest_path) -> tuple[Path, list[tuple[str, str]]]:
    """The manifest of a review folder that was written whole, and notes for the verdict.

    ``manifest_path`` may also name the folder. A folder whose write was killed between its
    last two renames is put right first; a folder holding a saved review or a report but no
    manifest (which is written last) raises a StorageError saying it is half-written.
    """
    from .batch import SAVED_REVIEW
    from .report.atomic import leftover_folders, restore_folder

    path = Path(manifest_path)
    if path.is_dir() or (not path.exists() and not path.suffix):
        path = path / MANIFEST_FILE
    folder = path.parent
    notes = []
    restored = restore_folder(folder)
    if restored:
        notes.append(("interrupted write", restored))
    left = leftover_folders(folder)
    if left:
        notes.append(("interrupted write", f"{', '.join(p.name for p in left)} beside "
                      f"{folder.name} are what an interrupted write left (the next write "
                      f"removes them); {folder.name} itself holds one review whole"))
    if not path.exists() and folder.is_dir():
        parts = [n for n in (SAVED_REVIEW, "report.html", "report.pdf")
                 if (folder / n).exists()]
        if parts:
            raise StorageError(f"{folder} is half-written: it holds {', '.join(parts)} but no "
                               f"{MANIFEST_FILE}, which is written last, so the review's save "
                               "stopped before it finished. Run the review again with this "
                               "folder as --out to write it whole.")
    return path, notes


def _check_listed(base: Path, manifest: dict) -> None:
    """Every file of the review's folder that the manifest lists is there, or the folder is
    half-written (a changed file is a check of its own, named in the verdict)."""
    saved = manifest.get("saved_review") or {}
    listed = [entry["path"] for entry in (manifest.get("report_files") or {}).values()]
    listed += [f"{saved['path']}/{name}" for name in (saved.get("files") or {})]
    missing = [name for name in listed if not (base / name).is_file()]
    if missing:
        shown = ", ".join(missing[:4]) + (f" and {len(missing) - 4} more" if len(missing) > 4
                                          else "")
        raise StorageError(f"{base} is half-written or incomplete: its {MANIFEST_FILE} lists "
                           f"{shown}, which {'is' if len(missing) == 1 else 'are'} not there "
                           "(a save stopped before it finished, or files were removed). Run "
                           "the review again with this folder as --out to write it whole.")


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
    manifest_path, notes = whole_folder(manifest_path)
    manifest = read_manifest(manifest_path)
    base = manifest_path.parent
    _check_listed(base, manifest)
    verdict = Verdict()
    for name, detail in notes:
        verdict.note(name, detail)
    inputs = manifest["inputs"]
    files = {k: _resolve(base, inputs.get(k)) for k in ("model", "data", "holdout",
                                                        "second_model")}
    for kind, path in files.items():
        if path is not None:
            _check_file(verdict, f"{kind.replace('_', ' ')} file", path,
                        inputs[kind]["sha256"])
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
    # a manifest without oblique_level was made when the lower objective always won
    settings = ReviewSettings(**{"oblique_level": None, **manifest["settings"]})
    review = Review(ReviewInputs(files["model"], files["data"], target=inputs.get("target"),
                                 holdout=files["holdout"], trusted=bool(inputs.get("trusted")),
                                 second_model=files["second_model"]),
                    settings)
    review.run(steps=tuple(manifest["digests"]), progress=progress)
    again = build_manifest(review)
    exact = set(EXACT_STEPS) | (set(FROM_TREE) if manifest.get("deterministic") else set())
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
    for key, stated_now in (("stability", stated_stability(saved.stability)),
                            ("second_model", stated_second_model(saved.second_model))):
        was = manifest.get(key)
        if was != (None if stated_now is None else to_plain(stated_now)):
            wrong.append(f"{key.replace('_', ' ')} figures stated differ from the saved "
                         "results")
    for step, recorded in (manifest.get("digests") or {}).items():
        # a step may conclude None (no second model given, stability left out)
        if step not in saved.results or digest(saved.results[step]) != recorded:
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
    _rescore_stability(verdict, saved, ensemble, filled)
    _rescore_second_model(verdict, saved, X, ensemble, files)


def _rescore_stability(verdict: Verdict, saved: Review, ensemble: np.ndarray,
                       filled: np.ndarray) -> None:
    """The stability figures again from the saved re-fits' classes, by plain counting."""
    stab = saved.stability
    if stab is None:
        return
    truth = ensemble[stab.eval_rows]
    classes = list(saved.forest.classes_.tolist())
    wrong = []
    for name, t in stab.trees.items():
        labels = np.asarray(classes, dtype=object)[t.predicted]
        fid = [float(np.mean(row == truth)) for row in labels]
        pairs = [float(np.mean(labels[a] == labels[b])) for a in range(len(labels))
                 for b in range(a + 1, len(labels))]
        agree = float(np.mean(pairs)) if pairs else 1.0
        root = sum(list(sets[0]) == list(t.reference[0]) for sets in t.node_sets) / \
            max(1, len(t.node_sets))
        if not np.allclose(fid, t.holdout_fidelity, rtol=0, atol=1e-12):
            wrong.append(f"{name} re-fit fidelities")
        if abs(agree - t.pairwise_agreement) > 1e-12:
            wrong.append(f"{name} pairwise agreement {t.pairwise_agreement!r} saved, "
                         f"{agree!r} counted")
        if root != t.root_recurrence:
            wrong.append(f"{name} root recurrence {t.root_recurrence!r} saved, {root!r} counted")
        tree = saved.surrogate.surrogate if name == "surrogate" else saved.surrogate.greedy
        own = float(np.mean(np.asarray(tree.predict(filled[stab.eval_rows]), dtype=object)
                            == truth.astype(object)))
        if t.reference_fidelity is not None and own != t.reference_fidelity:
            wrong.append(f"{name} review tree's fidelity {t.reference_fidelity!r} saved, "
                         f"{own!r} re-scored")
    verdict.add("stability figures counted again", not wrong,
                "every figure equals its count from the saved re-fits" if not wrong
                else "; ".join(wrong))


def _rescore_second_model(verdict: Verdict, saved: Review, X: np.ndarray,
                          ensemble: np.ndarray, files: dict) -> None:
    """The two models' agreement again, with the second model read from its file."""
    sm = saved.second_model
    if sm is None or files.get("second_model") is None:
        return
    from .analysis.second_model import aligned_input
    from .loaders import load_model

    second = load_model(files["second_model"], trusted=bool(saved.inputs.trusted))
    theirs = second.predict(aligned_input(saved.forest, second, X))
    same = int(sum(str(a) == str(b) for a, b in zip(ensemble.tolist(), theirs.tolist())))
    ok = same == int(np.trace(sm.cross)) and X.shape[0] == sm.rows
    verdict.add("second model's agreement re-counted from its file", ok,
                f"{same:,} of {X.shape[0]:,} rows alike, as saved" if ok else
                f"{same:,} of {X.shape[0]:,} rows alike counted, "
                f"{int(np.trace(sm.cross)):,} of {sm.rows:,} saved")
