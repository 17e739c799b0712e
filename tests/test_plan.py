"""Mode plans (numerology.plan): exact against enumeration, every site re-checked through ``check``.

The small deployments here are invented; the checks are internal (brute force over every set of
modes of the same candidate space, and the public ``check`` path at each site's own values), so
no outside source is involved except where named.
"""

from __future__ import annotations

import itertools
import json
import re
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from numerology import api, render_json, render_terminal, solver
from numerology import plan as plan_module
from numerology.cli import main
from numerology.feasibility import plan_space
from numerology.plan import plan
from numerology.requirements import requirements_from_mapping
from numerology.sweep import load_sites, sites_from_values

EXAMPLES = Path(__file__).resolve().parent.parent / "requirements_examples"
PORT = EXAMPLES / "port_deployment.toml"
PORT_SITES = EXAMPLES / "port_sites.csv"
KMH = 1000 / 3600  # m/s
RTOL = 1e-9  # the same model on the same values: round-off only

#: A small invented deployment with a narrow search space (few candidates: brute force stays cheap).
SMALL = {
    "environment": {"carrier": "3.5 GHz", "max_speed": "30 km/h", "max_excess_delay": "2 us",
                    "rms_delay_spread": "400 ns"},
    "radio": {"bandwidth": "10 MHz", "snr": "20 dB", "oscillator_linewidth": "10 Hz"},
    "goals": {"throughput": "6 Mbit/s", "max_overhead": 0.10},
    "rules": {"max_doppler_ici": "-30 dB"},
    "search": {"spacing_exponents": [0, 1], "max_pilot_freq_spacing": 12, "max_pilot_time_spacing": 6,
               "symbols_per_slot": [14], "pilot_patterns": ["rectangular"], "pilot_scopes": ["slot"],
               "pilot_symbols_per_slot": [1, 2]},
}
#: (name, speed km/h, max excess delay us, rms ns, SNR dB): long echoes at walking pace, fast and short.
SMALL_SITES = [
    ("stack 1", 15, 5.0, 1000, 18), ("stack 2", 10, 4.0, 800, 20), ("stack 3", 20, 5.5, 1100, 19),
    ("road 1", 120, 1.0, 200, 20), ("road 2", 100, 1.2, 250, 21), ("hall", 5, 1.5, 300, 24),
]


def _small(extra_sites=()):
    req = requirements_from_mapping(SMALL)
    rows = list(SMALL_SITES) + list(extra_sites)
    names, speed, delay, rms, snr = zip(*rows)
    sites = sites_from_values(req, names=list(names), max_speed_mps=np.array(speed) * KMH,
                              max_excess_delay_s=np.array(delay) * 1e-6, rms_delay_spread_s=np.array(rms) * 1e-9,
                              snr_db=np.array(snr, dtype=float))
    assert sites.problems == ()
    return req, sites


@pytest.fixture(scope="module")
def small():
    req, sites = _small()
    return req, sites, plan(req, sites)


@pytest.fixture(scope="module")
def every_set():
    """The small case's candidate space with every row evaluated exactly (for the enumeration below)."""
    req, sites = _small()
    m = plan_space(req, sites).matrix
    m.make_exact(np.arange(m.size))
    return m


def _brute_force(m, objective_figure, kind="min"):
    """Every set of modes of the plan's candidate space, exactly evaluated: (fewest modes, best objective).

    The objective is the weakest figure over the sites (``kind`` "min") or the total over the sites ("sum").
    """
    passed = m.passed.T  # channels x candidates
    figure = (m.margin if objective_figure == "margin" else m.rate_bps).T
    weight = m.channels.weight
    servable = passed.any(axis=1)
    useful = np.flatnonzero(passed.any(axis=0))
    for size in range(1, useful.size + 1):
        best = None
        for chosen in itertools.combinations(useful, size):
            sub = passed[:, chosen]
            if not np.array_equal(sub.any(axis=1), servable):
                continue
            serving = np.max(np.where(sub, figure[:, chosen], -np.inf), axis=1)[servable]
            value = np.min(serving) if kind == "min" else np.sum(weight[servable] * serving)
            best = value if best is None else max(best, value)
        if best is not None:
            return size, best, int(weight[servable].sum()), m.size
    return 0, None, 0, m.size


@pytest.mark.parametrize("objective, figure, kind", [("weakest-margin", "margin", "min"),
                                                     ("weakest-throughput", "rate", "min"),
                                                     ("total-throughput", "rate", "sum")])
