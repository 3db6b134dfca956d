"""Find measure calls in a tree, check where they stand, and read their arguments."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TypeGuard

from sqlglot import exp

from uneven import catalog
from uneven.catalog.spec import Measure, PassKind
from uneven.compiler.context import CompileContext, span, text
from uneven.errors import MeasureArgumentError, MeasureUsageError
from uneven.sqltree.constants import ConstantError, evaluate_constant, literal_value


@dataclass
class MeasureCall:
    """One measure call with its arguments read: value, constant parameters, optional trailing column."""

    node: exp.Anonymous
    measure: Measure
    x: exp.Expression
    params: tuple[float, ...]
    trailing: exp.Expression | None
    columns: tuple[exp.Expression, ...] = ()  # further row-level arguments (Param kind "column")
    options: dict[str, exp.Expression] = field(default_factory=dict)
    filter: exp.Expression | None = None  # the condition of ``measure(...) FILTER (WHERE …)``
    strict: bool = False  # an undefined result stops the query with an error naming the group
    settings: dict = field(default_factory=dict)  # named arguments as read by measure.read_options
    key: tuple = ()  # call_key(node), computed once
    pass_override: PassKind | None = None  # set by method="bounded" (compiler/bounded.py)

    def __post_init__(self):
        if not self.key:
            self.key = call_key(self.node)

    @property
    def pass_kind(self) -> PassKind:
        if self.pass_override:
            return PassKind(self.pass_override)
        return self.measure.pass_for(self.trailing is not None)

    @property
    def pass_inputs(self) -> tuple[exp.Expression, tuple[exp.Expression, ...]]:
        """(the column the pass sorts or groups by, the other column arguments in order)."""
        args = (self.x, *self.columns)
        i = self.measure.sort_arg
        return args[i], args[:i] + args[i + 1:]


def call_key(node: exp.Expression) -> tuple:
    """Identity of a call: name, arguments and FILTER condition (as SQL)."""
    cond = call_filter(node)
    return (node.name.lower(), tuple(a.sql("duckdb") for a in node.expressions),
            cond.sql("duckdb") if cond is not None else None)


def call_filter(node: exp.Expression) -> exp.Expression | None:
    parent = node.parent
    if isinstance(parent, exp.Filter) and node.arg_key == "this":
        return parent.expression.this
    return None


def is_measure(node: exp.Expr) -> TypeGuard[exp.Anonymous]:
    return isinstance(node, exp.Anonymous) and catalog.lookup(node.name) is not None


def is_aggregate(node: exp.Expr) -> bool:
    """An ordinary SQL aggregate call (not a window function, not a measure)."""
    if not isinstance(node, exp.AggFunc):
        return False
    return not (isinstance(node.parent, exp.Window) and node.arg_key == "this")


def find_calls(tree: exp.Expression) -> list[exp.Anonymous]:
    return [n for n in tree.find_all(exp.Anonymous) if is_measure(n)]


_FORBIDDEN_CLAUSES = {
    "where": "WHERE (filter groups with HAVING, or compute the measure in a subquery)",
    "group": "GROUP BY",
    "joins": "a JOIN condition",
    "from_": "FROM",
    "limit": "LIMIT",
    "offset": "OFFSET",
}


def check_position(node: exp.Anonymous, ctx: CompileContext) -> exp.Select:
    """Return the SELECT the call belongs to, or raise if the call stands where it cannot work."""
    name = node.name.lower()
    child: exp.Expr = node
    anc = node.parent
    if isinstance(anc, exp.Filter) and child.arg_key == "this":  # measure(...) FILTER (WHERE …)
        for sub in anc.expression.walk():
            if is_measure(sub) or isinstance(sub, (exp.AggFunc, exp.Window, exp.Select)):
                raise ctx.error(MeasureUsageError, f"{name}(): the FILTER condition must be a row-level "
                                "expression", node, name)
        child, anc = anc, anc.parent
    if isinstance(anc, exp.Window) and child.arg_key == "this":
        raise ctx.error(MeasureUsageError, f"{name}() cannot be used as a window function (… OVER (…)); "
                        "it is an aggregate over each group", node, name)
    while anc is not None and not isinstance(anc, exp.Select):
        outer = (anc.name.lower() if is_measure(anc)
                 else anc.sql_name().lower() if isinstance(anc, exp.AggFunc) else None)
        if outer is not None:
            raise ctx.error(MeasureUsageError, f"{name}() cannot be nested inside {outer}(); "
                            "compute it in a subquery first", node, name)
        child, anc = anc, anc.parent
    if anc is None:
        raise ctx.error(MeasureUsageError, f"{name}() must be used in a SELECT", node, name)
    if child.arg_key in _FORBIDDEN_CLAUSES:
        raise ctx.error(MeasureUsageError, f"{name}() cannot be used in {_FORBIDDEN_CLAUSES[child.arg_key]}",
                        node, name)
    return anc


def read_constant(arg: exp.Expression, what: str, name: str, node: exp.Anonymous, ctx: CompileContext) -> float:
    """The value of a constant parameter as the engine computes it in the read dialect
    (sqltree/constants.py); a refusal names the function, the argument and the offending part."""
    try:
        return evaluate_constant(arg, ctx.options.read)
    except ConstantError as e:
        raise ctx.error(MeasureArgumentError, f"{name}(): {what} {e.reason}", _positioned(e.node, arg, node),
                        name) from None


def _positioned(*nodes: exp.Expression | None) -> exp.Expression | None:
    """The first node whose position sqlglot knows (a bare NULL has none: then its argument or call)."""
    for n in nodes:
        if n is not None and span(n)[0] is not None:
            return n
    return nodes[-1]


def _check_row_level(arg: exp.Expression, what: str, name: str, node, ctx: CompileContext) -> None:
    for sub in arg.walk():
        if is_measure(sub) or isinstance(sub, exp.AggFunc):
            raise ctx.error(MeasureUsageError, f"{name}(): the {what} must be a row-level expression, "
                            f"not an aggregate ({text(sub)})", node, name)
        if isinstance(sub, (exp.Window, exp.Subquery, exp.Select)):
            raise ctx.error(MeasureUsageError, f"{name}(): the {what} cannot contain a window function or "
                            "a subquery; compute it in a subquery first", node, name)
        if isinstance(sub, exp.Star):
            raise ctx.error(MeasureArgumentError, f"{name}(): the {what} cannot be *", node, name)


def read_call(node: exp.Anonymous, ctx: CompileContext) -> MeasureCall:
    """Read and check a call's arguments against its catalog entry (errors in the order written:
    the argument list, the named arguments, the count, the value, the parameters, the trailing
    argument, then the options' values)."""
    measure = catalog.lookup(node.name)
    assert measure is not None  # find_calls gives measure calls only
    positional, options = _split_arguments(node, measure, ctx)
    need = _check_count(node, measure, positional, ctx)
    x = positional[0]
    _check_row_level(x, "value", measure.name, node, ctx)
    params, columns = _read_params(node, measure, positional[1:need], ctx)
    trailing = positional[need] if len(positional) > need else None
    if trailing is not None:
        _check_trailing(node, measure, trailing, ctx)
    strict = _read_strict(node, measure.name, options, ctx)
    settings = _read_settings(node, measure, options, ctx)
    cond = call_filter(node)
    return MeasureCall(node=node, measure=measure, x=x, params=tuple(params), trailing=trailing,
                       columns=tuple(columns), options=options,
                       filter=cond.copy() if cond is not None else None, strict=strict, settings=settings)


