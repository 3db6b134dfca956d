"""``from_brackets`` and ``merge_brackets``: measures with bounds from bracket tables.

The bracket table is read with one SELECT on DuckDB (any relation: a table, a file, a query, a
DataFrame the caller holds) or on the engine ``con`` names (PostgreSQL, Spark, SQLite: through its
adapter, engine/adapters; the rows come back whole); the bounds and the point estimate are computed in Python per group,
because a group has tens of brackets, not millions of rows, and the point estimate solves per
bracket (a density's shape, a Pareto index) and per measure (which bracket holds p).
"""

from __future__ import annotations

import math

import pandas as pd
import sqlglot
from sqlglot import exp

from uneven.bounds import bins as b
from uneven.bounds.lower import join_overlaps
from uneven.brackets import bounds as bd
from uneven.brackets.estimate import Estimate
from uneven.brackets.table import check_brackets
from uneven.compiler.context import CompileOptions
from uneven.compiler.emit import to_sql
from uneven.compiler.pipeline import compile_sql
from uneven.engine.adapters import adapt, is_duckdb
from uneven.engine.frames import callers_frame, register_caller_frames, register_frames_on
from uneven.engine.runner import connect, execute_df
from uneven.errors import InputDataError, MeasureArgumentError, SqlParseError, UnevenError
from uneven.sqltree import build as s

# measure name → number of parameters (all fractions in [0, 1])
MEASURES = {"gini": 0, "lorenz": 1, "bottom_share": 1, "top_share": 1, "palma": 0, "s80s20": 0,
            "quantile_w": 1, "percentile_ratio": 2, "mean": 0}
DEFAULT_MEASURES = ("gini", "top_share(0.1)", "bottom_share(0.4)", "palma", "s80s20", "quantile_w(0.5)")
CAUTION = ("Figures from a bracket table are approximate: the bounds hold for every distribution the table "
           "allows, the point estimate is one such distribution (linear within brackets, a Pareto tail on "
           "an open top bracket), not the data.")
_COLUMNS = ("low", "high", "units", "total")
FIXED_COLUMNS = ("units", "brackets", "missing_totals", "open_top")
_FRAME = "_uv_brackets_frame"
_UNKNOWN = "uv_unknown"  # units without a total, beside the summary's bin columns in merge_brackets


def _parse(text, what: str) -> exp.Expression:
    if not isinstance(text, str) or not text.strip():
        raise MeasureArgumentError(f"from_brackets: {what} must be a column name or SQL expression, got {text!r}")
    try:
        return s.node(sqlglot.parse_one(text, read="duckdb"))
    except sqlglot.errors.ParseError as e:
        raise SqlParseError(f"from_brackets: cannot read the {what} {text!r}: {str(e).splitlines()[0]}") from None


_FILE_SUFFIXES = (".csv", ".tsv", ".parquet", ".json", ".ndjson", ".jsonl", ".txt", ".gz", ".zst")


def _relation(text) -> exp.From:
    if (isinstance(text, str) and text.strip() and not any(ch.isspace() for ch in text)
            and text.lower().endswith(_FILE_SUFFIXES) and not text.startswith(("'", '"'))):
        # a bare file name (tab.csv): a quoted name, which DuckDB reads as the file (unquoted, it
        # would be the table csv of the schema tab)
        return exp.From(this=exp.Table(this=exp.to_identifier(text, quoted=True)))
    try:
        return exp.select("*").from_(text, dialect="duckdb").args["from_"]
    except (sqlglot.errors.ParseError, TypeError, ValueError):
        if isinstance(text, str) and text.strip() and not any(ch.isspace() for ch in text):
            return exp.From(this=exp.Table(this=exp.to_identifier(text, quoted=True)))
        raise SqlParseError(f"from_brackets: cannot read the relation {text!r} (a table name, a quoted file "
                            "path, a table function or a parenthesised query with an alias)") from None


