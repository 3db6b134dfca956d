"""Standard errors of the cut-based measures on the refine plan (compiler/passes/refine_se.py).

Expected values come from exact rational arithmetic (Python ``fractions``; every double is a
rational), written here from the linearization scores the docs give (docs/uncertainty.md; the
influence functions of a Lorenz ordinate and a quantile, Deville 1999 and Bahadur's representation,
both from memory), never from compiler code. Per group, rows sorted by x with running weight C_k:
    Lorenz L(p) = B/T:   z_k = [p·Q_p + (x_k − Q_p)·1(C_k ≤ p·W) − L·x_k] / T
    top share(p):        minus the score of L(1 − p)
    generalized Lorenz:  z_k = [p·Q_p + (x_k − Q_p)·1(C_k ≤ p·W) − GL] / W
    ratio a/b:           z = (z_a − (a/b)·z_b) / b   (Palma, S80/S20, percentile ratio)
    quantile Q_p:        z_k = (p − 1(x_k ≤ Q_p)) / (W·f),  f = (p⁺ − p⁻)/(Q(p⁺) − Q(p⁻)),
                         p± = p ± K(p)·n^(−1/3) within [0, 1], K the Hall–Sheather constant
                         (Hall & Sheather 1988; Siddiqui 1960; from memory)
and v = n/(n − 1)·Σ (u_k − ū)², u_k = w_k·z_k (with-replacement variance: common practice).
The data are test_refine.py's (ties across cuts, a crowded group, 21 decades, signs, zero weights).
"""

from __future__ import annotations

import math
from fractions import Fraction
from statistics import NormalDist

import numpy as np
import pandas as pd
import pytest

import uneven
from test_refine import refine_data


def _sorted_with_c(x, w):
    pairs = sorted((Fraction(float(a)), Fraction(float(b))) for a, b in zip(x, w) if b > 0)
    xs, ws = [p[0] for p in pairs], [p[1] for p in pairs]
    C, cs = Fraction(0), []
    for wi in ws:
        C += wi
        cs.append(C)
    return xs, ws, cs


def _q(xs, cs, W, p):
    p = Fraction(p)
    return next((a for a, c in zip(xs, cs) if c / W >= p), xs[-1])


def lorenz_score(x, w, p):
    xs, ws, cs = _sorted_with_c(x, w)
    W, T, p = sum(ws), sum(a * b for a, b in zip(xs, ws)), Fraction(p)
    B, prev = Fraction(0), Fraction(0)
    for a, b, c in zip(xs, ws, cs):
        B += a * min(max(p * W - prev, 0), b)
        prev = c
    if T <= 0:
        return None, None
    Q, L = _q(xs, cs, W, Fraction(str(float(p)))), B / T  # C/W ≥ p as doubles compare it (test_refine.py)
    return L, [b * (p * Q + (a - Q) * (c <= p * W) - L * a) / T for a, b, c in zip(xs, ws, cs)]


def top_score(x, w, p):
    L, u = lorenz_score(x, w, 1.0 - p)
    return (None, None) if L is None else (1 - L, [-v for v in u])


def gl_score(x, w, p):
    xs, ws, cs = _sorted_with_c(x, w)
    W, p = sum(ws), Fraction(p)
    B, prev = Fraction(0), Fraction(0)
    for a, b, c in zip(xs, ws, cs):
        B += a * min(max(p * W - prev, 0), b)
        prev = c
    Q, GL = _q(xs, cs, W, Fraction(str(float(p)))), B / W
    return GL, [b * (p * Q + (a - Q) * (c <= p * W) - GL) / W for a, b, c in zip(xs, ws, cs)]


def hall_sheather(p, alpha=0.05):
    nd = NormalDist()
    q = nd.inv_cdf(p)
    return nd.inv_cdf(1 - alpha / 2) ** (2 / 3) * (1.5 * nd.pdf(q) ** 2 / (2 * q * q + 1)) ** (1 / 3)


