"""The dictionary as plain objects: what ``data/`` is told about a table and its variables.

The core builds these from the store (the current dictionary or a named version); the data layer reads
them and never sees the store. Field names and meanings follow the ``variables`` model.
"""

from __future__ import annotations

from dataclasses import dataclass, field

TYPES = (
    "integer", "number", "boolean", "categorical", "ordinal", "date", "datetime", "text", "identifier",
)
NUMERIC_TYPES = ("integer", "number")
LEVEL_TYPES = ("categorical", "ordinal")
ROLES = ("input", "target", "identifier", "weight", "stratum", "cluster", "time", "group", "excluded")
SOURCES = ("measured", "derived", "reported", "administrative", "external")
AVAILABILITY = ("before", "at", "after", "unknown")
SENSITIVITY = ("none", "quasi-identifier", "direct-identifier", "sensitive")
STATUSES = ("draft", "confirmed", "deprecated")
MASKED_SENSITIVITY = ("direct-identifier", "sensitive")


@dataclass(frozen=True)
class Code:
    """A level or a missing code: the code as it appears in the data, its label, its order."""

    code: str
    label: str | None = None
    order: int | None = None


@dataclass(frozen=True)
class VariableSpec:
    name: str
    type: str
    table: str = ""
    aliases: tuple[str, ...] = ()
    label: str | None = None
    unit: str | None = None
    precision: int | None = None
    role: str = "input"
    levels: tuple[Code, ...] = ()
    true_values: tuple[str, ...] = ()
    false_values: tuple[str, ...] = ()
    minimum: str | None = None
    maximum: str | None = None
    plausible_min: str | None = None
    plausible_max: str | None = None
    missing_codes: tuple[Code, ...] = ()
    max_missing: float | None = None
    required: bool = False
    unique: bool = False
    pattern: str | None = None
    date_format: str | None = None
    timezone: str | None = None
    references: str | None = None
    sensitivity: str = "none"
    status: str = "draft"

    @property
    def masked(self) -> bool:
        """Values of this variable never leave the study unmasked."""
        return self.sensitivity in MASKED_SENSITIVITY or self.type == "text"

    @property
    def checked_for_content(self) -> bool:
        return self.status != "deprecated" and self.role != "excluded"


@dataclass(frozen=True)
class RuleSpec:
    """A cross-field rule: a name, an expression in studylog's language, a severity."""

    name: str
    expression: str
    severity: str = "error"


@dataclass(frozen=True)
class TableSpec:
    name: str
    key: tuple[str, ...] = ()
    variables: tuple[VariableSpec, ...] = ()
    rules: tuple[RuleSpec, ...] = field(default=())
    # the dictionary version this spec was taken from, or None for the current dictionary
    version: str | None = None

    def variable(self, name: str) -> VariableSpec | None:
        for variable in self.variables:
            if variable.name == name:
                return variable
        return None
