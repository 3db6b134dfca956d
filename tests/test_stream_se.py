"""The stream plan's cut-based standard errors (catalog/kernels_se.py, engine/streamse.py): lorenz_se,
bottom_share_se, top_share_se, generalized_lorenz_se, palma_se, s80s20_se, quantile_w_se,
percentile_ratio_se, wolfson_se and their intervals, without a survey design.

Checked against exact rational arithmetic (Python ``fractions``, written in this file from the
published influence functions, independently of the compiler: the Lorenz ordinate's and the
quantile's, Deville 1999 and Osier 2009, the Gini's, Langel & Tillé 2013, the quantile density by the
Siddiqui / Bloch–Gastwirth spacing with the Hall & Sheather 1988 bandwidth; all cited from memory),
and against the window plan on the same query, value for value and NULL for NULL, with batches of 3
and 7 rows and whole, read serially and on the reader thread, so batches cut groups, cuts and runs of
tied values anywhere.
"""

from __future__ import annotations

import math
from fractions import Fraction
from statistics import NormalDist

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from test_numerics import DATA, rel
from test_stream import assert_same_frames

# ---- exact fractions: the scores written from the influence functions -----------------------------

def hall_sheather(p: float) -> float:
    """K(p) of the bandwidth h = K(p)·n^(−1/3) (Hall & Sheather 1988, from memory), α = 0.05."""
    nd = NormalDist()
    q = nd.inv_cdf(p)
    return nd.inv_cdf(0.975) ** (2 / 3) * (1.5 * nd.pdf(q) ** 2 / (2 * q * q + 1)) ** (1 / 3)


class Exact:
    """One group's rows (w > 0) sorted by x, in exact fractions."""

    def __init__(self, x, w):
        pairs = sorted((Fraction(float(a)), Fraction(float(b))) for a, b in zip(x, w) if b != 0)
        self.x = [a for a, _ in pairs]
        self.w = [b for _, b in pairs]
        self.n = len(pairs)
        self.W = sum(self.w)
        self.T = sum(a * b for a, b in pairs)
        self.C, c = [], Fraction(0)
        for b in self.w:
            c += b
            self.C.append(c)

    def quantile(self, p: Fraction) -> Fraction:
        """The smallest x with C/W ≥ p (the weighted inverted CDF of DESIGN.md), else the largest."""
        for a, c in zip(self.x, self.C):
            if c / self.W >= p:
                return a
        return self.x[-1]

    def lorenz(self, p: Fraction) -> Fraction:
        held, before = Fraction(0), Fraction(0)
        for a, b in zip(self.x, self.w):
            held += a * min(max(p * self.W - before, 0), b)
            before += b
        return held / self.T

    def z_lorenz(self, p: Fraction) -> list[Fraction]:
        """L(p) = B(p)/T: z_k = [p·Q + (x_k − Q)·1(x_k ≤ Q) − L·x_k] / T."""
        Q, L = self.quantile(p), self.lorenz(p)
        return [(p * Q + (a - Q) * (a <= Q) - L * a) / self.T for a in self.x]

    def z_generalized(self, p: Fraction) -> list[Fraction]:
        """GL(p) = B(p)/W: z_k = [p·Q + (x_k − Q)·1(x_k ≤ Q) − GL] / W."""
        Q, GL = self.quantile(p), self.lorenz(p) * self.T / self.W
        return [(p * Q + (a - Q) * (a <= Q) - GL) / self.W for a in self.x]

    def z_quantile(self, p: float) -> list[Fraction] | None:
        """z_k = (p − 1(x_k ≤ Q)) / (W·f), f = (p⁺ − p⁻)/(Q(p⁺) − Q(p⁻)), p± = p ± K(p)·n^(−1/3) in [0, 1]
        (the bandwidth a double, as the method defines it; the quantiles at its exact value)."""
        h = hall_sheather(p) * self.n ** (-1.0 / 3.0)
        hi, lo = Fraction(min(p + h, 1.0)), Fraction(max(p - h, 0.0))
        spread = self.quantile(hi) - self.quantile(lo)
        if spread <= 0:
            return None
        f = (hi - lo) / spread
        pe = Fraction(str(p))
        Q = self.quantile(pe)
        return [(pe - (a <= Q)) / (self.W * f) for a in self.x]

    def gini(self) -> Fraction:
        return sum(b * a * (2 * c - b - self.W) for a, b, c in zip(self.x, self.w, self.C)) / (self.W * self.T)

    def z_gini(self) -> list[Fraction]:
        G, S, out = self.gini(), Fraction(0), []
        for a, b, c in zip(self.x, self.w, self.C):
            S += b * a
            out.append((2 * c * a - 2 * S + self.T - self.W * a - G * (self.T + self.W * a)) / (self.W * self.T))
        return out

    def variance(self, z: list[Fraction] | None) -> Fraction | None:
        """n/(n−1)·Σ (u_k − ū)², u_k = w_k·z_k (with replacement)."""
        if z is None or self.n < 2:
            return None
        u = [b * v for b, v in zip(self.w, z)]
        mean = sum(u) / len(u)
        return Fraction(self.n, self.n - 1) * sum((v - mean) ** 2 for v in u)