def read_measure(text: str) -> tuple[str, str, tuple[float, ...]]:
    """'top_share(0.1)' or 'gini AS g' → (label, name, params)."""
    node = _parse(text, "measure")
    label = node.alias if isinstance(node, exp.Alias) else text.strip()
    call = node.unalias()
    if isinstance(call, exp.Column):
        name, args = call.name.lower(), []
    elif isinstance(call, (exp.Anonymous, exp.Func)):
        name = (call.name if isinstance(call, exp.Anonymous) else call.sql_name()).lower()
        args = call.expressions if isinstance(call, exp.Anonymous) else [a for a in call.args.values()
                                                                         if isinstance(a, exp.Expression)]
    else:
        name, args = "", []
    if name not in MEASURES:
        raise MeasureArgumentError(f"from_brackets: {text!r} cannot be computed from brackets (these can: "
                                   f"{', '.join(MEASURES)})")
    if len(args) != MEASURES[name]:
        raise MeasureArgumentError(f"from_brackets: {name} takes {MEASURES[name]} parameter(s), got {len(args)}")
    params = []
    for arg in args:
        try:
            v = float(arg.sql())
        except ValueError:
            raise MeasureArgumentError(f"from_brackets: {name}: a parameter must be a number, "
                                       f"got {arg.sql()}") from None
        if not 0 <= v <= 1:
            raise MeasureArgumentError(f"from_brackets: {name}: p must be a fraction in [0, 1], got {v:g}")
        params.append(v)
    return label, name, tuple(params)


def measure_group(br, est: Estimate, name: str, params) -> tuple[float, float, float]:
    """(point, lo, hi) of one measure for one group's brackets."""
    if name == "gini":
        return (est.gini(), *bd.gini_interval(br))
    if name in ("lorenz", "bottom_share"):
        return (est.lorenz(params[0]), *bd.lorenz_interval(br, params[0]))
    if name == "top_share":
        return (est.top_share(params[0]), *bd.top_interval(br, params[0]))
    if name == "palma":
        return (est.top_share(0.1) / est.lorenz(0.4) if est.lorenz(0.4) > 0 else math.nan,
                *bd.ratio_interval(bd.top_interval(br, 0.1), bd.lorenz_interval(br, 0.4)))
    if name == "s80s20":
        return (est.top_share(0.2) / est.lorenz(0.2) if est.lorenz(0.2) > 0 else math.nan,
                *bd.ratio_interval(bd.top_interval(br, 0.2), bd.lorenz_interval(br, 0.2)))
    if name == "quantile_w":
        return (est.quantile(params[0]), *bd.quantile_interval(br, params[0]))
    if name == "percentile_ratio":
        hi_q, lo_q = est.quantile(params[0]), est.quantile(params[1])
        return (hi_q / lo_q if lo_q > 0 else math.nan,
                *bd.ratio_interval(bd.quantile_interval(br, params[0]), bd.quantile_interval(br, params[1])))
    if name == "mean":
        return (est.mean(), *bd.mean_interval(br))
    raise AssertionError(name)


def _read(relation, columns: dict, by, con, frame) -> tuple[pd.DataFrame, list[str]]:
    """SELECT by…, low, high, units, total FROM relation (values cast to DOUBLE)."""
    keys = [_parse(k, "group key") for k in ([by] if isinstance(by, str) else list(by or ()))]
    names = [k.alias_or_name or f"key{i + 1}" for i, k in enumerate(keys)]
    items = [s.alias(s.node(k.unalias()), f"_uv_by{i + 1}") for i, k in enumerate(keys)]
    for role in _COLUMNS:
        value = s.cast_double(s.node(_parse(columns[role], f"{role} column").unalias()))
        items.append(s.alias(value, f"_uv_{role}"))
        # NaN and NULL both arrive as NaN in pandas: a NaN in the table is flagged apart (never "missing")
        items.append(s.alias(exp.Anonymous(this="isnan", expressions=[value.copy()]), f"_uv_nan_{role}"))
    select = exp.Select(expressions=items)
    frame_given = isinstance(relation, pd.DataFrame)
    select.set("from_", _relation(_FRAME if frame_given else relation))
    if not frame_given and not is_duckdb(con):
        df = read_on_engine(adapt(con), select, frame)
    else:
        df = _read_duckdb(select, relation if frame_given else None, con, frame)
    for role in _COLUMNS:

        bad = df[f"_uv_nan_{role}"].fillna(False).astype(bool)
        if bad.any():
            i = int(bad.to_numpy().argmax())
            where = _group_label(names, [df[f"_uv_by{j + 1}"].iloc[i] for j in range(len(names))])
            raise InputDataError(f"from_brackets: the {role} column ({columns[role]}) holds NaN"
                                 f"{f' (group {where})' if where else ''}: a missing {role} is NULL, NaN is refused")
    return df, names


def _read_duckdb(select: exp.Select, given: pd.DataFrame | None, con, frame) -> pd.DataFrame:
    connection = connect(con if is_duckdb(con) else None)
    sql = to_sql(select)
    if given is not None:  # a DataFrame passed itself (e.g. fetched from another engine): read under a reserved name
        connection.register(_FRAME, given)
        registered = [_FRAME]
    else:
        registered = register_caller_frames(connection, sql, frame)
    try:
        return execute_df(connection, sql)
    finally:
        for name in registered:
            connection.unregister(name)
        if con is None or not is_duckdb(con):
            connection.close()


