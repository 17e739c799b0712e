"""Tests for numerology.pilots: lattice aliasing limits and estimation error."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from scipy.special import j0

from numerology.errors import InputError
from numerology.pilots import (
    aliasing_scale,
    correlation_lags,
    estimation_mse,
    estimation_mse_tabulated,
    estimator_weights,
    max_delay_for_lattice,
    max_doppler_for_lattice,
    pilot_density,
    reciprocal_lattice_points,
)

us = 1e-6
Hz = 1.0
kHz = 1e3

#: DVB-T 8k mode, 8 MHz channel: useful part 896 us, guard 1/4 (224 us), so T_s = 1120 us
#: (ETSI EN 300 744 sect. 4.4, Table 8).
DVBT_TU_S = 896 * us
DVBT_TS_S = 1120 * us


def ones(lag):
    """Correlation of a static or frequency-flat channel: 1 at every lag."""
    return np.ones_like(lag)


def exponential_pdp(rms_s):
    """Frequency correlation of an exponential power-delay profile, 1 / (1 + j 2 pi df sigma) (calc)."""
    return lambda lag_hz: 1.0 / (1.0 + 2j * np.pi * lag_hz * rms_s)


def clarke(max_doppler_hz):
    """Time correlation of the classical spectrum, J0(2 pi f_D dt) (Clarke 1968; Jakes 1974)."""
    return lambda lag_s: j0(2 * np.pi * max_doppler_hz * lag_s)


# --- geometry ------------------------------------------------------------------


def test_pilot_density():
    """DVB-T scattered pilots occupy 1 cell in 12 (one every 12th carrier in every symbol, EN 300 744 sect. 4.5.3)."""
    assert_allclose(pilot_density(12, 1), 1 / 12, rtol=1e-15, atol=0)  # exact fraction, float round-off only
    assert_allclose(pilot_density([6, 4], [4, 3]), [1 / 24, 1 / 12], rtol=1e-15, atol=0)


@pytest.mark.parametrize(
    "freq_spacing, time_spacing, spacing_hz, symbol_s",
    [(6, 4, 15 * kHz, 1 / 14e3), (4, 2, 30 * kHz, 1 / 28e3), (12, 1, 1 / DVBT_TU_S, DVBT_TS_S), (1, 7, 60 * kHz, 1 / 56e3)],
)
def test_rectangular_lattice_nyquist(freq_spacing, time_spacing, spacing_hz, symbol_s):
    """Rectangular lattice: tau_max <= 1/(D_f df) and f_D <= 1/(2 D_t T_s).

    Source: 2-D sampling theorem for pilot grids, Hoeher, Kaiser and Robertson, ICASSP 1997;
    Fazel and Kaiser, Multi-Carrier and Spread Spectrum Systems (from memory).
    """
    delay_limit = 1 / (freq_spacing * spacing_hz)
    doppler_limit = 1 / (2 * time_spacing * symbol_s)
    # The limits are exact quotients; rtol covers float round-off.
    lattice = (freq_spacing, time_spacing, 0, spacing_hz, symbol_s)
    assert_allclose(max_delay_for_lattice(*lattice, 0.01 * doppler_limit), delay_limit, rtol=1e-12)
    assert_allclose(max_doppler_for_lattice(*lattice, 0.01 * delay_limit), doppler_limit, rtol=1e-12)
    tau = np.array([0.1, 0.5, 0.9]) * delay_limit
    f_d = np.array([0.7, 0.2, 0.45]) * doppler_limit
    g = aliasing_scale(freq_spacing, time_spacing, 0, spacing_hz, symbol_s, tau, f_d)
    assert_allclose(g, np.minimum(delay_limit / tau, doppler_limit / f_d), rtol=1e-12)


def test_rectangular_reciprocal_basis():
    """G^-T of a rectangular lattice has points at multiples of 1/(D_f df) in delay and 1/(D_t T_s) in Doppler (calc)."""
    tau, nu = reciprocal_lattice_points(4, 2, 0, 15 * kHz, 1 / 14e3, 1)
    assert_allclose(tau[2, 1], 1 / (4 * 15 * kHz), rtol=1e-12)
    assert_allclose(nu[1, 2], 14e3 / 2, rtol=1e-12)
    assert_allclose(nu[2, 1], 0.0, atol=1e-9 * Hz)  # inversion round-off on an exact zero


def test_dvbt_scattered_pilots():
    """DVB-T scattered pilots (12 carriers, shift 3 per symbol: EN 300 744 sect. 4.5.3) in the 8k mode, guard 1/4.

    Values calc from the pattern of EN 300 744 sect. 4.5.3 and the lattice limits of Hoeher, Kaiser and
    Robertson, ICASSP 1997 (from memory): with time interpolation, echoes to T_u/3 = 298.7 us and f_D up to
    1/(8 T_s) = 111.6 Hz; without it T_u/12 = 74.7 us.

    Discrepancy recorded: the 2-D lattice gives 1/(8 T_s) for every delay in (T_u/12, T_u/3], but for
    delays below T_u/12 the only replicas inside the delay support are the m = 0 ones, 1/T_s apart in
    Doppler, so f_D may reach 1/(2 T_s) = 446.4 Hz (each symbol then carries enough pilots on its own).
    The value 1/(8 T_s) is the limit of the usual receiver that first interpolates in time along the
    carriers holding a pilot every 4th symbol; the usual "at small delay" holds for that receiver,
    not for the lattice. The test checks 1/(8 T_s) in its valid range and the lattice value below it.

    "Without time interpolation" is expressed as the comb of one symbol: a rectangular lattice with
    D_f = 12, s = 0, whose delay limit at zero Doppler does not depend on D_t (checked at 1 and 10^6).
    """
    d_f, d_t, s = 12, 1, 3
    df = 1 / DVBT_TU_S
    assert_allclose(max_delay_for_lattice(d_f, d_t, s, df, DVBT_TS_S, [0.0, 10 * Hz, 100 * Hz]), DVBT_TU_S / 3, rtol=1e-12)
    assert_allclose(DVBT_TU_S / 3, 298.7 * us, atol=0.05 * us)  # quoted rounded to 0.1 us
    delays = [100 * us, 224 * us, DVBT_TU_S / 3]
    assert_allclose(max_doppler_for_lattice(d_f, d_t, s, df, DVBT_TS_S, delays), 1 / (8 * DVBT_TS_S), rtol=1e-12)
    assert_allclose(1 / (8 * DVBT_TS_S), 111.6 * Hz, atol=0.05 * Hz)  # quoted rounded to 0.1 Hz
    # Lattice value below T_u/12 (see the docstring):
    assert_allclose(max_doppler_for_lattice(d_f, d_t, s, df, DVBT_TS_S, [0.0, 50 * us]), 1 / (2 * DVBT_TS_S), rtol=1e-12)
    # The design point T_u/3 x 1/(4 T_s) tiles the plane exactly: area T_u/(12 T_s) = pilot density (calc).
    assert_allclose(aliasing_scale(d_f, d_t, s, df, DVBT_TS_S, DVBT_TU_S / 3, 1 / (8 * DVBT_TS_S)), 1.0, rtol=1e-12)
    # Beyond T_u/3 a replica at zero Doppler overlaps whatever the Doppler: no f_D fits.
    assert np.isnan(max_doppler_for_lattice(d_f, d_t, s, df, DVBT_TS_S, 300 * us))
    # One symbol's comb.
    assert_allclose(max_delay_for_lattice(12, [1, 10**6], 0, df, DVBT_TS_S, 0.0), DVBT_TU_S / 12, rtol=1e-12)
    assert_allclose(DVBT_TU_S / 12, 74.7 * us, atol=0.05 * us)


def test_staircase_between_limits():
    """DVB-T lattice above 1/(8 T_s): replicas at (T_u/12, 1/(4 T_s)) fall inside, so tau_max drops to T_u/12 (calc)."""
    got = max_delay_for_lattice(12, 1, 3, 1 / DVBT_TU_S, DVBT_TS_S, [120 * Hz, 200 * Hz])
    assert_allclose(got, DVBT_TU_S / 12, rtol=1e-12)
    assert np.isnan(max_delay_for_lattice(12, 1, 3, 1 / DVBT_TU_S, DVBT_TS_S, 500 * Hz))  # > 1/(2 T_s)


def _brute_scale(d_f, d_t, s, df, ts, tau, f_d, index_max):
    """min over all nonzero reciprocal points in a large box of max(|dtau|/tau, |dnu|/(2 f_D))."""
    delay, doppler = reciprocal_lattice_points(d_f, d_t, s, df, ts, index_max)
    delay, doppler = np.abs(delay).ravel(), np.abs(doppler).ravel()
    # Coordinates are integer multiples of 1/(D_f df) and 1/(D_f D_t T_s): below half a unit is zero.
    zero_delay = delay < 0.5 / (d_f * df)
    zero_doppler = doppler < 0.5 / (d_f * d_t * ts)
    keep = ~(zero_delay & zero_doppler)
    with np.errstate(divide="ignore"):
        x = np.where(zero_delay, 0.0, delay / tau if tau > 0 else np.inf)
        y = np.where(zero_doppler, 0.0, doppler / (2 * f_d) if f_d > 0 else np.inf)
    return np.min(np.maximum(x, y)[keep])


lattices = st.integers(1, 16).flatmap(
    lambda d_f: st.tuples(st.just(d_f), st.integers(1, 8), st.integers(0, d_f - 1))
)


@settings(max_examples=150, deadline=None)
@given(
    lattice=lattices,
    spacing_hz=st.floats(1e3, 1e6),
    cp_fraction=st.floats(0.0, 0.3),
    delay_fraction=st.one_of(st.just(0.0), st.floats(0.01, 3.0)),
    doppler_fraction=st.one_of(st.just(0.0), st.floats(0.01, 3.0)),
)
def test_scale_matches_brute_force(lattice, spacing_hz, cp_fraction, delay_fraction, doppler_fraction):
    """The short exact scan equals a brute-force minimum over |m|, |n| <= 40 (>= 2 max D_f) of points of G^-T."""
    d_f, d_t, s = lattice
    ts = (1 + cp_fraction) / spacing_hz
    tau = delay_fraction / (d_f * spacing_hz)
    f_d = doppler_fraction / (2 * d_t * ts)
    expected = _brute_scale(d_f, d_t, s, spacing_hz, ts, tau, f_d, 40)
    got = aliasing_scale(d_f, d_t, s, spacing_hz, ts, tau, f_d)
    if np.isinf(expected):
        assert np.isinf(got)
    else:
        assert_allclose(got, expected, rtol=1e-9)  # G^-T by float inversion vs integer scan


@settings(max_examples=100, deadline=None)
@given(
    lattice=lattices,
    spacing_hz=st.floats(1e3, 1e6),
    fraction=st.floats(0.0, 1.5),
    oversampling=st.sampled_from([1.0, 2.0]),
)
def test_limits_sit_on_the_aliasing_boundary(lattice, spacing_hz, fraction, oversampling):
    """max_delay / max_doppler put the scaled support exactly on its first replica: aliasing_scale = oversampling."""
    d_f, d_t, s = lattice
    ts = 1.07 / spacing_hz
    f_d = fraction / (2 * d_t * ts)
    tau_max = max_delay_for_lattice(d_f, d_t, s, spacing_hz, ts, f_d, oversampling)
    if np.isnan(tau_max):
        assert 2 * f_d * oversampling * d_t * ts > 1  # only when the Doppler alone aliases
    else:
        assert_allclose(aliasing_scale(d_f, d_t, s, spacing_hz, ts, tau_max, f_d), oversampling, rtol=1e-9)
    tau = fraction / (d_f * spacing_hz)
    f_max = max_doppler_for_lattice(d_f, d_t, s, spacing_hz, ts, tau, oversampling)
    if not np.isnan(f_max):
        assert_allclose(aliasing_scale(d_f, d_t, s, spacing_hz, ts, tau, f_max), oversampling, rtol=1e-9)


def test_scale_broadcasts_and_handles_zero_support():
    """Shapes broadcast; a point support never aliases (g infinite), as the function documents."""
    g = aliasing_scale(np.array([[4], [6]]), 2, 0, 15 * kHz, 1 / 14e3, [1 * us, 2 * us, 0.0], 0.0)
    assert g.shape == (2, 3)
    assert np.isinf(aliasing_scale(12, 1, 3, 1 / DVBT_TU_S, DVBT_TS_S, 0.0, 0.0))


# --- estimators ----------------------------------------------------------------


def test_linear_reduces_to_1d_frequency_interpolation():
    """D_t = 1, s = 0: the target between pilots 0 and D_f gets weights 1 - k/D_f and k/D_f (common practice)."""
    k = np.arange(6)
    pw = estimator_weights(6, 1, 0, 15 * kHz, 1 / 14e3, ones, ones, 10.0, k, 0, "linear")
    assert_array_equal(pw.subcarrier_offset, np.stack([-k, 6 - k, -k], axis=-1))
    assert_array_equal(pw.symbol_offset, np.tile([0, 0, 1], (6, 1)))
    assert_allclose(pw.weights, np.stack([1 - k / 6, k / 6, 0 * k], axis=-1), rtol=0, atol=1e-15)


def test_lmmse_window_is_the_nearest_pilots():
    """Window (2, 2) on a rectangular lattice is the four corners of the target's cell (definition)."""
    pw = estimator_weights(4, 3, 0, 15 * kHz, 1 / 14e3, ones, ones, 10.0, 1, 1, "lmmse", (2, 2))
    assert sorted(zip(pw.subcarrier_offset.tolist(), pw.symbol_offset.tolist())) == [(-1, -1), (-1, 2), (3, -1), (3, 2)]


