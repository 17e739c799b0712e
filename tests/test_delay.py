"""Tests for numerology.delay: delay moments, coherence bandwidth, echoes beyond the guard."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from numerology import delay
from numerology.profiles import CATALOGUE

ns = 1e-9
us = 1e-6
kHz = 1e3


# --- worked examples -------------------------------------------------------------

RAPPAPORT_DELAYS_S = np.array([0.0, 1.0, 2.0, 5.0]) * us
RAPPAPORT_POWERS = 10.0 ** (np.array([-20.0, -10.0, -10.0, 0.0]) / 10.0)


def test_rappaport_worked_example():
    """Rappaport, Wireless Communications 2nd ed., ch. 5 worked example (from memory; calc agrees).

    Taps -20 dB @ 0, -10 dB @ 1 us, -10 dB @ 2 us, 0 dB @ 5 us: mean excess delay
    4.38 us, rms 1.37 us, 1/(5 sigma) about 146 kHz. The book prints three
    significant figures, so the tolerance is half a unit of the last digit.
    """
    assert_allclose(delay.mean_excess_delay_s(RAPPAPORT_DELAYS_S, RAPPAPORT_POWERS), 4.38 * us, rtol=0, atol=0.005 * us)
    sigma = delay.rms_delay_spread_s(RAPPAPORT_DELAYS_S, RAPPAPORT_POWERS)
    assert_allclose(sigma, 1.37 * us, rtol=0, atol=0.005 * us)
    rules = delay.coherence_bandwidth_rules_of_thumb(sigma)
    assert_allclose(rules["1/(5 sigma), Rappaport eq. 5.39 (rho 0.5)"], 146 * kHz, rtol=0, atol=0.5 * kHz)


def test_boccuzzi_two_ray():
    """Boccuzzi, Signal Processing for Wireless Communications (2008) sect. 3.4.2 (confirmed).

    0 dB @ 0 and -10 dB @ 2 us: mean 0.18 us and 1/(2 pi sigma) about 277 kHz
    (printed to 2 and 3 significant figures: half-unit tolerances).

    Recorded: the rule of thumb is not the correlation definition. Here the
    exact 0.5-correlation bandwidth does not exist: abs(R) never falls below
    (1 - 0.1)/1.1 = 0.818 (calc), so coherence_bandwidth_hz returns inf.
    """
    delays_s, powers = [0.0, 2 * us], [1.0, 0.1]
    assert_allclose(delay.mean_excess_delay_s(delays_s, powers), 0.18 * us, rtol=0, atol=0.005 * us)
    sigma = delay.rms_delay_spread_s(delays_s, powers)
    assert_allclose(delay.coherence_bandwidth_rules_of_thumb(sigma)["1/(2 pi sigma), Jakes"], 277 * kHz,
                    rtol=0, atol=0.5 * kHz)
    assert delay.coherence_bandwidth_hz(delays_s, powers, 0.5) == np.inf
    lags = np.linspace(0, 2 / (2 * us), 2001)
    assert_allclose(np.abs(delay.frequency_correlation(lags, delays_s, powers)).min(), 0.9 / 1.1, rtol=1e-9)


@pytest.mark.parametrize("echo_fraction", [0.5, 0.3, 0.1])
@pytest.mark.parametrize("rho", [0.5, 0.9])
def test_two_ray_coherence_bandwidth_closed_form(echo_fraction, rho):
    """Two rays (1-p at 0, p at tau): abs(R)^2 = (1-p)^2 + p^2 + 2p(1-p)cos(2 pi df tau) (calc).

    The first lag with abs(R) = rho is arccos((rho^2 - (1-p)^2 - p^2) / (2p(1-p))) / (2 pi tau)
    when that is defined; otherwise inf. Tolerance: the root finder's 1e-12 plus rounding.
    """
    tau_s, p = 1.3 * us, echo_fraction
    cos = (rho**2 - (1 - p) ** 2 - p**2) / (2 * p * (1 - p))
    expected = np.arccos(cos) / (2 * np.pi * tau_s) if abs(cos) <= 1 else np.inf
    assert_allclose(delay.coherence_bandwidth_hz([0.0, tau_s], [1 - p, p], rho), expected, rtol=1e-10)


def test_two_equal_rays_one_third_of_inverse_spacing():
    """Equal rays tau apart: abs(R) = abs(cos(pi df tau)) = 0.5 at df = 1/(3 tau) (calc)."""
    assert_allclose(delay.coherence_bandwidth_hz([5 * us, 6 * us], [2.0, 2.0], 0.5), 1 / (3 * us), rtol=1e-10)


def test_single_tap_has_infinite_coherence_bandwidth():
    assert delay.coherence_bandwidth_hz([0.0], [1.0]) == np.inf
    assert delay.coherence_bandwidth_hz([0.0, 1 * us], [1.0, 0.0]) == np.inf


@pytest.mark.parametrize("rho", [0.0, 1.0, -0.5, 1.5, np.nan])
def test_coherence_bandwidth_rejects_bad_correlation(rho):
    with pytest.raises(ValueError, match="correlation"):
        delay.coherence_bandwidth_hz([0.0, 1 * us], [1.0, 1.0], rho)


# --- exponential profile --------------------------------------------------------

def test_exponential_closed_form_values():
    """Calc from the exponential profile's 1/(1 + j 2 pi df sigma): sqrt(3)/(2 pi sigma) = 0.2757/sigma at 0.5,
    0.0771/sigma at 0.9.

    Printed to 4 significant figures: half a unit of the last digit.
    """
    sigma = 1 * us
    assert_allclose(delay.exponential_coherence_bandwidth_hz(sigma, 0.5) * sigma, 0.2757, rtol=0, atol=5e-5)
    assert_allclose(delay.exponential_coherence_bandwidth_hz(sigma, 0.9) * sigma, 0.0771, rtol=0, atol=5e-5)
    assert_allclose(delay.exponential_coherence_bandwidth_hz(sigma, 0.5), np.sqrt(3) / (2 * np.pi * sigma), rtol=1e-14)


@pytest.mark.parametrize("rho", [0.5, 0.9])
def test_dense_exponential_matches_closed_forms(rho):
    """A densely sampled exponential profile against two closed forms (calc).

    2048 taps down to 80 dB. (1) Its taps form a geometric series a^k at step
    Delta, whose infinite-series correlation (1-a)/(1 - a exp(-j 2 pi df Delta))
    gives cos(2 pi df Delta) = (1 + a^2 - (1-a)^2/rho^2) / (2a) exactly; the 80-dB
    truncation leaves out 1e-8 of the power, hence rtol 1e-6. (2) The continuous
    exponential's sqrt(1/rho^2 - 1)/(2 pi sigma): the geometric series
    approximates it to second order in the step, so rtol = (Delta/sigma)^2 = 8e-5.
    """
    sigma = 250 * ns
    d, p = delay.exponential_profile(sigma, floor_db=80.0, num_taps=2048)
    found = delay.coherence_bandwidth_hz(d, p, rho)
    step, a = d[1] - d[0], p[1] / p[0]
    geometric = np.arccos((1 + a * a - (1 - a) ** 2 / rho**2) / (2 * a)) / (2 * np.pi * step)
    assert_allclose(found, geometric, rtol=1e-6)
    assert_allclose(found, delay.exponential_coherence_bandwidth_hz(sigma, rho), rtol=(step / sigma) ** 2)


def test_exponential_profile_shape_and_exact_rms():
    sigma = 120 * ns
    d, p = delay.exponential_profile(sigma, floor_db=25.0, num_taps=40)
    assert len(d) == len(p) == 40
    assert d[0] == 0.0
    assert_allclose(p.sum(), 1.0, rtol=1e-14)
    assert_allclose(delay.rms_delay_spread_s(d, p), sigma, rtol=1e-12)  # rescaled on purpose
    assert_allclose(10 * np.log10(p[-1] / p[0]), -25.0, rtol=0, atol=1e-9)
    assert np.all(np.diff(d) > 0) and np.all(np.diff(p) < 0)


def test_exponential_profile_truncation_lowers_rms_before_rescaling():
    """The docstring's 0.977 sigma (30 dB, 64 taps): the stretch factor is 1/0.977 (calc)."""
    sigma = 1 * us
    d, _ = delay.exponential_profile(sigma)
    tau_max_unscaled = sigma * 30 * np.log(10) / 10
    assert_allclose(tau_max_unscaled / d[-1], 0.977, rtol=0, atol=5e-4)


