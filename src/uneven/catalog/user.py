"""User-defined measures: ``uneven.define_measure`` adds a measure to the catalog at run time.

A measure is defined on one of the passes by a result expression written in SQL text over the
pass's documented columns, e.g. on the ordered pass (rows of a group sorted by value)::

    uneven.define_measure(
        "middle_share", params=["lo", "hi"], pass_="ordered",
        result="(lorenz(hi) - lorenz(lo))",  # shares of the population between two fractions
        reference=lambda x, lo, hi, w=None: ...)

Names the result may use:

* ordered pass: ``lorenz(p)`` (L(p), the share of the poorest fraction p), ``top_share(p)``,
  ``quantile(p)`` (weighted inverted CDF), ``mean`` (μ), ``total_weight`` (W), ``total`` (T),
  ``n`` (rows), and the parameters by name (numbers, checked by kind: ``fraction`` by default);
* moment pass: ``sum(expr)`` over rows with ``x`` and ``w`` (e.g. ``sum(w * x * x)``), and
  ``total_weight``, ``total``, ``n``, ``mean``, ``min_x``, and the parameters.

The measure then works in SQL text (``SELECT middle_share(x, 0.4, 0.9, w) …``), in the builder
(``uneven.middle_share("x", 0.4, 0.9, weight="w")``) and in ``install`` (DuckDB macros).

An ordered measure may also bring a numpy kernel (``kernel=uneven.ChunkKernel(start, update,
finish)``, catalog/kernels.py): ``query``/``explain`` on DuckDB can then run it on the stream plan
(DuckDB sorts, numpy reduces chunk by chunk: docs/plans.md, "User kernels"); ``compile()`` keeps
the result expression's SQL.
"""

from __future__ import annotations

from typing import Literal

import sqlglot
from sqlglot import exp

from uneven import catalog
from uneven.catalog import ordered
from uneven.catalog.kernels import ChunkKernel
from uneven.catalog.spec import Measure, Param
from uneven.errors import UnevenError
from uneven.sqltree import build as s
from uneven.sqltree.constants import ConstantError, evaluate_constant

_USER: set[str] = set()
# the kinds of a parameter of a user's measure (numbers; catalog.spec.Param)
_PARAM_KINDS: dict[str, Literal["fraction", "number", "nonnegative", "count"]] = {
    "fraction": "fraction", "number": "number", "nonnegative": "nonnegative", "count": "count"}


class MeasureDefinitionError(UnevenError):
    """A user-defined measure is not well formed."""


def user_measure_names() -> frozenset[str]:
    return frozenset(_USER)


def _ordered_names(ctx, params: dict):
    def pick(p):
        return params[p.name] if isinstance(p, exp.Column) and p.name in params else _constant_value(p)

    return {
        "lorenz": lambda p: ordered.lorenz_at(ctx, pick(p)),
        "top_share": lambda p: ordered.top_share_at(ctx, pick(p)),
        "quantile": lambda p: ordered.quantile_at(ctx, pick(p)),
    }, {"mean": lambda: s.div(ctx.T, ctx.W), "total_weight": lambda: ctx.W, "total": lambda: ctx.T,
        "n": lambda: ctx.n}


def _constant_value(node: exp.Expression) -> float:
    """A constant in the result text (parsed as DuckDB SQL), as DuckDB computes it (sqltree/constants.py)."""
    try:
        return evaluate_constant(node, "duckdb")
    except ConstantError as e:
        raise MeasureDefinitionError(f"expected a number or a parameter name, got {node.sql('duckdb')}: "
                                     f"the argument {e.reason}") from None


def _moment_names(ctx, params: dict):
    def total(arg):
        term = arg.transform(lambda n: (ctx.x if n.name == "x" else ctx.w) if isinstance(n, exp.Column)
                             and n.name in ("x", "w") else n)
        return ctx.sum(_params_in(term, params))

    return {"sum": total}, {"mean": lambda: s.div(ctx.T, ctx.W), "total_weight": lambda: ctx.W,
                            "total": lambda: ctx.T, "n": lambda: ctx.n, "min_x": lambda: ctx.min_x}


def _params_in(expr: exp.Expression, params: dict) -> exp.Expression:
    return expr.transform(lambda n: s.lit(params[n.name]) if isinstance(n, exp.Column) and n.name in params else n)


