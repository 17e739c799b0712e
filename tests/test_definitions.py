"""The definitions the design note prints (numerology.rules.DEFINITIONS) are the functions the code evaluates.

Each declared expression is turned into a number by sympy (lambdify; integrals by scipy's quad, sums over
taps and table entries term by term) and compared with the function ``numerology.link`` binds, so that the
LaTeX a reviewer reads cannot drift from the code. The estimation error is checked the hard way: a direct
LMMSE over every usable pilot of the span, its covariances built from the declared R_H alone.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import sympy as sp
from numpy.testing import assert_allclose

from numerology import api, arrangement, delay, doppler, estimation, link, mcs, oscillator, pilots, symbolic
from numerology.design import DesignArrays
from numerology.environment import derive_environment
from numerology.requirements import requirements_from_mapping
from numerology.rules import DEFINED, DEFINITION_SYMBOLS, DEFINITIONS, DERIVED, FUNCTIONS, RULES, SYMBOLS

NS = symbolic._definition_namespace()
MODULES = [{"step": lambda y: np.heaviside(y, 1.0)}, "scipy", "numpy"]
RAIL = {"environment": {"carrier": "1.9 GHz", "max_speed": "300 km/h", "profile": "EVA",
                        "doppler_spectrum": "tracked", "k_factor": "9 dB"},
        "radio": {"bandwidth": "10 MHz", "snr": "15 dB", "frequency_error": "95 Hz", "oscillator_linewidth": "50 Hz"}}


def numeric(name, args, cases=None, quantities=()):
    """A definition as a Python function of the named arguments."""
    return sp.lambdify([NS[a] for a in args], symbolic.expanded(name, cases, quantities), modules=MODULES)


def _names(text):
    return set(re.findall(r"[A-Za-z_][A-Za-z_0-9]*", text))


# --- every name has a definition or is an input ----------------------------------------------------------


COMPUTED = {"echo_guard", "T_c", "B_c", "W_occ", "sinr_eff", "sinr_min", "rho_pil"}
SYMPY = {"Integral", "Abs", "re", "exp", "I", "pi", "besselj", "sinc", "sin", "Piecewise", "Sum", "Max", "Min",
         "Mod", "Eq", "True", "floor", "log2", "log10", "step", "range_min", "Dagger", "Id"}


def test_every_function_and_computed_symbol_of_the_rules_is_defined():
    assert set(FUNCTIONS) <= set(DEFINED)
    assert COMPUTED <= set(DEFINED) and COMPUTED <= set(SYMBOLS)
    for rule in RULES:
        for name in _names(rule.capacity) | _names(rule.demand):
            assert name in SYMBOLS or name in DERIVED or name in DEFINED, (rule.name, name)


def test_every_name_in_a_definition_is_declared_and_prints():
    known = set(SYMBOLS) | set(DERIVED) | set(DEFINITION_SYMBOLS) | set(DEFINED) | set(FUNCTIONS) | SYMPY
    for definition in DEFINITIONS:
        forms = [e for _, e in definition.cases] or [definition.expression]
        for form in forms:
            assert _names(form) | _names(definition.head) <= known | {"L"}, definition.name
        for case in [c for c, _ in definition.cases] or [""]:
            text = symbolic.definition_latex(definition, case)
            assert " = " in text
            assert not re.search(r"\b[A-Za-z]+_[A-Za-z]{2,}\b", text), (definition.name, text)  # every name printed
        assert definition.source and definition.meaning


# --- one by one against the code -------------------------------------------------------------------------


@pytest.mark.parametrize("spectrum, p_los", [("classical", 0.0), ("flat", 0.0), ("rician", 0.8), ("tracked", 0.888)])
def test_doppler_ici(spectrum, p_los):
    f = numeric("doppler_ici", ["b", "P_los"], {"rho_sc": spectrum, "rho_los": spectrum})
    for b in (0.003, 0.05, 0.3):
        assert_allclose(f(b, p_los), doppler.doppler_ici(b, 1.0, spectrum, p_los / (1 - p_los)), rtol=1e-9)


@pytest.mark.parametrize("spectrum, p_los", [("classical", 0.0), ("flat", 0.0), ("rician", 0.5), ("tracked", 0.9)])
def test_doppler_autocorrelation(spectrum, p_los):
    f = numeric("rho_D", ["x", "P_los"], {"rho_sc": spectrum, "rho_los": spectrum})
    x = np.array([0.01, 0.2, 0.7])
    assert_allclose(f(x, p_los), doppler.doppler_autocorrelation(x, 1.0, spectrum, p_los / (1 - p_los)), rtol=1e-12)


def test_oscillator_terms():
    """Wiener phase noise and a frequency offset: I_osc against link.oscillator_terms."""
    import mpmath

    req = requirements_from_mapping(RAIL)
    expr = symbolic.expanded("oscillator_ici", {"I_PN": "wiener"})
    f = sp.lambdify([NS["df"], NS["beta_o"], NS["f_o"]], expr, modules="mpmath")  # the closed form cancels at
    with mpmath.workdps(40):  # small pi beta T_u in double precision: evaluate it with 40 digits
        for spacing in (15e3, 60e3, 240e3):
            pn, cfo = link.oscillator_terms(req, 1 / spacing, spacing)
            assert_allclose(float(f(spacing, 50, 95)), pn + cfo, rtol=1e-12)


def test_phase_noise_mask():
    """The mask integral (small angle) against oscillator.mask_phase_noise_ici, which averages the side lobes
    beyond 32 subcarriers (1e-3)."""
    offsets, levels = np.array([1e3, 1e4, 1e5, 1e6]), np.array([-80.0, -90.0, -100.0, -120.0])

    def mask(f):
        inside = (f >= offsets[0]) & (f <= offsets[-1])
        return np.where(inside, 10 ** (np.interp(np.log(f), np.log(offsets), levels) / 10), 0.0)

    expr = symbolic.expanded("I_PN", {"I_PN": "mask"})
    f = sp.lambdify([NS["T_u"], NS["f_1"], NS["f_n"]], expr, modules=[{"L": mask}, "scipy", "numpy"])
    t_u = 1 / 30e3
    exact = f(t_u, offsets[0], offsets[-1])
    assert_allclose(exact, oscillator.mask_phase_noise_ici(offsets, levels, t_u), rtol=1e-3)


def test_phase_autocorrelation():
    f = numeric("phi_osc", ["tau", "beta_o", "f_o"], {"phi_osc": "wiener"})
    tau = np.array([1e-5, 1e-3])
    assert_allclose(f(tau, 100.0, 40.0), oscillator.phase_autocorrelation(tau, 100.0, 40.0), rtol=1e-12)


def test_echo_interference_and_the_guard_rule():
    env = derive_environment(requirements_from_mapping(RAIL))
    taps, powers = env.taps
    f = numeric("I_echo", ["tau", "p", "M", "T_g", "T_u"])
    for guard, t_u in ((0.3e-6, 16.7e-6), (1.2e-6, 4.2e-6), (3e-6, 66.7e-6)):
        useful, interference = delay.echo_interference(taps, powers, guard, t_u)
        assert_allclose(f(taps, powers, taps.size, guard, t_u), interference / useful, rtol=1e-12)
    g = numeric("echo_guard", ["tau", "p", "M", "T_cp", "T_allow", "T_u"])
    assert_allclose(g(taps, powers, taps.size, 1.5e-6, 0.4e-6, 16.7e-6),
                    link.guard_echo(taps, powers, 1.5e-6, 16.7e-6, 0.4e-6), rtol=1e-12)


def test_sinr_and_its_terms_for_a_preset():
    """SINR_eff = (1 - E)/(E + I_tot) with I_tot from the declared terms, against link.evaluate (LTE in the rail
    channel, every term present)."""
    req = requirements_from_mapping(RAIL)
    result = api.check(req, preset="lte-normal", with_limits=False)
    env, d = result.environment, result.design
    taps, powers = env.taps
    terms = result.sinr_terms
    e_est = terms["estimation"] / (1 + terms["estimation"])
    i_tot = numeric("I_tot", ["SNR", "tau", "p", "M", "T_cp", "T_u", "f_D", "P_los", "df", "beta_o", "f_o"],
                    {"rho_sc": "tracked", "rho_los": "tracked", "I_PN": "wiener"})
    value = i_tot(10 ** 1.5, taps, powers, taps.size, d.cp_s, d.useful_symbol_s, env.max_doppler_hz, env.los_fraction,
                  d.subcarrier_spacing_hz, 50.0, 95.0)
    assert_allclose(value, sum(v for k, v in terms.items() if k != "estimation"), rtol=1e-9)
    sinr = sp.lambdify([NS["E_est"], NS["I_tot"]], symbolic.parse_definition(DEFINED["sinr_eff"].expression))
    assert_allclose(10 * np.log10(sinr(e_est, value)), result.effective_sinr_db, atol=1e-9)


@pytest.mark.parametrize("d_f, d_t, shift", [(6, 4, 3), (12, 1, 3), (8, 3, 4), (4, 7, 0)])
def test_aliasing_scale(d_f, d_t, shift):
    expr = symbolic.expanded("alias_scale")
    values = {NS["D_f"]: d_f, NS["D_t"]: d_t, NS["s_p"]: shift, NS["df"]: 15e3, NS["T_s"]: 71.4e-6,
              NS["tau_max"]: 2.5e-6, NS["f_D"]: 500.0}
    declared = float(expr.subs(values).doit())
    assert_allclose(declared, pilots.aliasing_scale(d_f, d_t, shift, 15e3, 71.4e-6, 2.5e-6, 500.0), rtol=1e-12)


def test_efficiency_table_and_its_floor():
    table = mcs.DEFAULT_TABLE
    order = sorted(range(len(table)), key=lambda i: table[i].required_sinr_db)
    gamma = np.array([0.0] + [table[i].required_sinr_db for i in order])  # 1-based, as declared
    ebar = np.maximum.accumulate(np.array([0.0] + [table[i].efficiency for i in order]))
    f = numeric("efficiency", ["S", "ebar", "gamma", "n_mcs"], {"efficiency": "table"})
    for s_db in (-3.0, 1.1722, 1.2, 9.0, 18.35, 30.0):
        assert_allclose(f(10 ** (s_db / 10), ebar, gamma, len(table)), mcs.spectral_efficiency(s_db), atol=1e-12)
    sinr_min = sp.lambdify([NS["gamma"]], symbolic.parse_definition(DEFINED["sinr_min"].expression))
    req = requirements_from_mapping(RAIL)
    assert_allclose(sinr_min(gamma), link.minimum_sinr(req), rtol=1e-12)


def test_efficiency_shannon():
    f = numeric("efficiency", ["S", "Gamma", "eta_max"], {"efficiency": "shannon"})
    for s_db in (0.0, 10.0, 40.0):
        assert_allclose(f(10 ** (s_db / 10), 10 ** 0.3, mcs.DEFAULT_MAX_EFFICIENCY),
                        mcs.shannon_gap_efficiency(s_db, 3.0), rtol=1e-12)


@pytest.mark.parametrize("mask, period, d_f, shared", [(17, 7, 6, True), (1 << 2 | 1 << 11, 14, 2, False), (1, 1, 12, True)])
def test_pilot_fraction(mask, period, d_f, shared):
    f = numeric("rho_pil", ["m_p", "P_p", "D_f"], {"rho_pil": "shared" if shared else "alone"})
    m_p = int(arrangement.popcount(mask))
    assert_allclose(f(m_p, period, d_f), arrangement.pilot_fraction(mask, period, d_f, shared), rtol=1e-15)


def test_claimed_bandwidth_and_clock():
    req = requirements_from_mapping({**RAIL, "radio": {**RAIL["radio"], "sample_clock": "30.72 MHz"}})
    for preset in ("lte-normal", "nr-mu1"):
        design = api.design_from(preset=preset, bandwidth_hz=10e6)
        ns = link.namespace(DesignArrays.from_designs([design]), derive_environment(req), req)
        w = sp.lambdify([NS["B_ch"], NS["occ"], NS["N_u"], NS["df"]],
                        symbolic.parse_definition(DEFINED["W_occ"].expression))
        assert_allclose(w(design.channel_bandwidth_hz, 0.9, design.used_subcarriers, design.subcarrier_spacing_hz),
                        ns["W_occ"][0], rtol=1e-15)
    clock = sp.lambdify([NS["f_s"], NS["f_clk"]], symbolic.expanded("clock_mismatch"))
    for rate in (15.36e6, 30.72e6 * 3, 14e6):
        assert_allclose(clock(rate, 30.72e6), link.clock_mismatch(req)(rate), atol=1e-12)


def test_coherence_time_and_bandwidth_are_the_declared_roots():
    """re rho_D(f_D T_c) = rho_c and |sum p_m exp(-j 2 pi B_c tau_m)| = rho_c at the environment's values."""
    env = derive_environment(requirements_from_mapping({**RAIL, "environment": {
        "carrier": "1.9 GHz", "max_speed": "300 km/h", "profile": "ETU"}}))
    rho = numeric("rho_D", ["x", "P_los"], {"rho_sc": "classical", "rho_los": "classical"})
    assert_allclose(rho(env.max_doppler_hz * env.coherence_time_s, 0.0).real, 0.5, atol=1e-9)
    taps, powers = env.taps
    assert_allclose(abs(np.sum(powers * np.exp(-2j * np.pi * env.coherence_bandwidth_hz * taps))), 0.5, atol=1e-9)


