"""Tests of numerology.design: derived quantities, JSON, arrays, and the design-file loader.

Outside facts used here are the OFDM definitions of common practice
(f_s = N df, T_u = 1/df, CP fraction T_cp/T_s, pilot density) and the LTE
slot of 3GPP TS 36.211 Table 6.12-1; everything else is an identity that must
hold for any valid design.
"""

import glob
import math
import os
import tempfile
from pathlib import Path

import numpy as np
import pytest
from conftest import design_json_to_mapping
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from numerology import arrangement
from numerology.design import (
    DERIVED_JSON_KEYS,
    Design,
    DesignArrays,
    design_from_mapping,
    designs_to_arrays,
    load_design,
)
from numerology.errors import InputError

microsecond = 1e-6
millisecond = 1e-3
#: Relative tolerance for values computed by a handful of float operations (a few ULP).
FLOAT_RTOL = 1e-13

EXAMPLES = sorted(glob.glob(str(Path(__file__).parent.parent / "requirements_examples" / "designs" / "*.toml")))


def lte_like(**changes) -> Design:
    fields = dict(name="lte-like", subcarrier_spacing_hz=15e3, fft_size=2048, cp_samples=144, used_subcarriers=1200,
                  pilot_freq_spacing=6, pilot_time_spacing=4, pilot_shift=3, symbols_per_slot=7)
    fields.update(changes)
    return Design(**fields)


# --- derived quantities --------------------------------------------------------


def test_derived_values_by_hand():
    """15 kHz x 2048, CP 144, 1200 used, pilots 1/24, no extra CP; values by hand (calc)."""
    d = lte_like()
    assert d.sample_rate_hz == 30.72e6  # 2048 x 15 kHz, exact in binary
    assert_allclose(d.useful_symbol_s, 1 / 15e3, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_s, 4.6875 * microsecond, rtol=FLOAT_RTOL)
    assert_allclose(d.symbol_s, 2192 / 30.72e6, rtol=FLOAT_RTOL)
    assert d.mean_symbol_s == d.symbol_s  # no extra CP: nothing to spread
    assert_allclose(d.symbols_per_second, 30.72e6 / 2192, rtol=FLOAT_RTOL)
    assert_allclose(d.slot_s, 7 * 2192 / 30.72e6, rtol=FLOAT_RTOL)
    assert_allclose(d.occupied_bandwidth_hz, 18e6, rtol=FLOAT_RTOL)
    assert_allclose(d.pilot_density, 1 / 24, rtol=FLOAT_RTOL)
    assert_allclose(d.data_subcarriers_per_symbol, 1150, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_overhead, 144 / 2192, rtol=FLOAT_RTOL)
    assert_allclose(d.pilot_overhead, 1 / 24, rtol=FLOAT_RTOL)
    assert_allclose(d.overhead, 1 - (2048 / 2192) * (23 / 24), rtol=FLOAT_RTOL)
    assert_allclose(d.data_re_per_second, 1150 * 30.72e6 / 2192, rtol=FLOAT_RTOL)


def test_extra_cp_is_spread_over_its_period():
    """LTE normal CP: 7 x (2048 + 144) + 16 = 15360 samples = 0.5 ms at 30.72 MHz (TS 36.211 Table 6.12-1)."""
    d = lte_like(cp_extra_samples=16, cp_extra_period_s=0.5 * millisecond, reserved_subcarriers=10)
    assert d.symbols_per_slot * (d.fft_size + d.cp_samples) + d.cp_extra_samples == 15360
    assert_allclose(d.cp_extra_s, 16 / 30.72e6, rtol=FLOAT_RTOL)
    assert_allclose(d.mean_symbol_s, 0.5 * millisecond / 7, rtol=FLOAT_RTOL)
    assert_allclose(d.slot_s, 0.5 * millisecond, rtol=FLOAT_RTOL)
    assert_allclose(d.cp_overhead, (6 * 144 + 160) / 15360, rtol=FLOAT_RTOL)
    assert_allclose(d.data_subcarriers_per_symbol, 1140, rtol=FLOAT_RTOL)
    assert_allclose(d.overhead, 1 - (7 * 2048 / 15360) * (1140 / 1200), rtol=FLOAT_RTOL)
    # the extra period without extra samples (or the reverse at 0) changes nothing
    assert lte_like(cp_extra_period_s=1e-3).mean_symbol_s == lte_like().mean_symbol_s


