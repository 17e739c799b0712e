"""Diagnosis benchmark: figures printed as ratios measured in one run (never asserted).

The diagnosis of the shipped infeasible example (drone_video.toml: the conflict, every key that can help,
each re-solved) against the solve of a feasible example of similar size (broadcast_sfn.toml and
rail_corridor.toml: 0.84 and 0.82 million candidates against the drone's 0.85 million), each in a fresh
process (caches of estimation weights start empty, as for a user), in turns, best of REPEATS each
(target: ratio <= 1).

Run: python benchmarks/bench_diagnosis.py
"""

from __future__ import annotations

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[var] = "1"  # one core, in this process and the ones it starts

import subprocess  # noqa: E402
import sys  # noqa: E402
from pathlib import Path  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent

TARGET_RATIO = 1.0
REPEATS = 2
INFEASIBLE = "drone_video.toml"
FEASIBLE = ("broadcast_sfn.toml", "rail_corridor.toml")

#: One timed step in a fresh process: load, then time either the diagnosis or the whole solve.
CHILD = """
import sys, time
from numerology import api
from numerology.diagnosis import diagnose
req = api.load(sys.argv[2])
start = time.perf_counter()
if sys.argv[1] == "diagnose":
    result = diagnose(req)
else:
    result = api.solve(req)
print(time.perf_counter() - start)
"""


def timed_in_child(what: str, example: str) -> float:
    done = subprocess.run([sys.executable, "-c", CHILD, what, str(ROOT / "requirements_examples" / example)],
                          cwd=ROOT, capture_output=True, text=True, check=True)
    return float(done.stdout.strip().splitlines()[-1])


def main():
    print(f"diagnosis of {INFEASIBLE} against the solve of feasible examples of similar size, each in a fresh "
          f"process, in turns, best of {REPEATS} (target: ratio <= {TARGET_RATIO:g})")
    diagnosis, solves = [], {name: [] for name in FEASIBLE}
    for _ in range(REPEATS):
        diagnosis.append(timed_in_child("diagnose", INFEASIBLE))
        for name in FEASIBLE:
            solves[name].append(timed_in_child("solve", name))
    print(f"  diagnosis {INFEASIBLE:22s} {min(diagnosis):6.2f} s")
    for name in FEASIBLE:
        ratio = min(diagnosis) / min(solves[name])
        print(f"  solve     {name:22s} {min(solves[name]):6.2f} s   ratio {ratio:4.2f}   "
              f"({ratio / TARGET_RATIO:.2f} of the target)")


if __name__ == "__main__":
    main()
