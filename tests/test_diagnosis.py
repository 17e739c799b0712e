"""The diagnosis of infeasible requests tells one story: the spacing account, the conflict, the relaxations.

The requests are invented scenarios (a UHF single-frequency network, an acoustic modem, a campus network);
each relaxation is checked the way a user would apply it: written into the requirement file as shown and
solved again from the command line.
"""

from __future__ import annotations

import contextlib
import io
import json
import tomllib

import pytest
from numpy.testing import assert_allclose

from conftest import EXAMPLES, toml_text
from numerology import api
from numerology.cli import main
from numerology.environment import derive_environment
from numerology.spacing import spacing_account

kHz = 1e3
us = 1e-6

#: 700 MHz campus network: a 22 us echo and a 50 Hz oscillator linewidth. The oscillator needs a wide spacing,
#: the echo a narrow one: an empty window whose bounds cross.
CAMPUS = """
[environment]
carrier = "700 MHz"
max_speed = "30 km/h"
max_excess_delay = "22 us"
[radio]
bandwidth = "10 MHz"
snr = "20 dB"
oscillator_linewidth = "50 Hz"
[goals]
throughput = "5 Mbit/s"
"""

#: A UHF single-frequency network at 650 MHz: a 180 us echo from a neighbouring transmitter at 150 km/h. The
#: window is open, but the cellular family 15 kHz x 2^mu has no spacing in it.
SFN = """
[environment]
carrier = "650 MHz"
max_speed = "150 km/h"
max_excess_delay = "180 us"
[radio]
bandwidth = "8 MHz"
snr = "22 dB"
[goals]
throughput = "6 Mbit/s"
max_overhead = 0.4
[rules]
quasi_static_factor = 2.0
max_doppler_ici = "-20 dB"
[search]
spacing_family = "scalable"
"""

#: An acoustic modem at 12 kHz with 8 ms echoes: a window of tens of hertz, far below the cellular family.
ACOUSTIC = """
[environment]
carrier = "12 kHz"
propagation_speed = "1500 m/s"
max_speed = "0.05 m/s"
max_excess_delay = "8 ms"
[radio]
bandwidth = "5 kHz"
snr = "18 dB"
[goals]
throughput = "1 kbit/s"
max_latency = "4 s"
max_overhead = 0.5
[search]
spacing_family = "scalable"
"""

#: The acoustic modem faster (0.2 m/s): the window closes, and once a key opens it again the cellular family
#: still has nothing in it, so two changes are needed.
ACOUSTIC_TWO = ACOUSTIC.replace('max_speed = "0.05 m/s"', 'max_speed = "0.2 m/s"')


def _solve(path, *extra):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main(["solve", str(path), "--json", *extra])
    assert err.getvalue() == ""
    return status, json.loads(out.getvalue())


@pytest.fixture(scope="module")
def solved(tmp_path_factory):
    """(path, exit status, JSON body) of each invented request."""
    folder = tmp_path_factory.mktemp("diagnosis")
    out = {}
    for name, text in (("campus", CAMPUS), ("sfn", SFN), ("acoustic", ACOUSTIC), ("acoustic_two", ACOUSTIC_TWO)):
        path = folder / f"{name}.toml"
        path.write_text(text)
        out[name] = (path, *_solve(path))
    return out


def _applied(path, settings, target):
    """The requirement file with the settings written as a user pastes them (a key left out when None)."""
    data = tomllib.loads(path.read_text())
    for setting in settings:
        section, name = setting["key"].split(".")
        table = data.setdefault(section, {})
        if setting["toml_value"] is None:
            table.pop(name, None)
        else:
            table[name] = setting["toml_value"]
    target.write_text(toml_text(data))
    return target


def _settings(relaxation):
    return [relaxation, *relaxation["also"]]


