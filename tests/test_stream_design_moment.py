"""The moment measures' standard errors with a survey design on the stream plan (``theil_se(x, w, strata := h,
psu := c)``, mld_se, ge_se, atkinson_se, fgt_se at a fixed line and their intervals:
catalog/design_kernels_moment.py, engine/streamdesign_cuts.py) against outside sources: the with-replacement
variance of the PSU totals of the score within strata (Wolter 2007, Introduction to Variance Estimation,
§1.4, cited from memory), computed here over the plain influence functions of tests/test_stream_se_moment.py
(the derivative of each estimator in a row's weight, Deville 1999; from memory) in mpmath at 60 digits for
the logs and powers and in exact fractions (Python ``fractions``) for GE(2), GE(−1) and FGT at a fixed line;
and the window plan on the same query, value for value and NULL for NULL. Batches of 3 rows cut groups, runs
of tied values and PSUs anywhere (read on the reader thread); whole batches hold every group at once.
"""

from __future__ import annotations

from fractions import Fraction
from functools import cache

import duckdb
import mpmath as mp
import numpy as np
import pandas as pd
import pytest

import uneven
from test_numerics import DATA, rel
from test_stream import assert_same_frames
from test_stream_design import survey_table
from test_stream_design_cuts import streamed_as_window, strict_names_the_group
from test_stream_se_moment import exact_scores, mp_scores
from uneven.errors import UnevenError

DESIGNS = {"hc": "strata := h, psu := c", "h": "strata := h", "c": "psu := c"}
# every influence function of test_stream_se_moment (its names), as a call with a design ({d}; {z} the line)
CALLS = {"theil": "theil_se(x, w, {d})", "mld": "mld_se(x, w, {d})", "ge0.5": "ge_se(x, 0.5, w, {d})",
         "ge-0.5": "ge_se(x, -0.5, w, {d})", "ge1.7": "ge_se(x, 1.7, w, {d})", "ge3": "ge_se(x, 3, w, {d})",
         "atk0.5": "atkinson_se(x, 0.5, w, {d})", "atk2.0": "atkinson_se(x, 2, w, {d})",
         "atk1": "atkinson_se(x, 1, w, {d})", "ge2": "ge_se(x, 2, w, {d})", "ge-1": "ge_se(x, -1, w, {d})",
         "fgt0": "fgt_se(x, 0, {z}, w, {d})", "fgt1": "fgt_se(x, 1, {z}, w, {d})", "fgt2": "fgt_se(x, 2, {z}, w, {d})"}


def design_variance(u: list, h: list | None, c: list | None):
    """Σ_h n_h/(n_h − 1) Σ_{c in h} (U_hc − Ū_h)², U_hc = Σ u_k over the rows of PSU c in stratum h (each row its
    own PSU when ``c`` is None, one stratum when ``h`` is None), in the arithmetic of ``u`` (mpmath or exact
    fractions). None where a stratum has one unit."""
    strata: dict = {}
    for k, value in enumerate(u):
        units = strata.setdefault(None if h is None else h[k], {})
        unit = k if c is None else c[k]
        units[unit] = units.get(unit, 0) + value
    v = 0
    for units in strata.values():
        U = list(units.values())
        if len(U) < 2:
            return None
        mean = sum(U) / len(U)
        v += sum((q - mean) ** 2 for q in U) * len(U) / (len(U) - 1)
    return v


def numerics_frame(name: str) -> pd.DataFrame:
    """200 rows of the numerics data, 4 strata × 6 PSUs drawn at random."""
    x, w = DATA[name]
    rng = np.random.default_rng(11)
    n = 200
    return pd.DataFrame({"x": x[:n], "w": w[:n], "h": rng.integers(0, 4, n), "c": rng.integers(0, 6, n)})


@cache
def wanted(name: str, line: float) -> dict:
    """{(design, measure): the design variance of the measure's influence function} on ``numerics_frame(name)``."""
    df = numerics_frame(name)
    x, w = df.x.tolist(), df.w.tolist()
    scores = {k: [mp.mpf(float(b)) * z for b, z in zip(w, zs)] for k, zs in mp_scores(x, w).items()}
    scores.update({k: [Fraction(float(b)) * z for b, z in zip(w, zs)]
                   for k, zs in exact_scores(x, w, Fraction(line)).items()})
    out = {}
    for design in DESIGNS:
        h = df.h.tolist() if "h" in design else None
        c = df.c.tolist() if "c" in design else None
        for measure, u in scores.items():
            out[(design, measure)] = design_variance(u, h, c)
    return out


