"""The stream plan's moment measures' standard errors (catalog/kernels_se_moment.py,
engine/streamse_moment.py): theil_se, mld_se, ge_se, atkinson_se and fgt_se (a fixed line) with their
intervals, without a survey design.

Checked against the variance n/(n−1)·Σ(u_k − ū)², u_k = w_k·z_k, of the textbook influence functions
written here in the plain (uncentred) form, independently of the compiler's centred terms: mpmath at
60 digits for the logs and powers, exact fractions (Python ``fractions``) for FGT at a fixed line and
GE(2), GE(−1), whose influence functions are rational (the derivative of each estimator with respect to
a row's weight, Deville 1999; the formulas below derived from the definitions, as in docs/uncertainty.md;
from memory). And against the window plan on the same queries, value for value and NULL for NULL, with
batches of 3 rows and whole, so batches cut groups and runs of tied values anywhere.
"""

from __future__ import annotations

import math
from fractions import Fraction

import duckdb
import mpmath as mp
import numpy as np
import pandas as pd
import pytest

import uneven
import uneven.compiler.plan as plan_module
from test_numerics import DATA, rel
from test_stream import assert_same_frames

# ---- the influence functions, in the plain form ----------------------------------------------------

def variance(w, z):
    """n/(n−1)·Σ (u_k − ū)², u_k = w_k·z_k (with replacement; the window plan's estimator)."""
    u = [b * v for b, v in zip(w, z)]
    n = len(u)
    mean = sum(u) / n
    return sum((v - mean) ** 2 for v in u) * n / (n - 1)


def mp_scores(x, w) -> dict[str, list]:
    """z_k of each measure in mpmath (x > 0), from the derivative of the estimator in w_k:
    Theil Th = A/T − ln μ, A = Σ w x ln x:          z = [x ln x − (A/T + 1)·x]/T + 1/W
    MLD = ln μ − L/W, L = Σ w ln x:                  z = x/T − 1/W − ln x/W + L/W²
    GE(α) = (R − 1)/(α(α−1)), R = (V/W)/μ^α, V = Σ w x^α:   z = R·[x^α/V + (α−1)/W − α·x/T]/(α(α−1))
    Atkinson A = 1 − E/μ, E = (V_β/W)^(1/β), β = 1 − ε:     z = −(E/(βμ))·[x^β/V_β − 1/W] + E(x − μ)/(Wμ²)
    Atkinson ε = 1, E = exp(L/W):                    z = −(E/μ)·[ln x/W − L/W²] + E(x − μ)/(Wμ²)"""
    x = [mp.mpf(float(v)) for v in x]
    w = [mp.mpf(float(v)) for v in w]
    W, T = mp.fsum(w), mp.fsum(b * a for a, b in zip(x, w))
    mu = T / W
    A = mp.fsum(b * a * mp.log(a) for a, b in zip(x, w))
    L = mp.fsum(b * mp.log(a) for a, b in zip(x, w))
    out = {"theil": [(a * mp.log(a) - (A / T + 1) * a) / T + 1 / W for a in x],
           "mld": [a / T - 1 / W - mp.log(a) / W + L / W ** 2 for a in x]}
    for alpha in (0.5, -0.5, 1.7, 3):
        al = mp.mpf(alpha)
        V = mp.fsum(b * a ** al for a, b in zip(x, w))
        R = V / W / mu ** al
        out[f"ge{alpha}"] = [R * (a ** al / V + (al - 1) / W - al * a / T) / (al * (al - 1)) for a in x]
    for eps in (0.5, 2.0):
        beta = 1 - mp.mpf(eps)
        V = mp.fsum(b * a ** beta for a, b in zip(x, w))
        E = (V / W) ** (1 / beta)
        out[f"atk{eps}"] = [-(E / (beta * mu)) * (a ** beta / V - 1 / W) + E * (a - mu) / (W * mu ** 2) for a in x]
    E = mp.exp(L / W)
    out["atk1"] = [-(E / mu) * (mp.log(a) / W - L / W ** 2) + E * (a - mu) / (W * mu ** 2) for a in x]
    return out


