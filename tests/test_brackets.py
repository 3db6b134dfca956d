"""Bracket tables: bounds that contain the microdata's value, tighten as brackets narrow, hold the
point estimate; the estimator's closed forms; merges and roll-ups; clear errors for bad tables.

Outside sources named beside each check. The microdata values are computed here with numpy from
the sorted values (the handbook identity Gini = Σ(2i − n − 1)x_(i) / (n Σx), equal to the mean
absolute difference over twice the mean), never with uneven's code.
"""

from __future__ import annotations

import math
import subprocess
import sys
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import uneven
from uneven.brackets import from_brackets, merge_brackets
from uneven.cli.main import main
from uneven.errors import InputDataError, MeasureArgumentError, UnevenError

MEASURES = ["gini", "lorenz(0.5)", "bottom_share(0.4)", "top_share(0.1)", "top_share(0.01)", "palma", "s80s20",
            "quantile_w(0.1)", "quantile_w(0.5)", "quantile_w(0.9)", "percentile_ratio(0.9, 0.1)", "mean"]


# --- the microdata side, numpy only -----------------------------------------------------------------

def micro_gini(x):
    x = np.sort(np.asarray(x, float))
    n = len(x)
    return float(np.sum((2 * np.arange(1, n + 1) - n - 1) * x) / (n * x.sum()))


def micro_lorenz(x, p):
    # L(p) on the piecewise-linear curve through (i/n, S_i/T) (handbook definition, common practice)
    x = np.sort(np.asarray(x, float))
    n = len(x)
    S = np.concatenate([[0.0], np.cumsum(x)])
    return float(np.interp(p * n, np.arange(n + 1), S) / S[-1])


def _div(a, b):
    return a / b if b != 0 else math.nan


def micro_values(x):
    q = lambda p: float(np.quantile(x, p, method="inverted_cdf"))  # noqa: E731  numpy's inverted CDF
    top = lambda p: 1 - micro_lorenz(x, 1 - p)  # noqa: E731
    out = {"gini": micro_gini(x), "lorenz(0.5)": micro_lorenz(x, 0.5), "bottom_share(0.4)": micro_lorenz(x, 0.4),
            "top_share(0.1)": top(0.1), "top_share(0.01)": top(0.01), "palma": _div(top(0.1), micro_lorenz(x, 0.4)),
           "s80s20": _div(top(0.2), micro_lorenz(x, 0.2)), "quantile_w(0.1)": q(0.1), "quantile_w(0.5)": q(0.5),
           "quantile_w(0.9)": q(0.9), "percentile_ratio(0.9, 0.1)": _div(q(0.9), q(0.1)), "mean": float(np.mean(x))}
    return {k: v for k, v in out.items() if not math.isnan(v)}  # a ratio over 0 has no value to contain


def tabulate(x, edges, open_top=True, drop_totals=()):
    """The bracket table of x: [edges[i], edges[i+1]), the last open (or closed at max(x) + 1)."""
    x = np.asarray(x, float)
    ends = list(edges[1:]) + [None if open_top else float(x.max()) + 1.0]
    rows = []
    for i, (lo, hi) in enumerate(zip(edges, ends)):
        sel = (x >= lo) & (x < hi) if hi is not None else x >= lo
        rows.append({"low": float(lo), "high": hi, "units": float(sel.sum()),
                     "total": None if i in drop_totals else float(x[sel].sum())})
    return pd.DataFrame(rows)


def run(table, measures=MEASURES, **kw):
    return from_brackets("table", measures, **kw)  # the DataFrame is read by its name, as query() does


def assert_contains(res, truth, row=0):
    for name, value in truth.items():
        lo, hi = res.loc[row, f"{name}_lo"], res.loc[row, f"{name}_hi"]
        assert lo <= value <= hi, (name, lo, value, hi)


def assert_point_inside(res):
    for name in MEASURES:
        for row in range(len(res)):
            pt, lo, hi = res.loc[row, name], res.loc[row, f"{name}_lo"], res.loc[row, f"{name}_hi"]
            if name in ("palma", "s80s20", "percentile_ratio(0.9, 0.1)") and pt is None:
                assert lo == 0 or hi == math.inf  # a ratio over a share or quantile that may be 0
                continue
            assert lo <= pt <= hi, (name, lo, pt, hi)


# --- closed-form distributions ----------------------------------------------------------------------