# Where the window plan's own form has no such digits the stream gives the window plan's value instead (the
# same limit without a design, tests/test_stream_se_moment.py): on "span" A(1) and A(2) lie within 1e-8 of 1
# and E = 1 − A keeps few digits of E
WINDOW_FORM_LIMITS = {"span": {"atk1", "atk2.0"}}


@pytest.mark.parametrize("name", ["pareto", "span"])
def test_every_error_squared_matches_the_influence_functions(name, batch):
    df = numerics_frame(name)
    line = float(np.median(df.x))  # a fixed line inside the values (a double: exact as a fraction)
    sql = "SELECT " + ", ".join(f"{call.format(d=DESIGNS[d], z=repr(line))} AS \"{m}_{d}\""
                                for d in DESIGNS for m, call in CALLS.items()) + " FROM t"
    con = duckdb.connect()
    con.register("t", df)
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes] == ["stream"] * 3
    got = uneven.query(sql, con, ordered="stream").iloc[0]
    window = uneven.query(sql, con, ordered="window").iloc[0] if name in WINDOW_FORM_LIMITS else None
    for (design, measure), v in wanted(name, line).items():
        assert v is not None and v > 0, (design, measure)
        if window is not None and measure in WINDOW_FORM_LIMITS[name]:
            assert rel(got[f"{measure}_{design}"], window[f"{measure}_{design}"]) <= 1e-12, (design, measure)
            continue
        assert rel(got[f"{measure}_{design}"] ** 2, v) <= 1e-12, (design, measure, got[f"{measure}_{design}"])


# ---- the window plan, value for value -------------------------------------------------------------

@pytest.fixture(scope="module")
def survey():
    return survey_table(4207, 500, 3)


ALL_SE = ("theil_se(x, w, {d}) AS th_{s}, mld_ci_lo(x, w, {d}) AS ml_{s}, ge_se(x, 2, w, {d}) AS g2_{s}, "
          "ge_ci_hi(x, -1, w, {d}, level := 0.9) AS gm_{s}, ge_se(x, 0.3, w, {d}) AS g3_{s}, "
          "atkinson_se(x, 0.5, w, {d}) AS a5_{s}, atkinson_ci_lo(x, 1, w, {d}) AS a1_{s}, "
          "atkinson_se(x, 2.5, w, {d}) AS a25_{s}, fgt_se(x, 1, 3.5, w, {d}) AS f1_{s}, "
          "fgt_ci_hi(x, 0, 3.5, w, {d}) AS f0_{s}, theil_se(x, {d}) AS tu_{s}, gini_se(x, w, {d}) AS gs_{s}, "
          "palma_se(x, w, {d}) AS pa_{s}")
FEW_SE = ("theil_se(x, w, {d}) AS th_{s}, mld_se(x, w, {d}) AS ml_{s}, ge_ci_lo(x, -1, w, {d}) AS gm_{s}, "
          "atkinson_se(x, 2.5, w, {d}) AS a25_{s}, fgt_se(x, 1, 3.5, w, {d}) AS f1_{s}, theil_se(x, {d}) AS tu_{s}")


def test_every_error_matches_the_window_plan(survey, batch):
    # every error with strata and PSUs beside the Gini's and a cut-based one (the cells shared by every error
    # of a pass), a few with strata alone and PSUs alone, weighted and unweighted: six streamed passes
    got = streamed_as_window(survey, ALL_SE, FEW_SE)
    # (a group whose NULL stratum holds one weighted row has no variance there: NULL, on both plans)
    assert (got.notna().sum() >= 3).all() and got.th_c.notna().all()


