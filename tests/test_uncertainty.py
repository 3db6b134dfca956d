"""Standard errors and confidence intervals by linearization: SQL (every engine) against the numpy
reference (uneven.reference.se), and the reference itself against independent routes — a
numerical derivative of the estimator, Davidson's (2009) variance (written from memory), a
hand-computed design variance (the with-replacement variance of a total over strata and PSUs:
common practice, formula quoted from memory) and a Monte Carlo coverage check."""

from __future__ import annotations

import math
from fractions import Fraction
from statistics import NormalDist

import numpy as np
import pandas as pd
import pytest

import uneven
from conftest import make_groups
from uneven import reference as R
from uneven.errors import MeasureArgumentError
from uneven.reference import se as rse

# (SQL name, params, data: "groups" = make_groups (ties, zeros, NULLs) or "smooth" = tie-free)
CASES = [
    ("gini", (), "groups"), ("lorenz", (0.3,), "groups"), ("bottom_share", (0.4,), "groups"),
    ("generalized_lorenz", (0.5,), "groups"), ("top_share", (0.1,), "groups"), ("palma", (), "groups"),
    ("s80s20", (), "groups"), ("quantile_w", (0.5,), "smooth"), ("quantile_w", (0.9,), "smooth"),
    ("quantile_w", (0.0,), "smooth"), ("percentile_ratio", (0.9, 0.1), "smooth"), ("theil", (), "groups"),
    ("mld", (), "groups"), ("ge", (2.0,), "groups"), ("ge", (-1.0,), "groups"), ("ge", (0.5,), "groups"),
    ("ge", (0.0,), "groups"), ("ge", (1.0,), "groups"), ("atkinson", (0.5,), "groups"),
    ("atkinson", (1.0,), "groups"), ("atkinson", (2.0,), "groups"), ("atkinson", (0.0,), "groups"),
]
DESIGNS = {"none": "", "strata": ", strata := h", "psu": ", psu := c", "strata+psu": ", strata := h, psu := c"}


def smooth_groups(seed=11, n_groups=3, rows=150) -> pd.DataFrame:
    """Invented tie-free data (continuous values and weights) in a few groups, one with a NULL key."""
    rng = np.random.default_rng(seed)
    frames = []
    for g in range(n_groups):
        n = rows + 13 * g
        frames.append(pd.DataFrame({"grp": None if g == n_groups - 1 else f"s{g}", "x": rng.lognormal(2, 0.7, n),
                                    "w": rng.uniform(0.5, 4.0, n)}))
    return pd.concat(frames, ignore_index=True)


