"""Regression tests for the hardening pass: one section per finding of issue 15, then the input-side
items of issue 14. Each test reproduces the finding as described and asserts the contract of the
README: exit 0, 1 or 2, one line on stderr for 2, nothing written on bad input, no input changed."""

from __future__ import annotations

import tomllib

import pytest

from conftest import EXAMPLES, toml_text
from numerology.cli import main

HARBOUR = EXAMPLES / "harbour_crane.toml"
RAIL = EXAMPLES / "rail_corridor.toml"


def run(capsys, *argv):
    """(status, stdout, stderr) of one in-process run."""
    status = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return status, out, err


def assert_one_line_error(status, out, err, *words):
    assert status == 2, err
    assert "Traceback" not in err
    assert err.startswith("numerology: ") and err.count("\n") == 1, err
    for word in words:
        assert word in err, (word, err)


def edited(path, target, **tables):
    """A copy of a requirement file with some keys replaced (None removes a key)."""
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    for section, name in (("environment", "profile_file"), ("rules", "mcs_table")):
        if name in data.get(section, {}):  # files named by the original stay found from the copy
            data[section][name] = str(path.parent / data[section][name])
    for section, values in tables.items():
        table = data.setdefault(section, {})
        for key, value in values.items():
            if value is None:
                table.pop(key, None)
            else:
                table[key] = value
    target.write_text(toml_text(data), encoding="utf-8")
    return target


# --- 6. tracebacks with exit 1 ------------------------------------------------------------------------


def test_delay_threshold_below_one_db_is_refused(capsys, tmp_path):
    """'0 dB' passed the schema and then failed inside solve (the assumed exponential profile needs a
    floor above 0 dB); the schema now asks for at least 1 dB."""
    req = edited(RAIL, tmp_path / "r.toml", environment={"profile": None, "rms_delay_spread": "1 us"},
                 rules={"delay_threshold": "0 dB"})
    assert_one_line_error(*run(capsys, "solve", req), "rules.delay_threshold", "at least 1 dB")


def test_shannon_model_without_throughput_goal_checks(capsys, tmp_path):
    """Issue 14: check with efficiency_model = "shannon" and no throughput goal raised a traceback
    (the stretch limits had no rule that varies along a stress)."""
    req = edited(RAIL, tmp_path / "r.toml", goals={"throughput": None}, rules={"efficiency_model": "shannon"})
    status, out, err = run(capsys, "check", req, "--preset", "nr-mu1")
    assert status in (0, 1) and err == ""
    assert "nr-mu1" in out


# --- 2. a decimal comma read ten times too large; 4. superscript exponents ------------------------------


@pytest.mark.parametrize("section, key, text, advice", [
    ("environment", "carrier", "3,5 GHz", "'3.5 GHz' (a decimal point"),
    ("environment", "propagation_speed", "1,5 km/s", "'1.5 km/s' (a decimal point"),
    ("environment", "carrier", "3,500 MHz", "'3500 MHz' if it groups digits, or '3.500 MHz'"),
    ("environment", "carrier", "3 500 MHz", "'3500 MHz'"),
    ("environment", "carrier", "3\u202f500 MHz", "'3500 MHz'"),
    ("environment", "carrier", "3_500 MHz", "'3500 MHz'"),
    ("environment", "carrier", "1 GHz * 10\u2079\u2079\u2079\u2079\u2079\u2079\u2079\u2079", "powers are not read"),
    ("environment", "carrier", "1 GHz * 10\u00b2", "powers are not read"),
    ("environment", "max_speed", "1 km/h * 10**2", "powers are not read"),
    ("radio", "snr", "18,5 dB", "'18.5 dB'"),
])
def test_unit_strings_that_would_be_misread_exit_2_with_advice(capsys, tmp_path, section, key, text, advice):
    req = edited(RAIL, tmp_path / "r.toml", **{section: {key: text}})
    assert_one_line_error(*run(capsys, "env", req), f"{section}.{key}", advice)


@pytest.mark.parametrize("where", ["design", "sites", "speed"])
def test_superscript_powers_are_refused_everywhere(capsys, tmp_path, where):
    """A requirement, a design, a sites header and --speed all go through one reader (units.parse_quantity)."""
    power = "1 Hz * 10\u2079\u2079\u2079\u2079\u2079\u2079\u2079\u2079"
    argv = ["check", HARBOUR, "--preset", "nr-mu1"]
    if where == "design":
        design = tmp_path / "d.toml"
        design.write_text((EXAMPLES / "designs" / "urban-small-cell-30khz.toml").read_text(encoding="utf-8")
                          .replace('"30.72 MHz"', f'"{power}"'), encoding="utf-8")
        argv = ["check", HARBOUR, "--design", design]
    elif where == "sites":
        sites = tmp_path / "s.csv"
        sites.write_text(f"site,carrier [{power}]\na,3\n", encoding="utf-8")
        argv = ["sweep", HARBOUR, "--sites", sites, "--preset", "nr-mu1"]
    else:
        argv += ["--speed", "1 km/h * 10\u2079\u2079\u2079\u2079\u2079\u2079\u2079\u2079"]
    assert_one_line_error(*run(capsys, *argv), "powers are not read")


# --- issue 14: unit strings read as engineers mean them ------------------------------------------------


def test_kmph_exits_2_saying_how_it_would_be_read(capsys, tmp_path):
    """pint reads "kmph" as kilo-(mile per hour): 40 kmph would be 64,374 km/h."""
    req = edited(HARBOUR, tmp_path / "r.toml", environment={"max_speed": "40 kmph"})
    assert_one_line_error(*run(capsys, "env", req), "environment.max_speed", "kilo-(mile per hour)", "64374 km/h",
                          'write "40 km/h"')
    req = edited(HARBOUR, tmp_path / "r.toml", environment={"max_speed": "120 kmph"})
    assert_one_line_error(*run(capsys, "env", req), 'write "120 km/h"')
    assert_one_line_error(*run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--speed", "40 kmph"),
                          "--speed", 'write "40 km/h"')


def test_an_out_of_range_value_says_how_it_was_read(capsys, tmp_path):
    req = edited(HARBOUR, tmp_path / "r.toml", environment={"max_speed": "30 km/s"})
    assert_one_line_error(*run(capsys, "env", req), "(read as 108000 km/h) is out of range")


@pytest.mark.parametrize("section, key, value, accepted", [
    ("radio", "snr", 18, True),                    # dB keys: a bare number is dB ...
    ("radio", "snr", "18", True),                  # ... quoted or not
    ("rules", "max_doppler_ici", -30, True),
    ("environment", "max_speed", 40, False),       # every other quantity needs its unit ...
    ("environment", "max_speed", "40", False),
    ("environment", "carrier", 3.7e9, False),
    ("radio", "frequency_error", "0.0001", False),  # ... a ratio of the carrier too ("0.1 ppm")
    ("radio", "frequency_error", 40, False),
])
def test_one_rule_for_bare_numbers(capsys, tmp_path, section, key, value, accepted):
    req = edited(HARBOUR, tmp_path / "r.toml", **{section: {key: value}})
    status, out, err = run(capsys, "env", req)
    if accepted:
        assert status == 0 and err == ""
    else:
        assert_one_line_error(status, out, err, f"{section}.{key}",
                              "a bare number is read only for dB keys (as dB); every other quantity needs its unit")


def test_the_bare_number_rule_is_in_the_readme():
    from numerology.units import BARE_NUMBER_RULE

    readme = (EXAMPLES.parent / "README.md").read_text(encoding="utf-8")
    assert BARE_NUMBER_RULE[0].upper() + BARE_NUMBER_RULE[1:] in readme
