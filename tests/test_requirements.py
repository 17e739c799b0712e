"""Tests for numerology.requirements: the requirement-file loader and its error messages.

Every bad input must raise InputError with ONE line naming the file and the dotted key
path, phrased as advice. The generated cases walk SCHEMA, so a key added there is covered
without editing this file.
"""

import contextlib
import io
import math
import os
import tomllib

import pytest
from conftest import EXAMPLES, apply_edits, toml_text
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from numerology.cli import main
from numerology.errors import InputError
from numerology.requirements import SCHEMA, SECTIONS, Requirements, load_requirements, requirements_from_mapping

EXAMPLE_FILES = sorted(EXAMPLES.glob("*.toml"))

#: The smallest valid requirement set: each test changes one thing.
BASE = {
    "environment": {"carrier": "2 GHz", "max_speed": "120 km/h", "max_excess_delay": "5 us"},
    "radio": {"bandwidth": "20 MHz", "snr": "20 dB"},
}

SI_UNIT = {"frequency": "Hz", "time": "s", "speed": "m/s", "length": "m", "bitrate": "bit/s"}


def changed(*edits):
    """BASE with edits applied: ("section.key", value) sets, ("section.key", None) removes."""
    data = {section: dict(table) for section, table in BASE.items()}
    data.update({dotted: value for dotted, value in edits if "." not in dotted})
    return apply_edits(data, [(tuple(dotted.split(".")), value) for dotted, value in edits if "." in dotted])


def assert_one_located_line(error, path, dotted):
    """The message names the file and the key path, on one line."""
    message = str(error.value)
    assert str(path) in message
    assert dotted in message
    assert "\n" not in message and "\r" not in message
    assert "Traceback" not in message


# --- the shipped examples --------------------------------------------------------------------


def test_there_are_examples():
    assert len(EXAMPLE_FILES) >= 5


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.name)
def test_every_shipped_example_loads(path):
    req = load_requirements(path)
    assert isinstance(req, Requirements)
    assert req.path == str(path)
    assert req.environment.carrier_hz > 0
    assert req.radio.bandwidth_hz > 0
    # every key the user wrote is echoed back, and only those
    written = {f"{s}.{k}" for s, table in tomllib.loads(path.read_text()).items() for k in table}
    assert {key for key, _ in req.given} == written


def test_example_values_arrive_in_si():
    """rail_corridor.toml: the values its comments state (unit factors: SI brochure 9th ed.)."""
    req = load_requirements(EXAMPLES / "rail_corridor.toml")
    assert req.environment.carrier_hz == 1.9e9
    assert_allclose(req.environment.max_speed_mps, 300 / 3.6, rtol=1e-15)
    assert req.environment.profile == "EVA"
    assert req.environment.doppler_spectrum == "tracked"
    assert_allclose(req.environment.k_factor_db, 9.0, rtol=0)
    # "0.05 ppm ... (95 Hz here)": a ppm error is a fraction of the carrier
    assert_allclose(req.radio.frequency_error_hz, 95.0, rtol=1e-12)
    assert_allclose(req.goals.throughput_bps, 12e6, rtol=1e-15)
    assert_allclose(req.goals.max_latency_s, 1e-3, rtol=1e-15)
    # defaults filled in from SCHEMA
    assert req.environment.propagation_speed_mps == 299_792_458.0  # SI brochure 9th ed.: exact
    assert req.search.spacing_family == "auto"  # default: 15 kHz x 2^mu where it meets the window


def test_profile_file_is_found_beside_the_requirement_file(monkeypatch, tmp_path):
    """A relative profile_file is relative to the TOML file, not to the working folder."""
    monkeypatch.chdir(tmp_path)
    req = load_requirements(EXAMPLES / "harbour_crane.toml")
    assert req.environment.profile_file == str((EXAMPLES / "harbour_crane_taps.csv").resolve())


def test_replace_sets_one_si_value():
    req = requirements_from_mapping(BASE, "site.toml")
    faster = req.replace("environment.max_speed", 50.0)
    assert faster.environment.max_speed_mps == 50.0
    assert req.environment.max_speed_mps == pytest.approx(120 / 3.6, rel=1e-15)  # the original is untouched
    assert faster.radio == req.radio


# --- hand-written bad inputs ----------------------------------------------------------------

