"""Exceptions a user can read.

Every problem with user input is reported as a `Problem` that names the file, the JSON path of
the field, what was found and what was expected.  Loading collects all problems before raising,
so a user fixes a file in one pass instead of one error at a time.
"""
from __future__ import annotations

from dataclasses import dataclass, field


class RaytraceError(Exception):
    """Base class: every error the tool raises on purpose derives from this."""


@dataclass(frozen=True)
class Problem:
    path: str          # JSON path such as "$.parts[2].material"
    found: str         # what was there, already rendered for a reader
    expected: str      # what would have been accepted
    file: str = ""     # the file it came from, "" for in-memory scenes
    severity: str = "error"   # "error" or "warning"

    def __str__(self) -> str:
        where = f"{self.file}: " if self.file else ""
        return f"{where}{self.path}: found {self.found}; expected {self.expected}"


@dataclass
class Problems:
    """Collects problems while a file is checked; raise once at the end."""

    file: str = ""
    items: list[Problem] = field(default_factory=list)

    def add(self, path: str, found: object, expected: str, severity: str = "error") -> None:
        self.items.append(Problem(path, render(found), expected, self.file, severity))

    def warn(self, path: str, found: object, expected: str) -> None:
        self.add(path, found, expected, "warning")

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.items if p.severity == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.items if p.severity == "warning"]

    def raise_if_errors(self) -> None:
        if self.errors:
            raise SceneError(self.errors, self.warnings)


def render(value: object) -> str:
    """Show a found value briefly: strings quoted, long values cut."""
    if isinstance(value, str) and value.startswith("<") and value.endswith(">"):
        return value  # already a description such as "<missing>"
    text = repr(value) if isinstance(value, str) else _json_like(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _json_like(value: object) -> str:
    import json
    try:
        return json.dumps(value)
    except (TypeError, ValueError):
        return repr(value)


class SceneError(RaytraceError):
    """A scene (file or in-memory) has one or more problems."""

    def __init__(self, problems: list[Problem], warnings: list[Problem] | None = None):
        self.problems = list(problems)
        self.warnings = list(warnings or [])
        lines = [str(p) for p in self.problems]
        super().__init__(f"{len(lines)} problem(s):\n" + "\n".join("  " + s for s in lines))


class GeometryError(RaytraceError):
    """Geometry that cannot be traced: self-intersection, zero area, partial overlap."""


class LedgerError(RaytraceError):
    """The energy ledger did not close: a tracer bug, never a user error."""


class BudgetExceeded(RaytraceError):
    """A trace would exceed its memory budget; the message says which limit to raise."""


def memory_limit_text(limit_mb: float) -> str:
    """How a memory message names the limit and every place it is set."""
    return (f"the memory limit max_memory_mb = {limit_mb:g} MB (raise it with --max-memory-mb, "
            f"\"max_memory_mb\" under \"trace\" in the scene file, or max_memory_mb= in Python)")