def _split_arguments(node: exp.Anonymous, measure: Measure, ctx: CompileContext) -> tuple[list, dict]:
    """(positional arguments, named arguments by lower-case name), each named one known to the measure."""
    name = measure.name
    positional, options = [], {}
    for arg in node.expressions:
        if isinstance(arg, (exp.Distinct, exp.Order)):
            what = "DISTINCT" if isinstance(arg, exp.Distinct) else "ORDER BY"
            raise ctx.error(MeasureArgumentError, f"{name}() does not take {what} inside its arguments "
                            "(the measure orders the values itself)", node, name)
        if type(arg) in (exp.PropertyEQ, exp.Kwarg):
            options[arg.this.name.lower()] = arg.expression
        else:
            if options:
                raise ctx.error(MeasureArgumentError, f"{name}(): positional arguments must come before "
                                "named ones", node, name)
            positional.append(arg)
    for opt in options:
        if opt not in measure.options:
            allowed = ", ".join(measure.options) or "none"
            raise ctx.error(MeasureArgumentError, f"{name}(): unknown named argument '{opt}' "
                            f"(allowed: {allowed})", node, name)
    return positional, options


def _check_count(node: exp.Anonymous, measure: Measure, positional: list, ctx: CompileContext) -> int:
    """The number of arguments before the optional trailing one (value and parameters)."""
    need = 1 + len(measure.params)
    most = need + (1 if measure.trailing else 0)
    if not need <= len(positional) <= most:
        expected = str(need) if need == most else f"{need} or {most}"
        raise ctx.error(MeasureArgumentError, f"{measure.name}() takes {expected} arguments: {measure.signature}; "
                        f"got {len(positional)}", node, measure.name)
    return need