@pytest.mark.parametrize("lattice, window", [((6, 2, 3), (4, 4)), ((4, 3, 0), (2, 2)), ((12, 1, 3), (3, 2))])
@pytest.mark.parametrize("snr", [0.5, 10.0, 1000.0])
def test_lmmse_static_flat_channel(lattice, window, snr):
    """Static flat channel, W fully correlated pilots: MSE = 1 / (1 + W snr) at every resource element.

    Derivation (calc): R = 1 1^T, r = 1, (R + I/snr)^-1 1 = 1 / (W + 1/snr), so
    1 - r^H (R + I/snr)^-1 r = (1/snr) / (W + 1/snr).
    """
    width = window[0] * window[1]
    got = estimation_mse(*lattice, 15 * kHz, 1 / 14e3, ones, ones, snr, "lmmse", window)
    assert_allclose(got, 1 / (1 + width * snr), rtol=1e-10)  # float round-off of a 16x16 solve


@pytest.mark.parametrize("d_f", [2, 3, 8])
def test_linear_static_flat_channel(d_f):
    """Linear weights sum to 1, so a static flat channel leaves only noise: MSE = sum w^2 / snr (calc).

    1-D: mean over k = 0..D-1 of ((1 - k/D)^2 + (k/D)^2) / snr.
    """
    alpha = np.arange(d_f) / d_f
    expected = np.mean((1 - alpha) ** 2 + alpha**2) / 4.0
    got = estimation_mse(d_f, 1, 0, 15 * kHz, 1 / 14e3, ones, ones, 4.0, "linear")
    assert_allclose(got, expected, rtol=1e-12)