def _assert_each_relaxation_is_feasible(path, body, tmp_path):
    assert body["relaxations"] or body["relaxation_pairs"]
    for i, relaxation in enumerate(body["relaxations"]):
        edited = _applied(path, _settings(relaxation), tmp_path / f"single{i}.toml")
        status, answer = _solve(edited, "--top", "1")
        assert (status, answer["feasible"]) == (0, True), relaxation
    for i, pair in enumerate(body["relaxation_pairs"]):
        edited = _applied(path, _settings(pair[0]) + _settings(pair[1]), tmp_path / f"pair{i}.toml")
        status, answer = _solve(edited, "--top", "1")
        assert (status, answer["feasible"]) == (0, True), pair


# --- the campus: bounds that cross ------------------------------------------------------------------------


def test_crossing_bounds_name_both_rules_with_their_values(solved):
    _, status, body = solved["campus"]
    assert status == 1 and body["feasible"] is False
    assert body["conflict"] == ["oscillator_ici", "flat_fading"]
    window = body["window"]
    assert window["empty"] is True
    assert (window["lower_bound_rule"], window["upper_bound_rule"]) == ("oscillator_ici", "flat_fading")
    assert window["lower_bound_hz"] > window["upper_bound_hz"]  # the bounds cross
    # Two equal rays 22 us apart: the frequency correlation is |cos(pi df tau)|, 0.5 at df = 1/(3 tau)
    # (coherence bandwidth at correlation 0.5 as in Rappaport, Wireless Communications 2nd ed., sect. 5.4.2;
    # the two-ray correlation from memory): flat fading allows at most 15.15 kHz.
    assert_allclose(window["upper_bound_hz"], 1 / (3 * 22 * us), rtol=1e-8)
    diagnosis = body["diagnosis"]
    assert diagnosis["cause"] == "rules"
    assert diagnosis["statement"] == "oscillator_ici needs >= 16.52 kHz; flat_fading allows <= 15.15 kHz"
    assert [b["rule"] for b in diagnosis["bounds"]] == ["oscillator_ici", "flat_fading"]


def test_crossing_bounds_are_relaxed_from_either_side(solved):
    _, _, body = solved["campus"]
    keys = {r["key"] for r in body["relaxations"]}
    # the oscillator side and the echo side are both offered
    assert {"radio.oscillator_linewidth", "rules.max_oscillator_ici"} <= keys
    assert {"environment.max_excess_delay", "rules.flat_fading_factor"} <= keys
    linewidth = next(r for r in body["relaxations"] if r["key"] == "radio.oscillator_linewidth")
    assert linewidth["direction"] == "at most" and linewidth["value_si"] < 50.0
    assert linewidth["current"] == "50 Hz"


def test_campus_relaxations_each_give_a_feasible_solve(solved, tmp_path):
    path, _, body = solved["campus"]
    _assert_each_relaxation_is_feasible(path, body, tmp_path)


def test_nearest_linewidth_is_near(solved, tmp_path):
    """3 % above the suggested linewidth the request is infeasible again: the value is the nearest."""
    path, _, body = solved["campus"]
    value = next(r for r in body["relaxations"] if r["key"] == "radio.oscillator_linewidth")["value_si"]
    setting = {"key": "radio.oscillator_linewidth", "toml_value": None}
    status, _ = _solve(_applied(path, [dict(setting, toml_value=f"{value * 1.03:.6g} Hz")], tmp_path / "a.toml"),
                       "--top", "1")
    assert status == 1


# --- the single-frequency network: an open window, an empty family -----------------------------------------


def test_open_window_without_a_family_member_names_the_family(solved):
    _, status, body = solved["sfn"]
    assert status == 1
    window = body["window"]
    assert window["empty"] is False
    assert window["lower_bound_rule"] != window["upper_bound_rule"]
    assert window["upper_bound_rule"] == "flat_fading"
    # two equal rays 180 us apart: at most 1/(3 tau) = 1.852 kHz (as above)
    assert_allclose(window["max_subcarrier_spacing_hz"], 1 / (3 * 180 * us), rtol=1e-8)
    assert body["diagnosis"]["cause"] == "candidates"
    assert body["conflict"] == ["search.spacing_family"]
    assert "937.5 Hz below, 1.875 kHz above" in body["diagnosis"]["statement"]
    first = body["relaxations"][0]
    assert first["key"].startswith("search.")  # the candidate space's own change comes first
    ranged = next(r for r in body["relaxations"] if r["key"] == "search.spacing_family" and r["toml_value"] == "range")
    bounds = {s["key"]: s["value_si"] for s in ranged["also"]}
    assert window["min_subcarrier_spacing_hz"] <= bounds["search.spacing_min"] < bounds["search.spacing_max"] \
        <= window["max_subcarrier_spacing_hz"]


