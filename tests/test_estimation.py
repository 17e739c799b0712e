"""Channel estimation from the pilots a receiver really has (numerology.estimation, numerology.arrangement).

The reference is a brute-force LMMSE written here from the correlation functions alone: every usable
pilot resource element of the span in one pilot-by-pilot covariance matrix (the whole band), solved
directly, and the error averaged over every data resource element (Kay, Fundamentals of Statistical
Signal Processing: Estimation Theory, ch. 12: the LMMSE error 1 - r^H R^-1 r). The model decomposes
the same problem in the channel's components; the two must agree within 0.5 dB (they agree to
round-off where the model is exact).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.special as sp
from numpy.testing import assert_allclose

from numerology import api, arrangement, estimation
from numerology.environment import line_of_sight
from numerology.presets import PRESETS
from numerology.requirements import requirements_from_mapping

DB = 0.5  # dB: the agreement the model must reach against the brute force
NS, US, MS = 1e-9, 1e-6, 1e-3
LIGHT_MPS = 299_792_458.0


def _db(x):
    return 10 * math.log10(x)


def brute_force_mse(schedule, used, spacing_hz, symbol_s, delays_s, powers, doppler_hz, noise_to_pilot,
                    los_fraction=0.0, spectrum="classical", oscillator=None):
    """The mean LMMSE error over the data of a schedule, by one direct solve per data symbol.

    Covariance of H(t, k) and H(t', k'), unit channel power: the scattered taps' frequency correlation
    sum_m p_m exp(-j 2 pi (k - k') df tau_m) times J0(2 pi f_D (t - t') T_s) (Clarke 1968); a line of
    sight of power P at the first tap turns as exp(j 2 pi nu (t - t') T_s), nu = f_D (rician) or, after
    the mean Doppler P f_D is removed from the whole channel, f_D (1 - P) with the scattered part
    turning by -P f_D (tracked). ``oscillator`` (linewidth beta, offset f_o; Hz): the whole channel
    times the oscillator's phase, whose correlation is exp(j 2 pi f_o dt - pi beta |dt|) (Wiener phase
    noise of 3-dB linewidth beta: a Lorentzian spectrum; common practice).
    """
    powers = np.asarray(powers, float) / np.sum(powers)
    delays_s = np.asarray(delays_s, float)
    scattered = powers.copy()
    scattered[np.argmin(delays_s)] -= los_fraction
    mu = los_fraction * doppler_hz if spectrum == "tracked" else 0.0

    def covariance(k1, t1, k2, t2):
        dk = k1[:, None] - k2[None, :]
        dt = (t1[:, None] - t2[None, :]) * symbol_s
        freq = np.sum(scattered * np.exp(-2j * np.pi * dk[..., None] * spacing_hz * delays_s), axis=-1)
        out = freq * sp.j0(2 * np.pi * doppler_hz * dt) * np.exp(-2j * np.pi * mu * dt)
        if los_fraction:
            first = delays_s[np.argmin(delays_s)]
            out = out + los_fraction * np.exp(-2j * np.pi * dk * spacing_hz * first) \
                * np.exp(2j * np.pi * (doppler_hz - mu) * dt)
        if oscillator is not None:
            linewidth, offset = oscillator
            out = out * np.exp(2j * np.pi * offset * dt - np.pi * linewidth * np.abs(dt))
        return out

    total, count = 0.0, 0
    for target in schedule.targets:
        k_p = np.concatenate([np.arange(o, used, schedule.freq_spacing) for o in target.pilot_offsets])
        t_p = np.concatenate([np.full(np.arange(o, used, schedule.freq_spacing).size, lag)
                              for lag, o in zip(target.pilot_lags, target.pilot_offsets)])
        data = np.ones(used, dtype=bool)
        if target.data_offset >= 0:
            data[target.data_offset::schedule.freq_spacing] = False
        k_d = np.flatnonzero(data)
        if k_p.size == 0:
            total += k_d.size
            count += k_d.size
            continue
        r_pp = covariance(k_p, t_p, k_p, t_p) + noise_to_pilot * np.eye(k_p.size)
        r_pd = covariance(k_p, t_p, k_d, np.zeros(k_d.size))
        solved = np.linalg.solve(r_pp, r_pd)
        total += np.sum(1 - np.real(np.sum(np.conj(r_pd) * solved, axis=0)))
        count += k_d.size
    return total / count


def model_mse(schedule, used, spacing_hz, symbol_s, delays_s, powers, doppler_hz, noise_to_pilot,
              los_fraction=0.0, spectrum="classical"):
    band = estimation.Band(np.asarray(delays_s, float), np.asarray(powers, float), los_fraction, spacing_hz, used)
    weights = estimation.spectral_weights(schedule, band, [symbol_s], doppler_hz, spectrum, los_fraction)[0]
    return float(weights.mse(noise_to_pilot))


#: An invented six-tap profile (demo data): 0 .. 1.8 us, 0 .. -18 dB.
SIX_TAPS_S = np.array([0, 100, 250, 600, 1100, 1800]) * NS
SIX_TAPS_DB = np.array([0, -2, -4, -8, -12, -18])
#: 3GPP TS 36.101 Annex B.2.1, Table B.2.1-4 (ETU).
ETU_S = np.array([0, 50, 120, 200, 230, 500, 1600, 2300, 5000]) * NS
ETU_DB = np.array([-1, -1, -1, 0, 0, 0, -3, -5, -7])


def test_nr_dmrs_slot_against_brute_force():
    """NR DM-RS type 1 in symbols 2 and 11 of a 14-symbol slot, every other subcarrier, 30 kHz, 1272 used
    subcarriers, 120 km/h at 3.5 GHz (f_D = 389 Hz), pilots at 20 dB: the slot's own pilots only
    (3GPP TS 38.211 sect. 7.4.1.1.2). Worked values of the same set-up by a Kronecker eigen-decomposition
    (calc, outside the project): -32.4 dB, -8.7 dB with symbol 2 alone, -38.9 dB with 2, 7 and 11."""
    doppler = 120 / 3.6 * 3.5e9 / LIGHT_MPS
    powers = 10 ** (SIX_TAPS_DB / 10)
    symbol_s = 1 / 30e3 + 2.34375 * US
    for symbols, expected in (([2, 11], -32.4), ([2], -8.7), ([2, 7, 11], -38.9)):
        plan = arrangement.schedule("slot", arrangement.mask_from_symbols(symbols), 14, 0, 2, 14, False, 0, 0,
                                    estimation.MAX_PILOT_SYMBOLS)
        got = model_mse(plan, 1272, 30e3, symbol_s, SIX_TAPS_S, powers, doppler, 0.01)
        assert _db(got) == pytest.approx(expected, abs=0.15)  # the worked values carry one decimal
        if symbols == [2, 11]:
            reference = brute_force_mse(plan, 1272, 30e3, symbol_s, SIX_TAPS_S, powers, doppler, 0.01)
            assert abs(_db(got) - _db(reference)) < DB
            assert_allclose(got, reference, rtol=1e-6)  # exact in fact: the same problem, another route


@pytest.mark.parametrize("noise", [0.01, 0.1])
def test_lte_port0_in_etu_against_brute_force(noise):
    """LTE cell reference signals of port 0 (symbols 0 and 4 of 7, every 6th subcarrier, shifted by 3;
    TS 36.211 sect. 6.10.1.2) in ETU at 300 Hz (TS 36.101 Annex B), 1200 subcarriers at 15 kHz, a
    stream: 7 symbols of memory and 3 of look-ahead."""
    plan = arrangement.schedule("stream", arrangement.mask_from_symbols([0, 4]), 7, 3, 6, 7, True, 3, 7,
                                estimation.MAX_PILOT_SYMBOLS)
    powers = 10 ** (ETU_DB / 10)
    symbol_s = 0.5 * MS / 7
    got = model_mse(plan, 1200, 15e3, symbol_s, ETU_S, powers, 300.0, noise)
    reference = brute_force_mse(plan, 1200, 15e3, symbol_s, ETU_S, powers, 300.0, noise)
    assert abs(_db(got) - _db(reference)) < DB
    assert abs(_db(got) - _db(reference)) < 0.01  # couplings below Band.clusters' threshold are all that differ


def test_dvbt_staggered_pattern_in_a_single_frequency_network():
    """DVB-T scattered pilots (every 12th carrier moving by 3 each symbol; EN 300 744 sect. 4.5.3) in two
    equal rays 200 us apart: beyond T_u/12 = 74.7 us, so only interpolation across the 4 symbols of the
    pattern resolves it. 2k band width (1705 carriers) at the 8k spacing, guard 1/4, 60 km/h at 600 MHz,
    pilots boosted to 16/9 of the data."""
    plan = arrangement.schedule("stream", 1, 1, 3, 12, 68, True, 3, 7, estimation.MAX_PILOT_SYMBOLS)
    spacing = 1 / (896 * US)
    doppler = 60 / 3.6 * 600e6 / LIGHT_MPS
    noise = 0.01 / (16 / 9)
    delays, powers = np.array([0, 200 * US]), np.array([1.0, 1.0])
    got = model_mse(plan, 1705, spacing, 1120 * US, delays, powers, doppler, noise)
    reference = brute_force_mse(plan, 1705, spacing, 1120 * US, delays, powers, doppler, noise)
    assert abs(_db(got) - _db(reference)) < DB
    assert _db(got) < -25  # resolved: the time interpolation reaches T_u/3 = 298.7 us


@pytest.mark.parametrize("spectrum", ["rician", "tracked"])
@pytest.mark.parametrize("pattern", [("slot", [2, 11], 14, 0, 2), ("stream", [0], 4, 0, 3),
                                     ("stream", [0, 4], 7, 3, 6)])
def test_line_of_sight_against_brute_force(spectrum, pattern):
    """A line of sight (K = 6 dB at the first arrival) on the invented six taps: the model's exact
    rank-one treatment (one comb) and its general path (staggered) against the brute force."""
    scope, symbols, period, shift, step = pattern
    plan = arrangement.schedule(scope, arrangement.mask_from_symbols(symbols), period, shift, step,
                                14 if scope == "slot" else period, True, 3, 7, estimation.MAX_PILOT_SYMBOLS)
    powers, los, _, _ = line_of_sight(SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), "six", spectrum, 6.0, None)
    args = (plan, 300, 30e3, 35.7 * US, SIX_TAPS_S, powers, 800.0, 0.02, los, spectrum)
    assert abs(_db(model_mse(*args)) - _db(brute_force_mse(*args))) < 0.01


def test_static_flat_channel_averages_every_pilot():
    """A static single-path channel estimated from N noisy pilots of one symbol: MSE = 1 / (1 + N SNR_p)
    (the LMMSE of a constant in white noise; Kay, Estimation Theory, ch. 12)."""
    plan = arrangement.schedule("slot", 1, 7, 0, 4, 7, True, 0, 0, estimation.MAX_PILOT_SYMBOLS)
    n = 300 // 4
    got = model_mse(plan, 300, 15e3, 1 / 14e3, [0.0], [1.0], 0.0, 0.1)
    assert_allclose(got, 1 / (1 + n / 0.1), rtol=1e-9)


def _wifi_p_request(speed: str):
    """5.9 GHz, 10 MHz, 20 dB, an invented short-delay road-side profile (two rays 0.4 us apart)."""
    return requirements_from_mapping({
        "environment": {"carrier": "5.9 GHz", "max_speed": speed, "max_excess_delay": "0.4 us"},
        "radio": {"bandwidth": "10 MHz", "snr": "20 dB"},
        "goals": {"throughput": "3 Mbit/s"},
    })


def test_wifi_p_long_packet_at_high_relative_speed():
    """802.11p with its preset packet (2 long training symbols, SIGNAL, 126 data symbols; IEEE 802.11-2016
    cl. 17) holds its preamble estimate over the packet. At 250 km/h relative speed at 5.9 GHz the error is
    no better than the held-preamble bound mean over the packet of 1 - J0(2 pi f_D t)^2 (Clarke/Jakes: the
    best prediction of a fading value from an exact one t seconds earlier), and the preset fails; at
    3 km/h it passes. Long 802.11p packets at high relative speed fail in measurements too (Fernandez,
    Borries, Cheng, Vijaya Kumar, Stancil, Bai, IEEE Trans. Veh. Technol. 61(1), 2012; from memory)."""
    design = PRESETS["wifi-p-10"].design
    fast = api.check(_wifi_p_request("250 km/h"), design, with_limits=False)
    error = fast.sinr_terms["estimation"] / (1 + fast.sinr_terms["estimation"])
    f_d = 250 / 3.6 * 5.9e9 / LIGHT_MPS
    ages = (np.arange(2, design.symbols_per_slot) - 1) * design.symbol_s  # data after the second training symbol
    bound = np.mean(1 - sp.j0(2 * np.pi * f_d * ages) ** 2)
    assert error >= bound
    assert not fast.passed
    slow = api.check(_wifi_p_request("3 km/h"), design, with_limits=False)
    assert slow.passed


def test_differential_detection_penalty():
    """Differential detection uses the previous symbol as a noisy, aged reference: with the best scaling
    the error is 1 - |R(T_s)|^2 / (1 + s2) (noise counts about twice; decorrelation sets a floor;
    Proakis, Digital Communications, DPSK in Rayleigh fading; from memory)."""
    design = PRESETS["dab-mode1"].design
    req = requirements_from_mapping({
        "environment": {"carrier": "220 MHz", "max_speed": "200 km/h", "max_excess_delay": "50 us"},
        "radio": {"bandwidth": "1.536 MHz", "snr": "15 dB", "occupancy": 1.0},
    })
    result = api.check(req, design, with_limits=False)
    error = result.sinr_terms["estimation"] / (1 + result.sinr_terms["estimation"])
    others = sum(v for k, v in result.sinr_terms.items() if k != "estimation")
    r = sp.j0(2 * np.pi * result.environment.max_doppler_hz * design.symbol_s)
    assert_allclose(error, 1 - r**2 / (1 + others), rtol=1e-9)


def test_linear_interpolation_is_never_better_than_lmmse():
    """The LMMSE is the best linear estimator from the same pilots (Kay, Estimation Theory, ch. 12), so the
    least-squares + linear interpolation receiver can only do worse, for every arrangement."""
    powers = 10 ** (SIX_TAPS_DB / 10)
    for scope, symbols, period, shift, step in (("slot", [2, 11], 14, 0, 2), ("stream", [0, 4], 7, 3, 6)):
        plan = arrangement.schedule(scope, arrangement.mask_from_symbols(symbols), period, shift, step, 14 if
                                    scope == "slot" else period, True, 3, 7, estimation.MAX_PILOT_SYMBOLS)
        band = estimation.Band(SIX_TAPS_S, powers, 0.0, 30e3, 300)
        lmmse = estimation.spectral_weights(plan, band, [35.7 * US], 400.0, "classical", 0.0)[0].mse(0.01)
        linear = estimation.spectral_weights(plan, band, [35.7 * US], 400.0, "classical", 0.0, "linear")[0].mse(0.01)
        assert linear >= lmmse


def test_linear_interpolation_of_a_static_flat_channel():
    """A static, frequency-flat channel: linear interpolation between two pilots reproduces it exactly,
    so only noise is left: at a fraction f between pilots the weights (1 - f, f) pass s2 ((1 - f)^2 + f^2)
    (calc); at the pilots themselves s2."""
    plan = arrangement.schedule("slot", 1, 1, 0, 4, 1, True, 0, 0, estimation.MAX_PILOT_SYMBOLS)
    band = estimation.Band(np.array([0.0]), np.array([1.0]), 0.0, 15e3, 13)  # pilots at 0, 4, 8, 12
    got = estimation.spectral_weights(plan, band, [1e-4], 0.0, "classical", 0.0, "linear")[0].mse(0.1)
    gains = [(1 - f) ** 2 + f**2 for f in (0.25, 0.5, 0.75)] * 3  # the 9 data subcarriers between pilots
    assert_allclose(got, 0.1 * np.mean(gains), rtol=1e-12)


def test_interpolation_floor_of_one_held_pilot_symbol():
    """One pilot symbol k symbols back, known without noise: the error of holding it is the Clarke/Jakes
    held-estimate error 1 - J0(2 pi f_D k T)^2 (Jakes, Microwave Mobile Communications, ch. 1: the J0
    autocorrelation); a line of sight turning at f_D is predicted exactly (error 0)."""
    lags = np.array([[-1], [-3]])
    got = estimation.interpolation_floor(lags, [1e-3, 1e-3], [100.0, 100.0], "rician", [0.5, 0.5])
    assert_allclose(got[:, 0], 1 - sp.j0(2 * np.pi * 100.0 * 1e-3 * np.array([1, 3])) ** 2, atol=1e-8)
    assert_allclose(got[:, 1], 0.0, atol=1e-8)


@pytest.mark.parametrize("example", ["harbour_crane", "rail_corridor", "factory_robots"])
def test_estimation_floor_never_exceeds_the_exact_error(example):
    """The screening's lower bound of the estimation error (a noiseless full-band genie at the usable
    pilot symbols) is below the exact whole-span LMMSE error for every candidate tried: the LMMSE error
    only grows as observations are removed or made noisier (Kay, Estimation Theory, ch. 12). Candidates:
    a sample of those each shipped example's search evaluates (invented scenarios)."""
    from numerology import link, solver
    from numerology.candidates import spacing_family
    from numerology.environment import derive_environment

    from conftest import EXAMPLES

    req = api.load(EXAMPLES / f"{example}.toml")
    environment = derive_environment(req)
    grid, _, _ = solver._screen(req, environment, spacing_family(req, environment), ())
    rows = np.random.default_rng(7).choice(grid.size, min(grid.size, 120), replace=False)
    designs = grid.take(rows).designs()
    floor = link.evaluate(designs, environment, req, estimation=False, error_floor=True).terms["estimation"]
    exact = link.evaluate(designs, environment, req).terms["estimation"]
    assert np.all(floor <= exact * (1 + 1e-9) + 1e-12)
    assert np.count_nonzero(floor > 0.1 * exact) > rows.size // 2  # and it is a useful bound, not zero


