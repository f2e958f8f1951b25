"""Recent files, kept with QSettings: saved reviews and (model, data, target) pairs."""

from __future__ import annotations

import json
from pathlib import Path

from PySide6.QtCore import QSettings

KEY = "recent/entries"
KEEP = 8


def _settings() -> QSettings:
    return QSettings()


def entries() -> list[dict]:
    """Most recent first; entries whose files are gone are dropped."""
    raw = _settings().value(KEY, [])
    if isinstance(raw, str):
        raw = [raw]
    out = []
    for item in raw or []:
        try:
            e = json.loads(item)
        except (TypeError, ValueError):
            continue
        paths = [e.get("path")] if e.get("kind") == "review" else [e.get("model"), e.get("data")]
        if all(p and Path(p).exists() for p in paths):
            out.append(e)
    return out


def add(entry: dict) -> None:
    """Put ``entry`` first (``{"kind": "review", "path"}`` or ``{"kind": "inputs", ...}``)."""
    text = json.dumps(entry, sort_keys=True)
    current = [json.dumps(e, sort_keys=True) for e in entries()]
    items = [text] + [e for e in current if e != text]
    s = _settings()
    s.setValue(KEY, items[:KEEP])
    s.sync()


def clear() -> None:
    s = _settings()
    s.remove(KEY)
    s.sync()


def label(entry: dict) -> str:
    if entry.get("kind") == "review":
        return f"Review: {Path(entry['path']).name}  ({Path(entry['path']).parent})"
    target = f", target {entry['target']}" if entry.get("target") else ""
    return f"{Path(entry['model']).name} + {Path(entry['data']).name}{target}"