def ratio_z(a: Fraction, za: list[Fraction], b: Fraction, zb: list[Fraction]) -> list[Fraction]:
    """r = a/b: z_r = (z_a − r·z_b)/b (the delta method)."""
    r = a / b
    return [(u - r * v) / b for u, v in zip(za, zb)]


def exact_z(name: str, e: Exact) -> list[Fraction] | None:
    """The influence values z_k of the measure of EXACT_SQL named ``name`` over the rows of ``e`` (None
    where no standard error exists)."""
    F = lambda v: Fraction(str(v))  # noqa: E731  (p as written in the query)
    if name == "lorenz":
        return e.z_lorenz(F(0.25))
    if name == "top_share":  # 1 − L(1 − p)
        return [-v for v in e.z_lorenz(1 - F(0.1))]
    if name == "generalized_lorenz":
        return e.z_generalized(F(0.75))
    if name == "palma":
        top, low = 1 - e.lorenz(F(0.9)), e.lorenz(F(0.4))
        return ratio_z(top, [-v for v in e.z_lorenz(F(0.9))], low, e.z_lorenz(F(0.4)))
    if name == "s80s20":
        top, low = 1 - e.lorenz(F(0.8)), e.lorenz(F(0.2))
        return ratio_z(top, [-v for v in e.z_lorenz(F(0.8))], low, e.z_lorenz(F(0.2)))
    if name == "quantile_w":
        return e.z_quantile(0.5)
    if name == "percentile_ratio":
        zh, zl = e.z_quantile(0.9), e.z_quantile(0.1)
        if zh is None or zl is None:
            return None
        return ratio_z(e.quantile(F(0.9)), zh, e.quantile(F(0.1)), zl)
    assert name == "wolfson"  # P = 2(μ/M)(1 − 2L(½) − G): ∂P/∂μ = P/μ, ∂P/∂M = −P/M, ∂P/∂L = −4μ/M, ∂P/∂G = −2μ/M
    zm = e.z_quantile(0.5)
    if zm is None:
        return None
    mu, M, L, G = e.T / e.W, e.quantile(F(0.5)), e.lorenz(F(0.5)), e.gini()
    P = 2 * mu / M * (1 - 2 * L - G)
    z_mu = [(a - mu) / e.W for a in e.x]
    return [P / mu * a - P / M * b - 4 * mu / M * c - 2 * mu / M * d
            for a, b, c, d in zip(z_mu, zm, e.z_lorenz(F(0.5)), e.z_gini())]


def exact_variance(name: str, e: Exact) -> Fraction | None:
    return e.variance(exact_z(name, e))


EXACT_SQL = ("SELECT lorenz_se(x, 0.25, w) AS lorenz, top_share_se(x, 0.1, w) AS top_share, "
             "generalized_lorenz_se(x, 0.75, w) AS generalized_lorenz, palma_se(x, w) AS palma, "
             "s80s20_se(x, w) AS s80s20, quantile_w_se(x, 0.5, w) AS quantile_w, "
             "percentile_ratio_se(x, 0.9, 0.1, w) AS percentile_ratio, wolfson_se(x, w) AS wolfson FROM t")
