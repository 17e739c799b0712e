"""Regression tests for the hardening pass: one section per finding of issue 15, then the input-side
items of issue 14. Each test reproduces the finding as described and asserts the contract of the
README: exit 0, 1 or 2, one line on stderr for 2, nothing written on bad input, no input changed."""

from __future__ import annotations

import pytest

from conftest import EXAMPLES, alarm, requirement_data, toml_text
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
    edits = [((section, key), value) for section, values in tables.items() for key, value in values.items()]
    target.write_text(toml_text(requirement_data(path, edits)), encoding="utf-8")
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


# --- 3. the quantity cache is advisory -----------------------------------------------------------------


@pytest.fixture
def cache(tmp_path, monkeypatch):
    """A private cache folder; yields this installation's cache file (not yet written)."""
    from numerology import quantity_cache

    monkeypatch.setenv("NUMEROLOGY_CACHE_DIR", str(tmp_path / "cache"))
    quantity_cache.forget()
    yield quantity_cache.cache_path()
    quantity_cache.forget()


def _write_entries(path, entries):
    import json

    from numerology import quantity_cache

    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({"installation": quantity_cache.installation(), "entries": entries}),
                    encoding="utf-8")
    quantity_cache.forget()


def _solve_json(capsys, req):
    status, out, err = run(capsys, "solve", req, "--json", "--top", "1")
    assert err == ""
    return status, out


@pytest.mark.parametrize("stored", [
    "edited value", True, 0, 0.0, float("nan"), "33.3", [83.3, "frequency"], "wrong dimension",
])
def test_a_tampered_cache_entry_never_changes_the_answer(capsys, cache, stored):
    """Editing the SI value of "300 km/h" changed the chosen design with exit 0; now any entry that fails
    its checks (type, finite, dimension, tag) is read by pint again and the answer stays the same."""
    import json

    from numerology import quantity_cache

    clean = _solve_json(capsys, RAIL)
    quantity_cache.save()
    entries = json.loads(cache.read_text(encoding="utf-8"))["entries"]
    key = "speed|300 km/h"
    assert key in entries
    if stored == "edited value":
        entries[key][0] = 120.0
    elif stored == "wrong dimension":
        entries[key][1] = "frequency"
    else:
        entries[key] = stored if not isinstance(stored, float) or stored == stored else [stored, "speed", "x"]
    cache.write_text(json.dumps({**json.loads(cache.read_text(encoding="utf-8")), "entries": entries},
                                allow_nan=True), encoding="utf-8")
    quantity_cache.forget()
    assert _solve_json(capsys, RAIL) == clean


def test_a_forged_entry_is_dropped_by_the_sample_check(cache):
    """An entry with a valid tag but a wrong value (someone recomputed the tag) is caught when a run that
    imported pint anyway re-reads a sample of the file before adding its own entries."""
    from numerology import quantity_cache, units

    _write_entries(cache, {"speed|300 km/h": quantity_cache.entry("speed|300 km/h", 1.0)})
    units.parse_quantity("7 km/h", "speed", "x")  # a new string: pint is used and the run saves
    quantity_cache.save()
    assert quantity_cache.lookup("speed|300 km/h") is None
    assert quantity_cache.lookup("speed|7 km/h") == units.parse_quantity("7 km/h", "speed", "x")


@pytest.mark.parametrize("kind", ["fifo", "endless device", "folder", "deeply nested", "huge", "not an object"])
def test_a_cache_file_that_is_not_a_small_json_file_means_no_cache(capsys, cache, kind):
    import os

    cache.parent.mkdir(parents=True, exist_ok=True)
    if kind == "fifo":
        os.mkfifo(cache)
    elif kind == "endless device":
        cache.symlink_to("/dev/zero")
    elif kind == "folder":
        cache.mkdir()
    elif kind == "deeply nested":
        cache.write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
    elif kind == "huge":  # a sparse file of 1 GiB: only its size is looked at
        with open(cache, "wb") as handle:
            handle.truncate(1 << 30)
    else:
        cache.write_text("[1, 2, 3]", encoding="utf-8")
    with alarm(60):
        status, out, err = run(capsys, "env", RAIL, "--json")
    assert status == 0 and err == "" and out


