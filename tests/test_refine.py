"""The refine plan (compiler/passes/refine.py, docs/refine.md) on every engine of the matrix.

Expected values come from exact rational arithmetic written here from the contract's definitions
(DESIGN.md, "Measure definitions"; every double is a rational, so Python ``fractions`` is exact),
never from compiler code: per group, the rows sorted by x with running weight C_i, then
    L(p)·T = Σ x_i·clamp(p·W − C_{i−1}, 0, w_i),  top_share(p)·T = Σ x_i·clamp(C_i − (1−p)·W, 0, w_i),
    Q(p) = the smallest x_i with C_i/W ≥ p (weighted inverted CDF).
The data are invented (fixed seeds) and chosen to stress the plan: ties across a cut, a group
crowded in one bin, values spread over 21 decades, zeros and negatives, zero and fractional
weights, NULL values and weights, a group with no valid row, one-row groups, and p = 0 and 1.
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest

import uneven
from uneven.compiler.passes import refine_sub
from uneven.errors import MeasureUsageError

# ---- exact oracle ---------------------------------------------------------------------------------

def _rows(x, w):
    pairs = sorted((Fraction(float(a)), Fraction(float(b))) for a, b in zip(x, w) if b > 0)
    return [p[0] for p in pairs], [p[1] for p in pairs]


def below(x, w, p):
    xs, ws = _rows(x, w)
    W, C, held = sum(ws), Fraction(0), Fraction(0)
    for xi, wi in zip(xs, ws):
        held += xi * min(max(Fraction(p) * W - C, 0), wi)
        C += wi
    return held


def above(x, w, p):
    xs, ws = _rows(x, w)
    W, C, held = sum(ws), Fraction(0), Fraction(0)
    for xi, wi in zip(xs, ws):
        C += wi
        held += xi * min(max(C - (1 - Fraction(p)) * W, 0), wi)
    return held


def quantile(x, w, p):
    """p as the decimal the SQL text writes (0.9 is 9/10): with integer weights C_i/W can equal it
    exactly, and the engine's double C_i/W then equals the double 0.9, as 9/10 equals 9/10."""
    xs, ws = _rows(x, w)
    if not xs:
        return None
    W, C = sum(ws), Fraction(0)
    for xi, wi in zip(xs, ws):
        C += wi
        if C / W >= Fraction(str(p)):
            return xi
    return xs[-1]


def _total(x, w):
    xs, ws = _rows(x, w)
    return sum(a * b for a, b in zip(xs, ws)) if xs else None, sum(ws) if xs else None


def _share(mass, x, w, p):
    T, _ = _total(x, w)
    return None if T is None or T <= 0 else mass(x, w, p) / T


def _ratio(a, b):
    return None if a is None or b is None or b == 0 else a / b


ORACLE = {  # SQL call template ({w}: ", w" or "") -> exact value from (x, w)
    "lorenz(x, 0.3{w})": lambda x, w: _share(below, x, w, 0.3),
    "lorenz(x, 0{w})": lambda x, w: _share(below, x, w, 0),
    "lorenz(x, 1{w})": lambda x, w: _share(below, x, w, 1),
    "bottom_share(x, 0.4{w})": lambda x, w: _share(below, x, w, 0.4),
    "generalized_lorenz(x, 0.5{w})": lambda x, w: (None if _total(x, w)[1] is None
                                                    else below(x, w, 0.5) / _total(x, w)[1]),
    "top_share(x, 0.1{w})": lambda x, w: _share(above, x, w, 0.1),
    "top_share(x, 0{w})": lambda x, w: _share(above, x, w, 0),
    "top_share(x, 1{w})": lambda x, w: _share(above, x, w, 1),
    "palma(x{w})": lambda x, w: _ratio(_share(above, x, w, 0.1), _share(below, x, w, 0.4)),
    "s80s20(x{w})": lambda x, w: _ratio(_share(above, x, w, 0.2), _share(below, x, w, 0.2)),
    "quantile_w(x, 0.5{w})": lambda x, w: quantile(x, w, 0.5),
    "quantile_w(x, 0.37{w})": lambda x, w: quantile(x, w, 0.37),
    "quantile_w(x, 0{w})": lambda x, w: quantile(x, w, 0),
    "quantile_w(x, 1{w})": lambda x, w: quantile(x, w, 1),
    "percentile_ratio(x, 0.9, 0.1{w})": lambda x, w: _ratio(quantile(x, w, 0.9), quantile(x, w, 0.1)),
    "lorenz_curve(x, 4{w})": lambda x, w: (None if _share(below, x, w, 1) is None else
                                           [(Fraction(j, 4), _share(below, x, w, Fraction(j, 4))) for j in range(5)]),
}