def _bound_mse(plan, used, spacing_hz, symbol_s, delays_s, powers, doppler_hz, noise_to_pilot):
    band = estimation.Band(np.asarray(delays_s, float), np.asarray(powers, float), 0.0, spacing_hz, used)
    weights = estimation.staggered_bound(plan, band, [symbol_s], doppler_hz, "classical", 0.0)[0]
    return float(weights.mse(noise_to_pilot))


@pytest.mark.parametrize("case", ["lte-etu", "dvbt-sfn", "lte-six-taps"])
@pytest.mark.parametrize("noise", [0.001, 0.01, 0.1])
def test_staggered_bound_is_below_the_brute_force_error(case, noise):
    """The solver's cheaper bound for pilot symbols on different combs (every pilot symbol seen through
    one Gram matrix at least each comb's) is below the independent brute-force LMMSE error: more
    information never raises an LMMSE error (Kay, Estimation Theory, ch. 12). LTE port 0 in ETU at 300 Hz
    and DVB-T's staggered comb in a 200 us two-ray channel as in the tests above (TS 36.211 sect. 6.10.1.2,
    TS 36.101 Annex B, EN 300 744 sect. 4.5.3); the invented six-tap profile with the LTE pattern at
    30 km/h, 3.5 GHz. Where the echoes sit well within the comb's alias-free span (T_u / 6 = 11.1 us
    here) the bound is close: within 1 dB."""
    lte = arrangement.schedule("stream", arrangement.mask_from_symbols([0, 4]), 7, 3, 6, 7, True, 3, 7,
                               estimation.MAX_PILOT_SYMBOLS)
    if case == "dvbt-sfn":
        plan = arrangement.schedule("stream", 1, 1, 3, 12, 68, True, 3, 7, estimation.MAX_PILOT_SYMBOLS)
        args = (plan, 1705, 1 / (896 * US), 1120 * US, np.array([0, 200 * US]), np.array([1.0, 1.0]),
                60 / 3.6 * 600e6 / LIGHT_MPS, noise)
    elif case == "lte-etu":
        args = (lte, 1200, 15e3, 0.5 * MS / 7, ETU_S, 10 ** (ETU_DB / 10), 300.0, noise)
    else:
        args = (lte, 1200, 15e3, 0.5 * MS / 7, SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), 30 / 3.6 * 3.5e9 / LIGHT_MPS,
                noise)
    bound, reference = _bound_mse(*args), brute_force_mse(*args)
    assert bound <= reference * (1 + 1e-9)
    if case != "dvbt-sfn":
        assert _db(reference) - _db(bound) < 1.0