def test_linear_midpoint_exponential_pdp():
    """Hand calculation: linear interpolation half-way between two pilots, exponential PDP.

    With pilots h spacing apart in frequency (h = D_f df / 2 to the target) and Re R(x) =
    1 / (1 + (2 pi x sigma)^2), the noise-free MSE with weights (1/2, 1/2) is
    1 - 2 Re R(h) + (1 + Re R(2h)) / 2. Choosing 2 pi h sigma = 1: Re R(h) = 1/2, Re R(2h) = 1/5,
    MSE = 3/5 (calc, from the exponential PDP correlation 1/(1 + j 2 pi df sigma)). Noise adds
    (1/4 + 1/4) / snr. The cell of D_f = 2 averages the pilot (MSE 0) and the midpoint: 3/10.
    """
    sigma = 1 * us
    df = 1 / (2 * np.pi * sigma)  # D_f = 2: h = df
    corr = exponential_pdp(sigma)
    pw = estimator_weights(2, 1, 0, df, 1e-3, corr, ones, np.inf, 1, 0, "linear")
    assert_allclose(pw.mse, 0.6, rtol=1e-12)
    pw = estimator_weights(2, 1, 0, df, 1e-3, corr, ones, 8.0, 1, 0, "linear")
    assert_allclose(pw.mse, 0.6 + 0.5 / 8.0, rtol=1e-12)
    assert_allclose(estimation_mse(2, 1, 0, df, 1e-3, corr, ones, np.inf, "linear"), 0.3, rtol=1e-12)


