"""An independent way to evaluate a query with measure calls: DuckDB itself does the grouping,
joins, HAVING and ORDER BY, and each measure call becomes a Python function over the group's
rows, collected as a list, that calls the numpy reference (``uneven.reference``).
Constant parameters (``top_share(x, CAST(0.5 AS INTEGER))``) are passed into those functions as
SQL expressions, so DuckDB evaluates them (casts, integer division …): no compiler code reads them.

Compiled results are compared with this on the golden fixtures (and by the fuzzer), so the
compiler's passes, joins and key handling are checked by a path that shares none of them.
"""

from __future__ import annotations

import json

import duckdb
import sqlglot
from sqlglot import exp

from uneven import catalog
from uneven import reference as R

_XW = "STRUCT(x DOUBLE, w DOUBLE)[]"
_XE = "STRUCT(x DOUBLE, e VARCHAR)[]"
_CURVE = "STRUCT(p DOUBLE, lorenz DOUBLE)[]"
# measures with a column argument (ranking variable, subgroup, second value) and/or a survey design:
# a = the column argument as a number and as text, h/c = strata and PSU as text
_XA = "STRUCT(x DOUBLE, w DOUBLE, anum DOUBLE, atxt VARCHAR, h VARCHAR, c VARCHAR)[]"


_WHOLE = ("cr", "lorenz_curve")  # measures whose parameter is a count, passed to the reference as int


def _numbers(name: str, params) -> list:
    return [int(p) for p in params] if name in _WHOLE else list(params)


def _ref_w(name: str, params, rows) -> float | None:
    if not rows:
        return None
    x = [r["x"] for r in rows]
    w = [r["w"] for r in rows]
    ref = R.REFERENCES.get(name) or catalog.lookup(name).reference  # e.g. <m>_se: reference.se
    return ref(x, *_numbers(name, params), w)


def _ref_e(name: str, params, rows) -> float | None:
    if not rows:
        return None
    entity = [r["e"] for r in rows]
    if all(e is None for e in entity):
        entity = None  # no entity argument: every row is its own entity
    return R.REFERENCES[name]([r["x"] for r in rows], *_numbers(name, params), entity)


def _ref_curve(name: str, params, rows):
    value = _ref_w(name, params, rows)
    return None if value is None else [{"p": p, "lorenz": v} for p, v in value]


def _ref_general(name: str, spec: str, numbers, level, rows) -> float | None:
    """A measure with column arguments and/or named options, through the catalog entry's reference:
    reference(value, *params in declared order (columns as arrays), weight, **options)."""
    if not rows:
        return None
    m = catalog.lookup(name)
    spec = json.loads(spec)
    numbers, options = list(numbers), ({"level": level} if spec["level"] else {})
    column = None
    if any(r["atxt"] is not None for r in rows):
        numeric = all(r["anum"] is not None for r in rows)
        column = [r["anum"] if numeric else r["atxt"] for r in rows]
    args = [column if p.kind == "column" else numbers.pop(0) for p in m.params]
    kwargs = dict(options)
    for key in ("strata", "psu"):
        if spec.get(key):
            kwargs[key] = [r["h" if key == "strata" else "c"] for r in rows]
    return m.reference([r["x"] for r in rows], *args, [r["w"] for r in rows], **kwargs)


def _general_rows(x, column, weight, strata, psu, extra):
    """list({x, w, anum, atxt, h, c}) FILTER (WHERE the value, column argument and weight are present)."""
    conds = [c for c in (extra, x, column, weight) if c is not None]
    cond = exp.and_(*[exp.Paren(this=extra.copy())] if extra is not None else [],
                    *[exp.Not(this=exp.Is(this=c.copy(), expression=exp.Null())) for c in conds if c is not extra])

    def field(name, value, kind):
        return exp.PropertyEQ(this=exp.to_identifier(name),
                              expression=exp.cast(value.copy(), kind) if value is not None else exp.cast(exp.Null(), kind))
    w = weight if weight is not None else exp.Literal.number(1)
    an = exp.TryCast(this=column.copy(), to=exp.DataType.build("double")) if column is not None else None
    struct = exp.Struct(expressions=[field("x", x, "double"), field("w", w, "double"), field("anum", an, "double"),
                                     field("atxt", column, "varchar"), field("h", strata, "varchar"),
                                     field("c", psu, "varchar")])
    return exp.Filter(this=exp.Anonymous(this="list", expressions=[struct]), expression=exp.Where(this=cond))


