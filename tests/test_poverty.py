"""Poverty-line indicators and the Wolfson index against outside sources: a hand-worked example in
exact fractions, closed forms of the uniform, exponential and lognormal distributions (on fine
quantile grids), the influence functions against numerical derivatives, a Monte Carlo run of the
intervals computed in SQL, and the errors of bad parameters. The engine matrix
(test_measures_engines.py) compares every engine with the numpy reference; this file checks the
reference (and DuckDB) against sources that share nothing with it."""

from __future__ import annotations

import math
from fractions import Fraction
from statistics import NormalDist

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from uneven.reference import poverty as RP
from uneven.reference import se as RSE

PHI = NormalDist()


def _run(sql, **frames):
    con = duckdb.connect()
    for name, frame in frames.items():
        con.register(name, frame)
    return uneven.query(sql, con=con)


# --- a hand-worked example, exact fractions ----------------------------------------------------
# x = 1, 2, 3, 4, 10 (unweighted). Median (smallest x with C/W ≥ 1/2): 3. Line 0.6·3 = 9/5:
# below it only 1, so the share below is 1/5, the median of those below is 1 and the gap
# (9/5 − 1)/(9/5) = 4/9. FGT(2) at the absolute line 3: ((3−1)/3)² + ((3−2)/3)² = 5/9, over 5 rows
# = 1/9. Wolfson: μ = 4, L(1/2) = (1 + 2 + ½·3)/20 = 9/40, Gini = Σ|xi − xj| / (2n²μ) = 80/200 = 2/5,
# so 2·(4/3)·(1 − 9/20 − 2/5) = 2/5 (the formula from Wolfson 1994, from memory).
HAND = {"x": [1.0, 2.0, 3.0, 4.0, 10.0]}
HAND_EXPECTED = {
    "below_line_share(x, 0.6)": Fraction(1, 5),
    "median_gap(x, 0.6)": Fraction(4, 9),
    "fgt(x, 2, 3)": Fraction(1, 9),
    "fgt(x, 0, 3)": Fraction(2, 5),
    "fgt(x, 1, 3)": Fraction(1, 5),  # (2/3 + 1/3)/5
    "fgt_relative(x, 1, 0.6)": Fraction(4, 45),  # ((9/5 − 1)/(9/5))/5
    "wolfson(x)": Fraction(2, 5),
}


@pytest.mark.parametrize("call", list(HAND_EXPECTED))
def test_hand_worked_example(call):
    want = float(HAND_EXPECTED[call])
    got = _run(f"SELECT {call} AS v FROM t", t=pd.DataFrame(HAND))["v"][0]
    assert abs(got - want) < 1e-15
    name, args = call.split("(", 1)
    params = [float(a) for a in args.rstrip(")").split(",")[1:]]
    assert abs(getattr(RP, name)(HAND["x"], *params) - want) < 1e-15


def test_weights_are_replications():
    # a weight of 2 counts like the row written twice (the contract's weighted definitions)
    x, w = [1.0, 2.0, 3.0, 4.0, 10.0], [2.0, 1.0, 1.0, 3.0, 1.0]
    rep = [v for v, k in zip(x, w) for _ in range(int(k))]
    for name, params in (("below_line_share", (0.6,)), ("median_gap", (0.8,)), ("fgt", (2.0, 3.5)),
                         ("fgt_relative", (1.0, 0.9)), ("wolfson", ())):
        assert getattr(RP, name)(x, *params, w) == pytest.approx(getattr(RP, name)(rep, *params), abs=1e-15)


# --- closed forms on quantile grids ------------------------------------------------------------
N = 200_000
U = (np.arange(N) + 0.5) / N  # the uniform(0, 1) quantile grid