@pytest.mark.parametrize("lattice", [(6, 4, 3), (4, 2, 0), (12, 1, 3)])
def test_mse_falls_with_snr_to_the_interpolation_error(lattice):
    """MSE decreases with pilot SNR and tends to the noise-free interpolation error (definition).

    Linear: MSE(snr) = MSE(inf) + mean sum w^2 / snr exactly. LMMSE: MSE(inf) <= MSE(snr) <=
    MSE(inf) + mean ||w_inf||^2 / snr, since the noise-free weights are one candidate at that SNR.
    """
    args = (*lattice, 15 * kHz, 1 / 14e3, exponential_pdp(0.3 * us), clarke(200 * Hz))
    snr = np.logspace(0, 8, 9)
    for estimator in ("lmmse", "linear"):
        mse = estimation_mse(*args, snr, estimator)
        assert np.all(np.diff(mse) < 0)
    lin_inf = estimation_mse(*args, np.inf, "linear")
    k, l = np.meshgrid(np.arange(lattice[0]), np.arange(lattice[1]), indexing="ij")
    pw = estimator_weights(*args, np.inf, k, l, "linear")
    noise_gain = np.mean(np.sum(np.abs(pw.weights) ** 2, axis=-1))
    assert_allclose(estimation_mse(*args, snr, "linear"), lin_inf + noise_gain / snr, rtol=1e-10)
    lmmse_inf = estimation_mse(*args, np.inf, "lmmse")
    pw = estimator_weights(*args, np.inf, k, l, "lmmse")
    bound = np.mean(np.sum(np.abs(pw.weights) ** 2, axis=-1)) / snr
    lmmse = estimation_mse(*args, snr, "lmmse")
    assert np.all(lmmse >= lmmse_inf - 1e-12)  # round-off only
    assert np.all(lmmse <= lmmse_inf + bound + 1e-12)