# ---- invented data -------------------------------------------------------------------------------

def refine_data() -> pd.DataFrame:
    rng = np.random.default_rng(20261203)
    groups = {}
    n = 400
    groups["lognormal"] = (np.round(rng.lognormal(3, 1, n), 2), rng.integers(1, 6, n).astype(float))
    # five values, so every cut falls inside a block of ties (bins of one value: no sort at all)
    groups["ties"] = (rng.choice([1.0, 2.0, 2.5, 7.0, 40.0], n), rng.integers(1, 4, n).astype(float))
    # a tie run across a cut with the other rows in the same bin (1000 + small steps: one bin)
    crowd = 1000.0 + rng.integers(0, 50, n) * 0.001
    crowd[:120] = 1000.02
    groups["crowded"] = (crowd, rng.integers(1, 4, n).astype(float))
    groups["span"] = (10.0 ** rng.uniform(-9, 12, n), rng.integers(1, 9, n).astype(float))
    mixed = np.round(rng.normal(20, 30, n), 1)
    mixed[:40] = 0.0
    groups["signs"] = (mixed, rng.integers(1, 4, n).astype(float))
    frac = np.round(rng.pareto(1.5, n) * 100 + 1, 3)
    wf = np.round(rng.uniform(0.1, 5.0, n), 6)
    wf[:30] = 0.0  # zero weights change nothing
    groups["fractional"] = (frac, wf)
    groups["one_row"] = (np.array([42.5]), np.array([3.0]))
    groups["two_equal"] = (np.array([5.0, 5.0]), np.array([1.0, 2.0]))
    groups["all_negative"] = (-np.round(rng.lognormal(1, 0.5, 50), 2), rng.integers(1, 3, 50).astype(float))
    frames = [pd.DataFrame({"g": k, "x": x, "w": w}) for k, (x, w) in groups.items()]
    df = pd.concat(frames, ignore_index=True)
    df["x"] = df["x"].astype("Float64")
    df["w"] = df["w"].astype("Float64")
    # NULL values and weights are skipped; a group whose every value is NULL has no valid row
    df.loc[5, "x"] = pd.NA
    df.loc[17, "w"] = pd.NA
    empty = pd.DataFrame({"g": "no_valid_row", "x": pd.array([pd.NA, pd.NA], dtype="Float64"),
                          "w": pd.array([1.0, 2.0], dtype="Float64")})
    nullkey = pd.DataFrame({"g": None, "x": pd.array([3.0, 1.0, 4.0, 1.0, 5.0], dtype="Float64"),
                            "w": pd.array([1.0, 1.0, 2.0, 1.0, 1.0], dtype="Float64")})
    return pd.concat([df, empty, nullkey], ignore_index=True)


CALLS = [(call.format(w=", w" if weighted else ""), ref, weighted) for weighted in (True, False)
         for call, ref in ORACLE.items()]


def _want(df, key, ref, weighted):
    d = df[df["g"].isna()] if key is None else df[df["g"] == key]
    d = d[d["x"].notna()]
    if weighted:
        d = d[d["w"].notna()]
    x = d["x"].to_numpy(float)
    w = d["w"].to_numpy(float) if weighted else np.ones(len(d))
    return ref(x, w)


