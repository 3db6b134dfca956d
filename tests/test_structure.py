"""Structure measures and tables: GE decomposition, concentration and progressivity, Gini by source,
paired Gini difference with its standard error, leave-one-out influence.

Outside references: exact rational arithmetic (``fractions``) of the pairwise definitions; the
additivity identities of the published decompositions (Shorrocks 1980 for GE; Lerman and Yitzhaki
1985 for sources); Kakwani, Wagstaff and van Doorslaer (1997) for the concentration index with
fractional ranks; Wagstaff (2005) C/(1 − μ) for a binary outcome; Erreygers (2009) 4μC for an
outcome in [0, 1] (all these cited from memory, not consulted); Engel's law (common practice); the
Engel food expenditure data shipped with statsmodels, recomputed here with numpy and scipy;
numerical differentiation; brute-force recomputation.
"""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest
from scipy.stats import rankdata

import uneven
from uneven import reference as R
from uneven.errors import MeasureArgumentError, UnevenError
from uneven.reference import structure as RS
from uneven.tables import compare, decompose, gini_sources
from uneven.tables.influence import influence


def _frame(seed=3, n=240):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"prov": rng.choice(["Axquelle", "Blorvent", "Czamburo"], n),
                         "inc": np.round(rng.lognormal(3.0, 0.7, n), 0),
                         "aux": np.round(rng.lognormal(2.0, 0.4, n), 0),
                         "hh": rng.integers(0, 4, n), "w": rng.integers(1, 5, n).astype(float)})


@pytest.fixture(scope="module")
def con():
    c = duckdb.connect()
    c.register("t", _frame())
    yield c
    c.close()


# ------------------------------------------------------------------ references against outside sources
def _brute_concentration(y, r, w):
    """Exact: Σ_i Σ_j w_i w_j y_i sign(r_i − r_j) / (W T) (mid-rank fractional ranks; KWvD 1997, from memory)."""
    y, r, w = [Fraction(v) for v in y], [Fraction(v) for v in r], [Fraction(v) for v in w]
    W, T = sum(w), sum(a * b for a, b in zip(w, y))
    num = sum(w[i] * w[j] * y[i] * ((r[i] > r[j]) - (r[i] < r[j])) for i in range(len(y)) for j in range(len(y)))
    return num / (W * T)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_concentration_reference_matches_exact_pairwise(seed):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 9, 25).astype(float)
    r = rng.integers(0, 6, 25).astype(float)  # many ties in the ranking
    w = rng.integers(1, 4, 25).astype(float)
    assert RS.concentration(y, r, w) == pytest.approx(float(_brute_concentration(y, r, w)), abs=1e-13)


def test_ge_reference_parts_add_up_and_match_a_two_point_case():
    # two subgroups each of equal values: within = 0, between = the total (fact of the definition)
    x, g = [2.0, 2.0, 8.0, 8.0, 8.0], ["a", "a", "b", "b", "b"]
    for alpha in (-1.0, 0.0, 0.5, 1.0, 2.0):
        assert RS.ge_within(x, alpha, g) == pytest.approx(0.0, abs=1e-15)
        assert RS.ge_between(x, alpha, g) == pytest.approx(R.ge(x, alpha), abs=1e-15)


def test_gini_linearized_is_the_weight_derivative():
    rng = np.random.default_rng(4)
    x, w = rng.lognormal(2, 0.6, 30), rng.integers(1, 4, 30).astype(float)
    z = RS.gini_linearized(x, w)
    for k in (0, 7, 29):
        h = 1e-6
        up, dn = w.copy(), w.copy()
        up[k] += h
        dn[k] -= h
        assert z[k] == pytest.approx((R.gini(x, up) - R.gini(x, dn)) / (2 * h), rel=1e-6, abs=1e-9)


def test_paired_se_covers_the_spread_of_repeated_samples():
    # Monte Carlo (numpy only): the SE of the paired difference tracks the standard deviation of the
    # difference over fresh samples; a paired SE well below the sum of the separate SEs
    rng = np.random.default_rng(5)
    diffs, ses = [], []
    for _ in range(150):
        gross = rng.lognormal(3, 0.7, 150)
        net = gross - 0.25 * np.maximum(gross - 20, 0) + rng.normal(0, 0.5, 150).clip(-1, 1)
        diffs.append(RS.gini_diff(gross, net))
        ses.append(RS.gini_diff_se(gross, net))
    assert np.mean(ses) == pytest.approx(np.std(diffs, ddof=1), rel=0.2)
    assert np.mean(ses) < 0.5 * (RS.gini_se(gross) + RS.gini_se(net))


