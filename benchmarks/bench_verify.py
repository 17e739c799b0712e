"""Time of one verification (numerology.verify) as a ratio to the import floor, printed, not asserted.

Run from the repository root::

    python benchmarks/bench_verify.py [--repeats N]

For every shipped example that has a feasible design (its ``--best``, found
once, not timed) and for the presets the tests verify, it times
``verify(req, design)`` with the default run length (until every figure is
decided, within the sample budget) and prints it as a ratio to the *import
floor*: a fresh Python process that imports numpy, scipy.special and rich
(what every command pays before it starts). The target is a ratio below 10.
Each time is the best of ``--repeats`` runs, the verification and the floor
taken in turns, so that both meet the same machine load. It also prints each
verdict and the frames the run needed.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from timing import timed  # noqa: E402

TARGET_RATIO = 10.0
FLOOR = [sys.executable, "-c", "import numpy, scipy.special, rich"]


def cases():
    """(label, requirements, design) of every case timed."""
    from numerology import api
    from numerology.presets import get_preset
    from numerology.requirements import requirements_from_mapping

    out = []
    for path in sorted((ROOT / "requirements_examples").glob("*.toml")):
        req = api.load(path)
        result = api.solve(req, explain=False, with_limits=False, top=1)
        if result.feasible:
            out.append((f"{path.stem} --best", req, result.designs[0].check.design))
    harbour = api.load(ROOT / "requirements_examples" / "harbour_crane.toml")
    rail = api.load(ROOT / "requirements_examples" / "rail_corridor.toml")
    road = requirements_from_mapping({
        "environment": {"carrier": "5.9 GHz", "max_speed": "250 km/h", "max_excess_delay": "400 ns",
                        "rms_delay_spread": "100 ns"},
        "radio": {"bandwidth": "10 MHz", "snr": "20 dB"}})
    out.append(("harbour_crane nr-mu1", harbour, get_preset("nr-mu1").design))
    out.append(("rail_corridor lte-20-normal", rail, get_preset("lte-20-normal").design))
    out.append(("road side 250 km/h wifi-p-10", road, get_preset("wifi-p-10").design))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    from numerology.verify import verify

    env = dict(os.environ)
    floor_runs = []
    rows = []
    for label, req, design in cases():
        verify(req, design)  # warm caches (model weights, imports), as a second command in a session would not be
        runs = []
        for _ in range(args.repeats):
            floor_runs.append(timed(lambda: subprocess.run(FLOOR, check=True, env=env)))
            holder = {}
            runs.append(timed(lambda: holder.setdefault("v", verify(req, design))))
        rows.append((label, min(runs), holder["v"]))
    floor = min(floor_runs)
    print(f"import floor (numpy + scipy.special + rich in a fresh process): {floor:.3f} s "
          f"(best of {len(floor_runs)})")
    print(f"{'case':40s} {'time':>8s} {'ratio':>6s}  verdict (frames)")
    worst = 0.0
    for label, seconds, result in rows:
        ratio = seconds / floor
        worst = max(worst, ratio)
        print(f"{label:40s} {seconds:7.3f}s {ratio:6.2f}  {result.verdict} ({result.simulation.frames})"
              + ("" if result.rules_passed else "; design fails " + ", ".join(r[0] for r in result.failing_rules)))
    print(f"worst ratio {worst:.2f} (target < {TARGET_RATIO:g})")


if __name__ == "__main__":
    main()
