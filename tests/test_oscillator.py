"""Tests for numerology.oscillator: CFO and phase-noise inter-carrier interference.

Sources named beside each check. "calc" values are computed from the cited formulas;
"from memory" marks a formula or value recalled without the document at hand.
"""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.integrate import quad

from numerology.errors import InputError
from numerology.oscillator import (
    _one_minus_sinc_squared,
    cfo_degradation_db,
    cfo_ici,
    linewidth_for_ici,
    mask_phase_noise_ici,
    wiener_degradation_db,
    wiener_phase_noise_ici,
)

hertz = 1.0
kilohertz = 1e3
decibel = 1.0


# --- carrier frequency offset ------------------------------------------------------


def test_cfo_ici_check_value():
    """Calc from Moose 1994 (IEEE Trans. Commun. 42(10)), ICI = 1 - sinc^2(e): e = 0.02 gives 1.3153e-3,
    28.81 dB SIR. Given to 5 digits / 2 decimals: tolerance half a unit of the last digit."""
    ici = cfo_ici(0.3 * kilohertz, 15 * kilohertz)
    assert_allclose(ici, 1.3153e-3, atol=0.5e-7)
    assert_allclose(-10 * np.log10(ici), 28.81 * decibel, atol=0.005 * decibel)


def test_cfo_ici_small_offset_limit():
    """Moose 1994: ICI ~ (pi e)^2 / 3; the next term of 1 - sinc^2 is
    -2 (pi e)^4 / 45, so the relative gap is (pi e)^2 * 2/15."""
    e = np.array([1e-6, 1e-4, 1e-2])
    assert_allclose(cfo_ici(e, 1.0), (np.pi * e) ** 2 / 3, rtol=np.max((np.pi * e) ** 2) * 2 / 15 * 1.01)


def test_cfo_ici_whole_spacing_offset():
    """An offset of exactly one spacing moves all power to the neighbour: sinc(1) = 0, ICI = 1 (calc)."""
    assert_allclose(cfo_ici([15e3, -15e3], 15e3), 1.0, rtol=1e-15)
    assert cfo_ici(0.0, 15e3) == 0.0


@pytest.mark.parametrize("y", [1e-9, 1e-5, 0.01, 0.2, 0.3183, 0.3184, 0.5, 0.999, 2.5])
def test_one_minus_sinc_squared_against_high_precision(y):
    """Series branch (pi |y| < 1) and direct branch against 40-digit mpmath (independent
    arithmetic); the switch sits between 0.3183 and 0.3184. 1e-14 relative: double rounding."""
    mp.mp.dps = 40
    s = mp.pi * mp.mpf(y)
    expected = float(1 - (mp.sin(s) / s) ** 2)
    assert_allclose(_one_minus_sinc_squared(y), expected, rtol=1e-14)


def test_cfo_degradation_check_value():
    """Pollet et al. 1995 (formula from memory; value calc from it): e = 0.02 at Es/N0 = 20 dB
    gives D = 0.572 dB (3 decimals: atol 0.0005 dB)."""
    assert_allclose(cfo_degradation_db(300.0, 15e3, 20.0), 0.572 * decibel, atol=0.0005 * decibel)


# --- Wiener phase noise ------------------------------------------------------------


def test_wiener_ici_check_value():
    """beta T_u = 0.001 gives about 1.047e-3 (pi beta T_u / 3, calc from 1 - E|mean exp(j theta)|^2; an
    independent Monte-Carlo value, recorded from memory, agrees).
    The exact closed form is 1.04638e-3: c/3 - c^2/12 with c = pi beta T_u, 0.08 % below the
    first-order value, which that 4-digit Monte-Carlo could not resolve. Tolerance 0.1 %
    for that 4-digit quote."""
    assert_allclose(wiener_phase_noise_ici(15.0, 1 / 15e3), 1.047e-3, rtol=1e-3)