def test_uniform_closed_forms():
    # uniform(0,1): FGT_α(z) = ∫_0^z ((z−x)/z)^α dx = z/(α+1); M = ½, so the line frac·½ has
    # share frac/2 below it and the median of those below is frac/4: gap ½; Wolfson with μ = M = ½,
    # L(½) = ¼, G = ⅓: 2·(1 − ½ − ⅓) = ⅓ (handbook: L(u) = u², Gini ⅓)
    for alpha in (0.0, 1.0, 2.0):
        assert RP.fgt(U, alpha, 0.4) == pytest.approx(0.4 / (alpha + 1), abs=1e-5)
    assert RP.below_line_share(U, 0.6) == pytest.approx(0.3, abs=1e-5)
    assert RP.median_gap(U, 0.6) == pytest.approx(0.5, abs=1e-4)
    assert RP.fgt_relative(U, 2.0, 0.6) == pytest.approx(0.3 / 3, abs=1e-5)
    assert RP.wolfson(U) == pytest.approx(1 / 3, abs=1e-5)


def test_exponential_closed_forms():
    # exponential(1): M = ln 2, F(z) = 1 − e^(−z), L(p) = p + (1 − p) ln(1 − p), Gini ½ (handbook,
    # from memory): the share below frac·ln 2 is 1 − 2^(−frac); Wolfson 2(μ/M)(1 − 2L(½) − G) =
    # (2/ln 2)(ln 2 − ½) = 2 − 1/ln 2
    x = -np.log1p(-U)
    assert RP.below_line_share(x, 0.6) == pytest.approx(1 - 2 ** -0.6, abs=1e-5)
    assert RP.wolfson(x) == pytest.approx(2 - 1 / math.log(2), abs=1e-4)


def test_lognormal_closed_forms():
    # lognormal(0, σ): M = 1, μ = e^(σ²/2), share below frac: Φ(ln frac / σ); L(½) = Φ(−σ),
    # Gini 2Φ(σ/√2) − 1 (handbook closed forms of DESIGN.md)
    sigma = 0.7
    x = np.exp(sigma * np.array([PHI.inv_cdf(u) for u in U[::4]]))
    assert RP.below_line_share(x, 0.6) == pytest.approx(PHI.cdf(math.log(0.6) / sigma), abs=1e-4)
    want = 2 * math.exp(sigma ** 2 / 2) * (2 - 2 * PHI.cdf(-sigma) - 2 * PHI.cdf(sigma / math.sqrt(2)))
    assert RP.wolfson(x) == pytest.approx(want, abs=1e-3)
    # FGT(0) at the absolute line z: Φ(ln z / σ)
    assert RP.fgt(x, 0.0, 0.8) == pytest.approx(PHI.cdf(math.log(0.8) / sigma), abs=1e-4)


def test_equal_incomes():
    # equal incomes: nobody is strictly below any fraction of the median (share 0, gap undefined),
    # Wolfson 0 (fact of the trade: no spread, no polarization)
    df = pd.DataFrame({"x": [7.0] * 6})
    res = _run("SELECT below_line_share(x, 0.6) AS h, median_gap(x, 0.6) AS g, wolfson(x) AS p, "
               "fgt(x, 1, 10) AS f FROM t", t=df)
    assert res["h"][0] == 0.0 and pd.isna(res["g"][0]) and abs(res["p"][0]) < 1e-15
    assert res["f"][0] == pytest.approx(0.3, abs=1e-15)  # every row 3/10 below the line 10


def test_no_relative_line_when_the_median_is_not_positive():
    df = pd.DataFrame({"x": [-3.0, -1.0, 0.0, 0.0, 5.0]})
    res = _run("SELECT below_line_share(x, 0.6) AS h, median_gap(x, 0.6) AS g, fgt_relative(x, 1, 0.6) AS f "
               "FROM t", t=df)
    assert all(pd.isna(res[c][0]) for c in ("h", "g", "f"))


# --- influence functions against numerical derivatives ------------------------------------------

def _numerical(estimator, x, w, k, step=1e-6):
    up, down = w.copy(), w.copy()
    up[k] += step
    down[k] -= step
    return (estimator(x, up) - estimator(x, down)) / (2 * step)


