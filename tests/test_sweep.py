"""Site sweeps (numerology.sweep): sites files, and the same numbers as `check` at every site.

The central check: a sweep gives, for each site, what ``api.check`` gives on
the requirement set written out with that site's values (built here through
``requirements_from_mapping`` from edited TOML mappings, a route independent
of the sites reader), within 1e-9 relative. The sweep builds each site's taps
by scaling a profile template, so only round-off separates the two.
"""

from __future__ import annotations

import copy
import csv
import io
import json
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from numerology import api, render_json
from numerology.design import Design
from numerology.environment import derive_environment
from numerology.errors import InputError
from numerology.requirements import read_toml, requirements_from_mapping
from numerology.sweep import load_sites, site_environments, sites_from_values, sweep, write_sweep_csv

EXAMPLES = Path(__file__).resolve().parent.parent / "requirements_examples"
HARBOUR = EXAMPLES / "harbour_crane.toml"
HARBOUR_SITES = EXAMPLES / "harbour_sites.csv"
KMH = 1000 / 3600  # m/s
RTOL = 1e-9  # same computation, round-off only (templates scaled instead of scaled profiles)

#: The harbour example's best design (120 kHz, FFT 256, CP 52, 150 used, pilots 8x14 shift 2, 14 symbols).
HARBOUR_DESIGN = Design("harbour best", 120e3, 256, 52, 150, 6, 11, 2, 7)
#: A small invented deployment (frequency error in Hz, so a site's carrier changes nothing else).
SMALL = {
    "environment": {"carrier": "2 GHz", "max_speed": "80 km/h", "max_excess_delay": "3 us",
                    "rms_delay_spread": "0.6 us"},
    "radio": {"bandwidth": "10 MHz", "snr": "20 dB", "frequency_error": "50 Hz", "oscillator_linewidth": "20 Hz"},
    "goals": {"throughput": "10 Mbit/s", "max_overhead": 0.4},
}
SMALL_DESIGN = Design("small", 15e3, 1024, 72, 600, 6, 4, 3, 14)


def _assert_same_as_check(result, i, req):
    """Site i of a sweep against api.check on an independently built requirement set."""
    check = api.check(req, result.design, with_limits=False)
    assert bool(result.passed[i]) == check.passed
    assert result.binding_rule[i] == check.binding_rule.name
    for rule in check.rules:
        got = result.margin[rule.name][i]
        if math.isinf(rule.margin):
            assert got == rule.margin, rule.name
        else:
            assert_allclose(got, rule.margin, rtol=RTOL, atol=1e-12, err_msg=rule.name)  # atol: margins that are 0
    assert_allclose(result.net_throughput_bps[i], check.net_throughput_bps, rtol=RTOL)
    assert_allclose(result.effective_sinr_db[i], check.effective_sinr_db, rtol=RTOL, atol=1e-9)
    env = check.environment
    batch = result.environment
    for name in ("max_doppler_hz", "coherence_time_s", "coherence_bandwidth_hz", "rms_delay_spread_s",
                 "max_excess_delay_s", "mean_excess_delay_s", "speed_mps", "wavelength_m"):
        assert_allclose(getattr(batch, name)[i], getattr(env, name), rtol=RTOL, atol=1e-15, err_msg=name)
    assert batch.notes_at(i) == env.notes


def _harbour_row_mapping(row: dict) -> dict:
    """The harbour TOML mapping edited with one row of harbour_sites.csv, as quantity strings."""
    data = copy.deepcopy(read_toml(HARBOUR))
    env = data["environment"]
    if row["max_speed [km/h]"]:
        env["max_speed"] = f"{row['max_speed [km/h]']} km/h"
    if row["snr [dB]"]:
        data["radio"]["snr"] = f"{row['snr [dB]']} dB"
    if row["rms_delay_spread [ns]"]:
        env["rms_delay_spread"] = f"{row['rms_delay_spread [ns]']} ns"
    if row["profile"]:
        del env["profile_file"]
        if row["profile"] != "none":
            env["profile"] = row["profile"]
    if row["max_excess_delay [us]"]:
        env["max_excess_delay"] = f"{row['max_excess_delay [us]']} us"
    return data


