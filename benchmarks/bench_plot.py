"""--plot benchmark: figures printed as ratios measured in one run (never asserted).

For each shipped example with a feasible answer, `numerology solve EXAMPLE` end to end (process start to
exit) with and without `--plot FILE.png`, in turns, best of REPEATS each, and the ratio of the two
(target: within 3x). Both runs share the same cache of quantity strings, warmed first.

Run: python benchmarks/bench_plot.py [example.toml ...]
"""

from __future__ import annotations

import os

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[var] = "1"  # one core, in this process and the ones it starts

import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
from pathlib import Path  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from timing import timed  # noqa: E402

TARGET_RATIO = 3.0
#: Runs of each command, taken in turns with the other; the best of each is reported.
REPEATS = 3
EXAMPLES = ("broadcast_sfn.toml", "harbour_crane.toml", "rail_corridor.toml")


def main():
    names = sys.argv[1:] or EXAMPLES
    with tempfile.TemporaryDirectory() as folder:
        env = {**os.environ, "NUMEROLOGY_CACHE_DIR": folder}
        picture = Path(folder) / "plot.png"

        def command(example, plot):
            argv = [sys.executable, "-m", "numerology", "solve", str(ROOT / "requirements_examples" / example)]
            argv += ["--plot", str(picture)] if plot else []
            return lambda: subprocess.run(argv, env=env, cwd=ROOT, stdout=subprocess.DEVNULL, check=False)

        print(f"solve EXAMPLE with and without --plot, best of {REPEATS} each, taken in turns "
              f"(target: --plot within {TARGET_RATIO:g}x)")
        for example in names:
            plain, plotted = command(example, False), command(example, True)
            plain()  # warm the quantity cache and the file system
            without, with_plot = [], []
            for _ in range(REPEATS):
                without.append(timed(plain))
                with_plot.append(timed(plotted))
            ratio = min(with_plot) / min(without)
            print(f"  {example:24s} without {min(without):6.2f} s   with --plot {min(with_plot):6.2f} s   "
                  f"ratio {ratio:4.2f}   ({ratio / TARGET_RATIO:.2f} of the target)")


if __name__ == "__main__":
    main()
