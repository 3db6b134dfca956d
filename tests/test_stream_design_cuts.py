"""The cut-based standard errors with a survey design on the stream plan (``lorenz_se(x, p, w, strata :=
h, psu := c)`` and the rest: catalog/design_kernels_cuts.py, engine/streamdesign_cuts.py) against outside
sources: the with-replacement variance of the PSU totals of the score within strata (Wolter 2007,
Introduction to Variance Estimation, §1.4, cited from memory) computed here in exact fractions over the
influence values of tests/test_stream_se.py (Deville 1999 and Osier 2009 for the Lorenz ordinate and
the quantile, Langel & Tillé 2013 for the Gini, the Hall & Sheather 1988 bandwidth; from memory), and
the window plan on the same query, value for value and NULL for NULL. Batches of 3 rows cut groups,
runs of tied values, cuts and PSUs anywhere (read in the caller's thread); whole batches hold every
group at once (read on the reader thread).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from fractions import Fraction
from functools import cache

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from test_numerics import DATA, rel
from test_stream import assert_same_frames
from test_stream_design import survey_table
from test_stream_se import EXACT_NAMES, Exact, exact_z
from uneven.errors import UnevenError

DESIGNS = {"hc": "strata := h, psu := c", "h": "strata := h", "c": "psu := c"}
# the measures of test_stream_se.EXACT_SQL (their p as exact_z reads them), each with a design
MEASURES = {"lorenz": "lorenz_se(x, 0.25, w, {})", "top_share": "top_share_se(x, 0.1, w, {})",
            "generalized_lorenz": "generalized_lorenz_se(x, 0.75, w, {})", "palma": "palma_se(x, w, {})",
            "s80s20": "s80s20_se(x, w, {})", "quantile_w": "quantile_w_se(x, 0.5, w, {})",
            "percentile_ratio": "percentile_ratio_se(x, 0.9, 0.1, w, {})", "wolfson": "wolfson_se(x, w, {})"}
assert list(MEASURES) == EXACT_NAMES


def design_variance(x, w, h, c, z_of: Callable[[Exact], list | None]) -> Fraction | None:
    """Σ_h n_h/(n_h − 1) Σ_{c in h} (U_hc − Ū_h)², U_hc = Σ w_k·z_k over the rows of PSU c in stratum h
    (each row its own PSU when ``c`` is None, one stratum when ``h`` is None), z_k the measure's influence
    values ``z_of(rows)`` over the rows with w > 0, all in exact fractions. None where a stratum has one unit or no
    standard error exists."""
    keep = [i for i in range(len(x)) if w[i] != 0]
    # Exact sorts its rows by (x, w): the same order here, so row k's stratum and PSU stay with it
    # (rows equal in x and w have equal influence values, whatever their order)
    keep.sort(key=lambda i: (Fraction(float(x[i])), Fraction(float(w[i]))))
    e = Exact([x[i] for i in keep], [w[i] for i in keep])
    z = z_of(e)
    if z is None:
        return None
    units: dict = {}
    for k, i in enumerate(keep):
        stratum = units.setdefault(None if h is None else h[i], {})
        unit = i if c is None else c[i]
        stratum[unit] = stratum.get(unit, Fraction(0)) + e.w[k] * z[k]
    v = Fraction(0)
    for per_unit in units.values():
        U = list(per_unit.values())
        if len(U) < 2:
            return None
        mean = sum(U) / len(U)
        v += Fraction(len(U), len(U) - 1) * sum((q - mean) ** 2 for q in U)
    return v


def numerics_frame(name: str) -> pd.DataFrame:
    """~200 rows of the numerics data, 4 strata × 6 PSUs drawn at random."""
    x, w = DATA[name]
    rng = np.random.default_rng(5)
    n = 200
    return pd.DataFrame({"x": x[:n], "w": w[:n], "h": rng.integers(0, 4, n), "c": rng.integers(0, 6, n)})


@cache
def exact_variances(name: str) -> dict:
    df = numerics_frame(name)
    out = {}
    for design in DESIGNS:
        h = df.h.tolist() if "h" in design else None
        c = df.c.tolist() if "c" in design else None
        for measure in MEASURES:
            out[(design, measure)] = design_variance(df.x.tolist(), df.w.tolist(), h, c,
                                                       lambda e, m=measure: exact_z(m, e))
    return out


ALL_DESIGNS_SQL = "SELECT " + ", ".join(f"{sql.format(DESIGNS[d])} AS {m}_{d}" for d in DESIGNS
                                        for m, sql in MEASURES.items()) + " FROM t"


# ---- exact fractions ------------------------------------------------------------------------------

@pytest.mark.parametrize("name", ["span", "offset", "pareto"])
def test_every_error_squared_matches_exact_fractions(name, batch):
    con = duckdb.connect()
    con.register("t", numerics_frame(name))
    assert [p["kind"] for p in uneven.explain(ALL_DESIGNS_SQL, con, ordered="stream").passes] == ["stream"] * 3
    got = uneven.query(ALL_DESIGNS_SQL, con, ordered="stream").iloc[0]
    for (design, measure), v in exact_variances(name).items():
        assert v is not None and v > 0, (design, measure)
        assert rel(got[f"{measure}_{design}"] ** 2, v) <= 1e-12, (design, measure, got[f"{measure}_{design}"])


# ---- the window plan, value for value -------------------------------------------------------------

@pytest.fixture(scope="module")
def survey():
    return survey_table(1004, 500, 3)


ALL_SE = ("lorenz_se(x, 0.3, w, {d}) AS l_{s}, bottom_share_ci_lo(x, 0.5, w, {d}) AS bl_{s}, "
          "top_share_ci_hi(x, 0.1, w, {d}, level := 0.9) AS th_{s}, generalized_lorenz_se(x, 0.9, w, {d}) AS gl_{s}, "
          "palma_se(x, w, {d}) AS pa_{s}, s80s20_ci_lo(x, w, {d}) AS sl_{s}, quantile_w_se(x, 0.37, w, {d}) AS q_{s}, "
          "quantile_w_ci_hi(x, 0.5, w, {d}) AS qh_{s}, percentile_ratio_se(x, 0.9, 0.1, w, {d}) AS pr_{s}, "
          "wolfson_se(x, w, {d}) AS wo_{s}, wolfson_ci_lo(x, w, {d}) AS wl_{s}, lorenz_se(x, 0.3, {d}) AS lu_{s}, "
          "quantile_w_se(x, 0.8, {d}) AS qu_{s}")


FEW_SE = ("lorenz_se(x, 0.3, w, {d}) AS l_{s}, palma_ci_lo(x, w, {d}) AS pa_{s}, quantile_w_se(x, 0.37, w, {d}) "
          "AS q_{s}, wolfson_se(x, w, {d}) AS wo_{s}, top_share_se(x, 0.2, {d}) AS tu_{s}")


def streamed_as_window(con, every: str, few: str) -> pd.DataFrame:
    """``every`` error with strata and PSUs, the ``few`` with strata alone and PSUs alone (each a template
    of {d} the design, {s} its suffix): six streamed passes, equal to the window plan's to 1e-12."""
    sql = ("SELECT a, b, " + ", ".join((every if s == "hc" else few).format(d=d, s=s) for s, d in DESIGNS.items())
           + " FROM t GROUP BY a, b ORDER BY a, b")
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes] == ["stream"] * 6
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"), 1e-12)
    return got