def _close(got, want, rel=1e-12) -> bool:
    if want is None:
        return got is None or got is pd.NA
    if isinstance(want, list):
        if isinstance(got, str):
            got = json.loads(got)  # SQLite: list results are JSON text
        return got is not None and len(got) == len(want) and all(
            _close(g["p"], p) and _close(g["lorenz"], v) for g, (p, v) in zip(got, want))
    if got is None or got is pd.NA or (isinstance(got, float) and math.isnan(got)):
        return False
    err = abs(Fraction(float(got)) - Fraction(want))
    # an exact zero (top_share(x, 0)) is met to 1e-12 absolute: shares are of order one
    return err <= rel * abs(Fraction(want)) or (want == 0 and err <= Fraction(1, 10 ** 12))


@pytest.fixture(scope="module")
def data(engine):
    df = refine_data()
    engine.load(df)
    return df


@pytest.fixture(scope="module")
def refined(engine, data):
    calls = ", ".join(f"{call} AS m{i}" for i, (call, _, _) in enumerate(CALLS))
    return engine.run(f"SELECT g, {calls} FROM t GROUP BY g", ordered="refine")


def test_every_cut_based_measure_is_exact_on_the_refine_plan(engine, data, refined):
    keys = list(dict.fromkeys(None if pd.isna(k) else k for k in data["g"]))
    assert len(refined) == len(keys)
    bad = []
    for row in refined.to_dict("records"):  # (iterrows would turn NULL into NaN)
        key = None if row["g"] is None or row["g"] is pd.NA or row["g"] != row["g"] else row["g"]
        for i, (call, ref, weighted) in enumerate(CALLS):
            got, want = row[f"m{i}"], _want(data, key, ref, weighted)
            if isinstance(got, np.ndarray):
                got = list(got)
            if not _close(got, want):
                bad.append(f"{key} {call}: got {got}, want {want if want is None else float(want) if not isinstance(want, list) else want}")
    assert not bad, "\n".join(bad[:20])


def test_refine_plan_raises_the_input_policy_errors(engine, data):
    from engines import EngineError
    with pytest.raises(EngineError, match="uneven: negative weight"):
        engine.run("SELECT g, top_share(x, 0.1, w - 3) FROM t GROUP BY g", ordered="refine")


# ---- crowded bins: the second level of sub-bins (refine_sub.py) ------------------------------------