def exact_scores(x, w, line: Fraction) -> dict[str, list]:
    """z_k in exact fractions: GE(2) and GE(−1) as above (rational), FGT(α) at the fixed line z,
    F = Σ w g/W, g = 1(x < z)·((z − x)/z)^α: z_k = (g_k − F)/W (Foster, Greer & Thorbecke 1984)."""
    x = [Fraction(float(v)) for v in x]
    w = [Fraction(float(v)) for v in w]
    W, T = sum(w), sum(a * b for a, b in zip(x, w))
    mu = T / W
    out = {}
    for alpha in (2, -1):
        V = sum(b * a ** alpha for a, b in zip(x, w))
        R = V / W / mu ** alpha
        out[f"ge{alpha}"] = [R * (a ** alpha / V + Fraction(alpha - 1) / W - alpha * a / T) / (alpha * (alpha - 1))
                             for a in x]
    for alpha in (0, 1, 2):
        g = [((line - a) / line) ** alpha if a < line else Fraction(0) for a in x]
        F = sum(b * v for b, v in zip(w, g)) / W
        out[f"fgt{alpha}"] = [(v - F) / W for v in g]
    return out


MP_SQL = ("SELECT theil_se(x, w) AS theil, mld_se(x, w) AS mld, ge_se(x, 0.5, w) AS \"ge0.5\", "
          "ge_se(x, -0.5, w) AS \"ge-0.5\", ge_se(x, 1.7, w) AS \"ge1.7\", ge_se(x, 3, w) AS ge3, "
          "atkinson_se(x, 0.5, w) AS \"atk0.5\", atkinson_se(x, 2, w) AS \"atk2.0\", atkinson_se(x, 1, w) AS atk1, "
          "ge_se(x, 2, w) AS ge2, ge_se(x, -1, w) AS \"ge-1\", fgt_se(x, 0, {z}, w) AS fgt0, "
          "fgt_se(x, 1, {z}, w) AS fgt1, fgt_se(x, 2, {z}, w) AS fgt2, gini_se(x, w) AS g FROM t")


def _wants(x, w, line: float) -> dict:
    wants = {k: variance([mp.mpf(float(b)) for b in w], z) for k, z in mp_scores(x, w).items()}
    wants.update({k: variance([Fraction(float(b)) for b in w], z)
                  for k, z in exact_scores(x, w, Fraction(line)).items()})
    return wants


def _streamed(x, w, sql: str) -> tuple[pd.Series, pd.Series]:
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes] == ["stream"]
    return uneven.query(sql, con, ordered="stream").iloc[0], uneven.query(sql, con, ordered="window").iloc[0]


# Where the window plan's form has no such digits, the stream matches it rather than the influence function:
# on "span" A(1) and A(2) lie within 1e-8 of 1, and E = 1 − A (catalog/linearize._atkinson_centred) keeps
# few digits of E (1.4e-8 of the square at ε = 1; 0 at ε = 2, every coefficient rounding to 0)
WINDOW_FORM_LIMITS = {"span": {"atk1", "atk2.0"}}


@pytest.mark.parametrize("name", ["pareto", "pareto-unweighted", "span"])
def test_moment_errors_match_the_influence_functions(name, batch):
    x, w = DATA[name]
    x, w = x[:300], w[:300]
    line = float(np.median(x))  # a fixed line inside the values (a double: exact as a fraction)
    got, window = _streamed(x, w, MP_SQL.format(z=repr(line)))
    for measure, want in _wants(x, w, line).items():
        assert want > 0
        if measure in WINDOW_FORM_LIMITS.get(name, ()):
            assert rel(got[measure], window[measure]) <= 1e-12, (name, measure)
            continue
        assert rel(got[measure] ** 2, want) <= 1e-12, (name, measure, got[measure])


def test_moment_errors_at_a_spread_of_1e9_of_the_mean(batch):
    # 1e12 plus increments below 1000: the terms in r = x/μ (the window plan's, catalog/moment.py) hold the
    # spread's square, but r and μ round at 1e-16 of the mean, 1e-7 of the spread; so the square of the
    # error is within 1e-6 of the influence function's (measured 3.8e-10 to 3.5e-7 on both plans), and the
    # stream gives the window plan's value to 1e-12
    x, w = DATA["offset"]
    x, w = x[:300], w[:300]
    line = float(np.median(x))
    got, window = _streamed(x, w, MP_SQL.format(z=repr(line)))
    for measure, want in _wants(x, w, line).items():
        exact = measure.startswith("fgt")  # the line's gap needs no mean: every digit
        assert rel(got[measure] ** 2, want) <= (1e-12 if exact else 1e-6), measure
        assert rel(got[measure], window[measure]) <= 1e-12, measure


# ---- the window plan, value for value -----------------------------------------------------------------