def _rows(path):
    lines = [line for line in Path(path).read_text().splitlines() if line.strip() and not line.startswith("#")]
    return list(csv.DictReader(lines))


def test_harbour_sites_match_check_site_by_site():
    """Every row of the shipped sites file: the sweep equals check on the edited requirement file."""
    req = api.load(HARBOUR)
    sites = load_sites(HARBOUR_SITES, req)
    assert sites.problems == ()
    rows = _rows(HARBOUR_SITES)
    assert sites.size == len(rows) >= 12
    result = sweep(req, HARBOUR_DESIGN, sites)
    for i, row in enumerate(rows):
        assert sites.names[i] == row["site"]
        _assert_same_as_check(result, i, requirements_from_mapping(_harbour_row_mapping(row), str(HARBOUR), EXAMPLES))
    # the shipped file shows both verdicts
    assert 0 < result.summary().passed < sites.size


SMALL_ROWS = """\
site,max_speed [km/h],max_doppler [Hz],carrier [GHz],snr [dB],profile,max_excess_delay [us],rms_delay_spread [ns]
as given,,,,,,,
faster,250,,,,,,
by Doppler,,300,,,,,
other carrier,80,,3.5,,,,
wideband carrier,40,,0.3,,,,
low snr,,,,3,,,
longer span,,,,,,4.5,
narrower spread,,,,,,,400
flat with rays,,,,,,2,900
TDL-C,,,,,TDL-C,,300
EVA as published,,,,,EVA,,
at rest,0,,,,,,
single path,,,,,none,0,0
duplicate channel,250,,,,,,
"""
SMALL_EDITS = {  # the same sites as TOML edits of SMALL
    "as given": {},
    "faster": {"max_speed": "250 km/h"},
    "by Doppler": {"max_speed": None, "max_doppler": "300 Hz"},
    "other carrier": {"carrier": "3.5 GHz"},
    "wideband carrier": {"carrier": "0.3 GHz", "max_speed": "40 km/h"},
    "low snr": {"snr": "3 dB"},
    "longer span": {"max_excess_delay": "4.5 us"},  # exponential decay fitted to span and rms
    "narrower spread": {"rms_delay_spread": "400 ns"},
    "flat with rays": {"max_excess_delay": "2 us", "rms_delay_spread": "900 ns"},  # beyond a flat profile's rms
    "TDL-C": {"max_excess_delay": None, "profile": "TDL-C", "rms_delay_spread": "300 ns"},
    "EVA as published": {"max_excess_delay": None, "profile": "EVA"},
    "at rest": {"max_speed": "0 km/h"},
    "single path": {"max_excess_delay": "0 us", "rms_delay_spread": "0 ns"},
    "duplicate channel": {"max_speed": "250 km/h"},
}
#: Requirement sets with one delay bound only: two equal rays, or an exponential profile, are assumed.
TWO_RAY = {"rms_delay_spread": None}
EXPONENTIAL = {"max_excess_delay": None}
ONE_BOUND_ROWS = """\
site,max_speed [km/h],max_excess_delay [us],rms_delay_spread [ns]
slow,10,,
bound,30,1.5,250
"""


def _small_mapping(edits: dict, base: dict | None = None) -> dict:
    data = copy.deepcopy(SMALL)
    for key, value in {**(base or {}), **edits}.items():
        table = data["radio"] if key == "snr" else data["environment"]
        if value is None:
            table.pop(key, None)
        else:
            table[key] = value
    return data


