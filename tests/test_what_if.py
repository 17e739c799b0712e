"""What-ifs carried through: check --speed/--delay analyse a requirement set with the what-if's values
(environment.what_if_requirements), and the picture, the terminal and the JSON say so, the file's values beside
them (the note: tests/test_note.py)."""

from __future__ import annotations

from pathlib import Path

import pytest
from numpy.testing import assert_allclose

from numerology import api, cli, plots
from numerology.environment import derive_environment, what_if_requirements
from numerology.requirements import requirements_from_mapping

EXAMPLES = Path(__file__).resolve().parent.parent / "requirements_examples"
RAIL = EXAMPLES / "rail_corridor.toml"
KMH = 1 / 3.6


def test_check_what_if_speed_is_on_the_picture(tmp_path):
    """check --speed "350 km/h" --plot: the picture's star (the point analysed) is at 350 km/h and the file's
    point at 300 km/h, both named in the legend."""
    pytest.importorskip("matplotlib")
    picture = tmp_path / "p.svg"
    status = cli.main(["check", str(RAIL), "--preset", "nr-mu1", "--speed", "350 km/h", "--plot", str(picture)])
    assert status in (0, 1)
    svg = picture.read_text(encoding="utf-8")
    assert "analysed (what-if): 350 km/h" in svg and "requirement file: 300 km/h" in svg
    req = api.load(RAIL)
    check = api.check(req, preset="nr-mu1", speed_mps=350 * KMH)
    drawn = plots.picture(req, check, grid=(8, 6))
    assert_allclose(drawn.operating.required_speed_mps, 350 * KMH, rtol=1e-12)
    assert_allclose(drawn.operating.file_point[0], 300 * KMH, rtol=1e-12)
    assert_allclose(drawn.environment.max_doppler_hz, check.environment.max_doppler_hz, rtol=1e-12)


@pytest.mark.parametrize("environment", [
    {"profile": "EVA", "doppler_spectrum": "tracked", "k_factor": "9 dB"},
    {"profile": "TDL-C", "rms_delay_spread": "300 ns"},
    {"max_excess_delay": "2 us"},
    {"max_excess_delay": "185 us", "rms_delay_spread": "60 us"},
    {"max_excess_delay": "10 us", "rms_delay_spread": "1 us"},
    {"rms_delay_spread": "300 ns"},
    {"max_excess_delay": "0 s"},
])
def test_a_what_if_is_the_requirement_set_it_names(environment):
    """The environment check analyses for --speed/--delay is that of what_if_requirements: what the picture and
    the stretch limits read."""
    req = requirements_from_mapping({"environment": {"carrier": "2 GHz", "max_speed": "100 km/h", **environment},
                                     "radio": {"bandwidth": "10 MHz", "snr": "20 dB"}})
    for speed, delay in ((250 * KMH, None), (None, 4e-6), (30 * KMH, 7e-6)):
        direct = derive_environment(req, speed_mps=speed, max_excess_delay_s=delay)
        named = derive_environment(what_if_requirements(req, speed_mps=speed, max_excess_delay_s=delay))
        assert_allclose(named.max_doppler_hz, direct.max_doppler_hz, rtol=1e-14)
        assert_allclose(named.delays_s, direct.delays_s, rtol=1e-12, atol=1e-18)
        assert_allclose(named.powers, direct.powers, rtol=1e-12)
        assert_allclose(named.max_excess_delay_s, direct.max_excess_delay_s, rtol=1e-12)
        if delay is not None:
            assert direct.max_excess_delay_s == delay


def test_check_json_says_what_was_analysed(capsys):
    import json

    assert cli.main(["check", str(RAIL), "--preset", "nr-mu1", "--speed", "350 km/h", "--json"]) in (0, 1)
    data = json.loads(capsys.readouterr().out)
    assert_allclose(data["what_if"]["speed_mps"], 350 * KMH, rtol=1e-12)
    assert data["origin"].startswith("preset nr-mu1")


def test_terminal_design_line_shows_the_arrangement_and_the_allowance(capsys):
    assert cli.main(["check", str(RAIL), "--preset", "lte-normal"]) in (0, 1)
    out = " ".join(capsys.readouterr().out.split())  # the console wraps lines
    assert "stream pilots 0,4/7, comb 6 shift 3" in out
    assert "up to 7 symbols back and 3 ahead" in out
    assert "pilots every" not in out