def test_wiener_ici_second_check_value():
    """At beta T_u = 0.01 an independent Monte-Carlo (from memory) gave 0.0103 against the first-order
    0.0105; the exact value 0.01039 (calc) lies with the Monte-Carlo, as the c^2/12 term predicts.
    Tolerance: half a unit of the Monte-Carlo's last quoted digit (0.00005) plus its 0.0001 noise."""
    assert_allclose(wiener_phase_noise_ici(0.01, 1.0), 0.0103, atol=0.00015)


@pytest.mark.parametrize("beta_tu", [1e-8, 1e-4, 0.01, 0.3, 1 / np.pi - 1e-12, 1 / np.pi + 1e-12, 2.0, 50.0])
def test_wiener_ici_against_high_precision(beta_tu):
    """Closed form / series (switch at c = pi beta T_u = 1) against the defining double integral
    1 - (1/T^2) int int exp(-pi beta |t - s|), reduced to 1 - 2 int_0^1 (1 - u) exp(-c u) du and
    evaluated by mpmath at 40 digits. 1e-13 relative: double rounding only."""
    mp.mp.dps = 40
    c = mp.pi * mp.mpf(beta_tu)
    expected = float(1 - 2 * mp.quad(lambda u: (1 - u) * mp.exp(-c * u), [0, 1]))
    assert_allclose(wiener_phase_noise_ici(beta_tu, 1.0), expected, rtol=1e-13)


@pytest.mark.parametrize("beta_tu", [0.01, 0.2])
def test_wiener_ici_monte_carlo(beta_tu):
    """Monte-Carlo of the model itself (fixed seed): a Wiener phase with increments of variance
    2 pi beta dt (so E exp(j (theta(t) - theta(s))) = exp(-pi beta |t - s|)), sampled at 128 points per
    symbol; per trial the CPE-corrected leakage is 1 - |mean exp(j theta)|^2.

    Statistical tolerance: 4 standard errors of the trial mean (computed from the trials).
    Discretisation bias is O(1/N^2) relative (~6e-5), far below that. The standard error is kept
    under 1 %, so at beta T_u = 0.2 the test separates the exact form from the first-order
    pi beta T_u / 3, which lies 16 % above it there (0.8 % at 0.01, calc)."""
    rng = np.random.default_rng(20240601)
    trials, samples = 20_000, 128
    dt = 1.0 / samples
    steps = rng.normal(0.0, np.sqrt(2 * np.pi * beta_tu * dt), size=(trials, samples))
    theta = np.cumsum(steps, axis=1)
    leak = 1.0 - np.abs(np.mean(np.exp(1j * theta), axis=1)) ** 2
    mean, sem = leak.mean(), leak.std(ddof=1) / np.sqrt(trials)
    assert sem < 0.01 * mean
    assert_allclose(wiener_phase_noise_ici(beta_tu, 1.0), mean, rtol=0, atol=4 * sem)


def test_wiener_degradation_check_value():
    """Pollet et al. 1995 (formula from memory; value calc from it): beta T_u = 0.001 at 20 dB
    gives 1.0005 dB (4 decimals: atol 0.00005 dB)."""
    assert_allclose(wiener_degradation_db(15.0, 1 / 15e3, 20.0), 1.0005 * decibel, atol=0.00005 * decibel)


@settings(max_examples=60, deadline=None)
@given(beta_tu=st.floats(1e-12, 1e3), t_u=st.floats(1e-7, 1e-2))
def test_linewidth_for_ici_round_trip(beta_tu, t_u):
    """Inverse of wiener_phase_noise_ici: linewidth -> ICI -> linewidth."""
    beta = beta_tu / t_u
    ici = wiener_phase_noise_ici(beta, t_u)
    assert_allclose(linewidth_for_ici(ici, t_u), beta, rtol=1e-9)