EXACT_NAMES = ["lorenz", "top_share", "generalized_lorenz", "palma", "s80s20", "quantile_w", "percentile_ratio",
               "wolfson"]


@pytest.mark.parametrize("name", sorted(DATA))
def test_cut_standard_errors_match_exact_fractions(name, batch):
    x, w = DATA[name]
    x, w = x[:300], w[:300]  # exact fractions over 300 rows
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    assert [p["kind"] for p in uneven.explain(EXACT_SQL, con, ordered="stream").passes] == ["stream"]
    got = uneven.query(EXACT_SQL, con, ordered="stream").iloc[0]
    e = Exact(x, w)
    for measure in EXACT_NAMES:
        v = exact_variance(measure, e)
        assert v is not None and v > 0
        assert rel(got[measure] ** 2, v) <= 1e-12, (measure, got[measure], math.sqrt(float(v)))


def test_ties_at_the_cuts_and_exact_cut_points(batch):
    # integer weights put C exactly on p·W (p = 0.25, 0.5, 0.75 of W = 80), runs of tied values straddle
    # the cuts and the batches, rows of weight 0 change nothing
    x = np.repeat([1.0, 2.0, 2.5, 4.0, 10.0], [9, 11, 7, 5, 8])
    w = np.tile([1.0, 2.0, 0.0, 3.0], 10)
    perm = np.random.default_rng(3).permutation(len(x))
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": (perm % 2)[perm], "x": x[perm], "w": w[perm]}))
    sql = ("SELECT g, lorenz_se(x, 0.25, w) AS lorenz, quantile_w_se(x, 0.5, w) AS quantile_w, "
           "generalized_lorenz_se(x, 0.75, w) AS generalized_lorenz, palma_se(x, w) AS palma, "
           "wolfson_se(x, w) AS wolfson FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    df = con.execute("SELECT * FROM t").df()
    for i, g in enumerate(got.g):
        e = Exact(df.x[df.g == g].to_numpy(), df.w[df.g == g].to_numpy())
        for measure in ("lorenz", "generalized_lorenz", "palma", "quantile_w", "wolfson"):
            v = exact_variance(measure, e)
            if v is None:
                assert math.isnan(got[measure][i]), measure  # no density at the quantile: NULL
            else:
                assert rel(got[measure][i] ** 2, v) <= 1e-12, measure


# ---- the window plan, row for row --------------------------------------------------------------

@pytest.fixture(scope="module")
def grouped():
    rng = np.random.default_rng(1003)
    n = 1500
    df = pd.DataFrame({"a": rng.integers(0, 4, n).astype(float), "b": rng.choice(["n", "s"], n),
                       "x": rng.lognormal(1, 1, n).round(1), "w": rng.integers(0, 4, n).astype(float)})
    df.loc[rng.random(n) < 0.05, "a"] = None  # NULL keys: a group of their own
    df.loc[rng.random(n) < 0.04, "x"] = None  # skipped rows
    df.loc[rng.random(n) < 0.03, "w"] = None
    con = duckdb.connect()
    con.register("t", df)
    return con


ALL_SE = ("lorenz_se(x, 0.3, w) AS l, bottom_share_ci_lo(x, 0.5, w) AS bl, top_share_ci_hi(x, 0.1, w, level := 0.9) "
          "AS th, generalized_lorenz_se(x, 0.9, w) AS gl, palma_se(x, w) AS pa, s80s20_ci_lo(x, w) AS sl, "
          "quantile_w_se(x, 0.37, w) AS q, quantile_w_ci_hi(x, 0.5, w) AS qh, percentile_ratio_se(x, 0.9, 0.1, w) "
          "AS pr, wolfson_se(x, w) AS wo, wolfson_ci_lo(x, w) AS wl, lorenz_se(x, 0.3) AS lu, "
          "quantile_w_se(x, 0.8) AS qu")


def test_every_cut_standard_error_matches_the_window_plan(grouped, batch):
    sql = f"SELECT a, b, {ALL_SE} FROM t GROUP BY a, b ORDER BY a, b"
    assert [p["kind"] for p in uneven.explain(sql, grouped, ordered="stream").passes] == ["stream", "stream"]
    got = uneven.query(sql, grouped, ordered="stream")
    want = uneven.query(sql, grouped, ordered="window")
    assert_same_frames(got, want, 1e-11)
    assert got.drop(columns=["a", "b"]).notna().all().all()  # every group has rows: no NULL to hide behind


def test_intervals_are_the_estimate_plus_minus_z_times_the_error(grouped):
    sql = ("SELECT a, lorenz(x, 0.3, w) AS e, lorenz_se(x, 0.3, w) AS se, lorenz_ci_lo(x, 0.3, w) AS lo, "
           "lorenz_ci_hi(x, 0.3, w, level := 0.9) AS hi FROM t GROUP BY a ORDER BY a")
    got = uneven.query(sql, grouped, ordered="stream")
    z95, z90 = 1.959963984540054, 1.6448536269514722  # normal quantiles of 0.975 and 0.95 (common practice)
    assert np.allclose(got.lo, got.e - z95 * got.se, rtol=1e-14, atol=0)
    assert np.allclose(got.hi, got.e + z90 * got.se, rtol=1e-14, atol=0)


def test_gini_se_beside_lorenz_se_streams_as_one_pass(grouped, batch):
    sql = ("SELECT a, gini(x, w) AS g, gini_se(x, w) AS gs, lorenz_se(x, 0.4, w) AS ls, "
           "quantile_w_ci_lo(x, 0.5, w) AS ql, theil(x, w) AS th FROM t GROUP BY a HAVING gini_se(x, w) > 0 ORDER BY a")
    for ordered in ("stream", "auto"):
        found = uneven.explain(sql, grouped, ordered=ordered)
        kinds = [p["kind"] for p in found.passes]
        assert kinds.count("stream") == 1 and "linearized" not in kinds, found.passes
    got = uneven.query(sql, grouped, ordered="stream")
    assert_same_frames(got, uneven.query(sql, grouped, ordered="window"))


def test_edge_groups(batch):
    # 1: one row (NULL); 2: equal values (0, and NULL for the quantile: no density); 3: T ≤ 0 (NULL for
    # the shares, a value for the quantile); 4: no valid row (NULL); 5: a zero weight dropped before n
    # is counted; 6: 36 ones and 4 eights, so the median's spacing Q(½ ± 0.28) − … is 0 (NULL)
    con = duckdb.connect()
    g = [1, 2, 2, 2, 3, 3, 3, 4, 4, 5, 5, 5, 5] + [6] * 40
    x = [4.0, 2.0, 2.0, 2.0, -5.0, 0.5, 1.0, None, 1.0, 1.0, 2.0, 9.0, 3.0] + [1.0] * 36 + [8.0] * 4
    w = [1.0, 1.0, 3.0, 0.5, 1.0, 1.0, 1.0, 1.0, 0.0, 1.0, 1.0, 0.0, 2.0] + [1.0] * 40
    con.register("t", pd.DataFrame({"g": g, "x": x, "w": w}))
    sql = ("SELECT g, lorenz_se(x, 0.5, w) AS l, top_share_ci_lo(x, 0.2, w) AS t, quantile_w_se(x, 0.5, w) AS q, "
           "percentile_ratio_se(x, 0.9, 0.1, w) AS pr, generalized_lorenz_se(x, 0.5, w) AS gl, "
           "wolfson_se(x, w) AS wo FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.l.isna().tolist() == [True, False, True, True, False, False]
    assert got.l[1] == 0.0 and got.gl[1] == 0.0  # every value equal: exactly 0
    assert math.isnan(got.q[1]) and math.isnan(got.q[5])  # no spacing around the median: NULL
    assert not math.isnan(got.gl[2])  # generalized Lorenz needs no positive total
    e = Exact([1.0, 2.0, 3.0], [1.0, 1.0, 2.0])  # group 5 without its zero-weight row
    assert rel(got.l[4] ** 2, e.variance(e.z_lorenz(Fraction(1, 2)))) <= 1e-12


def test_p_at_zero_and_one(batch):
    con = duckdb.connect()
    rng = np.random.default_rng(7)
    con.register("t", pd.DataFrame({"g": rng.integers(0, 3, 60), "x": rng.lognormal(0, 1, 60),
                                    "w": rng.uniform(0.5, 2.0, 60)}))
    sql = ("SELECT g, lorenz_se(x, 0, w) AS l0, lorenz_se(x, 1, w) AS l1, quantile_w_se(x, 0, w) AS q0, "
           "quantile_w_ci_hi(x, 1, w) AS q1, top_share_se(x, 1, w) AS t1, generalized_lorenz_se(x, 1, w) AS g1 "
           "FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    want = uneven.query(sql, con, ordered="window")
    assert_same_frames(got.drop(columns="l1"), want.drop(columns="l1"))
    assert got.q0.isna().all() and got.q1.isna().all()  # the sample minimum and maximum: no standard error
    assert (got.l0 == 0).all()  # L(0) = 0 whatever the sample: its score is 0
    # L(1) = 1 whatever the sample: 0 on the stream; the window plan's running and total weights round
    # apart on the last row and leave a few 1e-9 of noise in some groups
    assert (got.l1 == 0).all() and (want.l1.abs() < 1e-7).all()


def test_direct_form_keeps_groups_without_rows(batch):
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 1, 2, 2, 3], "x": [1.0, 2.0, 5.0, None, None, 3.0],
                                    "w": [1.0, 2.0, 1.0, 1.0, 1.0, 0.0]}))
    sql = "SELECT g, lorenz_se(x, 0.5, w) AS l, quantile_w_se(x, 0.5, w) AS q FROM t GROUP BY g ORDER BY g"
    found = uneven.explain(sql, con, ordered="stream")
    assert found.passes[0]["kind"] == "stream" and "direct" in found.passes[0]["reason"]
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.g.tolist() == [1, 2, 3] and got.l[1:].isna().all()


