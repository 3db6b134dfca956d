"""The cut measures as ordered-set aggregates registered in PostgreSQL (installed by uneven/pg_functions.py):

    SELECT province,
           top_share(0.1) WITHIN GROUP (ORDER BY (income, weight)),
           bottom_share(0.4) WITHIN GROUP (ORDER BY income),
           palma() WITHIN GROUP (ORDER BY (income, weight)),
           quantile_w(0.5) WITHIN GROUP (ORDER BY (income, weight)),
           percentile_ratio(0.9, 0.1) WITHIN GROUP (ORDER BY income)
      FROM survey GROUP BY province;

These measures read the Lorenz curve or the weighted CDF at a cut (p·W), so the group's total weight W
must be known before the cut is found: the rows are kept until the group ends. Growing an array in a
SQL or PL/pgSQL state function copies it on every row (PostgreSQL flattens the state the function
returns), which is quadratic: 36 s for 40,000 rows. PostgreSQL's own ``array_append``, used directly
as the state function, grows the array in place (linear): it takes one element, so a weighted row is
one composite point ``(x, w)`` of the type ``_uv_point``, and the parameters are the direct
arguments of an ordered-set aggregate (as in PostgreSQL's ``percentile_cont(0.5) WITHIN GROUP (ORDER
BY x)``), given to the final function once per group. PostgreSQL does not sort an ordered-set
aggregate's input for it: the final function sorts the kept points (``unnest … ORDER BY``), so a
group must fit in memory (about 40 bytes a weighted row), unlike gini(x ORDER BY x), whose sort spills.

The final function (PL/pgSQL; its query is a sqlglot tree generated for PostgreSQL) computes what the
compiled query computes (catalog/ordered.py, DESIGN.md's contract): running weight C over the rows
sorted by x, W = ΣC's last, T = Σw·x; L(p) = Σ x·clamp(p·W − (C − w), 0, w) / T; top share
Σ x·clamp(C − (1 − p)·W, 0, w) / T; palma = top(0.1)/bottom(0.4), s80s20 = top(0.2)/bottom(0.2), NULL
when the bottom share is 0; quantile_w(p) = the smallest x with C/W ≥ p, else the largest x;
percentile_ratio(hi, lo) = Q(hi)/Q(lo), NULL when Q(lo) = 0; generalized_lorenz(p) = μ·L(p);
hoover = ½ Σ w·|x − μ| / T (it needs μ before the sum: kept points too). Ties give the same value in
any order.
Input policy: rows with a NULL value or weight are skipped, weight 0 changes nothing, a negative
weight or a NaN/infinite value or weight stops the query (``uneven: negative weight …``, the compiled
SQL's message class), a parameter outside [0, 1] stops it too; an empty group or a total ≤ 0 is NULL.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.sqltree import build as s

POINT = "_uv_point"
# measure → its parameters (the direct arguments of the ordered-set aggregate)
CUTS: dict[str, tuple[str, ...]] = {
    "lorenz": ("p",), "bottom_share": ("p",), "top_share": ("p",), "palma": (), "s80s20": (),
    "quantile_w": ("p",), "percentile_ratio": ("hi", "lo"), "generalized_lorenz": ("p",), "hoover": (),
}
NAMES = tuple(CUTS)

X, W, C, WT, TT = (exp.column(n) for n in ("x", "w", "_uv_c", "_uv_wt", "_uv_tt"))


def _n(v) -> exp.Expression:
    return exp.Literal.number(v)


def ranked_rows(weighted: bool) -> exp.Select:
    """The kept rows with a value and a weight > 0, their running weight C (sorted by x) and the total W."""
    rows = exp.Unnest(expressions=[exp.column("s")],
                      alias=exp.TableAlias(this=exp.to_identifier("_uv_u"),
                                           columns=[] if weighted else [exp.to_identifier("x")]))
    w = W.copy() if weighted else exp.cast(_n(1), exp.DataType.build("double"))
    order = exp.Order(expressions=[exp.Ordered(this=X.copy())])
    frame = exp.WindowSpec(kind="ROWS", start="UNBOUNDED", start_side="PRECEDING", end="CURRENT ROW")
    running = exp.Window(this=exp.Sum(this=w.copy()), order=order, spec=frame)
    total = exp.Window(this=exp.Sum(this=w.copy()))
    value_total = exp.Window(this=exp.Sum(this=exp.Mul(this=w.copy(), expression=X.copy())))
    keep: list[exp.Expression] = [exp.Not(this=exp.Is(this=X.copy(), expression=exp.Null()))]
    if weighted:
        keep += [exp.Not(this=exp.Is(this=W.copy(), expression=exp.Null())), exp.GT(this=W.copy(), expression=_n(0))]
    return (exp.select(X.copy(), exp.alias_(w, "w"), exp.alias_(running, "_uv_c"), exp.alias_(total, "_uv_wt"),
                       exp.alias_(value_total, "_uv_tt"))
            .from_(rows).where(exp.and_(*keep)))


def _mass(room: exp.Expression) -> exp.Expression:
    """Σ x·clamp(room, 0, w)."""
    return exp.Sum(this=exp.Mul(this=X.copy(), expression=s.clamp(room, _n(0.0), W.copy())))


def _total() -> exp.Expression:
    return exp.Sum(this=exp.Mul(this=W.copy(), expression=X.copy()))


def _share(mass: exp.Expression) -> exp.Expression:
    return exp.Case(ifs=[exp.If(this=exp.GT(this=_total(), expression=_n(0.0)),
                                true=exp.Div(this=mass, expression=exp.Paren(this=_total())))])


def bottom_at(p: exp.Expression) -> exp.Expression:
    """L(p): Σ x·clamp(p·W − (C − w), 0, w) / T."""
    room = exp.Sub(this=exp.Mul(this=p, expression=WT.copy()),
                   expression=exp.Paren(this=exp.Sub(this=C.copy(), expression=W.copy())))
    return _share(_mass(room))


def top_at(p: exp.Expression) -> exp.Expression:
    """1 − L(1 − p): Σ x·clamp(C − (1 − p)·W, 0, w) / T."""
    room = exp.Sub(this=C.copy(), expression=exp.Mul(this=exp.Paren(this=exp.Sub(this=_n(1.0), expression=p)),
                                                       expression=WT.copy()))
    return _share(_mass(room))


def quantile_at(p: exp.Expression) -> exp.Expression:
    """The smallest x with C/W ≥ p; the largest x when rounding leaves C_n/W a hair below p."""
    reached = exp.GTE(this=exp.Div(this=C.copy(), expression=WT.copy()), expression=p)
    return exp.Coalesce(this=exp.Min(this=exp.Case(ifs=[exp.If(this=reached, true=X.copy())])),
                        expressions=[exp.Max(this=X.copy())])


def _ratio(num: exp.Expression, den: exp.Expression) -> exp.Expression:
    return exp.Case(ifs=[exp.If(this=exp.NEQ(this=den, expression=_n(0.0)),
                                true=exp.Div(this=num, expression=exp.Paren(this=den.copy())))])


def hoover() -> exp.Expression:
    """½ Σ w·|x − μ| / T (= ½ Σ |w·x/T − w/W|), μ = T/W; NULL when T ≤ 0 (catalog/moment.py's form)."""
    mu = exp.Div(this=TT.copy(), expression=WT.copy())
    spread = exp.Sum(this=exp.Mul(this=W.copy(), expression=exp.Abs(this=exp.Sub(this=X.copy(), expression=mu))))
    return _share(exp.Mul(this=_n(0.5), expression=spread))


def result(measure: str) -> exp.Expression:
    """The measure over the ranked rows, its parameters read as columns p, hi, lo of the final function."""
    p = exp.column("p")
    if measure in ("lorenz", "bottom_share"):
        return bottom_at(p)
    if measure == "top_share":
        return top_at(p)
    if measure == "palma":
        return _ratio(top_at(_n(0.1)), bottom_at(_n(0.4)))
    if measure == "s80s20":
        return _ratio(top_at(_n(0.2)), bottom_at(_n(0.2)))
    if measure == "quantile_w":
        return quantile_at(p)
    if measure == "percentile_ratio":
        return _ratio(quantile_at(exp.column("hi")), quantile_at(exp.column("lo")))
    if measure == "generalized_lorenz":  # μ·L(p) = Σ x·clamp(p·W − (C − w), 0, w) / W
        room = exp.Sub(this=exp.Mul(this=p, expression=WT.copy()),
                       expression=exp.Paren(this=exp.Sub(this=C.copy(), expression=W.copy())))
        return exp.Div(this=_mass(room), expression=exp.Paren(this=exp.Sum(this=W.copy())))
    if measure == "hoover":
        return hoover()
    raise ValueError(measure)


def final_query(measure: str, weighted: bool) -> exp.Select:
    rows = exp.Subquery(this=ranked_rows(weighted), alias=exp.TableAlias(this=exp.to_identifier("_uv_r")))
    return exp.select(result(measure)).from_(rows)


def check_query(weighted: bool) -> exp.Select:
    """One scan of the kept rows for the input policy's refusals: NaN/infinite value, negative weight,
    NaN/infinite weight (NULL values and weights are skipped before the checks)."""
    unnest = exp.Unnest(expressions=[exp.column("s")],
                        alias=exp.TableAlias(this=exp.to_identifier("_uv_u"),
                                             columns=[] if weighted else [exp.to_identifier("x")]))

    def bad(e: exp.Expression) -> exp.Expression:  # e·0 ≠ 0: NaN or ±infinity
        return exp.NEQ(this=exp.Mul(this=e, expression=_n(0)), expression=_n(0))

    items = [exp.func("bool_or", bad(X.copy()))]
    keep: list[exp.Expression] = [exp.Not(this=exp.Is(this=X.copy(), expression=exp.Null()))]
    if weighted:
        items += [exp.func("bool_or", exp.LT(this=W.copy(), expression=_n(0))), exp.func("bool_or", bad(W.copy()))]
        keep.append(exp.Not(this=exp.Is(this=W.copy(), expression=exp.Null())))
    return exp.select(*items).from_(unnest).where(exp.and_(*keep))


def _literal(text: str) -> str:
    return to_sql(exp.Literal.string(text), "postgres")


def final_source(measure: str, weighted: bool) -> str:
    """The PL/pgSQL body of the final function: refuse parameters outside [0, 1] and the rows the input
    policy refuses (RAISE, the compiled SQL's message class), then RETURN the measure. The queries are
    sqlglot trees generated for PostgreSQL; the block around them is fixed text with our names only."""
    checks = []
    for param in CUTS[measure]:
        checks.append(f"IF {param} IS NULL OR NOT ({param} >= 0 AND {param} <= 1) THEN RAISE EXCEPTION USING "
                      f"MESSAGE = {_literal(f'uneven: {measure}(): {param} must be a fraction between 0 and 1')}; "
                      "END IF;")
    messages = [f"NaN or infinite value in the value argument of {measure}()"]
    if weighted:
        messages += [f"negative weight in the weight argument of {measure}()",
                     f"NaN or infinite weight in the weight argument of {measure}()"]
    flags = [f"_uv_f{i}" for i in range(len(messages))]
    checks.append(f"{to_sql(check_query(weighted), 'postgres')} INTO {', '.join(flags)};")  # INTO may end a SELECT
    for flag, message in zip(flags, messages):
        checks.append(f"IF {flag} THEN RAISE EXCEPTION USING MESSAGE = {_literal('uneven: ' + message)}; END IF;")
    declare = " ".join(f"{f} boolean;" for f in flags)
    return (f"DECLARE {declare} BEGIN {' '.join(checks)} "
            f"RETURN ({to_sql(final_query(measure, weighted), 'postgres')}); END")


def forms(measure: str) -> list[tuple[str, bool]]:
    """(final function name, weighted) for the two forms of ``measure``: ORDER BY x and ORDER BY (x, w)."""
    return [(f"_uv_{measure}_final", False), (f"_uv_{measure}_final_w", True)]