def install_oracle(con: duckdb.DuckDBPyConnection) -> None:
    con.create_function("_uv_ref_general", _ref_general, ["VARCHAR", "VARCHAR", "DOUBLE[]", "DOUBLE", _XA],
                        "DOUBLE", null_handling="special")
    con.create_function("_uv_ref_w", _ref_w, ["VARCHAR", "DOUBLE[]", _XW], "DOUBLE", null_handling="special")
    con.create_function("_uv_ref_e", _ref_e, ["VARCHAR", "DOUBLE[]", _XE], "DOUBLE", null_handling="special")
    con.create_function("_uv_ref_curve", _ref_curve, ["VARCHAR", "DOUBLE[]", _XW], _CURVE,
                        null_handling="special")


def _engine_numbers(args: list[exp.Expression]) -> exp.Expression:
    """The parameter expressions as one DOUBLE[] for DuckDB to evaluate: [CAST((p1) AS DOUBLE), …]."""
    items = [exp.cast(exp.Paren(this=a.copy()), "double") for a in args]
    return exp.cast(exp.Array(expressions=items), "double[]")


def _rows_list(x: exp.Expression, t: exp.Expression | None, field: str,
               extra: exp.Expression | None = None) -> exp.Expression:
    cond = exp.Not(this=exp.Is(this=x.copy(), expression=exp.Null()))
    if extra is not None:
        cond = exp.and_(exp.Paren(this=extra.copy()), cond)
    if t is not None:
        cond = exp.and_(cond, exp.Not(this=exp.Is(this=t.copy(), expression=exp.Null())))
    tval = t.copy() if t is not None else (exp.Null() if field == "e" else exp.Literal.number(1))
    tval = exp.cast(tval, "varchar" if field == "e" else "double")
    struct = exp.Struct(expressions=[
        exp.PropertyEQ(this=exp.to_identifier("x"), expression=exp.cast(x.copy(), "double")),
        exp.PropertyEQ(this=exp.to_identifier(field), expression=tval)])
    return exp.Filter(this=exp.Anonymous(this="list", expressions=[struct]), expression=exp.Where(this=cond))


def oracle_sql(sql: str) -> str:
    """The query with every measure call replaced by a reference-function call."""
    tree = sqlglot.parse_one(sql, read="duckdb")

    def fn(node):
        extra = None
        if isinstance(node, exp.Filter) and isinstance(node.this, exp.Anonymous) and catalog.lookup(node.this.name):
            node, extra = node.this, node.expression.this  # measure(...) FILTER (WHERE extra)
        if not (isinstance(node, exp.Anonymous) and catalog.lookup(node.name)):
            return node
        m = catalog.lookup(node.name)
        named = {a.this.name.lower(): a.expression for a in node.expressions if type(a) in (exp.PropertyEQ, exp.Kwarg)}
        # named options (strict := …) do not change a defined value: the oracle leaves them out
        args = [a for a in node.expressions if type(a) not in (exp.PropertyEQ, exp.Kwarg)]
        nparams = len(m.params)
        if any(p.kind == "column" for p in m.params) or set(named) & {"strata", "psu", "level"}:
            cols = [a for a, p in zip(args[1:], m.params) if p.kind == "column"]
            numbers = [a for a, p in zip(args[1:], m.params) if p.kind != "column"]
            level = exp.cast(exp.Paren(this=named["level"].copy()), "double") if "level" in named else exp.Null()
            spec = {"level": "level" in named, "strata": "strata" in named, "psu": "psu" in named}
            trailing = args[1 + nparams] if len(args) > 1 + nparams else None
            return exp.Anonymous(this="_uv_ref_general", expressions=[
                exp.Literal.string(m.name), exp.Literal.string(json.dumps(spec)), _engine_numbers(numbers), level,
                _general_rows(args[0], cols[0] if cols else None, trailing, named.get("strata"), named.get("psu"),
                              extra)])
        params = args[1:1 + nparams]
        trailing = args[1 + nparams] if len(args) > 1 + nparams else None
        if m.trailing == "entity":
            fname, field = "_uv_ref_e", "e"
        else:
            fname, field = ("_uv_ref_curve" if m.returns == "lorenz_points" else "_uv_ref_w"), "w"
        return exp.Anonymous(this=fname, expressions=[
            exp.Literal.string(m.name), _engine_numbers(params),
            _rows_list(args[0], trailing, field, extra)])

    return tree.transform(fn).sql("duckdb")
