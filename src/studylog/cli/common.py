"""What every command shares: the global options and the one transaction per command."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import TYPE_CHECKING

import typer

from studylog.store.session import StoreLocation, locate, transaction


@dataclass
class Options:
    store: str | None = None
    debug: bool = False


if TYPE_CHECKING:
    from sqlalchemy.orm import Session

options = Options()

JSON_OPTION = typer.Option(False, "--json", help="Print one JSON document on stdout instead of tables.")
WHY_OPTION = typer.Option(None, "--why", help="Why the change is made (required once an entry is confirmed).")


def location() -> StoreLocation:
    return locate(options.store)


@contextmanager
def reading() -> Iterator[Session]:
    """A read-only unit of work on the located store."""
    with transaction(location(), write=False) as session:
        yield session


@contextmanager
def writing() -> Iterator[Session]:
    """A unit of work that writes: all of it commits, or none of it (one command = one transaction)."""
    with transaction(location(), write=True) as session:
        yield session


def split_list(value: str | None) -> list[str] | None:
    """A comma-separated option as a list of trimmed, non-empty names (None when not given)."""
    if value is None:
        return None
    return [part.strip() for part in value.split(",") if part.strip()]
