"""Tests for the command line, run in-process through numerology.cli.main.

Exit status: 0 = answer found / every rule passes, 1 = valid input but infeasible or a rule
fails, 2 = bad input or usage (one line on stderr starting "numerology:", nothing on stdout).
"""

import contextlib
import io
import json
import subprocess
import sys
import tomllib

import pytest
from conftest import EXAMPLES, ROOT, toml_text

from numerology.cli import main

EXAMPLE_FILES = sorted(EXAMPLES.glob("*.toml"))
HARBOUR = str(EXAMPLES / "harbour_crane.toml")
DRONE = EXAMPLES / "drone_video.toml"


def run(capsys, *argv):
    """(status, stdout, stderr) of one in-process run."""
    status = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return status, out, err


def run_quietly(*argv):
    """The same without capsys (for module-scoped fixtures)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def assert_usage_error(status, out, err):
    assert status == 2
    assert out == ""
    assert err.startswith("numerology: ")
    assert err.count("\n") == 1 and err.endswith("\n")
    assert "Traceback" not in err


# --- env -------------------------------------------------------------------------------------


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.name)
def test_env_prints_a_table_for_every_example(capsys, path):
    status, out, err = run(capsys, "env", path)
    assert status == 0 and err == ""
    for row in ("wavelength", "maximum Doppler", "coherence time", "rms delay spread", "max excess delay",
                "coherence bandwidth"):
        assert row in out


@pytest.mark.parametrize("path", EXAMPLE_FILES, ids=lambda p: p.name)
def test_env_json_for_every_example(capsys, path):
    status, out, err = run(capsys, "env", path, "--json")
    assert status == 0 and err == ""
    body = json.loads(out)
    assert body["schema"] == "numerology.env"
    assert body["requirements"] == str(path)
    for key in ("wavelength_m", "doppler_hz", "doppler_spread_hz", "coherence_time_s", "rms_delay_spread_s",
                "max_excess_delay_s", "coherence_bandwidth_hz"):
        assert key in body


# --- profiles and presets --------------------------------------------------------------------


def test_profiles_table(capsys):
    status, out, err = run(capsys, "profiles")
    assert status == 0 and err == ""
    for name in ("EPA", "EVA", "ETU", "TDL-A"):
        assert name in out


def test_profiles_json(capsys):
    status, out, _ = run(capsys, "profiles", "--json")
    assert status == 0
    body = json.loads(out)
    assert body["schema"] == "numerology.profiles"
    by_name = {p["name"]: p for p in body["profiles"]}
    assert {"EPA", "EVA", "ETU"} <= set(by_name)
    eva = by_name["EVA"]
    assert len(eva["delays_s"]) == len(eva["powers_db"]) == 9  # 3GPP TS 36.101 Table B.2.1-3
    assert eva["normalised"] is False and by_name["TDL-A"]["normalised"] is True


def test_presets_table(capsys):
    status, out, err = run(capsys, "presets")
    assert status == 0 and err == "" and "nr-mu1" in out


def test_presets_json(capsys):
    status, out, _ = run(capsys, "presets", "--json")
    assert status == 0
    body = json.loads(out)
    assert body["schema"] == "numerology.presets"
    presets = body["presets"]
    assert isinstance(presets, list) and presets
    for preset in presets:
        assert {"name", "source", "design"} <= set(preset)
        design = preset["design"]
        for key in ("subcarrier_spacing_hz", "fft_size", "sample_rate_hz", "cp_samples", "cp_s", "useful_symbol_s",
                    "symbol_s", "used_subcarriers"):
            assert key in design, (preset["name"], key)
        assert set(design["pilot"]) >= {"freq_spacing", "time_spacing", "shift"}
    nr = {p["name"]: p["design"] for p in presets}["nr-mu0"]
    # 3GPP TS 38.211 sect. 4 and 5.3.1: 15 kHz, normal CP 144 k 2^-mu T_c = 4.6875 us
    assert nr["subcarrier_spacing_hz"] == 15e3
    assert nr["cp_s"] == pytest.approx(4.6875e-6, rel=1e-12)


# --- check -----------------------------------------------------------------------------------

CHECK_KEYS = ("design", "rules", "sinr_terms_db", "effective_sinr_db", "net_throughput_bps", "overhead",
              "limits", "passed")


@pytest.mark.parametrize("example, preset", [
    ("harbour_crane.toml", "nr-mu1"), ("rail_corridor.toml", "lte-20-normal"), ("broadcast_sfn.toml", "dvbt-8k-g4"),
    ("factory_robots.toml", "nr-mu2"), ("underwater_modem.toml", "wifi-20"),
])
def test_check_exit_status_follows_the_verdict(capsys, example, preset):
    status, out, err = run(capsys, "check", EXAMPLES / example, "--preset", preset, "--json")
    body = json.loads(out)
    assert body["schema"] == "numerology.check"
    assert err == ""
    assert status == (0 if body["passed"] else 1)
    assert body["passed"] == all(c["passed"] for c in body["rules"])


def test_check_json_keys(capsys):
    status, out, _ = run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--json")
    body = json.loads(out)
    for key in CHECK_KEYS:
        assert key in body, key
    assert body["rules"]
    for constraint in body["rules"]:
        assert {"name", "margin", "passed"} <= set(constraint)
        if constraint["margin"] is not None:  # None: an unbounded margin (JSON has no infinity)
            assert constraint["passed"] == (constraint["margin"] >= 0), constraint["name"]
    assert all(v is None or isinstance(v, float) for v in body["sinr_terms_db"].values())
    for limit in ("max_speed_mps", "max_excess_delay_s", "min_snr_db"):
        assert set(body["limits"][limit]) >= {"value", "rule"}, limit


def test_check_table(capsys):
    status, out, err = run(capsys, "check", HARBOUR, "--preset", "nr-mu1")
    assert status in (0, 1) and err == ""
    assert "guard_interval" in out or "cyclic prefix" in out


def _margins(capsys, *extra):
    status, out, _ = run(capsys, "check", HARBOUR, "--preset", "nr-mu1", "--json", *extra)
    return {c["name"]: c["margin"] for c in json.loads(out)["rules"]}


def test_a_faster_what_if_never_raises_a_margin(capsys):
    """harbour_crane.toml is 40 km/h; at 250 km/h Doppler ICI, the coherence time and the pilot
    lattice all get worse, and nothing may get better."""
    base = _margins(capsys)
    faster = _margins(capsys, "--speed", "250 km/h")
    assert base.keys() == faster.keys()
    for name in base:
        if base[name] is not None and faster[name] is not None:
            assert faster[name] <= base[name] + 1e-12 * abs(base[name]), name
    for name in ("doppler_ici", "quasi_static", "pilot_aliasing"):
        assert faster[name] < base[name], name


def test_a_longer_delay_what_if_lowers_the_cp_margin(capsys):
    base = _margins(capsys, "--delay", "2.5 us")
    longer = _margins(capsys, "--delay", "3 us")
    assert longer["guard_interval"] < base["guard_interval"]


def test_solved_design_written_to_a_file_passes_check(capsys, tmp_path):
    """The best design from solve, written as a design file, passes check (exit 0)."""
    status, out, _ = run(capsys, "solve", HARBOUR, "--json", "--top", "1")
    assert status == 0
    design = json.loads(out)["designs"][0]["design"]
    text = "\n".join([
        f"name = {json.dumps(design['name'])}",
        f"subcarrier_spacing = \"{design['subcarrier_spacing_hz']!r} Hz\"",
        f"fft_size = {design['fft_size']}",
        f"cp_samples = {design['cp_samples']}",
        f"used_subcarriers = {design['used_subcarriers']}",
        f"symbols_per_slot = {design['symbols_per_slot']}",
        f"reserved_subcarriers = {design['reserved_subcarriers']!r}",
        "[pilot]",
        f"scope = \"{design['pilot']['scope']}\"",
        f"freq_spacing = {design['pilot']['freq_spacing']}",
        f"symbols = {design['pilot']['symbols']}",
        f"period = {design['pilot']['period']}",
        f"shift = {design['pilot']['shift']}",
        f"data_shared = {str(design['pilot']['data_shared']).lower()}",
    ]) + "\n"
    assert design["cp_extra_samples"] == 0  # else the file above would need cp_extra_*
    path = tmp_path / "best.toml"
    path.write_text(text)
    status, out, err = run(capsys, "check", HARBOUR, "--design", path, "--json")
    assert err == ""
    assert json.loads(out)["passed"] is True
    assert status == 0


# --- usage errors: exit 2, one line, nothing on stdout ------------------------------------------

USAGE_ERRORS = [
    # id, argv, words the line must contain
    ("unknown preset", ["check", HARBOUR, "--preset", "nr-mu"], "did you mean 'nr-mu"),
    ("no design", ["check", HARBOUR], "--design"),
    ("design and preset", ["check", HARBOUR, "--preset", "nr-mu1", "--design", "x.toml"], "not allowed"),
    ("speed not a speed", ["check", HARBOUR, "--preset", "nr-mu1", "--speed", "fast"], "--speed"),
    ("speed a distance", ["check", HARBOUR, "--preset", "nr-mu1", "--speed", "3 km"], "--speed"),
    ("speed absurd", ["check", HARBOUR, "--preset", "nr-mu1", "--speed", "1e9 km/h"], "--speed"),
    ("delay negative", ["check", HARBOUR, "--preset", "nr-mu1", "--delay", "-1 us"], "--delay"),
    ("top 0", ["solve", HARBOUR, "--top", "0"], "--top"),
    ("top not a number", ["solve", HARBOUR, "--top", "many"], "--top"),
    ("unknown objective", ["solve", HARBOUR, "--objective", "fast"], "--objective"),
    ("unknown command", ["frobnicate"], "frobnicate"),
    ("unknown option", ["env", "--bogus", HARBOUR], "--bogus"),
    ("missing requirement file", ["env"], "REQ.toml"),
    ("requirement file absent", ["env", "/nonexistent/site.toml"], "/nonexistent/site.toml"),
    ("requirement file a folder", ["env", EXAMPLES], "folder"),
    ("design file absent", ["check", HARBOUR, "--design", "/nonexistent/design.toml"], "/nonexistent/design.toml"),
    ("markdown onto the input", ["check", HARBOUR, "--preset", "nr-mu1", "--markdown", HARBOUR], "--markdown"),
]


@pytest.mark.parametrize("argv, words", [c[1:] for c in USAGE_ERRORS], ids=[c[0] for c in USAGE_ERRORS])
def test_usage_errors(capsys, argv, words):
    status, out, err = run(capsys, *argv)
    assert_usage_error(status, out, err)
    assert words in err


def test_a_bad_requirement_file_is_one_line(capsys, tmp_path):
    path = tmp_path / "site.toml"
    path.write_text('[environment]\ncarrier = "2 GHz"\nmax_sped = "3 km/h"\n')
    status, out, err = run(capsys, "env", path)
    assert_usage_error(status, out, err)
    assert f"{path}: environment.max_sped" in err and "did you mean 'max_speed'" in err


def test_usage_errors_name_the_subcommand_once(capsys):
    """'numerology: check: ...', not 'numerology: numerology check: ...'."""
    status, out, err = run(capsys, "check", HARBOUR)
    assert_usage_error(status, out, err)
    assert err.startswith("numerology: check: ")


# --- solve -----------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def drone_solution():
    status, out, err = run_quietly("solve", DRONE, "--json")
    return status, json.loads(out), err


def test_infeasible_solve_explains_itself(drone_solution):
    """drone_video.toml asks for more than 10 MHz at 12 dB can carry: exit 1, with relaxations."""
    status, body, err = drone_solution
    assert status == 1 and err == ""
    assert body["schema"] == "numerology.solve"
    assert body["feasible"] is False and body["designs"] == []
    assert body["relaxations"], "an infeasible answer must say what to relax"
    for relaxation in body["relaxations"]:
        assert {"key", "value", "value_si"} <= set(relaxation)
        assert isinstance(relaxation["value"], str) and isinstance(relaxation["value_si"], float)


def _with(path, dotted, value, target):
    data = tomllib.loads(path.read_text())
    section, name = dotted.split(".")
    data.setdefault(section, {})[name] = value
    target.write_text(toml_text(data))
    return target


def test_each_suggested_relaxation_is_really_feasible(drone_solution, tmp_path):
    """A suggested value must really be feasible when applied: write it into the file as the
    quantity string shown to the user (rounded as shown) and solve again."""
    _, body, _ = drone_solution
    for i, relaxation in enumerate(body["relaxations"]):
        relaxed = _with(DRONE, relaxation["key"], relaxation["value"], tmp_path / f"relaxed{i}.toml")
        status, out, err = run_quietly("solve", relaxed, "--json", "--top", "1")
        assert err == ""
        assert json.loads(out)["feasible"] is True, relaxation
        assert status == 0, relaxation


def test_solve_json_is_deterministic(capsys):
    first = run(capsys, "solve", HARBOUR, "--json")
    second = run(capsys, "solve", HARBOUR, "--json")
    assert first[0] == second[0] == 0
    assert first[1] == second[1]


def test_solve_table(capsys):
    status, out, err = run(capsys, "solve", HARBOUR, "--top", "2")
    assert status == 0 and err == "" and out


# --- the installed entry point ----------------------------------------------------------------


def test_version_through_python_dash_m():
    done = subprocess.run([sys.executable, "-m", "numerology", "--version"], cwd=ROOT, capture_output=True,
                          text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith("numerology ")
    assert "EVA" in done.stdout  # the bundled tables are listed
    assert done.stderr == ""


# --- sweep and verify: the reports for people ------------------------------------------------


def test_sweep_terminal_report(capsys):
    """The sweep's terminal report: a verdict line, one row per site, the failing rules and the caution."""
    sites = EXAMPLES / "harbour_sites.csv"
    status, out, err = run(capsys, "sweep", HARBOUR, "--sites", sites, "--best")
    assert status == 1  # some invented sites fail on purpose
    assert "Traceback" not in err
    assert out.startswith("Sweep of design 1 over 13 sites:")
    assert "quay crane 1 (north berth)" in out and "PASS" in out and "FAIL" in out
    assert "Rules failing most:" in out and "Worst site:" in out
    assert " 1 sites" not in out  # singular where one site fails
    assert "Caution" in out


def test_verify_terminal_report(capsys):
    """The verification's terminal report: the verdict and the measured-against-predicted table."""
    status, out, err = run(capsys, "verify", HARBOUR, "--best", "--frames", "4", "--seed", "3")
    assert status in (0, 1, 3) and "Traceback" not in err
    assert out.lstrip().startswith("Verification of design 1: model and simulation ")  # after the progress bar
    for row in ("Doppler + echo", "channel-estimation", "effective SINR", "Rate "):
        assert row in out


def test_design_note_states_the_relaxation_in_engineering_units(tmp_path, capsys):
    """The note's what-if sentence reads like the terminal's: units, not raw floats."""
    note = tmp_path / "note.md"
    status, _, err = run(capsys, "solve", EXAMPLES / "underwater_modem.toml", "--markdown", note)
    assert status == 0 and err == ""
    line = next(x for x in note.read_text(encoding="utf-8").splitlines() if x.startswith("Relaxing"))
    assert "`rules.pilot_oversampling`" in line and "kbit/s" in line
    assert "e+0" not in line


def test_infeasible_window_sentence_agrees_in_number(capsys):
    status, out, _ = run(capsys, "solve", DRONE)
    assert status == 1
    assert "throughput rules out every spacing." in " ".join(out.split())
