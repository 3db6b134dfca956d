"""``summarize``, ``merge_summaries`` and ``from_summary``: summaries written once, measured later.

A stored summary is a plain table (DuckDB table or Parquet file), one row per (group keys, bin):
the key columns under their own names, then ``uv_sign``, ``uv_bin`` and the bin columns of
bounds/bins.py, and ``uv_resolution`` (the relative bin width it was made with). Columns starting
with ``uv_`` are the summary's; every other column is a group key.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import sqlglot
from sqlglot import exp

from uneven import catalog
from uneven.bounds import bins as b
from uneven.bounds.measures import BOUNDED
from uneven.compiler.generate import generate
from uneven.engine.adapters import adapt, is_duckdb
from uneven.engine.bounded import bounded_resolution
from uneven.engine.frames import callers_frame, register_caller_frames, register_frames_on
from uneven.engine.runner import connect, execute_df
from uneven.errors import MeasureArgumentError, SqlParseError, UnevenError
from uneven.sqltree import build as s
from uneven.stored.sql import RESERVED_PREFIX, measures_select, merged_select, summary_select


class _Engine:
    """Where summaries are made and read: DuckDB (``con`` or a new in-memory connection) or another
    engine ``query`` takes (engine/adapters), in which case trees are generated for its dialect."""

    def __init__(self, con):
        self.given = con
        self.adapter = None if is_duckdb(con) else adapt(con)
        self.con = connect(con) if self.adapter is None else None
        self.dialect = "duckdb" if self.adapter is None else self.adapter.dialect

    def df(self, tree: exp.Expression) -> pd.DataFrame:
        if self.adapter is None:
            return execute_df(self.con, generate(tree, "duckdb"))
        return self.adapter.execute(generate(tree, self.dialect))

    def register_frames(self, sql: str, frame) -> list[str]:
        if self.adapter is None:
            return register_caller_frames(self.con, sql, frame)
        return register_frames_on(self.adapter, sql, frame)

    def finish(self, registered: list[str]) -> None:
        for name in registered:
            (self.con if self.adapter is None else self.adapter).unregister(name)
        if self.given is None:
            self.con.close()


def _parse(text: str, what: str) -> exp.Expression:
    try:
        return s.node(sqlglot.parse_one(text, read="duckdb"))
    except sqlglot.errors.ParseError as e:
        raise SqlParseError(f"cannot read the {what} {text!r}: {str(e).splitlines()[0]}") from None


def _source(source, columns: list[str] | None = None) -> exp.Expression:
    """A FROM item: a table name, a quoted file path or glob, a table function, or a query; a list
    of them is read as their union (of ``columns`` when given)."""
    if isinstance(source, (list, tuple)):
        if not source:
            raise UnevenError("no summaries given")
        proj: list[exp.Expression] = [s.col(c) for c in columns] if columns is not None else [exp.Star()]
        selects = [exp.Select(expressions=[p.copy() for p in proj]).from_(_source(part)) for part in source]
        union: exp.Expression = selects[0]
        for sel in selects[1:]:
            union = exp.Union(this=union, expression=sel, distinct=False)
        return exp.Subquery(this=union, alias=exp.TableAlias(this=exp.to_identifier("_uv_src", quoted=True)))
    if isinstance(source, Path) or (isinstance(source, str) and Path(source).suffix.lower() == ".parquet"):
        return exp.Table(this=exp.Anonymous(this="read_parquet", expressions=[s.lit(str(source))]))
    if not isinstance(source, str) or not source.strip():
        raise UnevenError(f"a source must be a table name, a Parquet path or a query, got {source!r}")
    text = source.strip()
    if text.split(None, 1)[0].upper() in ("SELECT", "WITH", "FROM"):
        return exp.Subquery(this=_parse(text, "source query"),
                            alias=exp.TableAlias(this=exp.to_identifier("_uv_src", quoted=True)))
    try:
        return exp.maybe_parse(text, into=exp.Table, dialect="duckdb")
    except sqlglot.errors.ParseError:
        raise SqlParseError(f"cannot read the source {text!r} (a table name, a quoted path, a table "
                            "function or a query)") from None


def _summary_source(connection, summary) -> tuple[exp.Expression, list[str], list[str]]:
    """The summary (or the union of several) as a FROM item, its key columns and its bin columns.
    Parts must have the same keys and resolution; a stored power sum is used only if every part has it."""
    parts = list(summary) if isinstance(summary, (list, tuple)) else [summary]
    described = []
    for part in parts:
        keys, sums = _check_summary(_columns(connection, _source(part)), f"{part}")
        described.append((keys, sums))
    keys = described[0][0]
    for other, _ in described[1:]:
        if sorted(other) != sorted(keys):
            raise UnevenError(f"summaries with different keys cannot be merged: {keys} and {other}")
    sums = [c for c in described[0][1] if all(c in d[1] for d in described)]
    source = _source(parts, keys + [b.SIGN, b.BIN] + sums)
    _check_one_resolution(connection, source)
    return source, keys, sums


def _check_one_resolution(connection, source: exp.Expression) -> None:
    probe = exp.Select(expressions=[exp.Count(this=exp.Distinct(expressions=[s.col(b.RESOLUTION)])),
                                    s.agg_min(s.col(b.RESOLUTION)), s.agg_max(s.col(b.RESOLUTION))]
                       ).from_(source.copy())
    count, lo, hi = connection.df(probe).iloc[0].tolist()
    if count and count > 1:
        raise UnevenError(f"the summaries were made at different resolutions ({lo:g} … {hi:g}); bins of "
                           "different widths cannot be added up: make every part at one resolution")


def _keys(by) -> list[tuple[str, exp.Expression]]:
    out = []
    for item in ([by] if isinstance(by, str) else list(by or ())):
        node = _parse(item, "group key")
        name = node.alias_or_name
        if not name:
            raise MeasureArgumentError(f"the group key {item!r} needs a name: write it as '<expression> AS name'")
        if name.lower().startswith(RESERVED_PREFIX):
            raise MeasureArgumentError(f"the group key name {name!r} starts with {RESERVED_PREFIX!r}, which "
                                       "summaries reserve for their own columns; rename it with AS")
        out.append((name, s.node(node.unalias())))
    return out


def _powers(powers) -> list[float]:
    out = []
    for a in powers or ():
        try:
            a = float(a)
        except (TypeError, ValueError):
            raise MeasureArgumentError(f"powers must be numbers, got {a!r}") from None
        if a not in out:
            out.append(a)
    return out


def summarize(source, value: str, weight: str | None = None, *, by=(), where: str | None = None,
              resolution: float | None = None, tolerance: float | None = None, powers=(),
              parquet: str | Path | None = None, table: str | None = None, replace: bool = False,
              con=None, dialect: str | None = None) -> pd.DataFrame | str | None:
    """One GROUP BY pass over ``source`` into a binned summary of ``value`` (and ``weight``) per ``by``.

    ``source``: a table name, a Parquet path or glob, a query, or a list of those (read together);
    ``value``, ``weight``, ``by`` (list), ``where``: SQL expressions over its columns.
    ``powers``: exponents a whose Σw·x^a is stored, so GE(a) and Atkinson(1 − a) are exact later
    (others are bounded). Writes ``parquet`` (a file) or ``table`` (in ``con``), else returns a
    DataFrame. ``resolution`` (default 0.01) or ``tolerance`` picks the bins, as in ``query``.
    With ``dialect`` (e.g. "postgres", "spark", "sqlite"), returns the summary's SELECT for that
    engine instead (``source`` then names a table or query there); its result, stored as a table or
    Parquet, merges with summaries made anywhere else at the same resolution.
    """
    res = bounded_resolution(tolerance, resolution)
    x = _parse(value, "value")
    w = _parse(weight, "weight") if weight is not None else None
    cond = _parse(where, "condition") if where is not None else None
    select = summary_select(_source(source), x, w, _keys(by), res, _powers(powers), cond)
    if dialect is not None:
        if parquet is not None or table is not None:
            raise UnevenError("with dialect, summarize returns SQL to run on that engine: parquet and table "
                               "do not apply")
        return generate(select, dialect)
    connection = _Engine(con)
    registered = connection.register_frames(generate(select, "duckdb"), callers_frame())
    try:
        return _write(connection, select, parquet, table, replace)
    finally:
        connection.finish(registered)


def _write(connection, select: exp.Select, parquet, table, replace: bool):
    if parquet is not None and table is not None:
        raise UnevenError("give either parquet or table, not both")
    if parquet is None and table is None:
        return connection.df(select)
    if parquet is not None and connection.adapter is not None:
        raise UnevenError(f"parquet= is written by DuckDB; on {connection.adapter.label} store the summary "
                          "as a table (table=...) or fetch it as a DataFrame")
    if parquet is not None:
        path = Path(parquet)
        if path.exists() and not replace:
            raise UnevenError(f"{path} exists; pass replace=True to overwrite it")
        copy = exp.Copy(this=exp.Subquery(this=select), kind=False, files=[s.lit(str(path))],
                        params=[exp.CopyParameter(this=exp.var("FORMAT"), expression=exp.var("PARQUET"))])
        connection.df(copy)
        return None
    name = exp.to_table(table, dialect="duckdb")
    if connection.adapter is not None:  # CREATE OR REPLACE TABLE is DuckDB's: drop first elsewhere
        if replace:
            connection.df(exp.Drop(tables=[name.copy()], kind="TABLE", exists=True))
        connection.df(exp.Create(this=name, kind="TABLE", expression=select))
        return None
    create = exp.Create(this=name, kind="TABLE", expression=select, replace=replace)
    connection.df(create)
    return None


def _columns(connection, source: exp.Expression) -> list[str]:
    probe = exp.Select(expressions=[exp.Star()]).from_(source.copy()).limit(0)
    try:
        return list(connection.df(probe).columns)
    except UnevenError as e:
        raise UnevenError(f"cannot read the summary {source.sql('duckdb')}: {str(e).splitlines()[0]}") from None


def _check_summary(columns: list[str], where: str) -> tuple[list[str], list[str]]:
    missing = [c for c in (b.SIGN, b.BIN, *b.BIN_COLUMNS, b.RESOLUTION) if c not in columns]
    if missing:
        raise UnevenError(f"{where} is not an uneven summary (missing {', '.join(missing)})")
    keys = [c for c in columns if not c.lower().startswith(RESERVED_PREFIX)]
    sums = [c for c in columns if c.lower().startswith(RESERVED_PREFIX) and c not in (b.SIGN, b.BIN)]
    return keys, sums


def merge_summaries(parts, *, by=None, parquet: str | Path | None = None, table: str | None = None,
                    replace: bool = False, con=None) -> pd.DataFrame | None:
    """Combine summaries of disjoint parts into the summary of their union (optionally rolled up to the
    key columns ``by``): counts and sums add, min and max take the min and max, per (keys, bin)."""
    connection = _Engine(con)
    registered = _register(connection, parts, callers_frame())
    try:
        source, keys, sums = _summary_source(connection, parts)
        keys = _rollup_keys(keys, by)
        return _write(connection, merged_select(source, keys, sums), parquet, table, replace)
    finally:
        connection.finish(registered)


def _register(connection, summary, frame) -> list[str]:
    """Make DataFrames the caller holds under a summary's name readable, as ``query`` does."""
    names = [p for p in (summary if isinstance(summary, (list, tuple)) else [summary]) if isinstance(p, str)]
    done = []
    for name in names:
        if Path(name).suffix.lower() != ".parquet":
            try:
                probe = exp.Select(expressions=[exp.Star()]).from_(
                    exp.maybe_parse(name.strip(), into=exp.Table, dialect="duckdb"))
            except sqlglot.errors.ParseError:
                continue
            done += connection.register_frames(generate(probe, "duckdb"), frame)
    return done