@settings(max_examples=60, deadline=None)
@given(
    lattice=lattices,
    window=st.sampled_from([(2, 2), (2, 4), (4, 2), (4, 4)]),
    rms_fraction=st.floats(0.001, 0.5),
    doppler_fraction=st.floats(0.001, 0.5),
    snr_db=st.floats(-5.0, 40.0),
)
def test_lmmse_never_worse_than_linear(lattice, window, rms_fraction, doppler_fraction, snr_db):
    """With an even window the LMMSE pilots include the linear triangle, so its MSE is no larger (Wiener optimality).

    A (4, 4) window also contains the (2, 2) one: more pilots cannot hurt.
    """
    d_f, d_t, s = lattice
    df, ts = 15 * kHz, 1 / 14e3
    args = (d_f, d_t, s, df, ts, exponential_pdp(rms_fraction / df), clarke(doppler_fraction / ts), 10 ** (snr_db / 10))
    lmmse = estimation_mse(*args, "lmmse", window)
    linear = estimation_mse(*args, "linear")
    assert lmmse <= linear + 1e-12  # round-off only
    if window == (4, 4):
        assert lmmse <= estimation_mse(*args, "lmmse", (2, 2)) + 1e-12


def test_per_candidate_correlations_follow_the_shape_contract():
    """Correlations built from per-candidate arrays (candidate axis first) give what one-by-one calls give."""
    d_f = np.array([4, 6, 6, 12, 3])
    d_t = np.array([2, 4, 1, 1, 3])
    s = np.array([0, 3, 2, 3, 1])
    df = np.array([15, 30, 15, 1 / DVBT_TU_S / 1e3, 60]) * kHz
    ts = 1.1 / df
    rms = np.array([0.3, 0.1, 1.0, 20.0, 0.05]) * us
    f_d = np.array([50, 300, 10, 30, 900]) * Hz
    both = estimation_mse(
        d_f, d_t, s, df, ts,
        lambda lag: 1 / (1 + 2j * np.pi * lag * rms[:, None]),
        lambda lag: j0(2 * np.pi * f_d[:, None] * lag),
        100.0,
    )
    single = [
        estimation_mse(d_f[i], d_t[i], s[i], df[i], ts[i], exponential_pdp(rms[i]), clarke(f_d[i]), 100.0)
        for i in range(5)
    ]
    assert_allclose(both, single, rtol=1e-12)
    # candidate_shape lets the channel vary while the lattice does not.
    per_candidate = lambda lag: 1 / (1 + 2j * np.pi * lag * rms[:, None])  # noqa: E731
    got = estimation_mse(6, 4, 3, 15 * kHz, 1 / 14e3, per_candidate, ones, 100.0, candidate_shape=(5,))
    assert got.shape == (5,)
    assert_allclose(got[2], estimation_mse(6, 4, 3, 15 * kHz, 1 / 14e3, exponential_pdp(rms[2]), ones, 100.0), rtol=1e-12)


