"""The README stays true: its key reference is generated from the schema, its commands exist."""

from pathlib import Path

from numerology.requirements import reference_markdown

ROOT = Path(__file__).resolve().parent.parent


def test_readme_key_reference_is_current():
    assert reference_markdown() in (ROOT / "README.md").read_text(encoding="utf-8")


def test_readme_has_exactly_the_two_setup_commands_first():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    setup = text.split("## Set up on a fresh machine", 1)[1].split("##", 1)[0]
    commands = [line for line in setup.splitlines() if line.startswith("pip install")]
    assert commands == [
        "pip install . && numerology solve requirements_examples/rail_corridor.toml",
        "pip install '.[test,plot]' && python -m pytest -q -n 2",
    ]


def test_ci_runs_the_readme_test_command():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    command = next(line for line in text.splitlines() if line.startswith("pip install '.[test")).split(" && ", 1)[1]
    assert f"\n{command}\n" in (ROOT / ".ci" / "run").read_text(encoding="utf-8")