def test_negative_weight_stops_with_the_window_plans_error():
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 2], "x": [1.0, 2.0, 3.0], "w": [1.0, -1.0, 1.0]}))
    sql = "SELECT g, lorenz_se(x, 0.5, w) FROM t GROUP BY g"
    with pytest.raises(uneven.InputDataError, match="negative weight") as streamed:
        uneven.query(sql, con, ordered="stream")
    with pytest.raises(uneven.InputDataError, match="negative weight") as windowed:
        uneven.query(sql, con, ordered="window")
    assert "the group g=1" in str(streamed.value)  # (the linearized window pass names "the whole input")


def test_compile_never_streams_the_cut_errors():
    # (with a survey design: tests/test_stream_design_cuts.py)
    sql = "SELECT a, gini_se(x, w), lorenz_se(x, 0.4, w), quantile_w_se(x, 0.5, w) FROM t GROUP BY a"
    assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")


def test_auto_refines_cut_errors_alone_and_streams_them_beside_the_gini_se(grouped):
    # bench/README.md, "Stream plan: cut-based standard errors": alone, the refine plan measured 0.72-0.78x the
    # stream (2M x 100); beside gini_se, which refine cannot serve, the stream 0.63x the window plan
    alone = uneven.explain("SELECT a, lorenz_se(x, 0.4, w), quantile_w_se(x, 0.5, w) FROM t GROUP BY a", grouped,
                           ordered="auto")
    assert [p["kind"] for p in alone.passes] == ["refine"]
    mixed = uneven.explain("SELECT a, gini_se(x, w), lorenz_se(x, 0.4, w) FROM t GROUP BY a", grouped, ordered="auto")
    assert [p["kind"] for p in mixed.passes] == ["stream"] and "stream plan" in mixed.passes[0]["reason"]
    forced = uneven.explain("SELECT a, lorenz_se(x, 0.4, w) FROM t GROUP BY a", grouped, ordered="stream")
    assert [p["kind"] for p in forced.passes] == ["stream"]