def test_fgt_influence_is_its_derivative():
    # at a fixed line the estimator is smooth in the weights: the score is ∂F/∂w_k (Deville 1999, from memory)
    rng = np.random.default_rng(3)
    x, w = rng.lognormal(1, 0.8, 40), rng.uniform(0.5, 3.0, 40)
    for alpha in (0.0, 1.0, 2.0):
        _, z = RP.influence("fgt", x, (alpha, 2.5), w)
        for k in range(0, 40, 3):
            assert z[k] == pytest.approx(_numerical(lambda a, b: RP.fgt(a, alpha, 2.5, b), x, w, k), abs=1e-7)


def test_relative_scores_less_their_median_part_are_derivatives():
    # small weight changes leave the median (a step function of the weights) where it is, so the
    # numerical derivative sees only the fixed-line part; the rest is (∂θ/∂M)·z_M
    rng = np.random.default_rng(4)
    x, w = rng.lognormal(1, 0.8, 41), rng.uniform(0.5, 3.0, 41)
    M = RP.R.quantile_w(x, 0.5, w)
    zM, _ = RP.median_score(x, w)
    for alpha in (1.0, 2.0):
        F, z = RP.influence("fgt_relative", x, (alpha, 0.6), w)
        slope = alpha / (0.6 * M) * (RP.fgt_relative(x, alpha - 1, 0.6, w) - F)
        for k in range(0, 41, 4):
            num = _numerical(lambda a, b: RP.fgt_relative(a, alpha, 0.6, b), x, w, k)
            assert z[k] - slope * 0.6 * zM[k] == pytest.approx(num, abs=1e-7)
    P, z = RP.influence("wolfson", x, (), w)
    for k in range(0, 41, 4):
        num = _numerical(RP.wolfson, x, w, k)
        assert z[k] + P / M * zM[k] == pytest.approx(num, abs=1e-6)


# --- the relative median gap's score (docs/poverty.md) -------------------------------------------
# G = 1 − M_p/z, z = f·M, M_p = Q(H/2), H = F(z). For the exponential (F(x) = 1 − e^(−x), density
# e^(−x)) every piece is in closed form: M = ln 2, z = f·ln 2, H = 1 − e^(−z), M_p = −ln(1 − H/2),
# and the influence function (derived in docs/poverty.md) is constant between the jump points
# M_p < z < M. Written here from the distribution, sharing nothing with reference.poverty.

def _exponential_gap_if(frac: float) -> dict[str, float]:
    M = math.log(2.0)
    z = frac * M
    H = 1.0 - math.exp(-z)
    Mp = -math.log(1.0 - H / 2.0)
    f_M, f_z, f_p = 0.5, math.exp(-z), 1.0 - H / 2.0

    def gap_if(below_z: bool, at_or_below_mp: bool, at_or_below_m: bool) -> float:
        if_m = (0.5 - at_or_below_m) / f_M
        if_mp = (0.5 * below_z - at_or_below_mp + 0.5 * f_z * frac * if_m) / f_p
        return -if_mp / z + Mp / z ** 2 * frac * if_m

    return {"below M_p": gap_if(True, True, True), "M_p to z": gap_if(True, False, True),
            "z to M": gap_if(False, False, True), "above M": gap_if(False, False, False),
            "_edges": (Mp, z, M), "_gap": 1.0 - Mp / z, "_H": H}


def test_median_gap_closed_form_on_the_exponential():
    # the estimator on a fine grid of exponential quantiles equals the closed form 1 − M_p/z
    n = 100_000
    x = -np.log1p(-(np.arange(n) + 0.5) / n)
    assert RP.median_gap(x, 0.6) == pytest.approx(_exponential_gap_if(0.6)["_gap"], abs=1e-4)


