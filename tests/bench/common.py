"""Shared pieces of the benchmarks: timing and the table they print."""

from __future__ import annotations

import time


def best_time(fn, repeats: int = 3) -> tuple[float, object]:
    """Best wall time of ``repeats`` calls (these machines are noisy), and the last result."""
    best, result = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - start)
    return best, result


def print_table(title: str, header: list[str], rows: list[list]) -> None:
    """Print rows as an aligned text table under ``title``."""
    cells = [[str(c) for c in header]] + [[_fmt(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    print(f"\n{title}")
    for k, r in enumerate(cells):
        print("  ".join(c.ljust(w) for c, w in zip(r, widths)))
        if k == 0:
            print("  ".join("-" * w for w in widths))


def _fmt(c) -> str:
    if isinstance(c, float):
        return f"{c:.3g}" if abs(c) < 1000 else f"{c:.0f}"
    return str(c)