def test_filter_having_and_expressions_around_the_errors(grouped, batch):
    sql = ("SELECT a, round(lorenz_se(x, 0.4, w) FILTER (WHERE b = 'n') * 1000, 9) AS l, "
           "palma_ci_hi(x, w) FILTER (WHERE x > 1) - palma(x, w) FILTER (WHERE x > 1) AS half, "
           "quantile_w_se(x, 0.5, w) AS q FROM t GROUP BY a HAVING quantile_w_se(x, 0.5, w) > 0 ORDER BY a")
    assert "stream" in [p["kind"] for p in uneven.explain(sql, grouped, ordered="stream").passes]
    got = uneven.query(sql, grouped, ordered="stream")
    assert_same_frames(got, uneven.query(sql, grouped, ordered="window"), 1e-11)
    assert len(got) > 0 and (got.half > 0).all()  # the interval's upper end lies above the estimate


def test_generalized_lorenz_error_is_defined_where_the_total_is_not_positive():
    # GL(p) = B(p)/W needs no positive total (its domain: any x), and neither does its score
    # z_k = [p·Q + (x_k − Q)·1(C_k ≤ pW) − GL]/W (the estimating-equation form with W for T, from memory);
    # the variance n/(n−1)·Σ(w z − mean)² in exact fractions here, on negative values (T < 0)
    x = [-6, -4, -4, -5, -1, -3, -2]
    w = [1, 3, 2, 1, 2, 1, 4]
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM (VALUES " + ", ".join(f"({a}, {b})" for a, b in zip(x, w))
                + ") v(x, w)")
    for p in (Fraction(0), Fraction(2, 5), Fraction(1)):
        rows = sorted(zip(x, w))
        W = sum(Fraction(b) for _, b in rows)
        C, B, Q = Fraction(0), Fraction(0), None
        for a, b in rows:
            B += a * max(Fraction(0), min(p * W - C, Fraction(b)))
            C += b
            if Q is None and C / W >= p:
                Q = Fraction(a)
        GL = B / W
        C, u = Fraction(0), []
        for a, b in rows:
            C += b
            u.append(b * (p * Q + (a - Q) * (1 if C <= p * W else 0) - GL) / W)
        mean = sum(u) / len(u)
        var = Fraction(len(u), len(u) - 1) * sum((v - mean) ** 2 for v in u)
        for ordered in ("window", "stream"):
            got = uneven.query(f"SELECT generalized_lorenz_se(x, {float(p)}, w) AS se FROM t", con,
                               ordered=ordered)["se"][0]
            assert got is not None and abs(got ** 2 - float(var)) <= 1e-12 * max(float(var), 1e-300), (p, ordered)


