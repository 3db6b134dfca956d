"""What ``query()`` needs from an engine other than the embedded DuckDB, as one small protocol.

An :class:`Adapter` wraps a connection the caller owns (or one opened from a URL) and offers:

- ``label`` (the engine's name in messages) and ``dialect`` (the compiler's target),
- ``execute(sql)`` → a pandas DataFrame typed as DuckDB types it (numbers float64, counts int64,
  list results an array of dicts), engine errors raised as ``UnevenError``s naming the engine,
- ``describe(sql)`` → (name, type) of a query's columns, type names as DuckDB spells them (None
  when the engine cannot say),
- ``register(name, frame)`` / ``unregister(name)`` / ``has_table(name)``: a pandas frame as a
  temporary table for one run,
- ``plan(sql)``: the engine's own plan text, and ``close()``.

The compiler's probes (the columns a FROM provides, the types of measure arguments: ``schema()``,
an ``AdapterSchema``) are built here over ``describe``, so every engine answers them the same way.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from decimal import Decimal
from typing import Any

import numpy as np
import pandas as pd
from sqlglot import exp

from uneven.engine.columns import probe_select
from uneven.engine.runner import translate_error
from uneven.sqltree import build as s

# DuckDB's names for the numeric types the compiler's type check accepts (compiler/types.py)
NUMERIC, TEXT = "DOUBLE", "VARCHAR"


class Adapter:
    label = "engine"
    dialect = "duckdb"

    def __init__(self, con, owned: bool = False):
        self.con = con
        self.owned = owned  # opened by uneven (from a URL): closed by close()

    # --- the protocol (engines override) ---------------------------------------------------
    def fetch(self, sql: str) -> tuple[list[str], list[tuple], list[str | None]]:
        """Run ``sql``: column names, rows of Python values, column type names (None: unknown)."""
        raise NotImplementedError

    def errors(self) -> tuple[type[Exception], ...]:
        """The driver's exception classes (wrapped as UnevenErrors naming the engine)."""
        raise NotImplementedError

    def register(self, name: str, frame) -> None:
        raise NotImplementedError

    def unregister(self, name: str) -> None:
        self.fetch_quietly(drop_table(quoted_table(name)))

    def has_table(self, name: str) -> bool:
        return False

    def plan(self, sql: str) -> str:
        _, rows, _ = self.fetch("EXPLAIN " + sql)
        return "\n".join(str(r[0]) for r in rows)

    def interrupt(self) -> None:
        """Ask the engine to stop the running query (Ctrl-C on the command line)."""
        self.con.interrupt()

    def close(self) -> None:
        if self.owned:
            self.con.close()

    # --- shared --------------------------------------------------------------------------
    def fetch_quietly(self, tree: exp.Expression) -> None:
        from uneven.compiler.emit import to_sql
        try:
            self.fetch(to_sql(tree, self.dialect))
        except Exception:  # noqa: BLE001  a cleanup step never fails the caller
            pass

    def execute(self, sql: str) -> pd.DataFrame:
        """Run compiled SQL; the result typed as on DuckDB; the driver's errors as UnevenErrors."""
        try:
            names, rows, types = self.fetch(sql)
        except self.errors() as e:
            raise self.translate(e) from None
        return frame_of(names, rows, types)

    def translate(self, e: Exception) -> Exception:
        return translate_error(e, engine=self.label)

    def describe(self, sql: str) -> list[tuple[str, str | None]] | None:
        """(name, DuckDB type name or None) of the result of ``sql`` (run with LIMIT 0 by the caller);
        None when it cannot run (the probes are a help, never a failure of their own)."""
        try:
            names, _, types = self.fetch(sql)
        except Exception:  # noqa: BLE001
            return None
        return list(zip(names, types))

    def argument_types(self, select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        """Type names of ``exprs`` over ``select``'s FROM (None: unknown). Engines whose result
        description carries types answer from a LIMIT 0 probe; SQLite overrides (no types)."""
        probe = probe_select(select, [s.alias(e.copy(), f"_uv_p{i + 1}") for i, e in enumerate(exprs)])
        if probe is None:
            return None
        found = self.describe(self.compile_probe(probe))
        if found is None:
            return None
        types = [t for _, t in found if t is not None]
        return types if len(types) == len(found) == len(exprs) else None

    def compile_probe(self, probe: exp.Select) -> str:
        from uneven.compiler.context import CompileContext, CompileOptions
        from uneven.compiler.generate import generate
        from uneven.compiler.pipeline import compile_tree
        return generate(compile_tree(probe, CompileContext(options=CompileOptions(dialect=self.dialect))),
                        self.dialect, pretty=False)

    def schema(self) -> AdapterSchema:
        """What this engine tells the compiler, for one compilation (compiler/context.EngineSchema)."""
        return AdapterSchema(self)


class AdapterSchema:
    """The compiler's ``EngineSchema`` over an adapter's ``describe``: the columns a FROM provides,
    the types of measure arguments and the tie probe (engine/ties.adapter_tie_counts)."""

    probes_ties = True

    def __init__(self, adapter: Adapter):
        self.adapter = adapter
        self._columns: dict[int, set[str] | None] = {}

    def source_columns(self, select: exp.Select) -> set[str] | None:
        if id(select) not in self._columns:
            probe = probe_select(select, [exp.Star()])
            if probe is None:
                self._columns[id(select)] = set()
            else:
                found = self.adapter.describe(self.adapter.compile_probe(probe))
                self._columns[id(select)] = None if found is None else {n.lower() for n, _ in found}
        return self._columns[id(select)]

    def expression_types(self, select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        if not exprs:
            return []
        try:
            return self.adapter.argument_types(select, exprs)
        except Exception:  # noqa: BLE001  a help, never a failure of its own
            return None

    def tie_counts(self, select, x, condition, keys) -> tuple[int, int] | None:
        from uneven.engine.ties import adapter_tie_counts  # noqa: PLC0415  (ties reads adapters duck-typed)

        return adapter_tie_counts(self.adapter, select, x, condition, keys)


def quoted_table(name: str) -> exp.Table:
    """A table of one quoted name (any text works as a name)."""
    return exp.Table(this=exp.to_identifier(name, quoted=True))


def drop_table(table: exp.Table) -> exp.Drop:
    return exp.Drop(tables=[table], kind="TABLE", exists=True)


# --- results typed as DuckDB types them ---------------------------------------------------------

def _plain(v):
    """Driver values as DuckDB's DataFrame holds them: Decimal → float, structs → dicts."""
    if isinstance(v, Decimal):
        return float(v)
    if hasattr(v, "asDict"):  # a Spark Row
        return {k: _plain(x) for k, x in v.asDict().items()}
    if isinstance(v, dict):  # PostgreSQL's jsonb: whole numbers come back as int
        return {k: float(x) if isinstance(x, int) and not isinstance(x, bool) else _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return np.array([_plain(x) for x in v], dtype=object)
    return v


def _column(values: list, type_name: str | None) -> pd.Series:
    present = [v for v in values if v is not None]
    kind = (type_name or "").upper()
    numbers = bool(present) and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in present)
    if kind in ("DOUBLE", "FLOAT", "REAL") or kind.startswith("DECIMAL") or (
            numbers and any(isinstance(v, float) for v in present)):
        return pd.Series([math.nan if v is None else float(v) for v in values], dtype="float64")
    if kind in ("BIGINT", "INTEGER", "SMALLINT", "TINYINT", "HUGEINT") or (
            present and all(isinstance(v, int) and not isinstance(v, bool) for v in present)):
        if len(present) == len(values):
            return pd.Series(values, dtype="int64")
        return pd.Series(values, dtype="Int64")
    if kind == "BOOLEAN" or (present and all(isinstance(v, bool) for v in present)):
        return pd.Series(values, dtype="bool" if len(present) == len(values) else "boolean")
    return pd.Series(values, dtype=object)


def frame_of(names: list[str], rows: list[tuple], types: list[str | None]) -> pd.DataFrame:
    """A DataFrame of driver rows: float64 for numbers (NaN for NULL), int64 for whole numbers
    (Int64 with NULLs), bool, lists as arrays of dicts; column names kept, duplicates too."""
    cols: list[Sequence[Any]] = list(zip(*rows)) if rows else [[] for _ in names]
    data = {i: _column([_plain(v) for v in col], t) for i, (col, t) in enumerate(zip(cols, types))}
    df = pd.DataFrame(data) if data else pd.DataFrame(index=range(len(rows)))
    df.columns = list(names)
    return df


def plain_cell(value):
    """A DataFrame cell as a plain Python value (NULL for NA and for NaN in a nullable column)."""
    if value is None or value is pd.NA:
        return None
    return value.item() if hasattr(value, "item") else value

