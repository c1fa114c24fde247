"""Every command and sub-command of studylog has help text, and ``--help`` exits 0 for each."""

from __future__ import annotations

from typing import Any

import pytest
import typer.main
from typer.core import TyperGroup, TyperOption
from typer.testing import CliRunner

from studylog.cli.app import app


# typer ships its own copy of click; its groups are TyperGroup and its options TyperOption
def _walk(command: Any, path: tuple[str, ...] = ()) -> list[tuple[tuple[str, ...], Any]]:
    found = [(path, command)]
    if isinstance(command, TyperGroup):
        for name, sub in sorted(command.commands.items()):
            found.extend(_walk(sub, (*path, name)))
    return found


COMMANDS = _walk(typer.main.get_command(app))


def test_the_tree_holds_the_dictionary_commands() -> None:
    paths = {" ".join(path) for path, _ in COMMANDS}
    for expected in ("init", "status", "table add", "table set", "table list", "table show", "var add",
                     "var set", "var show", "var list", "var history", "var confirm", "var deprecate",
                     "var rename", "var freeze", "var versions", "var diff", "var import", "var export"):
        assert expected in paths


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=[" ".join(p) or "studylog" for p, _ in COMMANDS])
def test_every_command_has_help(path: tuple[str, ...], command: Any) -> None:
    text = (command.help or command.short_help or "").strip()
    assert text, f"'{' '.join(path)}' has no help text"
    for parameter in command.params:
        if isinstance(parameter, TyperOption) and not parameter.hidden:
            assert (parameter.help or "").strip(), f"'{' '.join(path)}' option {parameter.opts} has no help"
    result = CliRunner().invoke(app, [*path, "--help"])
    assert result.exit_code == 0, result.output
    # the help is re-wrapped to the terminal's width; compare its opening words
    assert " ".join(text.split()[:5]) in " ".join(result.stdout.split())


def test_the_command_map_matches_what_each_module_registers() -> None:
    import importlib

    import typer

    from studylog.cli.app import COMMAND_MODULES, _module_of

    for module, names in COMMAND_MODULES.items():
        probe = typer.Typer()
        importlib.import_module(module).register(probe)
        found = [c.name or c.callback.__name__ for c in probe.registered_commands]
        found += [g.name for g in probe.registered_groups]
        assert sorted(found) == sorted(names), module
    assert _module_of(["--store", "x.db", "log", "text"]) == "studylog.cli.journal"
    assert _module_of(["--debug", "var", "list"]) == "studylog.cli.variables"
    assert _module_of(["--help"]) is None and _module_of(["nonsense"]) is None