BAD_FILES = [
    # id, mapping, dotted key path in the message, advice words
    ("unknown key", changed(("environment.max_sped", "1 m/s")), "environment.max_sped", "did you mean 'max_speed'"),
    ("unknown table", changed(("enviroment", {"carrier": "1 GHz"})), "enviroment", "did you mean 'environment'"),
    ("table is a value", changed(("radio", 3)), "radio", "expected a table"),
    ("missing carrier", changed(("environment.carrier", None)), "environment.carrier", "missing"),
    ("both speed and doppler", changed(("environment.max_doppler", "100 Hz")), "environment.max_speed", "both"),
    ("neither speed nor doppler", changed(("environment.max_speed", None)), "environment.max_speed", "neither"),
    ("wrong dimension", changed(("environment.max_speed", "3 km")), "environment.max_speed", "expected a speed"),
    ("bare number", changed(("environment.carrier", 2e9)), "environment.carrier", "with its unit"),
    ("no delay", changed(("environment.max_excess_delay", None)), "environment", "no delay given"),
    ("unknown profile", changed(("environment.max_excess_delay", None), ("environment.profile", "EVX")),
     "environment.profile", "did you mean 'EVA'"),
    ("profile and max delay", changed(("environment.profile", "EVA")), "environment.max_excess_delay",
     "a profile already fixes"),
    ("missing profile file", changed(("environment.max_excess_delay", None), ("environment.profile_file", "taps.csv")),
     "environment.profile_file", "not found"),
    ("profile file with a NUL", changed(("environment.max_excess_delay", None), ("environment.profile_file", "a\0b")),
     "environment.profile_file", "file name"),
    ("profile file name too long", changed(("environment.max_excess_delay", None),
                                           ("environment.profile_file", "a" * 5000)),
     "environment.profile_file", "file name"),
    ("rms above half the span", changed(("environment.rms_delay_spread", "2.6 us")), "environment.rms_delay_spread",
     "impossible"),
    ("rician without k", changed(("environment.doppler_spectrum", "rician")), "environment.k_factor", "K-factor"),
    ("tracked without k", changed(("environment.doppler_spectrum", "tracked")), "environment.k_factor", "K-factor"),
    ("unknown spectrum", changed(("environment.doppler_spectrum", "clasical")), "environment.doppler_spectrum",
     "did you mean 'classical'"),
    ("missing bandwidth", changed(("radio.bandwidth", None)), "radio.bandwidth", "missing"),
    ("missing snr", changed(("radio.snr", None)), "radio.snr", "missing"),
    ("carrier mistaken for sample rate", changed(("radio.bandwidth", "5 GHz")), "radio.bandwidth", "carrier"),
    ("linewidth and mask", changed(("radio.oscillator_linewidth", "100 Hz"),
                                   ("radio.phase_noise", [["1 kHz", "-80 dBc/Hz"], ["1 MHz", "-120 dBc/Hz"]])),
     "radio.phase_noise", "keep one"),
    ("mask of one pair", changed(("radio.phase_noise", [["1 kHz", "-80 dBc/Hz"]])), "radio.phase_noise",
     "at least two"),
    ("mask not a list", changed(("radio.phase_noise", "-80 dBc/Hz")), "radio.phase_noise", "at least two"),
    ("mask pair of three", changed(("radio.phase_noise", [["1 kHz", "-80 dBc/Hz", 3], ["1 MHz", "-120 dBc/Hz"]])),
     "radio.phase_noise[0]", "pair"),
    ("mask offset not a frequency", changed(("radio.phase_noise", [["1 ms", "-80 dBc/Hz"], ["1 MHz", "-120 dBc/Hz"]])),
     "radio.phase_noise[0]", "expected a frequency"),
    ("mask level not dB", changed(("radio.phase_noise", [["1 kHz", "-80 dBm"], ["1 MHz", "-120 dBc/Hz"]])),
     "radio.phase_noise[0]", "dB"),
    ("mask level positive", changed(("radio.phase_noise", [["1 kHz", "-80 dBc/Hz"], ["1 MHz", "10 dBc/Hz"]])),
     "radio.phase_noise[1]", "between -250 and 0"),
    ("mask offsets not increasing", changed(("radio.phase_noise", [["1 MHz", "-80 dBc/Hz"], ["1 kHz", "-120 dBc/Hz"]])),
     "radio.phase_noise", "increase"),
    ("ppm too large", changed(("radio.frequency_error", "2000 ppm")), "radio.frequency_error", "frequency error"),
    ("range family without bounds", changed(("search.spacing_family", "range")), "search.spacing_min",
     "spacing_min < spacing_max"),
    ("range family upside down", changed(("search.spacing_family", "range"), ("search.spacing_min", "200 kHz"),
                                         ("search.spacing_max", "1 kHz")), "search.spacing_min", "spacing_min < spacing_max"),
    ("list family without list", changed(("search.spacing_family", "list")), "search.spacings", "spacings"),
    ("exponents of one", changed(("search.spacing_exponents", [3])), "search.spacing_exponents", "[lowest, highest]"),
    ("exponents upside down", changed(("search.spacing_exponents", [6, -4])), "search.spacing_exponents",
     "[lowest, highest]"),
    ("fft sizes upside down", changed(("search.min_fft_size", 4096), ("search.max_fft_size", 1024)),
     "search.min_fft_size", "max_fft_size"),
    ("unknown pilot pattern", changed(("search.pilot_patterns", ["rectangle"])), "search.pilot_patterns",
     "did you mean 'rectangular'"),
    ("empty pattern list", changed(("search.pilot_patterns", [])), "search.pilot_patterns", "non-empty list"),
    ("unknown objective", changed(("goals.objective", "speed")), "goals.objective", "expected one of"),
    ("unknown efficiency model", changed(("rules.efficiency_model", "shanon")), "rules.efficiency_model",
     "did you mean 'shannon'"),
    ("missing mcs table", changed(("rules.mcs_table", "mcs.csv")), "rules.mcs_table", "not found"),
    ("key with a line break", changed(("environment.max\nspeed", "1 m/s")), "environment.'max\\nspeed'", "unknown key"),
]