@pytest.mark.parametrize("ordered", ["window", "refine", "stream"])
def test_lorenz_errors_at_p_0_and_1_are_exactly_zero(ordered):
    # L(0) = 0 and L(1) = 1 for every sample with T > 0 (the definition), so their linearized errors are
    # exactly 0, with or without a survey design; the window plan's terms cancelled to a rounding
    # residue (4.6e-9, 7.9e-9 with a design, on values of 1 to 1e6 with uneven weights)
    rng = np.random.default_rng(1103)
    con = duckdb.connect()
    df = pd.DataFrame({"g": np.arange(400) % 3, "x": np.exp(rng.uniform(0, 14, 400)).round(2),
                       "w": rng.uniform(0.1, 50, 400), "h": np.arange(400) % 4, "c": np.arange(400) % 9})
    con.register("t", df)
    for design in ("", ", strata := h, psu := c"):
        sql = (f"SELECT g, lorenz_se(x, 1, w{design}) AS a, lorenz_se(x, 0, w{design}) AS b, "
               f"top_share_se(x, 0, w{design}) AS c, top_share_ci_lo(x, 1, w{design}) AS d FROM t GROUP BY g")
        got = uneven.query(sql, con, ordered=ordered)
        assert (got[["a", "b", "c"]] == 0.0).all().all(), (design, got)
        assert (abs(got["d"] - 1.0) <= 4e-16).all()  # T(1) − 0·SE: 1 to the last bit or next to it
