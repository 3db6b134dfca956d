"""Tables that explain where inequality comes from, run on DuckDB: the GE decomposition by subgroup,
the Gini by income source, paired Gini comparisons and the influence of single rows.

Each function takes a relation (a table name, a quoted file path such as ``'survey/*.parquet'``, a
table function or a parenthesised query with an alias) and column expressions, builds the query as a
sqlglot tree from the catalog's measures and returns a pandas DataFrame, one block of rows per group
of ``by``.
"""

from __future__ import annotations

import contextlib
import inspect
import math

import duckdb
import pandas as pd
import sqlglot
from sqlglot import exp

from uneven.compiler import compile_sql
from uneven.compiler import sqlx as s
from uneven.compiler.context import CompileOptions
from uneven.engine.columns import DuckDBSchema
from uneven.engine.adapters import Adapter
from uneven.engine.runner import execute_df
from uneven.engine.session import session as engine_session
from uneven.errors import MeasureArgumentError, SqlParseError, UnevenError
from uneven.compiler.emit import to_sql


def _parse(text: str, what: str, function: str) -> exp.Expression:
    if not isinstance(text, str) or not text.strip():
        raise MeasureArgumentError(f"{function}: {what} must be a column name or SQL expression, got {text!r}")
    try:
        return sqlglot.parse_one(text, read="duckdb")
    except sqlglot.errors.ParseError as e:
        raise SqlParseError(f"{function}: cannot read the {what} {text!r}: {str(e).splitlines()[0]}") from None


def _relation(text: str, function: str) -> exp.From:
    try:
        return exp.select("*").from_(text, dialect="duckdb").args["from_"]
    except (sqlglot.errors.ParseError, TypeError, ValueError):
        if isinstance(text, str) and text.strip() and not any(c.isspace() for c in text):
            # a bare file path (/data/survey.parquet): a quoted name, which DuckDB reads as the file
            return exp.From(this=exp.Table(this=exp.to_identifier(text, quoted=True)))
        raise SqlParseError(f"{function}: cannot read the relation {text!r} (a table name, a quoted file "
                            "path, a table function or a parenthesised query with an alias)") from None


class _Spec:
    """The parsed arguments every table shares: relation, group keys, weight."""

    def __init__(self, function: str, relation: str, by, weight: str | None):
        self.function = function
        self.source = _relation(relation, function)
        self.by = [_parse(b, "group key", function) for b in ([by] if isinstance(by, str) else list(by or ()))]
        self.weight = _parse(weight, "weight", function) if weight is not None else None

    def names(self) -> list[str]:
        return [f"_uv_by{i + 1}" for i in range(len(self.by))]

    def select(self, items: list[exp.Expression], present: list[exp.Expression],
               extra_keys: list[exp.Expression] = ()) -> exp.Select:
        """SELECT by…, items FROM relation WHERE every expression in ``present`` (and the weight) is
        not NULL GROUP BY by…, extra_keys."""
        keys = [s.alias(b.copy(), n) for b, n in zip(self.by, self.names())]
        sel = exp.Select(expressions=keys + list(items))
        sel.set("from_", self.source.copy())
        cond = s.and_(*[s.not_null(p.copy()) for p in present + ([self.weight] if self.weight is not None else [])])
        if cond is not None:
            sel.set("where", exp.Where(this=cond))
        group = [b.copy() for b in self.by] + [k.copy() for k in extra_keys]
        if group:
            sel.set("group", exp.Group(expressions=group))
        return sel

    def measure(self, name: str, *args: exp.Expression) -> exp.Expression:
        tail = [self.weight.copy()] if self.weight is not None else []
        return exp.Anonymous(this=name, expressions=[a.copy() for a in args] + tail)

    def wsum(self, value: exp.Expression | None = None) -> exp.Expression:
        w = s.cast_double(self.weight.copy()) if self.weight is not None else s.lit(1.0)
        return s.agg_sum(w if value is None else s.mul(w, s.cast_double(value.copy())))

    def rename(self, df: pd.DataFrame, by_names) -> pd.DataFrame:
        labels = by_names or [b.sql("duckdb") for b in self.by]
        return df.rename(columns=dict(zip(self.names(), labels)))


@contextlib.contextmanager
def session(spec: _Spec, con, frame):
    """A connection for one table's queries (``con`` or a new in-memory one) that also sees the data
    frames the caller holds under the relation's name; yields ``run(select) -> DataFrame``."""
    probe = exp.Select(expressions=[exp.Star()])
    probe.set("from_", spec.source.copy())
    with engine_session(con, to_sql(probe), frame) as connection:
        if isinstance(connection, Adapter):
            raise UnevenError(f"the table functions run on DuckDB; {connection.label} connections are not supported")

        def run(sel: exp.Select) -> pd.DataFrame:
            compiled = compile_sql(to_sql(sel), CompileOptions(pretty=False),
                                   DuckDBSchema(connection, types=False, ties=False))
            return execute_df(connection, compiled)

        yield run


def _by_labels(by) -> list[str]:
    return [by] if isinstance(by, str) else list(by or ())


