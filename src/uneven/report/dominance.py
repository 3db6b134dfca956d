"""The report's dominance section: two groups of the report's grouping compared by
``lorenz_dominance`` (tables/dominance.py, docs/dominance.md) on the report's own connection and
rows (the latest period when the report has a time column).

``pair`` reads the two group names (``"A,B"`` or a pair), ``compare`` matches them against the
report's group labels and runs the test, ``headers`` and ``cells`` are the table both renderings
print.
"""

from __future__ import annotations

import math

import pandas as pd
from sqlglot import exp

from uneven.compiler.emit import to_sql
from uneven.errors import UnevenError
from uneven.report.query import Spec
from uneven.tables.dominance import Dominance, lorenz_dominance

OPTION = "--dominance"
POINTS = 19  # p = 0.05, 0.10, …, 0.95
LEVEL = 0.95


def pair(value) -> tuple[str, str] | None:
    """Two group names from ``"A,B"`` or a two-item list or tuple; None for None."""
    if value is None:
        return None
    names = [p.strip() for p in value.split(",")] if isinstance(value, str) else [str(v).strip() for v in value]
    if len(names) != 2 or not all(names) or names[0] == names[1]:
        raise UnevenError(f"{OPTION}: name two different groups of the report, as A,B; got {value!r}")
    return names[0], names[1]


def _plain(v):
    """A group key as lorenz_dominance takes it (text or a Python number), else None."""
    if isinstance(v, str):
        return v
    if hasattr(v, "item"):  # numpy scalars
        v = v.item()
    if isinstance(v, bool) or not isinstance(v, (int, float)) or (isinstance(v, float) and not math.isfinite(v)):
        return None
    return v


def relation(spec: Spec) -> str:
    """The report's rows as a relation ``lorenz_dominance`` reads: the source itself, or the
    latest period of it (the period the table and curves are for)."""
    rows = exp.select(exp.Star()).from_(spec.source.from_.copy())
    if spec.time is not None:
        latest = exp.select(exp.Max(this=spec.time.copy())).from_(spec.source.from_.copy())
        rows = rows.where(exp.EQ(this=spec.time.copy(), expression=exp.Subquery(this=latest)))
    return to_sql(exp.Subquery(this=rows, alias=exp.TableAlias(this=exp.to_identifier("_uv_rows", quoted=True))))


def check_keys(spec: Spec) -> None:
    if len(spec.keys) != 1:
        raise UnevenError(f"{OPTION} compares two groups of one group column: give exactly one --by column "
                          f"(the report has {len(spec.keys) or 'no'} group columns)")


def compare(con, spec: Spec, names: tuple[str, str], keys: dict[str, object], generalized: bool) -> Dominance:
    """Run the dominance test between the groups labelled ``names``; ``keys`` maps each group's label
    in the report to its value of the group column."""
    check_keys(spec)
    missing = [n for n in names if n not in keys]
    if missing:
        shown = ", ".join(sorted(keys)[:20]) + (" …" if len(keys) > 20 else "")
        raise UnevenError(f"{OPTION}: {missing[0]!r} is not a group of {spec.key_names[0]} in the report; "
                          f"its groups are: {shown}")
    values = (_plain(keys[names[0]]), _plain(keys[names[1]]))
    if any(v is None for v in values):
        raise UnevenError(f"{OPTION}: the groups of {spec.key_names[0]} must be text or numbers to be compared")
    return lorenz_dominance(relation(spec), to_sql(spec.value), to_sql(spec.keys[0]), values,
                            weight=to_sql(spec.weight) if spec.weight is not None else None,
                            generalized=generalized, points=POINTS, level=LEVEL, con=con)


HEADERS = ("p", "A", "B", "A − B", "se", "band low", "band high", "t")
_COLUMNS = ("p", "ordinate_a", "ordinate_b", "difference", "se", "band_lo", "band_hi", "t")


def cells(d: Dominance) -> list[list[str]]:
    """The table's rows as text: the ordinates, their difference, its SE, band and t per p."""
    out = []
    for rec in d.table.to_dict("records"):
        row = []
        for col in _COLUMNS:
            v = rec[col]
            row.append("—" if v is None or pd.isna(v) else f"{v:.2f}" if col == "p" else
                       f"{v:.2f}" if col == "t" else f"{v:.5g}")
        out.append(row)
    return out


def summary(d: Dominance) -> str:
    """The verdict with what it rests on, one sentence."""
    kind = "generalized Lorenz curves (μ·L(p))" if d.generalized else "Lorenz curves"
    return (f"{kind} of A = {d.groups[0]} and B = {d.groups[1]} at {len(d.table)} points p: {d.verdict} "
            f"(simultaneous level {d.level:g}, critical value c = {d.critical_value:.3f}).")


NOTE = ("The verdict follows the multiple-comparison test of Bishop, Chakraborti and Thistle (1989) and "
        "Davidson and Duclos (2000) (from memory): A dominates B when some t = (A − B)/se exceeds c and none "
        "falls below −c; the curves cross when both happen; otherwise the groups are not distinguishable at "
        "this level. se combines each group's linearized standard error, the groups taken as independent "
        "samples; the band is (A − B) ± c·se, simultaneous over the points (docs/dominance.md). A dominance "
        "verdict is an estimate from the rows given, not a finding about particular people.")