@pytest.mark.parametrize("data, dotted, advice", [case[1:] for case in BAD_FILES], ids=[c[0] for c in BAD_FILES])
def test_bad_requirement_files_name_file_and_key(write_toml, data, dotted, advice):
    path = write_toml(data)
    with pytest.raises(InputError) as error:
        load_requirements(path)
    assert_one_located_line(error, path, dotted)
    assert advice in str(error.value)


def test_ppm_needs_no_carrier_order():
    """A ppm error is taken of the carrier even though [radio] is read after [environment]."""
    req = requirements_from_mapping(changed(("radio.frequency_error", "0.1 ppm")), "site.toml")
    assert_allclose(req.radio.frequency_error_hz, 200.0, rtol=1e-12)  # 0.1e-6 x 2 GHz


# --- generated from SCHEMA: out-of-range values for every numeric key --------------------------


def _bad_values(key):
    """(label, raw value) pairs that must be refused for ``key``, from its declared bounds."""
    out = []
    if key.kind in ("quantity", "quantity_list"):
        unit = SI_UNIT[key.dimension]
        out += [("nan", f"nan {unit}"), ("inf", f"inf {unit}"), ("bare number", 1.0), ("unitless text", "12")]
        if key.low >= 0:
            out.append(("negative", f"-1 {unit}"))
        if key.low_open or key.low > 0:
            out.append(("zero", f"0 {unit}"))
        if key.low > 0:
            out.append(("below range", f"{key.low / 2!r} {unit}"))
        out.append(("absurd", f"{key.high * 10!r} {unit}"))
        if key.kind == "quantity_list":
            out = [(label, [value]) for label, value in out] + [("empty list", []), ("not a list", "15 kHz")]
    elif key.kind == "db":
        out += [("nan", math.nan), ("inf", math.inf), ("nan text", "nan dB"), ("text", "high")]
        if math.isfinite(key.high):
            out.append(("above range", f"{key.high + 1!r} dB"))
        if math.isfinite(key.low):
            out.append(("below range", f"{key.low - 1!r} dB"))
    elif key.kind == "number":
        out += [("nan", math.nan), ("inf", math.inf), ("-inf", -math.inf), ("text", "0.5"), ("bool", True),
                ("above range", key.high * 2 + 1)]
        out.append(("at open low end" if key.low_open else "below range", key.low if key.low_open else key.low - 1))
    elif key.kind == "integer":
        out += [("fraction", 3.5), ("text", "3"), ("bool", True), ("above range", int(key.high) + 1),
                ("below range", int(key.low) - 1)]
    elif key.kind == "integer_list":
        out += [("fraction", [1.5, 2]), ("above range", [int(key.high) + 1]), ("below range", [int(key.low) - 1]),
                ("empty", []), ("not a list", 3)]
    elif key.kind == "offset":
        out += [("negative", "-1 Hz"), ("nan", "nan Hz"), ("inf", "inf Hz"), ("absurd", f"{key.high * 10!r} Hz"),
                ("absurd ppm", "2000 ppm"), ("wrong dimension", "3 m"), ("bare number", 40)]
    elif key.kind in ("choice", "choice_list"):
        out += [("unknown name", "no-such-thing"), ("number", 3)]
    elif key.kind == "path":
        out += [("number", 3), ("empty", ""), ("missing", "no-such-file.csv")]
    elif key.kind == "mask":
        out += [("empty", []), ("pairs of numbers", [[1, 2], [3, 4]])]
    return out