def test_every_kind_of_site_matches_check(tmp_path):
    """Speed or Doppler, carrier (wideband too), SNR, assumed profiles of each kind, catalogue profiles,
    speed 0 and a single path: each site as check gives it."""
    path = tmp_path / "sites.csv"
    path.write_text(SMALL_ROWS)
    req = requirements_from_mapping(SMALL)
    sites = load_sites(path, req)
    assert sites.problems == ()
    result = sweep(req, SMALL_DESIGN, sites)
    names = list(sites.names)
    assert names == list(SMALL_EDITS)
    for i, name in enumerate(names):
        _assert_same_as_check(result, i, requirements_from_mapping(_small_mapping(SMALL_EDITS[name])))
    assert any("wideband" in note for note, _ in result.environment.notes)  # the 0.3 GHz site


@pytest.mark.parametrize("base, row_edits", [
    (TWO_RAY, [{}, {"max_speed": "30 km/h", "max_excess_delay": "1.5 us", "rms_delay_spread": "250 ns"}]),
    (EXPONENTIAL, [{}, {"max_speed": "30 km/h", "max_excess_delay": "1.5 us", "rms_delay_spread": "250 ns"}]),
])
def test_one_delay_bound_sites_match_check(tmp_path, base, row_edits):
    """Two equal rays (max excess delay only) and an exponential profile (rms only) assumed per site."""
    path = tmp_path / "sites.csv"
    path.write_text(ONE_BOUND_ROWS)
    req = requirements_from_mapping(_small_mapping({}, base))
    sites = load_sites(path, req)
    assert sites.problems == ()
    result = sweep(req, SMALL_DESIGN, sites)
    row_edits[0] = {"max_speed": "10 km/h"}
    for i, edits in enumerate(row_edits):
        _assert_same_as_check(result, i, requirements_from_mapping(_small_mapping(edits, base)))


def test_doppler_of_a_site_against_published_values(tmp_path):
    """f_D = v f_c / c: 2 GHz at 120 km/h is about 222 Hz (textbook worked value, from memory; rounded: 1 %);
    coherence time at correlation 0.5 of the classical spectrum is 0.2421 / f_D (calc from Clarke 1968's J0)."""
    req = requirements_from_mapping(SMALL)
    sites = sites_from_values(req, max_speed_mps=[120 * KMH], carrier_hz=[2e9])
    env = site_environments(req, sites)
    assert_allclose(env.max_doppler_hz[0], 222.0, rtol=0.01)
    assert_allclose(env.coherence_time_s[0] * env.max_doppler_hz[0], 0.2421, rtol=2e-4)  # 4 digits given


def test_batch_environment_site_is_derive_environment():
    """EnvironmentBatch.at(i) holds what derive_environment gives for the edited requirement set."""
    req = requirements_from_mapping(SMALL)
    sites = sites_from_values(req, max_speed_mps=[5.0, 50.0], rms_delay_spread_s=[200e-9, np.nan],
                              max_excess_delay_s=[np.nan, 2e-6], profile=["TDL-C", "none"])
    assert sites.problems == ()
    batch = site_environments(req, sites)
    for i in range(2):
        single = derive_environment(sites.requirements_for(req, i))
        site = batch.at(i)
        for name in ("max_doppler_hz", "coherence_time_s", "coherence_bandwidth_hz", "rms_delay_spread_s",
                     "max_excess_delay_s", "speed_mps"):
            assert_allclose(getattr(site, name), getattr(single, name), rtol=RTOL)
        assert_allclose(site.delays_s, single.delays_s, rtol=RTOL, atol=1e-18)
        assert_allclose(site.powers, single.powers, rtol=RTOL)
        assert site.notes == single.notes


