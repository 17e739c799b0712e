"""Mode-plan benchmark: figures printed, never asserted.

Generates a sites file of 10^4 invented rows for the port example (the zones
of ``requirements_examples/port_sites.csv``: quay cranes, yard blocks, access
road, rail spur, gates; values rounded as that file rounds them, so many
rows share a channel) in a temporary folder, then times on one core,
in turns, best of three (or of the turns given), each run with the model's in-process caches emptied
first (as a command starts):

(a) ``sweep --best`` in process: ``api.solve`` for the best design, then
    ``load_sites`` and ``sweep``;
(b) ``plan`` in process: ``load_sites`` and ``plan.plan`` with the default
    objective and search space;

and prints both with their ratio (the target: (b) within 10 times (a)). With
``--all-objectives`` the other objectives are timed once each, for information.

Run: python benchmarks/bench_plan.py [rows] [turns] [--all-objectives]   (default 10^4 rows, 3 turns)
"""

from __future__ import annotations

import csv
import sys
import tempfile
from pathlib import Path

from timing import cold, one_core, timed

one_core()  # before numpy is imported
import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from numerology import api, plan, sweep  # noqa: E402

TARGET_RATIO = 10.0
ROWS = 10_000
#: zone -> (share of the sites, speed km/h, max excess delay us, rms delay spread ns, SNR dB): invented, the zones
#: of requirements_examples/port_sites.csv.
ZONES = {
    "quay": (0.18, (5, 15), (1.5, 3.0), (200, 500), (18, 24)),
    "yard": (0.40, (10, 25), (3.0, 6.0), (600, 1400), (14, 20)),
    "road": (0.20, (80, 130), (0.5, 1.5), (100, 300), (16, 22)),
    "rail": (0.14, (30, 60), (0.5, 1.5), (100, 300), (14, 20)),
    "gate": (0.08, (0, 15), (0.5, 1.0), (100, 200), (20, 26)),
}


def write_sites(path: Path, rows: int, seed: int = 11) -> None:
    """Invented sites in the example's zones, rounded as the example rounds them: 5 km/h, 0.5 us, 100 ns, 1 dB."""
    rng = np.random.default_rng(seed)
    with open(path, "w", newline="") as handle:
        handle.write("# invented benchmark sites (numerology benchmarks/bench_plan.py)\n")
        writer = csv.writer(handle)
        writer.writerow(["site", "max_speed [km/h]", "max_excess_delay [us]", "rms_delay_spread [ns]", "snr [dB]"])
        for zone, (share, speed, delay, rms, snr) in ZONES.items():
            n = int(round(share * rows))
            v = np.round(rng.uniform(*speed, n) / 5) * 5
            d = np.round(rng.uniform(*delay, n) * 2) / 2
            r = np.minimum(np.round(rng.uniform(*rms, n), -2), np.floor(d * 4) * 100)  # at most 0.4 of the span
            s = np.round(rng.uniform(*snr, n))
            writer.writerows(zip((f"{zone} {i}" for i in range(n)), v.tolist(), d.tolist(), r.tolist(), s.tolist()))


def main():
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else ROWS
    turns = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    all_objectives = "--all-objectives" in sys.argv[3:]
    req = api.load(ROOT / "requirements_examples" / "port_deployment.toml")
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "sites.csv"
        write_sites(path, rows)

        def sweep_best():
            design = api.solve(req, explain=False, with_limits=False, top=1).designs[0].check.design
            return sweep.sweep(req, design, sweep.load_sites(path, req))

        def make_plan(objective=plan.DEFAULT_OBJECTIVE):
            return plan.plan(req, sweep.load_sites(path, req), objective=objective)

        sweep_s, plan_s, results = [], [], []
        for _ in range(turns):  # in turns: the machine's speed drifts
            sweep_s.append(timed(cold(sweep_best)))
            plan_s.append(timed(cold(lambda: results.append(make_plan()))))
        result = results[-1]
        others = {objective: timed(cold(lambda: make_plan(objective))) for objective in plan.OBJECTIVES
                  if objective != plan.DEFAULT_OBJECTIVE} if all_objectives else {}
    a, b = min(sweep_s), min(plan_s)
    print(f"plan: {result}")
    print(f"      {result.search}")
    print(f"(a) sweep --best:              {a:8.2f} s")
    print(f"(b) plan ({plan.DEFAULT_OBJECTIVE}):      {b:8.2f} s")
    print(f"ratio (b)/(a): {b / a:.1f} (target: at most {TARGET_RATIO:g})")
    for objective, seconds in others.items():
        print(f"    plan ({objective}), once: {seconds:8.2f} s   (ratio to (a): {seconds / a:.1f})")


if __name__ == "__main__":
    main()
