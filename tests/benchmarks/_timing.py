"""Timing helper shared by the benchmark scripts (not collected by pytest)."""
from __future__ import annotations

import statistics
import time


def median_time(func, repeat: int) -> tuple[float, object]:
    """Median wall time (s) of ``repeat`` calls of ``func`` and the last call's result."""
    times, result = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        result = func()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result