def test_concurrent_runs_keep_each_others_entries(cache):
    """Eight processes each learn their own string and save at the same time: no entry is lost."""
    import os
    import subprocess
    import sys

    from numerology import quantity_cache

    code = ("import sys; from numerology import units, quantity_cache; "
            "units.parse_quantity(sys.argv[1], 'speed', 'x'); quantity_cache.save()")
    env = {**os.environ, "NUMEROLOGY_CACHE_DIR": str(cache.parent)}
    runs = [subprocess.Popen([sys.executable, "-c", code, f"{i + 1} km/h"], env=env) for i in range(8)]
    assert [r.wait(timeout=120) for r in runs] == [0] * 8
    quantity_cache.forget()
    for i in range(8):
        assert quantity_cache.lookup(f"speed|{i + 1} km/h") is not None, i


def test_two_installations_keep_separate_files(cache, monkeypatch):
    from numerology import quantity_cache, units

    units.parse_quantity("11 km/h", "speed", "x")
    quantity_cache.save()
    monkeypatch.setattr(quantity_cache, "installation", lambda: "another installation")
    other = quantity_cache.cache_path()
    assert other != cache and other.parent == cache.parent
    assert quantity_cache.lookup("speed|11 km/h") is None  # the other installation does not read ours
    units.parse_quantity("12 km/h", "speed", "x")
    quantity_cache.save()
    assert cache.exists() and other.exists()


def test_the_cache_is_capped_keeping_the_newest(cache, monkeypatch):
    from numerology import quantity_cache, units

    monkeypatch.setattr(quantity_cache, "MAX_ENTRIES", 3)
    for i in range(5):
        units.parse_quantity(f"{i + 1} km/h", "speed", "x")
        quantity_cache.save()
    kept = [i + 1 for i in range(5) if quantity_cache.lookup(f"speed|{i + 1} km/h") is not None]
    assert kept == [3, 4, 5]


# --- 5. work bounds: estimated before the work, with advice on what to narrow ----------------------------


