"""The root of the command line: global options, command registration, and the one place errors are caught.

Every failure a user can cause arrives here as a :class:`~studylog.errors.StudylogError` and leaves as one
line on stderr and its exit code (DESIGN.md: 0 done, 1 a check failed, 2 bad input, 3 store unusable).
``--debug`` re-raises it with its traceback. Unexpected errors (bugs) exit 4 with one line as well.
"""

from __future__ import annotations

import gc
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

# The imports below make most of the objects that a run keeps to its end, and no garbage: the cyclic
# collector, left on, would scan them over and over while they are made (see _Startup). Afterwards they go
# to the oldest generation unscanned (freeze, then unfreeze): re-enabling the collector with some 80,000
# new objects in the youngest would scan them all at once (20 ms). Not when the process has frozen objects
# of its own: unfreeze would hand those back too.
_collecting = gc.isenabled()
_unfrozen = gc.get_freeze_count() == 0
gc.disable()
try:
    import typer
    from typer.core import TyperGroup

    from studylog import __version__
    from studylog.cli.common import options
    from studylog.errors import StudylogError
finally:
    if _unfrozen:
        gc.freeze()
        gc.unfreeze()
    if _collecting:
        gc.enable()

INTERNAL_ERROR = 4


class _Startup:
    """The cyclic garbage collector rests while a command starts, and the command runs with it as usual.

    Starting a command makes some 80,000 objects that live until the process ends (the modules of typer,
    click and SQLAlchemy, our models, the command tree) and next to no garbage. Collecting while
    they are made only scans them again and again: a tenth of a short command's time, more on a busy
    machine. So :func:`run` pauses the collector until the command's own function is called; then what
    exists is frozen (``gc.freeze``: kept, never scanned again; the hundred-odd unreachable objects of the
    start-up stay with it) and the collector resumes for the command. A run that ends before that (help,
    a usage error) restores the collector as it was.
    """

    def __init__(self) -> None:
        self.paused = False
        self._was_enabled = False

    @contextmanager
    def pausing(self) -> Iterator[None]:
        self._was_enabled = gc.isenabled()
        gc.disable()
        self.paused = True
        try:
            yield
        finally:
            self.resume(freeze=False)

    def resume(self, *, freeze: bool = True) -> None:
        if not self.paused:
            return
        self.paused = False
        if freeze:
            gc.freeze()
        if self._was_enabled:
            gc.enable()

    def resume_before_commands_of(self, command: Any) -> None:
        """Make each command of this click tree resume the collector before it runs."""
        commands = getattr(command, "commands", None)
        if commands is not None:
            for sub in commands.values():
                self.resume_before_commands_of(sub)
        elif command.callback is not None:
            command.callback = self._resuming(command.callback)

    def _resuming(self, callback: Callable[..., Any]) -> Callable[..., Any]:
        def resumed_then_run(*args: Any, **kwargs: Any) -> Any:
            self.resume()
            return callback(*args, **kwargs)

        return resumed_then_run


_startup = _Startup()


def _fail(message: str, code: int) -> None:
    sys.stderr.write(f"error: {' '.join(message.split())}\n")
    sys.stderr.flush()
    sys.exit(code)


class StudylogGroup(TyperGroup):
    """The root group; its ``main`` turns our errors and click's usage errors into one line + exit code."""

    def main(self, *args: Any, **kwargs: Any) -> Any:  # noqa: D401
        from typer import _click as click

        kwargs["standalone_mode"] = False
        if _startup.paused:
            _startup.resume_before_commands_of(self)
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


def _version(value: bool) -> None:
    if value:
        sys.stdout.write(f"studylog {__version__}\n")
        raise typer.Exit(0)


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
# pandas, pyarrow and scipy are imported inside the commands that compute. One module a line, with the
# top-level names it registers, so that a run loads only the module of the command it runs
# (tests/test_help.py checks that this map matches what the modules register).
COMMAND_MODULES: dict[str, tuple[str, ...]] = {
    "studylog.cli.study": ("init", "status"),
    "studylog.cli.tables": ("table",),
    "studylog.cli.variables": ("var",),
    "studylog.cli.profile": ("profile",),
    "studylog.cli.draft": ("draft",),
    "studylog.cli.care": ("doctor", "backup", "restore", "dump", "load"),
    "studylog.cli.journal": ("log", "decisions", "note", "conclude", "next", "timeline", "redact",
                             "decision", "plan"),
    "studylog.cli.questions": ("ask", "answer", "withdraw", "questions"),
    "studylog.cli.threats": ("threats", "threat"),
    "studylog.cli.report": ("report",),
    "studylog.cli.rules": ("rule",),
    "studylog.cli.check": ("check",),
    "studylog.cli.drops": ("drops", "drift", "drop"),
    "studylog.cli.demo": ("demo",),
}