def _read_params(node: exp.Anonymous, measure: Measure, args: list, ctx: CompileContext) -> tuple[list, list]:
    """(the constant parameters' values, the column arguments), each checked against its Param."""
    name = measure.name
    params, columns = [], []
    for spec, arg in zip(measure.params, args):
        if spec.kind == "column":
            _check_row_level(arg, spec.name, name, node, ctx)
            if isinstance(arg, exp.Null):
                raise ctx.error(MeasureArgumentError, f"{name}(): {spec.name} cannot be NULL", node, name)
            columns.append(arg)
            continue
        value = read_constant(arg, spec.name, name, node, ctx)
        problem = spec.check(value)
        if problem is None and spec.kind == "count" and measure.max_count and value > measure.max_count:
            problem = f"{spec.name} must be at most {measure.max_count}, got {value:g}"
        if problem:
            if literal_value(arg) is None:  # an expression: say what it evaluated from
                problem += f" (the value of {text(arg)})"
            raise ctx.error(MeasureArgumentError, f"{name}(): {problem}", node, name)
        params.append(value)
    problem = measure.check(tuple(params)) if measure.check else None
    if problem:
        raise ctx.error(MeasureArgumentError, f"{name}(): {problem}", node, name)
    return params, columns


def _check_trailing(node: exp.Anonymous, measure: Measure, trailing: exp.Expression, ctx: CompileContext) -> None:
    _check_row_level(trailing, measure.trailing or "trailing argument", measure.name, node, ctx)
    if isinstance(trailing, exp.Literal) and measure.trailing == "weight" and not trailing.is_string:
        pass  # a constant weight is allowed and acts like no weight
    elif isinstance(trailing, exp.Null):
        raise ctx.error(MeasureArgumentError, f"{measure.name}(): the {measure.trailing} cannot be NULL", node,
                        measure.name)


def _read_strict(node: exp.Anonymous, name: str, options: dict, ctx: CompileContext) -> bool:
    if "strict" not in options:
        return ctx.options.strict
    flag = options["strict"]
    if not isinstance(flag, exp.Boolean):
        raise ctx.error(MeasureArgumentError, f"{name}(): strict must be true or false, got {text(flag)}", node, name)
    return bool(flag.this)


def _read_settings(node: exp.Anonymous, measure: Measure, options: dict, ctx: CompileContext) -> dict:
    """The named arguments as the measure reads them (read_options), or {}."""
    if measure.read_options is None:
        return {}
    try:
        return measure.read_options(options, read=ctx.options.read)
    except ConstantError as e:
        raise ctx.error(MeasureArgumentError, f"{measure.name}(): {e}", _positioned(e.node, node),
                        measure.name) from None
    except ValueError as e:
        raise ctx.error(MeasureArgumentError, f"{measure.name}(): {e}", node, measure.name) from None
