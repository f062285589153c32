"""Timing helpers shared by the bench scripts (run them as ``python bench/NAME.py``)."""

from __future__ import annotations

import os
import time
from collections.abc import Callable


def best_of(repeats: int, fn: Callable[[], object]) -> float:
    """The fastest of ``repeats`` runs of ``fn``, in seconds: the least disturbed by other load."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def pin_to_one_core() -> None:
    """Run on one core, as the targets are stated ("on one core")."""
    if hasattr(os, "sched_setaffinity"):
        os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]})