# ---------------------------------------------------------------------------------------- GE
def decompose(relation: str, x: str, subgroup: str, *, alpha: float = 0.0, weight: str | None = None,
              by=(), con: duckdb.DuckDBPyConnection | None = None) -> pd.DataFrame:
    """GE(α) of ``x`` split into between- and within-subgroup parts, per group of ``by``.

    One row per subgroup (component ``subgroup``: ``group_mean``, ``weight_share`` v (share of the
    group's weight; of its rows when unweighted), ``value_share`` s (share of the group's total of
    ``x``), ``group_ge`` (the subgroup's own GE) and ``ge_term``, its within term v^(1−α)·s^α·GE_g)
    and three summary rows (``within``, ``between``, ``total``: the value in ``ge_term``). Subgroup
    terms add up to ``within``; within + between = total. Columns: docs/structure.md. Rows with a
    NULL value, weight or subgroup are skipped.
    """
    fn = "decompose"
    if not isinstance(alpha, (int, float)) or not math.isfinite(alpha):
        raise MeasureArgumentError(f"{fn}: alpha must be a finite number, got {alpha!r}")
    spec = _Spec(fn, relation, by, weight)
    xv, sg = _parse(x, "value", fn), _parse(subgroup, "subgroup", fn)
    a = s.lit(float(alpha))
    per = spec.select([s.alias(sg.copy(), "subgroup"), s.alias(spec.wsum(), "_uv_wg"), s.alias(spec.wsum(xv), "_uv_tg"),
                       s.alias(spec.measure("ge", xv, a), "ge")], [xv, sg], [sg])
    tot = spec.select([s.alias(spec.measure("ge", xv, a), "total"), s.alias(spec.measure("ge_between", xv, a, sg), "between"),
                       s.alias(spec.measure("ge_within", xv, a, sg), "within")], [xv, sg])
    with session(spec, con, inspect.currentframe().f_back) as run:
        parts, totals = run(per), run(tot)
    keys = spec.names()
    frames = []
    for _, row in totals.iterrows():
        mine = parts
        for k in keys:
            mine = mine[mine[k].isna()] if pd.isna(row[k]) else mine[mine[k] == row[k]]
        W, T = mine["_uv_wg"].sum(), mine["_uv_tg"].sum()
        sub = mine[keys + ["subgroup"]].copy()
        sub.insert(len(keys), "component", "subgroup")
        sub["group_mean"] = mine["_uv_tg"] / mine["_uv_wg"]
        sub["weight_share"] = mine["_uv_wg"] / W
        sub["value_share"] = mine["_uv_tg"] / T if T else float("nan")
        sub["group_ge"] = mine["ge"]
        defined = not pd.isna(row["total"])
        sub["ge_term"] = [_within_term(v, sh, g, alpha) if defined else None
                          for v, sh, g in zip(sub["weight_share"], sub["value_share"], sub["group_ge"])]
        summary = pd.DataFrame([{**{k: row[k] for k in keys}, "component": c, "ge_term": row[c]}
                                for c in ("within", "between", "total")])
        frames += [sub.sort_values("subgroup", kind="stable"), summary]
    out = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=keys + ["component"])
    return spec.rename(out, _by_labels(by))


def _within_term(v: float, share: float, ge: float | None, alpha: float) -> float:
    if share == 0 or ge is None or pd.isna(ge):
        return 0.0  # a subgroup of zeros (α > 0) holds no income: its term is 0
    return v ** (1 - alpha) * share ** alpha * ge


#: Printed by ``uneven compare`` under its table (stderr) and shown in its help.
MANY_COMPARISONS = ("z = difference / se. Comparing many pairs inflates false positives: with no real "
                    "difference, one comparison in twenty still gives |z| > 1.96, so over many groups or pairs "
                    "adjust the threshold (e.g. 5 % divided by the number of comparisons) or read z as a screen.")