@pytest.mark.parametrize("kwargs", [dict(rms_delay_spread_s=0.0), dict(rms_delay_spread_s=np.nan),
                                    dict(rms_delay_spread_s=1e-6, floor_db=0.0),
                                    dict(rms_delay_spread_s=1e-6, num_taps=1)])
def test_exponential_profile_rejects_bad_arguments(kwargs):
    with pytest.raises(ValueError):
        delay.exponential_profile(**kwargs)


# --- correlation at the root, for every catalogue profile --------------------------

@pytest.mark.parametrize("rho", [0.5, 0.9])
@pytest.mark.parametrize("name", sorted(CATALOGUE))
def test_correlation_equals_rho_at_root_and_exceeds_it_below(name, rho):
    """abs(R(B_c)) = rho (root accuracy 1e-12 relative in df: abs(R) moves far less than 1e-9),
    and abs(R) > rho on 20000 lags in (0, B_c): B_c is the FIRST crossing."""
    profile = CATALOGUE[name]
    bc = delay.coherence_bandwidth_hz(profile.delays_s, profile.powers, rho)
    if np.isinf(bc):
        # only when a dominant tap holds abs(R) >= 2 p_max - 1 > rho
        assert 2 * profile.powers.max() - 1 > rho
        return
    r = delay.frequency_correlation(bc, profile.delays_s, profile.powers)
    assert_allclose(abs(r), rho, rtol=0, atol=1e-9)
    below = np.linspace(0, bc, 20001)[:-1]
    assert np.all(np.abs(delay.frequency_correlation(below, profile.delays_s, profile.powers)) > rho)