def test_lognormal_brackets_contain_the_microdata_value():
    sigma = 0.9
    x = np.random.default_rng(7).lognormal(10.0, sigma, 40_000)
    table = tabulate(x, [0, 5e3, 1e4, 1.5e4, 2e4, 3e4, 4e4, 6e4, 1e5, 2e5])
    res = run(table)
    truth = micro_values(x)
    # the microdata are near the closed form: lognormal Gini = 2Φ(σ/√2) − 1 (handbook), top-p share
    # Φ(σ − Φ⁻¹(1 − p)) (handbook)
    assert truth["gini"] == pytest.approx(2 * stats.norm.cdf(sigma / math.sqrt(2)) - 1, abs=0.01)
    assert truth["top_share(0.1)"] == pytest.approx(stats.norm.cdf(sigma - stats.norm.ppf(0.9)), abs=0.01)
    assert_contains(res, truth)
    assert_point_inside(res)
    # ten brackets over 40,000 units: the Gini is known to within 0.02, the point estimate to 0.003
    assert res.loc[0, "gini_hi"] - res.loc[0, "gini_lo"] < 0.02
    assert abs(res.loc[0, "gini"] - truth["gini"]) < 0.003
    assert res.loc[0, "open_top"] and res.loc[0, "missing_totals"] == 0 and res.loc[0, "units"] == 40_000


def test_pareto_brackets_contain_the_microdata_value_and_the_tail_fits():
    alpha = 2.5
    # Pareto(α) with scale 1: numpy's pareto is Lomax, so 1 + draw (numpy documentation)
    x = 1.0 + np.random.default_rng(3).pareto(alpha, 50_000)
    table = tabulate(x, [1.0, 1.2, 1.5, 2.0, 3.0, 5.0])
    res = run(table)
    truth = micro_values(x)
    assert truth["gini"] == pytest.approx(1 / (2 * alpha - 1), abs=0.02)  # handbook: Pareto Gini 1/(2α − 1)
    assert_contains(res, truth)
    assert_point_inside(res)
    # the open top bracket [5, ∞) of a Pareto sample is itself Pareto(α) scaled by 5: its fitted
    # tail's top shares match the handbook's p^(1 − 1/α) within the top bracket (a third of a point)
    assert abs(res.loc[0, "top_share(0.01)"] - truth["top_share(0.01)"]) < 0.003


def test_uniform_bracket_point_estimate_is_the_uniform_distribution():
    # one bracket [0, 1) with mean ½: the fitted density is flat; uniform(0, 1): Gini ⅓, L(u) = u² (handbook)
    table = pd.DataFrame({"low": [0.0], "high": [1.0], "units": [1000.0], "total": [500.0]})
    res = run(table, ["gini", "lorenz(0.3)", "quantile_w(0.25)"])
    assert res.loc[0, "gini"] == pytest.approx(1 / 3, abs=1e-12)
    assert res.loc[0, "lorenz(0.3)"] == pytest.approx(0.09, abs=1e-12)
    assert res.loc[0, "quantile_w(0.25)"] == pytest.approx(0.25, abs=1e-12)


def test_open_bracket_point_estimate_is_the_pareto_law():
    # one open bracket [1, ∞) with mean α/(α − 1): the fitted tail is Pareto(α);
    # Gini 1/(2α − 1), top-p share p^(1 − 1/α), quantile (1 − p)^(−1/α) (handbook)
    a = 3.0
    table = pd.DataFrame({"low": [1.0], "high": [None], "units": [10.0], "total": [10 * a / (a - 1)]})
    res = run(table, ["gini", "top_share(0.05)", "quantile_w(0.9)"])
    assert res.loc[0, "gini"] == pytest.approx(1 / (2 * a - 1), rel=1e-12)
    assert res.loc[0, "top_share(0.05)"] == pytest.approx(0.05 ** (1 - 1 / a), rel=1e-12)
    assert res.loc[0, "quantile_w(0.9)"] == pytest.approx(0.1 ** (-1 / a), rel=1e-12)


def test_triangle_when_the_mean_sits_near_an_end():
    # [0, 3) with mean 0.5 (below the middle third): the fitted density is the triangle on [0, 1.5]
    # falling to 0, scipy's triang(c=0, scale=1.5); its Gini ∫F(1 − F)dx / μ and median by scipy
    from scipy import integrate
    law = stats.triang(c=0.0, scale=1.5)
    gini = integrate.quad(lambda v: law.cdf(v) * law.sf(v), 0, 1.5)[0] / law.mean()
    table = pd.DataFrame({"low": [0.0], "high": [3.0], "units": [4.0], "total": [2.0]})
    res = run(table, ["gini", "quantile_w(0.5)", "lorenz(0.5)", "mean"])
    assert res.loc[0, "gini"] == pytest.approx(gini, rel=1e-9)
    assert res.loc[0, "quantile_w(0.5)"] == pytest.approx(law.ppf(0.5), rel=1e-12)
    # L(½) = ∫_0^Q(½) v f(v) dv / μ (definition of the Lorenz curve of a density)
    lor = integrate.quad(lambda v: v * law.pdf(v), 0, law.ppf(0.5))[0] / law.mean()
    assert res.loc[0, "lorenz(0.5)"] == pytest.approx(lor, rel=1e-9)
    assert res.loc[0, "mean"] == pytest.approx(0.5, rel=1e-15)
    # and the mirror: mean 2.5 gives the rising triangle on [1.5, 3]
    up = stats.triang(c=1.0, loc=1.5, scale=1.5)
    table = pd.DataFrame({"low": [0.0], "high": [3.0], "units": [4.0], "total": [10.0]})
    res = run(table, ["quantile_w(0.3)"])
    assert res.loc[0, "quantile_w(0.3)"] == pytest.approx(up.ppf(0.3), rel=1e-12)


