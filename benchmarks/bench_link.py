"""Link-model benchmark: 10^6 (design, environment) pairs through link.evaluate, one core.

Prints the time and its ratio to a plain numpy pass over arrays of the same size (a few elementwise
operations per pair: the floor any vectorised model pays). Target (issue): under 1 s. Not asserted.

Run: python benchmarks/bench_link.py
"""

from __future__ import annotations

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[var] = "1"

import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from numerology import candidates, link  # noqa: E402
from numerology.environment import derive_environment  # noqa: E402
from numerology.requirements import requirements_from_mapping  # noqa: E402
from numerology.sweep import site_environments, sites_from_values  # noqa: E402

REQ = {  # invented scenario
    "environment": {"carrier": "3.5 GHz", "max_speed": "120 km/h", "profile": "EVA"},
    "radio": {"bandwidth": "20 MHz", "snr": "20 dB", "frequency_error": "0.1 ppm", "oscillator_linewidth": "20 Hz"},
    "goals": {"throughput": "30 Mbit/s", "max_latency": "1 ms"},
}


def best_of(fn, repeats=3):
    out = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t)
    return min(out)


def main():
    req = requirements_from_mapping(REQ)
    env = derive_environment(req)
    grid = candidates.enumerate_grid(req, env, candidates.spacing_family(req))
    rng = np.random.default_rng(1)
    designs = grid.take(rng.choice(grid.size, 1000, replace=False)).designs()
    designs = type(designs)(**{k: (np.asarray(getattr(designs, k))[:, None] if np.ndim(getattr(designs, k)) else
                                   getattr(designs, k)) for k in designs.__dataclass_fields__})
    speeds = np.linspace(1.0, 100.0, 1000)
    delays = np.linspace(0.5e-6, 5e-6, 1000)
    sites = sites_from_values(req, max_speed_mps=speeds, rms_delay_spread_s=delays / 7)
    batch = site_environments(req, sites)
    pairs = 1000 * 1000

    def model():
        return link.evaluate(designs, batch, req)

    a = np.asarray(designs.subcarrier_spacing_hz, float) * np.ones((1, 1000))
    b = np.asarray(batch.max_doppler_hz)[None, :] * np.ones((1000, 1))

    def plain():
        x = a * b
        y = np.sqrt(x) + a / b
        return np.log10(y * y + 1.0).sum()

    t_model = best_of(model)
    t_plain = best_of(plain)
    print(f"{pairs:,} (design, environment) pairs: link.evaluate {t_model:.3f} s (target < 1 s)")
    print(f"plain numpy pass over the same arrays: {t_plain:.4f} s; ratio {t_model / t_plain:.1f}")


if __name__ == "__main__":
    main()
