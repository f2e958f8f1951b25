"""The usual cautions as the window shows them: one line a sentence, from the core's text."""

from __future__ import annotations

from ..cautions import CAUTION_LINES


def cautions() -> tuple[str, ...]:
    """The caution lines (the same wording as the report and the README)."""
    return CAUTION_LINES
