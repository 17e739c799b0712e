"""Fuzz suite: generated inputs, as a careless or hostile user would write them, against the README's contract.

Hypothesis strategies build requirement files, design files, sites files, profile files, unit strings,
output paths and quantity-cache contents; each generated input runs the command line in-process
(``numerology.cli.main``), and for every one of them the test asserts:

1. exit status 0, 1 or 2 (never another, never an exception out of ``main``);
2. no traceback and no warning on stderr (warnings are errors in this test run);
3. exit 2: exactly one line on stderr, starting ``numerology: ``, and nothing on stdout;
   exit 0 or 1: nothing on stderr but the lines a command documents (a sweep's row problems);
4. no input file changed (bytes compared before and after);
5. no partial output: after exit 2 no output asked for exists, after 0 or 1 all exist; no temporary file left;
6. memory under :data:`MEMORY_CAP`: the peak resident memory of this process during the case (VmHWM, reset
   before each case; ``getrusage`` where the system keeps no such peak), so that a case beyond the cap fails the
   case that caused it; the heaviest refusals also run in a fresh
   process whose own peak is measured (:func:`test_heavy_requests_stay_under_the_cap_in_a_fresh_process`);
7. time: each case within :data:`CASE_SECONDS` (an alarm; a case past it fails as a hang).

The examples are derandomised (the same in every run), so the suite's time in CI is bounded (about a minute).
For a deeper search on a workstation: ``NUMEROLOGY_FUZZ_SCALE=20 NUMEROLOGY_FUZZ_RANDOM=1 python -m pytest
tests/test_fuzz.py`` (twenty times the examples, new ones in every run).
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from hypothesis.errors import InvalidArgument

from conftest import EXAMPLES, Timeout, alarm, requirement_data, toml_text
from numerology.cli import main

#: Peak resident memory allowed for any case, bytes (the estimated-work budget is 2 GiB; a run refused by it
#: must stay far below, and the examples run in about 150 MB).
MEMORY_CAP = 1536 << 20
#: Longest a case may take, s (a refused request takes well under a second; the slowest valid case here, an
#: acoustic request searching 7.7e7 candidates whose exact estimation error is evaluated for about 1.6e4 of them
#: before the solver's work budget, about 100 s on one core: a known cost of the exact estimation model).
CASE_SECONDS = 300
SCALE = int(os.environ.get("NUMEROLOGY_FUZZ_SCALE", "1"))
RANDOM = bool(os.environ.get("NUMEROLOGY_FUZZ_RANDOM"))

HARBOUR = EXAMPLES / "harbour_crane.toml"
RAIL = EXAMPLES / "rail_corridor.toml"
EXAMPLE_FILES = sorted(EXAMPLES.glob("*.toml"))
DESIGN = EXAMPLES / "designs" / "urban-small-cell-30khz.toml"


def fuzz_settings(examples: int):
    return settings(max_examples=examples * SCALE, deadline=None, derandomize=not RANDOM, database=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.filter_too_much, HealthCheck.large_base_example])


# --- the contract ---------------------------------------------------------------------------------------------


def _reset_peak() -> None:
    """Start a new peak of this process's resident memory (Linux: writing 5 to clear_refs resets VmHWM), so that
    a case is measured by its own peak, not by the heaviest test that ran before it in the same process. The
    model's in-process caches are emptied first: a command run starts without them, and what earlier tests left
    in them would count against every case."""
    import gc

    from numerology import link

    for cache in (link._WEIGHTS_CACHE, link._GUARD_CACHE, link._MASK_CACHE):
        cache.clear()
    gc.collect()
    with contextlib.suppress(OSError):
        Path("/proc/self/clear_refs").write_text("5")


def _peak_bytes() -> int:
    """Peak resident memory since :func:`_reset_peak` (VmHWM), or of the whole process where that is not kept."""
    with contextlib.suppress(OSError, ValueError):
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024  # kB
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kB on Linux


def _snapshot(paths) -> dict:
    out = {}
    for path in paths:
        try:
            out[str(path)] = Path(path).read_bytes() if Path(path).is_file() else None
        except OSError:
            out[str(path)] = None
    return out


def contract(argv, inputs=(), outputs=(), folder=None, documented=()):
    """Run one generated case and assert the contract of the module docstring; returns (status, out, err).

    ``documented``: prefixes of stderr lines a command writes for valid input (a sweep's row problems).
    """
    argv = [str(a) for a in argv]
    before = _snapshot(inputs)
    fresh = [Path(p) for p in outputs if not os.path.lexists(p)]
    out, err = io.StringIO(), io.StringIO()
    _reset_peak()
    start = _peak_bytes()  # what the process holds already (earlier tests' objects): the case adds to it
    try:
        with alarm(CASE_SECONDS), contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            status = main(argv)
    except Timeout:  # hypothesis does not report the input of a case that hangs: keep its files
        kept = Path(tempfile.mkdtemp(prefix="numerology-fuzz-hang-"))
        for path in inputs:
            if Path(path).is_file():
                (kept / Path(path).name).write_bytes(Path(path).read_bytes())
        raise Timeout(f"{argv} took longer than {CASE_SECONDS} s; its input files are kept in {kept}") from None
    out, err = out.getvalue(), err.getvalue()
    assert status in (0, 1, 2), (argv, status, err)
    assert "Traceback" not in err and "Warning" not in err, (argv, err)
    if status == 2:
        assert out == "" and err.startswith("numerology: ") and err.count("\n") == 1 and err.endswith("\n"), \
            (argv, err)
        assert not any(os.path.lexists(p) for p in fresh), (argv, "partial output", err)
    else:
        stray = [line for line in err.splitlines() if not line.startswith(tuple(documented))]
        assert stray == [], (argv, err)
        assert all(os.path.lexists(p) for p in fresh), (argv, "missing output")
    assert _snapshot(inputs) == before, (argv, "an input file changed")
    if folder is not None:
        assert not [p for p in Path(folder).iterdir() if p.name.startswith(".numerology-")], (argv, "temporary file")
    assert _peak_bytes() - start <= MEMORY_CAP, (argv, f"peak memory {(_peak_bytes() - start) >> 20} MiB over the start")
    with contextlib.suppress(InvalidArgument):  # outside a generated case (a fixture) there is nothing to count
        event(f"exit {status}")  # --hypothesis-show-statistics shows how often each outcome was reached
    return status, out, err


# --- strategies -------------------------------------------------------------------------------------------------

NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**30, 10**30).map(str),
    st.from_regex(r"[-+]?[0-9]{1,4}([.,][0-9]{1,4})?([eE][-+]?[0-9]{1,3})?", fullmatch=True),
    st.from_regex("[0-9]{1,3}([, _'\u202f][0-9]{3}){1,3}", fullmatch=True),
    st.sampled_from(["nan", "inf", "-inf", "1e400", "10**99", "10^9", "1\u2079\u2079\u2079\u2079\u2079\u2079",
                     "\u0663", "\u00b3", "0", "-0", ".5", "5.", "0x10", "1_0"]),
)
UNITS = st.sampled_from([
    "Hz", "kHz", "MHz", "GHz", "THz", "s", "ms", "us", "\u00b5s", "\u03bcs", "ns", "m/s", "km/h", "kph", "kmph",
    "mph", "mi/h", "knot", "Mbit/s", "bit/s", "Mbps", "dB", "dBc/Hz", "ppm", "ppb", "%", "", "m", "km", "kft",
    "Mmph", "parsec", "Hz Hz", "1/s", "s**-1", "(Hz)", "Hz*2", "Hz/0", "GHz\u2079", "\u03a9", "Hz\n", "c",
    "furlong/fortnight", "kh", "Hz * 10\u2079\u2079\u2079\u2079\u2079\u2079\u2079\u2079", "mile_per_hour",
])
BLANKS = st.sampled_from(["", " ", "  ", "\t", "\u00a0", "\u202f"])
UNIT_TEXT = st.one_of(st.builds(lambda n, b, u: f"{n}{b}{u}", NUMBERS, BLANKS, UNITS), st.text(max_size=90))
SCALARS = st.one_of(st.booleans(), st.integers(-10**20, 10**20), st.floats(allow_nan=True, allow_infinity=True),
                    UNIT_TEXT, st.text(max_size=12))
def _containers(inner):
    """Lists and tables of ``inner`` values (the recursive step of VALUES and JSON_VALUES)."""
    return st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=3)


VALUES = st.recursive(SCALARS, _containers, max_leaves=6)


def _schema_keys(sections):
    from numerology.requirements import SCHEMA

    return [(k.section, k.name) for k in SCHEMA if k.section in sections]


SI_UNITS = {"frequency": "Hz", "time": "s", "speed": "m/s", "bitrate": "bit/s", "length": "m"}


def _plausible(key):
    """Values a key accepts, from one end of its declared range to the other (extremes included)."""
    low = key.low if math.isfinite(key.low) else -1e3
    high = key.high if math.isfinite(key.high) else 1e13
    if key.section == "search" and key.kind in ("integer", "integer_list"):
        high = min(high, 64)  # a search space this suite can afford to run
    numbers = st.one_of(st.floats(low, high), st.sampled_from([low, high, (low + high) / 2]),
                        st.floats(low, min(high, low + 1e-3)))
    if key.kind == "quantity":
        return numbers.map(lambda x: f"{x!r} {SI_UNITS[key.dimension]}")
    if key.kind == "quantity_list":
        return st.lists(numbers.map(lambda x: f"{x!r} {SI_UNITS[key.dimension]}"), min_size=1, max_size=4)
    if key.kind in ("db", "number"):
        return numbers
    if key.kind == "integer":
        return st.integers(int(math.ceil(low)), int(high))
    if key.kind == "integer_list":
        return st.lists(st.integers(int(math.ceil(low)), int(high)), min_size=1, max_size=3)
    if key.kind == "choice":
        return st.sampled_from(key.choices or ("EVA", "EPA", "ETU", "TDL-A", "TDL-C"))
    if key.kind == "choice_list":
        return st.lists(st.sampled_from(key.choices), min_size=1, max_size=2)
    if key.kind == "offset":
        return st.one_of(st.floats(0, 1e7).map(lambda x: f"{x!r} Hz"), st.floats(0, 1000).map(lambda x: f"{x!r} ppb"))
    if key.kind == "mask":
        return st.lists(st.tuples(st.floats(1, 1e8), st.floats(-250, 0)), min_size=2, max_size=4, unique_by=lambda p: p[0]
                        ).map(lambda pairs: [[f"{f!r} Hz", f"{l!r} dBc/Hz"] for f, l in sorted(pairs)])
    return VALUES


def _edits(sections, hostile=True, leave_out=()):
    """(section, key, value) edits of a requirement table: declared keys with values they accept (often at the ends
    of their ranges) or hostile values, sometimes an unknown key, sometimes a key removed."""
    from numerology.requirements import SCHEMA

    declared = [k for k in SCHEMA if k.section in sections and k.kind != "path" and k.path not in leave_out]
    accepted = st.sampled_from(declared).flatmap(lambda k: st.tuples(st.just((k.section, k.name)), _plausible(k)))
    if not hostile:
        return st.lists(accepted, min_size=1, max_size=4)
    key = st.one_of(st.sampled_from(_schema_keys(sections)),
                    st.tuples(st.sampled_from(sections), st.text(min_size=1, max_size=12)))
    return st.lists(st.one_of(accepted, accepted, st.tuples(key, st.one_of(VALUES, st.just(None)))),
                    min_size=1, max_size=4)


RAW_FILES = st.one_of(
    st.binary(max_size=300),
    st.text(max_size=300),
    st.integers(100, 5000).map(lambda n: "[environment]\nx = " + "[" * n + "]" * n + "\n"),
    st.integers(1, 3).map(lambda n: "a = 1\n" * n + "[environment\n"),
)


#: A raw file (bytes, text, deep nesting, broken TOML) one time in four, else the structured content.
SOMETIMES_RAW = st.one_of(st.none(), st.none(), st.none(), RAW_FILES)


def _write(path: Path, content) -> Path:
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8", errors="surrogatepass")
    return path


@contextlib.contextmanager
def _folder():
    with tempfile.TemporaryDirectory(prefix="numerology-fuzz-") as name:
        yield Path(name)


# --- unit strings -----------------------------------------------------------------------------------------------


@fuzz_settings(200)
@given(text=UNIT_TEXT, dimension=st.sampled_from(["frequency", "time", "speed", "bitrate", "ratio", "length"]))
def test_unit_strings(text, dimension):
    """parse_quantity and parse_db give a finite number or one located InputError line, quickly."""
    from numerology.errors import InputError
    from numerology.units import parse_db, parse_quantity

    for parse in (lambda: parse_quantity(text, dimension, "x"), lambda: parse_db(text, "x")):
        with alarm(20):
            try:
                value = parse()
            except InputError as error:
                assert str(error).startswith("x: ") and "\n" not in str(error)
            else:
                assert math.isfinite(value)


@fuzz_settings(25)
@given(speed=UNIT_TEXT, delay=UNIT_TEXT)
def test_what_if_options(speed, delay):
    contract(["check", HARBOUR, "--preset", "nr-mu1", "--speed", speed, "--delay", delay], inputs=[HARBOUR])


# --- requirement files ------------------------------------------------------------------------------------------


@fuzz_settings(60)
@given(base=st.sampled_from(EXAMPLE_FILES), edits=_edits(["environment", "radio", "goals", "rules", "search"]),
       raw=SOMETIMES_RAW)
def test_requirement_files_env(base, edits, raw):
    with _folder() as folder:
        req = _write(folder / "req.toml", raw if raw is not None else toml_text(requirement_data(base, edits)))
        contract(["env", req, "--json"], inputs=[req], folder=folder)


@fuzz_settings(40)
@given(base=st.sampled_from(EXAMPLE_FILES), edits=_edits(["environment", "radio", "goals", "rules"], hostile=False),
       markdown=st.booleans())
def test_requirement_files_check(base, edits, markdown):
    """Values each key accepts, often at the ends of their ranges: an answer (0 or 1) or one line, never a
    warning or a traceback (finding 9: warnings on extreme but accepted values)."""
    with _folder() as folder:
        req = _write(folder / "req.toml", toml_text(requirement_data(base, edits)))
        outputs = [folder / "note.md"] if markdown else []
        argv = ["check", req, "--preset", "nr-mu1"] + (["--markdown", outputs[0]] if markdown else [])
        contract(argv, inputs=[req], outputs=outputs, folder=folder)


@pytest.mark.xfail(raises=Timeout, strict=False,
                   reason="known open work bound (issue 10): a solve whose exact estimation error must be evaluated "
                          "for 10^4 candidates (fine acoustic spacing ranges) can exceed CASE_SECONDS; every other "
                          "part of the contract (exit status, one-line errors, inputs untouched, memory) still fails "
                          "this test")
@fuzz_settings(8)
@given(base=st.sampled_from(EXAMPLE_FILES), edits=_edits(["environment", "radio", "goals", "rules"], hostile=False,
                                                         leave_out=("rules.estimator",)))
def test_requirement_files_solve(base, edits):
    """The search and, for an infeasible request, its diagnosis with values at the ends of their ranges.

    ``rules.estimator = "linear"`` is left out: on an infeasible request the diagnosis then runs for many minutes
    (45 feasibility searches, each computing the linear estimator's weights per candidate; broadcast_sfn with
    that estimator, for one), a slow path of the estimation code, which is being reworked; it is no contract
    failure, but this suite's time must stay bounded."""
    with _folder() as folder:
        req = _write(folder / "req.toml", toml_text(requirement_data(base, edits)))
        contract(["solve", req, "--top", "1", "--json"], inputs=[req], folder=folder)


SEARCH_EDITS = st.lists(st.one_of(
    st.tuples(st.just("spacing_exponents"), st.lists(st.integers(-25, 25), min_size=0, max_size=3)),
    st.tuples(st.just("spacing_steps"), st.integers(-5, 200_000)),
    st.tuples(st.just("symbols_per_slot"), st.lists(st.integers(-2, 20_000), max_size=100)),
    st.tuples(st.just("max_pilot_freq_spacing"), st.integers(0, 5000)),
    st.tuples(st.just("max_pilot_time_spacing"), st.integers(0, 5000)),
    st.tuples(st.just("max_fft_size"), st.integers(0, 2**23)),
    st.tuples(st.just("fft_sizes"), st.sampled_from(["smooth", "powers_of_two", "primes"])),
    st.tuples(st.just("spacings"), st.lists(UNIT_TEXT, max_size=5)),
), max_size=3)


@fuzz_settings(12)
@given(edits=SEARCH_EDITS, family=st.sampled_from([None, "range", "list"]))
def test_search_tables(edits, family):
    """A search table either fits the work budget (and then the space is small here: solve runs) or is refused
    at once, naming what to narrow. The estimate bounds the space the solver reports."""
    from numerology import api, budget
    from numerology.errors import InputError

    data = requirement_data(RAIL, [])
    search = data.setdefault("search", {})
    if family:
        search["spacing_family"] = family
        search.update({"spacing_min": "5 kHz", "spacing_max": "200 kHz"} if family == "range" else {})
    search.update(dict(edits))
    with _folder() as folder:
        req = _write(folder / "req.toml", toml_text(data))
        try:
            size = budget.search_size(api.load(req))
        except InputError:
            size = None  # the file is refused: the command must say so in one line
        if size is not None and 5_000_000 < size.candidates <= budget.MAX_CANDIDATES \
                and size.memory_bytes <= budget.MEMORY_BYTES:
            return  # within the budget but minutes long: the suite's time is bounded, so this one is not run
        status, out, err = contract(["solve", req, "--json", "--top", "1"], inputs=[req], folder=folder)
        if status in (0, 1):
            assert json.loads(out)["search"]["candidates"] <= size.candidates  # the estimate bounds the space


# --- design files -----------------------------------------------------------------------------------------------

DESIGN_KEYS = ["name", "subcarrier_spacing", "fft_size", "sample_rate", "cp_samples", "cp", "used_subcarriers",
               "symbols_per_slot", "reserved_subcarriers", "cp_extra_samples", "cp_extra_period", "source", "pilot"]


DESIGN_VALUES = {
    "subcarrier_spacing": st.floats(1, 1e7).map(lambda x: f"{x!r} Hz"),
    "fft_size": st.one_of(st.sampled_from([2**k for k in range(3, 17)]), st.integers(8, 70_000)),
    "cp_samples": st.integers(0, 5000), "used_subcarriers": st.integers(1, 60_000),
    "symbols_per_slot": st.integers(1, 100), "reserved_subcarriers": st.floats(0, 100),
    "cp_extra_samples": st.integers(0, 100), "cp_extra_period": st.floats(1e-6, 1).map(lambda x: f"{x!r} s"),
    "cp": st.floats(0, 1e-3).map(lambda x: f"{x!r} s"), "name": st.text(max_size=20),
}
PLAUSIBLE_DESIGN_EDITS = st.sampled_from(sorted(DESIGN_VALUES)).flatmap(
    lambda k: st.tuples(st.just(k), DESIGN_VALUES[k]))
PLAUSIBLE_PILOTS = st.fixed_dictionaries({"freq_spacing": st.integers(1, 50), "time_spacing": st.integers(1, 40),
                                          "shift": st.integers(0, 10)})


@fuzz_settings(40)
@given(edits=st.lists(st.one_of(PLAUSIBLE_DESIGN_EDITS, PLAUSIBLE_DESIGN_EDITS, st.tuples(
           st.one_of(st.sampled_from(DESIGN_KEYS), st.text(max_size=10)), st.one_of(VALUES, st.just(None)))),
           max_size=4),
       pilot=st.one_of(st.none(), PLAUSIBLE_PILOTS, st.dictionaries(
           st.sampled_from(["freq_spacing", "time_spacing", "shift", "x"]), st.one_of(st.integers(-3, 10**6), VALUES),
           max_size=3)),
       raw=SOMETIMES_RAW, command=st.sampled_from(["check", "check", "verify"]))
def test_design_files(edits, pilot, raw, command):
    data = tomllib.loads(DESIGN.read_text(encoding="utf-8"))
    data.pop("sample_rate", None)  # else almost every spacing or FFT size edit contradicts it
    for key, value in edits:
        if value is None:
            data.pop(key, None)
        else:
            data[key] = value
            if key == "cp":  # a duration instead of the count, not both (that is one refusal, tried often enough)
                data.pop("cp_samples", None)
    if pilot is not None:
        data["pilot"] = pilot
    with _folder() as folder:
        design = _write(folder / "design.toml", raw if raw is not None else toml_text(data))
        argv = [command, HARBOUR, "--design", design] + (["--frames", "2"] if command == "verify" else [])
        contract(argv, inputs=[design, HARBOUR], folder=folder)


# --- sites files ------------------------------------------------------------------------------------------------

GOOD_COLUMNS = ["site", "max_speed [km/h]", "max_doppler [Hz]", "max_excess_delay [us]", "rms_delay_spread [ns]",
                "profile", "carrier [GHz]", "snr [dB]"]
BAD_COLUMNS = st.sampled_from(["max_speed [kmph]", "max_speed", "carrier [G Hz]", "snr", "carrier [GHz\u00b2]",
                               "bogus [m]", "site", "rms_delay_spread [n\u2079s]", "max_speed [1,5 km/h]"])
SITE_HEADERS = st.one_of(st.lists(st.sampled_from(GOOD_COLUMNS), min_size=1, max_size=5, unique=True),
                         st.lists(st.sampled_from(GOOD_COLUMNS), min_size=1, max_size=5, unique=True),
                         st.lists(st.one_of(st.sampled_from(GOOD_COLUMNS), BAD_COLUMNS), min_size=1, max_size=6))
PLAUSIBLE_CELLS = st.one_of(st.floats(0, 500).map(lambda x: f"{x:.4g}"), st.sampled_from(["", "EVA", "TDL-C", "none"]))
HOSTILE_CELLS = st.one_of(NUMBERS, st.sampled_from(["=1+2", "+cmd", "@SUM(A1)", "-3", '"a, b"', '"quoted\nline"', '"',
                                                    "nan", "inf", "[/x]", "[bold]b", ":fire:", "\x1b[31mred"]),
                          st.text(max_size=8))
CELLS = st.one_of(PLAUSIBLE_CELLS, PLAUSIBLE_CELLS, PLAUSIBLE_CELLS, HOSTILE_CELLS)


@fuzz_settings(40)
@given(header=SITE_HEADERS, rows=st.lists(st.one_of(st.lists(CELLS, min_size=1, max_size=7),
                                                     st.lists(PLAUSIBLE_CELLS, min_size=5, max_size=5)), max_size=12), out=st.booleans(), raw=SOMETIMES_RAW)
def test_sites_files(header, rows, out, raw):
    with _folder() as folder:
        text = raw if raw is not None else "\n".join([",".join(header)] + [",".join(r) for r in rows]) + "\n"
        sites = _write(folder / "sites.csv", text)
        outputs = [folder / "result.csv", folder / "result.csv.json"] if out else []
        argv = ["sweep", HARBOUR, "--sites", sites, "--preset", "nr-mu1"] + (["--out", outputs[0]] if out else [])
        contract(argv, inputs=[sites, HARBOUR], outputs=outputs, folder=folder, documented=[f"numerology: {sites}:"])


# --- profile and MCS files --------------------------------------------------------------------------------------


@fuzz_settings(30)
@given(unit=st.one_of(st.sampled_from(["ns", "us", "ms"]), UNITS, UNIT_TEXT),
       rows=st.lists(st.one_of(st.tuples(st.floats(0, 5000).map(repr), st.floats(-80, 10).map(repr)),
                               st.tuples(CELLS, CELLS)), min_size=1, max_size=12),
       raw=SOMETIMES_RAW, command=st.sampled_from(["env", "check"]))
def test_profile_files(unit, rows, raw, command):
    with _folder() as folder:
        text = raw if raw is not None else f"delay [{unit}],power [dB]\n" + "".join(f"{a},{b}\n" for a, b in rows)
        taps = _write(folder / "taps.csv", text)
        req = _write(folder / "req.toml", toml_text(requirement_data(HARBOUR, [(("environment", "profile_file"),
                                                                                 str(taps))])))
        argv = [command, req] + (["--preset", "nr-mu1"] if command == "check" else ["--json"])
        contract(argv, inputs=[taps, req], folder=folder)


@fuzz_settings(20)
@given(rows=st.lists(st.one_of(
    st.tuples(st.text(min_size=1, max_size=6).filter(lambda t: "," not in t and "\n" not in t and '"' not in t),
              st.integers(1, 10).map(str), st.sampled_from(["1/2", "3/4", "5/6", "0.9", "1", "0", "2"]),
              st.floats(-20, 60).map(repr)),
    st.tuples(CELLS, CELLS, CELLS, CELLS)), max_size=10), raw=SOMETIMES_RAW)
def test_mcs_tables(rows, raw):
    with _folder() as folder:
        header = "name,bits_per_symbol,code_rate,required_sinr [dB]\n"
        table = _write(folder / "mcs.csv", raw if raw is not None else header + "".join(",".join(r) + "\n" for r in rows))
        req = _write(folder / "req.toml", toml_text(requirement_data(RAIL, [(("rules", "mcs_table"), str(table))])))
        contract(["check", req, "--preset", "nr-mu1", "--json"], inputs=[table, req], folder=folder)


# --- output paths -----------------------------------------------------------------------------------------------

PATH_NAMES = st.one_of(
    st.text(min_size=1, max_size=40).map(lambda t: t + ".md"),
    st.integers(200, 320).map(lambda n: "n" * n + ".md"),
    st.sampled_from(["/proc/x.md", "/dev/null", "/", ".", "..", "no/such/folder/x.md", "x\0.md", "x.MD", "x.txt",
                     "req.toml", "design.md", "sites.csv", "loop.md", "link-to-req.md", "hard-design.md", "folder.md",
                     "result.csv.json", "fifo.md", "", " ", "x.md/", "~/x.md"]),
)


@fuzz_settings(40)
@given(name=PATH_NAMES, option=st.sampled_from(["--markdown", "--markdown", "--markdown", "--out", "--out", "--plot"]),
       plot_suffix=st.sampled_from([".svg", ".png", ""]))
def test_output_paths(name, option, plot_suffix):
    with _folder() as folder:
        req = _write(folder / "req.toml", toml_text(requirement_data(HARBOUR, [])))
        design = _write(folder / "design.md", DESIGN.read_text(encoding="utf-8"))
        sites = _write(folder / "sites.csv", (EXAMPLES / "harbour_sites.csv").read_text(encoding="utf-8"))
        (folder / "folder.md").mkdir()
        os.symlink(folder / "loop.md", folder / "loop.md")
        os.symlink(req, folder / "link-to-req.md")
        os.link(design, folder / "hard-design.md")
        os.mkfifo(folder / "fifo.md")
        if option == "--plot":
            name = name.removesuffix(".md") + plot_suffix
        if option == "--out":
            name = name.removesuffix(".md") + ".csv"
        target = name if name.startswith("/") else str(folder / name) if name else name
        if option == "--out":
            argv = ["sweep", req, "--sites", sites, "--design", design, "--out", target]
        else:
            argv = ["check", req, "--design", design, option, target]
        outputs = [] if "\0" in target or not name.strip() else [Path(target)]
        if option == "--out" and outputs:
            outputs.append(Path(target + ".json"))
        contract(argv, inputs=[req, design, sites], outputs=outputs, folder=folder,
                 documented=[f"numerology: {sites}:"])


# --- cache contents ---------------------------------------------------------------------------------------------

JSON_VALUES = st.recursive(st.one_of(st.none(), st.booleans(), st.integers(), st.floats(), st.text(max_size=10)),
                           _containers, max_leaves=8)


@pytest.fixture(scope="module")
def clean_env_output():
    """env --json of the rail example with the cache off: what every cache content must still give."""
    from numerology import quantity_cache

    with _folder() as folder, _environ("NUMEROLOGY_CACHE_DIR", ""):
        quantity_cache.forget()
        status, out, _ = contract(["env", RAIL, "--json"], folder=folder)
    assert status == 0
    return out


@contextlib.contextmanager
def _environ(name, value):
    old = os.environ.get(name)
    os.environ[name] = value
    try:
        yield
    finally:
        if old is None:
            os.environ.pop(name, None)
        else:
            os.environ[name] = old


@fuzz_settings(30)
@given(entries=st.dictionaries(st.one_of(st.sampled_from(["speed|300 km/h", "frequency|1.9 GHz", "frequency|10 MHz",
                                                          "time|2.3 us", "ratio|0.05 ppm"]), st.text(max_size=12)),
                               JSON_VALUES, max_size=6),
       shape=st.sampled_from(["entries", "entries", "any json", "raw"]), raw=st.binary(max_size=200),
       anything=JSON_VALUES)
def test_cache_contents(clean_env_output, entries, shape, raw, anything):
    """Whatever the cache file holds, env --json gives what it gives without a cache."""
    from numerology import quantity_cache

    with _folder() as folder, _environ("NUMEROLOGY_CACHE_DIR", str(folder / "cache")):
        quantity_cache.forget()
        path = quantity_cache.cache_path()
        path.parent.mkdir()
        if shape == "entries":
            path.write_text(json.dumps({"installation": quantity_cache.installation(), "entries": entries}),
                            encoding="utf-8")
        elif shape == "any json":
            path.write_text(json.dumps(anything), encoding="utf-8")
        else:
            path.write_bytes(raw)
        try:
            status, out, _ = contract(["env", RAIL, "--json"], folder=folder)
        finally:
            quantity_cache.forget()
    assert status == 0 and out == clean_env_output


# --- memory of the heaviest refusals, each in a fresh process ---------------------------------------------------


def test_heavy_requests_stay_under_the_cap_in_a_fresh_process(tmp_path):
    """The requests of issue 15, finding 5, and the largest files, each refused at once: the peak resident memory
    of a process that runs them all (getrusage, measured by the process itself) stays under MEMORY_CAP."""
    rail = RAIL.read_text(encoding="utf-8")
    steps = _write(tmp_path / "steps.toml", rail + '\n[search]\nspacing_family = "range"\nspacing_min = "1 kHz"\n'
                   'spacing_max = "500 kHz"\nspacing_steps = 100000\n')
    slots = _write(tmp_path / "slots.toml", rail + "\n[search]\nsymbols_per_slot = [" +
                   ", ".join(str(i % 1000 + 1) for i in range(10_000)) + "]\n")
    lattices = _write(tmp_path / "lattices.toml", rail + "\n[search]\nmax_pilot_freq_spacing = 4096\n"
                      "max_pilot_time_spacing = 4096\nsymbols_per_slot = [4096]\n")
    taps = _write(tmp_path / "taps.csv", "delay [ns],power [dB]\n" + "".join(f"{i},-{i % 50}\n" for i in range(100_000)))
    many_taps = _write(tmp_path / "taps.toml", toml_text(requirement_data(HARBOUR, [(("environment", "profile_file"),
                                                                                     str(taps))])))
    big = tmp_path / "huge-sites.csv"
    with open(big, "wb") as handle:  # sparse: 3 GiB that are never read
        handle.truncate(3 << 30)
    cases = [["solve", steps], ["solve", slots], ["solve", lattices], ["verify", many_taps, "--preset", "nr-mu1"],
             ["verify", HARBOUR, "--preset", "lte-20-normal", "--frames", "100000", "--json"],
             ["sweep", HARBOUR, "--sites", big, "--preset", "nr-mu1"], ["env", "/dev/zero"]]
    code = ("import json, resource, sys, contextlib, io\n"
            "from numerology.cli import main\n"
            "statuses = []\n"
            "for argv in json.loads(sys.stdin.read()):\n"
            "    with contextlib.redirect_stderr(io.StringIO()), contextlib.redirect_stdout(io.StringIO()):\n"
            "        statuses.append(main(argv))\n"
            "print(json.dumps({'statuses': statuses,\n"
            "                  'peak': resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}))\n")

    def limit_address_space():  # a safety net: a runaway case fails here instead of taking the machine
        resource.setrlimit(resource.RLIMIT_AS, (8 << 30, 8 << 30))

    done = subprocess.run([sys.executable, "-c", code], input=json.dumps([[str(a) for a in c] for c in cases]),
                          capture_output=True, text=True, timeout=300, preexec_fn=limit_address_space)
    assert done.returncode == 0, done.stderr
    report = json.loads(done.stdout)
    assert report["statuses"] == [2] * len(cases)
    assert report["peak"] <= MEMORY_CAP, f"peak {report['peak'] >> 20} MiB"