GENERATED = [pytest.param(key, value, id=f"{key.path}-{label}") for key in SCHEMA for label, value in _bad_values(key)]


def test_every_schema_key_gets_generated_cases():
    """A new kind in SCHEMA must get bad values here too."""
    assert {key.path for key in SCHEMA} == {p.values[0].path for p in GENERATED}


@pytest.mark.parametrize("key, value", GENERATED)
def test_out_of_range_values_are_refused_for_every_key(write_toml, key, value):
    data = changed((key.path, value))
    if key.section == "environment" and key.name in ("profile", "profile_file"):
        data["environment"].pop("max_excess_delay")  # a profile may not come with a max excess delay
    path = write_toml(data)
    with pytest.raises(InputError) as error:
        load_requirements(path)
    assert_one_located_line(error, path, key.path)


def test_every_physical_key_has_a_finite_upper_bound():
    """An absurd value must be refused (a typo of 1000x), so no quantity key is unbounded above."""
    for key in SCHEMA:
        if key.kind in ("quantity", "quantity_list", "offset"):
            assert math.isfinite(key.high), key.path


def test_every_numeric_rule_default_names_its_source():
    for key in SCHEMA:
        if key.section == "rules" and key.kind in ("number", "db") and key.default is not None:
            assert key.source, key.path


def test_schema_declares_each_key_once():
    paths = [key.path for key in SCHEMA]
    assert len(paths) == len(set(paths))
    assert {key.section for key in SCHEMA} == set(SECTIONS)
    assert all(key.meaning for key in SCHEMA)


# --- files that are not requirement files -----------------------------------------------------


@pytest.mark.parametrize("content, advice", [
    (b"[environment]\ncarrier = [1,\n", "not valid TOML"),
    (b"this is not toml at all\n", "not valid TOML"),
    (b"carrier = \"2 GHz\"\ncarrier = \"3 GHz\"\n", "not valid TOML"),  # a key given twice
    (b"\xff\xfe[\x00e\x00n\x00v\x00]\x00", "not UTF-8"),  # UTF-16 with a byte-order mark
    (b"[environment]\ncarrier = \"2 \xe9GHz\"\n", "not UTF-8"),  # Latin-1
])
def test_files_that_are_not_toml(write_toml, content, advice):
    path = write_toml(content)
    with pytest.raises(InputError) as error:
        load_requirements(path)
    assert_one_located_line(error, path, "")
    assert advice in str(error.value)


def test_an_empty_file_lacks_the_carrier(write_toml):
    path = write_toml("")
    with pytest.raises(InputError) as error:
        load_requirements(path)
    assert_one_located_line(error, path, "environment.carrier")


def test_a_folder_is_not_a_requirement_file(tmp_path):
    with pytest.raises(InputError) as error:
        load_requirements(tmp_path)
    assert_one_located_line(error, tmp_path, "")
    assert "folder" in str(error.value)


def test_a_missing_file(tmp_path):
    path = tmp_path / "nowhere.toml"
    with pytest.raises(InputError) as error:
        load_requirements(path)
    assert_one_located_line(error, path, "")
    assert "cannot be read" in str(error.value)


