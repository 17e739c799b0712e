"""Wall-clock timing shared by the benchmarks (figures are printed, never asserted).

The machines are noisy, so a figure is the best of several runs, and a figure
and its baseline are measured in turns where the benchmark can.
"""

from __future__ import annotations

import time


def timed(fn) -> float:
    """Seconds one call of ``fn()`` takes."""
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def best_of(fn, repeats: int) -> float:
    """The shortest of ``repeats`` timed calls of ``fn()``."""
    return min(timed(fn) for _ in range(repeats))
