"""Every catalog measure, weighted and not, per group (NULL key included), on every engine,
against the numpy reference (``ineqsql.reference``, itself checked in test_reference.py against
brute force, exact fractions and closed forms). Tolerance 1e-9 relative (the contract)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from conftest import make_groups
from ineqsql import reference as R
from ineqsql import reference_structure as RS

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
]
ENTITY_CASES = [
    ("hhi(x)", lambda x, w, e: R.hhi(x)),
    ("hhi(x, e)", lambda x, w, e: R.hhi(x, e)),
    ("cr(x, 1)", lambda x, w, e: R.cr(x, 1)),
    ("cr(x, 3, e)", lambda x, w, e: R.cr(x, 3, e)),
    ("cr(x, 50, e)", lambda x, w, e: R.cr(x, 50, e)),
]


def close(got, want, rel=1e-9, abs_=1e-12) -> bool:
    if want is None:
        return got is None or (isinstance(got, float) and math.isnan(got)) or got is pd.NA
    if isinstance(want, list):
        return len(got) == len(want) and all(
            close(g["p"], p) and close(g["lorenz"], v) for g, (p, v) in zip(got, want))
    return got is not None and abs(float(got) - want) <= max(rel * abs(want), abs_)


def _expected(df: pd.DataFrame, ref, weighted: bool, entity: bool):
    out = {}
    for key, d in df.groupby("grp", dropna=False, sort=False):
        d = d[d["x"].notna()]
        if entity:
            out[key] = ref(d["x"].to_numpy(float), None, d["e"].to_numpy())
            continue
        if weighted:
            d = d[d["w"].notna()]
        w = d["w"].to_numpy(float) if weighted else None
        out[key] = ref(d["x"].to_numpy(float), w, d["e"].to_numpy())
    return out


def _check(engine, df, template, ref, weighted, entity=False):
    call = template.format(w=", w" if weighted else "")
    res = engine.run(f"SELECT grp, {call} AS m FROM t GROUP BY grp")
    want = _expected(df, ref, weighted, entity)
    assert len(res) == len(want)
    for _, row in res.iterrows():
        key = None if row["grp"] is None or (isinstance(row["grp"], float) and math.isnan(row["grp"])) else row["grp"]
        key = next(k for k in want if (k is None and key is None) or k == key or
                   (isinstance(k, float) and math.isnan(k) and key is None))
        got = row["m"]
        if isinstance(got, np.ndarray):
            got = list(got)
        assert close(got, want[key]), f"{call} group {key}: got {got}, want {want[key]}"


@pytest.fixture(scope="module")
def data(engine):
    df = make_groups()
    engine.load(df)
    return df


@pytest.mark.parametrize("weighted", [False, True], ids=["unweighted", "weighted"])
@pytest.mark.parametrize("template,ref", CASES, ids=[c[0].format(w="") for c in CASES])
def test_measure_matches_reference(engine, data, template, ref, weighted):
    _check(engine, data, template, ref, weighted)


@pytest.mark.parametrize("template,ref", ENTITY_CASES, ids=[c[0] for c in ENTITY_CASES])
def test_concentration_matches_reference(engine, data, template, ref):
    _check(engine, data, template, ref, weighted=False, entity=True)
