"""One error hierarchy for everything uneven reports to a user.

Every error a user can see derives from :class:`UnevenError`. Errors about SQL text carry the
line and column of the offending call and a snippet with a caret under it.
"""

from __future__ import annotations


class UnevenError(Exception):
    """Root of every error uneven raises on purpose."""

    def __init__(self, message: str, *, sql: str | None = None, start: int | None = None,
                 end: int | None = None, function: str | None = None):
        self.message = message
        self.sql = sql
        self.start = start
        self.end = end
        self.function = function
        self.line, self.column = _line_col(sql, start)
        super().__init__(self._render())

    def _render(self) -> str:
        if self.sql is None or self.start is None or self.line is None or self.column is None:
            return self.message
        lines = self.sql.splitlines() or [""]
        text = lines[self.line - 1] if 0 < self.line <= len(lines) else ""
        width = max(1, (self.end or self.start) - self.start + 1)
        width = min(width, max(1, len(text) - self.column + 1))
        caret = " " * (self.column - 1) + "^" * width
        return f"{self.message}\n  at line {self.line}, column {self.column}:\n    {text}\n    {caret}"


def _line_col(sql: str | None, start: int | None) -> tuple[int | None, int | None]:
    if sql is None or start is None:
        return None, None
    before = sql[:start]
    line = before.count("\n") + 1
    column = start - (before.rfind("\n") + 1) + 1
    return line, column


class SqlParseError(UnevenError):
    """The SQL text could not be parsed."""


class MeasureUsageError(UnevenError):
    """A measure call is used where it cannot be compiled (WHERE, OVER, nested, correlated ...)."""


class MeasureArgumentError(UnevenError):
    """A measure call has the wrong number or kind of arguments."""


class UnsupportedSqlError(UnevenError):
    """The query uses a construct the compiler does not support around measure calls."""


class UnsupportedDialectError(UnevenError):
    """The target dialect is not one the compiler emits."""


class OutputError(UnevenError):
    """The result could not be written where asked."""


class ExecutionError(UnevenError):
    """The engine refused or failed to run a compiled query."""


class InputDataError(UnevenError):
    """The data break a documented rule (e.g. a negative weight)."""


class UndefinedResultError(UnevenError):
    """In strict mode, a measure is undefined (NULL) for a group."""


class EngineUnavailableError(UnevenError):
    """The engine named (a connection URL, a connection object) cannot be used: its driver is not
    installed, or the object is no connection uneven knows."""