def test_median_gap_score_is_the_numerical_influence_function():
    # Data: the exponential's quantiles on a fine grid (no sampling noise), alternate weights 0.5 and
    # 1.5. Moving a share ε of the weight into a range of values (F_ε = (1 − ε)F + ε·G_range) and
    # back, the central difference of the estimator, [G(F_ε) − G(F_−ε)]/(2ε), is the influence
    # function averaged over the range (Hampel 1974, from memory): it must equal the reference's
    # score W·z_k there, and both the closed form above. Ranges avoid the jump points M_p, z, M.
    n = 100_000
    x = -np.log1p(-(np.arange(n) + 0.5) / n)
    w = np.where(np.arange(n) % 2 == 0, 0.5, 1.5)
    G, z = RP.influence("median_gap", x, (0.6,), w)
    W = w.sum()
    closed = _exponential_gap_if(0.6)
    Mp, line, M = closed["_edges"]
    assert (Mp, line, M) == pytest.approx((0.1865, 0.4159, 0.6931), abs=1e-4)
    ranges = {"below M_p": (0.02, 0.17), "M_p to z": (0.2, 0.4), "z to M": (0.43, 0.68), "above M": (0.72, 5.0)}
    eps = 0.004
    for key, (lo, hi) in ranges.items():
        inside = (x > lo) & (x < hi)
        share = w[inside].sum() / W
        lam = eps / share
        up, down = w.copy(), w.copy()
        up[inside] *= 1 + lam
        down[inside] *= 1 - lam
        e_up, e_down = lam * share / (1 + lam * share), -lam * share / (1 - lam * share)
        numerical = (RP.median_gap(x, 0.6, up) - RP.median_gap(x, 0.6, down)) / (e_up - e_down)
        score = W * z[inside]
        assert np.ptp(score) == 0  # constant between the jump points, as the formula says
        # 0.005: the difference's O(ε) curvature; the reference's densities are Siddiqui spacings
        assert score[0] == pytest.approx(numerical, abs=0.005), key
        assert score[0] == pytest.approx(closed[key], abs=0.005), key


def _gap_monte_carlo(draw, reps: int, n: int, frac: float, seed: int, weighted: bool):
    """(sd of the estimator over ``reps`` samples, mean of the reference's standard errors)."""
    rng = np.random.default_rng(seed)
    est, ses = [], []
    for _ in range(reps):
        x = draw(rng, n)
        w = rng.uniform(0.5, 2.0, n) if weighted else None
        est.append(RP.median_gap(x, frac, w))
        ses.append(RSE.se("median_gap", x, (frac,), w))
    return float(np.std(est, ddof=1)), float(np.mean(ses))


def _uniform_gap_sd(frac: float, n: int) -> float:
    # uniform(0, 1): M = ½, z = f/2, M_p = f/4, every density 1, and the median's part cancels:
    # IF = (2/f)·[1(x ≤ f/4) − ½·1(x < f/2)], E[IF²] = (4/f²)·(f/2)·¼ = 1/(2f) (derived in docs/poverty.md)
    return math.sqrt(1.0 / (2.0 * frac * n))


def _exponential_gap_sd(frac: float, n: int) -> float:
    c = _exponential_gap_if(frac)
    Mp, z, M = c["_edges"]
    probs = {"below M_p": 1 - math.exp(-Mp), "M_p to z": math.exp(-Mp) - math.exp(-z),
             "z to M": math.exp(-z) - 0.5, "above M": 0.5}
    return math.sqrt(sum(p * c[k] ** 2 for k, p in probs.items()) / n)


def test_median_gap_se_monte_carlo_small_run():
    # 200 samples: the Monte Carlo sd is itself uncertain by about 1/sqrt(2·199) = 5%, and the
    # density spacings bias small-sample SEs a little: the bounds are loose (15%)
    sd, se = _gap_monte_carlo(lambda r, n: r.exponential(1.0, n), 200, 1000, 0.6, 41, weighted=False)
    want = _exponential_gap_sd(0.6, 1000)
    print(f"median gap, exponential, n = 1000: Monte Carlo sd {sd:.5f}, mean SE {se:.5f}, asymptotic {want:.5f}")
    assert sd == pytest.approx(want, rel=0.15) and se == pytest.approx(want, rel=0.15)
    sd, se = _gap_monte_carlo(lambda r, n: r.uniform(0.0, 1.0, n), 200, 1000, 0.6, 42, weighted=False)
    want = _uniform_gap_sd(0.6, 1000)
    print(f"median gap, uniform, n = 1000: Monte Carlo sd {sd:.5f}, mean SE {se:.5f}, asymptotic {want:.5f}")
    assert sd == pytest.approx(want, rel=0.15) and se == pytest.approx(want, rel=0.15)
    sd, se = _gap_monte_carlo(lambda r, n: r.lognormal(0.0, 0.8, n), 200, 1000, 0.6, 43, weighted=True)
    print(f"median gap, weighted lognormal, n = 1000: Monte Carlo sd {sd:.5f}, mean SE {se:.5f}")
    assert se == pytest.approx(sd, rel=0.15)


