"""Lorenz dominance between two groups of rows, with a test (docs/dominance.md).

At a grid of population fractions p_1 … p_K the (generalized) Lorenz ordinates of the two groups,
their difference d_k = L_A(p_k) − L_B(p_k), its standard error se_k = sqrt(se_A² + se_B²) (each
group's linearized SE, the groups taken as independent samples) and t_k = d_k / se_k. The test is
the union–intersection / multiple-comparison rule of Bishop, Chakraborti and Thistle (1989) and
Davidson and Duclos (2000) (both from memory): with c the critical value for K simultaneous
two-sided comparisons at ``level`` (Šidák's bound, c = Φ⁻¹((1 + level^(1/K))/2), valid for
correlated normal statistics; the studentized maximum modulus those papers tabulate is close to it
and not larger),

    some t_k > c and none < −c   → "A dominates B"   (A's curve lies above: A is more equal;
                                                     for generalized Lorenz: A is preferred by
                                                     every increasing concave welfare function)
    some t_k < −c and none > c   → "B dominates A"
    some t_k > c and some < −c   → "curves cross"
    every |t_k| ≤ c              → "not distinguishable at this level"

The band in the table is d_k ± c·se_k (simultaneous over the grid). The ends p = 0 and p = 1 are
left out (L(0) = 0 and L(1) = 1 for every group: nothing to test there).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist

import pandas as pd
from sqlglot import exp

from uneven.compiler.context import CompileOptions
from uneven.compiler.emit import to_sql
from uneven.engine.adapters import Adapter, is_duckdb
from uneven.engine.frames import callers_frame
from uneven.engine.session import session as engine_session
from uneven.errors import MeasureArgumentError
from uneven.sqltree import build as s
from uneven.tables.base import Spec, parse_expression, session
from uneven.tables.compare import two_levels

FN = "lorenz_dominance"
VERDICTS = ("dominates", "curves cross", "not distinguishable at this level")


@dataclass
class Dominance:
    """The verdict and the table behind it (one row per p)."""

    verdict: str
    groups: tuple
    generalized: bool
    level: float
    critical_value: float
    table: pd.DataFrame

    def __str__(self) -> str:
        kind = "generalized Lorenz" if self.generalized else "Lorenz"
        head = (f"{kind} curves of A = {self.groups[0]} and B = {self.groups[1]}, level {self.level:g}, "
                f"{len(self.table)} points, simultaneous critical value {self.critical_value:.3f}: {self.verdict}")
        return head + "\n" + self.table.to_string(index=False, float_format=lambda v: f"{v:.6g}")


    def svg(self) -> str:
        """The difference of the two curves over p with its simultaneous band (hand-written SVG)."""
        from uneven.svg import difference_chart
        t = self.table
        kind = "generalized Lorenz" if self.generalized else "Lorenz"
        return difference_chart(list(t["p"]), list(t["difference"]), list(t["band_lo"]), list(t["band_hi"]),
                                f"{kind}: {self.groups[0]} − {self.groups[1]} ({self.verdict})")


def critical_value(level: float, points: int) -> float:
    """Šidák's bound for ``points`` simultaneous two-sided normal comparisons at ``level``."""
    return NormalDist().inv_cdf((1.0 + level ** (1.0 / points)) / 2.0)


def grid(points: int) -> list[float]:
    """p_k = k/(points + 1), k = 1 … points (the interior of [0, 1], evenly spaced)."""
    return [k / (points + 1) for k in range(1, points + 1)]


def decide(t: list[float | None], c: float, a, b) -> str:
    known = [v for v in t if v is not None and not math.isnan(v)]
    above, below = any(v > c for v in known), any(v < -c for v in known)
    if above and below:
        return "curves cross"
    if above:
        return f"{a} dominates {b}"
    if below:
        return f"{b} dominates {a}"
    return "not distinguishable at this level"