def read_on_engine(adapter, select: exp.Select, frame) -> pd.DataFrame:
    """The bracket rows from another engine (engine/adapters): the same SELECT without the NaN flags,
    generated for its dialect; the driver's values tell NULL (None) from NaN, so the flags are set here.
    A bracket table is small: its rows come back whole and the measures are computed in numpy."""
    plain = select.copy()
    plain.set("expressions", [e for e in plain.expressions if not e.alias.startswith("_uv_nan_")])
    sql = to_sql(plain)
    registered = register_frames_on(adapter, sql, frame)
    try:
        names, rows, _ = adapter.fetch(compile_sql(sql, CompileOptions(dialect=adapter.dialect, pretty=False)))
    except adapter.errors() as e:
        raise adapter.translate(e) from None
    finally:
        for name in registered:
            adapter.unregister(name)
    df = pd.DataFrame([list(r) for r in rows], columns=names, dtype=object)
    for role in _COLUMNS:
        raw = df[f"_uv_{role}"]
        df[f"_uv_nan_{role}"] = [isinstance(v, float) and math.isnan(v) for v in raw]
        df[f"_uv_{role}"] = [math.nan if v is None else float(v) for v in raw]
    return df.infer_objects()  # the keys typed as DuckDB's reading types them (whole numbers as int64)


def _group_label(names, values) -> str:
    return ", ".join(f"{n} = {v!r}" for n, v in zip(names, values))


def _groups(df: pd.DataFrame, names):
    keys = [f"_uv_by{i + 1}" for i in range(len(names))]
    if not keys:
        yield (), df
        return
    for values, part in df.groupby(keys, dropna=False, sort=True):
        yield (values if isinstance(values, tuple) else (values,)), part


def from_brackets(relation, measures=DEFAULT_MEASURES, *, low: str = "low", high: str = "high",
                  units: str = "units", total: str = "total", by=(),
                  con=None) -> pd.DataFrame:
    """Inequality measures with certified bounds and a point estimate from a bracket table.

    ``relation``: the bracket table (table name, quoted file path, table function, parenthesised query
    with an alias, a DataFrame the caller holds by that name, or a DataFrame itself, e.g. a bracket
    table fetched from another engine). One row per bracket: ``low`` and
    ``high`` its ends (high NULL: the open top bracket), ``units`` how many units (people, households,
    or a weighted count), ``total`` the sum of their values (NULL when not published). ``by``: group
    keys; rows of a group naming the same bracket add up, so ``by`` a subset of the table's keys rolls
    the table up. ``measures``: e.g. ``["gini", "top_share(0.1) AS top10", "quantile_w(0.5)"]``
    (gini, lorenz(p), bottom_share(p), top_share(p), palma, s80s20, quantile_w(p),
    percentile_ratio(hi, lo), mean).

    ``con``: where the table lives: a DuckDB connection (default: a new in-memory one), or any
    connection ``query()`` takes (psycopg, SparkSession, sqlite3, SQLAlchemy).

    Per group: the keys, ``units``, ``brackets``, ``missing_totals`` (brackets without a total: their
    bounds use the bracket's ends, their point estimate its midpoint), ``open_top``, then per measure
    its point estimate, ``<label>_lo`` and ``<label>_hi`` (inf where unlimited).
    """
    calls = [read_measure(m) for m in ([measures] if isinstance(measures, str) else list(measures))]
    if not calls:
        raise MeasureArgumentError("from_brackets needs at least one measure")
    labels = [c[0] for c in calls]
    if len(set(labels)) != len(labels):
        raise MeasureArgumentError("from_brackets: two measures have the same label; name them with AS")
    frame = callers_frame()
    df, names = _read(relation, {"low": low, "high": high, "units": units, "total": total}, by, con, frame)
    _check_names(names, labels)
    rows = []
    for values, part in _groups(df, names):
        br = check_brackets(part["_uv_low"], part["_uv_high"], part["_uv_units"], part["_uv_total"],
                            _group_label(names, values))
        assert br is not None  # without allow_empty, a group of empty brackets raises
        est = Estimate(br)
        row = dict(zip(names, values))
        row.update(units=float(br.units.sum()), brackets=len(br.units), missing_totals=br.missing,
                   open_top=br.open_top)
        for label, name, params in calls:
            point, lo, hi = measure_group(br, est, name, params)
            row.update({label: _num(point), f"{label}_lo": _num(lo), f"{label}_hi": _num(hi)})
        rows.append(row)
    if not rows:
        raise InputDataError("from_brackets: the bracket table has no rows")
    out = pd.DataFrame(rows)
    out.attrs["uneven"] = {"method": "brackets", "caution": CAUTION}
    return out