@pytest.mark.slow
def test_median_gap_se_monte_carlo_large_run():
    for name, draw, weighted, want in (
            ("exponential", lambda r, n: r.exponential(1.0, n), False, _exponential_gap_sd(0.6, 4000)),
            ("weighted lognormal", lambda r, n: r.lognormal(0.0, 0.8, n), True, None)):
        sd, se = _gap_monte_carlo(draw, 2000, 4000, 0.6, 44, weighted)
        print(f"median gap, {name}, n = 4000, 2000 samples: Monte Carlo sd {sd:.5f}, mean SE {se:.5f}"
              + (f", asymptotic {want:.5f}" if want else ""))
        assert se == pytest.approx(sd, rel=0.05)
        if want:
            assert sd == pytest.approx(want, rel=0.05)


# --- Monte Carlo: intervals computed in SQL ------------------------------------------------------

def _coverage(samples: int, n: int, seed: int):
    """Lognormal(0, 0.8) samples, one group each, one query: the share of 95% intervals holding the
    true share below 60% of the median, Φ(ln 0.6 / σ), and the true Wolfson (closed form above)."""
    sigma = 0.8
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"s": np.repeat(np.arange(samples), n), "x": rng.lognormal(0, sigma, samples * n),
                       "w": rng.uniform(0.5, 2.0, samples * n)})
    true_h = PHI.cdf(math.log(0.6) / sigma)
    true_p = 2 * math.exp(sigma ** 2 / 2) * (2 - 2 * PHI.cdf(-sigma) - 2 * PHI.cdf(sigma / math.sqrt(2)))
    res = _run("SELECT s, below_line_share_ci_lo(x, 0.6) AS hl, below_line_share_ci_hi(x, 0.6) AS hh, "
               "wolfson_ci_lo(x) AS pl, wolfson_ci_hi(x) AS ph, fgt_relative_ci_lo(x, 1, 0.6) AS fl, "
               "fgt_relative_ci_hi(x, 1, 0.6) AS fh FROM t GROUP BY s", t=df)
    rate_h = ((res.hl <= true_h) & (true_h <= res.hh)).mean()
    rate_p = ((res.pl <= true_p) & (true_p <= res.ph)).mean()
    return rate_h, rate_p, res


def test_coverage_small_run():
    # 300 samples of 500: a 95% interval covers with a binomial spread of ±0.025 at two standard
    # deviations; the band below is wider still (density estimates bias small samples)
    rate_h, rate_p, res = _coverage(300, 500, 11)
    print(f"coverage: share below the line {rate_h:.3f}, Wolfson {rate_p:.3f}")
    assert 0.88 <= rate_h <= 0.99
    assert 0.88 <= rate_p <= 0.99


@pytest.mark.slow
def test_coverage_large_run():
    rate_h, rate_p, _ = _coverage(2000, 2000, 12)
    print(f"coverage (2000 samples of 2000): share below the line {rate_h:.3f}, Wolfson {rate_p:.3f}")
    assert 0.93 <= rate_h <= 0.97
    assert 0.93 <= rate_p <= 0.97