def test_staggered_bound_of_one_comb_is_the_exact_error():
    """Pilot symbols on one comb: the bound is the exact (separable) error, the same weights."""
    plan = arrangement.schedule("slot", arrangement.mask_from_symbols([2, 11]), 14, 0, 2, 14, False, 0, 0,
                                estimation.MAX_PILOT_SYMBOLS)
    args = (plan, 1272, 30e3, 1 / 30e3 + 2.34375 * US, SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), 389.0, 0.01)
    assert_allclose(_bound_mse(*args), model_mse(*args), rtol=1e-12)


@pytest.mark.parametrize("example", ["harbour_crane", "factory_robots"])
def test_comb_bound_never_exceeds_the_exact_error_of_candidates(example):
    """link.evaluate(comb_bound=True) on a sample of a shipped example's screened candidates (invented
    scenarios): an estimation error no larger than the exact one, equal where the pilot symbols share a comb."""
    from numerology import link, solver
    from numerology.candidates import spacing_family
    from numerology.environment import derive_environment

    from conftest import EXAMPLES

    req = api.load(EXAMPLES / f"{example}.toml")
    environment = derive_environment(req)
    grid, _, _ = solver._screen(req, environment, spacing_family(req, environment), ())
    rows = np.random.default_rng(5).choice(grid.size, min(grid.size, 80), replace=False)
    designs = grid.take(rows).designs()
    bound = link.evaluate(designs, environment, req, comb_bound=True).terms["estimation"]
    exact = link.evaluate(designs, environment, req).terms["estimation"]
    assert np.all(bound <= exact * (1 + 1e-9) + 1e-12)
    assert np.count_nonzero(bound == exact) > 0 and np.count_nonzero(bound < exact) > 0