def with_design(df: pd.DataFrame, seed=3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    df = df.copy()
    df["h"] = rng.integers(0, 3, len(df))
    df["c"] = rng.integers(0, 6, len(df))  # PSU numbers repeat across strata: a PSU is (h, c)
    return df


@pytest.fixture(scope="module")
def datasets(engine):
    out = {"groups": with_design(make_groups()), "smooth": with_design(smooth_groups())}
    for name, df in out.items():
        engine.load(df, name)
    return out


def _reference_by_group(df, fn, weighted, design):
    out = {}
    for key, d in df.groupby("grp", dropna=False, sort=False):
        d = d[d["x"].notna()]
        if weighted:
            d = d[d["w"].notna() & (d["w"] > 0)]
        key = None if not isinstance(key, str) else key
        h = d["h"].to_numpy() if "strata" in design else None
        c = d["c"].to_numpy() if "psu" in design else None  # within a stratum: PSU (h, c)
        out[key] = fn(d["x"].to_numpy(float), d["w"].to_numpy(float) if weighted else None, h, c)
    return out


def _compare(engine, df, table, sql_call, fn, weighted, design, res=None):
    if res is None:
        res = engine.run(f"SELECT grp, {sql_call} AS m FROM {table} GROUP BY grp")
    want = _reference_by_group(df, fn, weighted, design)
    assert len(res) == len(want)
    for _, row in res.iterrows():
        key = row["grp"] if isinstance(row["grp"], str) else None
        got, exp_ = row["m"], want[key]
        if exp_ is None:
            assert got is None or pd.isna(got), f"{sql_call} group {key}: got {got}, want NULL"
        else:
            assert not pd.isna(got) and abs(got - exp_) <= 1e-9 * abs(exp_) + 1e-15, \
                f"{sql_call} group {key}: got {got}, want {exp_}"


# every design for a few measures (one per kind of score); plain and full design for the rest
ALL_DESIGNS = {"gini", "lorenz", "quantile_w", "theil", "atkinson"}
MATRIX = [(c, d) for c in CASES for d in DESIGNS if c[0] in ALL_DESIGNS or d in ("none", "strata+psu")]


def _se_call(case, design, weighted) -> str:
    name, params, _ = case
    args = "".join(f", {p}" for p in params) + (", w" if weighted else "")
    return f"{name}_se(x{args}{DESIGNS[design]})"


_BATCHED: dict = {}  # (table, design, weighted) -> {call: result frame}, for Spark


def _batched(engine, table, design, weighted) -> dict:
    """On Spark, which plans every query for about a second however few its rows, the calls of one
    (table, design, weighting) run as one query, once: each test reads its own column. The other
    engines run each call alone (the shape a user writes most)."""
    key = (table, design, weighted)
    if key not in _BATCHED:
        calls = [_se_call(c, d, weighted) for c, d in MATRIX if d == design and c[2] == table]
        res = engine.run(f"SELECT grp, {', '.join(f'{call} AS m{i}' for i, call in enumerate(calls))} "
                         f"FROM {table} GROUP BY grp")
        _BATCHED[key] = {call: res[["grp", f"m{i}"]].rename(columns={f"m{i}": "m"}) for i, call in enumerate(calls)}
    return _BATCHED[key]


@pytest.mark.parametrize("weighted", [False, True], ids=["unweighted", "weighted"])
@pytest.mark.parametrize("case,design", MATRIX, ids=[f"{c[0]}{c[1]}-{d}" for c, d in MATRIX])
def test_se_matches_reference(case, design, engine, datasets, weighted):
    name, params, data = case
    call = _se_call(case, design, weighted)
    res = _batched(engine, data, design, weighted)[call] if engine.name == "spark" else None
    _compare(engine, datasets[data], data, call,
             lambda x, w, h, c: rse.se(name, x, params, w, h, c), weighted, design, res)


@pytest.mark.parametrize("name,params,data", [CASES[0], CASES[5], CASES[7], CASES[11], CASES[19]],
                         ids=lambda v: str(v))
def test_interval_matches_reference(engine, datasets, name, params, data):
    args = "".join(f", {p}" for p in params)
    for end, pick in (("lo", 0), ("hi", 1)):
        call = f"{name}_ci_{end}(x{args}, w, strata := h, level := 0.9)"
        _compare(engine, datasets[data], data, call,
                 lambda x, w, h, c: rse.ci(name, x, params, w, 0.9, h, c)[pick], True, "strata")


def test_estimate_next_to_its_se_shares_one_sort():
    sql = uneven.compile("SELECT g, gini(x, w), gini_se(x, w), gini_ci_hi(x, w) FROM t GROUP BY g")
    assert "_uv_ord_" not in sql  # the plain gini rides on the linearized pass
    # C, S and the group minimum, in one window specification. The estimate keeps its centring on
    # the minimum (digits when values share a large offset), so it does not reuse the SE's C·x − S.
    assert sql.count("ORDER BY") == 3


def test_se_results_agree_with_estimate_column(engine, datasets):
    # the estimate computed on the linearized pass equals the plain measure (numpy reference)
    res = engine.run("SELECT grp, gini(x, w) AS g, gini_se(x, w) AS s, theil(x) AS t, theil_se(x) AS ts "
                     "FROM smooth GROUP BY grp")
    df = datasets["smooth"]
    for _, row in res.iterrows():
        d = df[df["grp"] == row["grp"]] if isinstance(row["grp"], str) else df[df["grp"].isna()]
        assert abs(row["g"] - R.gini(d.x, d.w)) < 1e-12
        assert abs(row["t"] - R.theil(d.x)) < 1e-12


# --- the reference against independent routes -------------------------------------------------

def _numerical_influence(estimator, x, w, k, step=1e-6):
    """∂θ/∂w_k by central differences: the linearized variable is this derivative (Deville 1999,
    from memory)."""
    up, down = w.copy(), w.copy()
    up[k] += step
    down[k] -= step
    return (estimator(x, up) - estimator(x, down)) / (2 * step)


DERIVATIVE_CASES = [
    ("gini", (), R.gini), ("lorenz", (0.37,), lambda x, w: R.lorenz(x, 0.37, w)),
    ("generalized_lorenz", (0.5,), lambda x, w: R.generalized_lorenz(x, 0.5, w)),
    ("top_share", (0.1,), lambda x, w: R.top_share(x, 0.1, w)), ("palma", (), R.palma),
    ("s80s20", (), R.s80s20), ("theil", (), R.theil), ("mld", (), R.mld),
    ("ge", (2.0,), lambda x, w: R.ge(x, 2.0, w)), ("ge", (-0.5,), lambda x, w: R.ge(x, -0.5, w)),
    ("atkinson", (0.5,), lambda x, w: R.atkinson(x, 0.5, w)), ("atkinson", (1.0,), lambda x, w: R.atkinson(x, 1.0, w)),
    ("atkinson", (2.5,), lambda x, w: R.atkinson(x, 2.5, w)),
]


@pytest.mark.parametrize("name,params,estimator", DERIVATIVE_CASES, ids=[f"{c[0]}{c[1]}" for c in DERIVATIVE_CASES])
def test_influence_is_the_derivative_of_the_estimator(name, params, estimator):
    # independent route: differentiate the numpy estimator (reference.py) numerically, row by row
    rng = np.random.default_rng(5)
    x, w = rng.lognormal(1, 0.8, 40), rng.uniform(0.5, 3.0, 40)
    _, z = rse.influence(name, x, params, w)
    for k in range(0, 40, 3):
        num = _numerical_influence(estimator, x, w, k)
        assert abs(z[k] - num) <= 1e-6 * max(1.0, abs(num)), (k, z[k], num)


def test_gini_variance_agrees_with_davidson_2009():
    # Davidson (2009, J. Econometrics 150, 30–40), written from memory: Ẑ_i = −(Ĝ+1) x_(i)
    # + (2i−1)/n · x_(i) − (2/n) Σ_j x_(j) over the values below x_(i), and Var(Ĝ) = Σ (Ẑ_i − Z̄)² / (n μ̂)².
    # Reading "below" as the midpoint running sum Σ_{j<i} x_(j) + x_(i)/2, our variance is exactly
    # n/(n−1) times Davidson's; reading it as Σ_{j≤i} x_(j), the two differ by a term x_(i)/n in Ẑ_i,
    # so the ratio is 1 + O(1/n). Both readings are checked.
    rng = np.random.default_rng(9)
    for n in (200, 2000, 20000):
        x = np.sort(rng.lognormal(0, 1, n))
        G, mu = R.gini(x), x.mean()
        i = np.arange(1, n + 1)
        ours = rse.se("gini", x) ** 2
        for below, tol in ((np.cumsum(x) - x / 2, 1e-10), (np.cumsum(x), 5.0 / n)):
            Z = -(G + 1) * x + (2 * i - 1) / n * x - 2 / n * below
            davidson = ((Z - Z.mean()) ** 2).sum() / (n * mu) ** 2
            assert abs(ours / (davidson * n / (n - 1)) - 1) < tol


def test_design_variance_by_hand():
    # two strata, PSUs (a, b) in stratum 1 and (c, d, e) in stratum 2, exact fractions:
    # v = Σ_h n_h/(n_h − 1) Σ_c (U_hc − Ū_h)²  (ultimate-cluster, with replacement: the usual
    # design-variance formula of survey practice, common practice, quoted from memory)
    u = [Fraction(1), Fraction(2), Fraction(-1), Fraction(4), Fraction(3), Fraction(0), Fraction(5)]
    h = [1, 1, 1, 2, 2, 2, 2]
    c = ["a", "a", "b", "c", "d", "d", "e"]
    U1 = [Fraction(3), Fraction(-1)]
    U2 = [Fraction(4), Fraction(3), Fraction(5)]
    want = sum(len(U) / Fraction(len(U) - 1) * sum((v - sum(U) / len(U)) ** 2 for v in U) for U in (U1, U2))
    got = rse.design_variance([float(v) for v in u], h, c)
    assert abs(got - float(want)) < 1e-12


def test_quantile_density_uses_hall_sheather_bandwidth():
    # Hall & Sheather (1988; bandwidth formula from memory) at p = 1/2 and α = 0.05:
    # h = n^(−1/3) · 1.96^(2/3) · (1.5 φ(0)²)^(1/3)
    nd = NormalDist()
    want = 1000 ** (-1 / 3) * nd.inv_cdf(0.975) ** (2 / 3) * (1.5 / (2 * math.pi)) ** (1 / 3)
    assert abs(rse.hall_sheather(0.5, 1000) - want) < 1e-15
    # the quantile SE on a large uniform(0, 1) sample ≈ sqrt(p(1−p)/n) / f, f = 1 (the asymptotic
    # variance of a sample quantile: common practice, from memory)
    x = np.random.default_rng(4).uniform(0, 1, 200_000)
    assert abs(rse.se("quantile_w", x, (0.5,)) / math.sqrt(0.25 / len(x)) - 1) < 0.1


def _gini_se_vectorised(x, w):
    """Gini and its linearization SE for each row of x (samples × n), from the same published formula."""
    o = np.argsort(x, axis=1)
    xs, ws = np.take_along_axis(x, o, 1), np.take_along_axis(w, o, 1)
    C, S = np.cumsum(ws, 1), np.cumsum(ws * xs, 1)
    W, T = C[:, -1:], S[:, -1:]
    G = ((ws * xs * (2 * C - ws - W)).sum(1, keepdims=True)) / (W * T)
    u = ws * (2 * C * xs - 2 * S + T - W * xs - G * (T + W * xs)) / (W * T)
    n = x.shape[1]
    var = n / (n - 1) * ((u - u.mean(1, keepdims=True)) ** 2).sum(1)
    return G[:, 0], np.sqrt(var)


def test_coverage_unweighted_lognormal_numpy_and_sql():
    # 400 samples of n = 1000 from lognormal σ = 1; true Gini 2Φ(σ/√2) − 1 (handbook closed form of
    # the lognormal Gini, quoted from memory)
    rng = np.random.default_rng(20240601)
    true = 2 * NormalDist().cdf(1 / math.sqrt(2)) - 1
    x = rng.lognormal(0, 1, (400, 1000))
    G, se = _gini_se_vectorised(x, np.ones_like(x))
    covered = np.abs(G - true) <= 1.959963984540054 * se
    assert 0.92 <= covered.mean() <= 0.98, covered.mean()
    # the same samples through SQL, as groups of one table: identical intervals
    df = pd.DataFrame({"s": np.repeat(np.arange(400), 1000), "x": x.reshape(-1)})
    res = uneven.query("SELECT s, gini_ci_lo(x) AS lo, gini_ci_hi(x) AS hi FROM df GROUP BY s ORDER BY s")
    assert np.allclose(res["lo"], G - 1.959963984540054 * se, rtol=1e-9)
    assert np.allclose(res["hi"], G + 1.959963984540054 * se, rtol=1e-9)


def test_coverage_weighted_pps_numpy():
    # fixed lognormal population of 10^6; 400 samples of n = 2000 drawn with replacement with
    # probability proportional to a size correlated with income; weights 1/π = 1/(n p_i)
    rng = np.random.default_rng(77)
    N, n = 1_000_000, 2000
    y = rng.lognormal(0, 1, N)
    size = np.exp(0.5 * np.log(y) + rng.normal(0, 0.5, N))
    p = size / size.sum()
    true = R.gini(y)
    idx = rng.choice(N, (400, n), p=p)
    G, se = _gini_se_vectorised(y[idx], 1 / (n * p[idx]))
    covered = np.abs(G - true) <= 1.959963984540054 * se
    assert 0.92 <= covered.mean() <= 0.98, covered.mean()


# --- errors ----------------------------------------------------------------------------------

@pytest.mark.parametrize("sql,needle", [
    ("SELECT gini_ci_lo(x, level := 1.5) FROM t", "level must be a number strictly between 0 and 1"),
    ("SELECT gini_se(x, strata := sum(x)) FROM t", "strata must be a row-level expression"),
    ("SELECT gini_se(x, level := 0.9) FROM t", "unknown named argument 'level'"),
    ("SELECT gini_se(x, psu := NULL) FROM t", "psu cannot be NULL"),
])
def test_bad_options_are_clear_errors(sql, needle):
    with pytest.raises(MeasureArgumentError) as e:
        uneven.compile(sql)
    assert needle in str(e.value)
    assert "line 1" in str(e.value)


def test_single_psu_stratum_gives_null():
    df = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0, 5.0], "h": [1, 1, 2, 2, 2], "c": [1, 1, 2, 3, 3]})
    res = uneven.query("SELECT gini_se(x, strata := h, psu := c) AS a, gini_se(x, psu := c) AS b FROM df")
    assert pd.isna(res["a"][0])  # stratum 1 has one PSU
    want = rse.se("gini", df.x.to_numpy(), (), None, None, df.c.to_numpy())
    assert abs(res["b"][0] - want) < 1e-12