def test_sql_standard_error_matches_reference_with_a_design():
    rng = np.random.default_rng(21)
    n = 600
    df = pd.DataFrame({"x": rng.lognormal(2, 0.7, n), "w": rng.uniform(1, 4, n), "h": rng.integers(0, 3, n),
                       "c": rng.integers(0, 8, n)})
    df["psu"] = df["h"] * 100 + df["c"]
    res = _run("SELECT below_line_share_se(x, 0.6, w, strata := h, psu := psu) AS a, "
               "wolfson_se(x, w, strata := h, psu := psu) AS b, fgt_se(x, 2, 5, w, strata := h, psu := psu) AS c, "
               "median_gap_se(x, 0.6, w, strata := h, psu := psu) AS d FROM t", t=df)
    args = (df.x.to_numpy(), )
    want_a = RSE.se("below_line_share", *args, (0.6,), df.w.to_numpy(), df.h.to_numpy(), df.psu.to_numpy())
    want_b = RSE.se("wolfson", *args, (), df.w.to_numpy(), df.h.to_numpy(), df.psu.to_numpy())
    want_c = RSE.se("fgt", *args, (2.0, 5.0), df.w.to_numpy(), df.h.to_numpy(), df.psu.to_numpy())
    assert res["a"][0] == pytest.approx(want_a, rel=1e-9)
    assert res["b"][0] == pytest.approx(want_b, rel=1e-9)
    assert res["c"][0] == pytest.approx(want_c, rel=1e-9)
    want_d = RSE.se("median_gap", *args, (0.6,), df.w.to_numpy(), df.h.to_numpy(), df.psu.to_numpy())
    assert res["d"][0] == pytest.approx(want_d, rel=1e-9) and want_d > 0


def test_no_standard_error_for_fractional_alpha():
    # 0 < α < 1: the line's derivative has no stable sample form; NULL rather than a made-up number
    df = pd.DataFrame({"x": np.arange(1.0, 40.0)})
    res = _run("SELECT fgt_relative_se(x, 0.5, 0.6) AS v, fgt_relative(x, 0.5, 0.6) AS e FROM t", t=df)
    assert pd.isna(res["v"][0]) and not pd.isna(res["e"][0])


# --- errors --------------------------------------------------------------------------------------

@pytest.mark.parametrize("sql,needle", [
    ("SELECT below_line_share(x, 0) FROM t", "frac must be above 0"),
    ("SELECT below_line_share(x, 1.5) FROM t", "frac must be a fraction"),
    ("SELECT fgt(x, 1, 0) FROM t", "line must be above 0"),
    ("SELECT fgt(x, 1, -2) FROM t", "line must be above 0"),
    ("SELECT fgt(x, -1, 3) FROM t", "alpha must be at least 0"),
    ("SELECT fgt_relative(x, 2) FROM t", "fgt_relative"),
])
def test_bad_parameters_are_clear_errors(sql, needle):
    with pytest.raises(uneven.UnevenError, match=needle):
        uneven.compile(sql)


def test_bootstrap_agrees_with_linearization():
    # an independent route to the same sampling variation: Poisson replicate weights resampling
    # whole rows (the line is recomputed in every replicate). 400 replicates estimate an SE to about
    # 1/sqrt(2·400) = 3.5% relative; the band allows 15%
    rng = np.random.default_rng(31)
    n = 1500
    df = pd.DataFrame({"x": rng.lognormal(3, 0.8, n), "w": rng.uniform(0.5, 3, n)})
    res = _run("SELECT below_line_share_boot_se(x, 0.6, w, replicates := 400) AS hb, below_line_share_se(x, 0.6, w) AS hl, "
               "wolfson_boot_se(x, w, replicates := 400) AS pb, wolfson_se(x, w) AS pl, "
               "fgt_relative_boot_se(x, 2, 0.6, w, replicates := 400) AS fb, fgt_relative_se(x, 2, 0.6, w) AS fl, "
               "median_gap_boot_se(x, 0.6, w, replicates := 400) AS gb, median_gap_se(x, 0.6, w) AS gl FROM t", t=df)
    for boot, lin in (("hb", "hl"), ("pb", "pl"), ("fb", "fl"), ("gb", "gl")):
        assert res[boot][0] == pytest.approx(res[lin][0], rel=0.15), (boot, res[boot][0], res[lin][0])