def test_plan_equals_brute_force_over_every_set_of_modes(every_set, objective, figure, kind):
    req, sites = _small()
    fewest, best, served, candidates = _brute_force(every_set, figure, kind)
    assert candidates <= 150  # the enumeration above stays small
    result = plan(req, sites, objective=objective)
    assert fewest == 2  # the case is built to need two modes: long echoes and fast vehicles
    assert len(result.modes) == fewest
    assert result.figures.served == served == sites.size
    got = {"margin": result.figures.weakest_margin, "rate": result.figures.min_throughput_bps}[figure]
    if kind == "sum":
        got = result.figures.total_throughput_bps
    assert_allclose(got, best, rtol=RTOL)


def test_every_site_passes_check_with_its_mode(small):
    """Each site's mode, re-evaluated by the public check path on the requirement set edited to the site."""
    req, sites, result = small
    for i in range(sites.size):
        mode = result.modes[result.site_mode[i]]
        check = api.check(sites.requirements_for(req, i), mode.design, with_limits=False)
        assert check.passed, sites.names[i]
        assert_allclose(check.net_throughput_bps, result.site_throughput_bps[i], rtol=RTOL)
        assert_allclose(min(r.normalised for r in check.rules), result.site_margin[i], rtol=RTOL, atol=1e-12)
        assert check.binding_rule.name == result.site_rule[i]


def test_one_mode_equals_solve_on_the_worst_case_when_one_serves_all():
    """The worst site is the harshest in every value: one mode serves all, and it is solve's answer there."""
    req = requirements_from_mapping({**SMALL, "goals": {"throughput": "6 Mbit/s", "max_overhead": 0.3}})
    sites = sites_from_values(req, names=["worst", "b", "c"], max_speed_mps=np.array([60.0, 30.0, 10.0]) * KMH,
                              max_excess_delay_s=[3e-6, 2e-6, 1e-6], rms_delay_spread_s=[600e-9, 400e-9, 200e-9],
                              snr_db=[16.0, 20.0, 22.0])
    result = plan(req, sites, modes=1, objective="weakest-throughput")
    assert result.served_all
    worst = sites.requirements_for(req, 0)
    solved = api.solve(worst, objective="throughput", top=1, explain=False, with_limits=False)
    best = solved.designs[0].check
    found = solver.search(worst, objective="throughput", top=1)
    mode = result.modes[0].design
    # solve's numerology, and the best throughput its search proves (solve lists, of the designs within its
    # tie tolerance of that best, the one with the larger margin; the plan takes the best value itself)
    for key in ("subcarrier_spacing_hz", "fft_size", "cp_samples", "used_subcarriers"):
        assert getattr(mode, key) == getattr(best.design, key), key
    assert_allclose(result.figures.min_throughput_bps, found.best_key, rtol=RTOL)
    assert best.net_throughput_bps >= found.best_key - solver.tie_tolerance("throughput", found.best_key)


def test_unserved_sites_are_listed_with_their_binding_rule():
    """A site whose SNR is far too low: no design serves it, and the report names the rule that fails."""
    req, sites = _small(extra_sites=[("deep shadow", 10, 1.0, 200, -5)])
    result = plan(req, sites)
    assert not result.served_all
    assert [u.site for u in result.unserved] == ["deep shadow"]
    unserved = result.unserved[0]
    assert not unserved.servable
    assert unserved.rule in ("link_closes", "throughput")
    assert unserved.margin < 0
    check = api.check(sites.requirements_for(req, sites.size - 1), result.modes[0].design, with_limits=False)
    assert not check.passed
    assert len(result.modes) == 2  # the other sites are served as before


def test_with_fewer_modes_than_needed_the_rest_are_listed(small):
    req, sites, full = small
    result = plan(req, sites, modes=1)
    assert len(result.modes) == 1
    assert 0 < result.figures.served < sites.size
    assert all(u.servable and u.reason == "another mode would serve it" for u in result.unserved)
    assert result.fewest_for_all == 2
    assert result.more is not None and result.more.served == sites.size
    assert full.single.served == result.figures.served  # the best single design, by the same machinery


def test_more_modes_allowed_than_needed_uses_no_more_than_the_objective_needs(small):
    """--modes is a ceiling: a third mode that neither serves more sites nor raises the weakest margin is left out."""
    req, sites, full = small
    result = plan(req, sites, modes=3)
    assert result.figures.served == sites.size
    assert result.figures.weakest_margin >= full.figures.weakest_margin
    # a third mode only where it raises the weakest margin above the two-mode plan's
    assert len(result.modes) == 2 or result.figures.weakest_margin > full.figures.weakest_margin