@pytest.mark.parametrize("spectrum", ["rician", "tracked"])
def test_staggered_bound_with_a_line_of_sight_is_below_the_brute_force_error(spectrum):
    """As above with a line of sight (K = 6 dB at the first arrival of the invented six taps) and LTE's
    staggered port-0 pattern (TS 36.211 sect. 6.10.1.2): below the brute force, and close to it."""
    plan = arrangement.schedule("stream", arrangement.mask_from_symbols([0, 4]), 7, 3, 6, 7, True, 3, 7,
                                estimation.MAX_PILOT_SYMBOLS)
    powers, los, _, _ = line_of_sight(SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), "six", spectrum, 6.0, None)
    for noise in (0.002, 0.02, 0.2):
        args = (plan, 300, 30e3, 35.7 * US, SIX_TAPS_S, powers, 800.0, noise, los, spectrum)
        band = estimation.Band(SIX_TAPS_S, powers, los, 30e3, 300)
        weights = estimation.staggered_bound(plan, band, [35.7 * US], 800.0, spectrum, los)[0]
        bound, reference = float(weights.mse(noise)), brute_force_mse(*args)
        assert bound <= reference * (1 + 1e-9)
        assert _db(reference) - _db(bound) < 1.0


def _staggered_cases():
    """Staggered schedules for the direct form against the eigen form: LTE port 0 in ETU (TS 36.211
    sect. 6.10.1.2, TS 36.101 Annex B), DVB-T's scattered pilots in two rays 200 us apart (EN 300 744
    sect. 4.5.3), and the LTE pattern on the invented six taps with a line of sight (K = 6 dB) and a
    wandering oscillator phase (an invented 200 Hz linewidth; the rank-one line of sight cannot follow it);
    then an invented slot with pilot symbols 2 and 11 on combs two apart (step 4) on the six taps, without and
    with that line of sight: 14 targets on one pilot set of two symbols, so the solves take the pilot
    symbols' factors along the time correlation's eigenvectors rather than each target's own."""
    nr = arrangement.schedule("slot", arrangement.mask_from_symbols([2, 11]), 14, 2, 4, 14, True, 3, 7,
                              estimation.MAX_PILOT_SYMBOLS)
    lte = arrangement.schedule("stream", arrangement.mask_from_symbols([0, 4]), 7, 3, 6, 7, True, 3, 7,
                               estimation.MAX_PILOT_SYMBOLS)
    dvbt = arrangement.schedule("stream", 1, 1, 3, 12, 68, True, 3, 7, estimation.MAX_PILOT_SYMBOLS)
    powers, los, _, _ = line_of_sight(SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), "six", "rician", 6.0, None)
    return [
        (lte, estimation.Band(ETU_S, 10 ** (ETU_DB / 10), 0.0, 15e3, 1200), 0.5 * MS / 7 * np.array([1, 1.2]),
         np.array([300.0, 30.0]), "classical", 0.0, None),
        (dvbt, estimation.Band(np.array([0, 200 * US]), np.array([1.0, 1.0]), 0.0, 1 / (896 * US), 1705),
         np.array([1120, 1008]) * US, 55.6, "classical", 0.0, None),
        (lte, estimation.Band(SIX_TAPS_S, powers, los, 30e3, 300), np.array([35.7, 33.3]) * US, 800.0, "rician", los,
         (200.0, 0.0, None)),
        (nr, estimation.Band(SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), 0.0, 30e3, 300), np.array([35.7, 33.3]) * US,
         np.array([800.0, 200.0]), "classical", 0.0, None),
        (nr, estimation.Band(SIX_TAPS_S, powers, los, 30e3, 300), np.array([35.7, 33.3]) * US, 800.0, "rician", los,
         (200.0, 0.0, None)),
    ]