def test_sfn_relaxations_each_give_a_feasible_solve(solved, tmp_path):
    path, _, body = solved["sfn"]
    _assert_each_relaxation_is_feasible(path, body, tmp_path)


def test_the_automatic_family_solves_the_sfn_directly(solved, tmp_path):
    """Without the explicit cellular family the default (auto) follows the window."""
    path, _, _ = solved["sfn"]
    edited = _applied(path, [{"key": "search.spacing_family", "toml_value": None}], tmp_path / "auto.toml")
    status, body = _solve(edited, "--top", "1")
    assert status == 0
    spacing = body["designs"][0]["design"]["subcarrier_spacing_hz"]
    assert body["window"]["min_subcarrier_spacing_hz"] <= spacing <= body["window"]["max_subcarrier_spacing_hz"]


# --- the acoustic modem ---------------------------------------------------------------------------------------


def test_acoustic_window_far_below_the_family(solved, tmp_path):
    path, status, body = solved["acoustic"]
    assert status == 1 and body["diagnosis"]["cause"] == "candidates"
    assert body["window"]["max_subcarrier_spacing_hz"] < 100.0
    keys = [r["key"] for r in body["relaxations"]]
    assert "search.spacing_exponents" in keys  # 15 kHz x 2^-9 = 29.3 Hz lies in the window
    _assert_each_relaxation_is_feasible(path, body, tmp_path)


def test_two_changes_when_no_single_one_does(solved, tmp_path):
    path, status, body = solved["acoustic_two"]
    assert status == 1
    assert body["relaxations"] == [] and body["relaxation_pairs"]
    assert body["conflict"] == ["quasi_static", "flat_fading"]
    _assert_each_relaxation_is_feasible(path, body, tmp_path)


# --- one account everywhere ----------------------------------------------------------------------------------


def test_terminal_note_and_json_tell_the_same_story(solved, tmp_path):
    path, _, body = solved["campus"]
    note = tmp_path / "note.md"
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["solve", str(path), "--markdown", str(note)]) == 1
    text = " ".join(out.getvalue().split())
    statement = body["diagnosis"]["statement"]
    assert f"Conflict: {statement}" in text
    assert f"No subcarrier spacing fits: {statement}." in text
    markdown = note.read_text(encoding="utf-8")
    assert statement in markdown
    for relaxation in body["relaxations"]:
        assert f"`{relaxation['key']}` {relaxation['direction']} `{relaxation['value']}`" in markdown


def test_window_bounds_name_different_rules_on_every_shipped_example():
    for path in sorted(EXAMPLES.glob("*.toml")):
        req = api.load(path)
        account = spacing_account(derive_environment(req), req)
        window = account.window
        if window.lower_bound_rule is not None and window.upper_bound_rule is not None \
                and not any(b.nowhere for b in account.conflict):
            assert window.lower_bound_rule != window.upper_bound_rule, path.name


def test_the_infeasible_plot_names_the_crossing_rules(solved, tmp_path):
    matplotlib = pytest.importorskip("matplotlib")
    from numerology.plots import plot_bytes

    path, _, _ = solved["campus"]
    req = api.load(path)
    with matplotlib.rc_context({"svg.fonttype": "none"}):  # text as text, not glyph outlines
        svg = plot_bytes(req, "svg", solution=api.solve(req, with_limits=False)).decode()
    assert "oscillator_ici needs &gt;= 16.52 kHz" in svg and "flat_fading allows &lt;= 15.15 kHz" in svg
