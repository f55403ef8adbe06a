"""Timing helper shared by the benchmark scripts."""

import statistics
import time


def timed(fn, runs):
    """(median seconds, best seconds, last result) over ``runs`` calls of ``fn``."""
    times = []
    out = None
    for _ in range(runs):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), min(times), out
