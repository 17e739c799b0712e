"""Tests of the Monte-Carlo link simulator (numerology.simulate) against outside closed forms.

Statistical checks compare a Monte-Carlo estimate with its theory at a
tolerance of several standard errors of that estimate (the simulator's own
confidence interval, frames being independent); the sizes keep the standard
error well below the tolerance, and each tolerance says where it comes from.
The seeds are fixed, so the tests are deterministic.
"""

from __future__ import annotations

import ast
import inspect
import math

import numpy as np
import pytest
import scipy.integrate
import scipy.special as sp
from numpy.testing import assert_allclose

from numerology import doppler, estimation, simulate
from numerology.design import Design
from numerology.environment import Environment
from numerology.errors import InputError

DB = 1.0  # tolerances in dB are written as multiples of this


def make_environment(delays_s, powers, max_doppler_hz=0.0, spectrum="classical", k_factor=0.0):
    """An Environment with only the fields the simulator reads set meaningfully (line of sight at the first tap)."""
    powers = np.asarray(powers, dtype=float)
    powers = powers / powers.sum()
    los = 0.0 if spectrum in ("classical", "flat") else k_factor / (1.0 + k_factor)
    return Environment(
        carrier_hz=2e9, propagation_speed_mps=299792458.0, wavelength_m=0.15, speed_mps=0.0,
        max_doppler_hz=max_doppler_hz, doppler_spectrum=spectrum, k_factor=k_factor, doppler_centroid_hz=0.0,
        doppler_spread_hz=0.0, coherence_correlation=0.5, coherence_time_s=math.inf,
        delays_s=tuple(float(d) for d in delays_s), powers=tuple(float(p) for p in powers),
        profile_name="test", profile_source="test", mean_excess_delay_s=0.0, rms_delay_spread_s=0.0,
        max_excess_delay_s=float(max(delays_s)), coherence_bandwidth_hz=math.inf, los_fraction=los)


def db_ratio(measured, predicted):
    return 10.0 * math.log10(measured / predicted)


# 256-point test numerology at 15 kHz (f_s = 3.84 MHz, T_u = 66.7 us), CP 32 samples.
SPACING_HZ = 15e3
FFT = 256
SAMPLE_S = 1.0 / (FFT * SPACING_HZ)


def small_design(used=240, lattice=(4, 2, 0), cp=32, symbols=8, **pattern):
    return Design("test-256", SPACING_HZ, FFT, cp, used, *lattice, symbols, **pattern)


def within_interval(value, interval, expected, widest):
    """``expected`` within two half-widths of the simulator's 95 % interval (about 4 standard errors) of
    ``value``, and that half-width below ``widest`` (relative), so that the check means something."""
    low, high = interval
    half = 0.5 * (high - low)
    assert half < widest * expected, (value, interval)
    assert abs(value - expected) <= 2 * half, (value, interval, expected)


# --- the fading generator ------------------------------------------------------------


def within_standard_errors(per_realisation, expected, count=4.0, largest_se=0.01):
    """Mean of per-realisation estimates within ``count`` standard errors of the expectation.

    The standard error comes from the spread of the realisations; requiring it
    to be below ``largest_se`` keeps the check meaningful.
    """
    per_realisation = np.asarray(per_realisation)
    se = per_realisation.std(axis=-1, ddof=1) / math.sqrt(per_realisation.shape[-1])
    assert np.all(se < largest_se)
    assert np.all(np.abs(per_realisation.mean(axis=-1) - expected) <= count * se)


