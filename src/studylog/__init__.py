"""studylog: the working memory of a data-analysis study.

The Python API (``open_study``, ``create_study`` and the ``Study`` object) is loaded on first use, so that
the command line, which imports this package, starts fast.
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

__all__ = [
    "CheckReport",
    "ProfileReport",
    "Record",
    "Records",
    "Study",
    "StudylogError",
    "__version__",
    "create_study",
    "open_study",
]


def __getattr__(name: str) -> Any:
    if name == "StudylogError":
        from studylog.errors import StudylogError

        return StudylogError
    if name in __all__:
        from studylog import api

        return getattr(api, name)
    raise AttributeError(f"module 'studylog' has no attribute {name!r}")