def test_linear_density_in_the_middle_third():
    # [0, 1) with mean 0.6: density 1 + s(z − ½), s = 12·0.1 = 1.2; its CDF z + 0.6(z² − z) and
    # quantiles checked against scipy's root finder on that CDF; Gini by scipy quadrature
    from scipy import integrate, optimize
    cdf = lambda z: z + 0.6 * (z * z - z)  # noqa: E731
    table = pd.DataFrame({"low": [0.0], "high": [1.0], "units": [10.0], "total": [6.0]})
    res = run(table, ["gini", "quantile_w(0.7)"])
    assert res.loc[0, "quantile_w(0.7)"] == pytest.approx(optimize.brentq(lambda z: cdf(z) - 0.7, 0, 1), rel=1e-12)
    assert res.loc[0, "gini"] == pytest.approx(integrate.quad(lambda z: cdf(z) * (1 - cdf(z)), 0, 1)[0] / 0.6,
                                               rel=1e-9)


# --- the bounds are attained (exact rational arithmetic) --------------------------------------------

def frac_gini(values):
    # brute force: Σ_i Σ_j |x_i − x_j| / (2 n² μ) (handbook definition) in exact fractions
    n = len(values)
    return sum(abs(a - b) for a in values for b in values) / (2 * n * n * (sum(values) / n))


def test_gini_bounds_are_the_two_extreme_tables():
    # brackets [0,10): 4 units, total 12; [10,20): 2 units, total 30; [20,50): 3 units, total 75
    table = pd.DataFrame({"low": [0.0, 10.0, 20.0], "high": [10.0, 20.0, 50.0], "units": [4.0, 2.0, 3.0],
                          "total": [12.0, 30.0, 75.0]})
    res = run(table, ["gini"])
    F = Fraction
    at_means = [F(3)] * 4 + [F(15)] * 2 + [F(25)] * 3
    # the split keeping each mean: q = (m − a)/(c − a) of the units at c; 4·0.3 = 1.2 units at 10 …
    # fractional units: weight the two ends (Gini with weights = pairs weighted by w_i w_j)
    pts = [(F(0), F(4) * F(7, 10)), (F(10), F(4) * F(3, 10)), (F(10), F(2) * F(1, 2)), (F(20), F(2) * F(1, 2)),
           (F(20), F(3) * F(5, 6)), (F(50), F(3) * F(1, 6))]
    W = sum(w for _, w in pts)
    T = sum(x * w for x, w in pts)
    split = sum(wi * wj * abs(xi - xj) for xi, wi in pts for xj, wj in pts) / (2 * W * T)
    assert float(frac_gini(at_means)) == pytest.approx(res.loc[0, "gini_lo"], abs=1e-10)
    assert float(split) == pytest.approx(res.loc[0, "gini_hi"], abs=1e-10)


def test_one_bracket_by_hand():
    # two units in [0, 10) with total 10: both at 5 (Gini 0) or one at 0 and one at 10 (Gini ½)
    table = pd.DataFrame({"low": [0.0], "high": [10.0], "units": [2.0], "total": [10.0]})
    res = run(table, ["gini", "quantile_w(0.5)"])
    assert res.loc[0, "gini_lo"] == pytest.approx(0.0, abs=1e-10)
    assert res.loc[0, "gini_hi"] == pytest.approx(0.5, abs=1e-10)
    # Q(½) at fraction f = ½ of the bracket: m ≤ f·Q + (1 − f)·c gives Q ≥ 0, m ≥ f·a + (1 − f)·Q gives
    # Q ≤ 10 (units may be weighted counts, so a fraction of a unit may sit at either end)
    assert (res.loc[0, "quantile_w(0.5)_lo"], res.loc[0, "quantile_w(0.5)_hi"]) == pytest.approx((0.0, 10.0), abs=1e-9)


# --- narrowing, missing totals, open top ------------------------------------------------------------