def test_autocorrelation_is_clarke_j0():
    """Time-averaged autocorrelation of the classical fading equals J0(2 pi f_D tau).

    Source: Clarke, Bell Syst. Tech. J. 47(6), 1968; Jakes, Microwave Mobile
    Communications, 1974 (R(tau) = J0(2 pi f_D tau) for the classical
    spectrum). Each of 120 realisations is averaged over 100 Doppler
    periods; the check allows 4 standard errors of the mean over
    realisations (about 0.006, measured from the realisations).
    """
    f_d = 100.0
    step_s = 1.0 / (40 * f_d)
    gains = simulate.fading_gains(np.arange(4000) * step_s, f_d, "classical", realisations=120, seed=1)
    lags = np.array([4, 10, 16, 24, 40, 60])  # f_D tau = 0.1 ... 1.5
    per = np.array([np.mean(gains[:, lag:] * np.conj(gains[:, :-lag]), axis=1) for lag in lags])
    within_standard_errors(per.real, sp.j0(2 * np.pi * f_d * lags * step_s))
    within_standard_errors(per.imag, 0.0)  # symmetric spectrum: real autocorrelation


@pytest.mark.parametrize("spectrum, expected", [
    ("classical", 1 / math.sqrt(2)),  # Jakes 1974: rms width of the U-shaped spectrum f_D/sqrt(2)
    ("flat", 1 / math.sqrt(3)),  # uniform on [-f_D, f_D]: f_D/sqrt(3) (calc)
])
def test_rms_doppler_spread(spectrum, expected):
    """Rms Doppler spread from the gain's derivative: E|h'|^2 = (2 pi)^2 int f^2 S(f) df.

    Sources: Jakes 1974 (classical f_D/sqrt(2)); doppler.doppler_spread_hz gives
    the same values. The derivative is a central difference at 1/200 of the
    Doppler period (truncation error 1e-4 relative). 60 realisations of 20
    Doppler periods; 4 standard errors of the per-realisation spread
    (about 0.005 and 0.003 of f_D, measured).
    """
    f_d = 50.0
    step_s = 1.0 / (200 * f_d)
    gains = simulate.fading_gains(np.arange(4001) * step_s, f_d, spectrum, realisations=60, seed=2)
    derivative = (gains[:, 2:] - gains[:, :-2]) / (2 * step_s)
    per = np.sqrt(np.mean(np.abs(derivative) ** 2, axis=1) / np.mean(np.abs(gains) ** 2, axis=1)) / (2 * np.pi * f_d)
    within_standard_errors(per, expected)
    assert_allclose(expected * f_d, doppler.doppler_spread_hz(f_d, spectrum), rtol=1e-12)


@pytest.mark.parametrize("spectrum, inner_fraction", [
    ("classical", 1 / 3),  # Clarke U shape: CDF 1/2 + arcsin(f/f_D)/pi, so |f| < f_D/2 holds 2 arcsin(1/2)/pi (calc)
    ("flat", 1 / 2),  # uniform: half the power within |f| < f_D/2
])
def test_doppler_spectrum_shape(spectrum, inner_fraction):
    """Fraction of the fading's periodogram inside |f| < f_D/2: 1/3 for Clarke's U shape, 1/2 for flat.

    Source: Clarke 1968 (spectrum 1/(pi f_D sqrt(1 - (f/f_D)^2))). Hann-windowed
    periodograms of 100 Doppler periods resolve f_D/50; where the spectrum is
    smooth (at f_D/2) leakage across the boundary cancels to first order.
    60 realisations, 4 standard errors.
    """
    f_d = 100.0
    rate_hz = 8 * f_d
    count = 800  # 1 s: 100 Doppler periods
    gains = simulate.fading_gains(np.arange(count) / rate_hz, f_d, spectrum, realisations=60, seed=3)
    periodogram = np.abs(np.fft.fft(gains * np.hanning(count), axis=1)) ** 2
    freqs = np.fft.fftfreq(count, 1.0 / rate_hz)
    per = periodogram[:, np.abs(freqs) < f_d / 2].sum(axis=1) / periodogram.sum(axis=1)
    within_standard_errors(per, inner_fraction)