def _check(points, level) -> tuple[int, float]:
    if isinstance(points, bool) or not isinstance(points, int) or not 1 <= points <= 99:
        raise MeasureArgumentError(f"{FN}: points must be a whole number from 1 to 99, got {points!r}")
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0.0 < level < 1.0:
        raise MeasureArgumentError(f"{FN}: level must be a number strictly between 0 and 1, got {level!r}")
    return points, float(level)


def lorenz_dominance(relation: str, x: str, group: str, groups, *, weight: str | None = None,
                     generalized: bool = False, points: int = 19, level: float = 0.95,
                     strata: str | None = None, psu: str | None = None, con=None, frame=None) -> Dominance:
    """Compare the (generalized) Lorenz curves of two values of ``group`` at ``points`` interior
    fractions; see the module documentation for the test and the wording of the verdict."""
    levels = two_levels(groups)
    points, level = _check(points, level)
    spec = Spec(FN, relation, (), weight)
    xv, gv = parse_expression(x, "value", FN), parse_expression(group, "group column", FN)
    design = [exp.PropertyEQ(this=exp.to_identifier(k), expression=parse_expression(v, k, FN))
              for k, v in (("strata", strata), ("psu", psu)) if v is not None]
    name = "generalized_lorenz" if generalized else "lorenz"
    ps = grid(points)
    items = [s.alias(exp.Count(this=exp.Star()), "rows")]
    for k, p in enumerate(ps):
        se_call = spec.measure(f"{name}_se", xv, s.lit(p))
        se_call.set("expressions", se_call.expressions + [d.copy() for d in design])
        items += [s.alias(spec.measure(name, xv, s.lit(p)), f"_uv_e{k}"), s.alias(se_call, f"_uv_s{k}")]
    sel = spec.select(items, [xv, gv], [gv])
    sel.expressions.append(s.alias(gv.copy(), "_uv_grp"))
    where = exp.In(this=gv.copy(), expressions=[exp.convert(v) for v in levels])
    sel.set("where", exp.Where(this=s.and_(sel.args["where"].this, where)))
    caller = frame or callers_frame()
    if is_duckdb(con):
        with session(spec, con, caller) as run:
            res = run(sel)
    else:  # PostgreSQL, Spark, SQLite (engine/adapters): the ordinates and SEs compiled for that engine
        from uneven.api import run_on
        text_sql = to_sql(sel)
        with engine_session(con, text_sql, caller) as adapter:
            assert isinstance(adapter, Adapter)  # con is not DuckDB's
            res = run_on(adapter, text_sql, CompileOptions(strict=False, tie_grouping="auto", method="exact"),
                         None, None)
    side = {str(v): i for i, v in enumerate(levels)}
    found = {side.get(str(v)): r for v, (_, r) in zip(res["_uv_grp"], res.iterrows())}
    missing = [levels[i] for i in (0, 1) if i not in found]
    if missing:
        raise MeasureArgumentError(f"{FN}: no rows with a value for the group {missing[0]!r} of {group}")

    def value(i, col):
        v = found[i][col]
        return None if v is None or pd.isna(v) else float(v)

    c = critical_value(level, points)
    rows = []
    for k, p in enumerate(ps):
        a, b = value(0, f"_uv_e{k}"), value(1, f"_uv_e{k}")
        sa, sb = value(0, f"_uv_s{k}"), value(1, f"_uv_s{k}")
        d = a - b if None not in (a, b) else None
        se = math.hypot(sa, sb) if None not in (sa, sb) else None
        t = band_lo = band_hi = None
        if d is not None and se:
            t, band_lo, band_hi = d / se, d - c * se, d + c * se
        rows.append({"p": p, "ordinate_a": a, "ordinate_b": b, "difference": d, "se": se,
                     "band_lo": band_lo, "band_hi": band_hi, "t": t})
    table = pd.DataFrame(rows).astype(float)
    verdict = decide(list(table["t"]), c, levels[0], levels[1])
    return Dominance(verdict, levels, generalized, level, c, table)


__all__ = ["lorenz_dominance", "Dominance", "critical_value", "grid", "decide"]
