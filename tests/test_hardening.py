"""Regression tests for the hardening pass: one section per finding of issue 15, then the input-side
items of issue 14. Each test reproduces the finding as described and asserts the contract of the
README: exit 0, 1 or 2, one line on stderr for 2, nothing written on bad input, no input changed."""

from __future__ import annotations

import tomllib

import pytest

from conftest import EXAMPLES, toml_text
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
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    for section, values in tables.items():
        table = data.setdefault(section, {})
        for key, value in values.items():
            if value is None:
                table.pop(key, None)
            else:
                table[key] = value
    target.write_text(toml_text(data), encoding="utf-8")
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
