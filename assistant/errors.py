"""The errors ohmtrail raises, all in one place.

Every error a user can cause derives from :class:`OhmtrailError`; the CLI catches that one
class, prints ``str(error)`` on one line and exits non-zero. Errors that point into a file
carry its place (file, line, column, field) and the offending value, and print as
``FILE:LINE:COL: message``.

The tree::

    OhmtrailError
    ├── LocatedError                 an error at a place in a file (file, line, column, field, value)
    │   ├── RulesetError             a ruleset that cannot be used; holds every Problem found
    │   ├── MeterProfileError        a meter profile with a bad value
    │   ├── AnswersFileError         a scripted answers file that does not fit its ruleset
    │   └── HistoryError             a repair-history CSV row that cannot be read
    ├── QuantityError                a text that is not a quantity of the expected dimension
    ├── CircuitError                 a netlist that cannot be solved; names the components
    ├── ReadingError                 a typed reading that cannot be taken for the test asked
    ├── RulesEngineError             a decision rule that failed while it was evaluated
    ├── SessionError                 a session command that cannot be carried out now
    ├── StoreError                   the session store cannot be opened, read or written
    ├── IntegrityError               an exported record whose hash chain does not verify
    └── OutputError                  a drawing or report that cannot be written

Raise with ``raise ... from exc`` so that the cause stays in the chain for developers, while
users see only the one line.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any, Self


class OhmtrailError(Exception):
    """Base of every error a user can cause; the CLI prints it as one line."""


@dataclass(frozen=True)
class Problem:
    """One thing wrong at one place in a file."""

    message: str
    file: str | None = None
    line: int | None = None  # 1-based
    column: int | None = None  # 1-based
    field: str | None = None  # dotted path in the document, e.g. "components.3.rating"
    value: Any = None

    def __str__(self) -> str:
        place = format_place(self.file, self.line, self.column)
        return f"{place}: {self.message}" if place else self.message


def format_place(file: str | None, line: int | None, column: int | None) -> str:
    """``FILE:LINE:COL`` with whatever parts are known."""
    parts = [p for p in (file, line, column) if p is not None]
    return ":".join(str(p) for p in parts)


class LocatedError(OhmtrailError):
    """An error at a place in a file. ``str()`` is ``FILE:LINE:COL: message``."""

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        line: int | None = None,
        column: int | None = None,
        field: str | None = None,
        value: Any = None,
        problems: Sequence[Problem] | None = None,
    ) -> None:
        first = Problem(message, file, line, column, field, value)
        self.problems: tuple[Problem, ...] = tuple(problems) if problems else (first,)
        head = self.problems[0]
        self.message = head.message
        self.file, self.line, self.column = head.file, head.line, head.column
        self.field, self.value = head.field, head.value
        super().__init__(str(head))

    @classmethod
    def from_problems(cls, problems: Iterable[Problem]) -> Self:
        """One error holding several problems; ``str()`` shows the first and a count."""
        found = tuple(problems)
        if not found:
            raise ValueError("from_problems needs at least one problem")
        err = cls(found[0].message, problems=found)
        if len(found) > 1:
            err.args = (f"{found[0]} (and {len(found) - 1} more)",)
        return err

    def __str__(self) -> str:
        return str(self.args[0])


class RulesetError(LocatedError):
    """A ruleset that cannot be used: YAML syntax, schema or semantic problems."""


class MeterProfileError(LocatedError):
    """A meter profile with a bad or missing value."""


class AnswersFileError(LocatedError):
    """A scripted answers file that does not fit its ruleset."""


class HistoryError(LocatedError):
    """A repair-history file that cannot be read; carries the row number as the line."""


class QuantityError(OhmtrailError):
    """A text that is not a quantity of the expected dimension (e.g. ``"12 ohm"`` for a voltage)."""

    def __init__(self, message: str, *, value: Any = None, expected: str | None = None) -> None:
        self.value = value
        self.expected = expected
        super().__init__(message)


class CircuitError(OhmtrailError):
    """A netlist that cannot be solved (no ground, a short across a source, ...)."""

    def __init__(self, message: str, *, components: Sequence[str] = ()) -> None:
        self.components = tuple(components)
        super().__init__(message)


class ReadingError(OhmtrailError):
    """A typed reading that cannot be taken for the test asked (wrong unit, not a number)."""


class RulesEngineError(OhmtrailError):
    """A decision rule failed while it was evaluated; names the rule and its ruleset."""


class SessionError(OhmtrailError):
    """A session command that cannot be carried out now (unknown id, nothing to undo, ...)."""


class StoreError(OhmtrailError):
    """The session store cannot be opened, read or written (locked, read-only, not a database)."""


class IntegrityError(OhmtrailError):
    """An exported record whose hash chain does not verify; names the first step that differs."""


class OutputError(OhmtrailError):
    """A drawing, report or export that cannot be written (unwritable path, missing tool)."""