# --- the estimation error from R_H alone ---------------------------------------------------------------------


def _declared_error(design, env, req, sigma2):
    """E_est by the declared formulas: e_d = 1 - r^H (R + sigma2 I)^-1 r for every data element of the span,
    the covariances from R_H (every usable pilot of the whole band, the schedule of the arrangement)."""
    cases = {"rho_sc": env.doppler_spectrum, "rho_los": env.doppler_spectrum, "phi_osc": "wiener"}
    r_h = numeric("R_H", ["dn", "dk", "T_s", "f_D", "P_los", "p_s", "tau", "M", "df", "beta_o", "f_o"], cases)
    taps, powers = env.taps
    scattered = np.array(powers, float)
    scattered[int(np.argmin(taps))] -= env.los_fraction
    plan = arrangement.schedule(design.pilot_scope, design.pilot_symbols, design.pilot_period, design.pilot_shift,
                                design.pilot_freq_spacing, design.symbols_per_slot, design.pilot_data_shared,
                                req.rules.estimation_lookahead, req.rules.estimation_memory,
                                estimation.MAX_PILOT_SYMBOLS)
    used = design.used_subcarriers

    def corr(dn, dk):
        return r_h(dn, dk, design.symbol_s, env.max_doppler_hz, env.los_fraction, scattered, taps, taps.size,
                   design.subcarrier_spacing_hz, req.radio.oscillator_linewidth_hz, req.radio.frequency_error_hz)

    total, count = 0.0, 0
    for target in plan.targets:
        pilot_n = np.concatenate([np.full(len(range(o, used, design.pilot_freq_spacing)), lag)
                                  for lag, o in zip(target.pilot_lags, target.pilot_offsets)])
        pilot_k = np.concatenate([np.arange(o, used, design.pilot_freq_spacing) for o in target.pilot_offsets])
        data_k = np.array([k for k in range(used) if target.data_offset < 0
                           or (k - target.data_offset) % design.pilot_freq_spacing != 0])
        big = corr(pilot_n[:, None] - pilot_n[None, :], pilot_k[:, None] - pilot_k[None, :])
        small = corr(pilot_n[:, None] - 0 * data_k[None, :], pilot_k[:, None] - data_k[None, :])
        solved = np.linalg.solve(big + sigma2 * np.eye(big.shape[0]), small)
        total += np.sum(1 - np.real(np.sum(np.conj(small) * solved, axis=0)))
        count += data_k.size
    return total / count