#: Noise levels for the comparisons: near-zero errors are 1 - (a number close to 1) on both routes, so they
#: agree in absolute terms (ATOL) rather than relative ones.
NOISES = [1e-5, 1e-3, 0.1, 10.0]
ATOL = 1e-14


@pytest.mark.parametrize("case", range(5))
def test_direct_weights_agree_with_the_eigen_form(case):
    """Pilot symbols on different combs: the Cholesky route per noise level (the default) gives the
    eigendecomposition's values, design by design and level by level."""
    plan, band, symbol_s, doppler, spectrum, los, oscillator = _staggered_cases()[case]
    args = (plan, band, symbol_s, doppler, spectrum, los, "lmmse", oscillator)
    eigen = estimation.spectral_weights(*args, coupled="eigen")
    direct = estimation.spectral_weights(*args)
    assert all(isinstance(w, estimation.DirectWeights) for w in direct)
    assert all(isinstance(w, estimation.SpectralWeights) for w in eigen)
    for e, d in zip(eigen, direct):
        for noise in NOISES:
            assert_allclose(d.mse(noise), e.mse(noise), rtol=1e-9, atol=ATOL)
    # every level at once, through the batch entry point, then many more levels
    fresh = estimation.spectral_weights(*args)
    estimation.prepare_direct([(w, np.array(NOISES)) for w in fresh])
    many = np.geomspace(1e-4, 1e2, 9)
    for e, f, d in zip(eigen, fresh, direct):
        assert len(f.known) == len(NOISES)
        assert_allclose(f.mse(np.array(NOISES)), e.mse(np.array(NOISES)), rtol=1e-9, atol=ATOL)
        assert_allclose(f.mse(many), e.mse(many), rtol=1e-9, atol=ATOL)
        # a level's value does not depend on what was asked before or with it: the same digits
        assert np.array_equal(f.mse(np.array(NOISES)), np.array([d.mse(v) for v in NOISES]))


