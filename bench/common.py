"""Helpers shared by the benchmarks: timing and a plain results table."""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import TypeVar

T = TypeVar("T")


def timed(fn: Callable[[], T], repeat: int = 1) -> tuple[float, T]:
    """Best wall-clock seconds over ``repeat`` runs, and the last result."""
    best = float("inf")
    result: T
    for _ in range(repeat):
        start = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - start)
    return best, result


def table(rows: list[tuple[str, float, str]]) -> str:
    width = max(len(r[0]) for r in rows)
    return "\n".join(f"  {name:<{width}}  {secs:8.3f} s  {note}" for name, secs, note in rows)