def _check_names(keys: list[str], labels: list[str]) -> None:
    """Every output column once: the keys, the fixed columns, each measure's three."""
    seen: dict[str, str] = {}
    columns = [(k, "group key") for k in keys] + [(c, "column") for c in FIXED_COLUMNS]
    columns += [(n, f"measure {lab!r}") for lab in labels for n in (lab, f"{lab}_lo", f"{lab}_hi")]
    for name, what in columns:
        if name.lower() in seen:
            raise MeasureArgumentError(f"from_brackets: the output would have two columns named {name!r} "
                                       f"({seen[name.lower()]} and {what}); rename one with AS")
        seen[name.lower()] = what


def _num(v: float):
    return None if v is None or (isinstance(v, float) and math.isnan(v)) else float(v)


def merge_brackets(parts, *, low: str = "low", high: str = "high", units: str = "units", total: str = "total",
                   by=(), con=None) -> pd.DataFrame:
    """Combine bracket tables of disjoint parts (regions, sources) into one table per group of ``by``.

    Brackets that overlap without being equal are joined into one bracket from the lowest low to the
    highest high, by the same SQL that joins a stored summary's overlapping bins
    (bounds/lower.py: join_overlaps); brackets with the same ends stay one bracket. A bracket whose
    parts give a total for some units and not for others comes out as two rows with the same ends:
    the units with their total, and the units without (total NULL); ``from_brackets`` adds such rows
    up and uses both. The result has the columns ``by``…, low, high, units, total.
    """
    items = list(parts) if isinstance(parts, (list, tuple)) else [parts]
    if not items:
        raise UnevenError("merge_brackets: no tables given")
    frame = callers_frame()
    cols = {"low": low, "high": high, "units": units, "total": total}
    frames: list[pd.DataFrame] = []
    names: list[str] = []
    for part in items:
        df, names = _read(part, cols, by, con, frame)
        frames.append(df)
    df = pd.concat(frames, ignore_index=True)
    for i in range(len(df)):  # each row checked as from_brackets would (ends, units, total in range)
        row = df.iloc[i]
        check_brackets([row["_uv_low"]], [row["_uv_high"]], [row["_uv_units"]], [row["_uv_total"]],
                       "", allow_empty=True)
    keys = [f"_uv_by{i + 1}" for i in range(len(names))]
    given = df["_uv_total"].notna()
    bins = pd.DataFrame({**{k: df[k] for k in keys},
                         b.MIN: df["_uv_low"], b.MAX: df["_uv_high"].fillna(math.inf),
                         b.W: df["_uv_units"].where(given, 0.0), b.WX: df["_uv_total"].fillna(0.0),
                         _UNKNOWN: df["_uv_units"].where(~given, 0.0)})
    key_cols = [s.col(k) for k in keys]
    ctes = join_overlaps("_uv_br_parts", key_cols, [b.MIN, b.MAX, b.W, b.WX, _UNKNOWN], "_uv_br")
    final = exp.Select(expressions=[exp.Star()]).from_(exp.Table(this=exp.to_identifier("_uv_br", quoted=True)))
    final.set("order", exp.Order(expressions=[exp.Ordered(this=k.copy(), nulls_first=False) for k in key_cols]
                                 + [exp.Ordered(this=s.col(b.MIN))]))
    final.set("with_", exp.With(expressions=ctes))
    # the overlaps are joined on DuckDB (the caller's, or an in-memory one when the tables were read
    # from another engine): a few rows per part
    own = con is None or not is_duckdb(con)
    connection = connect(None if own else con)
    connection.register("_uv_br_parts", bins)
    try:
        islands = execute_df(connection, to_sql(final))
    finally:
        connection.unregister("_uv_br_parts")
        if own:
            connection.close()
    out = []
    for _, isl in islands.iterrows():
        head = {n: (None if pd.isna(isl[k]) else isl[k]) for n, k in zip(names, keys)}
        end = None if math.isinf(isl[b.MAX]) else float(isl[b.MAX])
        if isl[b.W] > 0 or isl[_UNKNOWN] == 0:
            out.append({**head, "low": float(isl[b.MIN]), "high": end, "units": float(isl[b.W]),
                        "total": float(isl[b.WX])})
        if isl[_UNKNOWN] > 0:
            out.append({**head, "low": float(isl[b.MIN]), "high": end, "units": float(isl[_UNKNOWN]), "total": None})
    return pd.DataFrame(out, columns=[*names, "low", "high", "units", "total"])
