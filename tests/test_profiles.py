"""Tests for numerology.profiles: the published profile catalogue and the tap-file loader."""

import re
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from numerology import delay
from numerology.errors import InputError
from numerology.profiles import CATALOGUE, Profile, get_profile, load_profile_csv

ns = 1e-9
us = 1e-6

REFERENCE = Path(__file__).parent / "reference"
EXAMPLE_CSV = Path(__file__).parent.parent / "requirements_examples" / "harbour_crane_taps.csv"


# --- stated and computed rms delay spreads ------------------------------------------------

STATED_AND_CONSISTENT = [
    # name, stated rms (ns), source of the stated value
    ("EPA", 43, "3GPP TS 36.101 Annex B.2.1, Table B.2.1-1"),
    ("EVA", 357, "3GPP TS 36.101 Annex B.2.1, Table B.2.1-1"),
    ("ETU", 991, "3GPP TS 36.101 Annex B.2.1, Table B.2.1-1"),
    ("ITU-IndoorB", 100, "ITU-R M.1225 Annex 2 (stated value from memory)"),
    ("ITU-PedA", 45, "ITU-R M.1225 Annex 2 (stated value from memory)"),
    ("ITU-VehA", 370, "ITU-R M.1225 Annex 2 (stated value from memory)"),
    ("ITU-VehB", 4000, "ITU-R M.1225 Annex 2 (stated value from memory)"),
]


@pytest.mark.parametrize("name, stated_ns, source", STATED_AND_CONSISTENT)
def test_rms_from_taps_matches_the_stated_value(name, stated_ns, source):
    """Each profile's rms computed from its taps is within 3 % of the value its source states
    (3 %: the stated values are rounded, ITU-R M.1225's to one or two significant figures)."""
    profile = get_profile(name)
    assert profile.stated_rms_delay_spread_s == pytest.approx(stated_ns * ns, rel=1e-12)
    assert_allclose(profile.rms_delay_spread_s, stated_ns * ns, rtol=0.03)


@pytest.mark.parametrize("name, computed_ns", [
    ("EPA", 43.1), ("EVA", 356.7), ("ETU", 990.9),
    ("ITU-IndoorA", 37.0), ("ITU-IndoorB", 99.2), ("ITU-PedA", 46.0), ("ITU-PedB", 633.4),
    ("ITU-VehA", 370.4), ("ITU-VehB", 4001.4),
])
def test_rms_from_taps_matches_the_calculated_figure(name, computed_ns):
    """Rms from the taps (calc, Rappaport 2nd ed. eqs. 5.36-5.37; ITU-R P.1407), printed to 0.1 ns: half-unit tolerance.

    ITU-R M.1225 Indoor A (stated 35 ns) and Pedestrian B (stated 750 ns) are tested here
    only: their stated values are the environments' representative spreads, not the rms of
    the listed taps (37.0 and 633.4 ns); see test_stated_rms_that_does_not_follow_from_taps.
    """
    assert_allclose(get_profile(name).rms_delay_spread_s, computed_ns * ns, rtol=0, atol=0.05 * ns)


@pytest.mark.xfail(strict=True, reason=(
    "ITU-R M.1225 Annex 2 states 35 ns (Indoor A) and 750 ns (Pedestrian B), values from memory; "
    "the listed taps give 37.0 and 633.4 ns (calc, Rappaport eqs. 5.36-5.37): the stated figure is the "
    "environment's representative spread, not the rms of the tapped-delay line"))
@pytest.mark.parametrize("name", ["ITU-IndoorA", "ITU-PedB"])
def test_stated_rms_that_does_not_follow_from_taps(name):
    """Recorded discrepancy, kept visible: the stated value is not within 3 % of the taps' rms."""
    profile = get_profile(name)
    assert_allclose(profile.rms_delay_spread_s, profile.stated_rms_delay_spread_s, rtol=0.03)


# --- spans and tap counts --------------------------------------------------------------

