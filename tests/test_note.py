"""The design note a reviewer audits (numerology.note), and what-ifs carried into the note and the picture.

The central test reads the note of the shipped rail example the way a reviewer would, from the Markdown
alone: the design table, the profile's taps, the settings in force, the symbols' values and the
modulation-and-coding table; it recomputes rules with plain numpy and checks the note's own numbers.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from numerology import cli

from conftest import note_section as section, note_sections as sections, note_tables as tables

EXAMPLES = Path(__file__).resolve().parent.parent / "requirements_examples"
RAIL = EXAMPLES / "rail_corridor.toml"
PREFIX = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6, "G": 1e9}


# --- reading a note as a reviewer ----------------------------------------------------------------------------


def quantity(text: str) -> float:
    """'16.6667 us' -> 1.66667e-05; '-25 dB' -> -25.0; '0.888184' -> 0.888184 (the note's number formats)."""
    text = text.strip("*` ")
    match = re.match(r"^([-+]?[0-9.]+(?:e[-+]?[0-9]+)?)\s*([pnumkMG]?)(Hz|s|bit/s)?\b", text)
    assert match, text
    number, prefix, unit = match.groups()
    return float(number) * (PREFIX[prefix] if unit else 1.0)


def decibels(text: str) -> float:
    match = re.search(r"([-+]?[0-9.]+) dB", text)
    assert match, text
    return float(match.group(1))


def j0(x):
    """Bessel J0 by its integral (1/pi) int_0^pi cos(x sin t) dt (Abramowitz & Stegun 9.1.18), plain numpy."""
    t = np.linspace(0.0, np.pi, 2001)
    values = np.cos(np.multiply.outer(x, np.sin(t)))
    return np.trapezoid(values, t, axis=-1) / np.pi


@pytest.fixture(scope="module")
def rail_note(tmp_path_factory):
    path = tmp_path_factory.mktemp("note") / "rail.md"
    assert cli.main(["solve", str(RAIL), "--markdown", str(path)]) == 0
    return path.read_text(encoding="utf-8")


def _design(note):
    rows = {r["parameter"]: r["value"] for r in tables(section(note, "4."))[0]}
    spacing = quantity(rows["subcarrier spacing"])
    fft, rate = rows["FFT size / sample rate"].split(" / ")
    cp_samples = int(rows["cyclic prefix"].split()[0])
    return spacing, int(fft), quantity(rate), cp_samples


def _taps(note):
    rows = tables(section(note, "Power-delay profile"))[0]
    delays = np.array([quantity(r["delay tau_m"]) for r in rows])
    powers = np.array([float(r["power p_m"]) for r in rows])
    return delays, powers


def _settings(note):
    return {r["setting"].strip("`"): r["value in force"] for r in tables(section(note, "5. Settings in force"))[0]}


def _symbols(note):
    return {r["name"].strip("`"): r["value"] for r in tables(section(note, "7. Definitions"))[-1]}


def _rule(note, name):
    """(demand text, margin in the heading) of a rule in section 6."""
    body = sections(note)
    heading = next(h for h in body if h.startswith(f"`{name}`"))
    numbers = re.search(r"capacity (.+?), demand (.+?)\. Source", body[heading])
    return numbers.group(1), numbers.group(2), heading


def test_rail_note_guard_rule_recomputed_from_the_note(rail_note):
    """Echoes beyond the prefix less the allowance, weighted as in EBU TR 024 sect. 2.4 (useful part
    (1 - (tau - T_g)/T_u)^2 of an echo tau > T_g), from the taps, the design and the allowance the note prints;
    the result must be the rule's demand printed in section 6 and the value in the symbols table."""
    spacing, fft, rate, cp_samples = _design(rail_note)
    delays, powers = _taps(rail_note)
    settings = _settings(rail_note)
    assert settings["rules.guard_rule"] == "energy"
    allowance = quantity(settings["rules.cp_allowance"])
    budget_db = decibels(settings["rules.max_echo_interference"])
    t_u, t_cp = fft / rate, cp_samples / rate
    assert_allclose(t_u, 1 / spacing, rtol=1e-9)
    guard = max(t_cp - allowance, 0.0)
    late = np.clip((delays - guard) / t_u, 0.0, 1.0)
    useful = np.where(delays <= guard, 1.0, (1 - late) ** 2)
    echo_db = 10 * np.log10(np.sum((1 - useful) * powers) / np.sum(useful * powers))
    capacity, demand, heading = _rule(rail_note, "guard_interval")
    assert abs(echo_db - decibels(demand)) <= 0.05
    assert abs(decibels(capacity) - budget_db) <= 0.05
    assert abs((budget_db - echo_db) - decibels(heading)) <= 0.1
    assert abs(echo_db - decibels(_symbols(rail_note)["echo_guard"])) <= 0.002


def test_rail_note_doppler_rule_recomputed_from_the_note(rail_note):
    """Doppler ICI = 1 - int_{-1}^{1} (1 - |u|) Re R(u T_u) du (Russell & Stueber, IEEE VTC 1995, for any
    wide-sense stationary spectrum), R of the tracked Rician spectrum: (P e^{j 2 pi x} + (1 - P) J0(2 pi x))
    e^{-j 2 pi P x}, x = f_D tau (Clarke 1968; the receiver removes the mean shift P f_D). f_D, P and the
    spectrum from the note; the integral by the trapezoid rule in plain numpy."""
    spacing, fft, rate, _ = _design(rail_note)
    symbols = _symbols(rail_note)
    assert "`tracked`" in section(rail_note, "1. Requirements")
    f_d, p = quantity(symbols["f_D"]), float(symbols["P_los"])
    b = f_d * fft / rate
    u = np.linspace(-1.0, 1.0, 4001)
    x = b * u
    r = (p * np.exp(2j * np.pi * x) + (1 - p) * j0(2 * np.pi * x)) * np.exp(-2j * np.pi * p * x)
    ici_db = 10 * np.log10(1 - np.trapezoid((1 - np.abs(u)) * r.real, u))
    capacity, demand, heading = _rule(rail_note, "doppler_ici")
    assert abs(ici_db - decibels(demand)) <= 0.05
    assert abs((decibels(capacity) - ici_db) - decibels(heading)) <= 0.1


def test_rail_note_rate_and_overhead_recomputed_from_the_note(rail_note):
    """Net rate = data resource elements per symbol x bits of the best table entry the effective SINR reaches
    / mean symbol duration; overhead = 1 - (1 - prefix)(1 - pilots - reserved). All from the note's tables."""
    spacing, fft, rate, cp_samples = _design(rail_note)
    budget = section(rail_note, "8.")
    sinr_db = decibels([r for r in tables(budget)[0] if "effective SINR" in r["term (relative to the useful signal)"]][0]["dB"])
    mcs = tables(section(rail_note, "Modulation and coding table"))[0]
    thresholds = np.array([float(r["gamma_j (dB)"]) for r in mcs])
    best = np.array([float(r["ebar_j"]) for r in mcs])
    bits = best[np.flatnonzero(thresholds <= sinr_db)[-1]]
    split = {r["overhead"].strip("*"): float(r["fraction"].strip("*")) for r in tables(budget)[1]}
    symbols = _symbols(rail_note)
    used, mean_symbol = float(symbols["N_u"]), quantity(symbols["T_m"])
    data = used * (1 - split["pilots (of the used resource elements)"]
                   - split["reserved subcarriers (of the used resource elements)"])
    assert_allclose(data * bits / mean_symbol, quantity(symbols["rate"]), rtol=1e-5)
    cp = 1 - (fft / rate) / mean_symbol
    assert_allclose(cp, split["cyclic prefix (of the time)"], atol=2e-6)  # 6 digits of the mean symbol
    total = 1 - (1 - cp) * (1 - split["pilots (of the used resource elements)"]
                            - split["reserved subcarriers (of the used resource elements)"])
    assert_allclose(total, split["total"], atol=2e-6)


def test_rail_note_defines_every_function_it_writes(rail_note):
    """Every function the rules and definitions print in LaTeX has its own definition in section 7."""
    definitions = section(rail_note, "7. Definitions")
    for tex in (r"I_{\mathrm{D}}\left(b\right) =", r"I_{\mathrm{osc}}\left(\Delta f\right) =",
                r"I_{\mathrm{PN}}\left(T_u\right) =", r"I_{\mathrm{FO}}\left(\Delta f\right) =",
                r"g_{\mathrm{alias}}\left(", r"\mathrm{eff}\left(S\right) =", r"E_{\mathrm{est}} =",
                r"R_H\left(\Delta n, \Delta k\right) =", r"I_{\mathrm{echo}}\left(T_g\right) =",
                r"I_{\mathrm{guard}} =", r"\mathrm{SINR}_{\mathrm{eff}} ="):
        assert tex in definitions, tex


def test_rail_note_settings_name_their_sources(rail_note):
    rows = tables(section(rail_note, "5. Settings in force"))[0]
    for row in rows:
        assert row["source"] not in ("", "-"), row
    assert {"rules.cp_allowance", "rules.pilot_oversampling", "rules.max_doppler_ici", "rules.delay_threshold",
            "rules.estimation_lookahead"} <= {r["setting"].strip("`") for r in rows}


def test_rail_note_lists_only_cited_documents(rail_note):
    """No padding: every document under Sources is named in the note's text, and no 'Rule source' lines."""
    body, sources = rail_note.split("## Sources", 1)
    assert "Rule source" not in rail_note and "Source: goal." not in rail_note
    from numerology.note import BIBLIOGRAPHY

    listed = [line[2:] for line in sources.split("## Cautions")[0].splitlines() if line.startswith("- ")]
    assert listed
    for reference in listed:
        tag = next(tag for tag, text in BIBLIOGRAPHY if text == reference)
        assert tag in body


def test_rail_note_estimation_allowance(rail_note):
    allowance = section(rail_note, "The receiver's estimation allowance")
    assert "N_d = " in allowance and "pilots used" in allowance


def test_check_what_if_speed_is_in_the_note(tmp_path):
    """check --speed "350 km/h" --markdown: the requirements show 350 km/h beside the file's 300 km/h, the
    environment is that of 350 km/h, and the note names the preset it checks."""
    note = tmp_path / "n.md"
    assert cli.main(["check", str(RAIL), "--preset", "nr-mu1", "--speed", "350 km/h", "--markdown", str(note)]) in (0, 1)
    text = note.read_text(encoding="utf-8")
    rows = {r["key"]: r for r in tables(section(text, "1. Requirements"))[0]}
    assert rows["environment.max_speed"]["in the file"] == "`300 km/h`"
    assert "350 km/h" in rows["environment.max_speed"]["analysed"]
    assert "350 km/h" in section(text, "2. Derived channel environment")
    assert "Design checked: preset nr-mu1" in text and "Chosen design" not in text

