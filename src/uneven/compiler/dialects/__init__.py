"""Target dialects: one module per engine, each a ``Dialect`` with its lowering rules (rules.py).

``executed`` says whether the test suite runs the dialect's output on a real engine (the backend
matrix in tests/engines.py); the others are emitted and parsed back, not executed here.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sqlglot import exp

from uneven.errors import UnsupportedDialectError


@dataclass(frozen=True)
class Dialect:
    name: str  # our name, also sqlglot's
    rules: tuple = ()  # (tree, dialect name) -> tree, applied in order to the compiled tree (generate.py)
    executed: bool = False  # verified by the backend test matrix
    notes: str = ""  # caveats for users (docs/engines.md says more)
    aliases: tuple[str, ...] = field(default_factory=tuple)

    def lower(self, tree: exp.Expression) -> exp.Expression:
        for rule in self.rules:
            tree = rule(tree, self.name)
        return tree


def _load() -> dict[str, Dialect]:
    from uneven.compiler.dialects import bigquery, duckdb, postgres, snowflake, spark, sqlite, trino
    return {d.name: d for d in (m.DIALECT for m in (duckdb, postgres, spark, sqlite, trino, bigquery, snowflake))}


DIALECTS: dict[str, Dialect] = _load()
SUPPORTED_DIALECTS: tuple[str, ...] = tuple(DIALECTS)
EXECUTED_DIALECTS: tuple[str, ...] = tuple(n for n, d in DIALECTS.items() if d.executed)
_ALIASES = {a: d.name for d in DIALECTS.values() for a in d.aliases}


def get_dialect(name: str) -> Dialect:
    key = (name or "").strip().lower() if isinstance(name, str) else ""
    key = _ALIASES.get(key, key)
    if key not in DIALECTS:
        raise UnsupportedDialectError(
            f"dialect {name!r} is not supported; supported: {', '.join(SUPPORTED_DIALECTS)} "
            f"(executed in the test suite: {', '.join(EXECUTED_DIALECTS)}; the others are emitted, not executed here)")
    return DIALECTS[key]


__all__ = ["Dialect", "DIALECTS", "SUPPORTED_DIALECTS", "EXECUTED_DIALECTS", "get_dialect"]
