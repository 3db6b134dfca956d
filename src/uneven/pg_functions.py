"""Measures as aggregates registered in PostgreSQL: ``install(pg_connection)``. Gini here; the moment
measures in pg_moments.py; the cut measures (shares, palma, quantiles) in pg_cuts.py.

    SELECT province, gini(income, weight ORDER BY income) FROM survey GROUP BY province;
    SELECT gini(income ORDER BY income) FROM survey;

The choice (docs/registered_functions.md has the measurements): an ordinary aggregate whose input
PostgreSQL sorts per group because the call says ``ORDER BY x``. PostgreSQL's sort spills to disk
past ``work_mem``, so a group of any size fits. An ordered-set form (``WITHIN GROUP (ORDER BY x)``)
would read better, but PostgreSQL leaves the sorting of an ordered-set aggregate's input to the
aggregate itself: written in SQL it would collect every value of a group into an array in memory.
The state function checks the order (a value below the previous one stops the query with a message
saying to write ``ORDER BY x``), so a call without it never gives a wrong number.

State and final functions are SQL-language functions over a ``double precision[]`` state
[rows, m, C, Tc, A, last x]: m is the group's smallest value (the first in order), d = x − m, and
for the sorted rows C = Σw, Tc = Σw·d, A = Σ w·d·(2C − w) (C after the row). Since
Σ w·(2C − w) = W² the shift by m cancels: Gini = Σ w·x·(2C − w − W) / (W·T) = (A − W·Tc) / (W·T),
T = Tc + m·W (DESIGN.md's formula; centring keeps it exact when values are large and close).
Rows with a NULL value or weight are skipped (strict state functions), weight 0 changes nothing, a
negative weight or a NaN/infinite value stops the query (the failing cast the compiled SQL uses on
PostgreSQL), an empty group or a total ≤ 0 gives NULL.

What it creates is recorded in ``_uv_functions`` (name, kind, measure) of the current schema;
``uninstall`` drops exactly that. A function of the same name that uneven did not create is left
alone and the install refused (``FunctionConflictError``) unless ``replace=True``.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.errors import ExecutionError, UnevenError
from uneven.pg_build import fail as _fail
from uneven.pg_build import n as _n
from uneven.pg_build import state as _state

REGISTRY = "_uv_functions"

INITIAL = "{0,0,0,0,0,0}"  # rows, m, C, Tc, A, last x


def step_body(weighted: bool) -> exp.Select:
    """SELECT <the next state> for one row (x, w); w = 1 when unweighted."""
    x = exp.column("x")
    w = exp.column("w") if weighted else _n(1)
    first = exp.EQ(this=_state(1), expression=_n(0))
    m = exp.Case(ifs=[exp.If(this=first, true=x.copy())], default=_state(2))
    d = exp.Paren(this=exp.Sub(this=x.copy(), expression=m))
    c = exp.Paren(this=exp.Add(this=_state(3), expression=w.copy()))
    new = exp.Array(expressions=[
        exp.Add(this=_state(1), expression=_n(1)),
        m.copy(),
        c.copy(),
        exp.Add(this=_state(4), expression=exp.Mul(this=w.copy(), expression=d.copy())),
        exp.Add(this=_state(5), expression=exp.Mul(this=exp.Mul(this=w.copy(), expression=d.copy()),
                                                    expression=exp.Paren(this=exp.Sub(
                                                        this=exp.Mul(this=_n(2), expression=c.copy()),
                                                        expression=w.copy())))),
        x.copy(),
    ])
    ifs = [exp.If(this=exp.NEQ(this=exp.Mul(this=x.copy(), expression=_n(0)), expression=_n(0)),
                  true=_fail("NaN or infinite value in the value argument of gini()"))]
    if weighted:
        ifs += [exp.If(this=exp.LT(this=w.copy(), expression=_n(0)),
                       true=_fail("negative weight in the weight argument of gini()")),
                exp.If(this=exp.NEQ(this=exp.Mul(this=w.copy(), expression=_n(0)), expression=_n(0)),
                       true=_fail("NaN or infinite weight in the weight argument of gini()")),
                exp.If(this=exp.EQ(this=w.copy(), expression=_n(0)), true=exp.column("s"))]
    ifs.append(exp.If(this=exp.and_(exp.GT(this=_state(1), expression=_n(0)),
                                    exp.LT(this=x.copy(), expression=_state(6))),
                      true=_fail("gini() received its rows out of order: write gini(x ORDER BY x) or "
                                 "gini(x, w ORDER BY x)")))
    return exp.select(exp.Case(ifs=ifs, default=new))


def final_body() -> exp.Select:
    """SELECT Gini from the state: (A − W·Tc) / (W·T), NULL when empty, T ≤ 0 or not finite."""
    W, Tc, A, m = _state(3), _state(4), _state(5), _state(2)
    T = exp.Paren(this=exp.Add(this=Tc.copy(), expression=exp.Mul(this=m.copy(), expression=W.copy())))
    g = exp.Div(this=exp.Paren(this=exp.Sub(this=A, expression=exp.Mul(this=W.copy(), expression=Tc))),
                expression=exp.Paren(this=exp.Mul(this=W.copy(), expression=T.copy())))
    finite = exp.LT(this=exp.Abs(this=g.copy()), expression=exp.Literal.number("1e300"))
    return exp.select(exp.Case(ifs=[exp.If(this=exp.or_(exp.EQ(this=_state(1), expression=_n(0)),
                                                        exp.LTE(this=T, expression=_n(0))), true=exp.Null())],
                               default=exp.Case(ifs=[exp.If(this=finite, true=g)], default=exp.Null())))


def _gini_definitions(sql) -> list[tuple[str, str, str, object]]:
    out = []
    for weighted, args, step in ((True, "x double precision, w double precision", "_uv_gini_step_w"),
                                 (False, "x double precision", "_uv_gini_step")):
        body = to_sql(step_body(weighted), "postgres")
        out.append((step, "helper", "gini", sql.SQL(
            "CREATE FUNCTION {}(s double precision[], " + args + ") RETURNS double precision[] "
            "LANGUAGE sql IMMUTABLE STRICT PARALLEL SAFE AS {}").format(sql.Identifier(step), sql.Literal(body))))
    out.append(("_uv_gini_final", "helper", "gini", sql.SQL(
        "CREATE FUNCTION {}(s double precision[]) RETURNS double precision LANGUAGE sql IMMUTABLE STRICT "
        "PARALLEL SAFE AS {}").format(sql.Identifier("_uv_gini_final"), sql.Literal(to_sql(final_body(), "postgres")))))
    for step, types in (("_uv_gini_step_w", "double precision, double precision"),
                        ("_uv_gini_step", "double precision")):
        out.append(("gini", "aggregate", "gini", sql.SQL(
            "CREATE AGGREGATE {}(" + types + ") (SFUNC = {}, STYPE = double precision[], "
            "FINALFUNC = {}, INITCOND = {})").format(sql.Identifier("gini"), sql.Identifier(step),
                                                     sql.Identifier("_uv_gini_final"), sql.Literal(INITIAL))))
    return out


def _moment_definitions(sql, measure: str) -> list[tuple[str, str, str, object]]:
    from uneven import pg_moments as M
    final = f"_uv_{measure}_final"
    out = []
    for step, args, weighted in M.forms(measure):
        arglist = ", ".join(f"{a} double precision" for a in args)
        out.append((step, "helper", measure, sql.SQL(
            "CREATE FUNCTION {}(s double precision[], " + arglist + ") RETURNS double precision[] "
            "LANGUAGE plpgsql IMMUTABLE STRICT PARALLEL SAFE AS {}").format(
                sql.Identifier(step), sql.Literal(M.step_source(measure, weighted)))))
    out.append((final, "helper", measure, sql.SQL(
        "CREATE FUNCTION {}(s double precision[]) RETURNS double precision LANGUAGE sql IMMUTABLE STRICT "
        "PARALLEL SAFE AS {}").format(sql.Identifier(final), sql.Literal(to_sql(M.final_body(measure), "postgres")))))
    initial = "{" + ",".join(["0"] * M.SIZE) + "}"
    for step, args, _ in M.forms(measure):
        types = ", ".join(["double precision"] * len(args))
        out.append((measure, "aggregate", measure, sql.SQL(
            "CREATE AGGREGATE {}(" + types + ") (SFUNC = {}, STYPE = double precision[], "
            "FINALFUNC = {}, INITCOND = {})").format(sql.Identifier(measure), sql.Identifier(step),
                                                     sql.Identifier(final), sql.Literal(initial))))
    return out


def _cut_definitions(sql, measure: str) -> list[tuple[str, str, str, object]]:
    """The final functions and the two ordered-set aggregates of a cut measure (pg_cuts.py): ORDER BY x
    keeps a double precision[], ORDER BY (x, w) a _uv_point[]; PostgreSQL's array_append grows either."""
    from uneven import pg_cuts as K
    params = ", ".join(f"{p} double precision" for p in K.CUTS[measure])
    direct = ", ".join("double precision" for _ in K.CUTS[measure])
    out = []
    for (final, weighted) in K.forms(measure):
        state = sql.Identifier(K.POINT) if weighted else sql.SQL("double precision")
        out.append((final, "helper", measure, sql.SQL(
            "CREATE FUNCTION {}(s {}[]" + (", " + params if params else "") + ") RETURNS double precision "
            "LANGUAGE plpgsql IMMUTABLE PARALLEL SAFE AS {}").format(
                sql.Identifier(final), state, sql.Literal(K.final_source(measure, weighted)))))
    for (final, weighted) in K.forms(measure):
        state = sql.Identifier(K.POINT) if weighted else sql.SQL("double precision")
        out.append((measure, "aggregate", measure, sql.SQL(
            "CREATE AGGREGATE {}(" + direct + " ORDER BY {}) (SFUNC = pg_catalog.array_append, STYPE = {}[], "
            "FINALFUNC = {}, INITCOND = {})").format(sql.Identifier(measure), state, state,
                                                     sql.Identifier(final), sql.Literal("{}"))))
    return out