def test_coherence_bandwidth_of_a_stack_matches_each_profile():
    """A 2-D stack (profiles x taps) gives the same roots as one profile at a time."""
    base = CATALOGUE["EVA"]
    factors = np.array([0.5, 1.0, 2.0, 3.7])
    stack = np.asarray(base.delays_s)[None, :] * factors[:, None]
    together = delay.coherence_bandwidth_hz(stack, base.powers, 0.5)
    alone = [delay.coherence_bandwidth_hz(row, base.powers, 0.5) for row in stack]
    assert together.shape == (4,)
    assert_allclose(together, alone, rtol=1e-11)
    assert_allclose(together * factors, together[1], rtol=1e-11)


def test_frequency_correlation_broadcasts():
    lags = np.array([[0.0], [1e5], [1e6]])  # (3, 1) against 2 profiles
    delays_s = np.array([[0.0, 1 * us], [0.0, 2 * us]])
    r = delay.frequency_correlation(lags, delays_s, [1.0, 1.0])
    assert r.shape == (3, 2)
    assert_allclose(r[0], 1.0, rtol=1e-15)
    assert_allclose(abs(r[2, 0]), abs(np.cos(np.pi * 1e6 * 1 * us)), rtol=0, atol=1e-15)


# --- other moments --------------------------------------------------------------------

