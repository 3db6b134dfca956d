"""Every catalog measure, weighted and not, per group (NULL key included, ties in the values), on
every engine (tests/engines.py: DuckDB, PostgreSQL, Spark, SQLite), against the numpy reference
(``uneven.reference``, itself checked in test_reference.py against brute force, exact fractions
and closed forms); then query shapes (WHERE, HAVING, CTE source, no GROUP BY, GROUP BY ALL over an
expression) and the errors a query must raise. Tolerance 1e-9 relative (the contract).

Engines that start slowly get few queries: all cases run in one batched query per engine (a
column per call), and each test reads its column from that result."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from conftest import make_groups
from uneven import reference as R
from uneven.reference import poverty as RP
from uneven.reference import se as RSE
from uneven.reference import structure as RS

# (SQL call template, reference call); {w} is ", w" or "" ; the reference gets (x, w) arrays
CASES = [
    ("gini(x{w})", lambda x, w, e: R.gini(x, w)),
    ("gini_corrected(x{w})", lambda x, w, e: R.gini_corrected(x, w)),
    ("lorenz(x, 0.3{w})", lambda x, w, e: R.lorenz(x, 0.3, w)),
    ("lorenz(x, 0.0{w})", lambda x, w, e: R.lorenz(x, 0.0, w)),
    ("lorenz(x, 1{w})", lambda x, w, e: R.lorenz(x, 1.0, w)),
    ("generalized_lorenz(x, 0.5{w})", lambda x, w, e: R.generalized_lorenz(x, 0.5, w)),
    ("bottom_share(x, 0.4{w})", lambda x, w, e: R.bottom_share(x, 0.4, w)),
    ("top_share(x, 0.1{w})", lambda x, w, e: R.top_share(x, 0.1, w)),
    ("top_share(x, 0.01{w})", lambda x, w, e: R.top_share(x, 0.01, w)),
    ("palma(x{w})", lambda x, w, e: R.palma(x, w)),
    ("s80s20(x{w})", lambda x, w, e: R.s80s20(x, w)),
    ("quantile_w(x, 0.5{w})", lambda x, w, e: R.quantile_w(x, 0.5, w)),
    ("quantile_w(x, 0.9{w})", lambda x, w, e: R.quantile_w(x, 0.9, w)),
    ("quantile_w(x, 0{w})", lambda x, w, e: R.quantile_w(x, 0.0, w)),
    ("quantile_w(x, 1{w})", lambda x, w, e: R.quantile_w(x, 1.0, w)),
    ("percentile_ratio(x, 0.9, 0.1{w})", lambda x, w, e: R.percentile_ratio(x, 0.9, 0.1, w)),
    ("lorenz_curve(x, 5{w})", lambda x, w, e: R.lorenz_curve(x, 5, w)),
    ("hoover(x{w})", lambda x, w, e: R.hoover(x, w)),
    ("theil(x{w})", lambda x, w, e: R.theil(x, w)),
    ("mld(x{w})", lambda x, w, e: R.mld(x, w)),
    ("ge(x, 2{w})", lambda x, w, e: R.ge(x, 2.0, w)),
    ("ge(x, -1{w})", lambda x, w, e: R.ge(x, -1.0, w)),
    ("ge(x, 0.5{w})", lambda x, w, e: R.ge(x, 0.5, w)),
    ("ge(x, 0{w})", lambda x, w, e: R.ge(x, 0.0, w)),
    ("ge(x, 1{w})", lambda x, w, e: R.ge(x, 1.0, w)),
    ("atkinson(x, 0.5{w})", lambda x, w, e: R.atkinson(x, 0.5, w)),
    ("atkinson(x, 1{w})", lambda x, w, e: R.atkinson(x, 1.0, w)),
    ("atkinson(x, 2{w})", lambda x, w, e: R.atkinson(x, 2.0, w)),
    ("cv(x{w})", lambda x, w, e: R.cv(x, w)),
    # structure measures: e (small integers, many ties) serves as subgroup, outcome or ranking
    ("ge_between(x, 2, e{w})", lambda x, w, e: RS.ge_between(x, 2.0, e, w)),
    ("ge_within(x, 2, e{w})", lambda x, w, e: RS.ge_within(x, 2.0, e, w)),
    ("ge_between(x, 1, e{w})", lambda x, w, e: RS.ge_between(x, 1.0, e, w)),
    ("ge_within(x, 1, e{w})", lambda x, w, e: RS.ge_within(x, 1.0, e, w)),
    ("ge_between(x, 0, e{w})", lambda x, w, e: RS.ge_between(x, 0.0, e, w)),
    ("ge_within(x, 0, e{w})", lambda x, w, e: RS.ge_within(x, 0.0, e, w)),
    ("ge_within(x, -1, e{w})", lambda x, w, e: RS.ge_within(x, -1.0, e, w)),
    ("concentration(e, x{w})", lambda x, w, e: RS.concentration(e, x, w)),
    ("concentration(x, e{w})", lambda x, w, e: RS.concentration(x, e, w)),
    ("concentration_wagstaff(e, x, 0, 5{w})", lambda x, w, e: RS.concentration_wagstaff(e, x, 0.0, 5.0, w)),
    ("concentration_erreygers(e, x, 0, 5{w})", lambda x, w, e: RS.concentration_erreygers(e, x, 0.0, 5.0, w)),
    ("kakwani(e, x{w})", lambda x, w, e: RS.kakwani(e, x, w)),
    ("reynolds_smolensky(x, e{w})", lambda x, w, e: RS.reynolds_smolensky(x, e, w)),
    ("gini_diff(x, e{w})", lambda x, w, e: RS.gini_diff(x, e, w)),
    ("gini_diff_se(x, e{w})", lambda x, w, e: RS.gini_diff_se(x, e, w)),
    # poverty lines and polarization (reference.poverty, checked in test_poverty.py)
    ("below_line_share(x, 0.6{w})", lambda x, w, e: RP.below_line_share(x, 0.6, w)),
    ("below_line_share(x, 1{w})", lambda x, w, e: RP.below_line_share(x, 1.0, w)),
    ("median_gap(x, 0.6{w})", lambda x, w, e: RP.median_gap(x, 0.6, w)),
    ("fgt_relative(x, 0, 0.6{w})", lambda x, w, e: RP.fgt_relative(x, 0.0, 0.6, w)),
    ("fgt_relative(x, 2, 0.5{w})", lambda x, w, e: RP.fgt_relative(x, 2.0, 0.5, w)),
    ("fgt(x, 0, 12{w})", lambda x, w, e: RP.fgt(x, 0.0, 12.0, w)),
    ("fgt(x, 1, 12{w})", lambda x, w, e: RP.fgt(x, 1.0, 12.0, w)),
    ("fgt(x, 1.5, 12{w})", lambda x, w, e: RP.fgt(x, 1.5, 12.0, w)),
    ("wolfson(x{w})", lambda x, w, e: RP.wolfson(x, w)),
    ("below_line_share_se(x, 0.6{w})", lambda x, w, e: RSE.se("below_line_share", x, (0.6,), w)),
    ("median_gap_se(x, 0.6{w})", lambda x, w, e: RSE.se("median_gap", x, (0.6,), w)),
    ("fgt_relative_se(x, 2, 0.6{w})", lambda x, w, e: RSE.se("fgt_relative", x, (2.0, 0.6), w)),
    ("fgt_se(x, 1, 12{w})", lambda x, w, e: RSE.se("fgt", x, (1.0, 12.0), w)),
    ("wolfson_se(x{w})", lambda x, w, e: RSE.se("wolfson", x, (), w)),
]
ENTITY_CASES = [
    ("hhi(x)", lambda x, w, e: R.hhi(x)),
    ("hhi(x, e)", lambda x, w, e: R.hhi(x, e)),
    ("cr(x, 1)", lambda x, w, e: R.cr(x, 1)),
    ("cr(x, 3, e)", lambda x, w, e: R.cr(x, 3, e)),
    ("cr(x, 50, e)", lambda x, w, e: R.cr(x, 50, e)),
]


def close(got, want, rel=1e-9, abs_=1e-12) -> bool:
    """got equals the reference's want: NULL (None) only for None, a value within rel (or abs_ near 0).
    A NaN never matches: the input policy never gives NaN (the engines return NULL as None)."""
    if isinstance(got, float) and math.isnan(got):
        return False
    if want is None:
        return got is None or got is pd.NA
    if isinstance(want, list):
        if isinstance(got, str):
            got = json.loads(got)  # SQLite: list results are JSON text
        return got is not None and len(got) == len(want) and all(
            close(g["p"], p) and close(g["lorenz"], v) for g, (p, v) in zip(got, want))
    return got is not None and got is not pd.NA and abs(float(got) - want) <= max(rel * abs(want), abs_)


def _is_null(v) -> bool:
    """A missing group key (pandas groups a NULL key as nan); values go through close()."""
    return v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v))


def _expected(df: pd.DataFrame, ref, weighted: bool, entity: bool, key=None):
    """{group key (None for NULL): reference value}; ``key`` picks the grouping column (None: one group)."""
    out = {}
    groups = df.groupby(key, dropna=False, sort=False) if key else [(None, df)]
    for k, d in groups:
        k = None if _is_null(k) else k
        d = d[d["x"].notna()]
        if entity:
            out[k] = ref(d["x"].to_numpy(float), None, d["e"].to_numpy())
            continue
        if weighted:
            d = d[d["w"].notna()]
        w = d["w"].to_numpy(float) if weighted else None
        out[k] = ref(d["x"].to_numpy(float), w, d["e"].to_numpy())
    return out


def _row_key(row, key: str | None):
    if key is None:
        return None
    v = row[key]
    return None if _is_null(v) else v


# Every case as (label, SQL call, reference, weighted, entity)
ALL = ([(c[0].format(w=", w" if wt else ""), c[0].format(w=", w" if wt else ""), c[1], wt, False)
        for wt in (False, True) for c in CASES]
       + [(c[0], c[0], c[1], False, True) for c in ENTITY_CASES])


@pytest.fixture(scope="module")
def data(engine):
    df = make_groups()
    engine.load(df)
    return df


@pytest.fixture(scope="module")
def batch(engine, data):
    """All cases in one query: SELECT grp, call_1 AS m1, … FROM t GROUP BY grp."""
    calls = ", ".join(f"{call} AS m{i}" for i, (_, call, _, _, _) in enumerate(ALL))
    return engine.run(f"SELECT grp, {calls} FROM t GROUP BY grp")


def _check(res, df, column, label, ref, weighted, entity, key="grp"):
    want = _expected(df, ref, weighted, entity, key)
    assert len(res) == len(want), f"{label}: {len(res)} groups, want {len(want)}"
    for _, row in res.iterrows():
        k = _row_key(row, key)
        assert k in want, f"{label}: unexpected group {k!r}"
        got = row[column]
        if isinstance(got, np.ndarray):
            got = list(got)
        assert close(got, want[k]), f"{label} group {k}: got {got}, want {want[k]}"


@pytest.mark.parametrize("index", range(len(ALL)), ids=[f"{c[0]}" + ("-weighted" if c[3] else "") for c in ALL])
def test_measure_matches_reference(engine, data, batch, index):
    label, _, ref, weighted, entity = ALL[index]
    _check(batch, data, f"m{index}", label, ref, weighted, entity)


# Query shapes, each one query carrying measures of every pass kind, weighted and not.
SHAPE_CALLS = [
    ("gini(x, w)", lambda x, w, e: R.gini(x, w), True, False),
    ("gini(x)", lambda x, w, e: R.gini(x), False, False),
    ("top_share(x, 0.1, w)", lambda x, w, e: R.top_share(x, 0.1, w), True, False),
    ("quantile_w(x, 0.5, w)", lambda x, w, e: R.quantile_w(x, 0.5, w), True, False),
    ("lorenz_curve(x, 4)", lambda x, w, e: R.lorenz_curve(x, 4), False, False),
    ("theil(x, w)", lambda x, w, e: R.theil(x, w), True, False),
    ("atkinson(x, 2)", lambda x, w, e: R.atkinson(x, 2.0), False, False),
    ("cv(x, w)", lambda x, w, e: R.cv(x, w), True, False),
    ("hoover(x)", lambda x, w, e: R.hoover(x), False, False),
    ("cr(x, 2, e)", lambda x, w, e: R.cr(x, 2, e), False, True),
    ("hhi(x)", lambda x, w, e: R.hhi(x), False, False),
]
_CALLS = ", ".join(f"{c[0]} AS m{i}" for i, c in enumerate(SHAPE_CALLS))
SHAPES = {  # name: (query, rows the measures see, grouping column of the result or None)
    "where": (f"SELECT grp, {_CALLS} FROM t WHERE x > 20 GROUP BY grp",
              lambda df: df[df["x"].fillna(-1) > 20], "grp"),
    "having": (f"SELECT grp, {_CALLS} FROM t GROUP BY grp HAVING count(*) > 65",
               lambda df: df[df.groupby("grp", dropna=False)["x"].transform("size") > 65], "grp"),
    "cte_source": (f"WITH src AS (SELECT grp, x, w, e FROM t WHERE w IS NOT NULL AND grp <> 'g0') "
                   f"SELECT grp, {_CALLS} FROM src GROUP BY grp",
                   lambda df: df[df["w"].notna() & df["grp"].notna() & (df["grp"] != "g0")], "grp"),
    "whole_table": (f"SELECT {_CALLS} FROM t", lambda df: df, None),
    "group_by_all_expression": (f"SELECT upper(grp) AS k, {_CALLS} FROM t GROUP BY ALL",
                                lambda df: df.assign(k=df["grp"].str.upper()), "k"),
}


@pytest.mark.parametrize("shape", sorted(SHAPES))
def test_query_shape_matches_reference(engine, data, shape):
    sql, rows, key = SHAPES[shape]
    res = engine.run(sql)
    df = rows(data)
    for i, (call, ref, weighted, entity) in enumerate(SHAPE_CALLS):
        _check(res, df, f"m{i}", f"{shape}: {call}", ref, weighted, entity, key)


def test_negative_weight_stops_the_query(engine, data):
    # the contract (DESIGN.md): a negative weight is an error where the engine can raise in SQL
    from engines import EngineError
    with pytest.raises(EngineError, match="uneven: negative weight"):
        engine.run("SELECT grp, gini(x, w - 3) FROM t GROUP BY grp")


def test_strict_names_the_undefined_group(engine, data):
    # no row has x > 1e9, so every group is empty and gini is undefined (NULL)
    from engines import EngineError
    with pytest.raises(EngineError, match=r"uneven: gini\(x\) is undefined \(NULL\) for the group grp="):
        engine.run("SELECT grp, gini(x) FILTER (WHERE x > 1e9) FROM t GROUP BY grp", strict=True)
