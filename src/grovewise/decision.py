"""Record or change the reviewer's decision on a written review folder.

The folder is what ``grovewise review`` writes (report.html, report.pdf, manifest.json and the
saved review in review/). The decision goes into the saved review, the report is drawn again
and the manifest is written again with the new files' sha256, so ``grovewise reproduce``
checks the decided review as it checks any other.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import replace
from pathlib import Path

from .batch import SAVED_REVIEW
from .errors import SettingError
from .review import DECISIONS, Review


def decision_name(text: str) -> str:
    """``approve``, ``approve with conditions`` / ``approve-with-conditions``, ``reject``
    (or ``pending``) as the review's decision name."""
    name = str(text).strip().lower().replace("-", "_").replace(" ", "_")
    if name not in DECISIONS:
        raise SettingError(f"--decision {text!r} is not known; use approve, "
                           "approve-with-conditions or reject.")
    return name


def record_decision(folder, decision: str, *, conditions: str = "", notes: str | None = None,
                    name: str | None = None, role: str | None = None) -> dict[str, Path]:
    """Write ``decision`` into the review in ``folder``; returns the report files written."""
    from .batch import save_review_folder
    from .reproduce import read_manifest

    folder = Path(folder)
    manifest_path = folder / "manifest.json"
    if not (folder / SAVED_REVIEW).is_dir() or not manifest_path.is_file():
        raise SettingError(f"{folder} is not a written review folder (it needs manifest.json "
                           f"and {SAVED_REVIEW}/); give the --out folder of `grovewise review`.")
    manifest = read_manifest(manifest_path)
    review = Review.open(folder / SAVED_REVIEW)
    # the inputs as the manifest records them, relative to the folder, so the new manifest
    # names the same files wherever this command runs from
    for key in ("model", "data", "holdout"):
        entry = manifest["inputs"].get(key)
        if entry:
            p = Path(entry["path"])
            setattr(review.inputs, key, p if p.is_absolute() else (folder / p).resolve())
    rv = review.reviewer
    review.reviewer = replace(
        rv, decision=decision_name(decision), conditions=conditions or rv.conditions,
        notes=rv.notes if notes is None else notes, name=rv.name if name is None else name,
        role=rv.role if role is None else role,
        signed_at=_dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")).validate()
    return save_review_folder(review, folder)  # whole: a killed save leaves the old one