def test_coupled_targets_asked_together_across_patterns():
    """Two staggered patterns on one band (LTE port 0 read as a stream and slot by slot, TS 36.211
    sect. 6.10.1.2, in ETU, TS 36.101 Annex B) with an oscillator's phase on every component (an invented
    10 Hz linewidth and 190 Hz offset): asked through one batch, their targets' energies are worked out per
    pilot set across both; each design agrees with the eigendecomposition of its own coupled matrix, and
    with what it gives asked alone on a fresh band."""
    mask = arrangement.mask_from_symbols([0, 4])
    plans = [arrangement.schedule("stream", mask, 7, 3, 6, 7, True, 3, 7, estimation.MAX_PILOT_SYMBOLS),
             arrangement.schedule("slot", mask, 7, 3, 6, 14, True, 0, 0, estimation.MAX_PILOT_SYMBOLS)]
    oscillator = (10.0, 190.0, None)
    symbol_s, doppler = 0.5 * MS / 7 * np.array([1, 1.2]), np.array([300.0, 30.0])

    def weights(band, plan, coupled="direct"):
        return estimation.spectral_weights(plan, band, symbol_s, doppler, "classical", 0.0, "lmmse", oscillator,
                                           coupled)

    def fresh_band():
        return estimation.Band(ETU_S, 10 ** (ETU_DB / 10), 0.0, 15e3, 1200)

    shared = fresh_band()
    together = [weights(shared, plan) for plan in plans]
    estimation.prepare_direct([(w, np.array(NOISES)) for ws in together for w in ws])
    for plan, ws in zip(plans, together):
        eigen, alone = weights(fresh_band(), plan, "eigen"), weights(fresh_band(), plan)
        for w, e, a in zip(ws, eigen, alone):
            assert_allclose(w.mse(np.array(NOISES)), e.mse(np.array(NOISES)), rtol=1e-9, atol=ATOL)
            assert_allclose(w.mse(np.array(NOISES)), a.mse(np.array(NOISES)), rtol=1e-12, atol=ATOL)