def crowded_data() -> pd.DataFrame:
    """Groups whose values sit in one or two 2 % bins, so every cut falls in a crowded bin and the
    sub-bins between the bin's min and max decide which rows are sorted."""
    rng = np.random.default_rng(20261204)
    groups = {}
    n = 1500
    # values within 5e-5 relative of 1000, a long tie run inside, integer weights
    wide = np.round(1000.0 * (1.0 + 5e-5 * rng.random(n)), 9)
    wide[:150] = wide[150]
    groups["crowded_wide"] = (wide, rng.integers(1, 6, n).astype(float))
    # ties on the sub-bin edges lo + k·(hi − lo)/1024 and one ulp either side, fractional weights
    lo, hi = 1000.0, 1000.05
    edges = lo + (hi - lo) * rng.integers(0, 1025, 300) / 1024.0
    near = np.concatenate([edges, np.nextafter(edges, 0.0), np.nextafter(edges, 2e3), [lo, hi]])
    at_edges = np.concatenate([near, near[:200]])  # tie runs of two or three rows on the edges
    groups["crowded_edges"] = (at_edges, np.round(rng.uniform(0.1, 3.0, len(at_edges)), 3))
    # a near-constant group: the cut sub-bin holds one value (no sort at all)
    flat = np.full(n, 1000.0)
    flat[:12] = 1000.0 + np.linspace(-0.01, 0.01, 12)
    groups["near_constant"] = (flat, rng.integers(1, 4, n).astype(float))
    # most rows in one sub-bin (five values 1e-10 apart), the bin's range set by two outliers
    cluster = 1000.01 + rng.integers(0, 5, 800) * 1e-10
    cluster[:2] = [1000.0, 1000.049]
    groups["crowded_cluster"] = (cluster, rng.integers(1, 4, 800).astype(float))
    # crowded negatives beside crowded positives (two crowded bins of opposite sign) and zeros
    signs = np.concatenate([-np.round(1000.0 * (1.0 + 5e-5 * rng.random(600)), 9),
                            np.round(3000.0 * (1.0 + 5e-5 * rng.random(900)), 9), np.zeros(40)])
    groups["crowded_signs"] = (signs, rng.integers(1, 4, len(signs)).astype(float))
    # a third of the weights zero (they change nothing), the rest fractional
    zw = np.round(1000.0 * (1.0 + 5e-5 * rng.random(n)), 9)
    wz = np.round(rng.uniform(0.01, 2.0, n), 4)
    wz[::3] = 0.0
    groups["crowded_zero_weights"] = (zw, wz)
    frames = [pd.DataFrame({"g": k, "x": x, "w": w}) for k, (x, w) in groups.items()]
    df = pd.concat(frames, ignore_index=True)
    df["x"] = df["x"].astype("Float64")
    df["w"] = df["w"].astype("Float64")
    df.loc[7, "x"] = pd.NA  # NULL values and weights are skipped
    df.loc[9, "w"] = pd.NA
    empty = pd.DataFrame({"g": "no_valid_row", "x": pd.array([pd.NA], dtype="Float64"),
                          "w": pd.array([1.0], dtype="Float64")})
    return pd.concat([df, empty], ignore_index=True)


@pytest.fixture(scope="module")
def crowded_want():
    df = crowded_data()
    return {(key, i): _want(df, key, ref, weighted)
            for key in dict.fromkeys(df["g"]) for i, (_, ref, weighted) in enumerate(CALLS)}


def test_sub_bins_are_exact_on_crowded_bins(engine, crowded_want, monkeypatch):
    # expected: exact fractions from the contract's definitions (module docstring), not compiler code;
    # every cut bin takes the sub-bin path here (the groups hold fewer rows than the switch's default)
    monkeypatch.setattr(refine_sub, "WHOLE_BIN_ROWS", 0)
    engine.load(crowded_data(), "crowd")
    calls = ", ".join(f"{call} AS m{i}" for i, (call, _, _) in enumerate(CALLS))
    got = engine.run(f"SELECT g, {calls} FROM crowd GROUP BY g", ordered="refine")
    assert sorted(got["g"]) == sorted({k for k, _ in crowded_want})
    bad = []
    for row in got.to_dict("records"):
        for i, (call, _, _) in enumerate(CALLS):
            value, want = row[f"m{i}"], crowded_want[(row["g"], i)]
            if isinstance(value, np.ndarray):
                value = list(value)
            if not _close(value, want):
                bad.append(f"{row['g']} {call}: got {value}, want {want if want is None or isinstance(want, list) else float(want)}")
    assert not bad, "\n".join(bad[:20])


def _cte_rows(con, sql: str, suffix: str, what=None) -> list:
    """The rows of the refine plan's CTE whose name ends with ``suffix`` (``what``: the projection,
    count(*) by default), read by cutting the compiled query down to that CTE."""
    import sqlglot
    tree = sqlglot.parse_one(uneven.compile(sql, ordered="refine"), read="duckdb")
    name = next(c.alias for c in tree.args["with_"].expressions if c.alias.endswith(suffix))
    tree.set("expressions", [what or sqlglot.exp.Count(this=sqlglot.exp.Star())])
    for arg in ("group", "order", "joins", "where", "having"):
        tree.set(arg, None)
    tree.set("from_", sqlglot.exp.From(this=sqlglot.exp.to_table(f'"{name}"')))
    return con.execute(tree.sql("duckdb")).fetchall()


