"""Where inequality comes from: the GE decomposition by subgroup and the Gini by income source."""

from __future__ import annotations

import math

import pandas as pd

from uneven.engine.frames import callers_frame
from uneven.errors import MeasureArgumentError
from uneven.sqltree import build as s
from uneven.tables.base import Spec, group_labels, parse_expression, session


# ---------------------------------------------------------------------------------------- GE
def decompose(relation: str, x: str, subgroup: str, *, alpha: float = 0.0, weight: str | None = None,
              by=(), con=None) -> pd.DataFrame:
    """GE(α) of ``x`` split into between- and within-subgroup parts, per group of ``by``.

    One row per subgroup (component ``subgroup``: ``group_mean``, ``weight_share`` v (share of the
    group's weight; of its rows when unweighted), ``value_share`` s (share of the group's total of
    ``x``), ``group_ge`` (the subgroup's own GE) and ``ge_term``, its within term v^(1−α)·s^α·GE_g)
    and three summary rows (``within``, ``between``, ``total``: the value in ``ge_term``). Subgroup
    terms add up to ``within``; within + between = total. Columns: docs/structure.md. Rows with a
    NULL value, weight or subgroup are skipped.
    """
    fn = "decompose"
    if not isinstance(alpha, (int, float)) or not math.isfinite(alpha):
        raise MeasureArgumentError(f"{fn}: alpha must be a finite number, got {alpha!r}")
    spec = Spec(fn, relation, by, weight)
    xv, sg = parse_expression(x, "value", fn), parse_expression(subgroup, "subgroup", fn)
    a = s.lit(float(alpha))
    per = spec.select([s.alias(sg.copy(), "subgroup"), s.alias(spec.wsum(), "_uv_wg"),
                       s.alias(spec.wsum(xv), "_uv_tg"), s.alias(spec.measure("ge", xv, a), "ge")], [xv, sg], [sg])
    tot = spec.select([s.alias(spec.measure("ge", xv, a), "total"),
                       s.alias(spec.measure("ge_between", xv, a, sg), "between"),
                       s.alias(spec.measure("ge_within", xv, a, sg), "within")], [xv, sg])
    with session(spec, con, callers_frame()) as run:
        parts, totals = run(per), run(tot)
    keys = spec.names()
    frames = []
    for _, row in totals.iterrows():
        mine = parts
        for k in keys:
            mine = mine[mine[k].isna()] if pd.isna(row[k]) else mine[mine[k] == row[k]]
        W, T = mine["_uv_wg"].sum(), mine["_uv_tg"].sum()
        sub = mine[keys + ["subgroup"]].copy()
        sub.insert(len(keys), "component", "subgroup")
        sub["group_mean"] = mine["_uv_tg"] / mine["_uv_wg"]
        sub["weight_share"] = mine["_uv_wg"] / W
        sub["value_share"] = mine["_uv_tg"] / T if T else float("nan")
        sub["group_ge"] = mine["ge"]
        defined = not pd.isna(row["total"])
        sub["ge_term"] = [_within_term(v, sh, g, alpha) if defined else None
                          for v, sh, g in zip(sub["weight_share"], sub["value_share"], sub["group_ge"])]
        summary = pd.DataFrame([{**{k: row[k] for k in keys}, "component": c, "ge_term": row[c]}
                                for c in ("within", "between", "total")])
        frames += [sub.sort_values("subgroup", kind="stable"), summary]
    out = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=keys + ["component"])
    return spec.rename(out, group_labels(by))


def _within_term(v: float, share: float, ge: float | None, alpha: float) -> float:
    if share == 0 or ge is None or pd.isna(ge):
        return 0.0  # a subgroup of zeros (α > 0) holds no income: its term is 0
    return v ** (1 - alpha) * share ** alpha * ge


# ------------------------------------------------------------------------------ income sources
def gini_sources(relation: str, sources: list[str], *, weight: str | None = None, by=(),
                 con=None) -> pd.DataFrame:
    """Gini of the total of ``sources`` decomposed by source (Lerman and Yitzhaki 1985, cited from memory).

    Per source: ``part_of_total`` S_k (its share of the total), ``own_gini`` G_k,
    ``conc_by_total`` C_k (its concentration ranked by the total, mid-ranks for ties),
    ``corr_with_total`` R_k = C_k / G_k (the Gini correlation), ``gini_points`` S_k·C_k (they add
    up to the Gini of the total), ``part_of_gini`` S_k·C_k/G, and the change in the Gini when the
    source grows by 1% for everyone: ``gini_change_1pct`` 0.01·S_k·(C_k − G) and
    ``gini_pct_change_1pct`` S_k·C_k/G − S_k (in percent of G). A ``total`` row closes each group.
    Columns: docs/structure.md. Rows with a NULL source or weight are skipped.
    """
    fn = "gini_sources"
    if isinstance(sources, str) or len(sources or ()) < 2:
        raise MeasureArgumentError(f"{fn}: give at least two source columns, got {sources!r}")
    spec = Spec(fn, relation, by, weight)
    cols = [parse_expression(c, "source", fn) for c in sources]
    total = cols[0].copy()
    for c in cols[1:]:
        total = s.add(total, c.copy())
    items = [s.alias(spec.measure("gini", total), "_uv_g"), s.alias(spec.wsum(total), "_uv_t")]
    for i, c in enumerate(cols):
        items += [s.alias(spec.wsum(c), f"_uv_t{i}"), s.alias(spec.measure("gini", c), f"_uv_g{i}"),
                  s.alias(spec.measure("concentration", c, total), f"_uv_c{i}")]
    with session(spec, con, callers_frame()) as run:
        res = run(spec.select(items, cols))
    keys, rows = spec.names(), []
    for _, r in res.iterrows():
        G, T = r["_uv_g"], r["_uv_t"]
        for i, name in enumerate(sources):
            S = r[f"_uv_t{i}"] / T if T else None
            Gk, Ck = _num(r[f"_uv_g{i}"]), _num(r[f"_uv_c{i}"])
            points = share = change = pct_change = None
            if S is not None and Ck is not None and not pd.isna(G):
                points, change = S * Ck, 0.01 * S * (Ck - G)
                if G:
                    share, pct_change = S * Ck / G, S * Ck / G - S
            rows.append({**{k: r[k] for k in keys}, "source": name, "part_of_total": S, "own_gini": Gk,
                         "conc_by_total": Ck, "corr_with_total": Ck / Gk if Ck is not None and Gk else None,
                         "gini_points": points, "part_of_gini": share, "gini_change_1pct": change,
                         "gini_pct_change_1pct": pct_change})
        rows.append({**{k: r[k] for k in keys}, "source": "total", "part_of_total": 1.0, "own_gini": _num(G),
                     "conc_by_total": _num(G), "corr_with_total": 1.0, "gini_points": _num(G),
                     "part_of_gini": 1.0 if not pd.isna(G) else None})
    return spec.rename(pd.DataFrame(rows), group_labels(by))


def _num(v):
    return None if v is None or pd.isna(v) else float(v)
