"""--plot benchmark: figures printed as ratios measured in one run (never asserted).

For each shipped example with a feasible answer, `numerology solve EXAMPLE` end to end (process start to
exit) with and without `--plot FILE.png`, in turns, best of REPEATS each, and the ratio of the two
(target: within 3x); then a `check` with a what-if (the plot drawn at the point analysed). Both runs share the
same cache of quantity strings, warmed first. Each figure is given as wall time and as the processor time of
the process (user + system, from getrusage): on a machine other jobs share, the second is the steadier.

Run: python benchmarks/bench_plot.py [example.toml ...]
"""

from __future__ import annotations

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[var] = "1"  # one core, in this process and the ones it starts

import resource  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
from pathlib import Path  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from timing import timed  # noqa: E402


def cpu_timed(fn) -> tuple[float, float]:
    """(wall seconds, processor seconds of the child processes) of one call of ``fn()``."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    wall = timed(fn)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


TARGET_RATIO = 3.0
#: Runs of each command, taken in turns with the other; the best of each is reported.
REPEATS = 3
EXAMPLES = ("broadcast_sfn.toml", "harbour_crane.toml", "rail_corridor.toml")
#: A check with a what-if: its plot is drawn at the speed analysed, with the check's stretch limits.
CHECK = ("check", "rail_corridor.toml", "--preset", "nr-mu1", "--speed", "350 km/h")


def main():
    names = sys.argv[1:] or EXAMPLES
    with tempfile.TemporaryDirectory() as folder:
        env = {**os.environ, "NUMEROLOGY_CACHE_DIR": folder}
        picture = Path(folder) / "plot.png"

        def command(arguments, plot):
            argv = [sys.executable, "-m", "numerology", *arguments]
            argv += ["--plot", str(picture)] if plot else []
            return lambda: subprocess.run(argv, env=env, cwd=ROOT, stdout=subprocess.DEVNULL, check=False)

        print(f"with and without --plot, best of {REPEATS} each, taken in turns (target: --plot within "
              f"{TARGET_RATIO:g}x); wall time, and processor time of the process in brackets")
        runs = [(f"solve {example}", ["solve", str(ROOT / "requirements_examples" / example)]) for example in names]
        if not sys.argv[1:]:
            check = list(CHECK)
            check[1] = str(ROOT / "requirements_examples" / check[1])
            runs.append((" ".join(CHECK[:2]) + " --speed", check))
        for label, arguments in runs:
            plain, plotted = command(arguments, False), command(arguments, True)
            plain()  # warm the quantity cache and the file system
            without, with_plot = [], []
            for _ in range(REPEATS):
                without.append(cpu_timed(plain))
                with_plot.append(cpu_timed(plotted))
            wall = min(w for w, _ in with_plot) / min(w for w, _ in without)
            cpu = min(c for _, c in with_plot) / min(c for _, c in without)
            print(f"  {label:40s} without {min(w for w, _ in without):6.2f} s ({min(c for _, c in without):5.2f} s)"
                  f"   with --plot {min(w for w, _ in with_plot):6.2f} s ({min(c for _, c in with_plot):5.2f} s)"
                  f"   ratio {wall:4.2f} ({cpu:4.2f})   ({wall / TARGET_RATIO:.2f} of the target)")


if __name__ == "__main__":
    main()