def test_estimate_next_to_its_se_keeps_digits_under_a_large_offset():
    # 1e12 + small increments: Gini's numerator is unchanged by a common shift, so the estimate
    # must not depend on whether an SE shares its pass (exact reference: fractions, via R.gini)
    import duckdb

    x = [1e12 + k for k in (1.0, 2.0, 3.0, 5.0, 8.0, 13.0, 21.0)]
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT unnest(?::DOUBLE[]) AS x", [x])
    alone = uneven.query("SELECT gini(x) AS g FROM t", con)["g"][0]
    shared = uneven.query("SELECT gini(x) AS g, gini_se(x) AS se FROM t", con)["g"][0]
    from fractions import Fraction

    fx = [Fraction(v) for v in x]
    exact = sum(abs(a - b) for a in fx for b in fx) / (2 * len(fx) ** 2 * (sum(fx) / len(fx)))
    assert abs(alone - float(exact)) <= 1e-10 * float(exact)
    assert abs(shared - float(exact)) <= 1e-10 * float(exact)


# --- equal values: every score is 0 -------------------------------------------------------------

# Where every value of a group is the same, each measure below is a constant of the weights (the
# Gini of equal values is 0, every Lorenz ordinate is p, Theil/MLD/GE/Atkinson are 0: facts of the
# trade), so its derivative with respect to any weight, the linearized score, is 0 and the design
# variance is exactly 0. The quantile's score divides by a density that has no estimate when the
# values coincide (reference.se.density_at_quantile gives None), so its SE is NULL, as for a ratio
# of quantiles.
EQUAL_ZERO = ["gini_se(x{w})", "lorenz_se(x, 0.3{w})", "bottom_share_se(x, 0.5{w})", "top_share_se(x, 0.1{w})",
              "generalized_lorenz_se(x, 0.5{w})", "palma_se(x{w})", "s80s20_se(x{w})", "theil_se(x{w})",
              "mld_se(x{w})", "ge_se(x, 2{w})", "ge_se(x, -1{w})", "ge_se(x, 0.5{w})", "atkinson_se(x, 0.5{w})",
              "atkinson_se(x, 1{w})", "atkinson_se(x, 2{w})", "gini_se(x{w}, strata := h)",
              "palma_se(x{w}, strata := h, psu := c)"]
