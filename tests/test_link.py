"""The link-quality model (numerology.link) and `check` against outside references and invariants."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from numerology import api, doppler, link, oscillator
from numerology.design import Design, DesignArrays
from numerology.environment import derive_environment
from numerology.presets import get_preset
from numerology.requirements import requirements_from_mapping

HZ, S = 1.0, 1.0
US = 1e-6 * S


def _req(**over):
    """A small in-memory requirement set (invented values for tests)."""
    mapping = {
        "environment": {"carrier": "2 GHz", "max_speed": "120 km/h", "max_excess_delay": "3 us",
                        "rms_delay_spread": "0.8 us"},
        "radio": {"bandwidth": "20 MHz", "snr": "20 dB", "frequency_error": "50 Hz", "oscillator_linewidth": "20 Hz"},
        "goals": {"throughput": "20 Mbit/s"},
    }
    for dotted, value in over.items():
        section, key = dotted.split("__")
        mapping.setdefault(section, {})[key] = value
    return requirements_from_mapping(mapping)


def _eval(req, design, **env_over):
    env = derive_environment(req, **env_over)
    return link.evaluate(DesignArrays.from_designs([design]), env, req), env


LTE = get_preset("lte-20-normal").design


def test_doppler_term_is_the_exact_integral():
    """The Doppler rule uses doppler_ici at f_D T_u (Russell & Stueber, IEEE VTC 1995), not its small-argument
    form; the SINR term is the same ICI relative to the useful power, I / (1 - I)."""
    req = _req()
    ev, env = _eval(req, LTE)
    x = env.max_doppler_hz * LTE.useful_symbol_s
    ici = doppler.doppler_ici(env.max_doppler_hz, LTE.useful_symbol_s)
    assert_allclose(ev.demand["doppler_ici"][0], ici, rtol=1e-12)
    assert_allclose(ev.terms["doppler"][0], ici / (1 - ici), rtol=1e-12)
    # small-argument check (2 pi x)^2/24 within 1 % at x = 0.015 (Russell & Stuber, Proc. IEEE VTC 1995)
    assert_allclose(ici, (2 * math.pi * x) ** 2 / 24, rtol=1e-2)
    # never above the Li & Cimini bound (2 pi x)^2 / 12 (IEEE Trans. Commun. 49(3), 2001; from memory)
    assert ici <= (2 * math.pi * x) ** 2 / 12


def test_oscillator_terms_match_small_offset_formulas():
    """CFO ICI ~ (pi e)^2/3 (Moose 1994); Wiener ICI after CPE ~ pi beta T_u / 3 (calc)."""
    req = _req()
    ev, _ = _eval(req, LTE)
    e = 50.0 / LTE.subcarrier_spacing_hz
    cfo, pn = ev.terms["frequency_offset"][0], ev.terms["phase_noise"][0]
    assert_allclose(cfo / (1 + cfo), (math.pi * e) ** 2 / 3, rtol=1e-3)  # terms are I / (1 - I)
    assert_allclose(pn / (1 + pn), math.pi * 20.0 * LTE.useful_symbol_s / 3, rtol=2e-3)


def test_effective_sinr_with_the_estimate_power_loss():
    """SINR_eff = (1 - E) / (E + N + I), E the estimation error (unit channel power).

    Common practice: with an LMMSE estimate h_hat = h - e, e uncorrelated with
    h_hat, the detector keeps 1 - E of the channel power as signal and sees E
    as noise; the noise and interference terms add as powers.
    """
    ev, _ = _eval(_req(), LTE)
    others = sum(v[0] for k, v in ev.terms.items() if k != "estimation")
    error = ev.terms["estimation"][0] / (1 + ev.terms["estimation"][0])  # the term is E / (1 - E)
    assert 0 < error < 0.1
    assert_allclose(ev.sinr_eff[0], (1 - error) / (error + others), rtol=1e-12)
    assert ev.terms["noise"][0] == pytest.approx(0.01, rel=1e-12)


def test_echo_term_for_a_cp_covering_all_echoes_is_zero():
    ev, _ = _eval(_req(environment__max_excess_delay="4 us"), LTE)
    assert ev.terms["echo"][0] == 0.0
    ev, _ = _eval(_req(environment__max_excess_delay="8 us"), LTE)
    assert ev.terms["echo"][0] > 0


def test_rate_follows_data_resource_elements_and_efficiency():
    ev, _ = _eval(_req(), LTE)
    assert_allclose(ev.rate_bps[0], LTE.data_re_per_second * ev.efficiency[0], rtol=1e-12)


def test_no_rate_above_shannon_capacity():
    """Net throughput never exceeds B_occ log2(1 + SNR) (Shannon 1948)."""
    for name in ("lte-20-normal", "nr-mu1", "wifi-20", "dvbt-8k-g4"):
        design = get_preset(name).design
        req = _req(radio__snr="30 dB", radio__bandwidth="100 MHz")
        ev, _ = _eval(req, design)
        assert ev.rate_bps[0] <= design.occupied_bandwidth_hz * math.log2(1 + 1000.0)


def _scaled_mapping(k):
    """Every time multiplied by k and every frequency divided by k (invented scenario)."""
    return {
        "environment": {"carrier": "2 GHz", "max_doppler": f"{150.0 / k!r} Hz",
                        "max_excess_delay": f"{3.0 * k!r} us", "rms_delay_spread": f"{0.8 * k!r} us"},
        "radio": {"bandwidth": f"{20.0 / k!r} MHz", "snr": "20 dB", "frequency_error": f"{50.0 / k!r} Hz",
                  "oscillator_linewidth": f"{20.0 / k!r} Hz"},
        "rules": {"cp_allowance": f"{0.2 * k!r} us"},
    }


@settings(max_examples=25, deadline=None)
@given(st.floats(min_value=0.05, max_value=20.0))
def test_time_frequency_scaling_leaves_every_db_term_unchanged(k):
    """Scaling every time by k and every frequency by 1/k leaves each impairment (in dB) unchanged."""
    base = requirements_from_mapping(_scaled_mapping(1.0))
    scaled = requirements_from_mapping(_scaled_mapping(k))
    design = LTE
    design_k = dataclasses.replace(design, subcarrier_spacing_hz=design.subcarrier_spacing_hz / k, sample_rate_hz=None,
                                   cp_extra_period_s=design.cp_extra_period_s * k)
    ev0, _ = _eval(base, design)
    ev1, _ = _eval(scaled, design_k)
    for name in link.TERMS:
        a, b = ev0.terms[name][0], ev1.terms[name][0]
        if a == 0:
            assert b == 0
        else:
            assert_allclose(10 * np.log10(b), 10 * np.log10(a), atol=1e-6)


@settings(max_examples=20, deadline=None)
@given(st.floats(min_value=0.0, max_value=150.0), st.floats(min_value=0.0, max_value=150.0))
def test_faster_never_raises_a_margin(v1, v2):
    """Monotonicity: a faster vehicle never raises any rule's margin (f_D T_u stays below 0.5 here)."""
    slow, fast = sorted((v1, v2))
    req = _req()
    ev_slow, _ = _eval(req, LTE, speed_mps=slow)
    ev_fast, _ = _eval(req, LTE, speed_mps=fast)
    for rule in ev_slow.rules:
        assert ev_fast.margin[rule.name][0] <= ev_slow.margin[rule.name][0] + 1e-9, rule.name