def _point_definition(sql) -> tuple[str, str, str, object]:
    from uneven import pg_cuts as K
    return (K.POINT, "type", "cut", sql.SQL("CREATE TYPE {} AS (x double precision, w double precision)").format(
        sql.Identifier(K.POINT)))


MOMENTS = ("theil", "mld", "ge", "atkinson", "cv", "hhi")
CUT_MEASURES = ("lorenz", "bottom_share", "top_share", "palma", "s80s20", "quantile_w", "percentile_ratio",
                "generalized_lorenz", "hoover")
MEASURES = ("gini",) + MOMENTS + CUT_MEASURES


def definitions(measures=None) -> list[tuple[str, str, str, object]]:
    """(name, kind, measure, statement) in creation order, as psycopg.sql compositions (PostgreSQL's
    CREATE FUNCTION and CREATE AGGREGATE are not in sqlglot's grammar: the bodies are sqlglot trees,
    generated for PostgreSQL; names are ours, quoted as identifiers; no user text is spliced)."""
    from psycopg import sql
    out = []
    chosen = measures or MEASURES
    if any(m in CUT_MEASURES for m in chosen):
        out.append(_point_definition(sql))
    for measure in chosen:
        if measure == "gini":
            out += _gini_definitions(sql)
        elif measure in CUT_MEASURES:
            out += _cut_definitions(sql, measure)
        else:
            out += _moment_definitions(sql, measure)
    return out