@pytest.mark.parametrize("spectrum", ["rician", "tracked"])
def test_rician_k_factor_by_moments(spectrum):
    """Moment-method K estimate of the simulated Rician fading equals the K asked for.

    Source: Greenstein, Michelson, Erceg, "Moment-method estimation of the
    Ricean K-factor", IEEE Commun. Lett. 3(6), 1999: with G_a = E|h|^2 and
    G_v = sqrt(var |h|^2), K = sqrt(G_a^2 - G_v^2) / (G_a - sqrt(G_a^2 - G_v^2))
    (from memory). 400 realisations x 200 samples 4/f_D apart; over 20 seeds
    the estimate had a mean of 1.002 K and a spread of 0.5 % (measured once),
    so rtol 0.03 is 6 spreads. ``tracked`` only shifts frequencies, so K is
    the same.
    """
    k_linear = 10 ** 0.9  # 9 dB
    f_d = 100.0
    gains = simulate.fading_gains(np.arange(200) * 4.0 / f_d, f_d, spectrum, k_linear, realisations=400, seed=4)
    power = np.abs(gains) ** 2
    g_a = power.mean()
    g_v = power.std()
    root = math.sqrt(g_a**2 - g_v**2)
    assert_allclose(root / (g_a - root), k_linear, rtol=0.03)
    assert_allclose(g_a, 1.0, rtol=0.02)  # unit power: random LOS phase, diffuse power 1/(K+1)


def test_spherical_bessel_series_matches_mpmath():
    """The small-argument series for j_q(z) agrees with j_q(z) = sqrt(pi/(2z)) J_{q+1/2}(z).

    Source: Abramowitz & Stegun, Handbook of Mathematical Functions, 10.1.1
    (definition) and 10.1.2 (series), evaluated with mpmath at 40 digits.
    Tolerance: a few double-precision rounding errors.
    """
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    z = np.array([1e-9, 1e-4, 3e-3, 0.05, 0.0999])
    got = simulate._spherical_bessel(4, z)
    exact = np.array([[float(mpmath.sqrt(mpmath.pi / (2 * mpmath.mpf(x))) * mpmath.besselj(q + 0.5, mpmath.mpf(x)))
                       for q in range(5)] for x in z])
    assert_allclose(got, exact, rtol=2e-15, atol=0)


# --- independence from the model -----------------------------------------------------------------


def test_simulator_reads_declarations_not_the_model():
    """The simulator imports only what it shares with the model by declaration (the design, the pilot
    arrangement, the environment, the error type), never the model's estimation, correlation or interference
    code (numerology.estimation, link, pilots, doppler, delay, oscillator)."""
    tree = ast.parse(inspect.getsource(simulate))
    imported = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.level == 1:
            imported |= {node.module} if node.module else {alias.name for alias in node.names}
    assert imported == {"arrangement", "design", "environment", "errors"}


def test_receiver_combines_as_many_pilot_symbols_as_the_model_states():
    """The receiver's limit on pilot-bearing symbols is the model's declared receiver (kept equal here)."""
    assert simulate.RECEIVER_PILOT_SYMBOLS == estimation.MAX_PILOT_SYMBOLS


# --- closed forms ----------------------------------------------------------------------------------


@pytest.mark.parametrize("estimator", ["lmmse", "linear"])
def test_static_channel_without_noise_is_error_free(estimator):
    """A static channel within the guard, no noise: no interference and exact estimates.

    Common practice: with the cyclic prefix longer than the channel and a
    channel that does not change, OFDM turns the channel into one complex
    gain per subcarrier. Fractional tap delays (2.4 and 17.7 samples). Every
    subcarrier of every other symbol is a pilot. What is left is round-off
    (and the LMMSE receiver's noise floor, simulate.NOISE_FLOOR).
    """
    environment = make_environment([0.0, 2.4 * SAMPLE_S, 17.7 * SAMPLE_S], [0.5, 0.3, 0.2])
    result = simulate.simulate_link(small_design(lattice=(1, 2, 0)), environment, math.inf, estimator=estimator,
                                    frames=4, qam_order=64)
    assert result.interference < 1e-28
    assert result.estimation_mse < (1e-9 if estimator == "lmmse" else 1e-28)


