"""Write docs/commands.md, the reference page of every command, from the commands' own help.

Run after adding or changing a command: ``python tools/make_command_reference.py > docs/commands.md``.
``tests/test_documented.py`` fails when a command is missing from README.md and docs/commands.md.
"""

from __future__ import annotations

import sys

from typer.main import get_command

from studylog.cli.app import app


def walk(command, path):  # type: ignore[no-untyped-def]
    yield path, command
    for name in sorted(getattr(command, "commands", {}) or {}):
        yield from walk(command.commands[name], [*path, name])


def main() -> None:
    out = sys.stdout
    out.write("# studylog commands\n\nGenerated from the commands' own help "
              "(`python tools/make_command_reference.py`). Exit codes and JSON shapes: README.md.\n")
    root = get_command(app)
    for path, command in walk(root, ["studylog"]):
        if len(path) == 1:
            continue
        out.write(f"\n## {' '.join(path)}\n\n")
        help_text = (command.help or "").strip()
        if help_text:
            out.write(help_text.split("\n\n")[0].replace("\n", " ") + "\n\n")
        arguments = [p.name.upper() for p in command.params if p.param_type_name == "argument"]
        out.write(f"`{' '.join([*path, *arguments, '[OPTIONS]'])}`\n\n")
        for param in command.params:
            if param.param_type_name != "option" or param.name == "help":
                continue
            names = ", ".join(f"`{o}`" for o in [*param.opts, *param.secondary_opts])
            text = " ".join((getattr(param, "help", "") or "").split())
            out.write(f"- {names}: {text}\n")


if __name__ == "__main__":
    main()
