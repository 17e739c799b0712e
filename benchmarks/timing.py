"""Wall-clock timing shared by the benchmarks (figures are printed, never asserted).

The machines are noisy, so a figure is the best of several runs, and a figure
and its baseline are measured in turns where the benchmark can.
"""

from __future__ import annotations

import os
import time

#: Thread-count variables of the numerical libraries.
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def one_core() -> None:
    """Keep BLAS and OpenMP to one thread (call it before numpy is imported)."""
    for var in THREAD_VARIABLES:
        os.environ[var] = "1"


def timed(fn) -> float:
    """Seconds one call of ``fn()`` takes."""
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def best_of(fn, repeats: int) -> float:
    """The shortest of ``repeats`` timed calls of ``fn()``."""
    return min(timed(fn) for _ in range(repeats))