@pytest.mark.parametrize("objective", ["total-throughput", "weakest-margin"])
def test_one_mode_more_is_never_worse_than_the_plan(monkeypatch, objective):
    """A programme stopped by its time limit can come back with a worse plan of K + 1 modes than the K-mode
    plan (seen on 10^4 invented port sites, total throughput); the plan itself is a plan of at most K + 1
    modes, so one mode more is reported no worse (here the K + 1 stage is made to return one mode)."""
    req, sites = _small()
    original = plan_module._Planner.plan

    def stopped_early(self, k):
        first, chosen = original(self, k)
        if k == 3:  # the two-mode plan's one more
            return first, plan_module._Choice(chosen.rows[:1], chosen.covered, "time limit", 0.5)
        return first, chosen

    monkeypatch.setattr(plan_module._Planner, "plan", stopped_early)
    result = plan(req, sites, objective=objective)
    assert len(result.modes) == 2 and result.more is not None
    assert result.more.served == result.figures.served
    assert result.more.total_throughput_bps >= result.figures.total_throughput_bps * (1 - 1e-12)
    assert result.more.weakest_margin >= result.figures.weakest_margin - 1e-12
    assert ("up to 3 modes: 2 used", result.more) in render_terminal.plan_comparison(result)


def test_plan_prints_a_one_line_summary(small):
    _, sites, result = small
    text = str(result)
    assert re.fullmatch(r"2 modes serve 6 of 6 sites: mode A \((\d) sites?\), mode B \((\d) sites?\)", text), text
    assert sum(int(n) for n in re.findall(r"\((\d) site", text)) == sites.size


def test_plan_json_is_deterministic_and_carries_its_schema(small):
    req, sites, result = small
    again = plan(req, sites)
    first = render_json.document("numerology.plan", result.to_json())
    assert first == render_json.document("numerology.plan", again.to_json())
    data = json.loads(first)
    assert data["schema"] == "numerology.plan" and data["schema_version"] == "1.0"
    assert [m["name"] for m in data["modes"]] == ["mode A", "mode B"]


def test_shipped_port_example_needs_two_or_three_modes(capsys):
    import jsonschema

    status = main(["plan", str(PORT), "--sites", str(PORT_SITES), "--json"])
    data = json.loads(capsys.readouterr().out)
    schema = Path(__file__).resolve().parent.parent / "numerology" / "schemas" / "plan.schema.json"
    jsonschema.validate(data, json.loads(schema.read_text(encoding="utf-8")))
    assert status == 0
    assert data["served_all"] and 2 <= len(data["modes"]) <= 3
    assert data["comparison"]["single_design"]["sites_served"] < data["comparison"]["plan"]["sites_served"]
    assert len(load_sites(PORT_SITES, api.load(PORT)).names) == 200


def test_plan_terminal_report_and_note(tmp_path, capsys, small):
    req, sites, result = small
    from numerology import render_terminal
    from numerology.note import render_plan_note

    render_terminal.plan(render_terminal.console(), result)
    out = capsys.readouterr().out
    assert "2 modes serve all 6 of 6 sites" in out
    assert "hardest site" in out and "kHz" in out and "Caution" in out
    note = render_plan_note(req, result)
    assert "## 2. Mode plan" in note and "best single design" in note and "licensed engineer" in note


def test_plan_plot_is_written(tmp_path, small):
    pytest.importorskip("matplotlib")
    from numerology.plan_plot import write_plan_plot

    req, _, result = small
    target = tmp_path / "plan.png"
    write_plan_plot(target, req, result, grid=(12, 10))
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("argv, words", [
    (["--modes", "0"], "--modes"),
    (["--objective", "fastest"], "invalid choice"),
    (["--plot", "plan.gif"], "--plot"),
])
def test_plan_usage_errors(capsys, argv, words):
    status = main(["plan", str(PORT), "--sites", str(PORT_SITES)] + argv)
    err = capsys.readouterr().err
    assert status == 2
    assert words in err and err.count("\n") == 1


def test_plan_exit_status_is_one_when_a_site_is_unserved(capsys, tmp_path):
    """A site far beyond the rest (a track-test sled at 600 km/h, invented) is listed, with exit status 1."""
    sites = tmp_path / "sites.csv"
    rows = (EXAMPLES / "harbour_sites.csv").read_text(encoding="utf-8").rstrip("\n").splitlines()
    sites.write_text("\n".join(rows + ["test sled,600,250,,,8"]) + "\n", encoding="utf-8")
    status = main(["plan", str(EXAMPLES / "harbour_crane.toml"), "--sites", str(sites)])
    out = capsys.readouterr().out
    assert status == 1
    assert "Sites no mode serves" in out and "test sled" in out


def test_a_request_no_design_meets_lists_every_site(capsys, tmp_path):
    """The drone example asks too much everywhere: no mode, every site listed, the note still written."""
    note = tmp_path / "plan.md"
    status = main(["plan", str(EXAMPLES / "drone_video.toml"), "--sites", str(EXAMPLES / "harbour_sites.csv"),
                   "--markdown", str(note)])
    out = capsys.readouterr().out
    assert status == 1
    assert "0 modes serve 0 of" in out and "no design can" in out
    assert "Sites no mode serves" in note.read_text(encoding="utf-8")
