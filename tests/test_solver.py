"""The solver (numerology.solver, api.solve) against closed forms, brute force and published numerologies."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from numerology import api, candidates, solver
from numerology.design import DesignArrays
from numerology.environment import derive_environment
from numerology.requirements import load_requirements, requirements_from_mapping

EXAMPLES = Path(__file__).resolve().parent.parent / "requirements_examples"
KHZ = 1e3
US = 1e-6


def _small(**over):
    """A small, fast search space (invented scenario)."""
    mapping = {
        "environment": {"carrier": "3.5 GHz", "max_speed": "90 km/h", "max_excess_delay": "2 us",
                        "rms_delay_spread": "0.5 us"},
        "radio": {"bandwidth": "5 MHz", "snr": "18 dB", "frequency_error": "100 Hz", "oscillator_linewidth": "20 Hz"},
        "goals": {"throughput": "5 Mbit/s", "max_overhead": 0.35},
        "search": {"spacing_exponents": [-1, 3], "min_fft_size": 64, "max_fft_size": 2048,
                   "max_pilot_freq_spacing": 8, "max_pilot_time_spacing": 6, "symbols_per_slot": [7]},
    }
    for dotted, value in over.items():
        section, key = dotted.split("__")
        mapping.setdefault(section, {})[key] = value
    return requirements_from_mapping(mapping)


def _feasible_set(grid, mask):
    rows = np.stack([grid.spacing_hz, grid.fft_size, grid.cp_samples, grid.used, grid.pilot_f, grid.pilot_t,
                     grid.pilot_s, grid.slot, grid.scope, grid.symbols, grid.period], axis=1)[mask]
    return {tuple(float(x) for x in row) for row in rows}


@pytest.mark.parametrize("over", [{}, {"goals__throughput": "9 Mbit/s"}, {"environment__max_speed": "300 km/h"},
                                  {"rules__pilot_oversampling": 1.2}])
def test_pruned_search_agrees_with_brute_force(over):
    """Every design the brute force finds feasible, the pruned search finds too, and no other."""
    req = _small(**over)
    env = derive_environment(req)
    grid, passed = solver.brute_force(req, env)
    found = solver.search(req, env, top=10**9)
    brute = _feasible_set(grid, passed)
    if not found.feasible:
        assert not brute
        return
    designs = found.ranked.designs
    pruned = {(float(designs.subcarrier_spacing_hz[i]), float(designs.fft_size[i]), float(designs.cp_samples[i]),
               float(designs.used_subcarriers[i]), float(designs.pilot_freq_spacing[i]),
               float(designs.pilot_time_spacing[i]), float(designs.pilot_shift[i]), float(designs.symbols_per_slot[i]),
               float(designs.pilot_scope[i]), float(designs.pilot_symbols[i]), float(designs.pilot_period[i]))
              for i in range(designs.fft_size.size)}
    assert found.stats.feasible_found == len(brute)
    assert pruned <= brute
    assert len(pruned) == min(len(brute), found.ranked.keys.size)


def test_every_returned_design_passes_check():
    req = load_requirements(EXAMPLES / "harbour_crane.toml")
    result = api.solve(req, top=5, explain=False, with_limits=False)
    assert result.feasible
    for ranked in result.designs:
        again = api.check(req, ranked.check.design, with_limits=False)
        assert again.passed
        assert_allclose(again.net_throughput_bps, ranked.check.net_throughput_bps, rtol=1e-12)


def test_window_edges_match_closed_forms():
    """Where quasi_static bounds below and flat_fading bounds above, the edges are the sympy-solved boundaries:
    T_s = T_u + T_cp <= T_c / F_qs with T_cp = tau + T_allow gives df >= F_qs / (T_c - F_qs (tau + T_allow));
    df <= B_c / F_ff."""
    req = requirements_from_mapping({
        "environment": {"carrier": "2 GHz", "max_speed": "100 km/h", "max_excess_delay": "40 us",
                        "rms_delay_spread": "15 us"},
        "radio": {"bandwidth": "5 MHz", "snr": "20 dB"},
        "goals": {"max_overhead": 0.99},
        "rules": {"max_doppler_ici": "-10 dB", "cp_allowance": "1 us", "quasi_static_factor": 5.0,
                  "flat_fading_factor": 2.0, "guard_rule": "coverage"},
    })
    env = derive_environment(req)
    window = candidates.spacing_window(env, req)
    assert window.lower_bound_rule == "quasi_static"
    assert window.upper_bound_rule == "flat_fading"
    f_qs, guard = 5.0, 40 * US + 1 * US
    assert_allclose(window.min_hz, f_qs / (env.coherence_time_s - f_qs * guard), rtol=1e-8)
    assert_allclose(window.max_hz, env.coherence_bandwidth_hz / 2.0, rtol=1e-8)
    from numerology.symbolic import boundary

    (flat,) = boundary("flat_fading", "df")
    assert str(flat) == "B_c/F_ff"


def test_faster_vehicle_never_widens_the_window():
    widths = []
    for speed in ("30 km/h", "120 km/h", "250 km/h", "400 km/h"):
        req = _small(environment__max_speed=speed)
        w = candidates.spacing_window(derive_environment(req), req)
        widths.append((w.min_hz, w.max_hz))
    for (lo1, hi1), (lo2, hi2) in zip(widths, widths[1:]):
        assert lo2 >= lo1 * (1 - 1e-9) and hi2 <= hi1 * (1 + 1e-9)


@pytest.mark.parametrize("guard", ["coverage", "energy"])
def test_longer_echo_never_shortens_the_minimum_cp(guard):
    """The strict rule covers the max excess delay; the energy rule, for two equal rays (whose echo beyond a
    given prefix only grows with their distance), also never accepts a shorter prefix for a longer echo."""
    shortest = []
    for delay in ("0.5 us", "1 us", "2 us", "3 us"):
        req = _small(environment__max_excess_delay=delay, rules__guard_rule=guard,
                     environment__rms_delay_spread="0.2 us")
        if guard == "energy":
            req = req.replace("environment.rms_delay_spread", None)  # two equal rays at 0 and the delay
        env = derive_environment(req)
        grid, passed = solver.brute_force(req, env)
        cp_s = grid.cp_samples / (grid.fft_size * grid.spacing_hz)
        shortest.append(cp_s[passed].min() if passed.any() else math.inf)
    assert all(b >= a for a, b in zip(shortest, shortest[1:]))


def test_higher_throughput_goal_never_adds_designs():
    previous = None
    for goal in ("1 Mbit/s", "4 Mbit/s", "7 Mbit/s", "10 Mbit/s"):
        req = _small(goals__throughput=goal)
        grid, passed = solver.brute_force(req)
        current = _feasible_set(grid, passed)
        if previous is not None:
            assert current <= previous
        previous = current


def test_no_returned_design_exceeds_shannon_capacity():
    """Net rate <= occupied bandwidth x log2(1 + SNR) (Shannon 1948)."""
    for name in ("harbour_crane", "rail_corridor", "factory_robots"):
        req = load_requirements(EXAMPLES / f"{name}.toml")
        result = api.solve(req, explain=False, with_limits=False)
        snr = 10 ** (req.radio.snr_db / 10)
        for ranked in result.designs:
            c = ranked.check
            assert c.net_throughput_bps <= c.design.occupied_bandwidth_hz * math.log2(1 + snr)


STANDARDS = {
    # name: (requirements, published spacing Hz, published CP s, source of the assumed environment)
    "LTE 20 MHz normal CP": (
        {"environment": {"carrier": "2.6 GHz", "max_doppler": "300 Hz", "profile": "ETU"},
         "radio": {"bandwidth": "20 MHz", "snr": "20 dB", "frequency_error": "0.1 ppm", "oscillator_linewidth": "10 Hz"},
         "goals": {"max_latency": "1 ms"}},
        15e3, 4.6875 * US,
        "3GPP TS 36.211 Table 6.12-1 (15 kHz, 4.69 us); environment: the ETU300 test condition of TS 36.101 "
        "Annex B and a 1 ms subframe (from memory)"),
    "DVB-T 8k guard 1/4": (
        {"environment": {"carrier": "600 MHz", "max_doppler": "30 Hz", "max_excess_delay": "200 us",
                         "rms_delay_spread": "50 us"},
         "radio": {"bandwidth": "8 MHz", "snr": "20 dB", "frequency_error": "5 Hz"},
         "search": {"spacing_family": "range", "spacing_min": "100 Hz", "spacing_max": "20 kHz", "spacing_steps": 40,
                    "max_fft_size": 65536, "symbols_per_slot": [68]}},
        1e6 / 896, 224 * US,
        "ETSI EN 300 744 (1116 Hz, 224 us); environment: a single-frequency network with echoes to 200 us and "
        "slow mobile reception (from memory)"),
    "IEEE 802.11a 20 MHz": (
        {"environment": {"carrier": "5.2 GHz", "max_speed": "5 km/h", "profile": "ITU-IndoorB"},
         "radio": {"bandwidth": "20 MHz", "snr": "25 dB", "frequency_error": "1 ppm", "oscillator_linewidth": "300 Hz"},
         "goals": {"max_latency": "0.1 ms"},
         "search": {"spacing_family": "range", "spacing_min": "50 kHz", "spacing_max": "2 MHz", "spacing_steps": 40}},
        312.5e3, 0.8 * US,
        "IEEE Std 802.11-2016 cl. 17 (312.5 kHz, 0.8 us); environment: indoor offices at walking speed, "
        "ITU-R M.1225 Indoor B (from memory)"),
}


@pytest.mark.parametrize("name", list(STANDARDS))
def test_standards_choices_are_reproduced_within_a_factor_of_two(name):
    """In the environment a standard was designed for, the best design's spacing and CP land within 2x of its choice."""
    mapping, spacing_hz, cp_s, _source = STANDARDS[name]
    result = api.solve(requirements_from_mapping(mapping), explain=False, with_limits=False)
    assert result.feasible
    design = result.designs[0].check.design
    assert 0.5 <= design.subcarrier_spacing_hz / spacing_hz <= 2.0
    assert 0.5 <= design.cp_s / cp_s <= 2.0