def _search_table(path, lines):
    path.write_text(RAIL.read_text(encoding="utf-8") + "\n[search]\n" + "\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_a_search_beyond_the_candidate_budget_says_what_to_narrow(capsys, tmp_path):
    """spacing_steps = 100000 took 143 s and 5.9 GB, then crashed."""
    req = _search_table(tmp_path / "r.toml", ['spacing_family = "range"', 'spacing_min = "1 kHz"',
                                              'spacing_max = "500 kHz"', "spacing_steps = 100000"])
    with alarm(30):
        assert_one_line_error(*run(capsys, "solve", req), "candidate designs", "budget",
                              "lower search.spacing_steps from 100000 to at most")


def test_the_advice_fits_the_budget(capsys, tmp_path):
    """Following the advice gives a search the budget accepts."""
    import re

    from numerology import api, budget

    req = _search_table(tmp_path / "r.toml", ['spacing_family = "range"', 'spacing_min = "1 kHz"',
                                              'spacing_max = "500 kHz"', "spacing_steps = 100000"])
    status, _, err = run(capsys, "solve", req)
    fit = int(re.search(r"to at most (\d+)", err).group(1))
    req = _search_table(tmp_path / "r.toml", ['spacing_family = "range"', 'spacing_min = "1 kHz"',
                                              'spacing_max = "500 kHz"', f"spacing_steps = {fit}"])
    assert budget.check_search(api.load(req)).candidates <= budget.MAX_CANDIDATES


@pytest.mark.parametrize("key, count", [("spacings", 100_000), ("symbols_per_slot", 10_000)])
def test_long_lists_are_refused_before_their_entries_are_read(capsys, tmp_path, key, count):
    items = [f'"{i + 1} kHz"' for i in range(count)] if key == "spacings" else [str(i % 100 + 1) for i in range(count)]
    lines = ['spacing_family = "list"'] if key == "spacings" else []
    req = _search_table(tmp_path / "r.toml", lines + [f"{key} = [{', '.join(items)}]"])
    with alarm(30):
        assert_one_line_error(*run(capsys, "solve", req), f"search.{key}", f"has {count} entries; at most")


def test_pilot_lattices_beyond_the_budget(capsys, tmp_path):
    req = _search_table(tmp_path / "r.toml", ["max_pilot_freq_spacing = 4096", "max_pilot_time_spacing = 64",
                                              "symbols_per_slot = [64, 32]", "spacing_exponents = [-8, 8]"])
    assert_one_line_error(*run(capsys, "solve", req), "lower search.max_pilot_freq_spacing from 4096")


def test_a_profile_of_100000_taps_is_refused(capsys, tmp_path):
    taps = tmp_path / "taps.csv"
    taps.write_text("delay [ns],power [dB]\n" + "".join(f"{i},{-i / 1000:.3f}\n" for i in range(100_000)),
                    encoding="utf-8")
    req = edited(HARBOUR, tmp_path / "r.toml", environment={"profile_file": str(taps)})
    with alarm(30):
        assert_one_line_error(*run(capsys, "verify", req, "--preset", "nr-mu1"), "has 100000 taps; at most 4096")


def _mcs_table(path, rows):
    path.write_text("name,bits_per_symbol,code_rate,required_sinr [dB]\n"
                    + "".join(f"m{i},{i % 8 + 1},1/2,{i * 0.01:.2f}\n" for i in range(rows)), encoding="utf-8")
    return path


def test_an_mcs_table_of_3000_rows_is_refused(capsys, tmp_path):
    table = _mcs_table(tmp_path / "mcs.csv", 3000)
    req = edited(RAIL, tmp_path / "r.toml", rules={"mcs_table": str(table)})
    assert_one_line_error(*run(capsys, "solve", req), "has 3000 entries; at most 256")


def test_each_input_file_is_read_once_per_run(capsys, tmp_path, monkeypatch):
    """The MCS table was read from disk 116 times per solve; now once, when the requirement is loaded."""
    from numerology import mcs, profiles

    table = _mcs_table(tmp_path / "mcs.csv", 256)
    req = edited(HARBOUR, tmp_path / "r.toml", rules={"mcs_table": str(table)})
    reads = []
    for module in (mcs, profiles):
        original = module.read_text
        monkeypatch.setattr(module, "read_text", lambda path, *a, _o=original: (reads.append(str(path)), _o(path, *a))[1])
    status, _, err = run(capsys, "solve", req, "--json")
    assert status in (0, 1) and err == ""
    assert sorted(reads) == sorted([str(table), str(EXAMPLES / "harbour_crane_taps.csv")])


def test_a_file_edited_during_a_run_does_not_change_it(tmp_path):
    """Everything after loading sees the content read at load time."""
    from numerology import api

    table = _mcs_table(tmp_path / "mcs.csv", 20)
    req = api.load(edited(RAIL, tmp_path / "r.toml", rules={"mcs_table": str(table)}))
    before = api.solve(req, top=1, explain=False, with_limits=False).to_json()
    table.write_text("name,bits_per_symbol,code_rate,required_sinr [dB]\nonly,1,1/2,40\n", encoding="utf-8")
    assert api.solve(req, top=1, explain=False, with_limits=False).to_json() == before


def test_verify_frames_beyond_the_budget(capsys):
    """verify --frames 100000 ran 14 minutes."""
    with alarm(30):
        assert_one_line_error(*run(capsys, "verify", HARBOUR, "--preset", "nr-mu1", "--frames", "100000", "--json"),
                              "--frames", "beyond the budget", "or fewer")


def test_verify_under_json_shows_progress_on_a_terminal(capsys, monkeypatch):
    """A long verify --json showed no progress; on a terminal it now draws a transient bar on stderr."""
    import sys

    from numerology import render_terminal

    shown = []
    original = render_terminal.with_progress
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True)
    monkeypatch.setattr(render_terminal, "with_progress", lambda con, job: (shown.append(con.stderr), original(con, job))[1])
    status, out, _ = run(capsys, "verify", HARBOUR, "--preset", "nr-mu1", "--frames", "4", "--json")
    assert status in (0, 1) and out.startswith("{")
    assert shown == [True]


def test_a_sweep_beyond_the_site_budget(capsys, monkeypatch):
    from numerology import budget

    monkeypatch.setattr(budget, "MAX_SITES", 5)
    assert_one_line_error(*run(capsys, "sweep", HARBOUR, "--sites", EXAMPLES / "harbour_sites.csv", "--preset",
                               "nr-mu1"), "has 13 sites; one sweep takes at most 5", "split the file into 3 parts")


def test_the_simulation_memory_estimate_refuses_huge_ffts(tmp_path):
    from numerology import api, budget
    from numerology.design import Design
    from numerology.errors import InputError
    from numerology.verify import verify

    huge = Design("huge", 15e3, 2**24, 1024, 2**23, 4, 4, 0, 14)
    with pytest.raises(InputError, match="beyond the budget"):
        verify(api.load(RAIL), huge)
    assert budget.MAX_TAPS == 4096 and budget.MAX_MCS_ROWS == 256


# --- 1. input files protected from every output option, by identity ------------------------------------