# ------------------------------------------------------------------------------ income sources
def gini_sources(relation: str, sources: list[str], *, weight: str | None = None, by=(),
                 con: duckdb.DuckDBPyConnection | None = None) -> pd.DataFrame:
    """Gini of the total of ``sources`` decomposed by source (Lerman and Yitzhaki 1985, cited from memory).

    Per source: ``part_of_total`` S_k (its share of the total), ``own_gini`` G_k,
    ``conc_by_total`` C_k (its concentration ranked by the total, mid-ranks for ties),
    ``corr_with_total`` R_k = C_k / G_k (the Gini correlation), ``gini_points`` S_k·C_k (they add
    up to the Gini of the total), ``part_of_gini`` S_k·C_k/G, and the change in the Gini when the
    source grows by 1% for everyone: ``gini_change_1pct`` 0.01·S_k·(C_k − G) and
    ``gini_pct_change_1pct`` S_k·C_k/G − S_k (in percent of G). A ``total`` row closes each group.
    Columns: docs/structure.md. Rows with a NULL source or weight are skipped.
    """
    fn = "gini_sources"
    if isinstance(sources, str) or len(sources or ()) < 2:
        raise MeasureArgumentError(f"{fn}: give at least two source columns, got {sources!r}")
    spec = _Spec(fn, relation, by, weight)
    cols = [_parse(c, "source", fn) for c in sources]
    total = cols[0].copy()
    for c in cols[1:]:
        total = s.add(total, c.copy())
    items = [s.alias(spec.measure("gini", total), "_uv_g"), s.alias(spec.wsum(total), "_uv_t")]
    for i, c in enumerate(cols):
        items += [s.alias(spec.wsum(c), f"_uv_t{i}"), s.alias(spec.measure("gini", c), f"_uv_g{i}"),
                  s.alias(spec.measure("concentration", c, total), f"_uv_c{i}")]
    with session(spec, con, inspect.currentframe().f_back) as run:
        res = run(spec.select(items, cols))
    keys, rows = spec.names(), []
    for _, r in res.iterrows():
        G, T = r["_uv_g"], r["_uv_t"]
        for i, name in enumerate(sources):
            S = r[f"_uv_t{i}"] / T if T else None
            Gk, Ck = _num(r[f"_uv_g{i}"]), _num(r[f"_uv_c{i}"])
            ok = S is not None and Ck is not None and not pd.isna(G)
            rows.append({**{k: r[k] for k in keys}, "source": name, "part_of_total": S, "own_gini": Gk,
                         "conc_by_total": Ck, "corr_with_total": Ck / Gk if Ck is not None and Gk else None,
                         "gini_points": S * Ck if ok else None,
                         "part_of_gini": S * Ck / G if ok and G else None,
                         "gini_change_1pct": 0.01 * S * (Ck - G) if ok else None,
                         "gini_pct_change_1pct": S * Ck / G - S if ok and G else None})
        rows.append({**{k: r[k] for k in keys}, "source": "total", "part_of_total": 1.0, "own_gini": _num(G),
                     "conc_by_total": _num(G), "corr_with_total": 1.0, "gini_points": _num(G),
                     "part_of_gini": 1.0 if not pd.isna(G) else None})
    return spec.rename(pd.DataFrame(rows), _by_labels(by))


def _num(v):
    return None if v is None or pd.isna(v) else float(v)


# ---------------------------------------------------------------------------- paired comparison
def compare(relation: str, x1: str, x2: str | None = None, *, group: str | None = None, groups=None,
            measure: str = "gini", params=(), se: str | None = None, strata: str | None = None,
            psu: str | None = None, weight: str | None = None, by=(),
            con: duckdb.DuckDBPyConnection | None = None) -> pd.DataFrame:
    """Two forms.

    Two values of the same rows (``compare(rel, "gross", "disposable")``): Gini of each, their
    difference and its standard error accounting for the pairing (linearised Gini per row,
    with-replacement variance of one stratum: a simple random sample or a design whose first-stage
    units are the rows). Rows where either value or the weight is NULL are skipped.

    Two groups of rows (``compare(rel, "income", group="sex", groups=("f", "m"))``): ``measure`` in
    each group, the difference first − second and its standard error, ``se="design"`` (Gini; the
    linearized difference under the design ``strata``/``psu`` shared by both groups, covariance
    included) or ``se="independent"`` (any measure with an ``_se`` form: sqrt(se₁² + se₂²)); see
    ``uneven.compare_groups``. The column ``se_method`` says which was computed.

    ``z`` = difference / se: with many comparisons (many ``by`` groups or pairs), some |z| > 1.96
    turn up by chance alone (one in twenty where there is no difference): see MANY_COMPARISONS."""
    fn = "compare"
    if group is not None or groups is not None:
        if x2 is not None:
            raise MeasureArgumentError(f"{fn}: give either a second value (two values of the same rows) or "
                                       "group= and groups= (two groups of rows), not both")
        if group is None or groups is None:
            raise MeasureArgumentError(f"{fn}: comparing two groups needs both group= (the column) and groups= "
                                       "(its two values)")
        from uneven.compare_groups import compare_groups
        return compare_groups(relation, x1, group, groups, measure=measure, params=params, se=se, weight=weight,
                              strata=strata, psu=psu, by=by, con=con, frame=inspect.currentframe().f_back)
    if x2 is None:
        raise MeasureArgumentError(f"{fn}: give a second value of the same rows, or group= and groups=")
    if measure != "gini" or params or se not in (None, "design") or strata is not None or psu is not None:
        raise MeasureArgumentError(f"{fn}: two values of the same rows are compared by their Gini with the "
                                   "paired SE of one stratum (no measure, params, se, strata or psu options)")
    spec = _Spec(fn, relation, by, weight)
    a, b = _parse(x1, "first value", fn), _parse(x2, "second value", fn)
    items = [s.alias(exp.Count(this=exp.Star()), "rows"), s.alias(spec.measure("gini", a), "gini_1"),
             s.alias(spec.measure("gini", b), "gini_2"), s.alias(spec.measure("gini_diff", a, b), "difference"),
             s.alias(spec.measure("gini_diff_se", a, b), "se")]
    with session(spec, con, inspect.currentframe().f_back) as run:
        out = run(spec.select(items, [a, b]))
    out["z"] = out["difference"] / out["se"].where(out["se"] > 0)
    return spec.rename(out, _by_labels(by))
