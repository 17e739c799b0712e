"""Every command and its options, in combination, on the shipped examples (issue 14).

For each command the option values (and the example file) are factors; the runs form a covering array in
which every pair of values of two factors appears at least once (all-pairs, common practice in
combinatorial testing), so every option meets every other option and every example. Each run must give
an answer (exit 0 or 1; verify also 3, inconclusive, as README documents), nothing on stderr but the lines
a command documents (the sweep's row problems), no traceback, and no warning: warnings are errors in this test run (pyproject.toml), so a numpy
RuntimeWarning fails the run it occurs in. Files asked for are written; JSON validates against its schema.
"""

from __future__ import annotations

import itertools
import json

import jsonschema
import pytest

from conftest import EXAMPLES, ROOT
from numerology.cli import main

EXAMPLE_FILES = sorted(p.name for p in EXAMPLES.glob("*.toml"))
DESIGNS = sorted(str(p) for p in (EXAMPLES / "designs").glob("*.toml"))
SITES = EXAMPLES / "harbour_sites.csv"

#: Command -> factors (name, values); None means "option left out".
FACTORS = {
    "env": [("example", EXAMPLE_FILES), ("--json", [False, True])],
    "check": [("example", EXAMPLE_FILES), ("design", ["--preset nr-mu1", "--preset dvbt-8k-g4", *DESIGNS]),
              ("--speed", [None, "120 km/h"]), ("--delay", [None, "3 us"]), ("--json", [False, True]),
              ("--markdown", [False, True]), ("--plot", [False, "png", "svg"])],
    "solve": [("example", EXAMPLE_FILES), ("--objective", [None, "throughput", "robustness", "overhead", "latency"]),
              ("--top", [None, "1", "3"]), ("--json", [False, True]), ("--markdown", [False, True]),
              ("--plot", [False, "png"])],
    "verify": [("example", EXAMPLE_FILES), ("design", ["--best", "--preset nr-mu1", DESIGNS[-1]]),
               ("--seed", [None, "7"]), ("--json", [False, True]), ("--markdown", [False, True])],
    "sweep": [("example", EXAMPLE_FILES), ("design", ["--best", "--preset nr-mu1", DESIGNS[-1]]),
              ("--json", [False, True]), ("--out", [False, True])],
}


def all_pairs(factors):
    """Rows (dicts) in which every pair of values of two factors appears at least once; greedy, deterministic."""
    names = [name for name, _ in factors]
    uncovered = {((a, x), (b, y)) for (a, xs), (b, ys) in itertools.combinations(factors, 2) for x in xs for y in ys}
    candidates = [dict(zip(names, values)) for values in itertools.product(*(vs for _, vs in factors))]
    rows = []
    while uncovered:
        def gain(row):
            return sum(((a, row[a]), (b, row[b])) in uncovered for a, b in itertools.combinations(names, 2))

        best = max(candidates, key=gain)  # the first of the best: deterministic
        rows.append(best)
        uncovered -= {((a, best[a]), (b, best[b])) for a, b in itertools.combinations(names, 2)}
    return rows


def _runs():
    for command, factors in FACTORS.items():
        for i, row in enumerate(all_pairs(factors)):
            yield pytest.param(command, row, id=f"{command}-{i}")


def _argv(command, row, folder):
    argv = [command, str(EXAMPLES / row["example"])]
    wanted = {}
    for name, value in row.items():
        if name == "example" or value in (None, False):
            continue
        if name == "design":
            argv += value.split() if value.startswith("--") else ["--design", value]
        elif name == "--json":
            argv.append("--json")
        elif name == "--markdown":
            wanted["md"] = folder / "note.md"
            argv += ["--markdown", str(wanted["md"])]
        elif name == "--plot":
            wanted[value] = folder / f"picture.{value}"
            argv += ["--plot", str(wanted[value])]
        elif name == "--out":
            wanted["csv"] = folder / "sites.csv"
            argv += ["--out", str(wanted["csv"])]
        else:
            argv += [name, value]
    if command == "verify":
        argv += ["--frames", "2"]  # the model against two simulated frames: enough to run every path
    if command == "sweep":
        argv += ["--sites", str(SITES)]
    return argv, wanted


MAGIC = {"md": b"# Design note", "png": b"\x89PNG", "svg": b"<?xml", "csv": b"site,pass,"}


@pytest.mark.parametrize("command, row", list(_runs()))
def test_option_combination(capsys, tmp_path, command, row):
    if row.get("--plot"):
        pytest.importorskip("matplotlib")
    argv, wanted = _argv(command, row, tmp_path)
    status = main(argv)
    out, err = capsys.readouterr()
    answers = (0, 1, 3) if command == "verify" else (0, 1)  # verify: 3 = inconclusive (two frames rarely decide)
    assert status in answers, (argv, err)
    assert "Traceback" not in err and "Warning" not in err
    lines = [line for line in err.splitlines() if line]
    if command in ("verify", "sweep") and row.get("design") == "--best" and status == 1 and lines \
            and "the request is infeasible" in lines[0]:
        lines = lines[1:]  # --best on an infeasible example: one line says so (exit 1)
    if command == "sweep":  # rows of the sites file that do not fit the example are reported, one line each
        assert all(line.startswith(f"numerology: {SITES}:") for line in lines), err
    else:
        assert lines == [], err
    for kind, path in wanted.items():
        if status == 1 and not path.exists():  # --best on an infeasible example: nothing to verify or sweep
            assert row.get("design") == "--best"
            continue
        assert path.read_bytes().startswith(MAGIC[kind]), (kind, argv)
    if row.get("--json") and out:
        document = json.loads(out)
        schema = json.loads((ROOT / "numerology" / "schemas" / f"{command}.schema.json").read_text(encoding="utf-8"))
        jsonschema.validate(document, schema)


@pytest.mark.parametrize("command", ["profiles", "presets"])
@pytest.mark.parametrize("as_json", [False, True])
def test_listing_commands(capsys, command, as_json):
    status = main([command] + (["--json"] if as_json else []))
    out, err = capsys.readouterr()
    assert status == 0 and err == "" and out


def test_the_covering_array_covers_every_pair():
    for factors in FACTORS.values():
        rows = all_pairs(factors)
        for (a, xs), (b, ys) in itertools.combinations(factors, 2):
            seen = {(row[a], row[b]) for row in rows}
            assert seen == set(itertools.product(xs, ys)), (a, b)


def test_the_installed_entry_runs_clean_with_warnings_as_errors(tmp_path):
    """The runs above are in-process under this test run's warnings-as-errors; this one starts the command
    line as a user would, with python -W error, on the example that printed a numpy warning."""
    import os
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-W", "error", "-m", "numerology", "solve",
                           str(EXAMPLES / "broadcast_sfn.toml"), "--json", "--markdown", str(tmp_path / "n.md")],
                          capture_output=True, text=True, timeout=300, env={**os.environ, "PYTHONWARNINGS": "error"})
    assert done.returncode == 0 and done.stderr == ""
    assert json.loads(done.stdout)["feasible"] is True
