"""Tests for numerology.units: quantity strings in, SI floats out; SI floats out to people.

Unit definitions (km/h, mi/h, knot, ppm) are those of the SI brochure, 9th ed. (2019) and
NIST SP 811 (2008) appendix B: 1 mi = 1609.344 m, 1 knot = 1852 m/h, 1 ppm = 1e-6.
"""

import json
import math
import time

import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from numerology import quantity_cache, units
from numerology.errors import InputError
from numerology.units import DIMENSIONS, EXAMPLES, db, engineering, parse_db, parse_quantity, speed_kmh

# The SI conversions below are exact decimal factors; parsing and scaling a float by one
# (or two) of them costs a few ulps: 1e-12 relative is far above that and far below any
# physical meaning.
RTOL_CONVERSION = 1e-12


# --- typical strings for every dimension ---------------------------------------------------

TYPICAL = [
    # text, dimension, SI value; factor from the SI brochure / NIST SP 811 App. B
    ("3.5 GHz", "frequency", 3.5e9),
    ("15 kHz", "frequency", 15e3),
    ("120 km/h", "speed", 120 / 3.6),
    ("1500 m/s", "speed", 1500.0),
    ("70 mi/h", "speed", 70 * 1609.344 / 3600),
    ("10 knot", "speed", 10 * 1852 / 3600),
    ("2.3 us", "time", 2.3e-6),
    ("2.3 µs", "time", 2.3e-6),
    ("0.5 ms", "time", 0.5e-3),
    ("4 ns", "time", 4e-9),
    ("150 m", "length", 150.0),
    ("55 km", "length", 55e3),
    ("50 Mbit/s", "bitrate", 50e6),
    ("4 kbit/s", "bitrate", 4e3),
    ("0.1 ppm", "ratio", 1e-7),
    ("0.25", "ratio", 0.25),
    ("25 %", "ratio", 0.25),
]


@pytest.mark.parametrize("text, dimension, si", TYPICAL)
def test_typical_quantities_convert_to_si(text, dimension, si):
    assert_allclose(parse_quantity(text, dimension, "x"), si, rtol=RTOL_CONVERSION)


def test_every_dimension_has_a_working_example():
    """The example shown in error messages must itself parse (it is advice to the user)."""
    assert set(EXAMPLES) == set(DIMENSIONS)
    for dimension, example in EXAMPLES.items():
        assert math.isfinite(parse_quantity(example, dimension, "x"))


def test_a_bare_number_is_accepted_for_ratios_only():
    assert parse_quantity(0.25, "ratio", "x") == 0.25
    assert parse_quantity(3, "ratio", "x") == 3.0


# --- refusals --------------------------------------------------------------------------------

BAD = [
    # text, dimension, words the message must contain
    ("3 km", "speed", "[length]"),  # a distance where a speed is wanted
    ("1 s", "frequency", "[time]"),
    ("3.5 GHz", "time", "1 / [time]"),
    ("2 kHz kHz", "frequency", "expected a frequency"),
    ("50 Mb/s", "bitrate", "expected a bitrate"),  # pint reads "b" as the barn, an area
    ("5", "frequency", "with its unit"),  # a bare number in a string
    (5, "frequency", "bare number"),
    (2.5e9, "frequency", "bare number"),
    ("Hz", "frequency", "a number, then the unit"),  # pint alone would read this as 1 Hz
    ("kHz 3", "frequency", "a number, then the unit"),
    ("nan Hz", "frequency", "finite"),
    ("NaN", "ratio", "finite"),
    (math.nan, "ratio", "finite"),
    (math.inf, "ratio", "finite"),
    ("inf Hz", "frequency", "finite"),
    ("-inf m/s", "speed", "finite"),
    ("1e400 Hz", "frequency", "finite"),  # overflows to inf
    ("1e308 * 10 Hz", "frequency", "finite"),
    ("10**10**10 Hz", "frequency", "powers are not read"),
    ("10^3 Hz", "frequency", "powers are not read"),
    ("1" * 90 + " Hz", "frequency", "at most 80 characters"),
    ("hello", "time", "expected a time"),
    ("3 (Hz", "time", "could not read"),
    ("3 Hz + 2 m", "time", "could not read"),
    ("", "time", "expected a time"),
    ("   ", "time", "expected a time"),
    ("1/0 Hz", "frequency", "could not read"),
    ("3 parsec", "speed", "[length]"),
    ("__import__('os') Hz", "frequency", "a number, then the unit"),
    ("1 exp(1) Hz", "frequency", "could not read"),
    (True, "ratio", "expected a ratio"),  # TOML true is not 1
    (None, "time", "expected a time"),
    ([1, 2], "time", "expected a time"),
    ({"value": 1}, "time", "expected a time"),
]


