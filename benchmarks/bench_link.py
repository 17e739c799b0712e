"""Link-model benchmark: 10^6 (design, environment) pairs through link.evaluate, one core.

1000 candidate designs of an invented scenario against 1000 environments (speeds and delay spreads),
evaluated in chunks of designs (memory stays bounded). Printed, not asserted:

* the full model (channel-estimation error included: a finite-window LMMSE per distinct pair);
* the model without the estimation error (``estimation=False``, as the solver's screening runs it);
* a plain numpy pass over arrays of the same size, and the ratios to it.

Target (issue): under 1 s for 10^6 pairs.

Run: python benchmarks/bench_link.py [pairs_per_side]
"""

from __future__ import annotations

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[var] = "1"

import sys  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from numerology import candidates, link  # noqa: E402
from numerology.design import DesignArrays  # noqa: E402
from numerology.environment import derive_environment  # noqa: E402
from numerology.requirements import requirements_from_mapping  # noqa: E402
from numerology.sweep import site_environments, sites_from_values  # noqa: E402
from timing import best_of, timed  # noqa: E402

REQ = {  # invented scenario
    "environment": {"carrier": "3.5 GHz", "max_speed": "120 km/h", "profile": "EVA"},
    "radio": {"bandwidth": "20 MHz", "snr": "20 dB", "frequency_error": "0.1 ppm", "oscillator_linewidth": "20 Hz"},
    "goals": {"throughput": "30 Mbit/s", "max_latency": "1 ms"},
}
CHUNK = 50  # designs per call: 50 x 1000 pairs


def column(designs: DesignArrays, rows) -> DesignArrays:
    """Some designs as a column (shape (k, 1)) to broadcast against a row of environments."""
    values = {}
    for key in designs.__dataclass_fields__:
        value = getattr(designs, key)
        values[key] = np.asarray(value)[rows][:, None] if np.ndim(value) else value
    return DesignArrays(**values)


def main():
    side = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    req = requirements_from_mapping(REQ)
    env = derive_environment(req)
    grid = candidates.enumerate_grid(req, env, candidates.spacing_family(req))
    rng = np.random.default_rng(1)
    designs = grid.take(np.sort(rng.choice(grid.size, side, replace=False))).designs()
    sites = sites_from_values(req, max_speed_mps=np.linspace(1.0, 100.0, side),
                              rms_delay_spread_s=np.geomspace(50e-9, 1e-6, side))
    batch = site_environments(req, sites)
    pairs = side * side

    def model(estimation):
        for start in range(0, side, CHUNK):
            link.evaluate(column(designs, np.arange(start, min(start + CHUNK, side))), batch, req,
                          estimation=estimation)

    a = np.asarray(designs.subcarrier_spacing_hz, float)[:, None] * np.ones((1, side))
    b = np.asarray(batch.max_doppler_hz)[None, :] * np.ones((side, 1))

    def plain():
        x = a * b
        y = np.sqrt(x) + a / b
        np.log10(y * y + 1.0).sum()

    t_plain = best_of(plain, 3)
    t_fast = best_of(lambda: model(False), 2)
    t_full = timed(lambda: model(True))
    print(f"{pairs:,} (design, environment) pairs, one core")
    print(f"  plain numpy pass:                 {t_plain:8.3f} s")
    print(f"  link model without estimation:    {t_fast:8.3f} s  ratio {t_fast / t_plain:7.1f}  (target < 1 s)")
    print(f"  full link model (LMMSE estimates): {t_full:7.3f} s  ratio {t_full / t_plain:7.1f}  (target < 1 s)")


if __name__ == "__main__":
    main()
