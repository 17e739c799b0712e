"""Pictures (numerology.plots): the numbers behind them, and the files written."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from numerology import api, candidates, plots
from numerology.design import Design, DesignArrays
from numerology.environment import derive_environment
from numerology.errors import InputError
from numerology.limits import stretch_limits
from numerology.requirements import requirements_from_mapping

EXAMPLES = Path(__file__).resolve().parent.parent / "requirements_examples"
KMH = 1000 / 3600  # m/s
C_MPS = 299_792_458.0
SMALL_GRID = (12, 10)  # enough to draw; the limits are refined by bisection, not read off the grid

#: Invented requirement: two equal rays 1 us apart (the map's delay axis is the max excess delay);
#: the quasi-static rule is relaxed and the Doppler ICI limit raised so that the pilot lattice sets
#: the speed limit; the strict guard rule (coverage) and a pilot oversampling of 2 give closed forms.
REQ = {
    "environment": {"carrier": "2 GHz", "max_speed": "100 km/h", "max_excess_delay": "1 us"},
    "radio": {"bandwidth": "10 MHz", "snr": "25 dB"},
    "rules": {"quasi_static_factor": 1.0, "max_doppler_ici": "-20 dB", "guard_rule": "coverage",
              "pilot_oversampling": 2.0},
}
#: Rectangular pilot lattice (shift 0): every 4th subcarrier, every 7th symbol.
RECT = Design("rect", 15e3, 1024, 72, 600, 4, 7, 0, 14)


@pytest.fixture(scope="module")
def req():
    return requirements_from_mapping(REQ)


def test_speed_edge_of_a_rectangular_lattice_is_the_sampling_limit(req):
    """A rectangular lattice aliases in Doppler when f_D > 1 / (2 rho D_t T_s) (Hoeher, Kaiser & Robertson,
    ICASSP 1997), rho the pilot oversampling (2 here). The map's speed edge at
    the required delay is that f_D times the wavelength, drawn by pilot_aliasing, and agrees with the
    stretch limit of numerology.limits (Brent's method to 1e-6 relative, hence rtol 2e-6)."""
    rho = req.rules.pilot_oversampling
    f_d = 1.0 / (2 * rho * RECT.pilot_time_spacing * RECT.symbol_s)
    hand_mps = f_d * C_MPS / req.environment.carrier_hz  # 75.03 m/s, 270 km/h
    speed, rule = plots.speed_limits(req, RECT, [1e-6], np.linspace(0.0, 150.0, 31))
    assert rule[0] == "pilot_aliasing"
    assert_allclose(speed[0], hand_mps, rtol=1e-8)  # bisection to 2^-32 of a 5 m/s grid step
    stretch = stretch_limits(DesignArrays.from_designs([RECT]), req, derive_environment(req))["max_speed_mps"]
    assert stretch.rule == "pilot_aliasing"
    assert_allclose(speed[0], stretch.value, rtol=2e-6)


def test_delay_edge_is_the_cyclic_prefix_less_the_allowance(req):
    """The CP covers tau_max + T_allow (common practice; ETSI EN 300 744 sect. 4.4): with 72 samples at
    15.36 MHz (4.6875 us) and the default allowance of 4 samples at 10 MHz (0.4 us) the edge is 4.2875 us."""
    delay, rule = plots.delay_limits(req, RECT, [100 * KMH], np.linspace(1e-7, 8e-6, 41))
    assert rule[0] == "cp_covers_delay"
    assert_allclose(delay[0], 72 / 15.36e6 - 4 / 10e6, rtol=1e-8)
    stretch = stretch_limits(DesignArrays.from_designs([RECT]), req, derive_environment(req))["max_excess_delay_s"]
    assert_allclose(delay[0], stretch.value, rtol=2e-6)


def test_delay_edge_by_energy_is_where_the_echo_meets_its_budget(req):
    """Two equal rays, the second d beyond the prefix less the allowance: its weight beyond the guard is
    2u - u^2 with u = d / T_u (EBU TR 024 sect. 2.4), so I/U = x / (2 - x) with x = 2u - u^2; at the budget b
    x = 2b / (1 + b) and u = 1 - sqrt(1 - x) (calc). The edge is T_cp - T_allow + u T_u."""
    energy = requirements_from_mapping({**REQ, "rules": {**REQ["rules"], "guard_rule": "energy"}})
    b = 10 ** (energy.rules.max_echo_interference_db / 10)
    x = 2 * b / (1 + b)
    edge = 72 / 15.36e6 - 4 / 10e6 + (1 - math.sqrt(1 - x)) * RECT.useful_symbol_s
    delay, rule = plots.delay_limits(energy, RECT, [100 * KMH], np.linspace(1e-7, 12e-6, 41))
    assert rule[0] == "guard_interval"
    assert_allclose(delay[0], edge, rtol=1e-8)


def test_operating_map_region_and_boundary_rules(req):
    omap = plots.operating_map(req, RECT, SMALL_GRID)
    assert omap.axis.key == "max_excess_delay"
    assert omap.boundary_rules == ("cp_covers_delay", "pilot_aliasing")
    v_lim, v_rule, d_lim, d_rule = omap.limits_at_requirement
    assert (v_rule, d_rule) == ("pilot_aliasing", "cp_covers_delay")
    # every grid point below both limits passes, every point beyond one of them fails
    below = (omap.speeds_mps[None, :] < v_lim) & (omap.delays_s[:, None] < d_lim)
    assert np.array_equal(omap.passed, below)


def test_spacing_window_panel_agrees_with_the_window(req):
    """At the required speed the panel's band is candidates.spacing_window (both refined to about 1e-10)."""
    speed = derive_environment(req).speed_mps
    smap = plots.spacing_map(req, [0.0, speed], np.geomspace(1e3, 2e6, 60))
    window = candidates.spacing_window(derive_environment(req), req)
    assert_allclose(smap.lower_hz[1], window.min_hz, rtol=1e-8)
    assert_allclose(smap.upper_hz[1], window.max_hz, rtol=1e-8)
    assert (smap.lower_rule[1], smap.upper_rule[1]) == (window.lower_bound_rule, window.upper_bound_rule)
    assert smap.lower_hz[0] < smap.lower_hz[1]  # at rest no Doppler bound: a wider window


def test_edge_segments_name_the_rule_that_draws_each_piece():
    """Two invented rules on a grid: a fails beyond x = 2, b beyond y = 1; the edge is x = 2 (below y = 1),
    drawn by a, and y = 1 (left of x = 2), drawn by b."""
    pytest.importorskip("contourpy")
    x = np.linspace(0.0, 4.0, 41)
    y = np.linspace(0.0, 2.0, 21)
    normalised = {"a": np.broadcast_to(1.0 - x[None, :] / 2, (21, 41)), "b": np.broadcast_to(1.0 - y[:, None], (21, 41))}
    pieces = plots.edge_segments(x, y, normalised)
    assert {rule for rule, _ in pieces} == {"a", "b"}
    for rule, vertices in pieces:
        inner = vertices[1:-1] if len(vertices) > 2 else vertices  # the shared corner vertex belongs to both
        if rule == "a":
            assert_allclose(inner[:, 0], 2.0, atol=1e-12)
            assert np.all(inner[:, 1] <= 1.0 + 1e-12)
        else:
            assert_allclose(inner[:, 1], 1.0, atol=1e-12)
            assert np.all(inner[:, 0] <= 2.0 + 1e-12)


@pytest.mark.parametrize("suffix, magic", [(".png", b"\x89PNG\r\n\x1a\n"), (".svg", b"<?xml")])
def test_files_are_written(tmp_path, req, suffix, magic):
    pytest.importorskip("matplotlib")
    check = api.check(req, RECT, with_limits=False)
    path = tmp_path / f"map{suffix}"
    plots.write_plot(path, req, check=check, grid=SMALL_GRID)
    data = path.read_bytes()
    assert data.startswith(magic) and len(data) > 10_000
    if suffix == ".svg":
        assert b"<svg" in data[:2000] and b"pilot_aliasing" in data  # the legend names the rules
    assert [p.name for p in tmp_path.iterdir()] == [path.name]  # written atomically: nothing else left


def test_infeasible_or_no_design_still_draws_the_window(tmp_path, req):
    pytest.importorskip("matplotlib")
    path = tmp_path / "window.png"
    plots.write_plot(path, req, grid=SMALL_GRID)
    assert path.read_bytes().startswith(b"\x89PNG")


@pytest.mark.parametrize("name, message", [
    ("map.pdf", "expected a file name ending in .png or .svg"),
    ("missing-folder/map.png", "does not exist"),
])
def test_bad_path_writes_nothing(tmp_path, req, name, message):
    pytest.importorskip("matplotlib")
    with pytest.raises(InputError, match=message) as caught:
        plots.write_plot(tmp_path / name, req, grid=SMALL_GRID)
    assert caught.value.place == "--plot"
    assert list(tmp_path.iterdir()) == []


def test_missing_matplotlib_is_an_input_error(tmp_path, req, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)  # import matplotlib now raises ImportError
    with pytest.raises(InputError) as caught:
        plots.write_plot(tmp_path / "map.png", req)
    assert str(caught.value) == "--plot: needs matplotlib: pip install 'numerology[plot]'"
    assert list(tmp_path.iterdir()) == []


def test_profile_requirement_maps_the_rms_spread():
    """With a profile the delay axis is the rms spread that scales it (3GPP TR 38.901 sect. 7.7.3 scaling)."""
    req = api.load(EXAMPLES / "harbour_crane.toml")
    axis = plots.delay_axis(req)
    assert axis.key == "rms_delay_spread"
    assert_allclose(axis.required_s, derive_environment(req).rms_delay_spread_s, rtol=1e-12)
    assert math.isclose(axis.site_values([1e-7])["rms_delay_spread_s"][0], 1e-7)


def test_the_map_computes_the_estimation_error_exactly_where_the_picture_depends_on_it():
    """The operating map interpolates the estimation error between exact grid lines and computes it exactly
    next to the edge of the region (plots.COARSE, EDGE_ROUNDS): the region, and every margin next to its edge,
    are those of the exact error at every point. Invented: the rail channel at 22 dB, a 14 Mbit/s goal, whose
    throughput edge (set by the SINR, so by the estimation error) crosses the map."""
    req = requirements_from_mapping({
        "environment": {"carrier": "1.9 GHz", "max_speed": "300 km/h", "profile": "EVA", "doppler_spectrum": "tracked",
                        "k_factor": "9 dB"},
        "radio": {"bandwidth": "10 MHz", "snr": "22 dB", "frequency_error": "0.05 ppm"},
        "goals": {"throughput": "14 Mbit/s"}})
    design = api.design_from(preset="nr-mu1", bandwidth_hz=10e6)
    axis = plots.delay_axis(req)
    speeds = np.linspace(0.0, 1500 * KMH, 24)
    delays = np.linspace(axis.required_s * 8e-3, axis.required_s * 8, 16)
    mapped = plots._grid_margins(req, design, axis, speeds, delays)
    exact = plots._evaluate(req, design, speeds[None, :], axis, delays[:, None])
    worst = {k: np.min(np.stack(list(m.values())), axis=0) for k, m in (("mapped", mapped), ("exact", exact))}
    passed = worst["exact"] >= 0
    assert np.array_equal(worst["mapped"] >= 0, passed) and 0 < passed.mean() < 1
    _, rules = plots._edges_on_grid(speeds, delays, exact)
    assert "throughput" in set(rules.tolist())
    edge = np.zeros_like(passed)
    edge[:, 1:] |= passed[:, 1:] != passed[:, :-1]
    edge[:, :-1] |= passed[:, 1:] != passed[:, :-1]
    edge[1:, :] |= passed[1:, :] != passed[:-1, :]
    edge[:-1, :] |= passed[1:, :] != passed[:-1, :]
    for name in exact:
        assert_allclose(mapped[name][edge], exact[name][edge], rtol=1e-9, atol=1e-12)