@pytest.mark.parametrize("name, taps, span, max_excess_30db, source", [
    ("EPA", 7, 410 * ns, 410 * ns, "TS 36.101 Table B.2.1-2"),
    ("EVA", 9, 2510 * ns, 2510 * ns, "TS 36.101 Table B.2.1-3"),
    ("ETU", 9, 5000 * ns, 5000 * ns, "TS 36.101 Table B.2.1-4"),
    ("ITU-IndoorA", 6, 310 * ns, 290 * ns, "M.1225 Annex 2: last tap -32 dB, beyond 30 dB"),
    ("ITU-IndoorB", 6, 700 * ns, 700 * ns, "M.1225 Annex 2"),
    ("ITU-PedA", 4, 410 * ns, 410 * ns, "M.1225 Annex 2"),
    ("ITU-PedB", 6, 3700 * ns, 3700 * ns, "M.1225 Annex 2"),
    ("ITU-VehA", 6, 2510 * ns, 2510 * ns, "M.1225 Annex 2"),
    ("ITU-VehB", 6, 20000 * ns, 20000 * ns, "M.1225 Annex 2"),
    ("TDL-A", 23, 9.6586, 9.6586, "TR 38.901 Table 7.7.2-1 (from memory)"),
    ("TDL-B", 23, 4.7834, 4.7834, "TR 38.901 Table 7.7.2-2 (from memory)"),
    ("TDL-C", 24, 8.6523, 8.6523, "TR 38.901 Table 7.7.2-3 (from memory)"),
    ("TDL-E", 14, 20.6519, 20.6519, "TR 38.901 Table 7.7.2-5 (from memory); LOS tap 1 counted once"),
])
def test_tap_counts_and_spans(name, taps, span, max_excess_30db, source):
    """Tap counts are exact; spans and 30-dB maximum excess delays to rounding (1e-12 relative)."""
    profile = get_profile(name)
    assert len(profile.delays_s) == len(profile.powers_db) == taps
    assert_allclose(profile.span_s, span, rtol=1e-12)
    assert_allclose(profile.max_excess_delay_s, max_excess_30db, rtol=1e-12)


def test_catalogue_names_and_sources():
    assert list(CATALOGUE) == ["EPA", "EVA", "ETU", "ITU-IndoorA", "ITU-IndoorB", "ITU-PedA", "ITU-PedB",
                               "ITU-VehA", "ITU-VehB", "TDL-A", "TDL-B", "TDL-C", "TDL-E"]
    for name, profile in CATALOGUE.items():
        assert profile.name == name
        assert profile.source
        assert profile.normalised == name.startswith("TDL-")
        assert (profile.stated_rms_delay_spread_s is None) == profile.normalised
        if profile.normalised:
            assert "from memory" in profile.source
        assert_allclose(profile.powers.sum(), 1.0, rtol=1e-14)


# --- 3GPP TR 38.901 TDL tables ----------------------------------------------------------

#: Tolerance on the normalised rms of a TDL table. The tables print delays to 4 decimals;
#: rounding them moves the rms by at most sum_k |d sigma / d tau_k| * 5e-5, about 4e-5
#: (calc, all four tables), and TDL-E's line-of-sight tap is printed as a split to 0.01 dB
#: (-0.03 dB + -22.03 dB), which moves its rms by 2.4e-4 (calc: the exact split of a 0-dB tap
#: at K = 22 dB brings it to 2.8e-5). We test the claim "1.000" (TR 38.901 sect. 7.7.2 normalisation, calc
#: to three decimals): 5e-4. A missing tap (TDL-C without 8.6523: 0.972) fails it by a factor 50.
TDL_RMS_TOLERANCE = 5e-4


@pytest.mark.parametrize("name", ["TDL-A", "TDL-B", "TDL-C", "TDL-E"])
def test_tdl_normalised_rms_is_one(name):
    """3GPP TR 38.901 sect. 7.7.2: delays are normalised to an rms spread of 1 (calc check;
    tables recalled from memory). Observed residuals: A +5.8e-5, B -1.1e-5, C -4.2e-6, E +2.4e-4.

    Not caught by this check: 2.1717 for 2.1718 (a circulating bad copy, placed in TDL-B from memory;
    in our recollection 2.1718 is tap 13 of TDL-A) moves the rms by only 2e-6.
    """
    assert_allclose(get_profile(name).rms_delay_spread_s, 1.0, rtol=0, atol=TDL_RMS_TOLERANCE)


def test_tdl_rms_check_catches_a_missing_last_tap():
    """A circulating TDL-C copy (from memory) lacks its last tap (TR 38.901 Table 7.7.2-3: 8.6523, -22.8 dB)."""
    tdl_c = get_profile("TDL-C")
    assert tdl_c.delays_s[-1] == 8.6523 and tdl_c.powers_db[-1] == -22.8
    truncated = delay.rms_delay_spread_s(tdl_c.delays_s[:-1], tdl_c.powers[:-1])
    assert abs(truncated - 1.0) > 10 * TDL_RMS_TOLERANCE