def test_sample_rate_must_match_fft_times_spacing():
    """f_s = N df (common practice); a given rate is checked to 1e-9 relative."""
    assert lte_like(sample_rate_hz=30.72e6 * (1 + 5e-10)).sample_rate_hz == 30.72e6 * (1 + 5e-10)
    with pytest.raises(InputError, match=r"sample_rate_hz: .*does not equal fft_size x subcarrier spacing") as error:
        lte_like(sample_rate_hz=30e6)
    assert "change one of the three" in str(error.value)


@pytest.mark.parametrize(
    "changes, field",
    [
        (dict(fft_size=2048.0), "fft_size"),
        (dict(cp_samples=True), "cp_samples"),
        (dict(subcarrier_spacing_hz="15 kHz"), "subcarrier_spacing_hz"),
        (dict(subcarrier_spacing_hz=math.nan), "subcarrier_spacing_hz"),
        (dict(subcarrier_spacing_hz=-15e3), "subcarrier_spacing_hz"),
        (dict(name=None), "name"),
        (dict(fft_size=4), "fft_size"),
        (dict(used_subcarriers=2048), "used_subcarriers"),
        (dict(pilot_shift=6), "pilot_shift"),
        (dict(reserved_subcarriers=math.inf), "reserved_subcarriers"),
        (dict(cp_extra_samples=16), "cp_extra_period_s"),
        (dict(fft_size=2**60), "fft_size"),
    ],
)
def test_direct_construction_is_checked(changes, field):
    with pytest.raises(InputError, match=rf"^design( '[\w-]*')?: {field}: "):
        lte_like(**changes)


def test_str_is_one_readable_line():
    assert str(lte_like()) == "lte-like: 15 kHz x 2048, CP 144 (4.69 us), 1200 used, pilots 6x4/3"
    assert str(lte_like(name="", reserved_subcarriers=64.2857, cp_extra_samples=16, cp_extra_period_s=5e-4)) == (
        "15 kHz x 2048, CP 144 (4.69 us) +16 per 500 us, 1200 used, 64.29 reserved, pilots 6x4/3"
    )


def test_to_json_has_exactly_the_documented_keys():
    data = lte_like(cp_extra_samples=16, cp_extra_period_s=5e-4, source="x").to_json()
    assert list(data) == [
        "name", "subcarrier_spacing_hz", "fft_size", "sample_rate_hz", "cp_samples", "cp_s", "useful_symbol_s",
        "symbol_s", "used_subcarriers", "symbols_per_slot", "pilot", "reserved_subcarriers", "cp_extra_samples",
        "cp_extra_period_s", "channel_bandwidth_hz", "source",
    ]
    assert data["pilot"] == {"scope": "stream", "freq_spacing": 6, "time_spacing": 4, "shift": 3, "symbols": [0],
                             "period": 4, "boost_db": 0.0, "data_shared": True}
    assert data["sample_rate_hz"] == 30.72e6
    assert data["cp_extra_period_s"] == 5e-4
    assert set(DERIVED_JSON_KEYS) <= set(data)


# --- round trips and the array view ------------------------------------------------


def json_to_mapping(data: dict) -> dict:
    """Strip unit suffixes and put the unit into the value, as a design file writes it."""
    return design_json_to_mapping(data, DERIVED_JSON_KEYS)


@st.composite
def pilot_patterns(draw, freq_spacing, slot):
    """Pilot arrangement fields: a lattice (stream or differential) or an explicit pattern of any scope."""
    scope = draw(st.sampled_from(arrangement.SCOPES))
    if scope in ("stream", "differential") and draw(st.booleans()):
        time_spacing = draw(st.integers(2 if freq_spacing == 1 else 1, 24))  # density 1 would leave no data
        return {"pilot_scope": scope, "pilot_time_spacing": time_spacing}
    if scope == "slot" and slot > arrangement.MAX_PATTERN_BITS:
        scope = "stream"
    period = slot if scope == "slot" else draw(st.integers(1, slot if scope == "packet" else 40))
    bits = min(period, arrangement.MAX_PATTERN_BITS)
    mask = draw(st.integers(1, (1 << bits) - 1))
    shared = draw(st.booleans())
    if arrangement.pilot_fraction(mask, period, freq_spacing, shared) >= 1:
        mask = 1
        shared = True
        if period == 1 and freq_spacing == 1:  # a pilot on every element: keep a second symbol for data
            scope, period = "stream", 2
    return {"pilot_scope": scope, "pilot_symbols": mask, "pilot_period": period,
            "pilot_time_spacing": int(arrangement.max_gap(mask, period)), "pilot_data_shared": shared,
            "pilot_boost_db": draw(st.floats(-20, 20, allow_nan=False))}