def test_max_excess_delay_threshold():
    """ITU-R M.1225 Indoor A: its last tap (-32 dB at 310 ns) is beyond a 30-dB threshold."""
    d = np.array([0, 50, 110, 170, 290, 310]) * ns
    p = 10 ** (np.array([0, -3, -10, -18, -26, -32]) / 10)
    assert_allclose(delay.max_excess_delay_s(d, p, 30.0), 290 * ns, rtol=1e-12)
    assert_allclose(delay.max_excess_delay_s(d, p, 40.0), 310 * ns, rtol=1e-12)
    assert_allclose(delay.max_excess_delay_s(d + 7 * us, p, 40.0), 310 * ns, rtol=1e-9)  # from the first tap
    assert delay.max_excess_delay_s(d, p, 0.0) == 0.0


def test_moments_broadcast_over_profiles():
    d = np.array([[0.0, 1.0], [0.0, 2.0]]) * us
    assert_allclose(delay.rms_delay_spread_s(d, [1.0, 1.0]), [0.5 * us, 1.0 * us], rtol=1e-14)
    assert_allclose(delay.mean_excess_delay_s(d, [1.0, 1.0]), [0.5 * us, 1.0 * us], rtol=1e-14)


@pytest.mark.parametrize("powers", [[1.0, -0.1], [0.0, 0.0], [1.0, np.nan]])
def test_moments_reject_bad_powers(powers):
    with pytest.raises(ValueError):
        delay.rms_delay_spread_s([0.0, 1 * us], powers)


# --- two-ray profile --------------------------------------------------------------------

def test_two_ray_profile_equal_powers_by_default():
    d, p = delay.two_ray_profile(3 * us)
    assert_allclose(d, [0.0, 3 * us], rtol=0, atol=0)
    assert_allclose(p, [0.5, 0.5], rtol=0, atol=0)
    assert_allclose(delay.rms_delay_spread_s(d, p), 1.5 * us, rtol=1e-14)


@pytest.mark.parametrize("sigma_s", [0.0, 0.1 * us, 0.6 * us, 1.0 * us])
def test_two_ray_profile_has_the_requested_rms(sigma_s):
    d, p = delay.two_ray_profile(2 * us, sigma_s)
    assert p[1] <= p[0]
    assert_allclose(delay.rms_delay_spread_s(d, p), sigma_s, rtol=1e-12, atol=1e-24)


def test_two_ray_profile_rejects_too_large_a_spread():
    with pytest.raises(ValueError, match="half the span"):
        delay.two_ray_profile(2 * us, 1.01 * us)


# --- echoes beyond the guard interval ----------------------------------------------

@pytest.mark.parametrize("t_us, expected", [(300, 0.8376), (448, 0.5625), (672, 0.25)])
def test_echo_weight_check_values(t_us, expected):
    """EBU BPN 066 / EBU TR 024 sect. 2.4 / ITU-R BT.2386 weight (from memory); check values calc from it,
    DVB-T 8k mode T_u = 896 us, T_g = 224 us; printed to 4 decimals."""
    assert_allclose(delay.echo_weight(t_us * us, 224 * us, 896 * us), expected, rtol=0, atol=5e-5)


def test_echo_weight_pieces():
    """The piecewise definition (EBU TR 024 sect. 2.4): 1 inside the guard, 0 beyond T_u + T_g,
    mirror form for early echoes, continuous at the joins."""
    tu, tg = 896 * us, 224 * us
    t = np.array([-1000, -896, -448, 0, 224, 224.000001, 1120, 1200]) * us
    expected = [0.0, 0.0, 0.25, 1.0, 1.0, 1.0, 0.0, 0.0]
    assert_allclose(delay.echo_weight(t, tg, tu), expected, rtol=0, atol=1e-8)
    guards = np.array([[0.0], [tg]])  # broadcasting: (2, 1) x (8,)
    assert delay.echo_weight(t, guards, tu).shape == (2, 8)