def test_tdl_e_line_of_sight_tap():
    """TR 38.901 Table 7.7.2-5 (from memory): tap 1 is an LOS line at -0.03 dB plus a Rayleigh
    part at -22.03 dB at delay 0, K = 22 dB; the profile keeps their total power."""
    tdl_e = get_profile("TDL-E")
    assert tdl_e.los_k_factor_db == 22.0
    assert_allclose(10 ** (tdl_e.powers_db[0] / 10), 10 ** -0.003 + 10 ** -2.203, rtol=1e-12)
    assert_allclose(-0.03 - (-22.03), tdl_e.los_k_factor_db, rtol=1e-12)
    # the 2.4e-4 residual is the 0.01-dB rounding of the split (see TDL_RMS_TOLERANCE)
    k = 10 ** (22.0 / 10)
    exact = list(tdl_e.powers_db)
    exact[0] = 0.0  # total of an exact K = 22 dB split of a 0-dB tap
    split_residual = delay.rms_delay_spread_s(tdl_e.delays_s, 10 ** (np.array(exact) / 10)) - 1.0
    printed_total_db = 10 * np.log10(10 ** -0.003 + 10 ** -2.203)
    assert abs(printed_total_db - 10 * np.log10(k / (k + 1) + 1 / (k + 1))) > 0.002  # printed split is not 0 dB
    assert abs(split_residual) < 5e-5


@pytest.mark.xfail(strict=True, reason=(
    "TDL-D (TR 38.901 Table 7.7.2-4) as recalled from memory computes to rms 0.9937, not 1.000; "
    "either the recollection or the table's 3-decimal delays are off. Left out of CATALOGUE until "
    "checked against the standard."))
def test_recalled_tdl_d_fails_rms_check():
    """tests/reference/tr38901_tdl_d_recalled.csv (from memory; header gives provenance)."""
    table = np.genfromtxt(REFERENCE / "tr38901_tdl_d_recalled.csv", delimiter=",", comments="#",
                          names=True, dtype=None, encoding="utf-8")
    assert len(np.unique(table["tap"])) == 13
    powers = 10 ** (table["power_db"] / 10)  # LOS and Rayleigh rows at delay 0 add up
    sigma = delay.rms_delay_spread_s(table["normalised_delay"], powers)
    assert_allclose(sigma, 1.0, rtol=0, atol=TDL_RMS_TOLERANCE)


# --- names, scaling ------------------------------------------------------------------------

def test_get_profile_ignores_case_and_spaces():
    assert get_profile("eva") is CATALOGUE["EVA"]
    assert get_profile("  tdl-c ") is CATALOGUE["TDL-C"]
    assert get_profile("ITU-VEHA") is CATALOGUE["ITU-VehA"]


def test_get_profile_unknown_name_suggests_nearest():
    with pytest.raises(ValueError, match=r"unknown channel profile 'TDL-F'; did you mean TDL-E"):
        get_profile("TDL-F")
    with pytest.raises(ValueError, match="known profiles: EPA, EVA, ETU"):
        get_profile("rayleigh")
    with pytest.raises(ValueError, match="unknown channel profile 'TDL-D'"):
        get_profile("TDL-D")  # left out on purpose, see test_recalled_tdl_d_fails_rms_check


@pytest.mark.parametrize("name, rms_s, label", [
    ("TDL-A", 30 * ns, "TDL-A @ 30 ns"), ("TDL-C", 300 * ns, "TDL-C @ 300 ns"),
    ("TDL-E", 1 * us, "TDL-E @ 1 us"),
])
def test_scaling_a_normalised_profile(name, rms_s, label):
    """TR 38.901 sect. 7.7.3: normalised delays are multiplied by the wanted rms spread."""
    base = get_profile(name)
    scaled = base.scaled(rms_s)
    assert scaled.name == label
    assert not scaled.normalised
    assert scaled.los_k_factor_db == base.los_k_factor_db
    assert_allclose(scaled.delays_s, np.asarray(base.delays_s) * rms_s, rtol=1e-15)
    assert_allclose(scaled.rms_delay_spread_s, rms_s, rtol=TDL_RMS_TOLERANCE)


def test_scaling_a_profile_in_seconds_sets_its_rms_exactly():
    scaled = get_profile("EVA").scaled(100 * ns)
    assert scaled.name == "EVA @ 100 ns"
    assert_allclose(scaled.rms_delay_spread_s, 100 * ns, rtol=1e-12)
    assert_allclose(scaled.span_s / get_profile("EVA").span_s, 100 / 356.652, rtol=1e-5)


@pytest.mark.parametrize("rms_s", [0.0, -1e-9, np.nan, np.inf])
def test_scaling_rejects_a_bad_spread(rms_s):
    with pytest.raises(ValueError, match="rms_delay_spread_s"):
        get_profile("EPA").scaled(rms_s)


def test_profile_validation():
    with pytest.raises(ValueError, match="as many delays as powers"):
        Profile("x", (0.0, 1e-6), (0.0,), "test")
    with pytest.raises(ValueError, match="delays must be finite"):
        Profile("x", (-1e-9,), (0.0,), "test")


# --- tap files --------------------------------------------------------------------------

