"""Tests of numerology.mcs: the default table, the SINR -> efficiency ladder, the gap formula, CSV loading."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from numerology.errors import InputError
from numerology.mcs import (
    CSV_HEADER,
    DEFAULT_MAX_EFFICIENCY,
    DEFAULT_TABLE,
    SHANNON_GAP_DB,
    McsEntry,
    gap_threshold_db,
    load_mcs_table,
    selected_entry_index,
    shannon_gap_efficiency,
    spectral_efficiency,
)

#: Relative tolerance for a few float operations (log, exp): a few ULP.
FLOAT_RTOL = 1e-12
DB_10_LOG_3 = 10 * math.log10(3)


def test_default_table_is_the_80211a_set_plus_256qam():
    """Modulation and code rates of IEEE 802.11-2016 Table 17-4, then 256-QAM 3/4 and 5/6 (802.11ac)."""
    got = [(e.bits_per_symbol, e.code_rate) for e in DEFAULT_TABLE]
    assert got == [(1, 1 / 2), (1, 3 / 4), (2, 1 / 2), (2, 3 / 4), (4, 1 / 2), (4, 3 / 4), (6, 2 / 3), (6, 3 / 4),
                   (8, 3 / 4), (8, 5 / 6)]
    assert DEFAULT_MAX_EFFICIENCY == DEFAULT_TABLE[-1].efficiency == 8 * (5 / 6)


def test_default_thresholds_follow_the_stated_gap():
    """Thresholds are derived (module docstring): 10 log10(2^eff - 1) + gap, not measured values."""
    eff = np.array([e.efficiency for e in DEFAULT_TABLE])
    thresholds_db = np.array([e.required_sinr_db for e in DEFAULT_TABLE])
    assert_allclose(thresholds_db, 10 * np.log10(2**eff - 1) + SHANNON_GAP_DB, rtol=FLOAT_RTOL)
    assert np.all(np.diff(eff) > 0) and np.all(np.diff(thresholds_db) > 0)  # monotone ladder
    # QPSK 1/2 carries 1 bit: it needs SINR = 1 (0 dB) at capacity, so exactly the gap here
    assert_allclose(DEFAULT_TABLE[2].required_sinr_db, SHANNON_GAP_DB, rtol=FLOAT_RTOL)


def test_step_behaviour_at_every_threshold():
    """At a threshold the entry is used; one ULP below, the previous entry (or nothing)."""
    previous = 0.0
    for index, entry in enumerate(DEFAULT_TABLE):
        at = entry.required_sinr_db
        below = np.nextafter(at, -np.inf)
        assert spectral_efficiency(at) == entry.efficiency
        assert selected_entry_index(at) == index
        assert spectral_efficiency(below) == previous
        assert selected_entry_index(below) == index - 1  # -1 below the lowest entry
        previous = entry.efficiency
    assert spectral_efficiency(1e3) == DEFAULT_MAX_EFFICIENCY
    assert spectral_efficiency(-1e3) == 0.0


def test_nan_sinr_is_not_a_top_rate():
    assert math.isnan(spectral_efficiency(math.nan))
    assert selected_entry_index(math.nan) == -1
    assert_array_equal(selected_entry_index([math.nan, 30.0]), [-1, len(DEFAULT_TABLE) - 1])


def test_scalar_and_array_agree():
    sinr_db = np.linspace(-5, 35, 81).reshape(9, 9)
    vector = spectral_efficiency(sinr_db)
    assert vector.shape == (9, 9)
    assert_array_equal(vector, [[spectral_efficiency(float(s)) for s in row] for row in sinr_db])
    assert isinstance(spectral_efficiency(10.0), float)
    assert isinstance(selected_entry_index(10.0), int)


@settings(max_examples=200, deadline=None)
@given(st.floats(-50, 80), st.floats(0, 30))
def test_efficiency_is_monotone_and_below_capacity(sinr_db, step_db):
    """More SINR never lowers the efficiency; no entry beats the AWGN capacity log2(1 + SINR) (Shannon 1948)."""
    assert spectral_efficiency(sinr_db + step_db) >= spectral_efficiency(sinr_db)
    assert spectral_efficiency(sinr_db) <= shannon_gap_efficiency(sinr_db, gap_db=0.0, max_efficiency=np.inf)


def test_table_order_does_not_matter_and_dominated_entries_are_skipped():
    """The best usable entry is chosen whatever the order; an entry needing more SINR for less is never chosen."""
    shuffled = tuple(reversed(DEFAULT_TABLE)) + (McsEntry("poor", 2, 0.5, 30.0),)
    sinr_db = np.linspace(-5, 40, 451)
    assert_array_equal(spectral_efficiency(sinr_db, shuffled), spectral_efficiency(sinr_db))
    chosen = {shuffled[i].name for i in selected_entry_index(sinr_db, shuffled) if i >= 0}
    assert "poor" not in chosen
    tie = (McsEntry("first", 2, 0.5, 3.0), McsEntry("same but later", 1, 1.0, 4.0))
    assert selected_entry_index(10.0, tie) == 0


def test_shannon_gap_formula():
    """min(log2(1 + SINR/Gamma), cap) (Shannon 1948; Forney & Ungerboeck 1998 for the gap)."""
    assert_allclose(shannon_gap_efficiency(0.0, gap_db=0.0, max_efficiency=np.inf), 1.0, rtol=FLOAT_RTOL)
    assert_allclose(shannon_gap_efficiency(DB_10_LOG_3, gap_db=0.0, max_efficiency=np.inf), 2.0, rtol=FLOAT_RTOL)
    assert_allclose(shannon_gap_efficiency(DB_10_LOG_3 + 7.0, gap_db=7.0, max_efficiency=np.inf), 2.0,
                    rtol=FLOAT_RTOL)
    assert shannon_gap_efficiency(60.0) == DEFAULT_MAX_EFFICIENCY
    sinr_db = np.array([-10.0, 0.0, 10.0, 20.0])
    assert_allclose(shannon_gap_efficiency(sinr_db, gap_db=3.0, max_efficiency=np.inf),
                    np.log2(1 + 10 ** ((sinr_db - 3.0) / 10)), rtol=FLOAT_RTOL)


def test_gap_curve_passes_through_each_default_threshold():
    """The smooth curve and the table use the same gap, so they meet at every threshold (identity)."""
    thresholds_db = [e.required_sinr_db for e in DEFAULT_TABLE]
    assert_allclose(shannon_gap_efficiency(thresholds_db), [e.efficiency for e in DEFAULT_TABLE], rtol=FLOAT_RTOL)
    assert_allclose(gap_threshold_db(shannon_gap_efficiency(12.3)), 12.3, rtol=FLOAT_RTOL)


@pytest.mark.parametrize("bits, rate, sinr_db, field", [(0, 0.5, 1.0, "bits_per_symbol"), (2.0, 0.5, 1.0,
                         "bits_per_symbol"), (2, 0.0, 1.0, "code_rate"), (2, 1.5, 1.0, "code_rate"),
                         (2, math.nan, 1.0, "code_rate"), (2, 0.5, math.inf, "required_sinr_db")])
def test_entries_are_checked(bits, rate, sinr_db, field):
    with pytest.raises(InputError, match=f"MCS entry 'x': {field}: "):
        McsEntry("x", bits, rate, sinr_db)


# --- CSV tables --------------------------------------------------------------------


def test_csv_round_trip(tmp_path):
    path = tmp_path / "table.csv"
    rates = ["1/2", "3/4", "1/2", "3/4", "1/2", "3/4", "2/3", "3/4", "3/4", "5/6"]
    lines = [",".join(CSV_HEADER), "# comments and blank lines are skipped", ""]
    lines += [f"{e.name},{e.bits_per_symbol},{r},{e.required_sinr_db!r}" for e, r in zip(DEFAULT_TABLE, rates)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    assert load_mcs_table(path) == DEFAULT_TABLE


def test_csv_accepts_decimal_rates_and_db_units(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("name, bits_per_symbol, code_rate, required_sinr [dB]\nA,4,0.75,13.5 dB\nB,2,1/2,-1.5\n",
                    encoding="utf-8")
    assert load_mcs_table(path) == (McsEntry("A", 4, 0.75, 13.5), McsEntry("B", 2, 0.5, -1.5))


HEADER = ",".join(CSV_HEADER) + "\n"


@pytest.mark.parametrize(
    "content, place, advice",
    [
        ("name,bits,rate,sinr\nA,2,1/2,3\n", "line 1", "expected the header"),
        (HEADER + "A,2,1/2\n", "line 2", "expected 4 columns"),
        (HEADER + "A,2,1/2,3\nB,4.5,1/2,3\n", "line 3: bits_per_symbol", "whole number"),
        (HEADER + "A,0,1/2,3\n", "line 2: bits_per_symbol", "from 1 to 64"),
        (HEADER + "A,2,3/0,3\n", "line 2: code_rate", "code rate such as 3/4"),
        (HEADER + "A,2,3/2,3\n", "line 2: code_rate", "in (0, 1]"),
        (HEADER + "A,2,half,3\n", "line 2: code_rate", "code rate such as 3/4"),
        (HEADER + "A,2,1/2,high\n", "line 2: required_sinr", "in dB"),
        (HEADER + "A,2,1/2,nan\n", "line 2: required_sinr", "in dB"),
        (HEADER + "A,2,1/2,3\nA,4,1/2,9\n", "line 3", "appears twice"),
        (HEADER + ",2,1/2,3\n", "line 2", "name is empty"),
        (HEADER, "", "no entries"),
        ("", "", "empty file"),
        (HEADER + 'A,2,1/2,3\n"B,2,1/2,3\n', "line 3", "not valid CSV"),
    ],
)
def test_bad_csv_rows_name_the_line(tmp_path, content, place, advice):
    path = tmp_path / "bad.csv"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(InputError) as error:
        load_mcs_table(path)
    assert error.value.place == (f"{path}: {place}" if place else str(path))
    assert advice in error.value.message


def test_unreadable_csv(tmp_path):
    with pytest.raises(InputError, match="cannot be read"):
        load_mcs_table(tmp_path / "absent.csv")
    path = tmp_path / "latin1.csv"
    path.write_bytes(HEADER.encode() + b"\xe9,2,1/2,3\n")
    with pytest.raises(InputError, match="is not UTF-8 text; expected a CSV file"):
        load_mcs_table(path)