def _monte_carlo_mse(lattice, estimator, rms_s, max_doppler_hz, snr, draws, seed):
    """Empirical cell-average MSE of estimator_weights on channels drawn with the 2-D WSSUS correlation.

    H = L_f Z L_t^T with L L^H the frequency and time correlation matrices on a grid covering every pilot
    used, Z iid CN(0, 1): E[H(k,l) H*(k',l')] = R_f((k-k') df) R_t((l-l') T_s). The factors come from an
    eigendecomposition, since the Clarke matrix is nearly singular for close symbols.
    """
    d_f, d_t, s = lattice
    df, ts = 15 * kHz, 1 / 14e3
    fcorr, tcorr = exponential_pdp(rms_s), clarke(max_doppler_hz)
    k, l = np.meshgrid(np.arange(d_f), np.arange(d_t), indexing="ij")
    pw = estimator_weights(d_f, d_t, s, df, ts, fcorr, tcorr, snr, k.ravel(), l.ravel(), estimator)
    pk = k.ravel()[:, None] + pw.subcarrier_offset
    pl = l.ravel()[:, None] + pw.symbol_offset
    k0, l0 = min(pk.min(), 0), min(pl.min(), 0)
    n_k, n_l = max(pk.max(), d_f) - k0 + 1, max(pl.max(), d_t) - l0 + 1

    def factor(corr, unit, size):
        lag = np.arange(size)
        lam, vec = np.linalg.eigh(corr(((lag[:, None] - lag[None, :]) * unit)[None])[0])
        return vec * np.sqrt(np.clip(lam, 0, None))

    l_f, l_t = factor(fcorr, df, n_k), factor(tcorr, ts, n_l)
    rng = np.random.default_rng(seed)
    z = (rng.standard_normal((draws, n_k, n_l)) + 1j * rng.standard_normal((draws, n_k, n_l))) / np.sqrt(2)
    h = l_f @ z @ l_t.T
    noise = (rng.standard_normal(h.shape) + 1j * rng.standard_normal(h.shape)) / np.sqrt(2 * snr)
    y = h + noise  # only pilot positions are read below
    estimate = np.sum(pw.weights * y[:, pk - k0, pl - l0], axis=-1)
    error = np.abs(h[:, k.ravel() - k0, l.ravel() - l0] - estimate) ** 2
    return error.mean()


@pytest.mark.parametrize("lattice", [(4, 3, 0), (6, 2, 3)], ids=["rectangular", "staggered"])
@pytest.mark.parametrize("estimator", ["lmmse", "linear"])
def test_monte_carlo_agrees_with_estimation_mse(lattice, estimator):
    """Simulated channels (fixed seed) reproduce estimation_mse within 4 standard deviations.

    Each error is circular complex Gaussian, so abs(e)^2 is exponential: its sample mean over M draws has
    relative standard deviation 1/sqrt(M); the cell average of correlated positions has at most that.
    M = 10 000 gives a 4-sigma tolerance of 4 %.
    """
    draws = 10_000
    rms_s, f_d, snr = 1.0 * us, 400 * Hz, 20.0
    empirical = _monte_carlo_mse(lattice, estimator, rms_s, f_d, snr, draws, seed=7)
    expected = estimation_mse(*lattice, 15 * kHz, 1 / 14e3, exponential_pdp(rms_s), clarke(f_d), snr, estimator)
    assert_allclose(empirical, expected, rtol=4 / np.sqrt(draws))


def test_pilot_weights_str():
    pw = estimator_weights(2, 1, 0, 1 / (2 * np.pi * us), 1e-3, exponential_pdp(1 * us), ones, np.inf, 1, 0, "linear")
    assert str(pw) == "PilotWeights: 1 targets x 3 pilots, mean MSE 0.6"