def test_thin_factors_of_a_comb_sparser_than_the_channel():
    """A comb of fewer subcarriers than the channel has components (an invented exponential profile of 64
    taps over 2 us, 400 ns rms, on 600 subcarriers of 30 kHz: about 40 components; LTE's port-0 timing
    with every 24th subcarrier, 25 per comb): the thin factors keep the combs' rank, and the coupled error
    agrees with the eigendecomposition of the whole square-root form to 1e-9."""
    delays = np.linspace(0.0, 2 * US, 64)
    band = estimation.Band(delays, np.exp(-delays / (400 * NS)), 0.0, 30e3, 600)
    plan = arrangement.schedule("stream", arrangement.mask_from_symbols([0, 4]), 7, 12, 24, 7, True, 3, 7,
                                estimation.MAX_PILOT_SYMBOLS)
    members = band.clusters(24, plan.comb_offsets)[-1]
    factors = band.cluster_factors(24, plan.comb_offsets, members)
    assert factors.shape[-1] == 25 < members.shape[1]
    args = (plan, band, 35.7 * US * np.array([1, 1.1]), np.array([50.0, 300.0]), "classical", 0.0, "lmmse",
            (10.0, 190.0, None))
    for direct, eigen in zip(estimation.spectral_weights(*args), estimation.spectral_weights(*args, coupled="eigen")):
        assert_allclose(direct.mse(np.array(NOISES)), eigen.mse(np.array(NOISES)), rtol=1e-9, atol=ATOL)


def test_estimation_errors_of_many_weights_at_once_match_their_own():
    """Many requests at once (spectral weights of LTE's port 0 on one comb and staggered, TS 36.211 sect.
    6.10.1.2, in ETU, TS 36.101 Annex B; a differential reference): the same digits as each weights' own
    mse, in the shape of each request's levels."""
    band = estimation.Band(ETU_S, 10 ** (ETU_DB / 10), 0.0, 15e3, 1200)
    mask = arrangement.mask_from_symbols([0, 4])
    one_comb = arrangement.schedule("slot", mask, 7, 0, 6, 14, True, 0, 0, estimation.MAX_PILOT_SYMBOLS)
    staggered = arrangement.schedule("stream", mask, 7, 3, 6, 7, True, 3, 7, estimation.MAX_PILOT_SYMBOLS)
    symbol_s = 0.5 * MS / 7 * np.array([1, 1.2, 1.5])
    weights = [*estimation.spectral_weights(one_comb, band, symbol_s, 300.0, "classical", 0.0),
               *estimation.staggered_bound(staggered, band, symbol_s, 300.0, "classical", 0.0),
               *estimation.spectral_weights(staggered, band, symbol_s[:1], 300.0, "classical", 0.0),
               estimation.SpectralWeights("differential", np.zeros(0), np.zeros(0), 1.0, bias=0.9)]
    levels = [np.array([0.01, 0.1]), np.array([[1.0], [0.001]]), np.array(0.05), np.array([0.0, np.inf])] * 2
    requests = list(zip(weights, levels))
    for (w, noise), got in zip(requests, estimation.estimation_errors(requests)):
        assert got.shape == noise.shape
        assert np.array_equal(got, w.mse(noise))


@pytest.mark.parametrize("case", range(5))
def test_both_right_hand_sides_of_the_direct_form_agree(case, monkeypatch):
    """Every target's own right-hand side and the pilot symbols' factors along the time correlation's
    eigenvectors (read with each target's coefficients) give the same explained energies."""
    routes = {}
    for per_target in (True, False):  # a fresh band each time: a band keeps the values it worked out
        plan, band, symbol_s, doppler, spectrum, los, oscillator = _staggered_cases()[case]
        args = (plan, band, symbol_s, doppler, spectrum, los, "lmmse", oscillator)
        monkeypatch.setattr(estimation, "_per_target", lambda targets, pilot_symbols, v=per_target: v)
        routes[per_target] = [[float(w.mse(noise)) for noise in NOISES] for w in estimation.spectral_weights(*args)]
    assert_allclose(routes[False], routes[True], rtol=1e-9, atol=ATOL)


def test_direct_weights_of_an_array_of_noise_levels_match_scalar_calls():
    """An array of noise levels (repeated values, two dimensions) gives what one call per level gives,
    in the array's shape; repeated levels are worked out once."""
    plan, band, symbol_s, doppler, spectrum, los, oscillator = _staggered_cases()[0]
    args = (plan, band, symbol_s, doppler, spectrum, los, "lmmse", oscillator)
    noise = np.array([[0.01, 0.1, 0.01], [1.0, 0.1, 0.01]])
    for together, alone in zip(estimation.spectral_weights(*args), estimation.spectral_weights(*args)):
        got = together.mse(noise)
        assert got.shape == noise.shape and len(together.known) == 3
        expected = np.array([[float(alone.mse(v)) for v in row] for row in noise])
        assert_allclose(got, expected, rtol=1e-12, atol=0)
        assert np.ndim(alone.mse(0.01)) == 0


def test_direct_weights_fall_back_to_the_eigen_route(monkeypatch):
    """Noise levels tiny against the matrices' scale, or a failed factorisation: the eigendecomposition
    answers, with the eigen form's values."""
    plan, band, symbol_s, doppler, spectrum, los, oscillator = _staggered_cases()[1]
    args = (plan, band, symbol_s, doppler, spectrum, los, "lmmse", oscillator)
    eigen = estimation.spectral_weights(*args, coupled="eigen")
    calls = []
    original = estimation._eigen_explained
    monkeypatch.setattr(estimation, "_eigen_explained", lambda *a: calls.append(1) or original(*a))
    tiny = [w.mse(1e-13) for w in estimation.spectral_weights(*args)]
    assert calls
    assert_allclose(tiny, [e.mse(1e-13) for e in eigen], rtol=1e-9, atol=ATOL)

    def failing(a):
        raise np.linalg.LinAlgError("not positive definite")

    monkeypatch.setattr(np.linalg, "cholesky", failing)
    calls.clear()
    got = [w.mse(0.01) for w in estimation.spectral_weights(*args)]
    assert calls
    assert_allclose(got, [e.mse(0.01) for e in eigen], rtol=1e-9, atol=ATOL)