def _ofdm_echo_simulation(echo_delay_samples, echo_power, n=256, guard=32, symbols=400, seed=1):
    """Random-QPSK OFDM through paths (0, echo) with the window synchronised to the first path.

    Returns (useful power of the echo alone, useful fraction of the whole channel), measured by
    projecting each subcarrier's received values onto the transmitted symbols over all symbols.
    """
    rng = np.random.default_rng(seed)
    x_freq = (rng.choice([-1.0, 1.0], (symbols, n)) + 1j * rng.choice([-1.0, 1.0], (symbols, n))) / np.sqrt(2)
    body = np.fft.ifft(x_freq, axis=1) * np.sqrt(n)  # unit power per sample
    tx = np.concatenate([body[:, -guard:], body], axis=1).ravel()
    echo = np.zeros_like(tx)
    echo[echo_delay_samples:] = tx[:-echo_delay_samples]

    def project(rx):
        blocks = rx.reshape(symbols, n + guard)[1:, guard:]  # drop the first symbol (no predecessor)
        y = np.fft.fft(blocks, axis=1) / np.sqrt(n)
        x = x_freq[1:]
        coefficient = np.sum(y * np.conj(x), axis=0) / np.sum(np.abs(x) ** 2, axis=0)
        return np.mean(np.abs(coefficient) ** 2), np.mean(np.abs(y) ** 2)

    echo_useful, _ = project(echo)
    useful, total = project(tx + np.sqrt(echo_power) * echo)
    return echo_useful, useful / total


@pytest.mark.parametrize("echo_delay_samples", [20, 64, 96, 200])
def test_echo_weight_reproduced_by_ofdm_simulation(echo_delay_samples):
    """A short OFDM simulation (N = 256, guard 32 samples, random QPSK, 400 symbols, seed 1)
    reproduces w within 0.01 (an independent check of the EBU TR 024 weight, formula from memory).
    The projection's estimation noise is about sqrt((1 - w)/(255 x 256)) in amplitude, a few 1e-3 in w."""
    n, guard = 256, 32
    echo_useful, useful_fraction = _ofdm_echo_simulation(echo_delay_samples, 0.5, n, guard)
    assert_allclose(echo_useful, delay.echo_weight(echo_delay_samples, guard, n), rtol=0, atol=0.01)
    expected_useful, _ = delay.echo_interference([0.0, echo_delay_samples], [1.0, 0.5], guard, n)
    assert_allclose(useful_fraction, expected_useful, rtol=0, atol=0.01)


def test_echo_interference_two_tap_example():
    """Equal taps, echo at 448 us, DVB-T 8k guard 1/4: useful (1 + 0.5625)/2 (calc)."""
    useful, interference = delay.echo_interference([0.0, 448 * us], [1.0, 1.0], 224 * us, 896 * us)
    assert_allclose(useful, 0.78125, rtol=1e-14)
    assert_allclose(interference, 0.21875, rtol=1e-13)


def test_echo_interference_shapes_and_first_tap_sync():
    guards = np.array([0.0, 1.0, 2.0, 5.0]) * us
    useful_symbols = np.array([[10.0], [100.0]]) * us  # (2, 1) x (4,) designs
    d = np.array([0.0, 1.5, 3.0]) * us
    p = [1.0, 0.5, 0.25]
    useful, interference = delay.echo_interference(d, p, guards, useful_symbols)
    assert useful.shape == interference.shape == (2, 4)
    assert_allclose(useful + interference, 1.0, rtol=1e-14)
    shifted, _ = delay.echo_interference(d + 40 * us, p, guards, useful_symbols)
    assert_allclose(shifted, useful, rtol=1e-12)  # window on the first arrival
    assert_allclose(useful[:, 3], 1.0, rtol=0, atol=0)  # every tap inside a 5-us guard


