"""The moment measures as aggregates registered in PostgreSQL (installed by uneven/pg_functions.py):

    SELECT province, theil(income, weight), ge(income, 2, weight), atkinson(income, 0.5),
           mld(income), cv(income, weight), hhi(sales)
      FROM survey GROUP BY province;

No ``ORDER BY`` is needed: the state is a fixed handful of sums (streaming, a few numbers per
group), so any group size works. The state functions are PL/pgSQL (step_source says why), the
final functions SQL-language, every expression a sqlglot tree generated for PostgreSQL. State
(``double precision[]``, 1-based as PostgreSQL counts):

    1 n   rows with weight > 0            9  RL = Σ w·r·ln r      (x > 0)
    2 m   the group's first positive x    10 L  = Σ w·ln r        (x > 0)
    3 W   Σ w                             11 P  = Σ w·r^a         (x > 0; a zero adds 0)
    4 T   Σ w·x                           12 Z  weight of rows with x = 0
    5 c   the group's first x             13 N  weight of rows with x < 0
    6 Dc  Σ w·d, d = (x − c)/k            14 a  the exponent (the measure's parameter)
    7 D2  Σ w·d²  (k = |c|, or 1 if c = 0) 15 F  1 when a ratio left the range below (→ NULL)
    8 R1  Σ w·r, r = x/m                  16 p  the parameter as written (checked constant)
                                          17 G  1 when |d| > 1e150 (cv → NULL)

Ratios to the first positive value keep the sums in range and the logs small; the measures follow
from μ/m = R1/W: theil = RL/R1 − ln(R1/W); mld = ln(R1/W) − L/W; ge(α) = ((P/W)·(R1/W)^−α − 1)/(α(α−1))
(α = 0: mld, α = 1: theil); atkinson(ε) = 1 − (P/W)^(1/(1−ε)) / (R1/W) with a = 1 − ε (ε = 1:
1 − exp(L/W)/(R1/W)); cv = sqrt(D2/W − (Dc/W)²)·k/μ; hhi (rows) = 10000·P/R1² with a = 2.
These are plain sums, not the compiled query's centred ones: for values spread less than about 1e-6
of their mean the compiled query keeps more digits (docs/registered_functions.md).

The input policy is the compiled route's: NULL values and weights are skipped, weight 0 changes
nothing, a negative weight or a NaN/infinite value or weight stops the query with the same message
class (``uneven: negative weight …``), a parameter that differs between rows of a group or is out
of range stops it too; a group that is empty, has total ≤ 0 or has values outside the measure's
domain gives NULL. A ratio beyond e^300 (values more than ~1e130 apart) gives NULL, where the
compiled query rescales.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.pg_build import fail, n, state

X = exp.column("x")
NAMES = ("theil", "mld", "ge", "atkinson", "cv", "hhi")
# measure → (parameter name or None, weighted forms?)
SIGNATURES = {"theil": (None, True), "mld": (None, True), "ge": ("alpha", True), "atkinson": ("eps", True),
              "cv": (None, True), "hhi": (None, False)}
SIZE = 17
LIMIT = 300.0  # ln of the largest ratio kept (r ≤ e^300: every product below fits in a double)


def _case(*pairs, default=None) -> exp.Case:
    c = exp.case()
    for cond, value in pairs:
        c = c.when(cond, value)
    return c.else_(default) if default is not None else c


def _eq(a, b) -> exp.EQ:
    return exp.EQ(this=a, expression=b)


def _param_checks(measure: str) -> list[tuple[exp.Expr, exp.Expr]]:
    """(condition, failure) pairs for the parameter p of ``measure`` (the row's value)."""
    p = exp.column("p")
    finite = exp.NEQ(this=p.copy() * n(0), expression=n(0))
    out: list[tuple[exp.Expr, exp.Expr]] = []
    if measure == "ge":
        out.append((finite, fail("ge(): alpha must be a finite number")))
    if measure == "atkinson":
        out.append((exp.or_(finite, p.copy() < n(0)), fail("atkinson(): eps must be a finite number >= 0")))
    if measure in ("ge", "atkinson"):
        out.append((exp.and_(state(1) > n(0), exp.NEQ(this=p.copy(), expression=state(16))),
                    fail(f"{measure}(): the parameter must be a constant, the same for every row of a group")))
    return out


def _exponent(measure: str) -> exp.Expression:
    if measure == "ge":
        return exp.column("p")
    if measure == "atkinson":
        return n(1) - exp.column("p")
    return n(2)


def _layer(inner: exp.Select | None, **columns: exp.Expr) -> exp.Select:
    """The intermediates of one layer (each computed once per row: PostgreSQL repeats a repeated
    subexpression), as SELECT items; step_source assigns them to PL/pgSQL variables."""
    out = exp.select(*[exp.alias_(e, name) for name, e in columns.items()])
    return out.from_(exp.Subquery(this=inner, alias=exp.TableAlias(this=exp.to_identifier("_uv_l")))) if inner else out


def step_body(measure: str, weighted: bool):
    """The intermediates of one row (x[, p][, w]) of ``measure`` as (layer, name, expression) in
    order, and the expression of the next state over them."""
    w = exp.column("w") if weighted else n(1)
    col = exp.column
    first = _layer(None,
                   _uv_m=_case((exp.and_(_eq(state(2), n(0)), X.copy() > n(0)), X.copy()), default=state(2)),
                   _uv_c=_case((_eq(state(1), n(0)), X.copy()), default=state(5)))
    # ln r for x > 0 (no overflow from x/m); 0 otherwise: PostgreSQL raises on ln(0)
    logs = _layer(first, _uv_m=col("_uv_m"), _uv_c=col("_uv_c"),
                  _uv_lr=_case((X.copy() > n(0), exp.Ln(this=X.copy()) - exp.Ln(this=col("_uv_m"))), default=n(0)))
    a = _exponent(measure)
    ranged = _layer(logs, _uv_m=col("_uv_m"), _uv_c=col("_uv_c"), _uv_lr=col("_uv_lr"),
                    _uv_ok=exp.and_(X.copy() > n(0), col("_uv_lr") <= n(LIMIT), col("_uv_lr") >= n(-LIMIT)),
                    _uv_alr=a.copy() * col("_uv_lr"))
    ok, lr, alr, m = col("_uv_ok"), col("_uv_lr"), col("_uv_alr"), col("_uv_m")
    r = _case((ok.copy(), X.copy() / m.copy()), default=n(0))
    power = _case((exp.and_(ok.copy(), alr.copy() <= n(700), alr.copy() >= n(-700)), exp.Exp(this=alr.copy())),
                  default=n(0))
    k = _case((exp.Abs(this=col("_uv_c")) > n(0), exp.Abs(this=col("_uv_c"))), default=n(1))
    d = (X.copy() - col("_uv_c")) / k
    wide = exp.Abs(this=d.copy()) > n(1e150)
    out_of_range = exp.and_(X.copy() > n(0), exp.or_(exp.Not(this=ok.copy()), alr.copy() > n(700)))
    new = exp.Array(expressions=[
        state(1) + n(1),
        m.copy(),
        state(3) + w.copy(),
        state(4) + w.copy() * X.copy(),
        col("_uv_c"),
        state(6) + _case((wide.copy(), n(0)), default=w.copy() * d.copy()),
        state(7) + _case((wide.copy(), n(0)), default=w.copy() * d.copy() * d.copy()),
        state(8) + w.copy() * r.copy(),
        state(9) + _case((ok.copy(), w.copy() * r.copy() * lr.copy()), default=n(0)),
        state(10) + _case((ok.copy(), w.copy() * lr.copy()), default=n(0)),
        state(11) + w.copy() * power,
        state(12) + _case((_eq(X.copy(), n(0)), w.copy()), default=n(0)),
        state(13) + _case((X.copy() < n(0), w.copy()), default=n(0)),
        a.copy(),
        _case((out_of_range, n(1)), default=state(15)),
        exp.column("p") if measure in ("ge", "atkinson") else n(0),
        _case((wide, n(1)), default=state(17)),
    ])
    ifs: list[tuple[exp.Expr, exp.Expr]] = [(exp.NEQ(this=X.copy() * n(0), expression=n(0)),
            fail(f"NaN or infinite value in the value argument of {measure}()"))]
    ifs += _param_checks(measure)
    if weighted:
        ifs += [(w.copy() < n(0), fail(f"negative weight in the weight argument of {measure}()")),
                (exp.NEQ(this=w.copy() * n(0), expression=n(0)),
                 fail(f"NaN or infinite weight in the weight argument of {measure}()")),
                (_eq(w.copy(), n(0)), exp.column("s"))]
    passed_on = lambda item: isinstance(item.this, exp.Column) and item.this.name == item.alias  # noqa: E731
    return [(layer, item.alias, item.this) for layer in (first, logs, ranged) for item in layer.expressions
            if not passed_on(item)], _case(*ifs, default=new)


VARIABLES = {"_uv_m": "double precision", "_uv_c": "double precision", "_uv_lr": "double precision",
             "_uv_ok": "boolean", "_uv_alr": "double precision"}


def step_source(measure: str, weighted: bool) -> str:
    """The PL/pgSQL body of the state function: each intermediate (m, c, ln r, in range, a·ln r) assigned
    once to a variable, then RETURN the next state. The expressions are sqlglot trees generated for
    PostgreSQL; the block around them is fixed text with our variable names only. PL/pgSQL because
    PostgreSQL starts a SQL-language function's executor afresh on every call (its cost grows with
    the body), while PL/pgSQL keeps its compiled expressions: measured 20,000 rows of theil(x, w),
    35.8 s as a SQL function with nested SELECTs and 2.3 s in PL/pgSQL (bench/pg_registered.py)."""
    assignments, result = step_body(measure, weighted)
    declare = " ".join(f"{name} {kind};" for name, kind in VARIABLES.items())
    steps = " ".join(f"{name} := {to_sql(e, 'postgres')};" for _, name, e in assignments)
    return f"DECLARE {declare} BEGIN {steps} RETURN {to_sql(result, 'postgres')}; END"


def _ln(e) -> exp.Expression:
    return exp.Ln(this=e)


def final_body(measure: str) -> exp.Select:
    """SELECT the measure from the state; NULL when empty, total ≤ 0, outside the domain or out of range."""
    W, T, R1, RL, L, P, Z, N, a = (state(i) for i in (3, 4, 8, 9, 10, 11, 12, 13, 14))
    mu_m = R1.copy() / W.copy()  # μ / m
    theil = RL.copy() / R1.copy() - _ln(mu_m.copy())
    mld = _ln(mu_m.copy()) - L.copy() / W.copy()
    negatives, zeros = N.copy() > n(0), Z.copy() > n(0)
    null = [exp.or_(_eq(state(1), n(0)), T.copy() <= n(0),
                    *([] if measure == "cv" else [_eq(state(15), n(1))]))]
    p = state(16)
    if measure == "theil":
        body = _case((negatives, exp.Null()), default=theil)
    elif measure == "mld":
        body = _case((exp.or_(negatives, zeros), exp.Null()), default=mld)
    elif measure == "ge":
        general: exp.Expression = ((exp.Exp(this=_ln(P.copy() / W.copy()) - p.copy() * _ln(mu_m.copy())) - n(1))
                   / (p.copy() * (p.copy() - n(1))))
        body = _case((exp.and_(_eq(p.copy(), n(0)), exp.or_(negatives.copy(), zeros.copy())), exp.Null()),
                     (_eq(p.copy(), n(0)), mld),
                     (negatives.copy(), exp.Null()),
                     (_eq(p.copy(), n(1)), theil),
                     (exp.and_(p.copy() < n(0), zeros.copy()), exp.Null()),
                     default=general)
    elif measure == "atkinson":
        general = n(1) - exp.Exp(this=_ln(P.copy() / W.copy()) / a.copy() - _ln(mu_m.copy()))
        body = _case((negatives, exp.Null()),
                     (exp.and_(p.copy() >= n(1), zeros), exp.Null()),
                     (_eq(p.copy(), n(1)), n(1) - exp.Exp(this=L.copy() / W.copy()) / mu_m.copy()),
                     default=general)
    elif measure == "cv":
        c = state(5)
        k = _case((exp.Abs(this=c.copy()) > n(0), exp.Abs(this=c.copy())), default=n(1))
        mean_k = T.copy() / W.copy() / k  # μ / k
        var = state(7) / W.copy() - (state(6) / W.copy()) * (state(6) / W.copy())
        body = _case((_eq(state(17), n(1)), exp.Null()),
                     default=exp.Sqrt(this=exp.func("greatest", var, n(0))) / mean_k)
    elif measure == "hhi":
        body = _case((negatives, exp.Null()), default=n(10000) * P.copy() / (R1.copy() * R1.copy()))
    else:
        raise ValueError(measure)
    return exp.select(_case((null[0], exp.Null()), default=body))


def forms(measure: str) -> list[tuple[str, list[str], bool]]:
    """(step function name, aggregate argument names, weighted) for each signature of ``measure``."""
    param, weightable = SIGNATURES[measure]
    args = ["x"] + (["p"] if param else [])  # the parameter is p inside the functions
    out = [(f"_uv_{measure}_step", args, False)]
    if weightable:
        out.append((f"_uv_{measure}_step_w", args + ["w"], True))
    return out
