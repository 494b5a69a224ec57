"""Timing helpers shared by the benchmarks (run them as ``python tools/bench/NAME.py``)."""

from __future__ import annotations

import math
import statistics
import time


def best_of(fn, repeats: int):
    """Call ``fn`` ``repeats`` times; return (fastest wall time in seconds, last result)."""
    best, result = math.inf, None
    for _ in range(max(1, repeats)):
        start = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - start)
    return best, result


def median_of(fn, repeats: int):
    """Call ``fn`` ``repeats`` times; return (median wall time in seconds, last result)."""
    times, result = [], None
    for _ in range(max(1, repeats)):
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result