def test_every_error_matches_the_window_plan(survey, batch):
    # every error with strata and PSUs, a few with strata alone and PSUs alone, weighted and unweighted
    got = streamed_as_window(survey, ALL_SE, FEW_SE)
    assert (got.notna().sum() >= len(got) // 2).all()  # (the small NULL-key groups: strata of one PSU, NULL)


def test_joined_form_filter_having_and_expressions(survey, batch):
    # count(*) beside the measures: the stream's table joins the main GROUP BY on the keys; a FILTER,
    # HAVING and expressions of the results work on it as on the window plan's CTE
    # (gini_se beside lorenz_se on one pass: the Gini's design state and the cut-based errors' side by side)
    sql = ("SELECT a, count(*) AS n, round(lorenz_se(x, 0.4, w, strata := h, psu := c) FILTER (WHERE b = 'n'), 9) "
           "AS l, gini_se(x, w, strata := h, psu := c) FILTER (WHERE b = 'n') AS g, "
           "palma_ci_hi(x, w, psu := c) - palma(x, w) AS half FROM t GROUP BY a "
           "HAVING quantile_w_se(x, 0.5, w, strata := h) > 0 ORDER BY a")
    found = uneven.explain(sql, survey, ordered="stream")
    assert [p["kind"] for p in found.passes].count("stream") == 3, found.passes
    got = uneven.query(sql, survey, ordered="stream")
    assert_same_frames(got, uneven.query(sql, survey, ordered="window"))
    assert len(got) >= 3 and (got.half > 0).all()  # the interval's upper end lies above the estimate


def test_edge_groups(batch):
    # g1 one row (NULL); g2 equal values (0; the quantile NULL: no density); g3 T ≤ 0 (NULL for the
    # shares, not for the quantile); g4 no valid row (NULL); g5 a stratum with a single PSU (NULL);
    # g6 integer weights that put C exactly on p·W = 0.5·12, tied values across the cut, a zero
    # weight dropped first; g7 NULL strata and PSUs as values of their own
    con = duckdb.connect()
    g = [1, 2, 2, 2, 3, 3, 3, 4, 4, 5, 5, 5, 5, 6, 6, 6, 6, 6, 6, 6, 7, 7, 7, 7, 7, 7]
    x = [4.0, 2.0, 2.0, 2.0, -5.0, 0.5, 1.0, None, 1.0, 1.0, 2.0, 3.0, 4.0, 1.0, 2.0, 2.0, 2.0, 9.0, 5.0, 2.0,
         1.0, 2.0, 3.0, 5.0, 8.0, 3.0]
    w = [1.0, 1.0, 3.0, 0.5, 1.0, 1.0, 1.0, 1.0, 0.0, 1.0, 1.0, 1.0, 1.0, 2.0, 1.0, 3.0, 2.0, 0.0, 2.0, 2.0,
         1.0, 2.0, 1.0, 3.0, 1.0, 2.0]
    h = ["a"] * 10 + ["b", "b", "b"] + ["a", "a", "b", "b", "a", "b", "a"] + [None, None, "a", "a", None, "a"]
    c = [1, 1, 2, 3, 1, 2, 3, 1, 2, 1, 2, 3, 3, 1, 2, 1, 2, 1, 2, 3, None, 1, 2, None, None, 1]
    con.register("t", pd.DataFrame({"g": g, "x": x, "w": w, "h": h, "c": c}))
    design = "strata := h, psu := c"
    sql = (f"SELECT g, lorenz_se(x, 0.5, w, {design}) AS l, top_share_ci_lo(x, 0.2, w, {design}) AS t, "
           f"quantile_w_se(x, 0.5, w, {design}) AS q, generalized_lorenz_se(x, 0.5, w, {design}) AS gl, "
           f"palma_se(x, w, {design}) AS pa, wolfson_se(x, w, {design}) AS wo, lorenz_se(x, 0.5, w, psu := c) AS lp "
           "FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.l.isna().tolist() == [True, False, True, True, True, False, False]
    assert got.l[1] == 0.0 and got.gl[1] == 0.0  # every value equal: exactly 0
    assert math.isnan(got.q[1]) and not math.isnan(got.q[2])
    assert not math.isnan(got.lp[4])  # without strata, g5's PSUs are three units
    for i, rows in ((5, slice(13, 20)), (6, slice(20, 26))):
        v = design_variance(x[rows], w[rows], h[rows], c[rows], lambda e: e.z_lorenz(Fraction(1, 2)))
        assert v is not None and rel(got.l[i] ** 2, v) <= 1e-12, i


def test_p_at_zero_and_one(batch):
    # L(0) = 0 and L(1) = 1 whatever the sample: a score of 0, so exactly 0 (NULL where a stratum has one
    # PSU); the quantile at 0 or 1 is the sample's minimum or maximum: no standard error (NULL)
    con = duckdb.connect()
    rng = np.random.default_rng(7)
    n = 90
    con.register("t", pd.DataFrame({"g": rng.integers(0, 3, n), "x": rng.lognormal(0, 1, n),
                                    "w": rng.uniform(0.5, 2.0, n), "h": rng.integers(0, 2, n),
                                    "c": rng.integers(0, 4, n)}))
    design = "strata := h, psu := c"
    sql = (f"SELECT g, lorenz_se(x, 0, w, {design}) AS l0, lorenz_se(x, 1, w, {design}) AS l1, "
           f"quantile_w_se(x, 0, w, {design}) AS q0, quantile_w_ci_hi(x, 1, w, {design}) AS q1, "
           f"top_share_se(x, 1, w, {design}) AS t1, generalized_lorenz_se(x, 1, w, {design}) AS g1, "
           f"top_share_se(x, 0, w, psu := c) AS t0 FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.q0.isna().all() and got.q1.isna().all()
    assert (got[["l0", "l1", "t1", "t0"]] == 0.0).all().all()
    assert got.g1.notna().all() and (got.g1 > 0).all()  # GL(1) is the mean: its error is not 0


def test_without_group_keys_and_with_nan_strata(batch):
    # no GROUP BY: one row; a DOUBLE stratum with NaN (NaN equals NaN in GROUP BY) and NULL apart from it
    con = duckdb.connect()
    rng = np.random.default_rng(8)
    n = 150
    df = pd.DataFrame({"x": rng.lognormal(0, 1, n), "w": rng.integers(1, 4, n).astype(float),
                       "h": rng.choice([0.0, 1.0, np.nan], n), "nul": rng.random(n) < 0.1, "c": rng.integers(0, 5, n)})
    con.register("src", df)
    con.execute("CREATE TABLE t AS SELECT x, w, CASE WHEN nul THEN NULL ELSE CASE WHEN isnan(h) THEN 'NaN'::DOUBLE "
                "ELSE h END END AS h, c FROM src")
    sql = ("SELECT palma_se(x, w, strata := h, psu := c) AS palma, quantile_w_ci_hi(x, 0.5, w, strata := h) AS hi "
           "FROM t")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    rows = con.execute("SELECT x, w, h, c FROM t").fetchall()
    key = ["NaN" if v is not None and v != v else v for v in (r[2] for r in rows)]  # NaN as one stratum
    v = design_variance([r[0] for r in rows], [r[1] for r in rows], key, [r[3] for r in rows],
                        lambda e: exact_z("palma", e))
    assert v is not None and rel(got.palma[0] ** 2, v) <= 1e-12


def test_input_policy_errors():
    # a negative weight: the same InputDataError from both plans, naming the row's group
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM (VALUES (1, 1.0, 1.0, 1), (1, 2.0, 2.0, 2), (2, 3.0, -1.0, 1), "
                "(2, 4.0, 1.0, 2), (3, 'NaN'::DOUBLE, 1.0, 1), (3, 1.0, 1.0, 2)) v(g, x, w, h)")
    sql = "SELECT g, lorenz_se(x, 0.4, w, strata := h, psu := g) FROM t WHERE g <= 2 GROUP BY g"
    errors = []
    for ordered in ("stream", "window"):
        with pytest.raises(UnevenError) as info:
            uneven.query(sql, con, ordered=ordered)
        errors.append((type(info.value).__name__, str(info.value)))
    assert errors[0] == errors[1] and errors[0][0] == "InputDataError"
    # a NaN value stops the stream with the input policy's error naming the group (docs/input-policy.md)
    with pytest.raises(UnevenError, match=r"NaN or infinite value in the value argument x \(the group g=3\)"):
        uneven.query("SELECT g, quantile_w_se(x, 0.5, w, strata := h) FROM t WHERE g <> 2 GROUP BY g", con,
                     ordered="stream")


def test_explain_auto_and_compile(survey):
    sql = "SELECT a, lorenz(x, 0.4, w), lorenz_se(x, 0.4, w, strata := h, psu := c) FROM t GROUP BY a"
    for ordered in ("stream", "auto"):
        found = uneven.explain(sql, survey, ordered=ordered)
        assert [p["kind"] for p in found.passes] == ["stream"], (ordered, found.passes)
        assert "survey design (strata, psu) is carried per group" in found.passes[0]["reason"]
    assert [p["kind"] for p in uneven.explain(sql, survey, ordered="window").passes] == ["linearized"]
    assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")


def strict_names_the_group(call: str) -> None:
    """Strict mode (docs/input-policy.md): ``call`` (an error with strata h and PSUs c) is NULL for the group
    g=2, whose second stratum has one PSU; strict, an UndefinedResultError names the group, on both plans."""
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 1, 1, 2, 2, 2, 2], "x": [1.0, 2.0, 3.0, 4.0, 1.0, 2.0, 3.0, 4.0],
                                    "w": [1.0, 2.0, 1.0, 1.0, 1.0, 2.0, 1.0, 1.0], "h": [0, 0, 1, 1, 0, 0, 1, 1],
                                    "c": [1, 2, 3, 4, 1, 2, 3, 3]}))
    sql = f"SELECT g, {call} AS e FROM t GROUP BY g ORDER BY g"
    assert uneven.query(sql, con, ordered="stream").e.isna().tolist() == [False, True]
    for ordered in ("stream", "window"):
        with pytest.raises(uneven.UndefinedResultError, match="the group g=2"):
            uneven.query(sql, con, ordered=ordered, strict=True)


def test_strict_names_the_group_whose_stratum_has_one_psu():
    strict_names_the_group("lorenz_se(x, 0.5, w, strata := h, psu := c)")