def _rows_sorted(con, sql: str) -> int:
    """How many rows the refine plan sorts: the rows of its in CTE (the distinct values of the cut
    sub-bins) and of its wr CTE (the rows of the cut bins sorted whole), its only windows over rows."""
    return sum(_cte_rows(con, sql, suffix)[0][0] for suffix in ("_in", "_wr"))


def test_sub_bins_sort_few_rows_of_a_crowded_group():
    import duckdb
    rng = np.random.default_rng(7)
    n = 200_000
    con = duckdb.connect()
    con.register("c", pd.DataFrame({"x": 1000.0 * (1.0 + 5e-5 * rng.random(n)), "w": rng.integers(1, 5, n) * 1.0,
                                    "flat": np.where(np.arange(n) < 50, 999.99, 1000.0),
                                    "noisy": np.where(np.arange(n) < n // 100, 1000.0 + rng.uniform(-0.01, 0.01, n),
                                                      1000.0)}))
    # 200,000 values within 5e-5 relative: one bin; four cuts, each in a sub-bin of about n/1024 rows
    sql = "SELECT top_share(x, 0.1, w), palma(x, w), quantile_w(x, 0.5, w) FROM c"
    assert 0 < _rows_sorted(con, sql) < 4 * 3 * n / 1024
    # a near-constant column: the cut sub-bins hold one value, nothing is sorted
    assert _rows_sorted(con, "SELECT top_share(flat, 0.1, w), quantile_w(flat, 0.5, w) FROM c") == 0
    # near-constant with 1 % noise: the cut sub-bin holds the big tie run and a few other values,
    # and a tie run is one row of the in CTE
    assert 0 < _rows_sorted(con, "SELECT top_share(noisy, 0.1, w), quantile_w(noisy, 0.5, w) FROM c") < 100


# ---- the switch: small cut bins sorted whole, crowded ones cut into sub-bins ----------------------

SWITCH_ROWS = 64  # the switch's threshold in these tests (refine_sub.WHOLE_BIN_ROWS), so small data cross it