@pytest.mark.parametrize("text, dimension, words", BAD)
def test_bad_quantities_are_refused_with_one_located_line(text, dimension, words):
    with pytest.raises(InputError) as error:
        parse_quantity(text, dimension, "site.toml: environment.carrier")
    message = str(error.value)
    assert error.value.place == "site.toml: environment.carrier"
    assert message.startswith("site.toml: environment.carrier: ")
    assert words in message
    assert "\n" not in message


def test_a_tower_of_powers_is_refused_fast():
    """pint evaluates integer powers exactly: 10**10**10 would never return if it reached pint."""
    start = time.perf_counter()
    for text in ("10**10**10 Hz", "9**9**9**9 Hz", "2^2^2^2^2^2 s"):
        with pytest.raises(InputError):
            parse_quantity(text, "frequency", "x")
    assert time.perf_counter() - start < 1.0  # generous: each refusal is a string test


def test_unknown_dimension_is_refused_as_input():
    """A public function raises its documented InputError for every bad argument (issue 15, finding 8)."""
    with pytest.raises(InputError, match="unknown dimension 'colour'"):
        parse_quantity("1 Hz", "colour", "x")


# --- decibels --------------------------------------------------------------------------------

@pytest.mark.parametrize("text, value_db", [
    ("18 dB", 18.0), ("-25 dB", -25.0), ("+3 dB", 3.0), (".5 dB", 0.5), ("18dB", 18.0),
    ("-90 dBc/Hz", -90.0), ("-30 dBc", -30.0), ("1e1 dB", 10.0), (12, 12.0), (-3.5, -3.5),
    ("18", 18.0), (" -3.5 ", -3.5),  # the bare-number rule: a bare number, quoted or not, is read as dB
])
def test_parse_db_reads_decibels(text, value_db):
    assert parse_db(text, "x") == value_db


@pytest.mark.parametrize("text", [
    "18 db", "18 dBm", "dB", "nan dB", "inf dB", "1e3 dB", math.nan, math.inf, -math.inf, 401, True,
    None, "18 dB 3", [18], "eighteen dB",
])
def test_parse_db_refuses_junk_in_one_line(text):
    with pytest.raises(InputError) as error:
        parse_db(text, "site.toml: radio.snr")
    assert str(error.value).startswith("site.toml: radio.snr: ")
    assert "\n" not in str(error.value)


# --- formatting --------------------------------------------------------------------------------

@pytest.mark.parametrize("value, unit, text", [
    (4.6875e-6, "s", "4.688 us"),  # NR mu = 0 normal CP (TS 38.211 sect. 5.3.1), rounded to 4 digits
    (15e3, "Hz", "15 kHz"),
    (3.5e9, "Hz", "3.5 GHz"),
    (0.1578, "m", "157.8 mm"),
    (1.0, "m", "1 m"),
    (-2500.0, "Hz", "-2.5 kHz"),
    (2e-12, "s", "2 ps"),
    (0, "Hz", "0 Hz"),
    (999.9, "Hz", "999.9 Hz"),  # four digits keep it below the next prefix
    (999.96, "Hz", "1 kHz"),  # rounds up to 1000 at four digits: the next prefix
    (math.inf, "s", "unbounded"),
    (math.nan, "s", "n/a"),
    (None, "s", "n/a"),
])
def test_engineering_format(value, unit, text):
    assert engineering(value, unit) == text


def test_engineering_digits():
    assert engineering(4.6875e-6, "s", digits=6) == "4.6875 us"
    assert engineering(2.0 / 3.0, "s", digits=3) == "667 ms"


def test_speed_and_db_formats():
    assert speed_kmh(100 / 3.6) == "100 km/h"
    assert speed_kmh(math.inf) == "unbounded"
    assert db(3.0) == "+3.0 dB"
    assert db(-25.04, digits=2) == "-25.04 dB"
    assert db(-math.inf) == "-inf dB"


@given(st.floats(min_value=1e-12, max_value=1e11, allow_nan=False, allow_infinity=False))
def test_engineering_mantissa_is_between_1_and_1000(value):
    """Every positive value in the range the tool shows gets a prefix with a mantissa in [1, 1000)."""
    mantissa, unit = engineering(value, "Hz").split(" ")
    assert 1.0 <= float(mantissa) < 1000.0
    assert unit.endswith("Hz")


# --- properties: changing the unit never changes the result -------------------------------------