def test_bounds_tighten_as_brackets_narrow():
    x = np.random.default_rng(11).lognormal(9.5, 0.7, 20_000)
    widths, truth = [], micro_values(x)
    for k in range(2, 8):
        # edges at the sample's quantiles of a dyadic grid: each table splits every bracket of the last
        edges = np.quantile(x, np.linspace(0, 1, 2 ** k + 1)[:-1])
        edges[0] = 0.0
        res = run(tabulate(x, list(edges), open_top=False))  # (an open top bracket never narrows)
        assert_contains(res, truth)
        widths.append({m: res.loc[0, f"{m}_hi"] - res.loc[0, f"{m}_lo"] for m in ("gini", "lorenz(0.5)", "top_share(0.1)")})
    for m in ("gini", "lorenz(0.5)", "top_share(0.1)"):
        seq = [w[m] for w in widths]
        assert all(b <= a + 1e-12 for a, b in zip(seq, seq[1:])), (m, seq)  # nested tables: nested intervals
    assert widths[-1]["gini"] < widths[0]["gini"] / 10
    assert widths[-1]["gini"] < 0.005


def test_missing_totals_use_the_bracket_ends_and_are_flagged():
    x = np.random.default_rng(5).lognormal(10.0, 0.8, 30_000)
    edges = [0, 5e3, 1e4, 2e4, 3e4, 5e4, 1e5]
    full = run(tabulate(x, edges))
    gaps = run(tabulate(x, edges, drop_totals=(1, 3)))
    assert gaps.loc[0, "missing_totals"] == 2 and full.loc[0, "missing_totals"] == 0
    assert_contains(gaps, micro_values(x))
    assert_point_inside(gaps)
    for m in ("gini", "bottom_share(0.4)", "quantile_w(0.5)", "mean"):
        assert gaps.loc[0, f"{m}_lo"] <= full.loc[0, f"{m}_lo"] + 1e-12
        assert gaps.loc[0, f"{m}_hi"] >= full.loc[0, f"{m}_hi"] - 1e-12
    # the mean of a bracket without total ranges over its ends: mean bounds add n·(c − a)/W
    n1, n3 = (tabulate(x, edges)["units"].iloc[i] for i in (1, 3))
    width = (n1 * 5e3 + n3 * 1e4) / len(x)
    assert gaps.loc[0, "mean_hi"] - gaps.loc[0, "mean_lo"] == pytest.approx(width, rel=1e-9)


def test_open_top_bounds_hold_for_any_tail():
    # the same table from two samples that differ only above the top edge (one with a far outlier)
    rng = np.random.default_rng(9)
    x = rng.lognormal(10.0, 0.6, 10_000)
    y = x.copy()
    top = y >= 5e4
    y[top] = 5e4 + (y[top] - 5e4) * 0.01  # squeezed tail
    y[np.argmax(y)] += (x[top].sum() - y[top].sum())  # the same total, held mostly by one unit
    edges = [0, 1e4, 2e4, 3e4, 5e4]
    tx, ty = tabulate(x, edges), tabulate(y, edges)
    assert np.allclose(tx["total"], ty["total"]) and (tx["units"] == ty["units"]).all()
    res = run(tx)
    assert_contains(res, micro_values(x))
    assert_contains(res, micro_values(y))
    assert math.isfinite(res.loc[0, "quantile_w(0.9)_hi"])


def test_random_tables_hold_their_point_estimate():
    import duckdb
    con = duckdb.connect()
    rng = np.random.default_rng(2024)
    for _ in range(120):
        k = int(rng.integers(1, 8))
        edges = np.cumsum(rng.uniform(0.5, 20, k + 1)) - rng.uniform(0, 0.5)
        edges[0] = max(edges[0], 0.0) if rng.random() < 0.5 else 0.0
        units = rng.integers(0, 50, k).astype(float)
        units[rng.integers(0, k)] += 1
        open_top = rng.random() < 0.5
        highs = list(edges[1:])
        if open_top:
            highs[-1] = None
        lows = edges[:-1]
        totals = []
        for lo, hi, n in zip(lows, highs, units):
            top = hi if hi is not None else lo * rng.uniform(1, 5) + 1
            totals.append(n * rng.uniform(lo, top))
        totals = [None if (rng.random() < 0.2 and h is not None) else t for t, h in zip(totals, highs)]
        table = pd.DataFrame({"low": lows, "high": highs, "units": units, "total": totals})
        con.register("table", table)
        res = from_brackets("table", MEASURES, con=con)
        assert_point_inside(res)


# --- groups, merges, roll-ups -----------------------------------------------------------------------

def _regions(seed=4):
    rng = np.random.default_rng(seed)
    return {"north": rng.lognormal(10.2, 0.7, 8000), "south": rng.lognormal(9.8, 0.9, 12000)}