@pytest.mark.parametrize("snr_db", [5.0, 10.0])
def test_rayleigh_qpsk_bit_error_ratio(snr_db):
    """QPSK over Rayleigh fading with the true channel: BER = 1/2 (1 - sqrt(g / (1 + g))).

    Source: Proakis, Digital Communications, 4th ed., sect. 14.3, eq. 14.3-7
    (from memory), g the mean SNR per bit; Gray-mapped QPSK is two BPSK
    decisions at g = SNR per symbol / 2. 24 equal taps inside the guard make
    every subcarrier Rayleigh (a sum of independent Gaussian taps); the
    simulator's 95 % interval (frames independent) sets the tolerance.
    """
    g = 10 ** (snr_db / 10) / 2
    expected = 0.5 * (1 - math.sqrt(g / (1 + g)))
    environment = make_environment(np.arange(24) * 1.3 * SAMPLE_S, np.ones(24))
    result = simulate.simulate_link(small_design(symbols=2), environment, snr_db, estimator="perfect", frames=600,
                                    seed=5)
    within_interval(result.bit_error_ratio, result.bit_error_ratio_ci, expected, widest=0.05)


def russell_stuber_ici(normalised_doppler):
    """1 - int_{-1}^{1} (1 - |x|) J0(2 pi f_D T_u x) dx: the classical spectrum's Doppler ICI over the signal
    (Russell & Stuber, Proc. IEEE VTC 1995; the integral from memory, re-derived from the window average)."""
    a = 2 * math.pi * normalised_doppler
    value, _ = scipy.integrate.quad(lambda x: 2 * (1 - x) * sp.j0(a * x), 0.0, 1.0, epsabs=1e-14, epsrel=1e-12)
    return 1.0 - value


@pytest.mark.parametrize("normalised_doppler", [0.02, 0.1])
def test_doppler_ici_matches_exact_integral(normalised_doppler):
    """Doppler ICI with the true channel (classical spectrum, no noise) equals the exact integral within 0.5 dB.

    Source: Russell & Stuber, Proc. IEEE VTC 1995 (check value 1.6288e-2 at
    f_D T_u = 0.1, calc from the integral). The simulator measures
    interference over *useful* power I; ICI over the total power is
    I / (1 + I). Eight taps inside the guard share the spectrum and give
    diversity; 255 of 256 subcarriers are used.
    """
    f_d = normalised_doppler * SPACING_HZ
    environment = make_environment(np.arange(8) * 3.3 * SAMPLE_S, np.ones(8), f_d)
    result = simulate.simulate_link(small_design(used=255, symbols=4), environment, math.inf, frames=400,
                                    estimator="perfect")
    ici = result.interference / (1 + result.interference)
    low, high = (c / (1 + c) for c in result.interference_ci)
    expected = russell_stuber_ici(normalised_doppler)
    assert abs(db_ratio(ici, expected)) <= 0.5 * DB
    assert 10 * math.log10(high / low) < 0.8 * DB  # the interval resolves the tolerance
    assert_allclose(expected, doppler.doppler_ici(f_d, 1 / SPACING_HZ), rtol=1e-9)  # the model's own closed form
    if normalised_doppler == 0.1:
        assert_allclose(expected, 1.6288e-2, rtol=1e-4)


@pytest.mark.parametrize("echo_samples", [48.0, 96.5, 250.0])
def test_echo_beyond_guard_matches_ebu_weighting(echo_samples):
    """An echo beyond the cyclic prefix: interference over useful power p2 (1 - w) / (p1 + p2 w).

    Source: EBU TR 024 sect. 2.4 (from memory): w(t) = ((T_u + T_g - t)/T_u)^2
    for T_g < t <= T_u + T_g. Two equal static Rayleigh paths (the ratio of
    sums over frames estimates the ratio of expectations); guard 32 samples
    of 256; tolerance 0.5 dB, resolved by the simulator's interval.
    """
    t_u, t_g = FFT, 32
    w = ((t_u + t_g - echo_samples) / t_u) ** 2
    environment = make_environment([0.0, echo_samples * SAMPLE_S], [1.0, 1.0])
    result = simulate.simulate_link(small_design(symbols=4), environment, math.inf, frames=1000, estimator="perfect")
    assert abs(db_ratio(result.interference, (1 - w) / (1 + w))) <= 0.5 * DB
    assert 10 * math.log10(result.interference_ci[1] / result.interference_ci[0]) < 0.8 * DB


