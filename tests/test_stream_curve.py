"""The stream plan's Lorenz curve (lorenz_curve) and the Gini's linearized standard error (gini_se,
gini_ci_lo/hi) against outside sources: exact rational arithmetic (Python ``fractions``, written from
the measure contract in DESIGN.md and the published influence function of the Gini: Langel & Tillé
2013, Deville 1999, cited from memory, as in uneven/reference/linearized.py), the numpy reference
(uneven.reference, tested against brute force in tests/test_reference.py) on the rows DuckDB
selects, and the window plan on the same query (values to 1e-12, NULLs). Batches of 7 and 97 rows
make cuts, runs of tied values and groups straddle batch edges.
"""

from __future__ import annotations

import math
from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
import uneven.engine.stream as stream_engine
from test_numerics import DATA, exact_lorenz, rel
from test_stream import assert_same_frames, close
from uneven import reference as R
from uneven.compiler.context import CompileOptions
from uneven.compiler.pipeline import compile_with_context
from uneven.engine.columns import DuckDBSchema
from uneven.reference import se as RSE


@pytest.fixture(params=[7, None], ids=["batch7", "whole"])
def batch(monkeypatch, request):
    if request.param:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", request.param)
    return request.param


@pytest.fixture(scope="module")
def grouped():
    rng = np.random.default_rng(18)
    n = 2000
    df = pd.DataFrame({"a": rng.integers(0, 5, n).astype(float), "b": rng.choice(["n", "s"], n),
                       "x": rng.lognormal(1, 1, n).round(1), "w": rng.integers(0, 4, n).astype(float)})
    df.loc[rng.random(n) < 0.05, "a"] = None  # NULL keys: a group of their own
    df.loc[rng.random(n) < 0.04, "x"] = None  # skipped rows
    df.loc[rng.random(n) < 0.03, "w"] = None
    con = duckdb.connect()
    con.register("t", df)
    return con, df


def curves(column) -> list:
    """Each group's list of (p, L(p)), None for a NULL curve."""
    return [None if c is None or c is pd.NA or (isinstance(c, float) and math.isnan(c)) else [(pt["p"], pt["lorenz"]) for pt in c]
            for c in column]


def assert_same_curves(got, want, tol=1e-12) -> None:
    assert len(got) == len(want)
    for a, b in zip(curves(got), curves(want)):
        if b is None:
            assert a is None
            continue
        assert a is not None and len(a) == len(b)
        for (pa_, la), (pb, lb) in zip(a, b):
            assert pa_ == pb  # p = j/k, the same double
            assert abs(la - lb) <= tol * max(abs(lb), 1.0), (la, lb)  # L(0) = 0: absolute there


def streamed_kinds(sql: str, con, ordered: str = "stream") -> list[str]:
    return [p["kind"] for p in uneven.explain(sql, con, ordered=ordered).passes]


# ---- lorenz_curve ---------------------------------------------------------------------------------

@pytest.mark.parametrize("k", [1, 3, 50])
def test_curve_matches_window_and_reference_with_groups_and_cuts_across_batches(grouped, batch, k):
    con, df = grouped
    sql = f"SELECT a, b, lorenz_curve(x, {k}, w) AS c, lorenz_curve(x, {k}) AS u FROM t GROUP BY a, b ORDER BY a, b"
    assert "stream" in streamed_kinds(sql, con)
    got = uneven.query(sql, con, ordered="stream")
    want = uneven.query(sql, con, ordered="window")
    assert got.a.equals(want.a) and got.b.equals(want.b)
    assert_same_curves(got.c, want.c)
    assert_same_curves(got.u, want.u)
    kept = df[df.x.notna() & df.w.notna()]
    for i, row in got.iterrows():
        keys = kept[(kept.a.isna() if pd.isna(row.a) else kept.a == row.a) & (kept.b == row.b)]
        rows = keys[keys.w > 0]
        ref = R.lorenz_curve(rows.x.to_numpy(), k, rows.w.to_numpy())  # numpy reference
        assert_same_curves([got.c[i]], [[{"p": p, "lorenz": v} for p, v in ref]])


def test_curve_of_1000_segments_matches_the_window_plan(grouped, monkeypatch):
    monkeypatch.setattr(stream_engine, "BATCH_ROWS", 97)  # cuts every few rows, most batches cross many
    con, _ = grouped
    sql = "SELECT a, lorenz_curve(x, 1000, w) AS c FROM t GROUP BY a ORDER BY a"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_curves(got.c, uneven.query(sql, con, ordered="window").c)
    assert all(len(c) == 1001 for c in got.c)