def test_example_tap_file_loads():
    """requirements_examples/harbour_crane_taps.csv: invented demonstration profile, 10 taps to 1.49 us."""
    profile = load_profile_csv(EXAMPLE_CSV)
    assert profile.name == "harbour_crane_taps"
    assert profile.source == "measured (file harbour_crane_taps.csv)"
    assert len(profile.delays_s) == 10
    assert_allclose(profile.span_s, 1.49 * us, rtol=1e-12)
    assert not profile.normalised and profile.stated_rms_delay_spread_s is None


@pytest.mark.parametrize("unit, factor", [("ns", 1e-9), ("us", 1e-6), ("\u00b5s", 1e-6), ("ms", 1e-3), ("s", 1.0)])
def test_tap_file_units(tmp_path, unit, factor):
    path = tmp_path / "taps.csv"
    path.write_text(f"# comment\n\ndelay [{unit}],power [dB]\n2,-3\n0,0\n 1 , -1.5 \n", encoding="utf-8")
    profile = load_profile_csv(path)
    assert_allclose(profile.delays_s, np.array([0.0, 1.0, 2.0]) * factor, rtol=1e-15)  # sorted
    assert profile.powers_db == (0.0, -1.5, -3.0)


@pytest.mark.parametrize("body, line, message", [
    ("0,0\n", 1, "expected a header row such as \"delay [ns],power [dB]\""),
    ("delay,power\n0,0\n", 1, "expected a header row"),
    ("delay [dB],power [dB]\n0,0\n", 1, "not a time unit"),
    ("delay [ns],power [dB]\n0,0\nten,-3\n", 3, "expected two numbers"),
    ("delay [ns],power [dB]\n0,0,1\n", 2, "expected two columns"),
    ("delay [ns],power [dB]\n0,nan\n", 2, "expected finite numbers"),
    ("delay [ns],power [dB]\n0,0\ninf,-3\n", 3, "expected finite numbers"),
    ("delay [ns],power [dB]\n-5,0\n", 2, "delay must be >= 0"),
    ("delay [s],power [dB]\n0,0\n20,-3\n", 3, "more than 10 s"),
    ("delay [ns],power [dB]\n0,61\n", 2, "outside -200..+60 dB"),
    ("delay [ns],power [dB]\n0,-201\n", 2, "outside -200..+60 dB"),
    ("delay [ns],power [dB]\n0,0\n100,-3\n100.0,-4\n", 4, "repeats the tap on line 3"),
    ("# only a comment\ndelay [ns],power [dB]\n# nothing else\n", 3, "no taps"),
    ("# only a comment\n", 1, "no header row"),
])
def test_tap_file_errors_name_the_line(tmp_path, body, line, message):
    path = tmp_path / "taps.csv"
    path.write_text(body, encoding="utf-8")
    with pytest.raises(InputError, match=re.escape(message)) as info:
        load_profile_csv(path)
    assert info.value.place == f"{path}:{line}"


def test_tap_file_unreadable(tmp_path):
    with pytest.raises(InputError, match="cannot be read") as info:
        load_profile_csv(tmp_path / "missing.csv")
    assert info.value.place == str(tmp_path / "missing.csv")
    binary = tmp_path / "binary.csv"
    binary.write_bytes(b"delay [ns],power [dB]\n\xff\xfe0,0\n")
    with pytest.raises(InputError, match="is not UTF-8 text; expected a CSV file of taps"):
        load_profile_csv(binary)


_row = st.one_of(
    st.tuples(st.floats(-10, 1e12), st.floats(-300, 100)).map(lambda t: f"{t[0]},{t[1]}"),
    st.tuples(st.integers(0, 5000), st.integers(-40, 0)).map(lambda t: f"{t[0]},{t[1]}"),
    st.text(alphabet="0123456789.,-+eE#naNfi_ \u00b5", max_size=20))
_near_valid = st.builds(
    lambda header, rows: header + "\n" + "\n".join(rows),
    st.sampled_from(["delay [ns],power [dB]", "delay [us],power [dB]", "delay [xyz],power [dB]",
                     "delay [],power [dB]", "power [dB],delay [ns]", "# c\ndelay [ms] , power [dB]"]),
    st.lists(_row, max_size=8))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(content=st.one_of(st.binary(max_size=200), st.text(max_size=200).map(str.encode),
                         _near_valid.map(str.encode)))
def test_tap_file_loader_raises_only_input_error(tmp_path, content):
    """Whatever the file holds, the loader returns a Profile or raises InputError."""
    path = tmp_path / "random.csv"
    path.write_bytes(content)
    try:
        profile = load_profile_csv(path)
    except InputError:
        return
    assert len(profile.delays_s) >= 1
    assert all(np.isfinite(profile.delays_s)) and all(np.isfinite(profile.powers_db))