@settings(max_examples=20, deadline=None)
@given(st.integers(min_value=0, max_value=400), st.integers(min_value=0, max_value=400))
def test_longer_cp_never_lowers_the_echo_margin(cp1, cp2):
    short, long_ = sorted((cp1, cp2))
    req = _req(environment__max_excess_delay="6 us")
    a, _ = _eval(req, dataclasses.replace(LTE, cp_samples=short))
    b, _ = _eval(req, dataclasses.replace(LTE, cp_samples=long_))
    assert b.terms["echo"][0] <= a.terms["echo"][0] + 1e-15
    assert b.margin["guard_interval"][0] >= a.margin["guard_interval"][0]


def test_vectorised_equals_one_by_one():
    """Evaluating many designs at once gives the same numbers as one at a time."""
    req = _req()
    env = derive_environment(req)
    designs = [get_preset(n).design for n in ("lte-20-normal", "nr-mu0", "nr-mu1", "nr-mu2")]
    together = link.evaluate(DesignArrays.from_designs(designs), env, req)
    for i, d in enumerate(designs):
        alone = link.evaluate(DesignArrays.from_designs([d]), env, req)
        assert_allclose(together.sinr_eff[i], alone.sinr_eff[0], rtol=1e-12)
        for rule in alone.rules:
            assert_allclose(together.margin[rule.name][i], alone.margin[rule.name][0], rtol=1e-12)