def test_edge_groups(batch):
    # 1 one row (NULL); 2 equal values (exactly 0); 3 a zero value (theil, ge(2), fgt defined; mld, ge(−1),
    # atkinson(1) NULL); 4 a negative value, T > 0 (NULL but fgt); 5 T ≤ 0 (NULL but fgt); 6 no valid row
    # (NULL); 7 a stratum with a single PSU (NULL); 8 a zero weight dropped first, ties across batches;
    # 9 NULL strata and PSUs as values of their own
    g = [1, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 6, 6, 7, 7, 7, 7] + [8] * 8 + [9] * 6
    x = [4.0, 2.0, 2.0, 2.0, 0.0, 1.0, 3.0, 2.0, -1.0, 5.0, 6.0, 2.0, -5.0, 1.0, 2.0, 1.0, None, 1.0,
         1.0, 2.0, 3.0, 4.0] + [1.0, 2.0, 2.0, 2.0, 9.0, 5.0, 2.0, 1.0] + [1.0, 2.0, 3.0, 5.0, 8.0, 3.0]
    w = [1.0, 1.0, 3.0, 0.5, 1.0, 2.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 0.0,
         1.0, 1.0, 1.0, 1.0] + [2.0, 1.0, 3.0, 2.0, 0.0, 2.0, 2.0, 1.0] + [1.0, 2.0, 1.0, 3.0, 1.0, 2.0]
    h = ["a"] * 18 + ["a", "a", "b", "b"] + ["a", "a", "b", "b", "a", "b", "a", "b"] + [None, None, "a", "a", None, "a"]
    c = [1, 1, 2, 3, 1, 2, 1, 2, 1, 2, 1, 2, 1, 2, 1, 2, 1, 2, 1, 2, 3, 3] + [1, 2, 1, 2, 1, 2, 3, 3] \
        + [None, 1, 2, None, None, 1]
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": g, "x": x, "w": w, "h": h, "c": c}))
    d = "strata := h, psu := c"
    sql = (f"SELECT g, theil_se(x, w, {d}) AS th, mld_se(x, w, {d}) AS ml, ge_se(x, 2, w, {d}) AS g2, "
           f"ge_se(x, -1, w, {d}) AS gm, atkinson_ci_hi(x, 1, w, {d}) AS a1, atkinson_se(x, 0, w, {d}) AS a0, "
           f"fgt_se(x, 1, 2.5, w, {d}) AS f1, theil_se(x, w, psu := c) AS tp, mld_se(x, w, strata := h) AS mh "
           "FROM t GROUP BY g ORDER BY g")
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes] == ["stream"] * 3
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.th.isna().tolist() == [True, False, False, True, True, True, True, False, False]
    assert got.ml.isna().tolist() == [True, False, True, True, True, True, True, False, False]
    assert got.f1.isna().tolist() == [True, False, False, False, False, True, True, False, False]
    assert (got.loc[1, ["th", "ml", "g2", "gm", "a1", "a0", "f1", "tp", "mh"]] == 0.0).all()  # equal values: 0
    assert got.a0.notna().sum() == 4 and (got.a0.dropna() == 0.0).all()  # A(0) = 0: an error of exactly 0
    assert not np.isnan(got.tp[6])  # without strata, group 7's PSUs are three units
    for i, rows in ((7, slice(22, 30)), (8, slice(30, 36))):  # against the influence function
        keep = [k for k in range(rows.start, rows.stop) if w[k] > 0]
        z = mp_scores([x[k] for k in keep], [w[k] for k in keep])["theil"]
        v = design_variance([mp.mpf(w[k]) * zk for k, zk in zip(keep, z)], [h[k] for k in keep],
                            [c[k] for k in keep])
        assert v is not None and rel(got.th[i] ** 2, v) <= 1e-12, i


def test_filter_having_cte_and_the_joined_form(survey, batch):
    # count(*) beside the measures: the stream's table joins the main GROUP BY on the keys; a FILTER, HAVING,
    # the scope's CTE and expressions of the results work on it as on the window plan's CTEs
    sql = ("WITH v AS (SELECT * FROM t WHERE w IS NULL OR w < 3) SELECT a, count(*) AS n, round(theil_se(x, w, strata := h, psu := c) FILTER (WHERE b = 'n'), 9) AS th, "
           "gini_se(x, w, strata := h, psu := c) FILTER (WHERE b = 'n') AS g, "
           "atkinson_ci_hi(x, 0.5, w, psu := c) - atkinson(x, 0.5, w) AS half, "
           "gini_se(x, w, psu := c) AS gp FROM v GROUP BY a HAVING mld_se(x, w, strata := h, psu := c) > 0 "
           "ORDER BY a")
    found = uneven.explain(sql, survey, ordered="stream")
    assert [p["kind"] for p in found.passes].count("stream") == 3, found.passes
    assert "joined on the keys" in found.passes[0]["reason"]
    got = uneven.query(sql, survey, ordered="stream")
    assert_same_frames(got, uneven.query(sql, survey, ordered="window"))
    assert len(got) >= 3 and (got.half > 0).all()  # the interval's upper end lies above the estimate