@pytest.fixture(scope="module")
def grouped():
    rng = np.random.default_rng(2024)
    n = 1200
    df = pd.DataFrame({"a": rng.integers(0, 4, n).astype(float), "b": rng.choice(["n", "s"], n),
                       "x": rng.lognormal(1, 1, n).round(1), "w": rng.integers(0, 4, n).astype(float)})
    df.loc[rng.random(n) < 0.05, "a"] = None  # NULL keys: a group of their own
    df.loc[rng.random(n) < 0.04, "x"] = None  # skipped rows
    df.loc[rng.random(n) < 0.03, "w"] = None
    con = duckdb.connect()
    con.register("t", df)
    return con


ALL = ("theil_se(x, w) AS th, mld_ci_lo(x, w) AS ml, ge_se(x, 2, w) AS g2, ge_ci_hi(x, -1, w, level := 0.9) AS gm, "
       "ge_se(x, 0.3, w) AS g3, atkinson_se(x, 0.5, w) AS a5, atkinson_ci_lo(x, 1, w) AS a1, "
       "atkinson_se(x, 2.5, w) AS a25, fgt_se(x, 1, 3.5, w) AS f1, fgt_ci_hi(x, 0, 3.5, w) AS f0, "
       "fgt_se(x, 1.5, 3.5, w) AS f15, theil_se(x) AS tu, gini_se(x, w) AS gs")


def test_every_moment_error_matches_the_window_plan(grouped, batch):
    sql = f"SELECT a, b, {ALL} FROM t GROUP BY a, b ORDER BY a, b"
    assert [p["kind"] for p in uneven.explain(sql, grouped, ordered="stream").passes] == ["stream", "stream"]
    got = uneven.query(sql, grouped, ordered="stream")
    assert_same_frames(got, uneven.query(sql, grouped, ordered="window"), 1e-12)
    assert got.drop(columns=["a", "b"]).notna().all().all()  # every group has rows: no NULL to hide behind