@st.composite
def designs(draw):
    fft_size = draw(st.integers(8, 1 << 16))
    spacing_hz = draw(st.floats(1.0, 1e7, allow_nan=False))
    freq_spacing = draw(st.integers(1, 24))
    slot = draw(st.integers(1, 200))
    pattern = draw(pilot_patterns(freq_spacing, slot))
    used = draw(st.integers(1, fft_size - 1))
    density = float(arrangement.pilot_fraction(pattern.get("pilot_symbols", 1),
                                               pattern.get("pilot_period", pattern["pilot_time_spacing"]),
                                               freq_spacing, pattern.get("pilot_data_shared", True)))
    reserved = draw(st.floats(0, 0.99 * used * (1 - density), allow_nan=False))
    cp_samples = draw(st.integers(0, fft_size - 1))
    extra = draw(st.integers(0, 256))
    fs = fft_size * spacing_hz
    period_s = 0.0
    if extra:
        period_s = draw(st.integers(2, 100)) * (fft_size + cp_samples + extra) / fs
    return Design(
        name=draw(st.text(max_size=12)), subcarrier_spacing_hz=spacing_hz, fft_size=fft_size, cp_samples=cp_samples,
        used_subcarriers=used, pilot_freq_spacing=freq_spacing,
        pilot_shift=draw(st.integers(0, freq_spacing - 1)), symbols_per_slot=slot,
        sample_rate_hz=draw(st.sampled_from([None, fs])), reserved_subcarriers=reserved,
        cp_extra_samples=extra, cp_extra_period_s=period_s, source=draw(st.text(max_size=12)), **pattern,
    )


@settings(max_examples=60, deadline=None)
@given(designs())
def test_round_trip_through_json_and_mapping(design):
    """Design -> to_json -> design-file mapping (units in the values) -> the same Design."""
    back = design_from_mapping(json_to_mapping(design.to_json()), "round trip")
    assert back == design


@settings(max_examples=40, deadline=None)
@given(st.lists(designs(), min_size=1, max_size=4))
def test_arrays_and_scalars_use_the_same_formulas(many):
    """Every derived property of DesignArrays equals the scalar Design's, bit for bit."""
    arrays = designs_to_arrays(many)
    for name in ("useful_symbol_s", "cp_s", "cp_extra_s", "symbol_s", "mean_symbol_s", "symbols_per_second",
                 "slot_s", "occupied_bandwidth_hz", "pilot_density", "data_subcarriers_per_symbol", "cp_overhead",
                 "pilot_overhead", "overhead", "data_re_per_second", "sample_rate_hz"):
        assert_array_equal(getattr(arrays, name), [getattr(d, name) for d in many], err_msg=name)
    for index, design in enumerate(many):
        assert arrays.design(index) == design


def test_arrays_broadcast_over_a_grid():
    """A 3 x 4 grid of spacing x CP is evaluated without a loop, and each cell matches a Design."""
    spacing_hz = np.array([[15e3], [30e3], [60e3]])
    cp_samples = np.array([[72, 144, 288, 512]])
    grid = DesignArrays(name="grid", subcarrier_spacing_hz=spacing_hz, fft_size=2048, cp_samples=cp_samples,
                        used_subcarriers=1200, pilot_freq_spacing=6, pilot_time_spacing=4, pilot_shift=3,
                        symbols_per_slot=14)
    assert grid.shape == (3, 4)
    assert grid.cp_s.shape == (3, 4)
    assert_allclose(grid.cp_s[0, 1], 4.6875 * microsecond, rtol=FLOAT_RTOL)
    assert_allclose(grid.cp_s[2, 1], 4.6875 * microsecond / 4, rtol=FLOAT_RTOL)
    cell = grid.design((1, 3))
    assert (cell.subcarrier_spacing_hz, cell.cp_samples, cell.name) == (30e3, 512, "grid")
    assert_array_equal(grid.overhead[1, 3], cell.overhead)


# --- design files ------------------------------------------------------------------

BASE = {
    "name": '"test"',
    "subcarrier_spacing": '"15 kHz"',
    "fft_size": "2048",
    "cp_samples": "144",
    "used_subcarriers": "1200",
    "symbols_per_slot": "14",
    "pilot.freq_spacing": "6",
    "pilot.time_spacing": "4",
    "pilot.shift": "3",
}