def test_environments_of_repeated_sites_are_each_site_alone():
    """Sites sharing profile shapes (each evaluated once, then stretched per site) get their own environment:
    a batch of 60 mixed sites with many repeats equals each site built alone, and derive_environment."""
    req = requirements_from_mapping(SMALL)
    rng = np.random.default_rng(3)
    n = 60
    span = rng.choice([np.nan, 0.0, 1e-6, 2e-6, 3e-6], n)
    rms = rng.choice([np.nan, 0.0, 100e-9, 300e-9, 900e-9], n)
    profile = rng.choice(["", "none", "TDL-C", "EVA"], n)
    # keep the combinations a requirement file accepts (a profile fixes the span; rms <= span / 2)
    span = np.where(np.isin(profile, ["TDL-C", "EVA"]), np.nan, np.where(rms > span / 2, np.nan, span))
    rms = np.where((profile == "TDL-C") & np.isnan(rms), 200e-9, rms)
    rms = np.where((profile == "TDL-C") & (rms == 0), 50e-9, np.where((profile == "EVA") & (rms == 0), np.nan, rms))
    profile = np.where((profile == "none") & np.isnan(span) & np.isnan(rms), "", profile)
    values = dict(max_speed_mps=rng.choice([0.0, 5.0, 30.0], n), carrier_hz=rng.choice([2e9, 0.3e9], n),
                  max_excess_delay_s=span, rms_delay_spread_s=rms, profile=profile)
    sites = sites_from_values(req, **values)
    assert sites.problems == () and sites.size == n
    batch = site_environments(req, sites)
    for i in range(n):
        alone = site_environments(req, sites_from_values(req, **{k: v[i:i + 1] for k, v in values.items()}))
        for name in batch.PER_SITE:
            expected, got = getattr(alone, name)[0], getattr(batch, name)[i]
            if isinstance(got, str):
                assert got == expected, name
            else:
                # Same arithmetic; the coherence bandwidth's bisection stops once every shape of the call is
                # within 1e-12 relative (delay.coherence_bandwidth_hz), so batch-mates move its last digits.
                rtol = 2e-12 if name == "coherence_bandwidth_hz" else 1e-15
                assert_allclose(got, expected, rtol=rtol, atol=0, err_msg=name)
        keep = batch.powers[i] > 0
        assert_allclose(batch.delays_s[i][keep], alone.delays_s[0][alone.powers[0] > 0], rtol=1e-15, atol=0)
        assert_allclose(batch.powers[i][keep], alone.powers[0][alone.powers[0] > 0], rtol=1e-15, atol=0)
        assert batch.notes_at(i) == alone.notes_at(0)
    for i in range(0, n, 7):  # and, to round-off, what derive_environment gives on its own route
        single = derive_environment(sites.requirements_for(req, i))
        site = batch.at(i)
        for name in ("coherence_bandwidth_hz", "rms_delay_spread_s", "mean_excess_delay_s", "max_excess_delay_s"):
            assert_allclose(getattr(site, name), getattr(single, name), rtol=RTOL, atol=1e-18, err_msg=name)
        assert site.notes == single.notes


@settings(max_examples=8, deadline=None)
@given(st.lists(st.tuples(st.sampled_from([0.0, 3.0, 30.0, 60.0]), st.sampled_from([50e-9, 300e-9, 1.4e-6]),
                          st.sampled_from([5.0, 20.0])), min_size=1, max_size=5))
def test_sweep_of_many_is_each_swept_alone(values):
    """Broadcasting one design over a batch (and solving identical channels once) changes no number."""
    req = requirements_from_mapping(SMALL)
    speed, rms, snr = (np.array(v) for v in zip(*values))
    together = sweep(req, SMALL_DESIGN, sites_from_values(req, max_speed_mps=speed, rms_delay_spread_s=rms,
                                                          snr_db=snr))
    for i in range(speed.size):
        alone = sweep(req, SMALL_DESIGN, sites_from_values(req, max_speed_mps=speed[i:i + 1],
                                                           rms_delay_spread_s=rms[i:i + 1], snr_db=snr[i:i + 1]))
        # 1e-10: the cell-averaged estimation error sums over a cell width padded to the largest cell of the
        # batch, so the summation order (and the last bits) depend on what else is in the batch.
        for name in together.margin:
            assert_allclose(together.margin[name][i], alone.margin[name][0], rtol=1e-10, atol=1e-14)
        assert_allclose(together.net_throughput_bps[i], alone.net_throughput_bps[0], rtol=1e-10)