#: An invented oscillator for the wandering line of sight: 200 Hz Wiener linewidth, 30 Hz residual offset.
WANDERING = (200.0, 30.0)


@pytest.mark.parametrize("spectrum", ["rician", "tracked"])
@pytest.mark.parametrize("pattern", [("slot", [2, 11], 14, 0, 2), ("stream", [0], 4, 0, 3),
                                     ("slot", [0, 3, 7, 10], 14, 0, 4)])
def test_wandering_line_of_sight_on_one_comb_against_brute_force(spectrum, pattern):
    """A line of sight (K = 6 dB) whose phase wanders with the oscillator, pilots on one comb: the
    rank-u update of the separable problem (WanderingWeights) is the exact LMMSE error."""
    scope, symbols, period, shift, step = pattern
    plan = arrangement.schedule(scope, arrangement.mask_from_symbols(symbols), period, shift, step,
                                14 if scope == "slot" else period, True, 3, 7, estimation.MAX_PILOT_SYMBOLS)
    powers, los, _, _ = line_of_sight(SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), "six", spectrum, 6.0, None)
    band = estimation.Band(SIX_TAPS_S, powers, los, 30e3, 300)
    weights = estimation.spectral_weights(plan, band, [35.7 * US], 800.0, spectrum, los, "lmmse",
                                          (*WANDERING, None))[0]
    assert isinstance(weights, estimation.WanderingWeights)
    for noise in (0.001, 0.02, 0.5):
        reference = brute_force_mse(plan, 300, 30e3, 35.7 * US, SIX_TAPS_S, powers, 800.0, noise, los, spectrum,
                                    WANDERING)
        assert_allclose(float(weights.mse(noise)), reference, rtol=1e-6)


def test_wandering_weights_agree_with_the_whole_coupled_problem(monkeypatch):
    """The same at many noise levels and two designs against the eigendecomposition of the whole coupled
    matrix (every component in one cluster: COUPLING = 0), to round-off."""
    plan = arrangement.schedule("slot", arrangement.mask_from_symbols([2, 11]), 14, 0, 2, 14, False, 0, 0,
                                estimation.MAX_PILOT_SYMBOLS)
    powers, los, _, _ = line_of_sight(SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), "six", "rician", 6.0, None)
    args = ([35.7 * US, 33.3 * US], np.array([800.0, 300.0]), "rician", los, "lmmse", (*WANDERING, None))
    fast = estimation.spectral_weights(plan, estimation.Band(SIX_TAPS_S, powers, los, 30e3, 300), *args)
    monkeypatch.setattr(estimation, "COUPLING", 0.0)
    whole = estimation.spectral_weights(plan, estimation.Band(SIX_TAPS_S, powers, los, 30e3, 300), *args,
                                        coupled="eigen")
    noise = np.geomspace(1e-5, 1e2, 8)
    for f, w in zip(fast, whole):
        assert_allclose(f.mse(noise), w.mse(noise), rtol=1e-9, atol=ATOL)
        assert f.mse(noise).shape == noise.shape
        # noiseless pilots: the limit s2 -> 0+, without a warning (the tests treat warnings as errors)
        assert_allclose(f.mse(0.0), w.mse(1e-9), rtol=1e-6)
        assert np.isnan(f.mse(np.nan)) and f.mse(np.inf) == 1.0


@pytest.mark.parametrize("spectrum", ["rician", "tracked"])
def test_staggered_bound_with_a_wandering_line_of_sight_is_below_the_brute_force_error(spectrum):
    """LTE's staggered port-0 pattern (TS 36.211 sect. 6.10.1.2) with a line of sight (K = 6 dB) and the
    oscillator above: the comb bound (one dominating comb, WanderingWeights) is below the brute force
    and within 1 dB of it."""
    plan = arrangement.schedule("stream", arrangement.mask_from_symbols([0, 4]), 7, 3, 6, 7, True, 3, 7,
                                estimation.MAX_PILOT_SYMBOLS)
    powers, los, _, _ = line_of_sight(SIX_TAPS_S, 10 ** (SIX_TAPS_DB / 10), "six", spectrum, 6.0, None)
    band = estimation.Band(SIX_TAPS_S, powers, los, 30e3, 300)
    weights = estimation.staggered_bound(plan, band, [35.7 * US], 800.0, spectrum, los, (*WANDERING, None))[0]
    assert isinstance(weights, estimation.WanderingWeights)
    for noise in (0.002, 0.02, 0.2):
        reference = brute_force_mse(plan, 300, 30e3, 35.7 * US, SIX_TAPS_S, powers, 800.0, noise, los, spectrum,
                                    WANDERING)
        bound = float(weights.mse(noise))
        assert bound <= reference * (1 + 1e-9)
        assert _db(reference) - _db(bound) < 1.0
