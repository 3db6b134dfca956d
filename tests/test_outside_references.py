"""The main job checked on DuckDB against sources outside the project: exact rational arithmetic,
brute-force pairwise sums, handbook closed forms, numpy quantiles, and an open dataset shipped
with statsmodels. Each check names its source."""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest
from scipy.stats import norm

import uneven


def run(sql: str, **tables) -> pd.DataFrame:
    con = duckdb.connect()
    for name, df in tables.items():
        con.register(name, df)
    return uneven.query(sql, con)


def test_exact_fractions_small_weighted_data_with_ties():
    # Source: exact rational arithmetic (Python fractions), pairwise definition of Gini
    # G = Σ_i Σ_j w_i w_j |x_i − x_j| / (2 W² μ), and Lorenz ordinates by polygon interpolation.
    x = [3, 1, 4, 1, 5, 9, 2, 6, 5, 3, 5]
    w = [2, 1, 1, 3, 1, 2, 5, 1, 1, 4, 2]
    X, Wt = [Fraction(v) for v in x], [Fraction(v) for v in w]
    W = sum(Wt)
    mu = sum(a * b for a, b in zip(X, Wt)) / W
    pair = sum(wi * wj * abs(xi - xj) for xi, wi in zip(X, Wt) for xj, wj in zip(X, Wt))
    gini = pair / (2 * W * W * mu)
    # Lorenz at p = 1/2: walk the sorted rows, taking weight until half of W
    need, held = W / 2, Fraction(0)
    for xi, wi in sorted(zip(X, Wt)):
        take = min(wi, need)
        held += take * xi
        need -= take
    lorenz_half = held / (mu * W)
    df = run("SELECT gini(x, w) AS g, lorenz(x, 0.5, w) AS l, hoover(x, w) AS h FROM t",
             t=pd.DataFrame({"x": np.array(x, float), "w": np.array(w, float)}))
    assert df["g"][0] == pytest.approx(float(gini), rel=1e-12)
    assert df["l"][0] == pytest.approx(float(lorenz_half), rel=1e-12)
    # Hoover = ½ Σ w_i |x_i − μ| / T (definition, exact)
    hoover = sum(wi * abs(xi - mu) for xi, wi in zip(X, Wt)) / (2 * mu * W)
    assert df["h"][0] == pytest.approx(float(hoover), rel=1e-12)


def test_gini_equals_brute_force_pairwise_sum():
    # Source: brute-force double sum over all pairs (definition), numpy broadcasting
    rng = np.random.default_rng(3)
    x, w = rng.gamma(2.0, 3.0, 700), rng.uniform(0.2, 4.0, 700)
    want = (w[:, None] * w[None, :] * np.abs(x[:, None] - x[None, :])).sum() / (2 * w.sum() ** 2 * np.average(x, weights=w))
    df = run("SELECT gini(x, w) AS g FROM t", t=pd.DataFrame({"x": x, "w": w}))
    assert df["g"][0] == pytest.approx(want, rel=1e-11)


def test_quantiles_match_numpy_inverted_cdf():
    # Source: numpy.quantile(method="inverted_cdf", weights=...) (numpy ≥ 2.0), integer weights
    rng = np.random.default_rng(5)
    x, w = rng.normal(50, 10, 501).round(2), rng.integers(1, 6, 501).astype(float)
    ps = [0.0, 0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99, 1.0]
    sql = "SELECT " + ", ".join(f"quantile_w(x, {p}, w) AS q{i}" for i, p in enumerate(ps)) + " FROM t"
    df = run(sql, t=pd.DataFrame({"x": x, "w": w}))
    for i, p in enumerate(ps):
        assert df[f"q{i}"][0] == np.quantile(x, p, method="inverted_cdf", weights=w)


def test_quantile_at_one_is_the_largest_value_with_float_weights():
    # numpy inverted_cdf at p = 1 is the largest value (definition: smallest x with F(x) ≥ 1); with
    # float weights the running sum and the total are rounded differently, which once gave NULL
    rng = np.random.default_rng(11)
    frames = [pd.DataFrame({"g": i, "x": rng.lognormal(0, 1, n), "w": rng.uniform(0.1, 3.0, n)})
              for i, n in enumerate(rng.integers(5, 400, 60))]
    df = pd.concat(frames, ignore_index=True)
    res = run("SELECT g, quantile_w(x, 1, w) AS q1, percentile_ratio(x, 1, 0, w) AS r FROM t GROUP BY g ORDER BY g",
              t=df)
    for (_g, d), q1, r in zip(df.groupby("g"), res["q1"], res["r"]):
        top = np.quantile(d.x.to_numpy(), 1.0, method="inverted_cdf", weights=d.w.to_numpy())
        assert q1 == top == d.x.max()
        assert r == pytest.approx(d.x.max() / d.x.min(), rel=1e-15)


@pytest.fixture(scope="module")
def samples():
    rng = np.random.default_rng(20261201)
    n = 400_000
    return pd.DataFrame({
        "lognormal": rng.lognormal(0.0, 0.8, n),
        "pareto": (rng.pareto(3.0, n) + 1.0),  # Pareto(α = 3), x_m = 1
        "expo": rng.exponential(1.0, n),
        "unif": rng.uniform(0.0, 1.0, n),
    })