BAD_ROWS = """\
# invented rows, each with one problem
site,max_speed [km/h],rms_delay_spread [ns],profile,max_excess_delay [us],snr [dB]
ok 1,10,150,,,25
bad number,fast,150,,,25
too few,10,150
out of range,-5,150,,,25
unknown profile,10,,EVB,,25
profile conflict,10,,,1.0,25
normalised,10,,TDL-C,,25

ok 2,20,,none,1.2,18
ok 1,10,150,,,25
loud,10,150,,,95
too much rms,10,900,none,1.2,18
"""


def test_malformed_rows_are_named_by_line_and_the_rest_evaluated(tmp_path):
    path = tmp_path / "sites.csv"
    path.write_text(BAD_ROWS)
    req = api.load(HARBOUR)
    sites = load_sites(path, req)
    problems = dict(sites.problems)
    assert sorted(problems) == [4, 5, 6, 7, 8, 9, 12, 13, 14]
    assert problems[4] == "max_speed: expected a number in km/h, got 'fast'"
    assert problems[5] == ("expected 6 values (site, max_speed, rms_delay_spread, profile, max_excess_delay, snr), "
                           "got 3")
    assert problems[6] == "max_speed: -5 km/h is out of range: expected at least 0 km/h and at most 72000 km/h"
    assert problems[7].startswith("profile: unknown channel profile 'EVB'") and "EVA" in problems[7]
    assert "fixes the max excess delay" in problems[8] and "profile to none" in problems[8]
    assert problems[9] == "rms_delay_spread: missing; profile TDL-C is normalised and needs an rms delay spread"
    assert problems[12] == "site: 'ok 1' is already used on line 3"
    assert problems[13] == "snr: 95 dB is out of range: expected at least -30 dB and at most 80 dB"
    assert "above half the max excess delay" in problems[14]
    assert list(sites.names) == ["ok 1", "ok 2"]
    assert list(sites.lines) == [3, 11]
    # the good rows give what a clean file of them gives
    clean = tmp_path / "clean.csv"
    lines = BAD_ROWS.splitlines()
    clean.write_text("\n".join([lines[1], lines[2], lines[10]]) + "\n")
    expected = sweep(req, HARBOUR_DESIGN, load_sites(clean, req))
    got = sweep(req, HARBOUR_DESIGN, sites)
    for name in expected.margin:
        assert_allclose(got.margin[name], expected.margin[name], rtol=1e-12)
    assert got.summary().problems == 9


def _quoted(text: str) -> str:
    """The same file with every cell of every header and site row in double quotes (comments and blanks kept)."""
    out = []
    for line in text.splitlines():
        if line.strip() and not line.lstrip().startswith("#"):
            buffer = io.StringIO()
            csv.writer(buffer, quoting=csv.QUOTE_ALL, lineterminator="").writerow(next(csv.reader([line])))
            line = buffer.getvalue()
        out.append(line)
    return "\n".join(out) + "\n"