def test_linewidth_for_ici_limits():
    """0 allowed ICI -> 0 Hz; ICI >= 1 is met by any oscillator -> inf; arrays broadcast."""
    assert linewidth_for_ici(0.0, 1e-3) == 0.0
    assert linewidth_for_ici(1.0, 1e-3) == np.inf
    out = linewidth_for_ici([1e-4, 1e-3], np.array([1e-4, 1e-3])[:, None])
    assert out.shape == (2, 2)
    assert_allclose(out[0], 10 * out[1], rtol=1e-12)  # beta scales as 1/T_u at fixed ICI


# --- phase-noise mask --------------------------------------------------------------


def _mask_ici_by_quadrature(offsets_hz, levels_dbc_hz, useful_symbol_s):
    """Reference: scipy quad of 2 int L(f) (1 - sinc^2(f T_u)) df in ln f, on pieces split at the
    mask points and at every sinc zero f = n / T_u, with the exact sinc^2 (no side-lobe averaging)."""
    offsets = np.asarray(offsets_hz, float)
    levels = np.asarray(levels_dbc_hz, float)

    def integrand(u):
        f = np.exp(u)
        level = 10 ** (np.interp(u, np.log(offsets), levels) / 10)
        return 2 * level * (1 - np.sinc(f * useful_symbol_s) ** 2) * f

    zeros = np.arange(1, int(offsets[-1] * useful_symbol_s) + 1) / useful_symbol_s
    cuts = np.union1d(offsets, zeros[(zeros > offsets[0]) & (zeros < offsets[-1])])
    pieces = zip(np.log(cuts[:-1]), np.log(cuts[1:]))
    return sum(quad(integrand, a, b, epsabs=0, epsrel=1e-10, limit=200)[0] for a, b in pieces)


MASKS = [  # (offsets Hz, levels dBc/Hz, T_u s): shapes typical of synthesiser data sheets (illustrative)
    ([1e3, 1e4, 1e5, 1e6], [-80, -90, -100, -120], 1 / 30e3),
    ([10, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7], [-40, -70, -90, -95, -110, -140, -150], 1 / 15e3),
    ([100, 1e4, 3e5], [-60, -100, -100], 1 / 120e3),
    ([1e2, 1e3, 1e5], [-50, -90, -130], 1 / 1e3),  # -40 dB/decade, the steepest slope claimed
]


@pytest.mark.parametrize("offsets, levels, t_u", MASKS)
def test_mask_ici_against_quadrature(offsets, levels, t_u):
    """Fixed-grid integral against adaptive quadrature of the same small-angle integral.
    1e-4 relative is the accuracy the module states (measured here: a few 1e-6)."""
    expected = _mask_ici_by_quadrature(offsets, levels, t_u)
    assert_allclose(mask_phase_noise_ici(offsets, levels, t_u), expected, rtol=1e-4)


def test_mask_ici_vectorised_over_symbol_length():
    """One mask, several T_u: same as one call per T_u (the grid adapts to the whole range)."""
    offsets, levels, _ = MASKS[1]
    t_u = np.array([1 / 15e3, 1 / 120e3, 1 / 960e3])
    together = mask_phase_noise_ici(offsets, levels, t_u)
    one_by_one = [mask_phase_noise_ici(offsets, levels, t) for t in t_u]
    assert_allclose(together, one_by_one, rtol=1e-4)  # both within the stated 1e-4 of the integral
    assert together.shape == (3,)
    assert isinstance(one_by_one[0], float)


