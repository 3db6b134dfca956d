"""Generate SQL text for a target dialect."""

from __future__ import annotations

from sqlglot import exp

from ineqsql.errors import UnsupportedDialectError

# Dialects whose output is executed in the test suite. Others arrive with their lowering rules.
SUPPORTED_DIALECTS = ("duckdb",)


def check_dialect(dialect: str) -> str:
    name = (dialect or "").lower()
    if name not in SUPPORTED_DIALECTS:
        raise UnsupportedDialectError(f"dialect {dialect!r} is not supported; supported: "
                                      f"{', '.join(SUPPORTED_DIALECTS)}")
    return name


def generate(tree: exp.Expression, dialect: str = "duckdb", pretty: bool = True) -> str:
    return tree.sql(dialect=check_dialect(dialect), pretty=pretty)
