"""Tests of the Monte-Carlo link simulator (numerology.simulate).

Statistical checks compare a Monte-Carlo estimate with its theory at a
tolerance of several standard errors of that estimate; the sizes are chosen
so that the standard error is well below the tolerance, and each tolerance
says where it comes from. The seeds are fixed, so the tests are
deterministic.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.special as sp
from numpy.testing import assert_allclose

from numerology import delay, doppler, oscillator, pilots, simulate
from numerology.design import Design
from numerology.environment import Environment
from numerology.errors import InputError

DB = 1.0  # tolerances in dB are written as multiples of this
#: K-factor making a tap practically pure line of sight (static power, random phase).
PURE_LOS_K = 1e12


def make_environment(delays_s, powers, max_doppler_hz=0.0, spectrum="classical", k_factor=0.0):
    """An Environment with only the fields the simulator uses set meaningfully."""
    powers = np.asarray(powers, dtype=float)
    powers = powers / powers.sum()
    return Environment(
        carrier_hz=2e9, propagation_speed_mps=299792458.0, wavelength_m=0.15, speed_mps=0.0,
        max_doppler_hz=max_doppler_hz, doppler_spectrum=spectrum, k_factor=k_factor, doppler_centroid_hz=0.0,
        doppler_spread_hz=0.0, coherence_correlation=0.5, coherence_time_s=math.inf,
        delays_s=tuple(float(d) for d in delays_s), powers=tuple(float(p) for p in powers),
        profile_name="test", profile_source="test", mean_excess_delay_s=0.0, rms_delay_spread_s=0.0,
        max_excess_delay_s=float(max(delays_s)), coherence_bandwidth_hz=math.inf)


def db_ratio(measured, predicted):
    return 10.0 * math.log10(measured / predicted)


# 256-point test numerology at 15 kHz (f_s = 3.84 MHz, T_u = 66.7 us), CP 32 samples.
SPACING_HZ = 15e3
FFT = 256
SAMPLE_S = 1.0 / (FFT * SPACING_HZ)


def small_design(used=240, lattice=(4, 2, 0), cp=32, symbols=8):
    return Design("test-256", SPACING_HZ, FFT, cp, used, *lattice, symbols)


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


@pytest.mark.parametrize("order", [0, 1, 4])
def test_spherical_bessel_series(order):
    """The simulator's small-argument series for j_q(z) agrees with j_q(z) = sqrt(pi/(2z)) J_{q+1/2}(z).

    Source: Abramowitz & Stegun, Handbook of Mathematical Functions, 10.1.1
    (definition) and 10.1.2 (series), evaluated with mpmath at 40 digits.
    Tolerance: a few double-precision rounding errors (the series was
    measured at 4.4e-16; scipy.special.spherical_jn at 3.7e-14 here).
    Above the switch the simulator uses scipy, checked at scipy's accuracy.
    """
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    z = np.array([1e-9, 1e-4, 3e-3, 0.05, 0.0999, 0.5, 3.0])
    got = simulate._spherical_bessel(order, z[z < simulate.SERIES_Z])
    got = np.concatenate([got, simulate._spherical_bessel(order, z[z >= simulate.SERIES_Z])])
    exact = np.array([[float(mpmath.sqrt(mpmath.pi / (2 * mpmath.mpf(x))) * mpmath.besselj(q + 0.5, mpmath.mpf(x)))
                       for q in range(order + 1)] for x in z])
    series = z < simulate.SERIES_Z
    assert_allclose(got[series], exact[series], rtol=2e-15, atol=0)
    assert_allclose(got[~series], exact[~series], rtol=1e-12, atol=0)


def test_noise_is_circular_complex_gaussian():
    """The simulator's noise has the moments and the |n|^2 tail of circular complex Gaussian noise.

    Common practice (e.g. Proakis, Digital Communications, ch. 2; from
    memory): for circular complex Gaussian n of variance s^2, E n = 0,
    E n^2 = 0, E|n|^2 = s^2, and |n|^2 / s^2 is exponential with unit mean,
    so P(|n|^2 > t s^2) = exp(-t). 10^6 values; tolerances are 5 standard
    errors of each estimate (1e-3 for the moments, binomial for the tails).
    """
    count, std = 10**6, 0.3
    words = np.random.default_rng(11).integers(0, 2**32, (1, 2, count), dtype=np.uint32)
    real, imag = simulate._noise(words, std, simulate._Workspace())
    noise = (real[0] + 1j * imag[0].astype(float)) / std
    assert abs(noise.mean()) < 5 * math.sqrt(1 / count)
    assert abs(np.mean(noise**2)) < 5 * math.sqrt(1 / count)
    assert_allclose(np.mean(np.abs(noise) ** 2), 1.0, atol=5 * math.sqrt(1 / count))
    for t in (0.1, 1.0, 4.0, 9.0):
        p = math.exp(-t)
        assert_allclose(np.mean(np.abs(noise) ** 2 > t), p, atol=5 * math.sqrt(p * (1 - p) / count))


def test_random_words_give_numpys_uniforms():
    """The simulator's uniforms from raw 64-bit words are those of numpy's ``Generator.random``.

    Source: numpy's documented bit layout (from memory): a double uniform is
    the top 53 bits of a 64-bit word times 2^-53, a single-precision one the
    top 24 bits of a 32-bit word (two per 64-bit word, low half first) times
    2^-24. The same seed gives the same stream, so the values must be equal.
    """
    seed = np.random.SeedSequence(3)
    words = np.random.PCG64(seed).random_raw(1000)
    doubles = (words >> np.uint64(64 - simulate._DOUBLE_BITS)) * 2.0**-simulate._DOUBLE_BITS
    assert np.array_equal(doubles, np.random.Generator(np.random.PCG64(seed)).random(1000))
    singles = (words.view(np.uint32) >> np.uint32(32 - simulate._NOISE_BITS)).astype(np.float32)
    singles *= np.float32(2.0**-simulate._NOISE_BITS)
    assert np.array_equal(singles, np.random.Generator(np.random.PCG64(seed)).random(2000, dtype=np.float32))


def test_tap_powers_follow_the_profile():
    """Mean power of each simulated tap equals the profile's power.

    Source: ITU-R M.1225 (1997) Annex 2, Pedestrian A: 0, 110, 190, 410 ns at
    0, -9.7, -19.2, -22.8 dB. Each of 400 frames measures a Rayleigh tap over
    about 0.2 Doppler periods, so a frame's tap power has a relative spread
    of at most 1 (exponential): the mean's standard error is at most 5 %,
    hence rtol 0.2 (4 standard errors).
    """
    powers = 10 ** (np.array([0.0, -9.7, -19.2, -22.8]) / 10)
    environment = make_environment([0.0, 110e-9, 190e-9, 410e-9], powers, max_doppler_hz=300.0)
    result = simulate.simulate_link(small_design(), environment, 30.0, frames=400, symbols_per_frame=8)
    assert_allclose(result.tap_powers, powers / powers.sum(), rtol=0.2)


# --- the link ------------------------------------------------------------------------


def test_static_channel_without_noise_is_error_free():
    """A static channel within the guard, no noise: no interference, exact estimates, zero EVM.

    Common practice: with the cyclic prefix longer than the channel and a
    channel that does not change, OFDM turns the channel into one complex
    gain per subcarrier. The taps have fractional delays (2.4 and 17.7
    samples). The pilots fill every other symbol and the channel is static,
    so linear interpolation is exact: what is left is round-off.
    """
    environment = make_environment([0.0, 2.4 * SAMPLE_S, 17.7 * SAMPLE_S], [0.5, 0.3, 0.2], 0.0, "rician", PURE_LOS_K)
    result = simulate.simulate_link(small_design(lattice=(1, 2, 0)), environment, math.inf, estimator="linear",
                                    frames=4, qam_order=64)
    assert result.interference < 1e-28  # round-off of complex128 arithmetic on unit powers
    assert result.estimation_mse < 1e-28
    assert result.evm < 1e-13


@pytest.mark.parametrize("normalised_doppler", [0.01, 0.02, 0.05, 0.1, 0.2])
def test_doppler_ici_matches_exact_integral(normalised_doppler):
    """Simulated Doppler ICI (perfect CSI, classical, no noise) equals doppler.doppler_ici within 0.5 dB.

    Source: Russell & Stuber, Proc. IEEE VTC 1995 (exact ICI integral; PHYSICS.md
    sect. 5 check values, e.g. 1.6288e-2 at f_D T_u = 0.1). The simulator
    measures interference over *useful* power I; the reference is ICI over
    the total power, ICI = I / (1 + I) (all power leaving a subcarrier lands
    on the others). Eight taps inside the guard share the classical spectrum
    (the ICI does not depend on the taps) and give diversity; 255 of 256
    subcarriers are used so that band edges hardly matter. The test also
    checks that the Monte-Carlo interval is narrower than the tolerance.
    """
    f_d = normalised_doppler * SPACING_HZ
    environment = make_environment(np.arange(8) * 3.3 * SAMPLE_S, np.ones(8), f_d)
    result = simulate.simulate_link(small_design(used=255), environment, math.inf, frames=96, symbols_per_frame=32)
    ici = result.interference / (1 + result.interference)
    low, high = (c / (1 + c) for c in result.interference_ci)
    predicted = doppler.doppler_ici(f_d, 1 / SPACING_HZ)
    assert abs(db_ratio(ici, predicted)) <= 0.5 * DB
    assert 10 * math.log10(high / low) < 0.8 * DB  # interval narrower than twice the tolerance


@pytest.mark.parametrize("echo_samples", [48.0, 96.5, 160.0, 250.0])
def test_echo_beyond_guard_matches_ebu_weighting(echo_samples):
    """An echo beyond the cyclic prefix: interference/useful equals delay.echo_interference within 0.5 dB.

    Source: EBU TR 024 sect. 2.4 / EBU BPN 066 (w = ((T_u + T_g - t)/T_u)^2;
    formula from memory, PHYSICS.md sect. 4). Two static equal paths of fixed
    power (line of sight only, random phases); guard 32 samples of 256.
    """
    environment = make_environment([0.0, echo_samples * SAMPLE_S], [1.0, 1.0], 0.0, "rician", PURE_LOS_K)
    design = small_design()
    result = simulate.simulate_link(design, environment, math.inf, frames=8)
    useful, interference = delay.echo_interference(environment.delays_s, environment.powers, design.cp_s,
                                                   design.useful_symbol_s)
    assert abs(db_ratio(result.interference, interference / useful)) <= 0.5 * DB


@pytest.mark.parametrize("lattice", [(4, 2, 0), (6, 2, 3)], ids=["rectangular", "staggered"])
@pytest.mark.parametrize("estimator", ["lmmse", "linear"])
def test_estimation_mse_matches_model(lattice, estimator):
    """Measured channel-estimation MSE equals pilots.estimation_mse within 1 dB.

    Source: the estimator and its MSE formula (Hoeher, Kaiser, Robertson,
    ICASSP 1997; Kay, Estimation Theory, ch. 12), evaluated at the pilot SINR
    the simulator used. Five taps with fractional delays, classical Doppler
    at f_D T_u = 0.02, SNR 20 dB.
    """
    taps_s = np.array([0.0, 2.5, 5.2, 9.0, 14.7]) * SAMPLE_S
    powers = np.array([0.4, 0.25, 0.15, 0.12, 0.08])
    environment = make_environment(taps_s, powers, 0.02 * SPACING_HZ)
    design = small_design(lattice=lattice)
    result = simulate.simulate_link(design, environment, 20.0, estimator=estimator, frames=64, symbols_per_frame=24)
    predicted = pilots.estimation_mse(
        *lattice, SPACING_HZ, design.symbol_s,
        lambda lag: delay.frequency_correlation(lag, taps_s, powers),
        lambda lag: doppler.doppler_autocorrelation(lag, environment.max_doppler_hz), result.pilot_snr,
        estimator=estimator)
    assert abs(db_ratio(result.estimation_mse, float(predicted))) <= 1.0 * DB


@pytest.mark.parametrize("linewidth_hz, offset_hz", [(15.0, 0.0), (150.0, 0.0), (0.0, 300.0)])
def test_oscillator_ici_after_common_phase_correction(linewidth_hz, offset_hz):
    """Residual ICI of Wiener phase noise and of a frequency offset, with ideal common-phase correction.

    Sources: Wiener phase noise after CPE removal, 1 - 2 (c - 1 + exp(-c))/c^2
    with c = pi beta T_u (oscillator.wiener_phase_noise_ici; PHYSICS.md sect.
    6: about pi beta T_u / 3); frequency offset 1 - sinc^2(e) (Moose, IEEE
    Trans. Commun. 42(10), 1994; e = 0.02 gives 1.3153e-3). A static line-of-
    sight channel without noise, so the error left after equalisation is
    the oscillator ICI plus the estimation error it causes; the latter is
    measured and added to the prediction, as the link model adds its terms.
    Tolerance 0.5 dB.
    """
    environment = make_environment([0.0], [1.0], 0.0, "rician", PURE_LOS_K)
    result = simulate.simulate_link(small_design(lattice=(4, 1, 0)), environment, math.inf, frames=32,
                                    symbols_per_frame=32, linewidth_hz=linewidth_hz, frequency_offset_hz=offset_hz)
    ici = oscillator.wiener_phase_noise_ici(linewidth_hz, 1 / SPACING_HZ) + oscillator.cfo_ici(offset_hz, SPACING_HZ)
    assert abs(db_ratio(1 / result.sinr_eff, ici + result.estimation_mse)) <= 0.5 * DB


@pytest.mark.parametrize("tap_path", ["taps", "orders"])
def test_same_seed_same_result_and_block_size_does_not_matter(monkeypatch, tap_path):
    """Frames draw from their own seeds: equal seeds give identical results, whatever the block size
    and however many frames are handled at a time within a block (both ways of applying the taps)."""
    monkeypatch.setattr(simulate, "_TAP_PATH", tap_path)
    environment = make_environment([0.0, 3.3 * SAMPLE_S, 40.5 * SAMPLE_S], [0.6, 0.3, 0.1], 600.0)
    kwargs = dict(frames=6, linewidth_hz=20.0, frequency_offset_hz=50.0, seed=7)
    first = simulate.simulate_link(small_design(), environment, 15.0, **kwargs)
    again = simulate.simulate_link(small_design(), environment, 15.0, **kwargs)
    monkeypatch.setattr(simulate, "CACHE_FRAMES", 4)  # several frames at a time around the FFTs
    grouped = simulate.simulate_link(small_design(), environment, 15.0, **kwargs)
    monkeypatch.setattr(simulate, "BLOCK_BYTES", 1)  # one frame per block
    blocks = simulate.simulate_link(small_design(), environment, 15.0, **kwargs)
    other = simulate.simulate_link(small_design(), environment, 15.0, **dict(kwargs, seed=8))
    assert first == again
    for result in (blocks, grouped):
        assert_allclose(result.sinr_eff, first.sinr_eff, rtol=1e-12)  # only summation order may differ
        assert_allclose(result.interference, first.interference, rtol=1e-12)
    assert other.sinr_eff != first.sinr_eff


def test_both_ways_of_applying_taps_agree(monkeypatch):
    """One IFFT per Legendre order and one IFFT per tap give the same link, to round-off.

    Internal consistency (no outside source): both synthesise the same
    sample-level channel. Includes a tap beyond the guard and an oscillator.
    The time domain runs in double precision here, so that only double
    round-off separates the two ways.
    """
    environment = make_environment([0.0, 2.5 * SAMPLE_S, 5.2 * SAMPLE_S, 9.0 * SAMPLE_S, 40.3 * SAMPLE_S],
                                   [0.4, 0.25, 0.15, 0.15, 0.05], 0.1 * SPACING_HZ)
    monkeypatch.setattr(simulate, "_TIME_DTYPE", np.complex128)
    results = {}
    for path in ("taps", "orders"):
        monkeypatch.setattr(simulate, "_TAP_PATH", path)
        results[path] = simulate.simulate_link(small_design(), environment, 20.0, frames=3, linewidth_hz=10.0,
                                               frequency_offset_hz=100.0)
    assert results["taps"].legendre_order >= 2  # the per-order path really has several orders
    for name in ("interference", "estimation_mse", "sinr_eff"):
        assert_allclose(getattr(results["taps"], name), getattr(results["orders"], name), rtol=1e-9)


@pytest.mark.parametrize("case", ["late path, oscillator", "slow fading"])
def test_single_precision_time_domain_changes_only_round_off(monkeypatch, case):
    """The time-domain synthesis in complex64 gives the figures of complex128 to 1e-6 relative.

    Internal consistency (no outside source). What goes through the time
    domain is the within-window variation of the taps, the paths beyond the
    guard and, with an oscillator, the whole signal; single-precision FFTs
    leave a round-off of about 1e-7 of it in amplitude (measured 1.2e-7 on
    every figure, also for an interference of 8e-9 from slow fading), far
    below a Monte-Carlo interval (about 1e-2 relative). A slip in the
    mixed-precision code would show as a difference of order 1.
    """
    if case == "slow fading":
        environment = make_environment([0.0, 2.5 * SAMPLE_S], [0.6, 0.4], 1e-4 * SPACING_HZ)
        kwargs = {}
    else:
        environment = make_environment([0.0, 2.5 * SAMPLE_S, 5.2 * SAMPLE_S, 40.3 * SAMPLE_S],
                                       [0.5, 0.25, 0.15, 0.1], 0.1 * SPACING_HZ)
        kwargs = dict(linewidth_hz=10.0, frequency_offset_hz=100.0)
    results = {}
    for dtype in (np.complex64, np.complex128):
        monkeypatch.setattr(simulate, "_TIME_DTYPE", dtype)
        results[dtype] = simulate.simulate_link(small_design(), environment, 20.0, frames=3, **kwargs)
    assert results[np.complex128].interference > 0  # the time domain carries something
    for name in ("interference", "estimation_mse", "sinr_eff"):
        assert_allclose(getattr(results[np.complex64], name), getattr(results[np.complex128], name), rtol=1e-6)


def test_estimator_applies_the_pilot_weights():
    """The per-cell estimator gives ``sum(weights * Y[k + dk, l + dl])`` at every measured resource element.

    Internal consistency: the definition in pilots.PilotWeights, evaluated
    one resource element at a time, against the simulator's matrix product
    per lattice cell, on random pilot values (staggered lattice, LMMSE).
    """
    design = small_design(lattice=(6, 2, 3))
    environment = make_environment([0.0, 2.5 * SAMPLE_S, 9.0 * SAMPLE_S], [0.5, 0.3, 0.2], 0.02 * SPACING_HZ)
    plan, pilot_snr = simulate._plan(design, environment, 20.0, 0.0, 0.0, "lmmse", 8, 4)
    rng = np.random.default_rng(5)
    values = rng.standard_normal((2, plan.pilot_flat.size)) + 1j * rng.standard_normal((2, plan.pilot_flat.size))
    estimate = simulate._estimate(plan, values, simulate._Workspace())

    weights = simulate._weights(design, environment, pilot_snr, "lmmse")
    cols = plan.k_phys.size
    pilot_at = {int(flat): i for i, flat in enumerate(plan.pilot_flat)}
    measured = np.flatnonzero(plan.weight_all)
    assert measured.size > 100
    for position in measured:
        row, col = divmod(int(position), cols)
        row += plan.first_measured
        cls = int(simulate._lattice_class(row, col, design))
        expected = np.zeros(2, dtype=complex)
        for w, dk, dl in zip(weights.weights[cls], weights.subcarrier_offset[cls], weights.symbol_offset[cls]):
            if w != 0:
                expected += w * values[:, pilot_at[(row + dl) * cols + col + dk]]
        assert_allclose(estimate[:, position], expected, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("estimator", ["lmmse", "linear"], ids=["equal cell weights", "unequal cell weights"])
def test_measured_sums_are_the_weighted_sums(estimator):
    """The simulator's sums over the measured resource elements equal the weighted sums that define them.

    Internal consistency: zeros scattered where nothing is summed and one
    dot product (or the whole sum less the gathered rest) give sum |v|^2 over the measured REs, over the measured
    data REs (data: the symbol table's data rows) and the lattice-cell
    average with the per-position weights; the linear estimator's reach
    leaves unequal weights on this band, the LMMSE one equal weights.
    """
    design = small_design(lattice=(4, 2, 0))
    environment = make_environment([0.0, 2.5 * SAMPLE_S], [0.6, 0.4], 0.02 * SPACING_HZ)
    plan, _ = simulate._plan(design, environment, 20.0, 0.0, 0.0, estimator, 8, 4)
    assert (plan.cell_weight > 0) == (estimator == "lmmse")
    first = plan.pre + plan.first_measured
    data = (plan.symbol_offset[first:first + plan.measured_symbols] == 256).ravel()
    rng = np.random.default_rng(2)
    values = rng.standard_normal((3, data.size)) + 1j * rng.standard_normal((3, data.size))
    power = np.abs(values) ** 2
    total, data_total = simulate._measured_power(values.copy(), plan, data=True)
    assert_allclose(total, power @ plan.weight_all, rtol=1e-13)
    assert_allclose(data_total, power @ (plan.weight_all * data), rtol=1e-13)
    assert_allclose(simulate._measured_power(values.copy(), plan, data="only"), data_total, rtol=1e-13)
    kept = values.copy()
    assert_allclose(simulate._measured_power_kept(kept, plan), (total, data_total), rtol=1e-13)
    assert np.array_equal(kept, values)
    assert_allclose(simulate._cell_power(values.copy(), plan), power @ plan.weight_cell[::2], rtol=1e-13)


def test_pilots_around_the_measured_symbols_are_the_full_frames():
    """The received pilots of the symbols around the measured ones, formed alone, are those of the whole frame.

    Internal consistency: without an oscillator the simulator forms the
    subcarriers of the measured symbols only, and of the others just their
    pilots (:func:`simulate._margin_pilots`); on the whole frame the same
    values come from the static gains and the varying part's bins
    (staggered lattice, a Doppler that makes a varying part).
    """
    design = small_design(lattice=(6, 2, 3))
    environment = make_environment([0.0, 2.5 * SAMPLE_S, 9.0 * SAMPLE_S], [0.5, 0.3, 0.2], 0.05 * SPACING_HZ)
    plan, _ = simulate._plan(design, environment, 20.0, 0.0, 0.0, "lmmse", 8, 4)
    assert plan.extra_pilot_flat.size > 0
    work = simulate._Workspace()
    draws = simulate._draw(plan, np.random.SeedSequence(4).spawn(2), work)
    beta, _ = simulate._tap_gains(plan, draws.freqs, draws.amps, draws.phases, work)
    rng = np.random.default_rng(6)
    bins = (rng.standard_normal((2, plan.symbols, FFT)) + 1j * rng.standard_normal((2, plan.symbols, FFT)))
    bins = bins.astype(np.complex64)
    y, x = simulate._margin_pilots(plan, beta, draws.index, bins, work)

    main = plan.symbol_table[draws.index[:, plan.pre:]]
    full, _ = simulate._without_noise(plan, main, simulate._static_gains(plan, beta, work), bins, work)
    assert_allclose(x, main.reshape(2, -1)[:, plan.extra_pilot_flat], rtol=0, atol=0)
    assert_allclose(y, full.reshape(2, -1)[:, plan.extra_pilot_flat], rtol=1e-14, atol=1e-15)


def test_result_text_and_db_properties():
    environment = make_environment([0.0], [1.0], 100.0)
    result = simulate.simulate_link(small_design(), environment, 20.0, frames=2)
    assert_allclose(result.evm_db, -result.sinr_eff_db, atol=1e-9)
    assert_allclose(result.evm, 1 / math.sqrt(result.sinr_eff), rtol=1e-12)
    assert str(result).startswith(f"simulated 2 frames x {result.measured_per_frame} RE: interference ")
    assert result.data_per_frame < result.measured_per_frame


@pytest.mark.parametrize("kwargs, place", [
    (dict(estimator="wiener"), "estimator"),
    (dict(frames=1), "frames"),
    (dict(qam_order=8), "qam_order"),
    (dict(linewidth_hz=-1.0), "linewidth_hz"),
    (dict(frequency_offset_hz=math.nan), "frequency_offset_hz"),
    (dict(symbols_per_frame=0), "symbols_per_frame"),
    (dict(progress="yes"), "progress"),
])
def test_bad_arguments_raise_input_error(kwargs, place):
    environment = make_environment([0.0], [1.0])
    with pytest.raises(InputError) as caught:
        simulate.simulate_link(small_design(), environment, 20.0, **kwargs)
    assert caught.value.place == place


def test_doppler_too_large_to_simulate():
    environment = make_environment([0.0], [1.0], 200.0 * SPACING_HZ)
    with pytest.raises(InputError, match="too large to simulate"):
        simulate.simulate_link(small_design(), environment, 20.0, frames=2)


def test_band_narrower_than_estimator_reach():
    environment = make_environment([0.0], [1.0])
    with pytest.raises(InputError, match="narrower than the estimator's reach"):
        simulate.simulate_link(small_design(used=8, lattice=(6, 1, 0)), environment, 20.0, frames=2)


def test_progress_reports_every_block(monkeypatch):
    monkeypatch.setattr(simulate, "BLOCK_BYTES", 1)
    calls = []
    simulate.simulate_link(small_design(), make_environment([0.0], [1.0]), 20.0, frames=3,
                           progress=lambda done, total: calls.append((done, total)))
    assert calls == [(1, 3), (2, 3), (3, 3)]
