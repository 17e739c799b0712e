"""Every command's --json output validates against its versioned schema (numerology/schemas/*.schema.json)."""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pytest

from numerology.cli import main

ROOT = Path(__file__).resolve().parent.parent
EX = ROOT / "requirements_examples"
SCHEMAS = ROOT / "numerology" / "schemas"


def _schema(name):
    return json.loads((SCHEMAS / f"{name}.schema.json").read_text(encoding="utf-8"))


def _run(capsys, argv):
    status = main(argv)
    out = capsys.readouterr().out
    return status, json.loads(out)


@pytest.mark.parametrize("name", sorted(p.name.split(".")[0] for p in SCHEMAS.glob("*.schema.json")))
def test_schemas_are_valid_json_schema(name):
    jsonschema.Draft202012Validator.check_schema(_schema(name))


CASES = [
    ("env", ["env", str(EX / "underwater_modem.toml"), "--json"], {0}),
    ("profiles", ["profiles", "--json"], {0}),
    ("presets", ["presets", "--json"], {0}),
    ("check", ["check", str(EX / "harbour_crane.toml"), "--preset", "nr-mu1", "--json"], {0, 1}),
    ("solve", ["solve", str(EX / "harbour_crane.toml"), "--json"], {0}),
    ("solve", ["solve", str(EX / "drone_video.toml"), "--json"], {1}),
    ("sweep", ["sweep", str(EX / "harbour_crane.toml"), "--sites", str(EX / "harbour_sites.csv"), "--preset",
               "nr-mu1", "--json"], {0, 1}),
    ("plan", ["plan", str(EX / "harbour_crane.toml"), "--sites", str(EX / "harbour_sites.csv"), "--json"], {0}),
]


@pytest.mark.parametrize("name, argv, statuses", CASES, ids=[" ".join(c[1][:2]) for c in CASES])
def test_command_output_validates(capsys, name, argv, statuses):
    status, document = _run(capsys, argv)
    assert status in statuses
    jsonschema.validate(document, _schema(name))


def test_verify_output_validates(capsys):
    status, document = _run(capsys, ["verify", str(EX / "harbour_crane.toml"), "--preset", "nr-mu1", "--frames", "8",
                                     "--json"])
    assert status in (0, 1, 3)
    jsonschema.validate(document, _schema("verify"))


def test_sweep_csv_metadata_validates(capsys, tmp_path):
    out = tmp_path / "sites-result.csv"
    status = main(["sweep", str(EX / "harbour_crane.toml"), "--sites", str(EX / "harbour_sites.csv"), "--preset",
                   "nr-mu1", "--out", str(out)])
    capsys.readouterr()
    assert status in (0, 1)
    jsonschema.validate(json.loads((tmp_path / "sites-result.csv.json").read_text(encoding="utf-8")),
                        _schema("sweep_csv"))