@pytest.mark.parametrize("name", sorted(DATA))
def test_curve_matches_exact_fractions_on_hard_data(name, batch):
    x, w = DATA[name]
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    got = uneven.query("SELECT lorenz_curve(x, 20, w) AS c FROM t", con, ordered="stream").c[0]
    assert len(got) == 21
    for j, pt in enumerate(got):
        assert pt["p"] == j / 20
        want = exact_lorenz(x, w, Fraction(j, 20))  # exact rational L(p) (tests/test_numerics.py)
        assert (pt["lorenz"] == 0 if want == 0 else rel(pt["lorenz"], want) <= 1e-12), (j, pt, float(want))


def test_ties_across_a_cut_zero_weights_and_exact_cut_points(batch):
    # integer weights put C_i exactly on cuts p·W, runs of tied values straddle cuts and batches;
    # rows of weight 0 change nothing (the measure contract); checked with exact fractions
    x = np.repeat([1.0, 2.0, 2.5, 4.0, 10.0], [9, 11, 7, 5, 8])
    w = np.tile([1.0, 2.0, 0.0, 3.0], 10)
    con = duckdb.connect()
    perm = np.random.default_rng(3).permutation(len(x))
    con.register("t", pd.DataFrame({"g": (perm % 2)[perm], "x": x[perm], "w": w[perm]}))
    sql = "SELECT g, lorenz_curve(x, 8, w) AS c FROM t GROUP BY g ORDER BY g"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_curves(got.c, uneven.query(sql, con, ordered="window").c)
    df = con.execute("SELECT * FROM t").df()
    for i, g in enumerate(got.g):
        part = df[(df.g == g) & (df.w > 0)]
        for j, pt in enumerate(got.c[i]):
            want = exact_lorenz(part.x.to_numpy(), part.w.to_numpy(), Fraction(j, 8))
            assert (pt["lorenz"] == 0 if want == 0 else rel(pt["lorenz"], want) <= 1e-12)


def test_empty_groups_zero_total_and_one_row_groups(batch):
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 2, 2, 3, 4, 4, 5], "x": [1.0, 3.0, None, None, 5.0, -2.0, 1.0, 7.0],
                                    "w": [1.0, 1.0, 1.0, 2.0, 0.0, 1.0, 1.0, 2.0]}))
    sql = "SELECT g, lorenz_curve(x, 4, w) AS c FROM t GROUP BY g ORDER BY g"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_curves(got.c, uneven.query(sql, con, ordered="window").c)
    c = curves(got.c)
    assert c[1] is None and c[2] is None and c[3] is None  # no valid row (2, 3), T ≤ 0 (4): NULL
    # two rows 1 and 3 of weight 1: L(1/4) = 0.5·1/4, L(1/2) = 1/4, L(3/4) = (1 + 0.5·3)/4 (by hand)
    assert c[0] == [(0.0, 0.0), (0.25, 0.125), (0.5, 0.25), (0.75, 0.625), (1.0, 1.0)]
    assert c[4] == [(0.0, 0.0), (0.25, 0.25), (0.5, 0.5), (0.75, 0.75), (1.0, 1.0)]  # one row: the diagonal
    none = uneven.query("SELECT lorenz_curve(x, 4, w) AS c FROM t WHERE x > 100", con, ordered="stream")
    assert len(none) == 1 and curves(none.c) == [None]  # no group keys, no row: one NULL, as the window plan


def test_curve_beside_other_measures_having_and_expressions(grouped, batch):
    con, _ = grouped
    sql = ("SELECT a, lorenz_curve(x, 60, w) AS c, gini(x, w) AS gi, len(lorenz_curve(x, 60, w)) AS n "
           "FROM t WHERE b = 'n' GROUP BY a HAVING gini(x, w) > 0.1 ORDER BY a")
    got = uneven.query(sql, con, ordered="stream")
    want = uneven.query(sql, con, ordered="window")
    assert (got.n == 61).all() and got.a.equals(want.a)
    assert_same_curves(got.c, want.c)
    assert_same_frames(got[["a", "gi"]], want[["a", "gi"]])


def test_auto_streams_a_large_curve_and_refines_a_small_one(grouped):
    con, _ = grouped
    assert streamed_kinds("SELECT a, lorenz_curve(x, 50, w) FROM t GROUP BY a", con, "auto") == ["stream"]
    assert streamed_kinds("SELECT a, lorenz_curve(x, 10, w) FROM t GROUP BY a", con, "auto") == ["refine"]


