"""SQL over a bins table: join overlapping bins, add running sums, compute every interval.

    [<name>_prev → <name>_isl → <name>_mrg]   only for stored summaries (bins may overlap after a merge):
                    a bin starts a new island unless its min is below the largest max before it;
                    the bins of one island are added up (min of mins, max of maxes)
    <name>_cum      each bin with the running weight C_{<b} and value S_{<b} of the bins before it
                    (ordered by min, then max) and the group totals W, T at row level: only those the
                    measures read (a Gini reads C_{<b} alone, Theil or MLD none), since a window costs
                    about as much as a sort of the bins and not every engine drops one nobody reads
    <name>_agg      GROUP BY keys: the aggregates over bins the measures use (each once)
    <name>_raw      per call, point, lo and hi columns (expressions over those aggregates)
    <name>          the same, lo and hi widened by the rounding allowance (measures.widen)

With ``present`` (the summary pass's direct form), the bins table also holds one placeholder row per
group for the rows it does not count, all of whose bin columns and ``present`` are NULL: the windows
skip it (SUM ignores NULL), every aggregate over the bins reads only rows where ``present`` is not
NULL, and a group with no other row gets NULL results, as the joined form's LEFT JOIN gives it.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.bounds import bins as b
from uneven.bounds.measures import BOUNDED, BinContext, Interval, widen
from uneven.sqltree import build as s
from uneven.sqltree.build import cte, grouped, table


def _window(fn, keys, frame_end: str | None):
    """fn OVER (PARTITION BY keys ORDER BY min, max ROWS BETWEEN UNBOUNDED PRECEDING AND <end>)."""
    args = {"this": fn, "partition_by": [k.copy() for k in keys] or None, "over": "OVER"}
    if frame_end is not None:
        args["order"] = exp.Order(expressions=[exp.Ordered(this=s.col(b.MIN)), exp.Ordered(this=s.col(b.MAX))])
        end = {"end": "1", "end_side": "PRECEDING"} if frame_end == "previous" else {"end": "CURRENT ROW"}
        args["spec"] = exp.WindowSpec(kind="ROWS", start="UNBOUNDED", start_side="PRECEDING", **end)
    return exp.Window(**args)


def join_overlaps(source: str, keys: list[exp.Column], columns: list[str], name: str) -> list[exp.CTE]:
    """CTEs that join bins whose [min, max] ranges overlap (gaps and islands), ending in ``name``."""
    base = [k.copy() for k in keys] + [s.col(c) for c in columns]
    prev = exp.Select(expressions=base + [s.alias(_window(s.agg_max(s.col(b.MAX)), keys, "previous"), "_uv_pm")]
                      ).from_(table(source))
    starts = s.case(s.lt(s.col(b.MIN), s.col("_uv_pm")), s.lit(0), s.lit(1))
    isl = exp.Select(expressions=[c.copy() for c in base] + [s.alias(_window(s.agg_sum(starts), keys, "current"),
                                                                     "_uv_island")]).from_(table(f"{name}_prev"))
    merged = exp.Select(expressions=[k.copy() for k in keys] + b.merged_aggregates(columns)).from_(
        table(f"{name}_isl"))
    merged.set("group", exp.Group(expressions=[k.copy() for k in keys] + [s.col("_uv_island")]))
    return [cte(prev, f"{name}_prev"), cte(isl, f"{name}_isl"), cte(merged, name)]


def _per_bin(keys: list[exp.Column]) -> dict[str, tuple[exp.Expression, tuple[str, ...]]]:
    """The computed columns of the cum CTE: name → (expression, the bin columns it reads)."""
    zero = s.lit(0.0)
    before = lambda c: exp.Coalesce(this=_window(s.agg_sum(s.col(c)), keys, "previous"),  # noqa: E731
                                    expressions=[zero.copy()])
    order = (b.MIN, b.MAX)
    return {"_uv_m": (s.clamp(s.div(s.col(b.WX), s.col(b.W)), s.col(b.MIN), s.col(b.MAX)), (b.WX, b.W) + order),
            "_uv_cp": (before(b.W), (b.W,) + order), "_uv_sp": (before(b.WX), (b.WX,) + order),
            "_uv_gw": (_window(s.agg_sum(s.col(b.W)), keys, None), (b.W,)),
            "_uv_gt": (_window(s.agg_sum(s.col(b.WX)), keys, None), (b.WX,))}


def running_sums(source: str, keys: list[exp.Column], columns: list[str], name: str,
                 read: set[str] | None = None) -> exp.CTE:
    """The cum CTE: the bin ``columns`` and, of the clamped mean, the running sums and the group
    totals, those named in ``read`` (all when None)."""
    cols = [k.copy() for k in keys] + [s.col(c) for c in dict.fromkeys(columns)] + [
        s.alias(e, n) for n, (e, _) in _per_bin(keys).items() if read is None or n in read]
    return cte(exp.Select(expressions=cols).from_(table(source)), name)


def _named(e: exp.Expression, name: str) -> exp.Alias:
    """``e AS "name"`` without copying ``e`` (the interval trees are fresh and large: copying them
    was most of the compile time)."""
    return exp.Alias(this=e, alias=exp.to_identifier(name, quoted=True))


def only_present(aggregate: exp.Expression, present: str) -> exp.Expression:
    """``aggregate`` with the argument of every aggregate function in it read only where the column
    ``present`` is not NULL (SUM, MIN and MAX skip the NULL the CASE gives elsewhere)."""
    def fn(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.AggFunc) and not isinstance(node.this, exp.Star):
            node.set("this", s.case(s.not_null(s.col(present)), node.this))
        return node

    return aggregate.transform(fn, copy=True)


PRESENT_COUNT = "_uv_nb"  # the direct form's count of a group's counted bins (0: a placeholder alone)


def lower_bounds(source: str, keys: list[exp.Column], columns: list[str], calls: list[tuple], name: str,
                 merge: bool, present: str | None = None) -> tuple[list[exp.CTE], dict, dict, list[str]]:
    """CTEs computing intervals for ``calls`` = [(key, measure name, params)] from the bins table
    ``source`` (key columns ``keys``, bin columns ``columns``). Returns (ctes, {key: (point, lo, hi)
    column names in ``name``}, {key: exact flag}, the bin columns the measures read). ``present``: a
    bins column NULL only on a group's placeholder row (module docstring)."""
    ctes = []
    if merge:
        ctes += join_overlaps(source, keys, columns, f"{name}_mrg")
        source = f"{name}_mrg"
    powers = {p for c in columns if (p := b.power_of_column(c)) is not None}
    ctx = BinContext(powers)
    out: list[exp.Expression] = []
    final: list[exp.Expression] = []
    results: dict[object, tuple[str, str, str]] = {}
    exact: dict[object, bool] = {}
    for key, measure, params in calls:
        if key in results:
            continue
        iv = BOUNDED[measure](ctx, tuple(params))
        i = len(results) + 1
        names = (f"_uv_r{i}", f"_uv_r{i}_lo", f"_uv_r{i}_hi")
        out += [_named(e, n) for e, n in zip((iv.point, iv.lo, iv.hi), names)]
        wide = widen(Interval(s.col(names[0]), s.col(names[1]), s.col(names[2])))
        final += [_named(e, n) for e, n in zip((wide.point, wide.lo, wide.hi), names)]
        results[key], exact[key] = names, iv.exact
    aggregates = [_named(e.copy() if present is None else only_present(e, present), n)
                  for n, e in ctx.aggregates.values()]
    kept: list[exp.Expression] = []
    if present is not None:  # a group of the placeholder alone has no counted bin: NULL results
        aggregates.append(_named(exp.Count(this=s.col(present)), PRESENT_COUNT))
        kept = [s.col(PRESENT_COUNT)]
        final = [_named(s.case(s.gt(s.col(PRESENT_COUNT), s.lit(0)), e.this), e.alias) for e in final]
    # the measures read bins only through these aggregates: bin columns none of them reads are left
    # out of the window (and, in the summary pass, of the bins GROUP BY: less state per (group, bin))
    read = {c.name for _, e in ctx.aggregates.values() for c in e.find_all(exp.Column)}
    per_bin = {n: needs for n, (_, needs) in _per_bin(keys).items() if n in read}
    needed = read | {c for needs in per_bin.values() for c in needs}
    ctes.append(running_sums(source, keys, [c for c in columns if c in read] + ([present] if present else []),
                             f"{name}_cum", set(per_bin)))
    columns = [c for c in columns if c in needed]
    ctes.append(cte(grouped(keys, aggregates, f"{name}_cum"), f"{name}_agg"))
    ctes.append(cte(exp.Select(expressions=[k.copy() for k in keys] + out + kept).from_(table(f"{name}_agg")),
                    f"{name}_raw"))
    ctes.append(cte(exp.Select(expressions=[k.copy() for k in keys] + final).from_(table(f"{name}_raw")), name))
    return ctes, results, exact, columns
