"""Timing helper shared by the benchmarks (run by hand, never as a test)."""

import statistics
import time


def median_s(fn, repeats: int) -> float:
    """Median wall time of ``repeats`` calls of ``fn``, s."""
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)
