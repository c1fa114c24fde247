"""The migrations registry: every step of the schema, in order, each saying why it exists.

A step is forward-only and runs inside the one transaction that ``schema.migrate`` opens. To add one:
write ``vNNN_<what>.py`` with a docstring that begins "Step N: ..." and says why, and an
``apply(connection)``; append it to ``STEPS``; raise ``schema.SCHEMA_VERSION``; and add a store made by the
previous version to the migration tests. Never edit a step that has shipped.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from types import ModuleType

from sqlalchemy.engine import Connection

from studylog.store.migrations import v001_dictionary, v002_drops, v003_journal


@dataclass(frozen=True)
class Step:
    version: int
    why: str
    apply: Callable[[Connection], None]


def _step(version: int, module: ModuleType) -> Step:
    return Step(version, (module.__doc__ or "").strip().splitlines()[0], module.apply)


STEPS: list[Step] = [
    _step(1, v001_dictionary),
    _step(2, v002_drops),
    _step(3, v003_journal),
]