def switch_data() -> pd.DataFrame:
    """Groups on both sides of the switch at SWITCH_ROWS rows per cut bin, one query."""
    rng = np.random.default_rng(20261205)

    def one_bin(n):  # n values within 5e-5 relative of 1000 (one 2 % bin), a tie run across the middle
        v = np.round(1000.0 + rng.integers(0, 40, n) * 0.001, 3)
        v[n // 3: n // 2 + 4] = 1000.02
        return v

    groups = {
        "edge_at": (one_bin(SWITCH_ROWS), rng.integers(1, 4, SWITCH_ROWS).astype(float)),  # sorted whole
        "edge_above": (one_bin(SWITCH_ROWS + 1), rng.integers(1, 4, SWITCH_ROWS + 1).astype(float)),  # sub-bins
    }
    # one group with cuts on both paths: 200 values spread over six decades in pairs 0.2 % apart, each
    # pair inside one bin whether an engine's cast rounds or truncates (ln x·50 = k + 0.25 and k + 0.35:
    # bins of two or more rows hold the 0.1 and 0.2 cuts and the top shares), around 300 crowded in one
    # bin at 1000 (the middle cuts, with a tie run across the median), fractional weights
    base = np.exp((rng.integers(0, 690, 100) + 0.25) / 50)
    spread = np.concatenate([base, base * np.exp(0.1 / 50)])
    groups["mixed"] = (np.concatenate([spread, one_bin(300)]), np.round(rng.uniform(0.2, 3.0, 500), 3))
    groups["ordinary"] = (np.round(rng.lognormal(3, 1, 300), 2), rng.integers(1, 6, 300).astype(float))
    frames = [pd.DataFrame({"g": k, "x": x, "w": w}) for k, (x, w) in groups.items()]
    df = pd.concat(frames, ignore_index=True)
    df["x"] = df["x"].astype("Float64")
    df["w"] = df["w"].astype("Float64")
    return df


def test_switch_is_exact_on_both_sides_in_one_query(engine, monkeypatch):
    # expected: exact fractions from the contract's definitions (module docstring), not compiler code
    monkeypatch.setattr(refine_sub, "WHOLE_BIN_ROWS", SWITCH_ROWS)
    df = switch_data()
    engine.load(df, "sw")
    calls = ", ".join(f"{call} AS m{i}" for i, (call, _, _) in enumerate(CALLS))
    got = engine.run(f"SELECT g, {calls} FROM sw GROUP BY g", ordered="refine")
    assert sorted(got["g"]) == sorted(set(df["g"]))
    bad = []
    for row in got.to_dict("records"):
        for i, (call, ref, weighted) in enumerate(CALLS):
            value, want = row[f"m{i}"], _want(df, row["g"], ref, weighted)
            if isinstance(value, np.ndarray):
                value = list(value)
            if not _close(value, want):
                bad.append(f"{row['g']} {call}: got {value}, want {want if want is None or isinstance(want, list) else float(want)}")
    assert not bad, "\n".join(bad[:20])


def test_switch_takes_each_path_at_its_threshold(monkeypatch):
    import duckdb
    from sqlglot import exp
    default = refine_sub.WHOLE_BIN_ROWS
    monkeypatch.setattr(refine_sub, "WHOLE_BIN_ROWS", SWITCH_ROWS)
    con = duckdb.connect()
    con.register("sw", switch_data())
    sql = "SELECT g, top_share(x, 0.1, w), palma(x, w), quantile_w(x, 0.5, w) FROM sw GROUP BY g"

    def keys(suffix):  # the groups with a row in the CTE
        return {r[0] for r in _cte_rows(con, sql, suffix, exp.column("_uv_k1"))}

    # a cut bin of exactly SWITCH_ROWS rows is sorted whole, one of SWITCH_ROWS + 1 gets sub-bins; the
    # mixed group's cuts take both paths; the ordinary group's bins hold a few rows each
    assert keys("_wr") == {"edge_at", "mixed", "ordinary"}
    assert keys("_sb") == {"edge_above", "mixed"}
    # at the default threshold these small groups' cut bins are all sorted whole
    monkeypatch.setattr(refine_sub, "WHOLE_BIN_ROWS", default)
    assert _cte_rows(con, sql, "_sb")[0][0] == 0 < _cte_rows(con, sql, "_wr")[0][0]


# ---- the same outcome as the window plan, and the planner's choice -----------------------------

def test_refine_equals_window_plan_on_duckdb():
    import duckdb
    con = duckdb.connect()
    con.register("t", refine_data())
    calls = ", ".join(f"{call} AS m{i}" for i, (call, _, _) in enumerate(CALLS))
    sql = f"SELECT g, {calls} FROM t GROUP BY g ORDER BY g NULLS LAST"
    a = con.execute(uneven.compile(sql, ordered="refine")).fetchall()
    b = con.execute(uneven.compile(sql, ordered="window")).fetchall()
    assert [r[0] for r in a] == [r[0] for r in b]
    for ra, rb in zip(a, b):
        for i, (u, v) in enumerate(zip(ra[1:], rb[1:])):
            if isinstance(u, list):
                assert [p["lorenz"] for p in u] == pytest.approx([p["lorenz"] for p in v], rel=1e-12, abs=1e-12)
            elif u is None:
                assert v is None, CALLS[i][0]
            else:
                assert u == pytest.approx(v, rel=1e-12, abs=1e-12), CALLS[i][0]


def _kinds(sql, **options):
    return [p["kind"] for p in uneven.explain(sql, **options).passes]


def test_planner_refines_only_when_every_measure_is_cut_based():
    df = refine_data()  # noqa: F841 (read by the queries below)
    assert _kinds("SELECT g, top_share(x, 0.1, w), quantile_w(x, 0.5, w) FROM df GROUP BY g") == ["refine"]
    # a weighted Gini beside it: the full order; on DuckDB, run by uneven, the stream plan (docs/plans.md)
    assert _kinds("SELECT g, top_share(x, 0.1, w), gini(x, w) FROM df GROUP BY g") == ["stream"]
    assert _kinds("SELECT g, top_share(x, 0.1), gini(x) FROM df GROUP BY g") == ["stream"]  # unweighted too
    assert _kinds("SELECT g, top_share(x, 0.1), gini(x) FROM df GROUP BY g", ordered="refine") == ["ordered"]
    assert _kinds("SELECT g, top_share(x, 0.1, w) FROM df GROUP BY g", ordered="window") == ["ordered"]
    assert _kinds("SELECT g, top_share(x, 0.1, w) FROM df GROUP BY g", tie_grouping="on") == ["ordered"]
    assert _kinds("SELECT g, top_share(x, 0.1, w) FROM df GROUP BY g", tie_grouping="on",
                  ordered="refine") == ["refine"]
    assert _kinds("SELECT g, lorenz_curve(x, 50, w) FROM df GROUP BY g") == ["stream"]  # more than 20 segments
    reasons = [p["reason"] for p in uneven.explain("SELECT g, palma(x), gini(x) FROM df GROUP BY g",
                                                   ordered="refine").passes]
    assert reasons[0].startswith("window plan: gini needs the full order")
    # a Gini on another value leaves the cut-based value on the refine plan
    assert sorted(_kinds("SELECT g, palma(x), gini(w) FROM df GROUP BY g", ordered="refine")) == ["ordered", "refine"]


@pytest.mark.parametrize("dialect", ["duckdb", "postgres", "spark", "sqlite", "trino", "bigquery", "snowflake"])
def test_compile_emits_the_refine_plan_for_every_dialect(dialect):
    sql = "SELECT g, top_share(x, 0.1, w), palma(x, w) FROM t GROUP BY g"
    assert '_uv_ref_1_need' in uneven.compile(sql, dialect=dialect).replace('`', '"')
    assert '_uv_ref_' not in uneven.compile(sql, dialect=dialect, ordered="window")


def test_unknown_plan_name_is_refused():
    with pytest.raises(MeasureUsageError, match="ordered must be one of auto, refine, window"):
        uneven.compile("SELECT top_share(x, 0.1) FROM t", ordered="sorted")


def test_random_source_is_read_once():
    # the plan reads its rows twice (bins, then the cut bins): a random source goes through the
    # materialized CTE (compiler/materialize.py), so both reads see the same draw
    sql = ("SELECT min(x) AS lo, max(x) AS hi, quantile_w(x, 0) AS q0, quantile_w(x, 1) AS q1, "
           "quantile_w(x, 0.5) AS q5 FROM (SELECT random() AS x FROM range(5000))")
    for _ in range(3):
        row = uneven.query(sql, ordered="refine").iloc[0]
        assert row["q0"] == row["lo"] and row["q1"] == row["hi"]
        assert row["lo"] < row["q5"] < row["hi"]


@pytest.mark.parametrize("dialect", ["duckdb", "postgres", "spark", "sqlite", "trino", "bigquery", "snowflake"])
def test_sub_bins_are_emitted_for_every_dialect_but_spark(dialect):
    # Spark sorts its cut bins whole (docs/refine.md, "Crowded bins"); so does the plan with an SE
    sql = "SELECT g, top_share(x, 0.1, w), palma(x, w) FROM t GROUP BY g"
    compiled = uneven.compile(sql, dialect=dialect).replace('`', '"')
    # with the switch's whole-bin branch beside them (wr)
    assert ('_uv_ref_1_cr' in compiled) == ('_uv_ref_1_wr' in compiled) == (dialect != "spark")
    assert '_uv_ref_1_cr' not in uneven.compile("SELECT g, top_share_se(x, 0.1, w) FROM t GROUP BY g",
                                                 dialect=dialect).replace('`', '"')