def _builder(tree: exp.Expression, names_for, param_names: list[str]):
    def build(ctx, values):
        params = dict(zip(param_names, values))
        functions, scalars = names_for(ctx, params)

        def fn(node):
            if isinstance(node, (exp.Anonymous, exp.Func)) and not isinstance(node, exp.Column):
                name = (node.name if isinstance(node, exp.Anonymous) else node.sql_name()).lower()
                if name in functions:
                    args = node.expressions if isinstance(node, exp.Anonymous) else [node.this]
                    return functions[name](args[0])
            if isinstance(node, exp.Column) and not node.table:
                if node.name in scalars:
                    return scalars[node.name]()
                if node.name in params:
                    return s.lit(params[node.name])
            return node

        return tree.copy().transform(fn)

    return build


def define_measure(name: str, *, result: str, reference, params: list[str] | tuple = (),
                   param_kinds: dict[str, str] | None = None, pass_: str = "ordered", weighted: bool = True,
                   formula: str = "", domain: str = "", replace: bool = False,
                   kernel: ChunkKernel | None = None) -> Measure:
    """Register a measure computed from ``result`` (SQL text over the pass's names; see module doc).

    ``reference(x, *params, w=None)`` is its numpy reference (used by tests and ``uneven.reference``
    style checks). Parameters are numbers (``param_kinds``: name → fraction|number|nonnegative|count,
    default fraction). Returns the catalog entry; the measure is available at once everywhere.
    ``kernel``: the same measure as a numpy kernel over sorted chunks, for the stream plan (ordered
    pass only; it must agree with ``result``).
    """
    if not isinstance(name, str) or not name.isidentifier() or name.startswith("_"):
        raise MeasureDefinitionError(f"define_measure(): name must be an identifier not starting with _, got {name!r}")
    key = name.lower()
    if key in catalog.MEASURES and key not in _USER and not replace:
        raise MeasureDefinitionError(f"define_measure(): {key!r} is a built-in measure; choose another name")
    if key in _USER and not replace:
        raise MeasureDefinitionError(f"define_measure(): {key!r} is already defined; pass replace=True")
    kinds = param_kinds or {}
    unknown = sorted(k for k in kinds.values() if k not in _PARAM_KINDS)
    if unknown:
        raise MeasureDefinitionError(f"define_measure(): a parameter kind must be one of {', '.join(_PARAM_KINDS)}, "
                                     f"got {unknown[0]!r}")
    specs = tuple(Param(p, _PARAM_KINDS[kinds.get(p, "fraction")]) for p in params)
    names_for = {"ordered": _ordered_names, "moment": _moment_names}.get(pass_)
    if names_for is None:
        raise MeasureDefinitionError(f"define_measure(): pass_ must be 'ordered' or 'moment', got {pass_!r}")
    try:
        tree = s.node(sqlglot.parse_one(result, read="duckdb"))
    except sqlglot.errors.SqlglotError as e:
        raise MeasureDefinitionError(f"define_measure(): cannot parse the result expression: {e}") from None
    if kernel is not None and (pass_ != "ordered" or not isinstance(kernel, ChunkKernel)):
        raise MeasureDefinitionError("define_measure(): kernel must be a ChunkKernel(start, update, finish), "
                                     "on the ordered pass")
    stream = None if kernel is None else (lambda acc, values: acc.chunk(kernel, values))
    measure = Measure(key, pass_, specs, "weight" if weighted else None, formula or result,
                      _builder(tree, names_for, list(params)), reference, domain=domain, stream=stream)
    _check_builds(measure)
    catalog.register(measure)
    _USER.add(key)
    return measure


def _check_builds(measure: Measure) -> None:
    """Build once with sample parameters, so a bad result expression fails at definition time."""
    from uneven.compiler.passes.moment import MainAggregate, MomentContext
    from uneven.compiler.passes.ordered import OrderedContext

    sample = tuple(0.5 if p.kind == "fraction" else 1.0 for p in measure.params)
    ctx = OrderedContext(True) if measure.passes == "ordered" else MomentContext(
        MainAggregate("_uv_check"), s.col("x"), s.col("w"))
    out = measure.build(ctx, sample)
    for col in out.find_all(exp.Column):
        if not col.name.startswith("_uv_") and not col.table:
            raise MeasureDefinitionError(f"define_measure(): unknown name {col.name!r} in the result expression")


def remove_measure(name: str) -> None:
    """Remove a user-defined measure (built-ins cannot be removed)."""
    key = name.lower()
    if key not in _USER:
        raise MeasureDefinitionError(f"remove_measure(): {key!r} is not a user-defined measure")
    _USER.discard(key)
    catalog.MEASURES.pop(key, None)
