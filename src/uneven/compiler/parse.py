"""Parse SQL text into sqlglot trees, turning parser errors into ``SqlParseError`` with position."""

from __future__ import annotations

import sqlglot
from sqlglot import exp
from sqlglot.errors import ParseError, TokenError

from uneven.errors import SqlParseError, UnsupportedSqlError
from uneven.sqltree import build as s


def _offset(sql: str, line: int, col: int) -> int:
    lines = sql.split("\n")
    return sum(len(t) + 1 for t in lines[: line - 1]) + max(col - 1, 0)


def parse_statements(sql: str, read: str = "duckdb") -> list[exp.Expression]:
    if not isinstance(sql, str) or not sql.strip():
        raise SqlParseError("the query is empty")
    try:
        statements = [s.node(t) for t in sqlglot.parse(sql, read=read) if t is not None]
    except ParseError as e:
        first = (e.errors or [{}])[0]
        line, col = first.get("line"), first.get("col")
        highlight = first.get("highlight") or ""
        description = str(first.get("description") or e).split(" <Token")[0].split(". Line")[0]
        if line and col:
            start = _offset(sql, line, col) - max(len(highlight) - 1, 0)
            raise SqlParseError(f"could not parse the SQL: {description}", sql=sql, start=max(start, 0),
                                end=max(start, 0) + max(len(highlight) - 1, 0)) from None
        raise SqlParseError(f"could not parse the SQL: {description}") from None
    except TokenError as e:
        raise SqlParseError(f"could not read the SQL text: {e}") from None
    if not statements:
        raise SqlParseError("the query is empty")
    return statements


def parse_one_statement(sql: str, read: str = "duckdb") -> exp.Expression:
    statements = parse_statements(sql, read)
    if len(statements) > 1:
        raise UnsupportedSqlError(f"expected one SQL statement, got {len(statements)}; "
                                  "run them one at a time")
    return statements[0]