class FunctionConflictError(UnevenError):
    """A function of the same name exists in the database and was not created by uneven."""


def _registry_exists(cur) -> bool:
    cur.execute("SELECT to_regclass(%s) IS NOT NULL", (REGISTRY,))
    return bool(cur.fetchone()[0])


def installed(con) -> list[tuple[str, str, str | None]]:
    """(name, kind, measure) of every function uneven recorded in the current schema."""
    with con.cursor() as cur:
        if not _registry_exists(cur):
            return []
        cur.execute(to_sql(exp.select("name", "kind", "measure").from_(REGISTRY).order_by("name", "kind"), "postgres"))
        return [tuple(r) for r in cur.fetchall()]


def install(con, *, replace: bool = False, measures: list[str] | None = None) -> list[str]:
    """Create the aggregates (gini(x[, w] ORDER BY x), the moment measures of pg_moments.py and the cut
    measures of pg_cuts.py) in the
    PostgreSQL database of ``con`` (psycopg 3); ``measures`` limits them (default: all of MEASURES).
    Returns the names created. Runs in one transaction: all or nothing."""
    import psycopg
    from psycopg import sql
    chosen = None
    if measures is not None:
        unknown = [m for m in measures if m.lower() not in MEASURES]
        if unknown:
            raise UnevenError(f"install(): {unknown[0]!r} is not registered on PostgreSQL; the registered measures are "
                              f"{', '.join(MEASURES)} (the others run through uneven.query(sql, con=…))")
        chosen = [m.lower() for m in measures]
    defs = definitions(chosen)
    names = sorted({n for n, _, _, _ in defs})
    ours = {r[0] for r in installed(con)}
    with con.cursor() as cur:
        cur.execute("SELECT DISTINCT proname FROM pg_proc WHERE pronamespace = current_schema()::regnamespace "
                    "AND proname = ANY(%s)", (names,))
        clashes = sorted(r[0] for r in cur.fetchall() if r[0] not in ours)
    if clashes and not replace:
        raise FunctionConflictError(f"install(): the database already has function(s) {', '.join(clashes)} that uneven "
                                    "did not create; drop or rename them, or call install(con, replace=True)")
    try:
        with con.transaction():
            with con.cursor() as cur:
                _drop(cur, [(n, k) for n, k, _, _ in defs] + [(c, "any") for c in clashes])
                cur.execute(sql.SQL("CREATE TABLE IF NOT EXISTS {} (name text, kind text, measure text)").format(
                    sql.Identifier(REGISTRY)))
                for name, kind, measure, statement in defs:
                    if kind != "type" or not _type_exists(cur, name):  # a type is kept: others may use it
                        cur.execute(statement)
                    cur.execute(sql.SQL("DELETE FROM {} WHERE name = %s AND kind = %s").format(
                        sql.Identifier(REGISTRY)), (name, kind))
                    cur.execute(sql.SQL("INSERT INTO {} VALUES (%s, %s, %s)").format(sql.Identifier(REGISTRY)),
                                (name, kind, measure))
    except psycopg.Error as e:
        raise ExecutionError(f"install(): PostgreSQL refused to create the functions: "
                             f"{str(e).strip().splitlines()[0]}") from None
    return names