# -------------------------------------------------------------------------------- SQL identities
@pytest.mark.parametrize("alpha", [-1, 0, 0.5, 1, 2, 3])
def test_ge_between_plus_within_is_ge(con, alpha):
    sql = (f"SELECT prov, ge(inc, {alpha}, w) AS t, ge_between(inc, {alpha}, hh, w) AS b, "
           f"ge_within(inc, {alpha}, hh, w) AS i FROM t GROUP BY prov")
    res = con.execute(uneven.compile(sql)).fetchdf()
    assert len(res) == 3
    for _, r in res.iterrows():
        assert abs(r["b"] + r["i"] - r["t"]) < 1e-12
        assert r["b"] > 0 and r["i"] > 0


def test_concentration_by_itself_is_gini(con):
    res = con.execute(uneven.compile("SELECT prov, gini(inc, w) AS g, concentration(inc, inc, w) AS c, "
                                      "concentration(hh, hh) AS ch, gini(hh) AS gh FROM t GROUP BY prov")).fetchdf()
    for _, r in res.iterrows():
        assert r["c"] == pytest.approx(r["g"], abs=1e-12)
        assert r["ch"] == pytest.approx(r["gh"], abs=1e-12)  # ties everywhere: mid-ranks keep it equal


def test_progressivity_signs(con):
    con.register("tx", pd.DataFrame({"inc": np.linspace(10, 200, 60)}).assign(
        prog=lambda d: np.where(d.inc > 80, 0.35 * (d.inc - 80), 0.0) + 0.05 * d.inc,  # rising rates
        regr=lambda d: 6.0 + 0.02 * d.inc))  # a lump sum plus a low flat rate: falling average rate
    sql = ("SELECT kakwani(prog, inc) AS kp, kakwani(regr, inc) AS kr, reynolds_smolensky(inc, inc - prog) AS rp, "
           "reynolds_smolensky(inc, inc - regr) AS rr FROM tx")
    r = con.execute(uneven.compile(sql)).fetchdf().iloc[0]
    assert r["kp"] > 0 and r["rp"] > 0  # progressive: tax more concentrated than income, inequality falls
    assert r["kr"] < 0 and r["rr"] < 0  # regressive: the reverse


def test_normalised_concentration_of_a_binary_outcome(con):
    con.register("bin", pd.DataFrame({"inc": np.arange(1.0, 41.0), "sick": ([1, 0, 1, 1, 0] * 8)[::-1]}))
    r = con.execute(uneven.compile("SELECT concentration(sick, inc) AS c, avg(sick) AS mu, "
                                    "concentration_wagstaff(sick, inc, 0, 1) AS wg, "
                                    "concentration_erreygers(sick, inc, 0, 1) AS er FROM bin")).fetchdf().iloc[0]
    assert r["wg"] == pytest.approx(r["c"] / (1 - r["mu"]), rel=1e-12)  # Wagstaff (2005), from memory
    assert r["er"] == pytest.approx(4 * r["mu"] * r["c"], rel=1e-12)  # Erreygers (2009), from memory
    out = con.execute(uneven.compile("SELECT concentration_wagstaff(sick, inc, 0, 0.5) AS v FROM bin")).fetchone()
    assert out[0] is None  # a value above hi: undefined, not a made-up number


# --------------------------------------------------------------------- open dataset (statsmodels)
@pytest.fixture(scope="module")
def engel():
    sm = pytest.importorskip("statsmodels.datasets.engel")
    return sm.load_pandas().data


def _numpy_concentration(y, r):
    R_ = (rankdata(r, method="average") - 0.5) / len(r)  # fractional rank, average rank for ties
    return 2 * np.cov(y, R_, bias=True)[0, 1] / y.mean()


def _numpy_gini(x):
    return np.abs(x[:, None] - x[None, :]).sum() / (2 * len(x) ** 2 * x.mean())


