"""Build and run the measure queries of plots and reports as sqlglot trees (no SQL text is
assembled): measure calls go through the uneven compiler like any user query."""

from __future__ import annotations

from dataclasses import dataclass

import duckdb
import pandas as pd
from sqlglot import exp

from uneven.compiler import compile_sql
from uneven.compiler.context import CompileOptions
from uneven.compiler.emit import to_sql
from uneven.compiler.pipeline import compile_with_context
from uneven.engine.adapters import Adapter, adapt, is_duckdb
from uneven.engine.columns import DuckDBSchema
from uneven.engine.runner import connect
from uneven.engine.stream import execute_streamed
from uneven.errors import UnevenError
from uneven.report.source import Source, resolve_source


def as_list(by) -> list[str]:
    if by is None:
        return []
    names = [by] if isinstance(by, str) else list(by)
    out = [n.strip() for name in names for n in str(name).split(",") if n.strip()]
    if len({n.lower() for n in out}) != len(out):
        raise UnevenError(f"a group column is named twice in {', '.join(out)}")
    return out


def call(name: str, value: exp.Expression, *params: float, weight: exp.Expression | None = None) -> exp.Expression:
    """A measure call ``name(value, params…, weight)`` as a tree (compiled by the uneven compiler)."""
    args = [value.copy()] + [exp.Literal.number(repr(float(p)) if isinstance(p, float) else str(p)) for p in params]
    if weight is not None:
        args.append(weight.copy())
    return exp.Anonymous(this=name, expressions=args)


def run_tree(con: duckdb.DuckDBPyConnection | Adapter, tree: exp.Expression) -> pd.DataFrame:
    """Compile a tree with measure calls and run it on ``con`` (DuckDB, or an engine adapter)."""
    if isinstance(con, Adapter):
        return con.execute(compile_sql(to_sql(tree), CompileOptions(dialect=con.dialect, pretty=False), con.schema()))
    # uneven runs it on DuckDB itself: an ordered pass may be streamed (engine/stream.py)
    compiled, ctx = compile_with_context(to_sql(tree), CompileOptions(pretty=False, stream=True),
                                         DuckDBSchema(con, types=False, ties=False))
    return execute_streamed(con, compiled, ctx.stream_jobs)


@dataclass
class Spec:
    """What a plot or report is about: the source and the value, weight, group and time columns."""
    source: Source
    value: exp.Column
    weight: exp.Column | None
    keys: list[exp.Column]
    time: exp.Column | None = None

    @property
    def key_names(self) -> list[str]:
        return [k.name for k in self.keys]


def make_spec(con: duckdb.DuckDBPyConnection | Adapter, source, value: str, weight: str | None = None, by=None,
              time: str | None = None) -> Spec:
    if not value:
        raise UnevenError("a value column is needed (--value COL)")
    src = resolve_source(con, source)
    keys = [src.column(name, "--by") for name in as_list(by)]
    t = src.column(time, "--time") if time else None
    if t is not None and t.name in [k.name for k in keys]:
        raise UnevenError(f"--time {time} is also a group column (--by)")
    return Spec(src, src.column(value, "--value", numeric=True),
                src.column(weight, "--weight", numeric=True) if weight else None, keys, t)


def open_connection(con=None, **settings) -> tuple[duckdb.DuckDBPyConnection | Adapter, bool]:
    """The connection to use and whether we must close it when done. Another engine's adapter
    (engine/adapters) is used as it is: its settings are its own; DuckDB settings given with another
    engine's connection are an error. An adapter made here for a driver connection is closed too:
    that leaves the caller's connection open and gives a SQLAlchemy pool its connection back."""
    if isinstance(con, Adapter):
        return con, False
    if con is not None and not is_duckdb(con):
        adapter = adapt(con)
        given = [f"{k}=" for k, v in settings.items() if v not in (None, False)]
        if given:  # as query(con=…) refuses them: never a setting dropped silently
            adapter.close()
            what = "is a DuckDB setting" if len(given) == 1 else "are DuckDB settings"
            raise UnevenError(f"{', '.join(given)} {what}; it does not apply to {adapter.label}: "
                              f"set {adapter.label}'s own options on its connection instead")
        return adapter, True
    owned = con is None
    progress = False
    if not owned:  # keep the caller's progress setting (a progress line may be reading it)
        try:
            progress = bool(con.execute("SELECT current_setting('enable_progress_bar')").fetchone()[0])
        except duckdb.Error:
            progress = False
    return connect(con, progress=progress, **{k: v for k, v in settings.items() if v is not None}), owned


def group_label(row, names: list[str]) -> str:
    if not names:
        return "all rows"
    parts = []
    for name in names:
        v = row[name]
        parts.append("(null)" if v is None or (isinstance(v, float) and v != v) or v is pd.NA else str(v))
    return " / ".join(parts)
