"""Scalar functions the compiler expands into plain arithmetic before anything else (so they work in
any clause, inside measure arguments, and on every engine).

equivalised(income, adults, children [, scale]) = income / d, the household's size in equivalent
adults (docs/equivalence.md):

    'oecd_modified' (default)  d = 1 + 0.5·(adults − 1) + 0.3·children   (the modified OECD scale:
                               1 for the first adult, 0.5 per further adult, 0.3 per child;
                               common practice in official statistics, from memory)
    'sqrt'                     d = √(adults + children)
    θ, a number in [0, 1]      d = (adults + children)^θ  (size elasticity: 0 household, 1 per capita)

``scale`` is the fourth argument or the named argument ``scale := …``. NULL where income, adults
or children is NULL, where adults < 1 or children < 0 (a household needs an adult).
"""

from __future__ import annotations

from sqlglot import exp

from uneven.errors import MeasureArgumentError
from uneven.sqltree import build as s
from uneven.sqltree.constants import ConstantError, evaluate_constant

NAME = "equivalised"
SCALES = ("oecd_modified", "sqrt")
SIGNATURE = "equivalised(income, adults, children[, scale := 'oecd_modified' | 'sqrt' | θ in [0, 1]])"


def scale_divisor(adults: exp.Expression, children: exp.Expression, scale) -> exp.Expression:
    """d for a scale read at compile time ('oecd_modified', 'sqrt' or a number θ)."""
    a, c = s.cast_double(adults), s.cast_double(children)
    if scale == "oecd_modified":
        return s.add(s.add(s.lit(1.0), s.mul(s.lit(0.5), s.sub(a, s.lit(1.0)))), s.mul(s.lit(0.3), c))
    size = s.add(a, c)
    if scale == "sqrt":
        return s.sqrt(size)
    return s.power(size, s.lit(float(scale)))


def equivalised_tree(income, adults, children, scale="oecd_modified") -> exp.Expression:
    """CASE WHEN adults ≥ 1 AND children ≥ 0 THEN income / d END (a tree; arguments are copied)."""
    ok = s.and_(s.gte(adults.copy(), s.lit(1)), s.gte(children.copy(), s.lit(0)))
    value = s.div(s.cast_double(income.copy()), scale_divisor(adults.copy(), children.copy(), scale))
    return s.case(ok, value)


def read_scale(node: exp.Expression | None, read: str = "duckdb"):
    """'oecd_modified', 'sqrt' or a float θ in [0, 1]; ValueError otherwise."""
    if node is None:
        return "oecd_modified"
    if isinstance(node, exp.Literal) and node.is_string:
        if node.this.lower() in SCALES:
            return node.this.lower()
        raise ValueError(f"scale must be 'oecd_modified', 'sqrt' or a number between 0 and 1, got '{node.this}'")
    try:
        theta = evaluate_constant(node, read)
    except ConstantError as e:
        raise ValueError(f"scale {e.reason}") from None
    if not 0.0 <= theta <= 1.0:
        raise ValueError(f"scale as a size elasticity must lie between 0 and 1, got {theta:g}")
    return theta


def _is_call(node) -> bool:
    return isinstance(node, exp.Anonymous) and node.name.lower() == NAME


def expand_scalars(tree: exp.Expression, ctx) -> exp.Expression:
    """Every equivalised(…) call replaced by its arithmetic; argument errors name the call."""
    def fn(node):
        if not _is_call(node):
            return node
        positional, named = [], {}
        for arg in node.expressions:
            if type(arg) in (exp.PropertyEQ, exp.Kwarg):
                named[arg.this.name.lower()] = arg.expression
            else:
                positional.append(arg)
        unknown = [k for k in named if k != "scale"]
        if unknown or not 3 <= len(positional) <= 4 or (len(positional) == 4 and named):
            what = f"unknown named argument '{unknown[0]}'" if unknown else f"got {len(positional)} arguments"
            raise ctx.error(MeasureArgumentError, f"{NAME}() takes {SIGNATURE}; {what}", node, NAME)
        for arg in positional[:3]:
            if isinstance(arg, exp.Null) or (isinstance(arg, exp.Literal) and arg.is_string):
                raise ctx.error(MeasureArgumentError, f"{NAME}(): income, adults and children must be numbers, "
                                f"got {arg.sql('duckdb')}", node, NAME)
        try:
            scale = read_scale(positional[3] if len(positional) == 4 else named.get("scale"), ctx.options.read)
        except ValueError as e:
            raise ctx.error(MeasureArgumentError, f"{NAME}(): {e}", node, NAME) from None
        return s.paren(equivalised_tree(*positional[:3], scale))
    return tree.transform(fn, copy=False)


def macro_body(income, adults, children, scale: exp.Expression | None) -> exp.Expression:
    """The installed macro's body: the scale is known only when it runs (a string or a number)."""
    if scale is None:
        return equivalised_tree(income, adults, children)
    name = exp.Cast(this=scale.copy(), to=exp.DataType.build("varchar"))
    theta = exp.TryCast(this=scale.copy(), to=exp.DataType.build("double"))
    ok = s.and_(s.gte(adults.copy(), s.lit(1)), s.gte(children.copy(), s.lit(0)))
    income_d = s.cast_double(income.copy())
    size = s.add(s.cast_double(adults.copy()), s.cast_double(children.copy()))
    return exp.Case(ifs=[
        exp.If(this=exp.EQ(this=name.copy(), expression=s.lit("oecd_modified")),
               true=s.case(ok.copy(), s.div(income_d.copy(), scale_divisor(adults, children, "oecd_modified")))),
        exp.If(this=exp.EQ(this=name.copy(), expression=s.lit("sqrt")),
               true=s.case(ok.copy(), s.div(income_d.copy(), s.sqrt(size.copy())))),
        exp.If(this=s.and_(s.gte(theta.copy(), s.lit(0.0)), s.lte(theta.copy(), s.lit(1.0))),
               true=s.case(ok.copy(), s.div(income_d.copy(), s.power(size.copy(), theta.copy())))),
    ], default=s.raise_error("uneven: equivalised(): scale must be 'oecd_modified', 'sqrt' or a number "
                             "between 0 and 1"))


__all__ = ["expand_scalars", "equivalised_tree", "read_scale", "macro_body", "SIGNATURE"]