def test_the_reports_lorenz_pass_streams_on_duckdb(grouped):
    # the report's per-group query (report/data.py) as the report compiles it (report/query.run_tree):
    # its ordered pass (the curve beside theil, which would fuse onto the window plan) streams
    from uneven.compiler.emit import to_sql
    from uneven.report.data import COLUMNS, measures_select
    from uneven.report.query import make_spec, run_tree

    con, _ = grouped
    spec = make_spec(con, "t", "x", "w", "a")
    tree = measures_select(spec, list(COLUMNS), 50)
    _, ctx = compile_with_context(to_sql(tree), CompileOptions(pretty=False, stream=True),
                                  DuckDBSchema(con, types=False, ties=False))
    curves_streamed = [c for job in ctx.stream_jobs for c, kernel, _ in job.columns if getattr(kernel, "curve", False)]
    assert len(curves_streamed) == 1
    got = run_tree(con, tree).sort_values("a", na_position="last", ignore_index=True)
    want = uneven.query(to_sql(tree), con, ordered="window").sort_values("a", na_position="last", ignore_index=True)
    assert_same_curves(got["_uv_curve"], want["_uv_curve"])
    assert_same_frames(got.drop(columns="_uv_curve"), want.drop(columns="_uv_curve"), 1e-11)


# ---- the Gini's linearized standard error ---------------------------------------------------------

def exact_gini_variance(x, w) -> Fraction | None:
    """n/(n−1)·Σ_k (u_k − ū)², u_k = w_k·z_k, z_k = [2C_k x_k − 2S_k + T − W x_k − G(T + W x_k)]/(W T)
    (Langel & Tillé 2013, from memory), in exact fractions over the rows sorted by x."""
    pairs = sorted((Fraction(float(a)), Fraction(float(b))) for a, b in zip(x, w) if b != 0)
    W = sum(b for _, b in pairs)
    T = sum(a * b for a, b in pairs)
    if T <= 0 or len(pairs) < 2:
        return None
    C = S = acc = Fraction(0)
    for a, b in pairs:
        C += b
        acc += b * a * (2 * C - b - W)
    G = acc / (W * T)
    C = S = Fraction(0)
    u = []
    for a, b in pairs:
        C += b
        S += b * a
        u.append(b * (2 * C * a - 2 * S + T - W * a - G * (T + W * a)) / (W * T))
    # ties: C_k x_k − S_k is the same whatever the order of tied values (Σ_{j≤k} w_j (x_k − x_j))
    mean = sum(u) / len(u)
    return Fraction(len(u), len(u) - 1) * sum((v - mean) ** 2 for v in u)


@pytest.mark.parametrize("name", ["pareto", "pareto-unweighted", "offset", "span"])
def test_gini_se_matches_exact_fractions(name, batch):
    x, w = DATA[name]
    x, w = x[:400], w[:400]  # exact fractions over 400 rows
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    got = uneven.query("SELECT gini_se(x, w) AS se FROM t", con, ordered="stream").se[0]
    v = exact_gini_variance(x, w)
    # values from 1e-9 to 1e12 in batches of 7 rows: 58 merges of the centred cross sums, whose
    # quadratic form cancels; measured 2.2e-12 there (the window plan: 4.6e-12), 4e-15 in one batch
    tol = 5e-12 if (name, batch) == ("span", 7) else 1e-12
    assert v is not None and rel(got * got, v) <= tol


def test_gini_se_of_a_small_group_after_a_large_one_keeps_its_digits(batch):
    # a group of values near 1e12 then one of values near 1 in the same batch: the running S_d of the
    # second must not carry the first's rounding (engine/streamsums.segmented_prefix)
    rng = np.random.default_rng(5)
    big, small = 1e12 * rng.lognormal(0, 1, 60), rng.lognormal(0, 1, 40)
    w = rng.integers(1, 5, 100).astype(float)
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1] * 60 + [2] * 40, "x": np.concatenate([big, small]), "w": w}))
    got = uneven.query("SELECT g, gini_se(x, w) AS se FROM t GROUP BY g ORDER BY g", con, ordered="stream")
    for i, part in enumerate((slice(0, 60), slice(60, 100))):
        v = exact_gini_variance(np.concatenate([big, small])[part], w[part])
        assert v is not None and rel(got.se[i] ** 2, v) <= 1e-12


SE_SQL = ("SELECT a, b, gini(x, w) AS g, gini_se(x, w) AS se, gini_ci_lo(x, w) AS lo, "
          "gini_ci_hi(x, w, level := 0.9) AS hi, gini_se(x) AS seu, lorenz(x, 0.4, w) AS l40 "
          "FROM t GROUP BY a, b ORDER BY a, b")


