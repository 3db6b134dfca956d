"""Running a bounded query: choose the resolution, report the widths achieved, refine once."""

from __future__ import annotations

import math

import pandas as pd
from sqlglot import exp

from uneven.bounds.bins import DEFAULT_RESOLUTION, MIN_RESOLUTION, check_resolution, resolution_for_tolerance
from uneven.errors import MeasureArgumentError


def pick_resolution(method: str, tolerance: float | None, resolution: float | None) -> float | None:
    """The relative bin width for a bounded query (None for an exact one)."""
    if (method or "").lower() != "bounded":
        if tolerance is not None or resolution is not None:
            raise MeasureArgumentError("tolerance and resolution apply to method='bounded' only")
        return None
    if tolerance is not None and resolution is not None:
        raise MeasureArgumentError("give either a tolerance or a resolution, not both")
    if tolerance is not None:
        return resolution_for_tolerance(tolerance)
    return check_resolution(DEFAULT_RESOLUTION if resolution is None else resolution)


def bounded_resolution(tolerance: float | None, resolution: float | None) -> float:
    """The relative bin width of a bounded query (``pick_resolution`` for method="bounded")."""
    res = pick_resolution("bounded", tolerance, resolution)
    assert res is not None  # a bounded query always has one
    return res


def interval_widths(df: pd.DataFrame) -> dict[str, float]:
    """Widest hi − lo over the rows, per measure column that has _lo and _hi companions."""
    out = {}
    for col in df.columns:
        lo, hi = f"{col}_lo", f"{col}_hi"
        if lo in df.columns and hi in df.columns:
            width = (pd.to_numeric(df[hi], errors="coerce") - pd.to_numeric(df[lo], errors="coerce")).max()
            out[col] = float(width) if pd.notna(width) else math.nan
    return out


# measures on the scale of shares (the tolerance is a width on that scale; quantiles are in value units)
SHARE_SCALE = {"gini", "gini_corrected", "lorenz", "bottom_share", "top_share", "hoover", "theil", "mld", "cv",
               "ge", "atkinson"}


def share_outputs(sql: str) -> set[str]:
    """Output names of the outermost SELECT's items that are calls of share-scale measures."""
    from uneven.compiler.parse import parse_one_statement
    from uneven.compiler.scope import output_aliases
    tree = parse_one_statement(sql, "duckdb")
    select = tree if isinstance(tree, exp.Select) else tree.find(exp.Select)
    if select is None:
        return set()
    out = set()
    for item, name in zip(select.expressions, output_aliases(select)):
        node = item.unalias()
        node = node.this if isinstance(node, exp.Filter) else node
        if isinstance(node, exp.Anonymous) and node.name.lower() in SHARE_SCALE:
            out.add(name)
    return out


def _widest(widths: dict[str, float], columns: set[str]) -> float | None:
    values = [v for k, v in widths.items() if k in columns and not math.isnan(v)]
    return max(values) if values else None


def run_bounded(run, resolution: float, tolerance: float | None, sql: str) -> pd.DataFrame:
    """``run(resolution)`` → DataFrame. With a tolerance that an interval of a share-scale measure
    (Gini, shares, Theil …) exceeds, run once more with finer bins (the width grows like the square
    of the resolution); attach what was achieved."""
    df = run(resolution)
    widths = interval_widths(df)
    widest = _widest(widths, share_outputs(sql)) if tolerance is not None else None
    runs = 1
    if tolerance is not None and widest is not None and widest > tolerance and resolution > MIN_RESOLUTION:
        resolution = max(MIN_RESOLUTION, resolution * 0.9 * math.sqrt(tolerance / widest))
        df = run(resolution)
        widths, runs = interval_widths(df), 2
    df.attrs["uneven"] = {"method": "bounded", "resolution": resolution, "tolerance": tolerance,
                           "widths": widths, "runs": runs}
    return df