def test_a_path_through_a_file_cannot_be_read(write_toml):
    """A read that fails at the system level (here ENOTDIR) is one line too."""
    path = write_toml(BASE) / "inner.toml"
    with pytest.raises(InputError) as error:
        load_requirements(path)
    assert_one_located_line(error, path, "")
    assert "cannot be read" in str(error.value)


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0, reason="root reads files without permission")
def test_an_unreadable_file(write_toml):
    path = write_toml(BASE)
    path.chmod(0)
    try:
        with pytest.raises(InputError) as error:
            load_requirements(path)
    finally:
        path.chmod(0o600)
    assert_one_located_line(error, path, "")
    assert "cannot be read" in str(error.value)


# --- properties: nothing but InputError, whatever the content ---------------------------------

_UNITS = ["Hz", "kHz", "GHz", "s", "us", "ms", "m/s", "km/h", "m", "km", "bit/s", "Mbit/s", "dB", "dBc/Hz", "ppm", ""]
_numbers = st.one_of(st.integers(min_value=-10**30, max_value=10**30),
                     st.floats(allow_nan=True, allow_infinity=True))
_quantity_text = st.builds(lambda x, u: f"{x!r} {u}".strip(), _numbers, st.sampled_from(_UNITS))
_scalars = st.one_of(_quantity_text, _numbers, st.booleans(), st.text(max_size=12),
                     st.sampled_from(["EVA", "TDL-A", "classical", "rician", "range", "list", "lmmse", "smooth"]))
_values = st.recursive(_scalars, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                         st.dictionaries(st.text(max_size=5), inner, max_size=2)),
                       max_leaves=8)
_keys = st.sampled_from([key.path for key in SCHEMA] + ["environment.max_sped", "radio.colour", "extra.table"])
_mappings = st.lists(st.tuples(_keys, _values), max_size=6)


@given(edits=_mappings)
@settings(max_examples=150, deadline=None)
def test_random_mappings_load_or_raise_input_error(edits):
    """BASE with random keys from SCHEMA set to random values: loads, or one located line."""
    data = changed()
    for dotted, value in edits:
        section, name = dotted.split(".")
        data.setdefault(section, {})[name] = value
    try:
        req = requirements_from_mapping(data, "fuzz.toml")
    except InputError as error:
        assert str(error).startswith("fuzz.toml")
        assert "\n" not in str(error)
    else:
        assert req.environment.carrier_hz > 0


@given(text=st.text(max_size=200))
@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_random_file_content_loads_or_raises_input_error(tmp_path, text):
    path = tmp_path / "fuzz.toml"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    try:
        load_requirements(path)
    except InputError as error:
        assert str(path) in str(error)
        assert "\n" not in str(error)


@given(raw=st.binary(max_size=100))
@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_random_bytes_load_or_raise_input_error(tmp_path, raw):
    path = tmp_path / "fuzz.toml"
    path.write_bytes(raw)
    try:
        load_requirements(path)
    except InputError as error:
        assert "\n" not in str(error)


@given(edits=_mappings)
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_random_mappings_written_as_toml_load_or_raise_input_error(tmp_path, edits):
    """The same through a real file (values TOML cannot hold make the file invalid TOML: still one line)."""
    data = changed()
    for dotted, value in edits:
        section, name = dotted.split(".")
        data.setdefault(section, {})[name] = value
    path = tmp_path / "fuzz.toml"
    try:
        path.write_text(toml_text(data), encoding="utf-8", errors="surrogatepass")
    except (ValueError, TypeError):  # a dict key that is not a string: not writable as TOML
        return
    try:
        load_requirements(path)
    except InputError as error:
        assert "\n" not in str(error)


# --- the requirement file is only ever read ----------------------------------------------------


@pytest.mark.parametrize("name, commands", [
    ("harbour_crane.toml", [["env"], ["env", "--json"], ["check", "--preset", "nr-mu1", "--json"],
                            ["check", "--preset", "nr-mu1"], ["solve", "--json"]]),
])
def test_the_requirement_file_is_never_written(examples_copy, name, commands):
    path = examples_copy / name
    before = {p.name: (p.stat().st_mtime_ns, p.read_bytes()) for p in examples_copy.iterdir() if p.is_file()}
    load_requirements(path)
    for command in commands:
        argv = [command[0], str(path), *command[1:]]
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
            status = main(argv)
        assert status in (0, 1), argv
    after = {p.name: (p.stat().st_mtime_ns, p.read_bytes()) for p in examples_copy.iterdir() if p.is_file()}
    assert after == before  # same files, same bytes, same modification times: nothing written beside them either