EQUAL_NULL = ["quantile_w_se(x, 0.5{w})", "percentile_ratio_se(x, 0.9, 0.1{w})"]


def equal_groups() -> pd.DataFrame:
    """Invented groups of equal values with unequal weights: 5 (products exact), 0.1 (products
    rounded) and 1e12 + 0.3 (a large offset), seven rows each, two strata, PSUs by row pairs."""
    rows = []
    for g, v in (("five", 5.0), ("tenth", 0.1), ("offset", 1e12 + 0.3)):
        for i, wt in enumerate((1.0, 2.0, 1.0, 3.0, 0.3, 0.7, 1.9)):
            rows.append({"grp": g, "x": v, "w": wt, "h": i % 2, "c": i // 2})
    return pd.DataFrame(rows)


def test_se_of_equal_values_is_exactly_zero(engine):
    engine.load(equal_groups(), "eq")
    calls = [c.format(w=w) for w in ("", ", w") for c in EQUAL_ZERO + EQUAL_NULL]
    items = ", ".join(f"{c} AS m{i}" for i, c in enumerate(calls))
    res = engine.run(f"SELECT grp, {items} FROM eq GROUP BY grp")
    assert len(res) == 3
    for _, row in res.iterrows():
        for i, c in enumerate(calls):
            got = row[f"m{i}"]
            if any(c.startswith(n.split("(")[0] + "(") for n in EQUAL_NULL):
                assert got is None, f"{c} group {row['grp']}: {got}, want NULL"
            else:
                assert got == 0.0, f"{c} group {row['grp']}: {got}, want exactly 0"


def exact_gini_se(x, w) -> float:
    """The linearized Gini SE in exact rationals (Python ``fractions``): Langel & Tillé's score
    (from memory, as in reference.linearized._gini) per row, u = w·z, and n/(n−1)·Σ(u − ū)² (common
    practice); only the final square root is rounded."""
    pairs = sorted(zip((Fraction(float(v)) for v in x), (Fraction(float(v)) for v in w)))
    W, T = sum(b for _, b in pairs), sum(a * b for a, b in pairs)
    C = S = Fraction(0)
    running = []
    for a, b in pairs:
        C, S = C + b, S + a * b
        running.append((C, S))
    G = sum(a * b * (2 * c - b - W) for (a, b), (c, _) in zip(pairs, running)) / (W * T)
    u = [b * (2 * c * a - 2 * s_ + T - W * a - G * (T + W * a)) / (W * T) for (a, b), (c, s_) in zip(pairs, running)]
    n, mean = len(u), sum(u) / len(u)
    return math.sqrt(Fraction(n, n - 1) * sum((v - mean) ** 2 for v in u))


def test_se_keeps_digits_at_small_spread(engine):
    # values 1000·(1 + δ·N(0, 1)): the score is of order δ while x is of order 1; relative 1e-9
    # against exact arithmetic down to δ = 1e-6
    rng = np.random.default_rng(17)
    frames = []
    for spread in (1e-2, 1e-4, 1e-6):
        frames.append(pd.DataFrame({"grp": f"d{spread:g}", "x": 1e3 * (1 + spread * rng.standard_normal(300)),
                                    "w": rng.integers(1, 6, 300).astype(float)}))
    df = pd.concat(frames, ignore_index=True)
    engine.load(df, "near")
    lorenz_type = [("lorenz", (0.3,)), ("top_share", (0.1,)), ("generalized_lorenz", (0.5,)), ("palma", ()),
                   ("s80s20", ())]
    calls = [f"{n}_se(x{''.join(f', {p}' for p in ps)}, w) AS l{i}" for i, (n, ps) in enumerate(lorenz_type)]
    res = engine.run(f"SELECT grp, gini_se(x, w) AS sw, gini_se(x) AS su, {', '.join(calls)} FROM near GROUP BY grp")
    assert len(res) == 3
    for _, row in res.iterrows():
        d = df[df.grp == row["grp"]]
        for col, w in (("sw", d.w), ("su", np.ones(len(d)))):
            want = exact_gini_se(d.x, w)
            assert abs(row[col] - want) <= 1e-9 * want, (row["grp"], col, row[col], want)
        # the Lorenz-type scores (terms on x − m too) against the numpy reference, whose per-row
        # scores lose about 1e-16·μ/δ (1e-10 at δ = 1e-6)
        for i, (n, ps) in enumerate(lorenz_type):
            want = rse.se(n, d.x, ps, d.w)
            assert abs(row[f"l{i}"] - want) <= 1e-9 * want, (row["grp"], n, row[f"l{i}"], want)