@pytest.mark.parametrize("preset", ["nr-mu1", "lte-normal"])
def test_estimation_error_from_the_declared_correlation(preset):
    """The rail channel (tracked line of sight, EVA), Wiener phase noise and a frequency offset: the declared
    E_est against link.evaluate's, 0.2 dB (the model drops band eigenmodes below 1e-6 of the power)."""
    req = requirements_from_mapping(RAIL)
    result = api.check(req, preset=preset, with_limits=False)
    terms = result.sinr_terms
    i_tot = sum(v for k, v in terms.items() if k != "estimation")
    boost = 10 ** (result.design.pilot_boost_db / 10)
    declared = _declared_error(result.design, result.environment, req, i_tot / boost)
    model = terms["estimation"] / (1 + terms["estimation"])
    assert abs(10 * math.log10(declared / model)) <= 0.2


def test_differential_detection_from_the_declared_correlation():
    req = requirements_from_mapping({**RAIL, "radio": {"bandwidth": "1.536 MHz", "snr": "15 dB"},
                                     "environment": {"carrier": "225 MHz", "max_speed": "200 km/h",
                                                     "profile": "ITU-VehA"}})
    result = api.check(req, preset="dab-mode1", with_limits=False)
    env, d = result.environment, result.design
    terms = result.sinr_terms
    i_tot = sum(v for k, v in terms.items() if k != "estimation")
    cases = {"rho_sc": env.doppler_spectrum, "rho_los": env.doppler_spectrum, "phi_osc": "wiener",
             "E_est": "differential"}
    taps, powers = env.taps
    f = numeric("E_est", ["T_s", "f_D", "P_los", "p_s", "tau", "M", "df", "beta_o", "f_o", "sigma2"], cases)
    declared = f(d.symbol_s, env.max_doppler_hz, env.los_fraction, np.asarray(powers), taps, taps.size,
                 d.subcarrier_spacing_hz, 0.0, 0.0, i_tot)
    assert_allclose(declared, terms["estimation"] / (1 + terms["estimation"]), rtol=1e-9)