def _design_copy(path):
    path.write_text((EXAMPLES / "designs" / "urban-small-cell-30khz.toml").read_text(encoding="utf-8"),
                    encoding="utf-8")
    return path


def _sites_copy(path):
    path.write_text((EXAMPLES / "harbour_sites.csv").read_text(encoding="utf-8"), encoding="utf-8")
    return path


@pytest.mark.parametrize("case", ["check markdown", "check plot", "verify markdown", "sweep out", "sweep out sites",
                                  "hard link", "symbolic link", "profile", "mcs table", "sweep metadata"])
def test_no_output_option_overwrites_an_input(capsys, tmp_path, case):
    """A valid design file named d.md was replaced by a note; the same for --plot, verify and sweep."""
    import os

    design = _design_copy(tmp_path / ("d.svg" if "plot" in case else "d.csv" if "sweep" in case else "d.md"))
    req = HARBOUR
    if case == "check markdown":
        argv, victim = ["check", req, "--design", design, "--markdown", design], design
    elif case == "check plot":
        argv, victim = ["check", req, "--design", design, "--plot", design], design
    elif case == "verify markdown":
        argv, victim = ["verify", req, "--design", design, "--frames", "2", "--markdown", design], design
    elif case == "sweep out":
        argv, victim = ["sweep", req, "--sites", EXAMPLES / "harbour_sites.csv", "--design", design,
                        "--out", design], design
    elif case == "sweep out sites":
        sites = _sites_copy(tmp_path / "s.csv")
        argv, victim = ["sweep", req, "--sites", sites, "--preset", "nr-mu1", "--out", sites], sites
    elif case == "sweep metadata":  # FILE.csv.json is written too: it is protected as well
        design = _design_copy(tmp_path / "o.csv.json")
        argv, victim = ["sweep", req, "--sites", EXAMPLES / "harbour_sites.csv", "--design", design,
                        "--out", tmp_path / "o.csv"], design
    elif case in ("hard link", "symbolic link"):
        other = tmp_path / "other-name.md"
        (os.link if case == "hard link" else os.symlink)(design, other)
        argv, victim = ["check", req, "--design", design, "--markdown", other], design
    else:
        copy = tmp_path / ("t.md" if case == "profile" else "m.md")
        if case == "profile":
            copy.write_text((EXAMPLES / "harbour_crane_taps.csv").read_text(encoding="utf-8"), encoding="utf-8")
            req = edited(HARBOUR, tmp_path / "r.toml", environment={"profile_file": str(copy)})
        else:
            copy.write_text("name,bits_per_symbol,code_rate,required_sinr [dB]\nQPSK 1/2,2,1/2,5\n", encoding="utf-8")
            req = edited(HARBOUR, tmp_path / "r.toml", rules={"mcs_table": str(copy)})
        argv, victim = ["check", req, "--preset", "nr-mu1", "--markdown", copy], copy
    before = victim.read_bytes()
    files_before = sorted(p.name for p in tmp_path.iterdir())
    assert_one_line_error(*run(capsys, *argv), "refusing to overwrite the input file")
    assert victim.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == files_before


# --- 6. unwritable outputs, loops, deep nesting, quoted newlines ----------------------------------------------


@pytest.mark.parametrize("case", ["proc", "too long a name", "missing folder", "loop", "folder", "device", "nul"])
def test_bad_output_paths_fail_before_any_work(capsys, tmp_path, monkeypatch, case):
    """Such paths failed with a traceback and exit 1 after all the work; now exit 2 before it."""
    import os

    from numerology import api

    calls = []
    original = api.check
    monkeypatch.setattr(api, "check", lambda *a, **k: (calls.append(1), original(*a, **k))[1])
    if case == "proc":
        target = "/proc/x.md"
    elif case == "too long a name":
        target = str(tmp_path / ("a" * 300 + ".md"))
    elif case == "missing folder":
        target = str(tmp_path / "no" / "x.md")
    elif case == "loop":
        os.symlink(tmp_path / "b.md", tmp_path / "a.md")
        os.symlink(tmp_path / "a.md", tmp_path / "b.md")
        target = str(tmp_path / "a.md")
    elif case == "folder":
        (tmp_path / "x.md").mkdir()
        target = str(tmp_path / "x.md")
    elif case == "device":
        os.symlink("/dev/null", tmp_path / "x.md")
        target = str(tmp_path / "x.md")
    else:
        target = "x\0.md"
    status, out, err = run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--markdown", target)
    assert_one_line_error(status, out, err, "--markdown")
    assert calls == []  # refused before the work


