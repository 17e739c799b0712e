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


def empty_model_caches() -> None:
    """Empty the model's in-process caches (estimation weights, bands, guard and mask figures, roots), as a
    command run starts with them empty; a best-of-several figure otherwise times every run after the first
    warm."""
    from numerology import doppler, environment, estimation, link, oscillator, pilots, sweep

    for cache in (link._WEIGHTS_CACHE, link._GUARD_CACHE, link._MASK_CACHE, link._BANDS, doppler._CROSSINGS,
                  environment._SHAPES, oscillator._VARIANCE_CACHE, pilots._STEPS):
        cache.clear()
    for cached in (link._schedule, link._staggered_schedule, estimation._shape_groups, sweep._unit_profile,
                   sweep._template):
        cached.cache_clear()


def cold(fn):
    """``fn`` with the model's in-process caches emptied first (:func:`empty_model_caches`)."""
    def run():
        empty_model_caches()
        return fn()
    return run
