"""The one error hierarchy of studylog.

Every failure a user can cause or meet is a :class:`StudylogError`; the command line catches it once,
prints its one-line message on stderr and exits with its code. Core and data modules raise these and
never print or exit.

::

    StudylogError                      exit 2 unless a subclass says otherwise
    ├── UsageError                     a bad argument or option value                    (2)
    │   ├── NotFound                   an unknown table, variable, id or version         (2)
    │   ├── AlreadyExists              a duplicate name                                  (2)
    │   └── InvalidValue               a value that breaks a rule of the data model      (2)
    ├── InputFileError                 an unreadable or malformed file (names file, line)(2)
    ├── NoStudyFound                   no studylog.db here or in a parent folder         (2)
    ├── ChecksFailed                   a check found problems at or above --fail-on      (1)
    └── StoreError                     the store cannot be used                          (3)
        ├── StoreLocked                another process holds the lock past the timeout   (3)
        ├── StoreTooNew                written by a newer schema than this program knows (3)
        ├── StoreCorrupt               not a database, or damaged                        (3)
        └── StoreReadOnly              read-only file or full disk                       (3)
"""

from __future__ import annotations


class StudylogError(Exception):
    """Base of every error studylog raises on purpose; carries a one-line message and an exit code."""

    exit_code: int = 2

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message

    def __str__(self) -> str:
        return self.message


class UsageError(StudylogError):
    """The user's argument or option is wrong."""


class NotFound(UsageError):
    """A named table, variable, version, or a numeric id does not exist."""


class AlreadyExists(UsageError):
    """A name that must be unique is already taken."""


class InvalidValue(UsageError):
    """A value breaks a rule of the data model (min > max, levels on a numeric type, bad regex, ...)."""


class InputFileError(StudylogError):
    """A data or import file cannot be read; the message names the file and, where known, the line."""

    def __init__(self, path: str, problem: str, line: int | None = None) -> None:
        where = f"{path}, line {line}" if line is not None else str(path)
        super().__init__(f"{where}: {problem}")
        self.path = str(path)
        self.line = line
        self.problem = problem


class NoStudyFound(StudylogError):
    """No store was given and none was found in the current folder or its parents."""


class ChecksFailed(StudylogError):
    """A check found problems at or above the --fail-on severity (the result has already been shown)."""

    exit_code = 1


class StoreError(StudylogError):
    """The store exists but cannot be used."""

    exit_code = 3


class StoreLocked(StoreError):
    """Another process kept the store locked past the busy timeout."""


class StoreTooNew(StoreError):
    """The store was written by a newer version of studylog; it is left untouched."""


class StoreCorrupt(StoreError):
    """The file is not a studylog store or is damaged."""


class StoreReadOnly(StoreError):
    """The store cannot be written: a read-only file or folder, or a full disk."""