def test_group_keys_through_a_query_on_duckdb():
    import duckdb
    data = _regions()
    edges = [0, 1e4, 2e4, 4e4, 8e4]
    parts = [tabulate(x, edges).assign(region=r, year=2025) for r, x in data.items()]
    con = duckdb.connect()
    con.register("tab_frame", pd.concat(parts, ignore_index=True))
    con.execute("CREATE TABLE tab AS SELECT * FROM tab_frame")
    res = from_brackets("(SELECT * FROM tab WHERE year = 2025) t", MEASURES, by=["region"], con=con)
    assert list(res["region"]) == ["north", "south"]
    for i, (_r, x) in enumerate(data.items()):
        assert_contains(res, micro_values(x), row=i)
    # rolled up: rows naming the same bracket add, giving the table of the union
    union = from_brackets("tab", MEASURES, con=con)
    assert_contains(union, micro_values(np.concatenate(list(data.values()))))
    assert union.loc[0, "units"] == 20_000


def test_merge_joins_overlapping_brackets_of_different_tables():
    data = _regions()
    north = tabulate(data["north"], [0, 1e4, 2e4, 4e4, 8e4])
    south = tabulate(data["south"], [0, 5e3, 1.5e4, 4e4, 8e4])
    merged = merge_brackets(["north", "south"])
    # islands: [0, 4e4) joins every bracket below 4e4 of both tables, [4e4, 8e4) and [8e4, ∞) add up
    assert list(merged["low"]) == [0.0, 4e4, 8e4]
    assert merged["high"].iloc[0] == 4e4 and merged["high"].iloc[1] == 8e4 and pd.isna(merged["high"].iloc[2])
    assert merged["units"].sum() == 20_000
    assert merged["total"].sum() == pytest.approx(np.concatenate(list(data.values())).sum(), rel=1e-12)
    res = from_brackets("merged", MEASURES)
    assert_contains(res, micro_values(np.concatenate(list(data.values()))))
    del north, south


def test_merge_keeps_the_units_without_a_total_apart():
    a = pd.DataFrame({"low": [0.0, 10.0], "high": [10.0, None], "units": [2.0, 1.0], "total": [None, 30.0]})
    b = pd.DataFrame({"low": [0.0, 10.0], "high": [10.0, None], "units": [3.0, 1.0], "total": [12.0, 20.0]})
    merged = merge_brackets(["a", "b"])
    # [0, 10): 3 units with total 12 and 2 units without; [10, ∞): 2 units, total 50
    assert list(merged["low"]) == [0.0, 0.0, 10.0] and list(merged["units"]) == [3.0, 2.0, 2.0]
    assert merged["total"].iloc[0] == 12.0 and pd.isna(merged["total"].iloc[1]) and merged["total"].iloc[2] == 50.0
    res = from_brackets("merged", ["mean"])
    # by hand: the 2 units without a total hold between 0 and 2·10, so T ∈ [62, 82] over 7 units
    assert (res.loc[0, "mean_lo"], res.loc[0, "mean_hi"]) == pytest.approx((62 / 7, 82 / 7), rel=1e-9)
    assert res.loc[0, "missing_totals"] == 1 and res.loc[0, "brackets"] == 2


def test_partly_given_totals_contain_the_microdata():
    # two regions tabulated on the same edges; one region's total of one bracket not published
    data = _regions()
    edges = [0, 1e4, 2e4, 4e4, 8e4]
    table = pd.concat([tabulate(data["north"], edges, drop_totals=(2,)), tabulate(data["south"], edges)])
    both = np.concatenate(list(data.values()))
    res = run(table)
    assert_contains(res, micro_values(both))
    assert_point_inside(res)
    whole = run(tabulate(both, edges, drop_totals=(2,)))  # the same bracket missing for everyone: wider
    assert res.loc[0, "gini_hi"] - res.loc[0, "gini_lo"] < whole.loc[0, "gini_hi"] - whole.loc[0, "gini_lo"]


# --- bad input: clear errors, never a traceback -----------------------------------------------------

