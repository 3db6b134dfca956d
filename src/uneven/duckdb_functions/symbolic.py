"""Measure parameters known only at run time (the arguments of a registered DuckDB macro).

Catalog builds are written for numbers: ``s.lit(1.0 - p)``, ``if alpha == 0``. A :class:`RuntimeParam`
stands for a macro argument: arithmetic on it builds sqlglot trees, and ``s.lit`` turns it into its
expression. A comparison is a branch the build takes on the value: :func:`explore_build` runs the
build once per path of comparison outcomes and joins the results in one CASE, each under the
conditions of its path (e.g. ge: alpha = 0 → mld, alpha = 1 → theil, else the general form).
A parameter that shapes the plan itself (``int(k)``: the points of a Lorenz grid) cannot be a
run-time value: :class:`NeedsConstant` is raised, and the measure has no macro of that form.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.sqltree import build as s


class NeedsConstant(Exception):
    """The build needs the parameter's value while building the plan."""


class _Explorer:
    def __init__(self, prefix: list[bool]):
        self.prefix = prefix
        self.taken: list[tuple[exp.Expression, bool]] = []

    def decide(self, cond: exp.Expression) -> bool:
        i = len(self.taken)
        value = self.prefix[i] if i < len(self.prefix) else True
        self.taken.append((cond, value))
        return value


def _expr(value) -> exp.Expression:
    if isinstance(value, RuntimeParam):
        return value.to_expression()
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return s.lit(float(value))
    raise NeedsConstant(f"cannot combine a run-time parameter with {value!r}")


class RuntimeParam:
    """An expression over macro arguments that builds may use like a number."""

    __hash__ = object.__hash__

    def __init__(self, expression: exp.Expression, explorer: _Explorer):
        self.expression = expression
        self.explorer = explorer

    def to_expression(self) -> exp.Expression:
        return exp.Paren(this=self.expression.copy())

    def _new(self, e: exp.Expression) -> RuntimeParam:
        return RuntimeParam(e, self.explorer)

    def __add__(self, o): return self._new(exp.Add(this=self.to_expression(), expression=_expr(o)))
    def __radd__(self, o): return self._new(exp.Add(this=_expr(o), expression=self.to_expression()))
    def __sub__(self, o): return self._new(exp.Sub(this=self.to_expression(), expression=_expr(o)))
    def __rsub__(self, o): return self._new(exp.Sub(this=_expr(o), expression=self.to_expression()))
    def __mul__(self, o): return self._new(exp.Mul(this=self.to_expression(), expression=_expr(o)))
    def __rmul__(self, o): return self._new(exp.Mul(this=_expr(o), expression=self.to_expression()))
    def __truediv__(self, o): return self._new(exp.Div(this=self.to_expression(), expression=_expr(o)))
    def __rtruediv__(self, o): return self._new(exp.Div(this=_expr(o), expression=self.to_expression()))
    def __neg__(self): return self._new(exp.Neg(this=self.to_expression()))
    def __abs__(self): return self._new(exp.Abs(this=self.expression.copy()))

    def _compare(self, cls, o) -> bool:
        return self.explorer.decide(cls(this=self.to_expression(), expression=_expr(o)))

    def __eq__(self, o): return self._compare(exp.EQ, o)  # noqa: E704
    def __ne__(self, o): return self._compare(exp.NEQ, o)
    def __lt__(self, o): return self._compare(exp.LT, o)
    def __le__(self, o): return self._compare(exp.LTE, o)
    def __gt__(self, o): return self._compare(exp.GT, o)
    def __ge__(self, o): return self._compare(exp.GTE, o)

    def __bool__(self):
        raise NeedsConstant("a run-time parameter has no truth value")

    def __float__(self):
        raise NeedsConstant("a run-time parameter has no value at build time")

    __int__ = __index__ = __float__


def explore_build(build, param_exprs: list[exp.Expression]) -> exp.Expression:
    """``build(params)`` for run-time parameters: one CASE branch per path of comparisons."""
    paths: list[tuple[list[tuple[exp.Expression, bool]], exp.Expression]] = []
    stack: list[list[bool]] = [[]]
    while stack:
        prefix = stack.pop()
        explorer = _Explorer(prefix)
        result = build(tuple(RuntimeParam(e, explorer) for e in param_exprs))
        for i in range(len(prefix), len(explorer.taken)):
            stack.append([v for _, v in explorer.taken[:i]] + [not explorer.taken[i][1]])
        paths.append((explorer.taken, result))
        if len(paths) > 64:
            raise NeedsConstant("too many branches on run-time parameters")
    if len(paths) == 1:
        return paths[0][1]
    # built directly: Case.when() copies the whole CASE at every branch (quadratic in big macros)
    ifs = []
    for taken, result in paths:
        conds = [c if v else exp.Not(this=exp.Paren(this=c)) for c, v in taken]
        ifs.append(exp.If(this=s.and_(*conds), true=result))
    return exp.Case(ifs=ifs)