def test_engel_food_spending_against_numpy(engel):
    inc, food = engel["income"].to_numpy(), engel["foodexp"].to_numpy()
    got = uneven.query("SELECT gini(income) AS g, concentration(foodexp, income) AS c, kakwani(foodexp, income) AS k, "
                        "reynolds_smolensky(income, income - foodexp) AS rs FROM engel").iloc[0]
    assert got["g"] == pytest.approx(_numpy_gini(inc), rel=1e-10)
    assert got["c"] == pytest.approx(_numpy_concentration(food, inc), rel=1e-10)
    assert got["k"] == pytest.approx(_numpy_concentration(food, inc) - _numpy_gini(inc), rel=1e-10)
    assert got["k"] < 0  # Engel's law (common practice): food takes a smaller share of larger incomes
    assert got["rs"] == pytest.approx(_numpy_gini(inc) - _numpy_concentration(inc - food, inc), rel=1e-10)


def test_engel_sources_and_decomposition_against_numpy(engel):
    inc, food = engel["income"].to_numpy(), engel["foodexp"].to_numpy()
    other = inc - food
    tab = gini_sources("engel", ["foodexp", "income - foodexp"])
    G = _numpy_gini(inc)
    body = tab[tab["source"] != "total"]
    assert body["gini_points"].sum() == pytest.approx(G, abs=1e-12)  # Lerman–Yitzhaki (from memory): sum to G
    for src, v in (("foodexp", food), ("income - foodexp", other)):
        row = body[body["source"] == src].iloc[0]
        S, C = v.sum() / inc.sum(), _numpy_concentration(v, inc)
        assert row["part_of_total"] == pytest.approx(S, rel=1e-12)
        assert row["own_gini"] == pytest.approx(_numpy_gini(v), rel=1e-10)
        assert row["corr_with_total"] == pytest.approx(C / _numpy_gini(v), rel=1e-10)
        assert row["gini_change_1pct"] == pytest.approx(0.01 * S * (C - G), rel=1e-9)
    # GE(2) = CV²/2 split at the median food spending, against numpy
    engel2 = engel.assign(high=(food > np.median(food)).astype(int))  # noqa: F841 (read by name)
    dec = decompose("engel2", "income", "high", alpha=2)
    cv2 = inc.var() / inc.mean() ** 2 / 2
    parts = dec.set_index("component")["ge_term"]
    assert parts["total"] == pytest.approx(cv2, rel=1e-10)
    means = np.array([inc[food <= np.median(food)].mean(), inc[food > np.median(food)].mean()])
    shares = np.array([(food <= np.median(food)).mean(), (food > np.median(food)).mean()])
    between = (np.sum(shares * (means / inc.mean()) ** 2) - 1) / 2
    assert parts["between"] == pytest.approx(between, rel=1e-10)
    assert parts["between"] + parts["within"] == pytest.approx(parts["total"], abs=1e-12)
    assert dec[dec["component"] == "subgroup"]["ge_term"].sum() == pytest.approx(parts["within"], abs=1e-12)


def test_source_adding_up_to_zero_has_no_concentration():
    # C_k = 2 cov(y_k, R)/μ_k (Lerman & Yitzhaki 1985, from memory) is undefined where the source adds
    # up to 0: the table and the reference leave C_k and what is built on it empty; the other source
    # keeps its numbers, computed here by hand from the ranks of the total (2, 1, 5, 4)
    rows = pd.DataFrame({"a": [1.0, 2.0, 3.0, 6.0], "t": [1.0, -1.0, 2.0, -2.0]})  # noqa: F841 (read by name)
    tab = gini_sources("rows", ["a", "t"]).set_index("source")
    ref = {r["source"]: r for r in RS.gini_sources({"a": [1.0, 2.0, 3.0, 6.0], "t": [1.0, -1.0, 2.0, -2.0]})}
    for col in ("conc_by_total", "corr_with_total", "gini_points", "part_of_gini", "gini_change_1pct"):
        assert pd.isna(tab.loc["t", col]) and ref["t"][col] is None
    assert tab.loc["t", "part_of_total"] == 0.0 and ref["t"]["part_of_total"] == 0.0
    # the total (2, 1, 5, 4) ranks the rows 2nd, 1st, 4th, 3rd: fractional ranks R = (3, 1, 7, 5)/8
    # (mid-points of the cumulative share, common practice); C_a = 2 cov(a, R)/μ_a in exact fractions
    a, r = [Fraction(1), Fraction(2), Fraction(3), Fraction(6)], [Fraction(3, 8), Fraction(1, 8), Fraction(7, 8),
                                                                  Fraction(5, 8)]
    cov = sum(x * y for x, y in zip(a, r)) / 4 - (sum(a) / 4) * (sum(r) / 4)
    want = float(2 * cov / (sum(a) / 4))
    assert tab.loc["a", "conc_by_total"] == pytest.approx(want, abs=1e-12)
    assert ref["a"]["conc_by_total"] == pytest.approx(want, abs=1e-12)


