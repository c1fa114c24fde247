"""Every command is documented: a section in docs/commands.md (linked from the README) and its own help."""

from __future__ import annotations

import re
from pathlib import Path

from typer.main import get_command

from studylog.cli.app import app

ROOT = Path(__file__).resolve().parents[1]


def _paths(command, path):  # type: ignore[no-untyped-def]
    yield path, command
    for name, sub in (getattr(command, "commands", {}) or {}).items():
        yield from _paths(sub, [*path, name])


def test_every_command_has_a_section_in_the_reference_and_help() -> None:
    reference = (ROOT / "docs" / "commands.md").read_text(encoding="utf-8")
    headings = set(re.findall(r"^## (studylog .+)$", reference, flags=re.MULTILINE))
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    missing = []
    for path, command in _paths(get_command(app), ["studylog"]):
        if len(path) == 1:
            continue
        name = " ".join(path)
        if name not in headings and f"`{name}" not in readme:
            missing.append(name)
        assert (command.help or "").strip(), f"{name} has no help"
    assert missing == [], "run: python tools/make_command_reference.py > docs/commands.md"


def test_the_readme_links_the_reference_and_gives_two_setup_commands() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "docs/commands.md" in readme
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    test_command = ci.strip().splitlines()[-1]
    assert test_command in readme, "the README must give the test command that .ci/run runs"