def test_closed_forms(samples):
    # Source: handbook closed forms (from memory), tolerances ≈ 5 sampling standard deviations at n = 4e5
    s = 0.8
    df = run("""SELECT gini(lognormal) g_ln, theil(lognormal) t_ln, mld(lognormal) m_ln,
                       atkinson(lognormal, 0.5) a_ln, top_share(lognormal, 0.1) top_ln,
                       gini(pareto) g_par, top_share(pareto, 0.01) top_par,
                       gini(expo) g_exp, gini(unif) g_unif, lorenz(unif, 0.5) l_unif
                FROM t""", t=samples)
    r = df.iloc[0]
    assert r.g_ln == pytest.approx(2 * norm.cdf(s / np.sqrt(2)) - 1, abs=3e-3)   # lognormal Gini
    assert r.t_ln == pytest.approx(s * s / 2, abs=6e-3)                         # Theil = σ²/2
    assert r.m_ln == pytest.approx(s * s / 2, abs=4e-3)                         # MLD = σ²/2
    assert r.a_ln == pytest.approx(1 - np.exp(-0.5 * s * s / 2), abs=2e-3)     # Atkinson 1 − e^(−εσ²/2)
    assert r.top_ln == pytest.approx(norm.cdf(s - norm.ppf(0.9)), abs=3e-3)    # top share Φ(σ − Φ⁻¹(1−p))
    assert r.g_par == pytest.approx(1 / (2 * 3 - 1), abs=5e-3)                   # Pareto Gini 1/(2α−1)
    assert r.top_par == pytest.approx(0.01 ** (1 - 1 / 3), abs=4e-3)            # top share p^(1−1/α)
    assert r.g_exp == pytest.approx(0.5, abs=3e-3)                              # exponential Gini ½
    assert r.g_unif == pytest.approx(1 / 3, abs=2e-3)                           # uniform Gini ⅓
    assert r.l_unif == pytest.approx(0.25, abs=2e-3)                            # uniform L(u) = u²


def test_facts_of_the_trade():
    # Facts of common practice: equal values → 0; one unit holds everything among n → (n−1)/n;
    # n equal firms → HHI 10000/n; a monopoly → 10000.
    equal = pd.DataFrame({"x": [7.0] * 9, "e": list(range(9))})
    df = run("SELECT gini(x) g, theil(x) t, atkinson(x, 2) a, cv(x) c, hoover(x) h, hhi(x, e) hhi FROM t",
             t=equal)
    assert df.iloc[0][["g", "t", "a", "c", "h"]].abs().max() < 1e-12
    assert df["hhi"][0] == pytest.approx(10000 / 9, rel=1e-12)
    one = pd.DataFrame({"x": [0.0] * 24 + [50.0]})
    df = run("SELECT gini(x) g, hhi(x) hhi, cr(x, 1) c1 FROM t", t=one)
    assert df["g"][0] == pytest.approx(24 / 25, rel=1e-12)
    assert df["hhi"][0] == pytest.approx(10000.0, rel=1e-12)
    assert df["c1"][0] == pytest.approx(1.0, rel=1e-12)


def test_open_dataset_engel():
    # Source: statsmodels' shipped Engel data (household income and food expenditure); values
    # computed here independently: Gini by the pairwise sum, Theil by math.fsum of the definition.
    import math

    from statsmodels.datasets import engel
    data = engel.load_pandas().data
    inc = data["income"].to_numpy()
    gini = np.abs(inc[:, None] - inc[None, :]).sum() / (2 * len(inc) ** 2 * inc.mean())
    mu = math.fsum(inc) / len(inc)
    theil = math.fsum(v / mu * math.log(v / mu) for v in inc) / len(inc)
    df = run("SELECT gini(income) g, theil(income) t, gini(foodexp, income) gf, count(*) n FROM engel",
             engel=data)
    assert df["n"][0] == len(inc) == 235
    assert df["g"][0] == pytest.approx(gini, rel=1e-12)
    assert df["t"][0] == pytest.approx(theil, rel=1e-10)
    f, w = data["foodexp"].to_numpy(), inc
    gf = (w[:, None] * w[None, :] * np.abs(f[:, None] - f[None, :])).sum() / (2 * w.sum() ** 2 * np.average(f, weights=w))
    assert df["gf"][0] == pytest.approx(gf, rel=1e-11)


def test_same_digits_whatever_the_row_order_or_thread_count():
    rng = np.random.default_rng(9)
    df = pd.DataFrame({"g": rng.integers(0, 5, 200_000), "x": rng.lognormal(0, 1, 200_000),
                       "w": rng.uniform(0.5, 2, 200_000)})
    sql = "SELECT g, gini(x, w) AS a, palma(x) AS b, theil(x, w) AS c FROM t GROUP BY g ORDER BY g"
    base = uneven.query(sql, _con(df), threads=1)
    for threads, frame in [(2, df.sample(frac=1.0, random_state=1)), (4, df.iloc[::-1])]:
        other = uneven.query(sql, _con(frame), threads=threads)
        np.testing.assert_allclose(other[["a", "b", "c"]], base[["a", "b", "c"]], rtol=1e-12)


def _con(df):
    con = duckdb.connect()
    con.register("t", df)
    return con