BAD = {
    "overlap": ({"low": [0.0, 5.0], "high": [10.0, 20.0], "units": [1.0, 1.0], "total": [5.0, 10.0]}, "overlap"),
    "reversed": ({"low": [10.0, 20.0], "high": [0.0, None], "units": [1.0, 1.0], "total": [5.0, 30.0]},
                 "must not be below"),
    "negative units": ({"low": [0.0, 10.0], "high": [10.0, None], "units": [-1.0, 1.0], "total": [0.0, 20.0]},
                       "units must be"),
    "total below": ({"low": [0.0, 10.0], "high": [10.0, None], "units": [2.0, 1.0], "total": [5.0, 5.0]},
                    "between low·units"),
    "total above": ({"low": [0.0, 10.0], "high": [10.0, None], "units": [2.0, 1.0], "total": [25.0, 15.0]},
                    "between low·units"),
    "open inside": ({"low": [0.0, 10.0], "high": [None, 20.0], "units": [1.0, 1.0], "total": [5.0, 15.0]},
                    "overlap"),
    "open top without total": ({"low": [0.0, 10.0], "high": [10.0, None], "units": [1.0, 1.0],
                                "total": [5.0, None]}, "open top bracket"),
    "negative low": ({"low": [-5.0, 10.0], "high": [10.0, None], "units": [1.0, 1.0], "total": [1.0, 15.0]},
                     "below 0"),
    "null units": ({"low": [0.0, 10.0], "high": [10.0, None], "units": [None, 1.0], "total": [1.0, 15.0]},
                   "units must be"),
    "empty": ({"low": [0.0], "high": [10.0], "units": [0.0], "total": [0.0]}, "0 units"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_tables_give_clear_errors(case):
    data, words = BAD[case]
    table = pd.DataFrame(data)
    with pytest.raises(InputDataError, match=words.replace("(", r"\(")):
        run(table, ["gini"])


def test_bad_table_names_the_group():
    table = pd.DataFrame({"g": ["a", "b"], "low": [0.0, 0.0], "high": [10.0, 10.0], "units": [1.0, 1.0],
                          "total": [5.0, 50.0]})
    with pytest.raises(InputDataError, match="group g = 'b'"):
        run(table, ["gini"], by=["g"])


@pytest.mark.parametrize("measure, words", [("theil", "cannot be computed from brackets"),
                                            ("top_share(1.5)", "fraction"), ("top_share", "1 parameter")])
def test_bad_measures(measure, words):
    table = pd.DataFrame({"low": [0.0], "high": [10.0], "units": [1.0], "total": [5.0]})
    with pytest.raises(MeasureArgumentError, match=words):
        run(table, [measure])


def test_output_names_clash():
    table = pd.DataFrame({"units": [1.0], "low": [0.0], "high": [10.0], "total": [5.0], "g": ["a"]})
    with pytest.raises(MeasureArgumentError, match="two columns named 'units'"):
        run(table, ["gini"], by=["units AS units"])
    with pytest.raises(MeasureArgumentError, match="two columns named 'gini_lo'"):
        run(table, ["gini", "mean AS gini_lo"])


def test_missing_column_is_an_uneven_error():
    table = pd.DataFrame({"low": [0.0], "high": [10.0], "units": [1.0]})
    with pytest.raises(UnevenError):
        run(table, ["gini"])


# --- the command line -------------------------------------------------------------------------------

def test_cli_runs_and_prints_the_caution(tmp_path, capsys):
    x = np.random.default_rng(1).lognormal(10, 0.8, 5000)
    path = tmp_path / "tab.csv"
    tabulate(x, [0, 1e4, 2e4, 4e4]).rename(columns={"units": "households"}).to_csv(path, index=False)
    assert main(["brackets", str(path), "--units", "households", "--format", "csv", "-m", "gini",
                 "-m", "top_share(0.1) AS top10"]) == 0
    out = capsys.readouterr()
    df = pd.read_csv(pd.io.common.StringIO(out.out))
    truth = micro_values(x)
    assert df["gini_lo"][0] <= truth["gini"] <= df["gini_hi"][0]
    assert df["top10_lo"][0] <= truth["top_share(0.1)"] <= df["top10_hi"][0]
    assert "approximate" in out.err


def test_cli_bad_table_is_one_line_not_a_traceback(tmp_path):
    path = tmp_path / "bad.csv"
    pd.DataFrame(BAD["overlap"][0]).to_csv(path, index=False)
    proc = subprocess.run([sys.executable, "-m", "uneven.cli.main", "brackets", str(path)],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and "overlap" in proc.stderr


def test_cli_help_explains_the_table():
    proc = subprocess.run([sys.executable, "-m", "uneven.cli.main", "brackets", "--help"], capture_output=True,
                          text=True)
    assert proc.returncode == 0 and "open top bracket" in proc.stdout and "--total" in proc.stdout


def test_exported():
    assert uneven.from_brackets is from_brackets and uneven.merge_brackets is merge_brackets


def weighted_gini(x, w):
    # Σ_i w_i x_i (2C_i − w_i − W)/(W·T) over values sorted ascending (handbook weighted form)
    order = np.argsort(x, kind="stable")
    x, w = np.asarray(x, float)[order], np.asarray(w, float)[order]
    C, W, T = np.cumsum(w), w.sum(), (w * x).sum()
    return float(np.sum(w * x * (2 * C - w - W)) / (W * T))


def test_missing_total_gini_bounds_are_the_extremes_over_the_unknown_mean():
    # brackets [0,10): 5 units total 20; [10,30): 4 units, total missing; [30,60): 2 units total 90.
    # For every mean m of the middle bracket, the table with units at the means and the table split
    # between the ends are explicit data sets; their Gini (numpy, weighted form) over a fine grid of m
    # must stay inside the bounds and reach them (the lower at an end, the upper at an inner point)
    table = pd.DataFrame({"low": [0.0, 10.0, 30.0], "high": [10.0, 30.0, 60.0], "units": [5.0, 4.0, 2.0],
                          "total": [20.0, None, 90.0]})
    res = run(table, ["gini"])
    lows, highs = [], []
    for m in np.linspace(10.0, 30.0, 4001):
        lows.append(weighted_gini([4.0, m, 45.0], [5, 4, 2]))
        q = [(4 - 0) / 10, (m - 10) / 20, (45 - 30) / 30]  # share of a bracket's units at its high end
        xs = [0.0, 10.0, 10.0, 30.0, 30.0, 60.0]
        ws = [5 * (1 - q[0]), 5 * q[0], 4 * (1 - q[1]), 4 * q[1], 2 * (1 - q[2]), 2 * q[2]]
        highs.append(weighted_gini(xs, ws))
    assert res.loc[0, "gini_lo"] <= min(lows) <= res.loc[0, "gini_lo"] + 1e-9
    assert res.loc[0, "gini_hi"] - 1e-6 <= max(highs) <= res.loc[0, "gini_hi"]
    assert res.loc[0, "missing_totals"] == 1


def test_random_samples_fall_inside_their_tables_bounds():
    # samples of mixed laws with ties and zeros, random edges (some empty brackets), random missing
    # totals, open or closed top: every measure of the sample (numpy) lies inside the bounds
    import duckdb
    con = duckdb.connect()
    rng = np.random.default_rng(77)
    for case in range(60):
        n = int(rng.integers(20, 400)) * 10  # a multiple of 10: p·n whole for the shares asked
        kind = case % 4
        if kind == 0:
            x = rng.lognormal(rng.uniform(0, 3), rng.uniform(0.2, 1.5), n)
        elif kind == 1:
            x = rng.uniform(0.5, 3) * (1 + rng.pareto(rng.uniform(1.2, 4), n))
        elif kind == 2:
            x = np.round(rng.exponential(rng.uniform(1, 50), n))  # ties, zeros
        else:
            x = np.concatenate([np.zeros(n // 10), rng.uniform(1, 100, n - n // 10)])
        k = int(rng.integers(1, 12))
        inner = np.sort(rng.uniform(np.min(x), np.max(x), k))
        edges = [0.0] + [float(e) for e in inner if e > 0]
        open_top = bool(rng.integers(0, 2))
        drop = tuple(i for i in range(len(edges) - 1) if rng.random() < 0.25)
        table = tabulate(x, edges, open_top=open_top, drop_totals=drop)
        con.register("table", table)
        truth = micro_values(x)
        res = from_brackets("table", MEASURES, con=con)
        assert_contains(res, truth)


def test_cli_reads_a_database_table_by_group_and_writes_a_file(tmp_path, capsys):
    import duckdb
    data = _regions()
    parts = [tabulate(x, [0, 1e4, 2e4, 4e4]).assign(region=r) for r, x in data.items()]
    db = tmp_path / "b.duckdb"
    con = duckdb.connect(str(db))
    con.register("frame", pd.concat(parts, ignore_index=True))
    con.execute("CREATE TABLE tab AS SELECT * FROM frame")
    con.close()
    out = tmp_path / "o.csv"
    assert main(["brackets", "tab", "--database", str(db), "--by", "region", "-m", "gini", "--format", "csv",
                 "-o", str(out)]) == 0
    df = pd.read_csv(out)
    assert list(df["region"]) == ["north", "south"]
    for i, x in enumerate(data.values()):
        assert df["gini_lo"][i] <= micro_gini(x) <= df["gini_hi"][i]


def frac_lorenz(points, p):
    # L(p) of weighted points in exact fractions: the curve through (C_i/W, S_i/T), linear between
    # (the definition in common use, as in DESIGN.md)
    pts = sorted(points)
    W = sum(w for _, w in pts)
    T = sum(x * w for x, w in pts)
    target, c, s = Fraction(p) * W, Fraction(0), Fraction(0)
    for x, w in pts:
        if c + w >= target:
            return (s + (target - c) * x) / T
        c, s = c + w, s + w * x
    return Fraction(1)


def test_share_ratio_bounds_are_reached_by_the_two_extreme_tables():
    # every total given: units at the means reach every upper Lorenz bound at once, units split
    # between the ends every lower one, so Palma and S80/S20 bounds are those tables' values
    F = Fraction
    table = pd.DataFrame({"low": [0.0, 10.0, 20.0, 40.0], "high": [10.0, 20.0, 40.0, 100.0],
                          "units": [6.0, 5.0, 5.0, 4.0], "total": [24.0, 70.0, 150.0, 220.0]})
    res = run(table, ["palma", "s80s20", "lorenz(0.3)", "top_share(0.25)"])
    spec = [(F(0), F(10), 6, F(24)), (F(10), F(20), 5, F(70)), (F(20), F(40), 5, F(150)), (F(40), F(100), 4, F(220))]
    means = [(t / n, F(n)) for _, _, n, t in spec]
    split = []
    for a, c, n, t in spec:
        q = (t / n - a) / (c - a)
        split += [(a, n * (1 - q)), (c, n * q)]

    def ratio(points, top, bottom):
        return (1 - frac_lorenz(points, 1 - F(top))) / frac_lorenz(points, F(bottom))
    # (ratios of shares widened by the 1e-11 rounding allowance: compared to 1e-8)
    assert res.loc[0, "palma_lo"] == pytest.approx(float(ratio(means, "0.1", "0.4")), rel=1e-8)
    assert res.loc[0, "palma_hi"] == pytest.approx(float(ratio(split, "0.1", "0.4")), rel=1e-8)
    assert res.loc[0, "s80s20_lo"] == pytest.approx(float(ratio(means, "0.2", "0.2")), rel=1e-8)
    assert res.loc[0, "s80s20_hi"] == pytest.approx(float(ratio(split, "0.2", "0.2")), rel=1e-8)
    assert res.loc[0, "lorenz(0.3)_lo"] == pytest.approx(float(frac_lorenz(split, F("0.3"))), abs=1e-10)
    assert res.loc[0, "lorenz(0.3)_hi"] == pytest.approx(float(frac_lorenz(means, F("0.3"))), abs=1e-10)
    assert res.loc[0, "top_share(0.25)_hi"] == pytest.approx(float(1 - frac_lorenz(split, F("0.75"))), abs=1e-10)


def test_a_bracket_of_one_value():
    # tabulations often give "no income" a row of its own: [0, 0] with its units and total 0
    x = np.concatenate([np.zeros(300), np.random.default_rng(8).lognormal(9, 0.8, 2700)])
    table = pd.concat([pd.DataFrame({"low": [0.0], "high": [0.0], "units": [300.0], "total": [0.0]}),
                       tabulate(x[300:], [0, 5e3, 1e4, 2e4])], ignore_index=True)
    res = run(table)
    assert res.loc[0, "brackets"] == 5 and res.loc[0, "units"] == 3000
    assert_contains(res, micro_values(x))
    assert_point_inside(res)
    # the lowest 5 % have nothing (away from the jump at 10 %, where both neighbours are candidates)
    q = run(table, ["quantile_w(0.05)"])
    assert (q.loc[0, "quantile_w(0.05)_lo"], q.loc[0, "quantile_w(0.05)_hi"]) == pytest.approx((0.0, 0.0), abs=1e-9)


def test_merge_checks_every_row():
    a = pd.DataFrame({"low": [0.0, 10.0], "high": [10.0, None], "units": [2.0, 1.0], "total": [50.0, 30.0]})
    with pytest.raises(InputDataError, match="between low·units"):
        merge_brackets(["a"])


def test_a_dataframe_passed_itself_from_another_engine():
    # a bracket table kept in SQLite (the standard library's engine), fetched with pandas and passed
    import sqlite3
    x = np.random.default_rng(12).lognormal(10, 0.7, 6000)
    lite = sqlite3.connect(":memory:")
    tabulate(x, [0, 1e4, 2e4, 4e4]).assign(area="east").to_sql("tab", lite, index=False)
    frame = pd.read_sql("SELECT area, low, high, units, total FROM tab", lite)
    res = from_brackets(frame, MEASURES, by=["area"])
    assert list(res["area"]) == ["east"]
    assert_contains(res, micro_values(x))


@pytest.mark.parametrize("column", ["low", "high", "units", "total"])
def test_nan_is_refused_not_taken_for_missing(column):
    table = pd.DataFrame({"low": [0.0, 10.0], "high": [10.0, 20.0], "units": [1.0, 1.0], "total": [5.0, 15.0]})
    table.loc[1, column] = float("nan")
    with pytest.raises(InputDataError, match=f"the {column} column .* holds NaN"):
        from_brackets("(SELECT low, high, units, CASE WHEN total IS NULL THEN 'NaN'::DOUBLE ELSE total END AS total "
                      "FROM table) t" if column == "total" else
                      f"(SELECT * REPLACE (CASE WHEN {column} IS NULL THEN 'NaN'::DOUBLE ELSE {column} END AS {column}) "
                      "FROM table) t", ["gini"])


def test_negative_infinite_high_is_not_an_open_top():
    table = pd.DataFrame({"low": [0.0, 10.0], "high": [10.0, -math.inf], "units": [1.0, 1.0], "total": [5.0, 15.0]})
    with pytest.raises(InputDataError, match="must not be below"):
        run(table, ["gini"])