def toml_text(changes: dict) -> str:
    """BASE with ``changes`` applied (None deletes a key), written as TOML."""
    entries = {**BASE, **changes}
    top = [f"{k} = {v}" for k, v in entries.items() if v is not None and "." not in k]
    pilot = [f"{k.split('.', 1)[1]} = {v}" for k, v in entries.items() if v is not None and k.startswith("pilot.")]
    return "\n".join(top + ([""] + ["[pilot]"] + pilot if pilot else [])) + "\n"


def write(tmp_path, text, name="design.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_base_snippet_is_valid(tmp_path):
    design = load_design(write(tmp_path, toml_text({})))
    assert design == Design("test", 15e3, 2048, 144, 1200, 6, 4, 3, 14)


BAD_SNIPPETS = [
    # (changes to BASE, key path in the error, fragment of the advice)
    ({"fft_size": None, "fft_sise": "2048"}, "fft_sise", "did you mean 'fft_size'?"),
    ({"subcarrier_spacing": None, "subcarrier_spacing_hz": "15000.0"}, "subcarrier_spacing_hz",
     'write subcarrier_spacing = "15 kHz" (the unit goes in the value)'),
    ({"colour": '"blue"'}, "colour", "unknown key; expected one of"),
    ({"used_subcarriers": None}, "used_subcarriers", "missing; add used_subcarriers = 1200"),
    ({"pilot.freq_spacing": None, "pilot.time_spacing": None, "pilot.shift": None}, "pilot", "missing; add a [pilot]"),
    ({"pilot.freq_spacing": None}, "pilot.freq_spacing", "missing"),
    ({"pilot.spacing": "6"}, "pilot.spacing", "did you mean"),
    ({"subcarrier_spacing": "15000"}, "subcarrier_spacing", "with its unit"),
    ({"subcarrier_spacing": '"15 km"'}, "subcarrier_spacing", "expected a frequency"),
    ({"subcarrier_spacing": '"fifteen"'}, "subcarrier_spacing", "expected a frequency"),
    ({"subcarrier_spacing": '"nan kHz"'}, "subcarrier_spacing", "finite"),
    ({"subcarrier_spacing": '"-15 kHz"'}, "subcarrier_spacing", "must be a positive frequency"),
    ({"subcarrier_spacing": '"0 kHz"'}, "subcarrier_spacing", "must be a positive frequency"),
    ({"fft_size": "2048.5"}, "fft_size", "expected a whole number"),
    ({"fft_size": '"2048"'}, "fft_size", "expected a whole number"),
    ({"fft_size": "true"}, "fft_size", "expected a whole number"),
    ({"fft_size": "4"}, "fft_size", "must be at least 8"),
    ({"cp_samples": "2048"}, "cp_samples", "shorter than the FFT"),
    ({"cp_samples": "-1"}, "cp_samples", "at least 0"),
    ({"cp": '"4.6875 us"'}, "cp", "either cp"),
    ({"cp_samples": None}, "cp_samples", "missing; add cp_samples = 144 or cp ="),
    ({"cp_samples": None, "cp": '"4.69 us"'}, "cp", "use cp_samples = 144 (4.6875 us) or cp_samples = 145"),
    ({"cp_samples": None, "cp": '"-4.6875 us"'}, "cp", "at least 0"),
    ({"cp_samples": None, "cp": "4.6875"}, "cp", "with its unit"),
    ({"used_subcarriers": "2048"}, "used_subcarriers", "fft_size - 1 = 2047"),
    ({"used_subcarriers": "0"}, "used_subcarriers", "between 1 and"),
    ({"symbols_per_slot": "0"}, "symbols_per_slot", "at least 1"),
    ({"pilot.shift": "6"}, "pilot.shift", "less than the pilot frequency spacing (6)"),
    ({"pilot.time_spacing": "0"}, "pilot.time_spacing", "at least 1 symbol"),
    ({"pilot.freq_spacing": "1", "pilot.time_spacing": "1", "pilot.shift": "0"}, "reserved_subcarriers",
     "leave no data subcarriers"),
    ({"sample_rate": '"30 MHz"'}, "sample_rate", "does not equal fft_size x subcarrier spacing"),
    ({"sample_rate": '"30.72 GHz"'}, "sample_rate", "does not equal"),
    ({"reserved_subcarriers": "nan"}, "reserved_subcarriers", ">= 0"),
    ({"reserved_subcarriers": "-1"}, "reserved_subcarriers", ">= 0"),
    ({"reserved_subcarriers": "1150"}, "reserved_subcarriers", "leave no data subcarriers"),
    ({"reserved_subcarriers": '"4"'}, "reserved_subcarriers", "expected a number"),
    ({"cp_extra_samples": "16"}, "cp_extra_period", "needed because cp_extra_samples = 16"),
    ({"cp_extra_samples": "16", "cp_extra_period": '"1 us"'}, "cp_extra_period", "shorter than one symbol"),
    ({"cp_extra_period": '"-1 ms"'}, "cp_extra_period", ">= 0"),
    ({"cp_extra_samples": "-16", "cp_extra_period": '"1 ms"'}, "cp_extra_samples", "at least 0"),
    ({"name": "5"}, "name", "expected text"),
    ({"source": '["a"]'}, "source", "expected text"),
    ({"pilot.freq_spacing": None, "pilot.time_spacing": None, "pilot.shift": None, "pilot": "3"}, "pilot",
     "expected a table [pilot]"),
]


@pytest.mark.parametrize("changes, key, advice", BAD_SNIPPETS, ids=[case[1] + "-" + str(i) for i, case in
                                                                     enumerate(BAD_SNIPPETS)])
def test_bad_design_files_name_file_and_key(tmp_path, changes, key, advice):
    path = write(tmp_path, toml_text(changes))
    with pytest.raises(InputError) as error:
        load_design(path)
    assert error.value.place == f"{path}: {key}"
    assert advice in error.value.message
    assert "\n" not in str(error.value)


def test_all_problems_are_reported_together(tmp_path):
    path = write(tmp_path, toml_text({"fft_size": "2048.5", "used_subcarriers": None, "pilot.shift": '"x"'}))
    with pytest.raises(InputError) as error:
        load_design(path)
    text = str(error.value)
    assert error.value.place == f"{path}: fft_size"
    assert "used_subcarriers: missing" in text and "pilot.shift: expected a whole number" in text


@pytest.mark.parametrize(
    "content, advice",
    [
        (b"fft_size = [1,\n", "not valid TOML"),
        (b"= 3\n", "not valid TOML"),
        (b"name = \"\xff\xfe\"\n", "is not UTF-8 text; expected a TOML design file"),
    ],
)
def test_unreadable_design_files(tmp_path, content, advice):
    path = tmp_path / "bad.toml"
    path.write_bytes(content)
    with pytest.raises(InputError) as error:
        load_design(path)
    assert error.value.place == str(path)
    assert advice in error.value.message


def test_missing_file_and_directory(tmp_path):
    for path, advice in ((tmp_path / "absent.toml", "cannot be read"),
                         (tmp_path, "is a folder; expected a TOML design file")):
        with pytest.raises(InputError, match=advice) as error:
            load_design(path)
        assert error.value.place == str(path)


def test_empty_file_lists_missing_keys_and_defaults_the_name(tmp_path):
    with pytest.raises(InputError) as error:
        load_design(write(tmp_path, ""))
    assert error.value.place.endswith("design.toml: subcarrier_spacing")
    assert "fft_size: missing" in error.value.message and "name" not in error.value.message
    assert load_design(write(tmp_path, toml_text({"name": None}), "stem-name.toml")).name == "stem-name"


def test_cp_given_as_a_whole_number_of_samples(tmp_path):
    design = load_design(write(tmp_path, toml_text({"cp_samples": None, "cp": '"4.6875 us"'})))
    assert design.cp_samples == 144


def test_key_prefix_for_a_table_inside_another_file():
    with pytest.raises(InputError) as error:
        design_from_mapping({"fft_size": 2048}, "site.toml", key_prefix="design.")
    assert error.value.place == "site.toml: design.subcarrier_spacing"
    with pytest.raises(InputError, match="expected a table of design keys"):
        design_from_mapping(["not", "a", "table"], "site.toml")


def test_loader_never_writes_its_input(tmp_path):
    path = write(tmp_path, toml_text({}))
    os.utime(path, (1_000_000_000, 1_000_000_000))
    before = (path.read_bytes(), path.stat().st_mtime_ns)
    load_design(path)
    with pytest.raises(InputError):
        load_design(write(tmp_path, toml_text({"fft_size": "4"}), "other.toml"))
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["design.toml", "other.toml"]


# --- hypothesis: arbitrary input gives a Design or an InputError, nothing else -------------

_QUANTITY_TEXT = st.builds(
    lambda number, unit: f"{number} {unit}",
    st.one_of(st.integers(-10**6, 10**6), st.floats(allow_nan=True, allow_infinity=True)),
    st.sampled_from(["Hz", "kHz", "MHz", "GHz", "us", "ms", "s", "m", "km/h", "dB", "", "ppm", "bit/s"]),
)
_VALUES = st.one_of(
    st.integers(-(2**70), 2**70), st.floats(allow_nan=True, allow_infinity=True), st.booleans(),
    st.text(max_size=16), _QUANTITY_TEXT, st.lists(st.integers(), max_size=3), st.none(),
    st.dictionaries(st.text(max_size=6), st.integers(), max_size=2),
)
_KEYS = ["name", "subcarrier_spacing", "fft_size", "sample_rate", "cp_samples", "cp", "used_subcarriers",
         "symbols_per_slot", "pilot", "reserved_subcarriers", "cp_extra_samples", "cp_extra_period", "source"]
_GOOD = {"name": "g", "subcarrier_spacing": "15 kHz", "fft_size": 2048, "cp_samples": 144, "used_subcarriers": 1200,
         "symbols_per_slot": 14, "pilot": {"freq_spacing": 6, "time_spacing": 4, "shift": 3}}


@settings(max_examples=150, deadline=None)
@given(
    st.dictionaries(st.sampled_from(_KEYS + ["pilot.shift", "pilot.freq_spacing", "bogus"]), _VALUES, max_size=6),
    st.sets(st.sampled_from(_KEYS), max_size=3),
)
def test_random_mappings_give_a_design_or_an_input_error(changes, removed):
    mapping = {k: (dict(v) if isinstance(v, dict) else v) for k, v in _GOOD.items() if k not in removed}
    for key, value in changes.items():
        if key.startswith("pilot.") and isinstance(mapping.get("pilot"), dict):
            mapping["pilot"][key.split(".", 1)[1]] = value
        else:
            mapping[key] = value
    try:
        design = design_from_mapping(mapping, "random.toml")
    except InputError as error:
        assert error.place.startswith("random.toml")
        assert "\n" not in str(error)
    else:
        assert isinstance(design, Design)


@pytest.fixture(scope="module")
def scratch_dir():
    with tempfile.TemporaryDirectory() as name:
        yield Path(name)


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.one_of(
    st.text(max_size=200),
    st.binary(max_size=100),
    st.lists(st.sampled_from(list(toml_text({}).splitlines()) + ["[pilot]", "cp = \"1 us\"", "x = {", "a.b = 1"]),
             max_size=12).map("\n".join),
))
def test_random_file_content_gives_a_design_or_an_input_error(scratch_dir, content):
    path = scratch_dir / "random.toml"
    path.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8", "surrogatepass"))
    try:
        design = load_design(path)
    except InputError as error:
        assert error.place.startswith(str(path))
    else:
        assert isinstance(design, Design)