def test_weights_shapes():
    """Candidates first, then target axes, then pilots."""
    k = np.arange(6)[None, :]
    pw = estimator_weights([4, 6], 2, 0, 15 * kHz, 1 / 14e3, ones, ones, 10.0, k % np.array([[4], [6]]), 0)
    assert pw.weights.shape == (2, 6, 16)
    assert pw.mse.shape == (2, 6)


# --- bad input -----------------------------------------------------------------


@pytest.mark.parametrize(
    "kwargs, place",
    [
        (dict(shift=12), "shift"),
        (dict(freq_spacing=0), "freq_spacing"),
        (dict(time_spacing=2.5), "time_spacing"),
        (dict(subcarrier_spacing_hz=-1.0), "subcarrier_spacing_hz"),
        (dict(max_delay_s=float("nan")), "max_delay_s"),
    ],
)
def test_bad_lattice_input(kwargs, place):
    args = dict(freq_spacing=12, time_spacing=1, shift=3, subcarrier_spacing_hz=1116.0, symbol_s=DVBT_TS_S,
                max_delay_s=100 * us, max_doppler_hz=10 * Hz)
    args.update(kwargs)
    with pytest.raises(InputError, match=place):
        aliasing_scale(**args)


def test_bad_estimator_input():
    args = (6, 4, 3, 15 * kHz, 1 / 14e3)
    with pytest.raises(InputError, match="estimator"):
        estimation_mse(*args, ones, ones, 10.0, "spline")
    with pytest.raises(InputError, match="window"):
        estimation_mse(*args, ones, ones, 10.0, "lmmse", (0, 4))
    with pytest.raises(InputError, match="pilot_snr"):
        estimation_mse(*args, ones, ones, 0.0)
    with pytest.raises(InputError, match="freq_correlation: must be normalised"):
        estimation_mse(*args, lambda lag: 2 + 0 * lag, ones, 10.0)


@settings(max_examples=40, deadline=None)
@given(st.integers(1, 16), st.integers(1, 8), st.data(), st.floats(0.5, 1e4))
def test_separable_cell_average_equals_per_target_average(d_f, d_t, data, snr):
    """The fast LMMSE cell average (one lattice, separable sum of outer products) equals the mean of the
    per-target errors of estimator_weights over the cell (an identity of our own: the error is the same on
    every coset of the lattice, and the correlation vector factorises in frequency and time)."""
    shift = data.draw(st.integers(0, d_f - 1))
    df, ts = 15e3, 1 / 14e3

    def freq(lag_hz):
        return 1.0 / (1.0 + 2j * np.pi * lag_hz * 0.8e-6)  # exponential profile, rms 0.8 us

    def time(lag_s):
        return j0(2 * np.pi * 150.0 * lag_s)

    k, l = np.meshgrid(np.arange(d_f), np.arange(d_t), indexing="ij")
    weights = estimator_weights(d_f, d_t, shift, df, ts, freq, time, snr, k.ravel(), l.ravel())
    # 100 candidates of one lattice: enough to take the separable per-lattice path
    fast = estimation_mse(d_f, d_t, shift, df, ts, freq, time, np.full(100, snr))
    # atol 1e-10: both forms compute 1 - q with q close to 1, so round-off of order 1e-12 (absolute) remains
    assert_allclose(fast, np.mean(weights.mse), rtol=1e-8, atol=1e-10)