def build_app(modules: list[str] | None = None, only: str | None = None) -> typer.Typer:
    """The root app with the commands of ``modules`` (all of them by default), or of those only the
    top-level command or group named ``only``."""
    import importlib

    root = typer.Typer(
        cls=StudylogGroup,
        name="studylog",
        help="The working memory of a data-analysis study: dictionary, journal, questions, threats, drops.",
        no_args_is_help=True,
        pretty_exceptions_enable=False,
        add_completion=False,
        rich_markup_mode=None,
    )
    root.callback()(main)
    for name in COMMAND_MODULES if modules is None else modules:
        importlib.import_module(name).register(root)
    if only is not None:
        # typer turns every registered function into a click command (signature, annotations, one
        # parameter object per option) when the app is called; a run needs only its own command
        commands = [c for c in root.registered_commands if (c.name or c.callback.__name__) == only]
        groups = [g for g in root.registered_groups if g.name == only]
        if commands or groups:
            root.registered_commands, root.registered_groups = commands, groups
    return root


def _command_of(argv: list[str]) -> str | None:
    """The top-level command named in ``argv`` when it is one of ours, else None (help, version, unknown)."""
    words = iter(argv)
    for word in words:
        if word == "--store":
            next(words, None)
        elif word.startswith("-"):
            continue
        else:
            return word if any(word in names for names in COMMAND_MODULES.values()) else None
    return None


def _module_of(argv: list[str]) -> str | None:
    """The module registering the command in ``argv``, or None (help, version, unknown: load all)."""
    word = _command_of(argv)
    return next((module for module, names in COMMAND_MODULES.items() if word in names), None)


def __getattr__(name: str) -> typer.Typer:
    # ``from studylog.cli.app import app`` (tests, the demo) gets the app with every command
    if name == "app":
        built = build_app()
        globals()["app"] = built
        return built
    raise AttributeError(name)


# commands that can do their work without a study: the store's library is loaded only if they open one
STORELESS = frozenset({"profile"})


def _load_the_store() -> None:
    """Import SQLAlchemy and the models now, while the collector rests (``_Startup``): every command but
    the store-less ones needs them, and their ~60,000 lasting objects would otherwise be scanned by the
    collector again and again as the command imports them."""
    import studylog.store.models  # noqa: F401


def entry() -> None:
    """Console-script entry point: :func:`run`, then leave without tearing the interpreter down.

    A profile or check ends holding hundreds of megabytes in a few hundred thousand objects; freeing them
    one by one and unloading every module is Python's last act at exit, some 50 ms on a 1M-row profile,
    for nothing the operating system would not do at once. What must happen first happens here: the
    standard streams are flushed and the store's connections closed (SQLite checkpoints its log and
    removes it on the last close). Commands write their files inside ``with`` blocks, and temporary
    files are unnamed, so nothing else waits for the teardown."""
    code: Any = 0
    try:
        run()
    except SystemExit as exc:
        code = exc.code
    leave(code)


def leave(code: Any) -> None:
    """Exit with ``code`` (as ``sys.exit`` takes it) after flushing the streams and closing the store."""
    import os

    if code is None:
        status = 0
    elif isinstance(code, int):
        status = code
    else:  # sys.exit("message") prints it and exits 1
        sys.stderr.write(f"{code}\n")
        status = 1
    session = sys.modules.get("studylog.store.session")
    if session is not None:
        session.dispose_engines()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a reader gone (a closed pipe), or a stream closed
            if stream is sys.stdout and status == 0:
                status = 1
    os._exit(status)


def run() -> None:
    """Builds only the command being run, for a fast start, and runs it (exits by ``SystemExit``)."""
    name = _command_of(sys.argv[1:])
    module = _module_of(sys.argv[1:])
    with _startup.pausing():
        if name is not None and name not in STORELESS:
            _load_the_store()
        if name is None or module is None:
            build_app()()
        else:
            build_app([module], only=name)()
