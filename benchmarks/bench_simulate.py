"""Throughput of the Monte-Carlo link simulator (numerology.simulate), printed, not asserted.

Run from the repository root::

    python benchmarks/bench_simulate.py

It prints, for a 1024-point design over a 6-tap channel (ITU-R M.1225
Vehicular A delays and powers, classical Doppler at 70 Hz, noise at 20 dB,
LMMSE estimation), the resource elements simulated per second on one core
(channel generation included) and its ratio to the target, and the ratio of
the simulator's time to numpy's FFT alone on the same frames, both from the
same run, beside their targets.
BLAS and OpenMP are held to one thread: the variables are set before numpy is
imported. Each time is the best of ``REPEATS`` runs, for the simulator and the
FFT alike, taken in turns (the usual way to time code on a machine shared
with other work: the best run is the one least disturbed); the worst run
is printed beside it. The FFT baseline runs in the simulator's blocks of
frames, as the simulator's own FFTs do; numpy's FFT is faster on one frame
at a time (the arrays then fit in the cache), and the ratio to that is
printed too, for information.
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_name] = "1"  # one core: set before numpy loads its BLAS

import math  # noqa: E402
import sys  # noqa: E402
from pathlib import Path  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402

from numerology import simulate  # noqa: E402
from numerology.design import Design  # noqa: E402
from numerology.environment import Environment  # noqa: E402
from timing import timed  # noqa: E402

TARGET_RE_PER_S = 2e6
TARGET_FFT_RATIO = 5.0
#: Timed runs of each side; the best one counts.
REPEATS = 7

#: ITU-R M.1225 Annex 2, Vehicular A: delays (ns) and powers (dB).
VEHICULAR_A_NS = (0.0, 310.0, 710.0, 1090.0, 1730.0, 2510.0)
VEHICULAR_A_DB = (0.0, -1.0, -9.0, -10.0, -15.0, -20.0)


def _environment(max_doppler_hz: float) -> Environment:
    powers = 10.0 ** (np.asarray(VEHICULAR_A_DB) / 10.0)
    powers = powers / powers.sum()
    return Environment(
        carrier_hz=2e9, propagation_speed_mps=299792458.0, wavelength_m=0.15, speed_mps=0.0,
        max_doppler_hz=max_doppler_hz, doppler_spectrum="classical", k_factor=0.0, doppler_centroid_hz=0.0,
        doppler_spread_hz=max_doppler_hz / math.sqrt(2.0), coherence_correlation=0.5, coherence_time_s=math.inf,
        delays_s=tuple(d * 1e-9 for d in VEHICULAR_A_NS), powers=tuple(float(p) for p in powers),
        profile_name="ITU Vehicular A", profile_source="ITU-R M.1225", mean_excess_delay_s=0.0,
        rms_delay_spread_s=0.0, max_excess_delay_s=2.51e-6, coherence_bandwidth_hz=math.inf)


def main() -> None:
    design = Design("bench-1024", 15e3, 1024, 72, 600, 6, 4, 3, 14)
    environment = _environment(70.0)
    frames = 64
    symbols_per_frame = 56
    plan, _ = simulate._plan(design, environment, 20.0, 0.0, 0.0, "lmmse", symbols_per_frame, 4)
    symbols = frames * plan.symbols  # received symbols simulated, estimator margins included
    simulated_re = symbols * design.used_subcarriers
    # numpy's FFT of every received symbol of the same frames, in the simulator's blocks of frames
    block = np.zeros((plan.block_frames, plan.symbols, design.fft_size), dtype=complex)
    block += np.random.default_rng(0).standard_normal(block.shape)
    blocks = math.ceil(frames / plan.block_frames)

    simulate.simulate_link(design, environment, 20.0, frames=2, symbols_per_frame=symbols_per_frame)  # warm up
    np.fft.fft(block, axis=-1)
    def fft_of_blocks():  # each result dropped at once, as the simulator's buffers are reused
        for _ in range(blocks):
            np.fft.fft(block, axis=-1)

    def fft_of_frames():  # for information: one frame per call, small enough for the cache
        for frame in range(frames):
            np.fft.fft(block[frame % plan.block_frames], axis=-1)

    runs, fft_runs, frame_fft_runs = [], [], []
    for _ in range(REPEATS):  # interleaved, so that all sides meet the same machine load
        runs.append(timed(lambda: simulate.simulate_link(design, environment, 20.0, frames=frames,
                                                         symbols_per_frame=symbols_per_frame)))
        fft_runs.append(timed(fft_of_blocks) * frames / (blocks * plan.block_frames))
        frame_fft_runs.append(timed(fft_of_frames))
    elapsed, fft_s, frame_fft_s = min(runs), min(fft_runs), min(frame_fft_runs)
    result = simulate.simulate_link(design, environment, 20.0, frames=frames, symbols_per_frame=symbols_per_frame)
    measured_re = frames * result.measured_per_frame

    print(f"design {design}")
    print(f"channel: 6 taps (ITU-R M.1225 Vehicular A), classical Doppler 70 Hz, SNR 20 dB, LMMSE; "
          f"{frames} frames x {plan.symbols} symbols (Legendre order {plan.order})")
    print(f"simulator time:           {elapsed:.3f} s (best of {REPEATS}; worst {max(runs):.3f} s)")
    rate = simulated_re / elapsed
    print(f"resource elements/s:      {rate:.3g} simulated, {measured_re / elapsed:.3g} measured; "
          f"simulated / target {rate / TARGET_RE_PER_S:.1f} (target >= 1, {TARGET_RE_PER_S:.0e}/s)")
    print(f"numpy FFT alone:          {fft_s:.4f} s for the same {symbols} received symbols "
          f"(best of {REPEATS}; worst {max(fft_runs):.4f} s)")
    print(f"simulator / FFT ratio:    {elapsed / fft_s:.2f} (target <= {TARGET_FFT_RATIO:g})")
    print(f"for information:          numpy FFT one frame per call {frame_fft_s:.4f} s, "
          f"simulator / that {elapsed / frame_fft_s:.2f}")
    print(f"measured: {result}")


if __name__ == "__main__":
    main()