def test_gini_se_and_intervals_match_window_and_reference(grouped, batch):
    con, df = grouped
    assert streamed_kinds(SE_SQL, con) == ["stream", "stream"]  # weighted, and gini_se(x) unweighted
    got = uneven.query(SE_SQL, con, ordered="stream")
    assert_same_frames(got, uneven.query(SE_SQL, con, ordered="window"))
    kept = df[df.x.notna() & df.w.notna()]
    z90 = 1.6448536269514722  # the normal quantile of 0.95 (common practice)
    for _, row in got.iterrows():
        part = kept[(kept.a.isna() if pd.isna(row.a) else kept.a == row.a) & (kept.b == row.b)]
        xs, ws = part.x.to_numpy(), part.w.to_numpy()
        assert close(row.se, RSE.se("gini", xs, (), ws))  # numpy reference (uneven.reference.se)
        every = df[df.x.notna() & (df.a.isna() if pd.isna(row.a) else df.a == row.a) & (df.b == row.b)]
        assert close(row.seu, RSE.se("gini", every.x.to_numpy(), (), None))  # unweighted: NULL weights count
        assert close(row.lo, RSE.ci("gini", xs, (), ws, 0.95)[0])
        assert close(row.hi, row.g + z90 * row.se, 1e-12)


def test_gini_se_edge_groups(batch):
    # one row (NULL: no variance), equal values (exactly 0), T ≤ 0 (NULL), no valid row (NULL),
    # zero weights dropped before n is counted
    con = duckdb.connect()
    con.register("t", pd.DataFrame({
        "g": [1, 2, 2, 2, 3, 3, 4, 4, 5, 5, 5],
        "x": [4.0, 2.0, 2.0, 2.0, -1.0, 0.5, None, 1.0, 1.0, 2.0, 9.0],
        "w": [1.0, 1.0, 3.0, 0.5, 1.0, 1.0, 1.0, 0.0, 1.0, 1.0, 0.0]}))
    sql = "SELECT g, gini_se(x, w) AS se, gini_ci_lo(x, w) AS lo FROM t GROUP BY g ORDER BY g"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.se.isna().tolist() == [True, False, True, True, False]
    assert got.se[1] == 0.0
    v = exact_gini_variance([1.0, 2.0], [1.0, 1.0])  # group 5 without its zero-weight row
    assert v is not None and rel(got.se[4] ** 2, v) <= 1e-12


def test_linearized_pass_streams_under_stream_and_auto(grouped):
    con, _ = grouped
    sql = "SELECT a, gini(x, w), gini_se(x, w) FROM t GROUP BY a"
    for ordered in ("stream", "auto"):
        found = uneven.explain(sql, con, ordered=ordered)
        assert [p["kind"] for p in found.passes] == ["stream"], found.passes
        assert "stream plan" in found.passes[0]["reason"]
    assert streamed_kinds(sql, con, "window") == ["linearized"]
    # with a survey design too (tests/test_stream_design.py)
    designed = uneven.explain("SELECT a, gini_se(x, w, strata := b) FROM t GROUP BY a", con, ordered="stream")
    assert designed.passes[0]["kind"] == "stream"
    # compile() never streams: the same portable SQL whatever the option
    assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")


def test_curve_of_many_small_groups_matches_the_window_plan(batch):
    # 3000 groups of 1 to 6 rows: each row crosses several of the 50 cuts, many groups per batch
    rng = np.random.default_rng(9)
    sizes = rng.integers(1, 7, 3000)
    g = np.repeat(np.arange(3000), sizes)
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": g, "x": rng.lognormal(0, 1, len(g)).round(2),
                                    "w": rng.integers(1, 4, len(g)).astype(float)}))
    sql = "SELECT g, lorenz_curve(x, 50, w) AS c FROM t GROUP BY g ORDER BY g"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_curves(got.c, uneven.query(sql, con, ordered="window").c)
    assert len(got) == 3000


def test_a_group_whose_running_weight_overflows_leaves_the_next_group_alone(batch):
    # group 1's weights sum past the largest double: its results are NULL, as in the window plan;
    # group 2 in the same batch keeps its values (its running weight restarts: streamsums.segmented_prefix)
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 1, 2, 2], "x": [1.0, 2.0, 3.0, 1.0, 2.0],
                                    "w": [1e308, 1e308, 1e308, 1.0, 3.0]}))
    sql = "SELECT g, lorenz_curve(x, 4, w) AS c, gini(x, w) AS gi, lorenz(x, 0.5, w) AS l FROM t GROUP BY g ORDER BY g"
    got = uneven.query(sql, con, ordered="stream")
    want = uneven.query(sql, con, ordered="window")
    assert_same_curves(got.c, want.c)
    assert_same_frames(got[["g", "gi", "l"]], want[["g", "gi", "l"]])
    assert curves(got.c)[0] is None and math.isnan(got.gi[0])  # Σ w·x is not a finite number: NULL
    # two rows 1 and 2 of weights 1 and 3: G = 1·3·|1 − 2| / (4²·7/4) = 3/28 (by hand)
    assert got.gi[1] == pytest.approx(3 / 28, rel=1e-15)
