"""The root of the command line: global options, command registration, and the one place errors are caught.

Every failure a user can cause arrives here as a :class:`~studylog.errors.StudylogError` and leaves as one
line on stderr and its exit code (DESIGN.md: 0 done, 1 a check failed, 2 bad input, 3 store unusable).
``--debug`` re-raises it with its traceback. Unexpected errors (bugs) exit 4 with one line as well.
"""

from __future__ import annotations

import sys
from typing import Any

import typer
from typer.core import TyperGroup

from studylog import __version__
from studylog.cli.common import options
from studylog.errors import StudylogError

INTERNAL_ERROR = 4


def _fail(message: str, code: int) -> None:
    sys.stderr.write(f"error: {' '.join(message.split())}\n")
    sys.stderr.flush()
    sys.exit(code)


class StudylogGroup(TyperGroup):
    """The root group; its ``main`` turns our errors and click's usage errors into one line + exit code."""

    def main(self, *args: Any, **kwargs: Any) -> Any:  # noqa: D401
        from typer import _click as click

        kwargs["standalone_mode"] = False
        try:
            code = super().main(*args, **kwargs)
        except StudylogError as exc:
            if options.debug:
                raise
            _fail(exc.message, exc.exit_code)
        except click.exceptions.UsageError as exc:
            hint = ""
            if exc.ctx is not None:
                hint = f" (see '{exc.ctx.command_path} --help')"
            _fail(f"{exc.format_message()}{hint}", 2)
        except click.exceptions.ClickException as exc:
            _fail(exc.format_message(), exc.exit_code)
        except typer.Abort:  # typer's own class: typer._click.exceptions has no Abort
            _fail("aborted", 1)
        except (KeyboardInterrupt, EOFError):
            _fail("interrupted; nothing was written", 130)
        except Exception as exc:  # a bug, or a database failure that escaped a transaction
            from studylog.store.session import translate

            ours = translate(exc)
            if options.debug:
                raise
            if ours is not None:
                _fail(ours.message, ours.exit_code)
            _fail(
                f"internal error: {type(exc).__name__}: {exc} (run with --debug for the traceback)",
                INTERNAL_ERROR,
            )
        sys.exit(code if isinstance(code, int) else 0)


app = typer.Typer(
    cls=StudylogGroup,
    name="studylog",
    help="The working memory of a data-analysis study: dictionary, journal, questions, threats, drops.",
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    add_completion=False,
    rich_markup_mode=None,
)


def _version(value: bool) -> None:
    if value:
        sys.stdout.write(f"studylog {__version__}\n")
        raise typer.Exit(0)


@app.callback()
def main(
    store: str = typer.Option(
        None,
        "--store",
        envvar="STUDYLOG_STORE",
        help="The store: a studylog.db file, a folder holding one, or a SQLAlchemy URL. "
        "Default: the nearest studylog.db in this folder or a parent.",
        show_envvar=True,
    ),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error."),
    version: bool = typer.Option(
        False, "--version", callback=_version, is_eager=True, help="Print the version and exit."
    ),
) -> None:
    options.store = store
    options.debug = debug


# Each command module has a register(app) function. Modules import only light modules at the top;
# pandas, pyarrow and scipy are imported inside the commands that compute. One module a line.
COMMAND_MODULES = [
    "studylog.cli.study",
    "studylog.cli.tables",
    "studylog.cli.variables",
    "studylog.cli.profile",
    "studylog.cli.draft",
    "studylog.cli.care",
    "studylog.cli.journal",
    "studylog.cli.questions",
    "studylog.cli.threats",
    "studylog.cli.report",
    "studylog.cli.rules",
    "studylog.cli.check",
    "studylog.cli.drops",
    "studylog.cli.demo",
]


def _register() -> None:
    import importlib

    for name in COMMAND_MODULES:
        importlib.import_module(name).register(app)


_register()


def run() -> None:
    """Console-script entry point."""
    app()
