"""Solver benchmarks: figures printed as ratios measured in one run (never asserted).

1. Solver time on a candidate space of at least 10^6 designs (target: under 0.3 s on one core).
2. `numerology solve` end to end on each shipped example, process start to exit, against the import of the
   scientific stack it cannot avoid (target: within 2x).

Run: python benchmarks/bench_solver.py
"""

from __future__ import annotations

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[var] = "1"  # one core

import subprocess  # noqa: E402
import sys  # noqa: E402
from pathlib import Path  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from numerology import solver  # noqa: E402
from timing import best_of, timed  # noqa: E402
from numerology.environment import derive_environment  # noqa: E402
from numerology.requirements import requirements_from_mapping  # noqa: E402

LARGE = {  # an invented scenario with a large search space
    "environment": {"carrier": "3.5 GHz", "max_speed": "120 km/h", "profile": "EVA"},
    "radio": {"bandwidth": "40 MHz", "snr": "20 dB", "frequency_error": "0.1 ppm", "oscillator_linewidth": "20 Hz"},
    "goals": {"throughput": "60 Mbit/s", "max_latency": "1 ms"},
    "search": {"spacing_exponents": [-4, 6], "min_fft_size": 64, "max_fft_size": 65536,
               "max_pilot_freq_spacing": 48, "max_pilot_time_spacing": 32, "symbols_per_slot": [7, 14, 28, 56]},
}


#: Runs of each command; the best is reported.
REPEATS = 5


def main():
    req = requirements_from_mapping(LARGE)
    env = derive_environment(req)
    found = solver.search(req, env)
    seconds = best_of(lambda: solver.search(req, env), 5)
    print(f"candidate space: {found.stats.candidates:,} designs; after screening {found.stats.after_cheap_rules:,}; "
          f"evaluated exactly {found.stats.evaluated_exactly:,}")
    print(f"solver time: {seconds:.3f} s (target < 0.3 s; ratio to target {seconds / 0.3:.2f})")

    baseline_cmd = [sys.executable, "-c", "import numpy, scipy.special, scipy.integrate, scipy.optimize, rich.console"]
    subprocess.run([sys.executable, "-m", "numerology", "solve", str(ROOT / "requirements_examples" / "rail_corridor.toml"),
                    "--json"], check=False, stdout=subprocess.DEVNULL, cwd=ROOT)  # warm the disk cache
    print(f"end to end, best of {REPEATS} runs taken in turns with the baseline (the machine's speed drifts):")
    for path in sorted((ROOT / "requirements_examples").glob("*.toml")):
        cmd = [sys.executable, "-m", "numerology", "solve", str(path), "--json"]
        base, run = [], []
        for _ in range(REPEATS):
            base.append(timed(lambda: subprocess.run(baseline_cmd, check=True)))
            run.append(timed(lambda: subprocess.run(cmd, check=False, stdout=subprocess.DEVNULL, cwd=ROOT)))
        print(f"solve {path.name:24s} {min(run):6.3f} s  scientific-stack import {min(base):6.3f} s  "
              f"ratio {min(run) / min(base):5.2f} (target <= 2)")


if __name__ == "__main__":
    main()