def quantile_score(x, w, p):
    xs, ws, cs = _sorted_with_c(x, w)
    W, n = sum(ws), len(xs)
    Q = _q(xs, cs, W, Fraction(str(p)))
    if not 0 < p < 1:
        return Q, None
    h = hall_sheather(p) * float(n) ** (-1 / 3)
    hi, lo = min(p + h, 1.0), max(p - h, 0.0)
    spread = _q(xs, cs, W, hi) - _q(xs, cs, W, lo)
    if spread <= 0:
        return Q, None
    f = Fraction(hi - lo) / spread
    pf = Fraction(str(p))
    return Q, [b * (pf - (a <= Q)) / (W * f) for a, b in zip(xs, ws)]


def ratio(num, den):
    (a, ua), (b, ub) = num, den
    if a is None or b is None or b == 0 or ua is None or ub is None:
        return None, None
    r = a / b
    return r, [(za - r * zb) / b for za, zb in zip(ua, ub)]


SCORES = {  # SQL call template -> (estimate, scores) from (x, w)
    "lorenz_se(x, 0.3{w})": lambda x, w: lorenz_score(x, w, 0.3),
    "bottom_share_se(x, 0.4{w})": lambda x, w: lorenz_score(x, w, 0.4),
    "top_share_se(x, 0.1{w})": lambda x, w: top_score(x, w, 0.1),
    "generalized_lorenz_se(x, 0.5{w})": lambda x, w: gl_score(x, w, 0.5),
    "palma_se(x{w})": lambda x, w: ratio(top_score(x, w, 0.1), lorenz_score(x, w, 0.4)),
    "s80s20_se(x{w})": lambda x, w: ratio(top_score(x, w, 0.2), lorenz_score(x, w, 0.2)),
    "quantile_w_se(x, 0.5{w})": lambda x, w: quantile_score(x, w, 0.5),
    "quantile_w_se(x, 0.37{w})": lambda x, w: quantile_score(x, w, 0.37),
    "quantile_w_se(x, 0{w})": lambda x, w: quantile_score(x, w, 0),
    "percentile_ratio_se(x, 0.9, 0.1{w})": lambda x, w: ratio(quantile_score(x, w, 0.9), quantile_score(x, w, 0.1)),
}


def exact_se(score, x, w):
    if len(x) < 2:
        return None
    est, u = score(x, w)
    if est is None or u is None:
        return None
    if min(x) == max(x):
        return 0.0
    n = len(u)
    mean = sum(u) / n
    return math.sqrt(Fraction(n, n - 1) * sum((a - mean) ** 2 for a in u))


CALLS = [(call.format(w=", w" if weighted else ""), ref, weighted) for weighted in (True, False)
         for call, ref in SCORES.items()]
# Tolerances. The crowded group's values lie within 5e-5 of each other: the Lorenz scores there
# are of the order of that spread while the estimate L enters them as m·(p − L), m = 1000 and
# p − L about 2e-6, so the rounding of the sums behind L (both plans compute L the same way) is
# amplified about 1e9-fold relative: 2e-12 of the SE on DuckDB, 7e-11 on PostgreSQL, which adds
# the same doubles in another order. Elsewhere the SEs agree with the exact ones to 1e-12.
CROWDED = {"duckdb": 1e-11}


def _group(df, key, weighted):
    d = df[df["g"].isna()] if key is None else df[df["g"] == key]
    d = d[d["x"].notna()]
    if weighted:
        d = d[d["w"].notna()]
    x = d["x"].to_numpy(float)
    w = d["w"].to_numpy(float) if weighted else np.ones(len(d))
    keep = w > 0
    return x[keep], w[keep]


def _key(value):
    return None if value is None or value is pd.NA or value != value else value


@pytest.fixture(scope="module")
def data(engine):
    df = refine_data()
    engine.load(df)
    return df


_EXPECTED: dict = {}  # (group, call index) -> exact SE, computed once for every engine