def test_direct_form_null_and_nan_strata(batch):
    # the final SELECT reads the stream's table alone; NULL keys a group; a DOUBLE stratum with NaN (NaN equals
    # NaN in GROUP BY) and NULL apart from it
    con = duckdb.connect()
    rng = np.random.default_rng(8)
    n = 150
    df = pd.DataFrame({"g": rng.choice([1.0, 2.0, np.nan], n), "x": rng.lognormal(0, 1, n),
                       "w": rng.integers(1, 4, n).astype(float), "h": rng.choice([0.0, 1.0, np.nan], n),
                       "nul": rng.random(n) < 0.1, "c": rng.integers(0, 5, n)})
    con.register("src", df)
    con.execute("CREATE TABLE t AS SELECT CASE WHEN isnan(g) THEN NULL ELSE g END AS g, x, w, CASE WHEN nul "
                "THEN NULL ELSE CASE WHEN isnan(h) THEN 'NaN'::DOUBLE ELSE h END END AS h, c FROM src")
    sql = ("SELECT g, theil_se(x, w, strata := h, psu := c) AS th, gini_se(x, w, strata := h, psu := c) AS gs, "
           "ge_ci_lo(x, 2, w, strata := h, psu := c) AS lo FROM t GROUP BY g ORDER BY g")
    found = uneven.explain(sql, con, ordered="auto")  # (beside gini_se: auto streams them)
    assert [p["kind"] for p in found.passes] == ["stream"] and "direct" in found.passes[0]["reason"]
    got = uneven.query(sql, con)
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    rows = con.execute("SELECT x, w, h, c FROM t WHERE g IS NULL").fetchall()
    key = ["NaN" if v is not None and v != v else v for v in (r[2] for r in rows)]  # NaN as one stratum
    xs, ws = [r[0] for r in rows], [r[1] for r in rows]
    u = [mp.mpf(b) * z for b, z in zip(ws, mp_scores(xs, ws)["theil"])]
    v = design_variance(u, key, [r[3] for r in rows])
    assert v is not None and rel(got.th[2] ** 2, v) <= 1e-12


def test_input_policy_errors():
    # a negative weight: the same InputDataError from both plans, naming the row's group; a NaN value stops
    # the stream with the input policy's error naming the group (docs/input-policy.md), as the window plan
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM (VALUES (1, 1.0, 1.0, 1), (1, 2.0, 2.0, 2), (2, 3.0, -1.0, 1), "
                "(2, 4.0, 1.0, 2), (3, 'NaN'::DOUBLE, 1.0, 1), (3, 1.0, 1.0, 2)) v(g, x, w, h)")
    for where in ("g <= 2", "g <> 2"):
        sql = f"SELECT g, theil_se(x, w, strata := h, psu := g), gini_se(x, w, psu := h) FROM t WHERE {where} GROUP BY g"
        errors = []
        for ordered in ("stream", "window"):
            with pytest.raises(UnevenError) as info:
                uneven.query(sql, con, ordered=ordered)
            errors.append((type(info.value).__name__, str(info.value)))
        assert errors[0] == errors[1] and errors[0][0] == "InputDataError", errors
    assert "(the group g=3)" in errors[0][1] and "NaN" in errors[0][1]


def test_explain_auto_and_compile(survey):
    # bench/README.md, "Stream plan, survey designs: the moment measures' errors"
    mixed = "SELECT a, gini_se(x, w, strata := h, psu := c), theil_se(x, w, strata := h, psu := c) FROM t GROUP BY a"
    for ordered in ("stream", "auto"):
        found = uneven.explain(mixed, survey, ordered=ordered)
        assert [p["kind"] for p in found.passes] == ["stream"], (ordered, found.passes)
        assert "survey design (strata, psu) is carried per group" in found.passes[0]["reason"]
    alone = ("SELECT a, theil_se(x, w, strata := h, psu := c), atkinson_se(x, 0.5, w, strata := h, psu := c) "
             "FROM t GROUP BY a")
    found = uneven.explain(alone, survey, ordered="auto")
    assert [p["kind"] for p in found.passes] == ["linearized"]
    assert "moment measures' errors alone need no sort" in found.passes[0]["reason"]
    assert [p["kind"] for p in uneven.explain(alone, survey, ordered="stream").passes] == ["stream"]
    for sql in (mixed, alone):
        assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")


def test_strict_names_the_group_whose_stratum_has_one_psu():
    strict_names_the_group("theil_se(x, w, strata := h, psu := c)")
