"""Shared fixtures: the shipped example files and a small TOML writer for modified copies."""

import json
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "requirements_examples"


def toml_value(value) -> str:
    """One TOML value. JSON's strings, numbers, booleans and arrays are valid TOML for what we write."""
    return json.dumps(value, ensure_ascii=False)


def toml_text(data: dict) -> str:
    """Serialise a {table: {key: value}} mapping (one level of tables, as requirement files have)."""
    lines = []
    for section, table in data.items():
        lines.append(f"[{section}]")
        lines.extend(f"{key} = {toml_value(value)}" for key, value in table.items())
        lines.append("")
    return "\n".join(lines)


@pytest.fixture
def write_toml(tmp_path):
    """Write a mapping (or raw text/bytes) to ``tmp_path/name`` and return the path."""

    def write(data, name: str = "site.toml") -> Path:
        path = tmp_path / name
        if isinstance(data, bytes):
            path.write_bytes(data)
        elif isinstance(data, str):
            path.write_text(data, encoding="utf-8")
        else:
            path.write_text(toml_text(data), encoding="utf-8")
        return path

    return write


@pytest.fixture
def examples_copy(tmp_path):
    """A private copy of requirements_examples/ (with the CSV next to the TOML files)."""
    target = tmp_path / "examples"
    shutil.copytree(EXAMPLES, target)
    return target