def test_echo_interference_of_a_stack_matches_one_profile_at_a_time():
    """Two routes to the same sum: prefix sums (1-D profile) and plain broadcasting (stack)."""
    rng = np.random.default_rng(7)
    d = np.sort(rng.uniform(0, 30 * us, (3, 12)), axis=1)
    p = rng.uniform(0.01, 1, (3, 12))
    guards = np.linspace(0, 20 * us, 9)[:, None]  # (9, 1) designs x 3 profiles
    _, together = delay.echo_interference(d, p, guards, 16 * us)
    assert together.shape == (9, 3)
    for k in range(3):
        _, alone = delay.echo_interference(d[k], p[k], guards[:, 0], 16 * us)
        assert_allclose(together[:, k], alone, rtol=1e-12, atol=1e-15)


def test_echo_interference_of_padded_profiles_is_the_weighted_sum():
    """A stack with zero-power padding (and a zero-power tap ahead of the first arrival, as the sites of a
    sweep are padded): the interference is sum p (1 - w) over the taps with power, from echo_weight itself."""
    d = np.array([[-5.0, 0.0, 3.0, 9.0, 0.0], [2.0, 4.0, 30.0, 0.0, 0.0]]) * us
    p = np.array([[0.0, 1.0, 0.5, 0.25, 0.0], [0.7, 0.2, 0.1, 0.0, 0.0]])
    guards = np.array([0.0, 2.5, 6.0])[:, None] * us  # 3 designs x 2 profiles
    useful, interference = delay.echo_interference(d, p, guards, 8 * us)
    for k in range(2):
        has = p[k] > 0
        excess = d[k][has] - d[k][has].min()  # window on the first arrival
        weights = delay.echo_weight(excess[None, :], guards, 8 * us)
        expected = np.sum((1 - weights) * p[k][has], axis=-1) / p[k].sum()
        assert_allclose(interference[:, k], expected, rtol=1e-14, atol=1e-16)
    assert_allclose(useful + interference, 1.0, rtol=1e-15)


def test_path_difference_delay():
    """1 km of path difference is 3.336 us; indoors tens of metres give about 100 ns
    (common practice); 1.5 m at 1500 m/s in sea water is 1 ms (common practice)."""
    assert_allclose(delay.path_difference_delay_s(1000.0), 3.336 * us, rtol=0, atol=0.0005 * us)
    assert_allclose(delay.path_difference_delay_s(30.0), 100 * ns, rtol=0, atol=0.5 * ns)
    assert_allclose(delay.path_difference_delay_s(1.5, 1500.0), 1e-3, rtol=1e-15)
    assert_allclose(delay.path_difference_delay_s(np.array([299_792_458.0])), [1.0], rtol=1e-15)


# --- properties ------------------------------------------------------------------

_profiles = st.integers(1, 12).flatmap(lambda k: st.tuples(
    st.lists(st.floats(0, 20e-6), min_size=k, max_size=k),
    st.lists(st.floats(1e-6, 1e3), min_size=k, max_size=k)))


@settings(max_examples=60, deadline=None)
@given(profile=_profiles, offset_s=st.floats(0, 1e-3), scale=st.floats(1e-6, 1e6))
def test_rms_invariant_to_delay_offset_and_power_scale(profile, offset_s, scale):
    d, p = np.array(profile[0]), np.array(profile[1])
    sigma = delay.rms_delay_spread_s(d, p)
    # absolute tolerance: rounding of delays up to ~1 ms carries errors of ~1e-19 s
    assert_allclose(delay.rms_delay_spread_s(d + offset_s, p * scale), sigma, rtol=1e-9, atol=1e-17)
    assert_allclose(delay.mean_excess_delay_s(d + offset_s, p), delay.mean_excess_delay_s(d, p),
                    rtol=1e-9, atol=1e-17)


# delays on a 1-ns grid: two delays one rounding step apart would make the span itself rounding noise
_grid_profiles = st.integers(1, 12).flatmap(lambda k: st.tuples(
    st.lists(st.integers(0, 20000).map(lambda n: n * ns), min_size=k, max_size=k),
    st.lists(st.floats(1e-6, 1e3), min_size=k, max_size=k)))


