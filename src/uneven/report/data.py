"""The numbers of a report, each fetched from the database by one query built as a tree:

- per group (for the latest period when a time column is given): the measures of ``COLUMNS`` and
  the Lorenz curve (``lorenz_curve`` rides on the same ordered pass as Gini and the shares);
- the same for all groups together (the table's last row);
- with a time column: Gini per group and period (the trend).

Groups are ranked by Gini, most unequal first. A column may name an interval (two more result
columns, e.g. a confidence interval or bounds): the table then shows ``value [low, high]``; the
Gini, the shares, the ratios and Theil carry their 95 % intervals (``_ci``). Groups with fewer
than ``FEW_ROWS`` rows are flagged, and ``CAUTIONS`` say what can mislead.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import pandas as pd
from sqlglot import exp

from uneven.errors import UnevenError
from uneven.report import dominance as dom
from uneven.report.lorenz import check_points
from uneven.report.query import Spec, call, group_label, run_tree
from uneven.sqltree import build as s
from uneven.tables.dominance import Dominance

MAX_CURVES = 12  # curves per chart; with more groups the charts show the most and least unequal


@dataclass(frozen=True)
class Column:
    key: str
    label: str
    build: Callable[[Spec], exp.Expression]
    fmt: str = "{:.3f}"
    # builders of the low and high end of an interval around the value (shown as value [low, high])
    interval: tuple[Callable[[Spec], exp.Expression], Callable[[Spec], exp.Expression]] | None = None
    weighted_only: bool = False
    note: str = ""


def _used(spec: Spec, e: exp.Expression) -> exp.Expression:
    """``e`` for the rows every measure uses (value not NULL, weight > 0), NULL for the others."""
    cond: exp.Expr = exp.Not(this=exp.Is(this=spec.value.copy(), expression=exp.Null()))
    if spec.weight is not None:
        cond = exp.GT(this=spec.weight.copy(), expression=exp.Literal.number(0))
        cond = exp.and_(cond, exp.Not(this=exp.Is(this=spec.value.copy(), expression=exp.Null())))
    return exp.Case(ifs=[exp.If(this=cond, true=e)])


def _population(spec: Spec) -> exp.Expression:
    """Σ weight over the rows used; the column is weighted_only, so a weight is given."""
    assert spec.weight is not None
    return exp.Sum(this=_used(spec, spec.weight.copy()))


def _m(name, *params):
    return lambda spec: call(name, spec.value, *params, weight=spec.weight)


def _ci(name: str, *params):
    """The builders of the 95 % interval of measure ``name`` (its ``_ci_lo`` / ``_ci_hi`` entries)."""
    return (_m(f"{name}_ci_lo", *params), _m(f"{name}_ci_hi", *params))


COLUMNS: tuple[Column, ...] = (
    Column("rows", "rows", lambda s: exp.Count(this=_used(s, s.value.copy())), "{:,.0f}",
           note="rows with a value (and a weight > 0)"),
    Column("population", "population (Σ weight)", _population, "{:,.0f}", weighted_only=True),
    Column("mean", "mean", _m("generalized_lorenz", 1.0), "{:,.2f}", note="weighted mean μ = T/W"),
    Column("median", "median", _m("quantile_w", 0.5), "{:,.2f}", note="weighted median (inverted CDF)"),
    Column("gini", "Gini", _m("gini"), "{:.4f}", interval=_ci("gini")),
    Column("bottom40", "bottom 40 % share", _m("bottom_share", 0.4), "{:.1%}", interval=_ci("bottom_share", 0.4)),
    Column("top10", "top 10 % share", _m("top_share", 0.1), "{:.1%}", interval=_ci("top_share", 0.1)),
    Column("palma", "Palma", _m("palma"), "{:.3f}", interval=_ci("palma"),
           note="top 10 % share / bottom 40 % share"),
    Column("s80s20", "S80/S20", _m("s80s20"), "{:.3f}", interval=_ci("s80s20"),
           note="top 20 % share / bottom 20 % share"),
    Column("theil", "Theil", _m("theil"), "{:.4f}", interval=_ci("theil"), note="NULL when a value is negative"),
)

#: A group with fewer rows than this is flagged in the report: below 100 rows the top 10 % share
#: rests on fewer than 10 records, and the Gini's downward small-sample bias (about G/n) and the
#: normal intervals' coverage are no longer negligible (docs/pictures-and-reports.md).
FEW_ROWS = 100

INTERVAL_NOTE = ("[low, high] under a value: 95 % confidence interval by linearization, the rows taken as "
                 "independent draws (docs/uncertainty.md)")

#: The cautions every report prints (shared by the HTML and Markdown renderings).
CAUTIONS: tuple[str, ...] = (
    "The intervals treat the rows as independent draws: for a clustered or stratified survey design "
    "they are too narrow (query gini_se(x, w, psu := …, strata := …) for the design's standard error).",
    "The Gini is biased downward in small samples (its expected value falls short by roughly G/n for "
    "n rows), so small groups look more equal than they are; gini_corrected gives the n/(n − 1) version.",
    "A top share rests on the few largest records: the top 10 % of 200 rows is 20 records, and one "
    "unusual record can move it by several points.",
)


@dataclass
class Group:
    label: str
    values: dict[str, float]
    curve: list[tuple[float, float]] | None
    rank: int | None = None

    @property
    def few_rows(self) -> bool:
        """Fewer rows than FEW_ROWS used by the measures (flagged in the table)."""
        n = self.values.get("rows", math.nan)
        return n == n and n < FEW_ROWS


@dataclass
class ReportData:
    title: str
    value: str
    weight: str | None
    by: list[str]
    time: str | None
    source: str
    columns: list[Column]
    groups: list[Group]             # ranked by Gini, most unequal first (undefined last)
    overall: Group | None            # all groups together (None when there are no group columns)
    period: str | None = None        # the latest period the table and curves are for
    periods: list[str] = field(default_factory=list)
    trend: dict[str, list[float]] = field(default_factory=dict)  # group label → Gini per period
    dominance: Dominance | None = None  # two groups' Lorenz curves compared (report/dominance.py)

    def shown(self) -> list[Group]:
        """The groups drawn in charts: all, or the most and least unequal when there are too many."""
        if len(self.groups) <= MAX_CURVES:
            return self.groups
        half = MAX_CURVES // 2
        return self.groups[:half] + self.groups[-half:]

    def shown_note(self) -> str:
        if len(self.groups) <= MAX_CURVES:
            return ""
        return (f"The charts show the {MAX_CURVES // 2} most and {MAX_CURVES // 2} least unequal of "
                f"{len(self.groups)} groups; the table lists all.")


def _latest_filter(spec: Spec) -> exp.Expression:
    assert spec.time is not None  # called only with a time column
    latest = exp.select(exp.Max(this=spec.time.copy())).from_(spec.source.from_.copy())
    return exp.EQ(this=spec.time.copy(), expression=exp.Subquery(this=latest))


def measures_select(spec: Spec, columns: list[Column], points: int, keys: bool = True) -> exp.Select:
    items: list[exp.Expression] = [k.copy() for k in spec.keys] if keys else []
    items += [s.alias(c.build(spec), f"_uv_c_{c.key}") for c in columns]
    items += [s.alias(b(spec), f"_uv_c_{c.key}_{end}") for c in columns if c.interval
              for end, b in zip(("lo", "hi"), c.interval)]
    items.append(s.alias(call("lorenz_curve", spec.value, points, weight=spec.weight), "_uv_curve"))
    q = exp.select(*items).from_(spec.source.from_.copy())
    if spec.time is not None:
        q = q.where(_latest_filter(spec))
    if keys and spec.keys:
        q = q.group_by(*[k.copy() for k in spec.keys])
    return q


def trend_select(spec: Spec) -> exp.Select:
    assert spec.time is not None  # the trend is read only with a time column
    keys = [k.copy() for k in spec.keys] + [spec.time.copy()]
    q = exp.select(*keys, s.alias(call("gini", spec.value, weight=spec.weight), "_uv_gini")).from_(
        spec.source.from_.copy()).group_by(*[k.copy() for k in keys])
    return q.order_by(*[exp.Ordered(this=k.copy(), nulls_first=False) for k in keys])


def _number(v) -> float:
    if v is None or v is pd.NA:
        return math.nan
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _group(rec: dict, spec: Spec, columns: list[Column], label: str) -> Group:
    curve = rec["_uv_curve"]
    points = None if curve is None or isinstance(curve, float) else [
        (float(p["p"]), _number(p["lorenz"])) for p in curve]
    keys = [c.key for c in columns] + [f"{c.key}_{end}" for c in columns if c.interval for end in ("lo", "hi")]
    return Group(label, {k: _number(rec[f"_uv_c_{k}"]) for k in keys}, points)


def rank_groups(groups: list[Group]) -> list[Group]:
    """Most unequal first; groups whose Gini is undefined come last, unranked."""
    defined = sorted([g for g in groups if g.values["gini"] == g.values["gini"]],
                     key=lambda g: (-g.values["gini"], g.label))
    for i, g in enumerate(defined, 1):
        g.rank = i
    return defined + [g for g in groups if g.values["gini"] != g.values["gini"]]


def collect(con, spec: Spec, *, points: int = 50, title: str | None = None, dominance=None,
            generalized: bool = False) -> ReportData:
    """Run the report's queries and gather their results. ``dominance``: two group labels (``"A,B"``)
    whose (with ``generalized``, generalized) Lorenz curves the report compares."""
    check_points(points)
    pair = dom.pair(dominance)
    if pair is not None:
        dom.check_keys(spec)  # before the queries: a refusal should not cost a long run
    columns = [c for c in COLUMNS if spec.weight is not None or not c.weighted_only]
    names = spec.key_names
    per_group = run_tree(con, measures_select(spec, columns, points))
    if per_group.empty:
        raise UnevenError(f"{spec.source.label} has no rows to report on")
    records = per_group.to_dict("records")
    groups = rank_groups([_group(r, spec, columns, group_label(r, names)) for r in records])
    overall = None
    if names:
        rec = run_tree(con, measures_select(spec, columns, points, keys=False)).to_dict("records")[0]
        overall = _group(rec, spec, columns, "all groups")
    data = ReportData(title or f"Inequality of {spec.value.name}" + (f" by {', '.join(names)}" if names else ""),
                      spec.value.name, spec.weight.name if spec.weight is not None else None, names,
                      spec.time.name if spec.time is not None else None, spec.source.label, columns, groups, overall)
    if spec.time is not None:
        _add_trend(con, spec, data)
    if pair is not None:
        keys = {group_label(r, names): r[names[0]] for r in records} if len(names) == 1 else {}
        data.dominance = dom.compare(con, spec, pair, keys, generalized)
    return data


def _add_trend(con, spec: Spec, data: ReportData) -> None:
    assert spec.time is not None  # as in trend_select
    trend = run_tree(con, trend_select(spec))
    t = spec.time.name
    periods = [v for v in pd.unique(trend[t]) if not pd.isna(v)]
    try:
        periods = sorted(periods)
    except TypeError:
        pass
    data.periods = [str(p) for p in periods]
    data.period = data.periods[-1] if data.periods else None
    index = {str(p): i for i, p in enumerate(periods)}
    for rec in trend.to_dict("records"):
        if pd.isna(rec[t]):
            continue
        label = group_label(rec, data.by)
        series = data.trend.setdefault(label, [math.nan] * len(periods))
        series[index[str(rec[t])]] = _number(rec["_uv_gini"])


def format_value(column: Column, values: dict[str, float]) -> str:
    v = values.get(column.key, math.nan)
    if v != v:
        return "—"
    text = column.fmt.format(v)
    if column.interval is not None:
        lo, hi = (values.get(f"{column.key}_{end}", math.nan) for end in ("lo", "hi"))
        if lo == lo and hi == hi:
            text += f" [{column.fmt.format(lo)}, {column.fmt.format(hi)}]"
    return text
