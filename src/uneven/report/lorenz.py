"""Lorenz curves of every group as a table of points, computed in the database.

One query: ``SELECT keys, lorenz_curve(x, k, w), generalized_lorenz(x, 1, w) FROM source GROUP BY
keys`` — the catalog's ``lorenz_curve`` gives the k+1 points (p, L(p)) of each group from the
ordered pass (a list of structs per group), and ``generalized_lorenz(x, 1, w)`` = T/W is the group
mean μ, from the same pass, so the generalized Lorenz ordinate μ·L(p) needs no second query. Only
groups × (k+1) numbers reach Python, never the rows.
"""

from __future__ import annotations

import math

import pandas as pd
from sqlglot import exp

from uneven.errors import UnevenError
from uneven.report.query import Spec, call, make_spec, open_connection, run_tree
from uneven.sqltree import build as s

POINT_COLUMNS = ("p", "lorenz", "generalized_lorenz")
MAX_POINTS = 1000  # the catalog's limit for lorenz_curve's k


def check_points(points) -> int:
    if isinstance(points, bool) or not isinstance(points, int) or not 1 <= points <= MAX_POINTS:
        raise UnevenError(f"points must be a whole number from 1 to {MAX_POINTS} (segments of the "
                           f"curve), got {points!r}")
    return points


def curve_select(spec: Spec, points: int) -> exp.Select:
    """The query tree: one row per group with its curve (``_uv_curve``) and mean (``_uv_mean``)."""
    keys = [k.copy() for k in spec.keys]
    q = exp.select(*keys, s.alias(call("lorenz_curve", spec.value, points, weight=spec.weight), "_uv_curve"),
                   s.alias(call("generalized_lorenz", spec.value, 1.0, weight=spec.weight), "_uv_mean"),
                   ).from_(spec.source.from_.copy())
    if keys:
        q = q.group_by(*[k.copy() for k in keys]).order_by(
            *[exp.Ordered(this=k.copy(), nulls_first=False) for k in keys])
    return q


def flatten_curves(groups: pd.DataFrame, key_names: list[str], points: int) -> pd.DataFrame:
    """One row per group and grid point: the keys, p, L(p) and μ·L(p) (NaN where the curve is
    undefined: a group whose total is ≤ 0)."""
    rows = []
    for rec in groups.to_dict("records"):
        curve, mean = rec["_uv_curve"], rec["_uv_mean"]
        keys = [rec[k] for k in key_names]
        if curve is None or (isinstance(curve, float) and math.isnan(curve)):
            curve = [{"p": j / points, "lorenz": None} for j in range(points + 1)]
        for pt in curve:
            value = pt["lorenz"]
            lz = math.nan if value is None else float(value)
            mu = math.nan if mean is None or pd.isna(mean) else float(mean)
            rows.append(keys + [float(pt["p"]), lz, lz * mu])
    return pd.DataFrame(rows, columns=key_names + list(POINT_COLUMNS))


def lorenz_points(source, value: str, *, weight: str | None = None, by=None, points: int = 100, con=None,
                  memory_limit: str | None = None, threads: int | None = None,
                  temp_directory: str | None = None) -> pd.DataFrame:
    """The Lorenz curve of each group at p = 0, 1/points, …, 1, computed in DuckDB in one query.

    ``source``: a Parquet/CSV file or glob, a table or view of ``con``, or a DataFrame/Arrow table.
    ``by``: a column name, a comma-separated list or a list of names (none: one curve for all rows).
    Returns a DataFrame with the group columns, ``p``, ``lorenz`` (L(p)) and ``generalized_lorenz``
    (μ·L(p), μ the weighted mean); ``attrs`` records value, weight and group columns.
    """
    check_points(points)
    connection, owned = open_connection(con, memory_limit=memory_limit, threads=threads,
                                        temp_directory=temp_directory)
    try:
        spec = make_spec(connection, source, value, weight, by)
        clash = [k for k in spec.key_names if k.lower() in POINT_COLUMNS]
        if clash:
            raise UnevenError(f"--by {clash[0]}: the points table has a column of that name; rename the "
                               "group column in a view first")
        groups = run_tree(connection, curve_select(spec, points))
    finally:
        if owned:
            connection.close()
    out = flatten_curves(groups, spec.key_names, points)
    out.attrs.update(value=spec.value.name, weight=spec.weight.name if spec.weight is not None else None,
                     by=spec.key_names, source=spec.source.label)
    return out