@settings(max_examples=40, deadline=None)
@given(profile=_grid_profiles, k=st.floats(0.1, 10))
def test_delay_scaling_scales_rms_and_inverse_coherence_bandwidth(profile, k):
    """rms scales with k and B_c with 1/k; tolerance: rounding k tau and subtracting the first delay
    costs a few eps of the largest delay, a large fraction of a tiny span (two taps 1 ns apart at
    20 us: about 1e-11 relative); the root is found to 1e-12."""
    d, p = np.array(profile[0]), np.array(profile[1])
    span = np.ptp(d) if d.size > 1 else 0.0
    rtol = 1e-12 + (8 * np.finfo(float).eps * d.max() / span if span > 0 else 0.0)
    assert_allclose(delay.rms_delay_spread_s(k * d, p), k * delay.rms_delay_spread_s(d, p), rtol=rtol, atol=1e-24)
    bc = delay.coherence_bandwidth_hz(d, p, 0.5)
    assert_allclose(delay.coherence_bandwidth_hz(k * d, p, 0.5), bc / k, rtol=1e-9)


@settings(max_examples=60, deadline=None)
@given(profile=_profiles, guards_s=st.lists(st.floats(0, 30e-6), min_size=2, max_size=8),
       useful_symbol_s=st.floats(1e-6, 1e-3))
def test_longer_guard_never_lowers_useful_fraction(profile, guards_s, useful_symbol_s):
    guards = np.sort(guards_s)
    useful, _ = delay.echo_interference(profile[0], profile[1], guards, useful_symbol_s)
    assert np.all(np.diff(useful) >= -1e-12)  # rounding of prefix sums only
    assert np.all((useful >= 0) & (useful <= 1))


def test_far_weak_echo_does_not_hide_a_close_pair():
    """Two equal taps 1 ns apart and a -30 dB tap at 10 us: the first 0.5 crossing is near
    1/(3 ns) = 333 MHz (calc), 3333 times 1/span; the scan must reach it."""
    d, p = [0.0, 1 * ns, 10 * us], [1.0, 1.0, 1e-3]
    bc = delay.coherence_bandwidth_hz(d, p, 0.5)
    assert_allclose(bc, 1 / (3 * ns), rtol=2e-3)  # the weak tap moves abs(R) by up to 1e-3
    assert_allclose(abs(delay.frequency_correlation(bc, d, p)), 0.5, rtol=0, atol=1e-9)
    below = np.linspace(0, bc, 400001)[:-1]  # 12 points per 100-kHz ripple of the far tap
    assert np.all(np.abs(delay.frequency_correlation(below, d, p)) > 0.5)


def test_tight_cluster_is_flat_over_the_scanned_range():
    """Taps 1 fs apart holding 99 % of the power cannot decorrelate below 16384/span
    (documented: inf, found without scanning)."""
    assert delay.coherence_bandwidth_hz([0.0, 1e-15, 1 * us], [1.0, 1.0, 0.02], 0.5) == np.inf


@settings(max_examples=60, deadline=None)
@given(profile=_profiles, guards_s=st.lists(st.floats(0, 30e-6), min_size=1, max_size=6),
       useful_symbol_s=st.floats(1e-6, 1e-4))
def test_prefix_sum_route_matches_tap_by_tap_weights(profile, guards_s, useful_symbol_s):
    """echo_interference on one profile (prefix sums) equals sum (1 - w_i) p_i with echo_weight
    per tap; tolerance: cancellation in the prefix sums, at most a few 1e-16 x (tau_max/T_u)^2."""
    d, p = np.array(profile[0]), np.array(profile[1])
    guards = np.array(guards_s)
    _, interference = delay.echo_interference(d, p, guards, useful_symbol_s)
    excess = d - d.min()
    w = delay.echo_weight(excess, guards[:, None], useful_symbol_s)
    expected = np.sum((1 - w) * p, axis=-1) / p.sum()
    assert_allclose(interference, expected, rtol=1e-9, atol=1e-12 * (1 + (d.max() / useful_symbol_s) ** 2))