# --- the example design files ------------------------------------------------------


def test_there_are_example_designs():
    assert len(EXAMPLES) >= 2


@pytest.mark.parametrize("path", EXAMPLES, ids=[Path(p).name for p in EXAMPLES])
def test_example_designs_load(path):
    design = load_design(path)
    assert design.source == "invented example, not a standard"
    assert design.data_subcarriers_per_symbol > 0


def test_example_design_numbers_match_their_comments():
    """The numbers the example files state in their comments (calc)."""
    by_name = {Path(p).stem: load_design(p) for p in EXAMPLES}
    urban = by_name["urban-small-cell-30khz"]
    assert urban.symbols_per_slot * (urban.fft_size + urban.cp_samples) + urban.cp_extra_samples == 15360
    assert_allclose(urban.slot_s, 0.5 * millisecond, rtol=FLOAT_RTOL)
    assert_allclose(urban.pilot_density, 1 / 12, rtol=FLOAT_RTOL)
    highway = by_name["highway-vehicular-cp-as-time"]
    assert (highway.cp_samples, highway.sample_rate_hz) == (72, 30.72e6)
    assert_allclose(highway.slot_s, 28 * 584 / 30.72e6, rtol=FLOAT_RTOL)
    underwater = by_name["underwater-acoustic-modem"]
    assert underwater.cp_samples == 480
    assert_allclose(underwater.occupied_bandwidth_hz, 31.5e3, rtol=FLOAT_RTOL)
    assert_allclose(underwater.useful_symbol_s, 1024 / 48e3, rtol=FLOAT_RTOL)
