"""File digests (sha256), the one way Grovewise identifies the files a review used."""

from __future__ import annotations

import hashlib
from pathlib import Path


def sha256_of(path: Path | str) -> str:
    """Hex sha256 of a file's bytes, read in blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()