def test_shipped_examples_have_the_expected_outcomes():
    """Every shipped example is answered; drone_video is infeasible on purpose, the others feasible."""
    outcomes = {}
    for path in sorted(EXAMPLES.glob("*.toml")):
        req = load_requirements(path)
        found = solver.search(req, top=1, first_feasible_only=True)
        outcomes[path.stem] = found.feasible
    assert outcomes.pop("drone_video") is False
    assert all(outcomes.values()), outcomes


def test_search_is_deterministic():
    req = _small()
    a = api.solve(req, explain=False, with_limits=False).to_json()
    b = api.solve(req, explain=False, with_limits=False).to_json()
    assert a == b


def test_relaxations_really_are_feasible():
    req = load_requirements(EXAMPLES / "drone_video.toml")
    result = api.solve(req, with_limits=False)
    assert not result.feasible
    assert result.diagnosis.relaxations
    for relaxation in result.diagnosis.relaxations:
        relaxed = req.replace(relaxation.key, relaxation.value_si)
        assert solver.search(relaxed, top=1, first_feasible_only=True).feasible, relaxation
    assert "throughput" in result.diagnosis.conflict


def test_evaluation_of_returned_designs_matches_arrays():
    req = _small()
    found = solver.search(req, top=3)
    env = derive_environment(req)
    again = api.link.evaluate(DesignArrays.from_designs([found.ranked.designs.design(0)]), env, req)
    assert_allclose(again.rate_bps[0], found.ranked.evaluation.rate_bps[0], rtol=1e-12)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 4), st.integers(0, 4), st.integers(0, 4)), min_size=1, max_size=40))
def test_pareto_front_equals_the_pairwise_definition(points):
    """The front-only comparison gives the same Pareto set as comparing every pair."""
    p = np.array(points, dtype=float)
    expected = np.array([not np.any(np.all(p >= q, axis=1) & np.any(p > q, axis=1)) for q in p])
    assert np.array_equal(solver.pareto_mask(p[:, 0], p[:, 1], p[:, 2]), expected)
