"""The usual cautions (RULES.md) as the window shows them.

The report's composer owns the wording (``grovewise.report.content.CAUTIONS``), so the
window, the report and the README say the same thing; the lines below stand in only when
that module is missing.
"""

from __future__ import annotations

import re

FALLBACK = (
    "The surrogate is an approximation of the model, and the model is not a diagnosis, a "
    "credit decision or any other decision about a person.",
    "Fidelity is measured on the data given here; on other data the surrogate may agree "
    "less with the model.",
    "The rules do not replace the model's own validation.",
    "Use follows local regulation and licensed professional practice.",
)


def cautions() -> tuple[str, ...]:
    """The caution lines, from the report's composer when it has them (one line a sentence)."""
    try:
        from ..report.content import CAUTIONS  # type: ignore[attr-defined]
    except (ImportError, AttributeError):
        return FALLBACK
    if isinstance(CAUTIONS, str):
        lines = [s.strip() for s in re.split(r"(?<=\.)\s+(?=[A-Z])", CAUTIONS) if s.strip()]
    else:
        lines = [str(s) for s in CAUTIONS]
    return tuple(lines) or FALLBACK