def test_cut_measure_standard_errors_are_exact_on_the_refine_plan(engine, data):
    calls = ", ".join(f"{call} AS m{i}" for i, (call, _, _) in enumerate(CALLS))
    sql = f"SELECT g, {calls} FROM t GROUP BY g"
    assert {p["kind"] for p in uneven.explain(sql).passes} == {"refine"}
    got = engine.run(sql, ordered="refine")
    bad = []
    for row in got.to_dict("records"):
        key = _key(row["g"])
        for i, (call, score, weighted) in enumerate(CALLS):
            if (key, i) not in _EXPECTED:
                _EXPECTED[key, i] = exact_se(score, *_group(data, key, weighted))
            want, value = _EXPECTED[key, i], row[f"m{i}"]
            value = None if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)) \
                else value
            tol = CROWDED.get(engine.name, 1e-9) if key == "crowded" else 1e-12
            if (want is None) != (value is None) or (want is not None and abs(value - want) > tol * abs(want)
                                                      and abs(value - want) > 1e-300):
                bad.append(f"{key} {call}: got {value}, want {want}")
    assert not bad, "\n".join(bad[:20])


def test_refine_standard_errors_equal_the_window_plan_on_duckdb():
    import duckdb
    con = duckdb.connect()
    con.register("t", refine_data())
    calls = [c for c, _, _ in CALLS] + ["top_share(x, 0.1, w)", "palma_ci_lo(x, w, level := 0.9)",
                                        "quantile_w_ci_hi(x, 0.5)"]
    sql = "SELECT g, " + ", ".join(f"{c} AS m{i}" for i, c in enumerate(calls)) + " FROM t GROUP BY g ORDER BY g NULLS LAST"
    a = con.execute(uneven.compile(sql, ordered="refine")).fetchall()
    b = con.execute(uneven.compile(sql, ordered="window")).fetchall()
    assert [r[0] for r in a] == [r[0] for r in b]
    for ra, rb in zip(a, b):
        # the crowded group: the window plan's quadratic form of term sums keeps fewer digits than
        # the refine plan's Σu² (against the exact SE: 8e-12 and 2e-12)
        rel = 1e-10 if ra[0] == "crowded" else 1e-12
        for call, u, v in zip(calls, ra[1:], rb[1:]):
            assert (u is None) == (v is None), (ra[0], call, u, v)
            if u is not None:
                assert u == pytest.approx(v, rel=rel, abs=1e-300), (ra[0], call)


def test_planner_keeps_a_survey_design_or_a_gini_on_the_linearized_pass():
    df = refine_data()  # noqa: F841 (read by the queries below)

    def kinds(sql, **options):
        return [p["kind"] for p in uneven.explain(sql, **options).passes]

    assert kinds("SELECT g, top_share_se(x, 0.1, w), quantile_w(x, 0.5, w) FROM df GROUP BY g") == ["refine"]
    # a Gini beside it: not the refine plan; on DuckDB, where uneven runs the query, the pass streams
    # (docs/plans.md, "Cut-based standard errors on the stream"); with the window plan, its linearized pass
    assert kinds("SELECT g, top_share_se(x, 0.1, w), gini(x, w) FROM df GROUP BY g") == ["stream"]
    assert kinds("SELECT g, top_share_se(x, 0.1, w), gini(x, w) FROM df GROUP BY g", ordered="window") \
        == ["linearized"]
    # a survey design: not the refine plan either; on DuckDB the pass streams (docs/plans.md, "A survey
    # design on the stream"); asked for the refine plan, the window plan's linearized pass
    assert kinds("SELECT g, top_share_se(x, 0.1, w, strata := g) FROM df GROUP BY g") == ["stream"]
    assert kinds("SELECT g, top_share_se(x, 0.1, w, strata := g) FROM df GROUP BY g", ordered="refine") \
        == ["linearized"]
    assert kinds("SELECT g, palma_se(x, w) FROM df GROUP BY g", ordered="window") == ["linearized"]