# --------------------------------------------------------------------------------- tables
def test_decompose_table_per_group(con):
    dec = decompose("t", "inc", "hh", alpha=1, weight="w", by="prov", con=con)
    df = _frame()
    for prov, d in df.groupby("prov"):
        mine = dec[dec["prov"] == prov]
        sub = mine[mine["component"] == "subgroup"]
        assert sub["weight_share"].sum() == pytest.approx(1.0, abs=1e-12)
        assert sub["value_share"].sum() == pytest.approx(1.0, abs=1e-12)
        parts = mine.set_index("component")["ge_term"]
        assert parts["total"] == pytest.approx(R.theil(d.inc, d.w), rel=1e-12)
        assert parts["within"] == pytest.approx(RS.ge_within(d.inc, 1.0, d.hh, d.w), rel=1e-10)
        assert sub["ge_term"].sum() == pytest.approx(parts["within"], abs=1e-12)
        # each subgroup's columns against the numpy reference of Shorrocks' terms (from memory)
        want = {p["subgroup"]: p for p in RS.ge_parts(d.inc, 1.0, d.hh, d.w)}
        for _, r in sub.iterrows():
            ref = want[r["subgroup"]]
            for col, key in (("group_mean", "group_mean"), ("weight_share", "weight_share"),
                             ("value_share", "value_share"), ("group_ge", "group_ge"), ("ge_term", "within_term")):
                assert r[col] == pytest.approx(ref[key], rel=1e-10), col
    assert list(dec.columns) == ["prov", "component", "subgroup", "group_mean", "weight_share", "value_share",
                                 "group_ge", "ge_term"]  # the documented order (docs/structure.md)


def test_sources_table_matches_reference(con):
    tab = gini_sources("t", ["inc", "aux"], weight="w", by=["prov"], con=con)
    df = _frame()
    for prov, d in df.groupby("prov"):
        want = RS.gini_sources({"inc": d.inc, "aux": d.aux}, d.w)
        mine = tab[tab["prov"] == prov].set_index("source")
        for row in want:
            for field in ("part_of_total", "own_gini", "corr_with_total", "gini_points", "gini_change_1pct"):
                assert mine.loc[row["source"], field] == pytest.approx(row[field], rel=1e-10)
        assert mine.loc["total", "own_gini"] == pytest.approx(R.gini(d.inc + d.aux, d.w), rel=1e-12)
        G = R.gini(d.inc + d.aux, d.w)
        for row in want:  # the two columns the reference leaves out, from its S_k and C_k
            got = mine.loc[row["source"]]
            assert got["conc_by_total"] == pytest.approx(row["conc_by_total"], rel=1e-10)
            assert got["part_of_gini"] == pytest.approx(row["gini_points"] / G, rel=1e-10)
            assert got["gini_pct_change_1pct"] == pytest.approx(100 * row["gini_change_1pct"] / G, rel=1e-9)
    assert list(tab.columns) == ["prov", "source", "part_of_total", "own_gini", "conc_by_total", "corr_with_total",
                                 "gini_points", "part_of_gini", "gini_change_1pct", "gini_pct_change_1pct"]


def test_compare_table_matches_reference(con):
    tab = compare("t", "inc", "aux", weight="w", by="prov", con=con)
    df = _frame()
    for prov, d in df.groupby("prov"):
        r = tab[tab["prov"] == prov].iloc[0]
        assert r["difference"] == pytest.approx(R.gini(d.inc, d.w) - R.gini(d.aux, d.w), rel=1e-12)
        assert r["se"] == pytest.approx(RS.gini_diff_se(d.inc, d.aux, d.w), rel=1e-10)
        assert r["z"] == pytest.approx(r["difference"] / r["se"], rel=1e-12)


