"""Digits of the linearized standard errors where the score is small against its terms, on the window
plan (compiler/passes/linearized.py) and the stream (catalog/kernels_se_moment.py), and their NULL where
the terms' cross sums underflow (catalog/variance_floor.py, "Underflow").

FGT at a fixed line with every row far below it (values near 2020, a line of 25001): g = ((z − x)/z)^α is
near 0.85 and varies by 1e-3, so the score w·(g − F)/W is small against w·g and w. Checked against the
variance n/(n−1)·Σ(u_k − ū)², u_k = w_k·(g_k − F)/W (Foster, Greer & Thorbecke 1984 for F; its influence
function the derivative in w_k, as in tests/test_stream_se_moment.py, from memory) in exact fractions,
without and with a survey design (the with-replacement variance of the PSU totals, Wolter 2007, from memory).
"""

from __future__ import annotations

from fractions import Fraction
from statistics import NormalDist

import duckdb
import mpmath as mp
import numpy as np
import pandas as pd
import pytest

import uneven
from engines import engine_or_skip
from test_numerics import rel
from test_stream_design_cuts import design_variance
from test_stream_se_moment import exact_scores, variance

mp.mp.dps = 60
LINE = 25001.0


def far_below(seed: int = 11, n: int = 240) -> pd.DataFrame:
    """Invented survey years near 2020 with integer and fractional weights, two groups."""
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"g": np.repeat([1, 2], n // 2),
                         "x": 2015.0 + rng.integers(0, 10, n),
                         "w": np.concatenate([rng.integers(1, 9, n // 2).astype(float), rng.uniform(0.1, 5.0, n // 2)])})


def exact_errors(df: pd.DataFrame, alpha: int) -> dict:
    """{group: (F, the exact variance of fgt_se)} in fractions."""
    out = {}
    for g, part in df.groupby("g"):
        w = [Fraction(float(b)) for b in part.w]
        z = exact_scores(part.x.tolist(), part.w.tolist(), Fraction(LINE))[f"fgt{alpha}"]
        gaps = [((Fraction(LINE) - Fraction(float(a))) / Fraction(LINE)) ** alpha for a in part.x]
        out[g] = (sum(b * v for b, v in zip(w, gaps)) / sum(w), variance(w, z))
    return out


def root(v: Fraction):
    return mp.sqrt(mp.mpf(v.numerator) / v.denominator)


SQL = ("SELECT g, fgt_se(x, {a}, 25001, w) AS se, fgt_ci_lo(x, {a}, 25001, w) AS lo, "
       "fgt_ci_hi(x, {a}, 25001, w, level := 0.9) AS hi FROM t GROUP BY g ORDER BY g")


def check_against_exact(got: pd.DataFrame, want: dict, tol: float) -> None:
    z95, z90 = NormalDist().inv_cdf(0.975), NormalDist().inv_cdf(0.95)  # normal quantiles (common practice)
    for row in got.itertuples(index=False):
        F, v = want[row.g]
        se = root(v)
        assert rel(row.se, se) <= tol, (row.g, row.se, se)
        assert rel(row.lo, mp.mpf(F.numerator) / F.denominator - z95 * se) <= tol
        assert rel(row.hi, mp.mpf(F.numerator) / F.denominator + z90 * se) <= tol


@pytest.mark.parametrize("alpha", [1, 2])
def test_fgt_far_below_the_line_stream(alpha, batch):
    # before the shifted gap term: 3e-8 relative on the window plan, 4e-10 on the stream
    df = far_below()
    con = duckdb.connect()
    con.register("t", df)
    sql = SQL.format(a=alpha)
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes] == ["stream"]
    check_against_exact(uneven.query(sql, con, ordered="stream"), exact_errors(df, alpha), 1e-11)


@pytest.mark.parametrize("name", ["duckdb", "sqlite", "postgres"])
def test_fgt_far_below_the_line_window(name):
    eng = engine_or_skip(name)
    df = far_below()
    eng.load(df)
    for alpha in (1, 2):
        got = eng.run(SQL.format(a=alpha)).astype({"g": int, "se": float, "lo": float, "hi": float})
        check_against_exact(got, exact_errors(df, alpha), 1e-11)


def test_fgt_headcount_of_rows_all_below_the_line_is_exactly_0():
    # α = 0 with every row below the line: F = 1 whatever the weights, so its variance is exactly 0
    con = duckdb.connect()
    con.register("t", far_below())
    for ordered in ("window", "stream"):
        got = uneven.query(SQL.format(a=0), con, ordered=ordered)
        assert (got.se == 0.0).all() and (got.lo == 1.0).all(), ordered


def design_frame(moved: bool) -> pd.DataFrame:
    """3 strata × 4 PSUs, each PSU of a stratum the same five rows, so their totals cancel exactly;
    ``moved``: one row of one PSU moves by 0.5, a small but real variance."""
    rng = np.random.default_rng(5)
    rows = []
    for h in range(3):
        xs, ws = 2015.0 + rng.integers(0, 10, 5), rng.integers(1, 9, 5) / 2.5
        rows += [(h, 10 * h + c, a, b) for c in range(4) for a, b in zip(xs, ws)]
    df = pd.DataFrame(rows, columns=["h", "c", "x", "w"])
    if moved:
        df.loc[0, "x"] += 0.5
    return df


def exact_design(df: pd.DataFrame, alpha: int) -> Fraction:
    """Σ_h n_h/(n_h − 1)·Σ_c (U_hc − Ū_h)², U_hc the PSU's Σ w·(g − F)/W, in fractions."""
    x, w = [Fraction(float(a)) for a in df.x], [Fraction(float(b)) for b in df.w]
    g = [((Fraction(LINE) - a) / Fraction(LINE)) ** alpha for a in x]
    W = sum(w)
    F = sum(b * v for b, v in zip(w, g)) / W
    units: dict = {}
    for h, c, b, v in zip(df.h, df.c, w, g):
        units.setdefault(h, {}).setdefault(c, []).append(b * (v - F) / W)
    total = Fraction(0)
    for per in units.values():
        U = [sum(parts) for parts in per.values()]
        mean = sum(U) / len(U)
        total += Fraction(len(U), len(U) - 1) * sum((q - mean) ** 2 for q in U)
    return total


@pytest.mark.parametrize("moved", [False, True])
def test_fgt_design_whose_psu_totals_cancel(moved):
    # before: 1.5e-6 relative off the moved case's variance (the window plan's raw sums over PSUs)
    df = design_frame(moved)
    con = duckdb.connect()
    con.register("t", df)
    for alpha in (1, 2):
        got = uneven.query(f"SELECT fgt_se(x, {alpha}, 25001, w, strata := h, psu := c) AS se FROM t", con).se[0]
        want = exact_design(df, alpha)
        if moved:
            assert want > 0 and rel(got, root(want)) <= 1e-11, (alpha, got)
        else:
            assert want == 0 and got == 0.0, (alpha, got)


# ---- underflow: NULL, never a made-up 0 -----------------------------------------------------------

TINY = ("SELECT g, gini_se(x, w) AS gs, gini_ci_lo(x, w) AS gl, lorenz_se(x, 0.5, w) AS ls, palma_se(x, w) AS ps, "
        "theil_se(x, w) AS ts FROM t GROUP BY g ORDER BY g")


def tiny_frame(scale: float) -> pd.DataFrame:
    """Group 1: three values 1, 2, 3 times ``scale`` and a subnormal 5e-324 (kept as it is); group 2 eight
    values; group 3 equal values."""
    x1 = [1.0 * scale, 5e-324, 2.0 * scale, 3.0 * scale]
    x2 = [v * scale for v in (1.0, 4.0, 2.0, 7.0, 3.0, 5.0, 6.0, 9.0)]
    x3 = [2.0 * scale] * 3
    w = [1.0, 2.0, 3.0, 1.5] + [1.0, 2.0, 1.0, 3.0, 2.0, 1.0, 2.0, 0.5] + [1.0, 2.0, 3.0]
    return pd.DataFrame({"g": [1] * 4 + [2] * 8 + [3] * 3, "x": x1 + x2 + x3, "w": w})


def test_errors_whose_cross_sums_underflow_are_null_on_both_plans(batch):
    # values near 1e-300: the terms' squares underflow while 1/(W·T) is near 1e300; before, the window
    # plan gave NULL (c² overflowed) and the stream 0.0 (its cross sums rounded to 0)
    con = duckdb.connect()
    con.register("t", tiny_frame(1e-300))
    got = {p: uneven.query(TINY, con, ordered=p) for p in ("window", "stream")}
    for plan, frame in got.items():
        assert frame.loc[:1, ["gs", "gl", "ls", "ps"]].isna().all().all(), plan
        assert (frame.loc[2, ["gs", "ls", "ps", "ts"]] == 0.0).all(), plan  # equal values: exactly 0 first
    # Theil's terms are in r = x/μ: scale-free, its error is the plans' common value on the same rows
    # times 2^1000 (a power of two: every value exact), checked against the exact Gini below
    assert got["window"].ts[:2].notna().all() and np.allclose(got["window"].ts, got["stream"].ts, rtol=1e-12, atol=0)


def test_the_same_rows_at_a_scale_with_digits_keep_the_exact_error():
    # scale-free (common practice: the Gini of c·x is the Gini of x): at 1e-100 and at 2^1000·1e-300 the
    # terms keep their digits, so the errors are the exact ones of the rows (exact fractions, the
    # subnormal row included as it is)
    for scale in (1e-100, 1e-300 * 2.0 ** 1000):
        df = tiny_frame(scale)
        con = duckdb.connect()
        con.register("t", df)
        for plan in ("window", "stream"):
            got = uneven.query(TINY, con, ordered=plan)
            for g in (1, 2):
                part = df[df.g == g]
                want = design_variance(part.x.tolist(), part.w.tolist(), None, None, lambda e: e.z_gini())
                assert rel(got.gs[g - 1], root(want)) <= 1e-10, (scale, plan, g)