def test_edge_groups(batch, monkeypatch):
    # 1: one row (NULL); 2: equal values (exactly 0); 3: a zero value (theil, ge(2), atkinson(0.5) defined;
    # mld, ge(−1), atkinson(1) NULL); 4: a negative value, T > 0 (NULL but fgt); 5: T ≤ 0 (NULL but fgt);
    # 6: no valid row (NULL); 7: a zero weight dropped before n is counted; 8: ties across batches
    g = [1, 2, 2, 2, 3, 3, 3, 4, 4, 4, 5, 5, 6, 6, 7, 7, 7, 7] + [8] * 12
    x = [4.0, 2.0, 2.0, 2.0, 0.0, 1.0, 3.0, -1.0, 5.0, 6.0, -5.0, 1.0, None, 1.0, 1.0, 2.0, 9.0, 3.0] \
        + [1.0] * 5 + [2.0] * 4 + [7.0] * 3
    w = [1.0, 1.0, 3.0, 0.5, 1.0, 2.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 0.0, 1.0, 1.0, 0.0, 2.0] + [1.5] * 12
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": g, "x": x, "w": w}))
    sql = ("SELECT g, theil_se(x, w) AS th, mld_se(x, w) AS ml, ge_se(x, 2, w) AS g2, ge_se(x, -1, w) AS gm, "
           "atkinson_se(x, 0.5, w) AS a5, atkinson_ci_hi(x, 1, w) AS a1, atkinson_se(x, 0, w) AS a0, "
           "fgt_se(x, 1, 2.5, w) AS f1, gini_se(x, w) AS gs FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.th.isna().tolist() == [True, False, False, True, True, True, False, False]
    assert got.ml.isna().tolist() == [True, False, True, True, True, True, False, False]
    assert got.f1.isna().tolist() == [True, False, False, False, False, True, False, False]
    assert (got.loc[1, ["th", "ml", "g2", "gm", "a5", "f1"]] == 0.0).all()  # every value equal: exactly 0
    assert (got.a0.dropna() == 0.0).all() and got.a0.notna().sum() == 4  # A(0) = 0 wherever x ≥ 0, T > 0
    z = mp_scores([1.0, 2.0, 3.0], [1.0, 1.0, 2.0])["theil"]  # group 7 without its zero-weight row
    assert rel(got.th[6] ** 2, variance([1, 1, 2], z)) <= 1e-12
    monkeypatch.setattr(plan_module, "STREAM_DIRECT", False)  # the joined form: the same values
    joined = uneven.query(sql, con, ordered="stream")
    assert "direct form is turned off" in uneven.explain(sql, con, ordered="stream").passes[0]["reason"]
    assert_same_frames(joined, got, 1e-14)


def test_filter_having_cte_and_expressions(grouped, batch):
    sql = ("WITH v AS (SELECT * FROM t WHERE w IS NULL OR w < 3) "
           "SELECT a, round(theil_se(x, w) FILTER (WHERE b = 'n') * 1000, 9) AS th, "
           "atkinson_ci_hi(x, 0.5, w) FILTER (WHERE x > 1) - atkinson(x, 0.5, w) FILTER (WHERE x > 1) AS half, "
           "gini_se(x, w) AS gs, fgt_se(x, 2, 4, w) AS f FROM v GROUP BY a HAVING mld_se(x, w) > 0 ORDER BY a")
    assert "stream" in [p["kind"] for p in uneven.explain(sql, grouped, ordered="stream").passes]
    got = uneven.query(sql, grouped, ordered="stream")
    assert_same_frames(got, uneven.query(sql, grouped, ordered="window"), 1e-11)
    assert len(got) > 0 and (got.half > 0).all()  # the interval's upper end lies above the estimate


def test_input_policy_error_is_the_window_plans():
    # the stream stops as the window plan's ordered pass does (its linearized pass returns NULLs here)
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM (VALUES (1, 1.0::DOUBLE, 1.0::DOUBLE), (1, 'nan'::DOUBLE, 1.0), "
                "(2, 3.0, 1.0)) v(g, x, w)")
    with pytest.raises(uneven.InputDataError) as streamed:
        uneven.query("SELECT g, theil_se(x, w), gini_se(x, w) FROM t GROUP BY g", con, ordered="stream")
    with pytest.raises(uneven.InputDataError) as windowed:
        uneven.query("SELECT g, gini(x, w) FROM t GROUP BY g", con, ordered="window")
    assert str(streamed.value) == str(windowed.value) and "NaN" in str(streamed.value)


def test_plans_auto_picks_and_compile_never_streams(grouped):
    # bench/README.md, "Stream plan: the moment measures' standard errors"
    alone = uneven.explain("SELECT a, theil_se(x, w), atkinson_se(x, 0.5, w) FROM t GROUP BY a", grouped,
                           ordered="auto")
    assert [p["kind"] for p in alone.passes] == ["linearized"]
    assert "moment" in alone.passes[0]["reason"] and "sort" in alone.passes[0]["reason"]
    mixed = uneven.explain("SELECT a, gini_se(x, w), theil_se(x, w) FROM t GROUP BY a", grouped, ordered="auto")
    assert [p["kind"] for p in mixed.passes] == ["stream"]
    forced = uneven.explain("SELECT a, theil_se(x, w) FROM t GROUP BY a", grouped, ordered="stream")
    assert [p["kind"] for p in forced.passes] == ["stream"]
    # the median-line errors have no stream kernel: the pass keeps the window plan, and says why
    line = uneven.explain("SELECT a, gini_se(x, w), theil_se(x, w), median_gap_se(x, 0.6, w) FROM t GROUP BY a",
                          grouped, ordered="stream")
    assert line.passes[0]["kind"] == "linearized"
    assert "no stream kernel for median_gap_se (a median-line error's score reads the group's median" \
        in line.passes[0]["reason"]
    # with a survey design they stream too (tests/test_stream_design_moment.py)
    designed = uneven.explain("SELECT a, theil_se(x, w, strata := b) FROM t GROUP BY a", grouped, ordered="stream")
    assert designed.passes[0]["kind"] == "stream"
    sql = "SELECT a, gini_se(x, w), theil_se(x, w), fgt_ci_lo(x, 1, 2, w) FROM t GROUP BY a"
    assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")


def test_intervals_are_the_estimate_plus_minus_z_times_the_error(grouped):
    sql = ("SELECT a, theil(x, w) AS e, theil_se(x, w) AS se, theil_ci_lo(x, w) AS lo, "
           "theil_ci_hi(x, w, level := 0.9) AS hi, gini_se(x, w) AS gs FROM t GROUP BY a ORDER BY a")
    got = uneven.query(sql, grouped, ordered="stream")
    z95, z90 = 1.959963984540054, 1.6448536269514722  # normal quantiles of 0.975 and 0.95 (common practice)
    assert np.allclose(got.lo, got.e - z95 * got.se, rtol=1e-13, atol=0)
    assert np.allclose(got.hi, got.e + z90 * got.se, rtol=1e-13, atol=0)
    assert not math.isnan(got.se.sum())