def _type_exists(cur, name: str) -> bool:
    cur.execute("SELECT 1 FROM pg_type WHERE typname = %s AND typnamespace = current_schema()::regnamespace", (name,))
    return cur.fetchone() is not None


def _drop(cur, items) -> list[str]:
    """Drop every function or aggregate of these names in the current schema (all argument lists);
    types are left to uninstall (an install of some measures keeps the point type the others use)."""
    from psycopg import sql
    done = []
    for name in dict.fromkeys(n for n, k in reversed(items) if k != "type"):
        cur.execute("SELECT p.oid::regprocedure::text, p.prokind FROM pg_proc p WHERE p.proname = %s "
                    "AND p.pronamespace = current_schema()::regnamespace", (name,))
        for signature, kind in cur.fetchall():
            what = "AGGREGATE" if kind == "a" else "FUNCTION"
            # the signature is PostgreSQL's own text for an existing function (regprocedure output)
            cur.execute(sql.SQL("DROP " + what + " IF EXISTS {} CASCADE").format(sql.SQL(signature)))
        done.append(name)
    return done


def uninstall(con) -> list[str]:
    """Drop exactly what uneven recorded as created (and its record table)."""
    from psycopg import sql
    recorded = installed(con)
    with con.transaction():
        with con.cursor() as cur:
            done = _drop(cur, [(n, k) for n, k, _ in recorded])
            for name in sorted({n for n, k, _ in recorded if k == "type"}):
                cur.execute(sql.SQL("DROP TYPE IF EXISTS {}").format(sql.Identifier(name)))
                done.append(name)
            cur.execute(sql.SQL("DROP TABLE IF EXISTS {}").format(sql.Identifier(REGISTRY)))
    return done