def test_influence_matches_brute_force(con):
    tab = influence("t", "inc", weight="w", by="prov", k=3, con=con)
    df = _frame()
    for prov, d in df.groupby("prov"):
        r = tab[tab["prov"] == prov].iloc[0]
        for j in (1, 2, 3):
            assert r[f"gini_without_top_{j}"] == pytest.approx(RS.without_top(R.gini, d.inc, j, d.w), rel=1e-12)
        loo = RS.gini_leave_one_out(d.inc, d.w)  # brute force: recompute without each row
        change = loo - R.gini(d.inc, d.w)
        k = int(np.nanargmax(np.abs(change)))
        assert r["top_row_change"] == pytest.approx(change[k], rel=1e-9, abs=1e-14)
        assert r["top_row_value"] == d.inc.to_numpy()[k]


def test_influence_of_one_huge_record():
    df = pd.DataFrame({"x": [10.0] * 50 + [10000.0]})  # noqa: F841 (read by name)
    r = influence("df", "x", k=1).iloc[0]
    assert r["top_row_value"] == 10000.0 and r["gini_without_top_row"] == pytest.approx(0.0, abs=1e-12)
    assert r["gini_without_top_1"] == pytest.approx(0.0, abs=1e-12)


# --------------------------------------------------------------------------------- errors
@pytest.mark.parametrize("sql,needle", [
    ("SELECT concentration_wagstaff(hh, inc, 1, 0) FROM t", "lo must be below hi"),
    ("SELECT concentration(inc) FROM t", "takes 2 or 3 arguments"),
    ("SELECT ge_between(inc, 2, sum(hh)) FROM t", "subgroup must be a row-level expression"),
    ("SELECT kakwani(inc, NULL) FROM t", "income cannot be NULL"),
    ("SELECT ge_within(inc, hh, hh) FROM t", "alpha must be a numeric constant"),
])
def test_bad_calls_are_clear_errors(sql, needle):
    with pytest.raises(MeasureArgumentError if "row-level" not in needle else UnevenError, match=needle):
        uneven.compile(sql)


def test_table_argument_errors():
    with pytest.raises(MeasureArgumentError, match="at least two source"):
        gini_sources("t", ["inc"])
    with pytest.raises(UnevenError, match="cannot read the relation"):
        decompose("a b c", "x", "g")
    with pytest.raises(MeasureArgumentError, match="measure must name"):
        influence("t", "x", measure="concentration")


# --------------------------------------------------------------------------------- command line
def test_cli_tables(tmp_path, capsys):
    from uneven.cli.main import main
    path = tmp_path / "vl.parquet"
    df = _frame()
    df.to_parquet(path)
    assert main(["decompose", str(path), "-x", "inc", "-g", "hh", "--alpha", "2", "-w", "w", "--format", "csv"]) == 0
    out = pd.read_csv(__import__("io").StringIO(capsys.readouterr().out))
    assert out.set_index("component").loc["total", "ge_term"] == pytest.approx(R.ge(df.inc, 2.0, df.w), rel=1e-9)
    assert main(["sources", str(path), "inc", "aux", "--format", "csv"]) == 0
    out = pd.read_csv(__import__("io").StringIO(capsys.readouterr().out)).set_index("source")
    assert out.loc[["inc", "aux"], "gini_points"].sum() == pytest.approx(R.gini(df.inc + df.aux), rel=1e-9)
    assert main(["compare", str(path), "inc", "aux", "--by", "prov", "--format", "csv"]) == 0
    assert len(pd.read_csv(__import__("io").StringIO(capsys.readouterr().out))) == 3
    assert main(["influence", str(path), "-x", "inc", "-k", "1", "--format", "csv"]) == 0
    out = pd.read_csv(__import__("io").StringIO(capsys.readouterr().out)).iloc[0]
    assert out["gini_without_top_1"] == pytest.approx(RS.without_top(R.gini, df.inc, 1), rel=1e-9)
    assert main(["sources", str(path), "inc"]) == 2
    assert "at least two source" in capsys.readouterr().err