def test_a_name_of_250_characters_is_written(capsys, tmp_path):
    """The temporary file's name was the target's name plus a prefix and suffix: too long for the system."""
    target = tmp_path / ("a" * 250 + ".md")
    status, out, err = run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--markdown", target)
    assert status in (0, 1) and err == ""
    assert target.read_text(encoding="utf-8").startswith("# Design note")
    assert [p.name for p in tmp_path.iterdir()] == [target.name]


def test_an_unwritable_folder_fails_before_any_work(capsys, tmp_path, monkeypatch):
    """An immutable or read-only folder (simulated: creating a file there fails, as chattr +i makes it)."""
    import tempfile

    from numerology import output

    def refuse(*args, **kwargs):
        raise PermissionError(1, "Operation not permitted")

    monkeypatch.setattr(output.tempfile, "mkstemp", refuse)
    assert_one_line_error(*run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--markdown", tmp_path / "n.md"),
                          "--markdown", "cannot write in folder", "Operation not permitted")
    assert list(tmp_path.iterdir()) == []
    del tempfile


def test_symlink_loops_as_inputs(capsys, tmp_path):
    import os

    os.symlink(tmp_path / "b.toml", tmp_path / "a.toml")
    os.symlink(tmp_path / "a.toml", tmp_path / "b.toml")
    assert_one_line_error(*run(capsys, "env", tmp_path / "a.toml"), "a.toml")
    req = edited(HARBOUR, tmp_path / "r.toml", environment={"profile_file": str(tmp_path / "a.toml")})
    assert_one_line_error(*run(capsys, "env", req), "environment.profile_file")
    assert_one_line_error(*run(capsys, "check", HARBOUR, "--design", tmp_path / "a.toml"), "a.toml")


def test_toml_nested_900_deep(capsys, tmp_path):
    path = tmp_path / "deep.toml"
    path.write_text("[environment]\nx = " + "[" * 900 + "]" * 900 + "\n", encoding="utf-8")
    assert_one_line_error(*run(capsys, "env", path), "nested too deeply")
    design = tmp_path / "deep-design.toml"
    design.write_text("x = " + "{a = " * 900 + "1" + "}" * 900 + "\n", encoding="utf-8")
    assert_one_line_error(*run(capsys, "check", HARBOUR, "--design", design), "deep-design.toml")


def test_a_quoted_newline_in_a_sites_file(capsys, tmp_path):
    sites = tmp_path / "s.csv"
    sites.write_text('site,snr [dB]\n"a\nb",20\nc,21\n', encoding="utf-8")
    assert_one_line_error(*run(capsys, "sweep", HARBOUR, "--sites", sites, "--preset", "nr-mu1"),
                          "line 2", "line break inside quotes")


# --- 7. no partial write on bad input ----------------------------------------------------------------------


def test_without_matplotlib_nothing_is_written(capsys, tmp_path, monkeypatch):
    """--markdown n.md --plot p.png wrote the note, then exited 2 for the plot."""
    import sys

    monkeypatch.setitem(sys.modules, "matplotlib", None)  # import matplotlib now raises ImportError
    status, out, err = run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--markdown", tmp_path / "n.md",
                           "--plot", tmp_path / "p.png")
    assert_one_line_error(status, out, err, "--plot", "needs matplotlib")
    assert list(tmp_path.iterdir()) == []


def test_a_failure_while_writing_leaves_no_output(tmp_path, monkeypatch):
    """All outputs go to temporary files first: if the last one fails, none is renamed into place."""
    import os

    from numerology import output

    real_replace = os.replace
    monkeypatch.setattr(output.os, "replace", lambda a, b: (_ for _ in ()).throw(OSError(28, "No space left")))
    with pytest.raises(OSError):
        output.write_all({tmp_path / "a.md": b"a", tmp_path / "b.png": b"b"})
    monkeypatch.setattr(output.os, "replace", real_replace)
    assert list(tmp_path.iterdir()) == []


# --- 9. spreadsheet formulas in CSV output, a closed stdout pipe --------------------------------------------


