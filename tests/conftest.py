"""Shared fixtures: the shipped example files and a small TOML writer for modified copies."""

import atexit
import contextlib
import json
import math
import os
import re
import shutil
import signal
import tempfile
import tomllib
from pathlib import Path

import pytest

import numerology  # noqa: F401  (before any test module imports numpy: BLAS keeps to one thread, as in a run)

# The tests never touch the user's cache of quantity strings: theirs lives in a folder of this session.
_CACHE_DIR = tempfile.mkdtemp(prefix="numerology-test-cache-")
os.environ["NUMEROLOGY_CACHE_DIR"] = _CACHE_DIR
atexit.register(shutil.rmtree, _CACHE_DIR, ignore_errors=True)

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "requirements_examples"


def toml_value(value) -> str:
    """One TOML value: strings, numbers (nan and inf included), booleans, arrays and inline tables."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and not math.isfinite(value):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{toml_key(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
    return json.dumps(value, ensure_ascii=False)  # JSON strings and numbers are valid TOML


def design_json_to_mapping(data: dict, derived=("cp_s", "useful_symbol_s", "symbol_s")) -> dict:
    """A design's JSON as a design file writes it: unit suffixes stripped, the unit put into the value."""
    mapping = {}
    for key, value in data.items():
        if key in derived:
            continue
        if key.endswith("_hz"):
            mapping[key[:-3]] = f"{value!r} Hz"
        elif key.endswith("_s"):
            mapping[key[:-2]] = f"{value!r} s"
        elif key == "pilot":
            mapping[key] = {k: v for k, v in value.items() if k != "boost_db"} | {"boost": f"{value['boost_db']!r} dB"}
        else:
            mapping[key] = value
    return mapping


def toml_key(key: str) -> str:
    """A bare key where TOML allows one, else a quoted key."""
    return key if re.fullmatch(r"[A-Za-z0-9_-]+", key) else json.dumps(key, ensure_ascii=False)


def toml_text(data: dict) -> str:
    """Serialise a {table: {key: value}} mapping; top-level values that are not tables come first."""
    lines = [f"{toml_key(k)} = {toml_value(v)}" for k, v in data.items() if not isinstance(v, dict)]
    for section, table in data.items():
        if isinstance(table, dict):
            lines.append(f"[{toml_key(section)}]")
            lines.extend(f"{toml_key(key)} = {toml_value(value)}" for key, value in table.items())
        lines.append("")
    return "\n".join(lines)


def requirement_data(path: Path, edits=()) -> dict:
    """A requirement file as a mapping, with the files it names made absolute (a copy elsewhere still finds
    them) and ``edits`` applied: ``((section, key), value)`` pairs, a value of None removing the key."""
    data = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    for section, name in (("environment", "profile_file"), ("rules", "mcs_table")):
        if name in data.get(section, {}):
            data[section][name] = str(Path(path).parent / data[section][name])
    return apply_edits(data, edits)


def apply_edits(data: dict, edits) -> dict:
    """``data`` with ``((section, key), value)`` edits applied in place: a value sets, None removes."""
    for (section, name), value in edits:
        table = data.setdefault(section, {})
        if value is None:
            table.pop(name, None)
        else:
            table[name] = value
    return data


class Timeout(BaseException):
    """A case ran past its alarm (a BaseException, so that the command line cannot take it for a bug of its own)."""


@contextlib.contextmanager
def alarm(seconds: int):
    """Fail a case that would hang, instead of waiting: SIGALRM raises :class:`Timeout` after ``seconds``."""
    def expire(*_):
        raise Timeout(f"took longer than {seconds} s")

    previous = signal.signal(signal.SIGALRM, expire)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


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


# --- reading a design note as a reviewer (tests/test_note.py, tests/test_what_if.py) -------------------------


def note_sections(text: str) -> dict:
    """Markdown text -> {heading: body}, for headings of levels 2 and 3."""
    out, name = {}, None
    for line in text.splitlines():
        if line.startswith("## ") or line.startswith("### "):
            name = line.lstrip("#").strip()
            out[name] = []
        elif name is not None:
            out[name].append(line)
    return {k: "\n".join(v) for k, v in out.items()}


def note_section(text: str, start: str) -> str:
    """The body of the first section whose heading starts with ``start``."""
    return next(body for name, body in note_sections(text).items() if name.startswith(start))


def note_tables(body: str) -> list:
    """Every Markdown table in a section body, as a list of rows (dicts by header)."""
    found, current = [], None
    for line in body.splitlines():
        if line.startswith("|"):
            cells = [c.strip() for c in re.split(r"(?<!\\)\|", line.strip())[1:-1]]
            if current is None:
                current = {"header": cells, "rows": []}
            elif not all(set(c) <= {"-"} for c in cells):
                current["rows"].append(dict(zip(current["header"], cells)))
        elif current is not None:
            found.append(current["rows"])
            current = None
    if current is not None:
        found.append(current["rows"])
    return found