def test_lorentzian_mask_reproduces_wiener_closed_form():
    """A Wiener phase with E exp(j (theta(t) - theta(s))) = exp(-pi beta |t - s|) gives the Lorentzian
    carrier spectrum S(f) = (beta / (2 pi)) / (f^2 + beta^2 / 4) (Fourier transform, calc; unit power,
    3-dB width beta), so the single-sideband mask is L(f) = S(f); far from the carrier it is the
    Wiener phase spectrum beta / (2 pi f^2) (IEEE Std 1139 convention L = S_phi / 2, one-sided).

    Sampled at 20 points per decade from 0.01 Hz to 100 MHz, beta T_u = 1e-4, T_u = 1/15 kHz.
    Expected residuals against the exact 1 - 2 (c - 1 + exp(-c)) / c^2 (c = pi beta T_u):
    * the mask stops at 100 MHz: the missing tail 2 int beta / (2 pi f^2) df = beta / (pi f_max),
      4.6e-5 relative; added back analytically below.
    * the Lorentzian falls below beta / (2 pi f^2) under the linewidth; with the weight
      (pi f T_u)^2 / 3 that deficit is pi^2 beta^2 T_u^2 / 12 = c^2 / 12, which is exactly the
      second-order term of the exact form, so the small-angle mask integral tracks the exact value
      to O(c^3) (~1e-9 relative here).
    * grid and log-dB interpolation of the sampled Lorentzian: below 1e-5 relative.
    Tolerance 2e-5 relative covers these; without the tail term the gap is the stated 4.6e-5."""
    t_u = 1 / 15e3
    beta = 1e-4 / t_u
    offsets = np.logspace(-2, 8, 201)
    levels = 10 * np.log10(beta / (2 * np.pi) / (offsets**2 + beta**2 / 4))
    mask_ici = mask_phase_noise_ici(offsets, levels, t_u)
    tail = beta / (np.pi * offsets[-1])
    exact = wiener_phase_noise_ici(beta, t_u)
    assert_allclose(mask_ici + tail, exact, rtol=2e-5)
    assert_allclose(mask_ici, exact * (1 - 3 / (np.pi**2 * offsets[-1] * t_u)), rtol=2e-5)


def test_mask_is_not_extrapolated():
    """Documented behaviour: noise outside the mask's offsets is not counted, so extending a mask
    with more points can only raise the ICI, and a mask wholly below 1/T_u sees the sinc weight."""
    base = mask_phase_noise_ici([1e3, 1e5], [-90, -110], 1 / 15e3)
    wider = mask_phase_noise_ici([1e3, 1e5, 1e7], [-90, -110, -130], 1 / 15e3)
    assert wider > base
    # Flat mask far above 1/T_u: weight ~ 1, so ICI ~ 2 L (f2 - f1) (calc), side lobes add < 1e-3.
    flat = mask_phase_noise_ici([1e6, 2e6], [-120, -120], 1 / 15e3)
    assert_allclose(flat, 2 * 1e-12 * 1e6, rtol=1e-3)


@pytest.mark.parametrize(
    "call, place",
    [
        (lambda: cfo_ici(100.0, 0.0), "subcarrier_spacing_hz"),
        (lambda: cfo_ici(float("inf"), 15e3), "offset_hz"),
        (lambda: cfo_degradation_db(100.0, 15e3, float("nan")), "snr_db"),
        (lambda: wiener_phase_noise_ici(-1.0, 1e-3), "linewidth_hz"),
        (lambda: wiener_phase_noise_ici(1.0, 0.0), "useful_symbol_s"),
        (lambda: linewidth_for_ici(-1e-3, 1e-3), "max_ici"),
        (lambda: mask_phase_noise_ici([1e3], [-90], 1e-3), "offsets_hz"),
        (lambda: mask_phase_noise_ici([1e4, 1e3], [-90, -100], 1e-3), "offsets_hz"),
        (lambda: mask_phase_noise_ici([1e3, 1e4], [-90], 1e-3), "levels_dbc_hz"),
        (lambda: mask_phase_noise_ici([0.0, 1e4], [-90, -100], 1e-3), "offsets_hz"),
        (lambda: mask_phase_noise_ici([1e3, 1e4], [-90, "x"], 1e-3), "levels_dbc_hz"),
    ],
)
def test_bad_input_names_its_place(call, place):
    """Project rule: bad input raises InputError naming the parameter."""
    with pytest.raises(InputError) as info:
        call()
    assert info.value.place == place