def test_csv_cells_that_spreadsheets_would_evaluate_are_escaped(capsys, tmp_path):
    import csv

    sites = tmp_path / "s.csv"
    sites.write_text('site,snr [dB]\n"=HYPERLINK(""http://x"",""y"")",20\n+cmd,20\n-2+3,20\n@SUM(A1),20\nplain,20\n',
                     encoding="utf-8")
    out = tmp_path / "o.csv"
    status, _, err = run(capsys, "sweep", HARBOUR, "--sites", sites, "--preset", "nr-mu1", "--out", out)
    assert status in (0, 1) and err == ""
    rows = list(csv.reader(out.read_text(encoding="utf-8").splitlines()))
    assert [r[0] for r in rows[1:]] == ["'=HYPERLINK(\"http://x\",\"y\")", "'+cmd", "'-2+3", "'@SUM(A1)", "plain"]
    assert all(not cell.startswith(("=", "+", "@")) for row in rows[1:] for cell in row)


def test_the_sweep_csv_is_read_by_standard_readers_without_options(capsys, tmp_path):
    """Issue 14: the CSV began with a comment line that CSV readers take for data; now the metadata is beside it."""
    import csv
    import json

    out = tmp_path / "o.csv"
    status, _, _ = run(capsys, "sweep", HARBOUR, "--sites", EXAMPLES / "harbour_sites.csv", "--best", "--out", out)
    assert status in (0, 1)
    with open(out, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == 13 and rows[0]["site"].startswith("quay crane")
    meta = json.loads((tmp_path / "o.csv.json").read_text(encoding="utf-8"))
    assert meta["csv"] == "o.csv" and meta["summary"]["sites"] == 13


@pytest.mark.parametrize("argv", [["profiles", "--json"], ["profiles"], ["env", str(RAIL)]],
                         ids=["json", "table", "terminal report"])
def test_a_closed_stdout_pipe_is_not_exit_1(tmp_path, argv):
    """'numerology presets --json | head -c 1' exited 1 silently; now 141, as a shell reports SIGPIPE. The
    terminal reports too: rich's console exits with 1 on a broken pipe unless told otherwise."""
    import os
    import subprocess
    import sys

    reader, writer = os.pipe()
    os.close(reader)  # nobody reads: the first write fails with EPIPE
    done = subprocess.run([sys.executable, "-m", "numerology", *argv], stdout=writer,
                          stderr=subprocess.PIPE, text=True, timeout=120)
    os.close(writer)
    assert done.returncode == 141
    assert done.stderr == ""


# --- 8. the Python API raises its documented InputError for every bad argument -------------------------


def _bad_api_calls():
    """(label, call) pairs: each call gives a public function one bad argument."""
    import math

    from numerology import api, design, mcs, plots, presets, profiles, requirements, simulate, sweep, units
    from numerology.verify import verify

    req = api.load(RAIL)
    nr = presets.get_preset("nr-mu1").design
    sites = sweep.sites_from_values(req, max_speed_mps=[10.0])
    env = api.check(req, nr, with_limits=False).environment
    return [
        ("solve top 0", lambda: api.solve(req, top=0)),
        ("solve top bool", lambda: api.solve(req, top=True)),
        ("solve top text", lambda: api.solve(req, top="3")),
        ("solve objective bogus", lambda: api.solve(req, objective="bogus")),
        ("solve explain text", lambda: api.solve(req, explain="no")),
        ("solve None requirements", lambda: api.solve(None)),
        ("solve a dict", lambda: api.solve({"environment": {}})),
        ("check zero bandwidth", lambda: api.check(req.replace("radio.bandwidth", 0.0), nr)),
        ("check negative speed key", lambda: api.check(req.replace("environment.max_speed", -3.0), nr)),
        ("check text in a key", lambda: api.check(req.replace("radio.snr", "18 dB"), nr)),
        ("check NaN carrier", lambda: api.check(req.replace("environment.carrier", math.nan), nr)),
        ("check None requirements", lambda: api.check(None, nr)),
        ("check no design", lambda: api.check(req)),
        ("check design not a Design", lambda: api.check(req, 3)),
        ("check preset not text", lambda: api.check(req, preset=3)),
        ("check unknown preset", lambda: api.check(req, preset="nr-mu9")),
        ("check speed text", lambda: api.check(req, nr, speed_mps="5")),
        ("check speed negative", lambda: api.check(req, nr, speed_mps=-5)),
        ("check delay NaN", lambda: api.check(req, nr, max_excess_delay_s=math.nan)),
        ("check with_limits text", lambda: api.check(req, nr, with_limits="yes")),
        ("load None", lambda: api.load(None)),
        ("load a number", lambda: api.load(3)),
        ("load empty name", lambda: api.load("")),
        ("design_from a number", lambda: api.design_from(3)),
        ("design file a number", lambda: design.load_design(3)),
        ("design mapping not a mapping", lambda: design.design_from_mapping([1], "x")),
        ("replace unknown key", lambda: req.replace("radio.bandwdth", 1.0)),
        ("value unknown key", lambda: req.value("nonsense")),
        ("mapping with a number as table name", lambda: requirements.requirements_from_mapping({1: {}})),
        ("mapping with a number as key", lambda: requirements.requirements_from_mapping({"environment": {1: 2}})),
        ("mapping not a mapping", lambda: requirements.requirements_from_mapping([1])),
        ("mapping None", lambda: requirements.requirements_from_mapping(None)),
        ("mapping base_dir a number", lambda: requirements.requirements_from_mapping({}, base_dir=3)),
        ("parse_quantity unknown dimension", lambda: units.parse_quantity("1 Hz", "colour", "x")),
        ("parse_quantity dimension None", lambda: units.parse_quantity("1 Hz", None, "x")),
        ("parse_db None", lambda: units.parse_db(None, "x")),
        ("parse_either unknown dimension", lambda: units.parse_either("1 Hz", ("colour",), "x")),
        ("mcs table a number", lambda: mcs.load_mcs_table(3)),
        ("profile file None", lambda: profiles.load_profile_csv(None)),
        ("preset a number", lambda: presets.get_preset(3)),
        ("verify None requirements", lambda: verify(None, nr)),
        ("verify design a string", lambda: verify(req, "nr-mu1")),
        ("verify frames 1", lambda: verify(req, nr, frames=1)),
        ("verify frames text", lambda: verify(req, nr, frames="8")),
        ("verify seed negative", lambda: verify(req, nr, seed=-1)),
        ("verify progress not callable", lambda: verify(req, nr, frames=2, progress=3)),
        ("sweep None requirements", lambda: sweep.sweep(None, nr, sites)),
        ("sweep design None", lambda: sweep.sweep(req, None, sites)),
        ("sweep sites a list", lambda: sweep.sweep(req, nr, [1, 2])),
        ("load_sites path None", lambda: sweep.load_sites(None, req)),
        ("load_sites max_sites 0", lambda: sweep.load_sites(EXAMPLES / "harbour_sites.csv", req, max_sites=0)),
        ("sites_from_values text", lambda: sweep.sites_from_values(req, max_speed_mps=["fast"])),
        ("sites_from_values None requirements", lambda: sweep.sites_from_values(None, max_speed_mps=[1.0])),
        ("write_plot None requirements", lambda: plots.write_plot("x.png", None)),
        ("write_plot bad grid", lambda: plots.write_plot("x.png", req, grid=(0, 3))),
        ("simulate_link snr text", lambda: simulate.simulate_link(nr, env, "high")),
    ]


def test_every_bad_api_call_raises_input_error():
    """Each public function with a bad argument raises InputError (documented), one line, nothing else:
    solve(top=0) reported a feasible request as infeasible, objective="bogus" raised KeyError, a zero
    bandwidth divided by zero, None requirements raised AttributeError."""
    from numerology.errors import InputError

    failures = []
    for label, call in _bad_api_calls():
        try:
            call()
        except InputError as error:
            if "\n" in str(error):
                failures.append(f"{label}: a message of several lines")
        except Exception as error:  # noqa: BLE001 - the point of the test
            failures.append(f"{label}: {type(error).__name__}: {error}")
        else:
            failures.append(f"{label}: no error")
    assert failures == []


# --- issue 14: consistent names ------------------------------------------------------------------------------


def test_rules_is_the_one_name_and_constraints_a_deprecated_alias(capsys):
    import json

    from numerology import api

    status, out, _ = run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--json")
    body = json.loads(out)
    assert body["schema_version"] == "2.0"
    assert body["rules"] == body["constraints"]  # the alias carries the same list until schema 3.0
    result = api.check(api.load(HARBOUR), preset="nr-mu1", with_limits=False)
    assert [r["name"] for r in body["rules"]] == [r.name for r in result.rules]
    with pytest.warns(DeprecationWarning, match="use CheckResult.rules"):
        assert result.constraints == result.rules


def test_normalised_profiles_have_truthful_unit_suffixes(capsys):
    import json

    status, out, _ = run(capsys, "profiles", "--json")
    profiles = {p["name"]: p for p in json.loads(out)["profiles"]}
    tdl = profiles["TDL-A"]
    assert tdl["normalised"] is True
    assert "delays_s" not in tdl and "rms_delay_spread_s" not in tdl
    assert tdl["delays_rms"][:2] == [0.0, 0.3819]  # 3GPP TR 38.901 Table 7.7.2-1, normalised delays
    assert abs(tdl["rms_delay_spread_rms"] - 1.0) < 1e-3
    eva = profiles["EVA"]
    assert eva["normalised"] is False and "delays_s" in eva and "delays_rms" not in eva


# --- issue 14: no noise on stderr for valid input ---------------------------------------------------------


def test_solve_plot_on_the_broadcast_example_is_quiet(capsys, tmp_path):
    """It printed a numpy RuntimeWarning (log10 of a zero SINR in the modulation-and-coding lookup);
    warnings are errors in this test run, so any warning fails here. The time is measured, not
    asserted, by benchmarks/bench_plot.py (target: --plot within 3x of the same command without it)."""
    pytest.importorskip("matplotlib")
    status, _, err = run(capsys, "solve", EXAMPLES / "broadcast_sfn.toml", "--plot", tmp_path / "sfn.png")
    assert status == 0 and err == ""
    assert (tmp_path / "sfn.png").read_bytes().startswith(b"\x89PNG")


# --- 9. warnings on extreme but accepted values ----------------------------------------------------------------


def _range_ends():
    """(dotted key, value) at both ends of every numeric key's declared range (just inside an open end)."""
    import math

    from numerology.requirements import SCHEMA

    si = {"frequency": "Hz", "time": "s", "speed": "m/s", "bitrate": "bit/s"}
    cases = []
    for key in SCHEMA:
        if key.section == "search" or key.kind not in ("quantity", "db", "number"):
            continue
        for end, is_open, step in ((key.low, key.low_open, 1), (key.high, key.high_open, -1)):
            if not math.isfinite(end):
                continue
            value = (end + step * max(abs(end), 1.0) * 1e-6) if is_open else end
            cases.append((key.path, f"{value!r} {si[key.dimension]}" if key.kind == "quantity" else value))
    return cases


@pytest.mark.parametrize("dotted, value", _range_ends(), ids=lambda v: str(v))
def test_every_key_at_the_ends_of_its_range(capsys, tmp_path, dotted, value):
    """An accepted value at the edge of its range gives an answer or one located line, never a warning (they
    are errors in this run), a traceback or an internal error: a Doppler of 10 MHz crashed the stretch limits,
    a coherence correlation of exactly 1 failed deep inside with no file or key named."""
    section, name = dotted.split(".")
    removed = {"max_doppler": {"max_speed": None}, "max_excess_delay": {"profile": None}}.get(name, {})
    req = edited(RAIL, tmp_path / "r.toml", **{section: {name: value, **(removed if section == "environment" else {})}})
    status, out, err = run(capsys, "check", req, "--preset", "nr-mu1")
    if status == 2:
        assert_one_line_error(status, out, err, str(req))
    else:
        assert status in (0, 1) and err == ""


# --- found by the fuzz suite ------------------------------------------------------------------------------------


def test_no_cp_allowance_and_no_echo_is_not_a_crash(capsys, tmp_path):
    """cp_allowance = 0 s with taps all within 1 dB (a max excess delay of 0): the relaxed design's margin for
    the cyclic prefix is 0/0 (NaN), so no spacing passes; naming the rules that rule every spacing out then
    found none and the diagnosis crashed. Now the command answers (exit 1)."""
    req = edited(HARBOUR, tmp_path / "r.toml", rules={"cp_allowance": "0.0 s", "delay_threshold": 1.0})
    status, out, err = run(capsys, "solve", req, "--top", "1", "--json")
    assert status in (0, 1) and err == ""


def test_site_names_reach_the_terminal_as_written(capsys, tmp_path):
    """A site named "[/x]" made rich raise (markup), ":fire:" became an emoji, and an escape sequence in a name
    went to the terminal raw; names are now printed as written, control characters escaped."""
    sites = tmp_path / "s.csv"
    sites.write_text("site,snr [dB]\n[/x],20\n[bold]b :fire:,21\n\x1b[31mred,22\n", encoding="utf-8")
    status, out, err = run(capsys, "sweep", HARBOUR, "--sites", sites, "--preset", "nr-mu1")
    assert status in (0, 1) and err == ""
    assert "[/x]" in out and "[bold]b :fire:" in out and "\\x1b[31mred" in out and "\x1b" not in out