# (unit, SI value of one unit) per dimension; factors from the SI brochure / NIST SP 811 App. B.
UNITS = {
    "speed": [("m/s", 1.0), ("km/h", 1 / 3.6), ("mi/h", 1609.344 / 3600), ("knot", 1852 / 3600)],
    "frequency": [("Hz", 1.0), ("kHz", 1e3), ("MHz", 1e6), ("GHz", 1e9)],
    "time": [("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("ns", 1e-9)],
}


@pytest.mark.parametrize("dimension", sorted(UNITS))
@given(si=st.floats(min_value=1e-9, max_value=1e9, allow_nan=False, allow_infinity=False))
def test_changing_the_unit_never_changes_the_si_value(dimension, si):
    values = [parse_quantity(f"{si / factor!r} {unit}", dimension, "x") for unit, factor in UNITS[dimension]]
    assert_allclose(values, si, rtol=RTOL_CONVERSION)


@given(text=st.text(max_size=40), dimension=st.sampled_from(sorted(DIMENSIONS)))
def test_any_text_gives_a_finite_float_or_an_input_error(text, dimension):
    try:
        value = parse_quantity(text, dimension, "x")
    except InputError as error:
        assert "\n" not in str(error)
    else:
        assert isinstance(value, float) and math.isfinite(value)


@given(text=st.text(max_size=30))
def test_any_text_gives_a_db_value_or_an_input_error(text):
    try:
        value = parse_db(text, "x")
    except InputError as error:
        assert "\n" not in str(error)
    else:
        assert -400 <= value <= 400


# --- the cache of quantity strings pint read in earlier runs ----------------------------------------


@pytest.fixture
def fresh_cache(tmp_path, monkeypatch):
    """An empty cache folder, nothing learned or loaded in this process; yields the cache file."""
    monkeypatch.setenv("NUMEROLOGY_CACHE_DIR", str(tmp_path))
    quantity_cache.forget()
    yield quantity_cache.cache_path()
    quantity_cache.forget()


def test_cached_values_equal_what_pint_gives(fresh_cache):
    strings = [("120 km/h", "speed"), ("3.5 GHz", "frequency"), ("2.3 us", "time"), ("50 Mbit/s", "bitrate")]
    first = [units.parse_quantity(t, d, "x") for t, d in strings]
    quantity_cache.save()
    assert fresh_cache.exists()
    assert quantity_cache._LEARNED == {}
    again = [units.parse_quantity(t, d, "x") for t, d in strings]
    assert again == first  # the very same floats
    assert quantity_cache._LEARNED == {}  # all from the file: pint was not asked


def test_cache_keeps_the_dimension_check(fresh_cache):
    units.parse_quantity("1 ms", "time", "x")
    quantity_cache.save()
    with pytest.raises(InputError, match="expected a frequency"):
        units.parse_quantity("1 ms", "frequency", "radio.bandwidth")


def test_unreadable_or_foreign_cache_is_ignored(fresh_cache):
    fresh_cache.parent.mkdir(parents=True, exist_ok=True)
    fresh_cache.write_text("{not json", encoding="utf-8")
    assert units.parse_quantity("36 km/h", "speed", "x") == pytest.approx(10.0)
    # an entry written by another installation is not used, even with a valid tag of its own
    fresh_cache.write_text(json.dumps({"installation": "other", "entries": {
        "speed|36 km/h": [99.0, "speed", "0" * 32]}}), encoding="utf-8")
    quantity_cache.forget()
    assert units.parse_quantity("36 km/h", "speed", "x") == pytest.approx(10.0)


def test_cache_can_be_switched_off(monkeypatch):
    monkeypatch.setenv("NUMEROLOGY_CACHE_DIR", "")
    assert quantity_cache.cache_path() is None


def test_a_run_with_known_strings_never_imports_pint(tmp_path):
    """Second run of the same requirement file: every quantity string comes from the cache."""
    import os
    import subprocess
    import sys

    from conftest import EXAMPLES

    env = {**os.environ, "NUMEROLOGY_CACHE_DIR": str(tmp_path)}
    code = ("import sys; from numerology.cli import main; status = main(['env', sys.argv[1]]); "
            "print('pint' in sys.modules, status, file=sys.stderr)")
    runs = [subprocess.run([sys.executable, "-c", code, str(EXAMPLES / "rail_corridor.toml")], env=env,
                           capture_output=True, text=True) for _ in range(2)]
    assert [r.stderr.split()[-2:] for r in runs] == [["True", "0"], ["False", "0"]]
    assert runs[0].stdout == runs[1].stdout


def test_a_run_that_stops_on_bad_input_writes_no_cache(tmp_path, monkeypatch):
    from numerology.cli import main

    monkeypatch.setenv("NUMEROLOGY_CACHE_DIR", str(tmp_path / "cache"))
    quantity_cache.forget()
    req = tmp_path / "bad.toml"
    req.write_text('[environment]\ncarrier = "2.4 GHz"\nmax_speed = "fast"\n', encoding="utf-8")
    assert main(["env", str(req)]) == 2
    assert not (tmp_path / "cache").exists()
    quantity_cache.forget()