def test_held_estimate_error_is_one_minus_j0_squared():
    """A training symbol at the start of a packet, its estimate held: error 1 - J0(2 pi f_D t)^2 at lag t.

    Source: Clarke, Bell Syst. Tech. J. 47(6), 1968 / Jakes, Microwave Mobile
    Communications, 1974 (R = J0(2 pi f_D t) for the classical spectrum); the
    optimally scaled held estimate of a Gaussian gain keeps R^2 of its power
    (common practice), here at SNR 40 dB (a factor 1/(1 + 1e-4)). 16 taps in
    the guard give about 16 independent errors per symbol; 200 frames; 10 %.
    """
    packet = 60
    design = small_design(used=48, lattice=(1, packet, 0), symbols=packet, pilot_scope="packet", pilot_symbols=1,
                          pilot_period=packet, pilot_data_shared=False)
    f_d = 100.0
    environment = make_environment(np.arange(16) * 2.0 * SAMPLE_S, np.ones(16), f_d)
    result = simulate.simulate_link(design, environment, 40.0, frames=200, seed=2)
    by_symbol = np.array(result.estimation_by_symbol)  # data symbols 1 .. 59
    lags = np.arange(1, packet) * design.symbol_s
    expected = 1 - sp.j0(2 * np.pi * f_d * lags) ** 2 / (1 + 1e-4)
    for index in (4, 19, 39, 58):
        assert_allclose(by_symbol[index], expected[index], rtol=0.1)


# --- behaviour -------------------------------------------------------------------------------------


def test_same_seed_same_figures():
    """The same seed and frames give the same figures, bit for bit; another seed other ones."""
    environment = make_environment([0.0, 3e-6], [0.7, 0.3], 80.0)

    def run(seed):
        simulation = simulate.LinkSimulation(small_design(), environment, 20.0, seed=seed)
        simulation.run(3)
        simulation.run(3)
        return simulation.result()

    assert run(9) == run(9)
    assert run(9) != run(10)


def test_result_text():
    result = simulate.simulate_link(small_design(), make_environment([0.0], [1.0], 100.0), 20.0, frames=2)
    assert str(result).startswith(f"simulated 2 frames x {result.data_per_frame} data RE: interference ")


@pytest.mark.parametrize("kwargs, place", [
    (dict(estimator="wiener"), "estimator"),
    (dict(frames=0), "frames"),
    (dict(qam_order=8), "qam_order"),
    (dict(linewidth_hz=-1.0), "linewidth_hz"),
    (dict(frequency_offset_hz=math.nan), "frequency_offset_hz"),
    (dict(seed=-1), "seed"),
])
def test_bad_arguments_raise_input_error(kwargs, place):
    with pytest.raises(InputError) as caught:
        simulate.simulate_link(small_design(), make_environment([0.0], [1.0]), 20.0, **kwargs)
    assert caught.value.place == place


def test_doppler_too_large_to_simulate():
    with pytest.raises(InputError, match="too large to simulate"):
        simulate.simulate_link(small_design(), make_environment([0.0], [1.0], 200.0 * SPACING_HZ), 20.0, frames=2)


def test_progress_reports_every_batch(monkeypatch):
    monkeypatch.setattr(simulate, "MAX_BATCH_FRAMES", 1)
    calls = []
    simulate.simulate_link(small_design(), make_environment([0.0], [1.0]), 20.0, frames=3,
                           progress=lambda done, total: calls.append((done, total)))
    assert calls == [(1, 3), (2, 3), (3, 3)]