def _rollup_keys(keys: list[str], by) -> list[str]:
    if by is None:
        return keys
    wanted = [by] if isinstance(by, str) else list(by)
    unknown = [k for k in wanted if k not in keys]
    if unknown:
        raise MeasureArgumentError(f"{', '.join(unknown)} is not a key of the summary (its keys: "
                                   f"{', '.join(keys) or 'none'})")
    return wanted


def _read_measure(text: str) -> tuple[str, str, tuple]:
    """'top_share(0.1)' or 'gini AS g' → (label, measure name, params)."""
    node = _parse(text, "measure")
    label = node.alias if isinstance(node, exp.Alias) else text.strip()
    call = node.unalias()
    name = call.name.lower() if isinstance(call, (exp.Anonymous, exp.Column, exp.Func)) else ""
    if isinstance(call, exp.Column):
        args = []
    elif isinstance(call, exp.Anonymous):
        args = call.expressions
    else:
        raise MeasureArgumentError(f"cannot read the measure {text!r}: write e.g. 'gini' or 'top_share(0.1)'")
    measure = catalog.lookup(name)
    if measure is None or name not in BOUNDED:
        known = ", ".join(sorted(BOUNDED))
        raise MeasureArgumentError(f"{name or text!r} cannot be computed from a summary (these can: {known})")
    if len(args) != len(measure.params):
        params = ", ".join(p.name for p in measure.params)
        raise MeasureArgumentError(f"{name}() from a summary takes {len(measure.params)} parameters "
                                   f"({params or 'none'}): the value and weight are the summary's; got {len(args)}")
    values = []
    for spec, arg in zip(measure.params, args):
        if not (isinstance(arg, exp.Literal) and not arg.is_string) and not isinstance(arg, exp.Neg):
            raise MeasureArgumentError(f"{name}(): {spec.name} must be a number, got {arg.sql()}")
        v = float(arg.sql())
        problem = spec.check(v)
        if problem:
            raise MeasureArgumentError(f"{name}(): {problem}")
        values.append(v)
    return label, name, tuple(values)


def from_summary(summary, measures, *, by=None, con=None,
                 dialect: str | None = None) -> pd.DataFrame | str:
    """Measures with certified intervals from stored summaries.

    ``summary``: a table name, a Parquet path or glob, or a list of them (disjoint parts, merged on
    the fly). ``measures``: e.g. ``["gini", "top_share(0.1) AS top10", "ge(2)"]``. ``by``: group keys,
    a subset of the summary's (default: all of them; ``[]``: one row for everything). Each measure
    gives three columns: the point estimate, ``<label>_lo`` and ``<label>_hi``. With ``dialect``,
    returns the SQL for that engine instead of running it on DuckDB.
    """
    calls = [_read_measure(m) for m in ([measures] if isinstance(measures, str) else measures)]
    if not calls:
        raise MeasureArgumentError("from_summary needs at least one measure")
    connection = _Engine(con)
    registered = _register(connection, summary, callers_frame())
    try:
        source, keys, sums = _summary_source(connection, summary)
        select = measures_select(source, _rollup_keys(keys, by), sums, calls)
        if dialect is not None:
            return generate(select, dialect)
        df = connection.df(select)
        df.attrs["uneven"] = {"method": "bounded", "from_summary": True}
        return df
    finally:
        connection.finish(registered)