def _assert_same_sites(a, b):
    assert a.problems == b.problems
    assert a.names.tolist() == b.names.tolist() and a.lines.tolist() == b.lines.tolist()
    for name in ("speed_mps", "max_doppler_hz", "carrier_hz", "snr_db", "rms_delay_spread_s", "max_excess_delay_s"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    assert a.profile.tolist() == b.profile.tolist() and a.profile_file.tolist() == b.profile_file.tolist()


@pytest.mark.parametrize("text", [BAD_ROWS, HARBOUR_SITES.read_text()], ids=["bad rows", "harbour"])
def test_quoted_cells_read_as_plain_ones(tmp_path, text):
    """Rows without quotes are split directly; rows with quotes go through the csv module: the same sites."""
    plain, quoted = tmp_path / "plain.csv", tmp_path / "quoted.csv"
    plain.write_text(text)
    quoted.write_text(_quoted(text))
    rows = [line for line in text.splitlines() if line.strip() and not line.lstrip().startswith("#")]
    assert not any('"' in line for line in rows) and quoted.read_text().count('"') > 20
    req = api.load(HARBOUR)
    _assert_same_sites(load_sites(plain, req), load_sites(quoted, req))


def test_a_quoted_comma_belongs_to_its_cell(tmp_path):
    path = tmp_path / "sites.csv"
    path.write_text('site,max_speed [km/h]\n"berth 4, east",12\nwest , 1e1 \n"said ""hi""",3\n')
    sites = load_sites(path, api.load(HARBOUR))
    assert sites.problems == ()
    assert sites.names.tolist() == ["berth 4, east", "west", 'said "hi"']
    assert_allclose(sites.speed_mps, np.array([12, 10, 3]) * KMH, rtol=1e-15)


def test_blank_and_comment_lines_keep_the_line_numbers(tmp_path):
    """Lines of blanks (any Unicode white space) and indented comments are skipped; the others keep their number."""
    path = tmp_path / "sites.csv"
    path.write_text("  # indented comment\nsite,snr [dB]\n\t\na,1\n\u00a0\n   \n  # another\n b ,2\n\nc,\n")
    sites = load_sites(path, api.load(HARBOUR))
    assert sites.names.tolist() == ["a", "b", "c"]
    assert sites.lines.tolist() == [4, 8, 10]
    assert_allclose(sites.snr_db, [1.0, 2.0, 22.0], rtol=0)  # the empty cell takes the file's 22 dB


def test_rows_of_the_wrong_width_with_and_without_quotes(tmp_path):
    """Each row with another number of cells is named by its line; its neighbours keep their own values."""
    req = api.load(HARBOUR)
    rows = "site,max_speed [km/h],snr [dB]\na,1,20\nb,2\nc,3,21,9\nd,4,22\n"
    plain, quoted = tmp_path / "plain.csv", tmp_path / "quoted.csv"
    plain.write_text(rows)
    quoted.write_text(rows.replace("d,", '"d",'))
    for path in (plain, quoted):
        sites = load_sites(path, req)
        assert sites.problems == ((3, "expected 3 values (site, max_speed, snr), got 2"),
                                  (4, "expected 3 values (site, max_speed, snr), got 4"))
        assert sites.names.tolist() == ["a", "d"]
        assert_allclose(sites.speed_mps, np.array([1, 4]) * KMH, rtol=1e-15)
        assert_allclose(sites.snr_db, [20.0, 22.0], rtol=0)


def test_a_row_the_csv_module_cannot_read_is_an_input_error(tmp_path):
    """A quoted cell longer than the csv module's field limit (131072 characters by default) names its line."""
    path = tmp_path / "sites.csv"
    path.write_text('# sites\nsite,snr [dB]\na,1\n"' + "x" * 200_000 + '",2\n')
    with pytest.raises(InputError) as caught:
        load_sites(path, api.load(HARBOUR))
    assert caught.value.place == f"{path}: line 4"
    assert caught.value.message.startswith("cannot be read as CSV (field larger than field limit")


@pytest.mark.parametrize("text, place, message", [
    ("site,speed [km/h]\na,1\n", "line 1", "unknown column 'speed' (did you mean 'max_speed'?)"),
    ("# note\nsite,max_speed\na,1\n", "line 2", "column 'max_speed' needs its unit in brackets, such as "
                                                "'max_speed [km/h]'"),
    ("site,max_speed [GHz]\na,1\n", "line 1", "expected a speed"),
    ("site,snr\na,1\n", "line 1", "column 'snr' needs its unit: expected 'snr [dB]'"),
    ("site,site\na,b\n", "line 1", "column 'site' is given twice"),
    ("site,profile [ns]\na,EVA\n", "line 1", "column 'profile' takes no unit, got [ns]"),
    ("site,max speed [km/h]\na,1\n", "line 1", "expected a name and its unit in brackets"),
    ("# only a comment\n\n", "", "has no header"),
    ("site,max_speed [km/h]\n# no rows\n", "", "has a header but no sites"),
])
def test_malformed_header_is_an_input_error(tmp_path, text, place, message):
    path = tmp_path / "sites.csv"
    path.write_text(text)
    with pytest.raises(InputError) as caught:
        load_sites(path, api.load(HARBOUR))
    assert str(path) in caught.value.place
    assert place in caught.value.place
    assert message in caught.value.message


def test_unreadable_files_are_input_errors(tmp_path):
    req = api.load(HARBOUR)
    with pytest.raises(InputError, match="is a folder"):
        load_sites(tmp_path, req)
    with pytest.raises(InputError, match="cannot be read"):
        load_sites(tmp_path / "missing.csv", req)
    latin = tmp_path / "latin.csv"
    latin.write_bytes("site,max_speed [km/h]\nGr\u00e4fe,3\n".encode("latin-1"))
    with pytest.raises(InputError, match="not UTF-8"):
        load_sites(latin, req)


def test_units_in_brackets_are_converted(tmp_path):
    """Any pint unit of the right dimension: 36 km/h = 10 m/s = 22.37 mph; 150 ns = 0.15 us; 3.7 GHz = 3700 MHz."""
    req = api.load(HARBOUR)
    a = tmp_path / "a.csv"
    b = tmp_path / "b.csv"
    a.write_text("max_speed [km/h],rms_delay_spread [ns],carrier [GHz]\n36,150,3.7\n")
    b.write_text("max_speed [m/s],rms_delay_spread [us],carrier [MHz]\n10,0.15,3700\n")
    sa, sb = load_sites(a, req), load_sites(b, req)
    assert_allclose(sa.speed_mps, sb.speed_mps, rtol=1e-15)
    assert_allclose(sa.rms_delay_spread_s, sb.rms_delay_spread_s, rtol=1e-15)
    assert_allclose(sa.carrier_hz, sb.carrier_hz, rtol=1e-15)
    assert list(sa.names) == ["line 2"]


def test_frequency_error_in_ppm_follows_each_sites_carrier(tmp_path):
    """The harbour file gives 0.1 ppm (370 Hz at 3.7 GHz); a site on 3.5 GHz gets 350 Hz, as reading the
    requirement file with that carrier would, and the sweep agrees with check on the edited file."""
    req = api.load(HARBOUR)
    path = tmp_path / "sites.csv"
    path.write_text("site,carrier [GHz]\nlow,3.5\n")
    sites = load_sites(path, req)
    edited = sites.requirements_for(req, 0)
    assert_allclose(edited.radio.frequency_error_hz, 350.0, rtol=1e-12)
    result = sweep(req, HARBOUR_DESIGN, sites)
    _assert_same_as_check(result, 0, edited)


def test_summary_counts_and_worst_site():
    req = api.load(HARBOUR)
    result = sweep(req, HARBOUR_DESIGN, load_sites(HARBOUR_SITES, req))
    summary = result.summary()
    assert summary.sites == result.sites.size
    assert summary.passed == int(np.sum(result.passed))
    assert summary.failed == summary.sites - summary.passed
    for rule in result.rules:
        assert summary.failures.get(rule.name, 0) == int(np.sum(result.margin[rule.name] < 0))
    assert list(summary.failures.values()) == sorted(summary.failures.values(), reverse=True)
    assert summary.most_failing_rule == next(iter(summary.failures))
    worst = np.min(np.stack([result.normalised[r.name] for r in result.rules]), axis=0)
    i = int(np.argmin(worst))
    assert (summary.worst_site, summary.worst_line, summary.worst_rule) == (
        result.sites.names[i], result.sites.lines[i], result.binding_rule[i])
    assert str(summary).startswith(f"{summary.passed} of {summary.sites} sites pass; failing: ")


def test_csv_output(tmp_path):
    req = api.load(HARBOUR)
    path = tmp_path / "sites.csv"
    path.write_text(BAD_ROWS)
    result = sweep(req, HARBOUR_DESIGN, load_sites(path, req))
    out = tmp_path / "out.csv"
    write_sweep_csv(out, result)
    # the metadata beside the CSV; no temporary file left
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.csv", "out.csv.json", "sites.csv"]
    meta = json.loads((tmp_path / "out.csv.json").read_text())
    assert meta["schema"] == "numerology.sweep_csv" and meta["csv"] == "out.csv"
    assert meta["problems"][0] == {"line": 4, "message": "max_speed: expected a number in km/h, got 'fast'"}
    assert len(meta["problems"]) + len(meta["notes"]) == 9
    text = out.read_text().splitlines()
    assert not any(line.startswith("#") for line in text)  # plain CSV: every line is the header or a row
    rows = list(csv.reader(text))
    assert [c["name"] for c in meta["columns"]] == rows[0]
    header = rows[0]
    assert header[:5] == ["site", "pass", "binding_rule", "net_throughput [Mbit/s]", "effective_sinr [dB]"]
    assert header[-2:] == ["coherence_time [ms]", "coherence_bandwidth [MHz]"]
    rules = result.rules
    assert header[5:-2] == [f"{r.name} margin [{'dB' if r.convention == 'db' else '%'}]" for r in rules]
    assert [r[0] for r in rows[1:]] == ["ok 1", "ok 2"]
    for i, row in enumerate(rows[1:]):
        assert row[1] == ("yes" if result.passed[i] else "no")
        assert row[2] == result.binding_rule[i]
        assert_allclose(float(row[3]), result.net_throughput_bps[i] / 1e6, rtol=1e-5)  # 6 digits written
        for j, rule in enumerate(rules):
            scale = 1.0 if rule.convention == "db" else 100.0
            assert_allclose(float(row[5 + j]), scale * result.margin[rule.name][i], rtol=1e-5, atol=1e-9)


def test_json_output():
    req = api.load(HARBOUR)
    result = sweep(req, HARBOUR_DESIGN, load_sites(HARBOUR_SITES, req))
    document = json.loads(render_json.document("numerology.sweep", result.to_json()))
    assert len(document["sites"]) == result.sites.size
    site = document["sites"][0]
    assert set(site) >= {"site", "passed", "binding_rule", "margins", "net_throughput_bps", "effective_sinr_db"}
    dB_rules = {r.name for r in result.rules if r.convention == "db"}
    assert set(site["margins"]) == {r.name + ("_db" if r.name in dB_rules else "") for r in result.rules}
    assert document["summary"]["passed"] == result.summary().passed
    assert document["problems"] == []


def test_no_valid_site(tmp_path):
    path = tmp_path / "sites.csv"
    path.write_text("site,max_speed [km/h]\na,x\nb,y\n")
    req = api.load(HARBOUR)
    sites = load_sites(path, req)
    assert sites.size == 0 and len(sites.problems) == 2
    result = sweep(req, HARBOUR_DESIGN, sites)
    summary = result.summary()
    assert (summary.sites, summary.passed, summary.worst_site) == (0, 0, None)
    assert result.to_json()["sites"] == []
    write_sweep_csv(tmp_path / "out.csv", result)
    assert (tmp_path / "out.csv").read_text().count("\n") == 1  # the header only
    assert len(json.loads((tmp_path / "out.csv.json").read_text())["problems"]) == 2