def test_check_binding_rule_is_the_smallest_normalised_margin():
    result = api.check(_req(), LTE, with_limits=False)
    graded = [r for r in result.rules]
    assert result.binding_rule.normalised == min(r.normalised for r in graded)
    assert result.passed == all(r.passed for r in result.rules)


def _margin_at(req, key, value, rule_name):
    if key == "max_speed_mps":
        env, r = derive_environment(req, speed_mps=value), req
    elif key == "max_excess_delay_s":
        env, r = derive_environment(req, max_excess_delay_s=value), req
    else:
        r = req.replace("radio.snr", value)
        env = derive_environment(r)
    ev = link.evaluate(DesignArrays.from_designs([LTE]), env, r)
    return ev.margin[rule_name][0]


@pytest.mark.parametrize("key", ["max_speed_mps", "max_excess_delay_s", "min_snr_db"])
def test_stretch_limits_sit_on_a_rule_boundary(key):
    """Just inside each stretch limit the named rule passes, just beyond it fails (root to 1e-6 relative).

    Margins that step (the throughput of a modulation-and-coding table) are
    discontinuous, so the test brackets the limit instead of asking for a zero.
    """
    req = _req(goals__throughput="10 Mbit/s")
    result = api.check(req, LTE)
    limit = result.limits[key]
    assert limit.rule is not None and math.isfinite(limit.value)
    if key == "min_snr_db":
        inside, beyond = limit.value + 1e-4, limit.value - 1e-4
    else:
        inside, beyond = limit.value * (1 - 1e-5), limit.value * (1 + 1e-5)
    assert _margin_at(req, key, inside, limit.rule) >= -1e-9
    assert _margin_at(req, key, beyond, limit.rule) < 0


def test_design_with_pilots_everywhere_is_rejected():
    with pytest.raises(Exception):
        Design("all pilots", 15e3, 2048, 144, 1200, 1, 1, 0, 14)


def test_wiener_small_linewidth_against_pollet():
    """Pollet et al. 1995 (from memory): D = 11/(6 ln 10) * 4 pi beta T_u * Es/N0 dB; beta T_u = 1e-3 at 20 dB -> 1.0005 dB."""
    assert_allclose(oscillator.wiener_degradation_db(1e-3 / 66.7e-6, 66.7e-6, 20.0), 1.0005, atol=1e-3)


def test_every_preset_checks_against_every_shipped_example():
    """`check` answers every shipped example with every preset (issue: done when)."""
    from pathlib import Path

    from numerology.presets import PRESETS
    from numerology.requirements import load_requirements

    examples = sorted((Path(__file__).resolve().parent.parent / "requirements_examples").glob("*.toml"))
    for path in examples:
        req = load_requirements(path)
        env = derive_environment(req)
        designs = DesignArrays.from_designs([p.design for p in PRESETS.values()])
        evaluation = link.evaluate(designs, env, req)
        assert evaluation.sinr_eff.shape == (len(PRESETS),)
        assert np.all(np.isfinite(evaluation.rate_bps))


def test_distinct_rows_groups_identical_rows_exactly():
    """Rows are grouped by value: equal rows share an index, different rows never do, NaN rows included."""
    from numerology.grouping import distinct_rows

    rng = np.random.default_rng(3)
    base = rng.uniform(size=(5, 4))
    picks = rng.integers(0, 5, 200)
    rows = base[picks]
    index, first = distinct_rows(rows)
    assert np.array_equal(rows[first][index], rows)
    assert len(first) == len(np.unique(picks))
    nan_rows = np.array([[1.0, np.nan], [1.0, np.nan], [2.0, 0.0]])
    index, first = distinct_rows(nan_rows)  # NaN != NaN: compared as bytes instead
    assert index[0] == index[1] != index[2]