@pytest.mark.parametrize("size", [16, 6, 9, 1])
def test_trace_of_solve_real_form_equals_complex_solve(size):
    """tr(A^-1 S) through the real form of a centrohermitian A equals the complex solve (the real form is
    A. Lee, Linear Algebra Appl. 29, 1980, from memory; checked here numerically; odd sizes take the
    complex solve)."""
    from numerology.pilots import _trace_of_solve

    rng = np.random.default_rng(size)
    half = rng.standard_normal((size // 2, 2))
    middle = [[0.0, 0.0]] if size % 2 else np.zeros((0, 2))
    pos = np.concatenate([half, middle, -half[::-1]])  # a point-symmetric window
    taus, powers = rng.uniform(0, 1, 5), rng.uniform(0.1, 1, 5)
    lag = pos[:, None, :] - pos[None, :, :]
    corr = (powers * np.exp(-2j * np.pi * lag[..., :1] * taus)).sum(-1) * np.exp(-lag[..., 1] ** 2)
    a = np.stack([corr + noise * np.eye(size) for noise in (1e-6, 0.01, 1.0)])
    m = rng.standard_normal((3, size, 40)) + 1j * rng.standard_normal((3, size, 40))
    s = m @ m.conj().transpose(0, 2, 1)
    expected = np.einsum("nii->n", np.linalg.solve(a, s)).real
    assert_allclose(_trace_of_solve(a, s), expected, rtol=1e-9)
    if size % 2 == 0:  # the top half is enough; an indefinite matrix takes the general solve
        assert_allclose(_trace_of_solve(a[:, :size // 2], s), expected, rtol=1e-9)
        indefinite = corr - 2.0 * np.eye(size)
        expected = np.einsum("ii->", np.linalg.solve(indefinite, s[0])).real
        assert_allclose(_trace_of_solve(indefinite[None, :size // 2], s[:1]), [expected], rtol=1e-9)


@pytest.mark.parametrize("budget", ["all rows at once", "chunk by chunk"])
@pytest.mark.parametrize("n_candidates", [40, 400])
def test_tabulated_correlations_equal_callables(n_candidates, budget, monkeypatch):
    """Shared correlation tables give what per-candidate callables give, whether few rows are shared by
    many candidates (400: grouped by row) or most candidates have their own (40: gathered), and whether
    the factors of all rows fit the memory budget or each chunk builds its own."""
    import numerology.pilots as pilots

    if budget == "chunk by chunk":
        monkeypatch.setattr(pilots, "_FACTOR_BUDGET", 1)
        monkeypatch.setattr(pilots, "_GROUP_CHUNK", 37)
    rng = np.random.default_rng(n_candidates)
    lattice = (np.array([6, 8, 4, 4])[:, None], np.array([4, 14, 2, 1])[:, None], np.array([3, 2, 0, 1])[:, None])
    df, ts = 30 * kHz, 1 / 28e3
    rms = np.array([0.1, 0.4, 1.0]) * us
    f_d = np.array([5.0, 80.0, 250.0, 600.0, 20.0])
    f_row = rng.integers(0, rms.size, n_candidates)
    t_row = rng.integers(0, f_d.size, n_candidates)
    snr = rng.uniform(3.0, 3000.0, n_candidates)
    k_max, l_max = correlation_lags(*lattice)
    f_table = 1 / (1 + 2j * np.pi * np.arange(k_max + 1) * df * rms[:, None])
    t_table = j0(2 * np.pi * f_d[:, None] * np.arange(l_max + 1) * ts)
    got = estimation_mse_tabulated(*lattice, snr, f_table, f_row, t_table, t_row)
    shape = (4, n_candidates)  # candidates flattened in C order for the callables
    rms_c, f_d_c = (np.broadcast_to(x, shape).ravel()[:, None] for x in (rms[f_row], f_d[t_row]))
    expected = estimation_mse(*lattice, df, ts, lambda lag: 1 / (1 + 2j * np.pi * lag * rms_c),
                              lambda lag: j0(2 * np.pi * f_d_c * lag), snr, candidate_shape=shape)
    assert got.shape == (4, n_candidates)
    # atol 1e-10: the trace form computes 1 - q with q close to 1, so round-off of order 1e-12 (absolute) remains
    assert_allclose(got, expected, rtol=1e-8, atol=1e-10)


def test_tabulated_correlations_are_checked():
    k_max, l_max = correlation_lags(6, 4, 3)
    good_f, good_t = np.ones((1, k_max + 1)), np.ones((2, l_max + 1))
    with pytest.raises(InputError, match="freq_table.*needs lags"):
        estimation_mse_tabulated(6, 4, 3, 10.0, good_f[:, :-1], 0, good_t, 0)
    with pytest.raises(InputError, match="time_table.*asks for row 2"):
        estimation_mse_tabulated(6, 4, 3, 10.0, good_f, 0, good_t, 2)
    with pytest.raises(InputError, match="normalised"):
        estimation_mse_tabulated(6, 4, 3, 10.0, 2 * good_f, 0, good_t, 0)
    with pytest.raises(InputError, match="non-finite"):
        estimation_mse_tabulated(6, 4, 3, 10.0, good_f, 0, np.full((1, l_max + 1), np.nan), 0)
