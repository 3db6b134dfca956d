"""The stream plan (docs/plans.md): DuckDB sorts an ordered pass's rows, numpy reduces the batches.

Checked against outside sources: exact rational arithmetic (Python ``fractions``, the references of
tests/test_numerics.py, written from the definitions in DESIGN.md), the numpy reference
(uneven.reference, itself tested against brute force and closed forms in tests/test_reference.py)
on the rows DuckDB selects, and the window plan on the same query (same outcome: values to 1e-12,
NULLs, errors). Tiny batch sizes make batches split groups and runs of tied values.
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
from test_golden import GOLDEN, ROOT, read_fixture
from test_numerics import DATA, exact_gini, exact_lorenz, exact_quantile, rel
from uneven import reference as R
from uneven.compiler.context import CompileOptions
from uneven.compiler.pipeline import compile_with_context

ALL = ("gini(x, w) AS gini, gini_corrected(x, w) AS gini_c, lorenz(x, 0.3, w) AS lor, "
       "top_share(x, 0.1, w) AS top, bottom_share(x, 0.5, w) AS bot, palma(x, w) AS palma, "
       "s80s20(x, w) AS s8020, quantile_w(x, 0.37, w) AS q37, percentile_ratio(x, 0.9, 0.1, w) AS pr, "
       "generalized_lorenz(x, 0.9, w) AS gl")
NAMES = ["gini", "gini_c", "lor", "top", "bot", "palma", "s8020", "q37", "pr", "gl"]


def reference_row(x, w) -> list:
    """The numpy reference of every measure in ALL, on one group's rows (uneven.reference)."""
    return [R.gini(x, w), R.gini_corrected(x, w), R.lorenz(x, 0.3, w), R.top_share(x, 0.1, w),
            R.bottom_share(x, 0.5, w), R.palma(x, w), R.s80s20(x, w), R.quantile_w(x, 0.37, w),
            R.percentile_ratio(x, 0.9, 0.1, w), R.generalized_lorenz(x, 0.9, w)]


@pytest.fixture(params=[False, True], ids=["serial", "reader_thread"])
def tiny_batches(monkeypatch, request):
    # batches of 7 rows, read in the caller's thread and on the reader thread (engine/prefetch.py)
    monkeypatch.setattr(stream_engine, "BATCH_ROWS", 7)
    monkeypatch.setattr(stream_engine, "PREFETCH", request.param)


def close(a, b, tol=1e-12) -> bool:
    if a is None or (isinstance(a, float) and math.isnan(a)):
        return b is None or (isinstance(b, float) and math.isnan(b))
    if b is None or (isinstance(b, float) and math.isnan(b)):
        return False
    return abs(a - b) <= tol * max(abs(b), 1e-300)


def assert_same_frames(got: pd.DataFrame, want: pd.DataFrame, tol=1e-12) -> None:
    assert list(got.columns) == list(want.columns) and len(got) == len(want)
    for g, w in zip(got.itertuples(index=False), want.itertuples(index=False)):
        for a, b in zip(g, w):
            if isinstance(b, float) or b is None:
                assert close(None if pd.isna(a) else a, None if pd.isna(b) else b, tol), (g, w)
            else:
                assert a == b, (g, w)


# ---- exact fractions ------------------------------------------------------------------------

@pytest.mark.parametrize("batch", [None, 97])
@pytest.mark.parametrize("name", sorted(DATA))
def test_streamed_measures_match_exact_fractions_to_1e12(name, batch, monkeypatch):
    if batch:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", batch)
    x, w = DATA[name]
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    got = uneven.query("SELECT gini(x, w), lorenz(x, 0.3, w), top_share(x, 0.1, w), bottom_share(x, 0.5, w), "
                       "quantile_w(x, 0.37, w), generalized_lorenz(x, 0.9, w), gini_corrected(x, w) FROM t",
                       con, ordered="stream").iloc[0].tolist()
    T_over_W = sum(Fraction(float(a)) * Fraction(float(b)) for a, b in zip(x, w)) / sum(Fraction(float(b)) for b in w)
    n = len(x)
    want = [exact_gini(x, w), exact_lorenz(x, w, 0.3), 1 - exact_lorenz(x, w, 0.9), exact_lorenz(x, w, 0.5),
            exact_quantile(x, w, 0.37), T_over_W * exact_lorenz(x, w, 0.9), exact_gini(x, w) * Fraction(n, n - 1)]
    for label, g, e in zip(("gini", "lorenz", "top_share", "bottom_share", "quantile", "gen_lorenz", "gini_c"),
                           got, want):
        assert rel(g, e) <= 1e-12, f"{name} {label}: {g} vs exact {float(e)}"


@pytest.mark.parametrize("batch", [None, 97, 7])
@pytest.mark.parametrize("name", sorted(DATA))
def test_streamed_wolfson_matches_exact_fractions(name, batch, monkeypatch):
    # 2·(μ/M)·(1 − 2·L(0.5) − G) (Wolfson's polarization index, from memory), each part in exact
    # fractions from the definitions in DESIGN.md; NULL unless T > 0 and the median M > 0. The error
    # is bounded against the size of the terms, since 1 − 2·L(0.5) − G may cancel
    if batch:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", batch)
    x, w = DATA[name]
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    sql = "SELECT wolfson(x, w) AS v FROM t"
    assert "stream plan" in str(uneven.explain(sql, con))
    got = uneven.query(sql, con).v[0]
    W = sum(Fraction(float(b)) for b in w)
    T = sum(Fraction(float(a)) * Fraction(float(b)) for a, b in zip(x, w))
    M = exact_quantile(x, w, 0.5)
    if T <= 0 or M <= 0:
        assert pd.isna(got)
        return
    scale = 2 * abs(T / W / M)
    want = scale * (1 - 2 * exact_lorenz(x, w, 0.5) - exact_gini(x, w))
    size = scale * (1 + 2 * abs(exact_lorenz(x, w, 0.5)) + abs(exact_gini(x, w)))
    assert abs(Fraction(float(got)) - want) <= Fraction(1, 10**12) * size, f"{name}: {got} vs {float(want)}"


def test_ties_split_across_batches_match_exact_fractions(tiny_batches):
    # 5 distinct values in runs of 3 to 40 rows: batches of 7 rows cut every run and the groups
    rng = np.random.default_rng(11)
    values = np.array([0.5, 3.0, 3.0000001, 7.25, 1e6])
    x = np.repeat(values, [40, 30, 15, 10, 3])
    w = rng.integers(1, 4, len(x)).astype(float)
    g = np.repeat([1, 2], [50, len(x) - 50])
    perm = rng.permutation(len(x))
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": g[perm], "x": x[perm], "w": w[perm]}))
    got = uneven.query("SELECT g, gini(x, w), lorenz(x, 0.55, w), quantile_w(x, 0.86, w) FROM t GROUP BY g "
                       "ORDER BY g", con, ordered="stream")
    for i, key in enumerate((1, 2)):
        xs, ws = x[g == key], w[g == key]
        assert rel(got.iloc[i, 1], exact_gini(xs, ws)) <= 1e-12
        assert rel(got.iloc[i, 2], exact_lorenz(xs, ws, 0.55)) <= 1e-12
        assert got.iloc[i, 3] == float(exact_quantile(xs, ws, 0.86))


# ---- the numpy reference and the window plan, per group ------------------------------------------

@pytest.fixture()
def grouped():
    rng = np.random.default_rng(7)
    n = 3000
    df = pd.DataFrame({"a": rng.integers(0, 4, n).astype(float), "b": rng.choice(["n", "s", "e"], n),
                       "x": rng.lognormal(2, 1, n).round(1), "w": rng.integers(0, 5, n).astype(float)})
    df.loc[rng.random(n) < 0.05, "a"] = None  # NULL keys: a group of their own
    df.loc[rng.random(n) < 0.03, "b"] = None
    df.loc[rng.random(n) < 0.04, "x"] = None  # skipped rows
    df.loc[rng.random(n) < 0.03, "w"] = None
    con = duckdb.connect()
    con.register("t", df)
    return con, df


@pytest.mark.parametrize("batch", [5, 64, None])
def test_multi_column_and_null_keys_match_reference_and_window(grouped, batch, monkeypatch):
    if batch:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", batch)
    con, df = grouped
    sql = f"SELECT a, b, {ALL} FROM t GROUP BY a, b ORDER BY a, b"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    valid = df.dropna(subset=["x", "w"])
    valid = valid[valid.w > 0]
    for row in got.itertuples(index=False):
        sel = valid[(valid.a.isna() if pd.isna(row.a) else valid.a == row.a)
                    & (valid.b.isna() if pd.isna(row.b) else valid.b == row.b)]
        want = reference_row(sel.x.to_numpy(), sel.w.to_numpy())
        for name, value in zip(NAMES, want):
            assert close(getattr(row, name), value, 1e-10), (name, row, value)


def test_unweighted_and_expressions_having_filter_and_ctes(grouped, tiny_batches):
    con, _ = grouped
    sql = ("WITH s AS (SELECT * FROM t WHERE x < 40) "
           "SELECT b, round(gini(x) - gini(x) FILTER (WHERE a = 1), 9) AS d, 100 * top_share(x, 0.2) AS t20, "
           "percentile_ratio(x, 0.9, 0.5) AS pr, count(*) AS n "
           "FROM s GROUP BY b HAVING gini(x) > 0.1 ORDER BY gini(x) DESC")
    got = uneven.query(sql, con, ordered="stream")
    assert len(got) >= 2
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes].count("stream") == 2


def test_zero_weights_change_nothing(grouped, tiny_batches):
    con, df = grouped
    sql = f"SELECT a, {ALL} FROM t GROUP BY a ORDER BY a"
    kept = duckdb.connect()
    kept.register("t", df[df.w != 0])
    assert (df.w == 0).sum() > 100
    assert_same_frames(uneven.query(sql, con, ordered="stream"), uneven.query(sql, kept, ordered="stream"))


def test_empty_groups_are_null_as_in_the_window_plan(tiny_batches):
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 2, 2, 3], "x": [1.0, 2.0, None, None, 5.0],
                                    "w": [1.0, 1.0, 1.0, 2.0, 0.0]}))
    sql = f"SELECT g, {ALL} FROM t GROUP BY g ORDER BY g"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.g.tolist() == [1, 2, 3] and got.iloc[1:, 1:].isna().all().all()  # no valid row: NULL
    assert got.gini[0] == pytest.approx(1 / 6, rel=1e-15)  # two values 1 and 2: |1−2|/(2·2²·1.5)·2 (by hand)
    # no group keys and no valid row at all: one row of NULLs, as the window plan's aggregate gives
    one = uneven.query("SELECT count(*) AS n, gini(x, w) AS g FROM t WHERE x > 100", con, ordered="stream")
    assert one.n.tolist() == [0] and one.g.isna().all()


def test_negative_quantile_and_zero_total(tiny_batches):
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 1, 2, 2], "x": [-3.0, 1.0, 2.0, -1.0, 1.0]}))
    sql = ("SELECT g, gini(x) AS gi, quantile_w(x, 0) AS q0, quantile_w(x, 1) AS q1, lorenz(x, 1) AS l1, "
           "percentile_ratio(x, 1, 0) AS pr FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.gi.isna()[0] and got.gi.isna()[1]  # T ≤ 0: NULL (DESIGN.md, domains)
    assert got.q0.tolist() == [-3.0, -1.0] and got.q1.tolist() == [2.0, 1.0]


# ---- the input policy and strict mode: the window plan's outcomes ----------------------------------

@pytest.mark.parametrize("rows, error, words", [
    ("(1, 1.0, 1.0), (2, 2.0, -1.0)", uneven.InputDataError, "negative weight in the weight argument w"),
    ("(1, 1.0, 1.0), (2, 'nan'::DOUBLE, 1.0)", uneven.InputDataError, "NaN or infinite value"),
    ("(1, 1.0, 1.0), (2, 2.0, 'inf'::DOUBLE)", uneven.InputDataError, "NaN or infinite weight"),
])
def test_input_policy_errors_name_the_group(rows, error, words):
    con = duckdb.connect()
    con.execute(f"CREATE TABLE t AS SELECT * FROM (VALUES {rows}) v(g, x, w)")
    for plan in ("stream", "window"):
        with pytest.raises(error) as info:
            uneven.query("SELECT g, gini(x, w) FROM t GROUP BY g", con, ordered=plan)
        assert words in str(info.value) and "the group g=2" in str(info.value)


def test_strict_names_the_undefined_group():
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 2], "x": [1.0, 2.0, -1.0], "w": [1.0, 1.0, 1.0]}))
    with pytest.raises(uneven.UndefinedResultError, match="the group g=2"):
        uneven.query("SELECT g, gini(x, w) FROM t GROUP BY g", con, ordered="stream", strict=True)


# ---- planning: when the stream runs, and when it falls back ------------------------------------

def test_compile_always_emits_the_portable_window_sql():
    sql = "SELECT g, gini(x, w), top_share(x, 0.1, w) FROM t GROUP BY g"
    assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")
    assert "_uv_str" not in uneven.compile(sql, ordered="stream")


@pytest.mark.parametrize("sql, reason", [
    ("SELECT a, gini(x, w), below_line_share_se(x, 0.6, w) FROM t GROUP BY a", "no stream kernel for below_line_share_se"),
    ("SELECT a, gini_se(x, w), median_gap_se(x, 0.6, w) FROM t GROUP BY a", "no stream kernel for median_gap_se"),
    ("SELECT a, gini_se(x, w, psu := b), below_line_share_se(x, 0.6, w, psu := b) FROM t GROUP BY a",
     "no stream kernel for below_line_share_se with a survey design"),
    ("SELECT * FROM (SELECT a, gini(x, w) AS v FROM t GROUP BY a) s", "in a subquery or CTE"),
    ("SELECT a, gini(x, w) FROM t USING SAMPLE 50 PERCENT (bernoulli, 3) GROUP BY a", "read once"),
])
def test_fallback_to_the_window_plan_says_why(grouped, sql, reason):
    con, _ = grouped
    found = uneven.explain(sql, con, ordered="stream")
    ordered = [p for p in found.passes if p["kind"] in ("ordered", "linearized")]
    assert ordered and reason in ordered[0]["reason"], found.passes
    uneven.query(sql, con, ordered="stream")  # and it runs


def test_auto_streams_a_pass_that_needs_the_full_order_weighted_or_not(grouped):
    con, _ = grouped
    kinds = lambda sql: [p["kind"] for p in uneven.explain(sql, con).passes]  # noqa: E731
    assert kinds("SELECT a, gini(x, w) FROM t GROUP BY a") == ["stream"]
    assert kinds("SELECT a, top_share(x, 0.1, w) FROM t GROUP BY a") == ["refine"]
    assert kinds("SELECT a, gini(x) FROM t GROUP BY a") == ["stream"]
    assert kinds("SELECT a, gini(x), cv(x) FROM t GROUP BY a") == ["ordered"]  # cv fuses onto the window plan
    found = uneven.explain("SELECT a, gini(x, w) FROM t GROUP BY a", con)
    assert "bench/README.md" in found.passes[0]["reason"] and found.passes[0]["ctes"] == ["_uv_str_1"]


def test_results_are_unregistered_afterwards(grouped):
    con, _ = grouped
    uneven.query("SELECT a, gini(x, w) FROM t GROUP BY a", con, ordered="stream")
    names = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables() UNION ALL "
                                       "SELECT view_name FROM duckdb_views()").fetchall()}
    assert not any(n.startswith("_uv_") for n in names)
    with pytest.raises(duckdb.Error):
        con.execute("SELECT * FROM _uv_str_1")


@pytest.mark.parametrize("key", ["k", "l", "s"])
def test_nan_signed_zero_list_and_struct_keys_group_as_duckdb_groups(tiny_batches, key):
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT CASE WHEN i % 4 = 0 THEN 'nan'::DOUBLE WHEN i % 4 = 1 THEN -0.0 "
                "WHEN i % 4 = 2 THEN 0.0 END AS k, [i % 2] AS l, {'a': i % 3} AS s, i::DOUBLE AS x "
                "FROM range(1, 40) r(i)")
    sql = f"SELECT {key} AS key, gini(x) AS g, quantile_w(x, 0.5) AS q FROM t GROUP BY {key} ORDER BY {key}"
    got, want = (uneven.query(sql, con, ordered=plan) for plan in ("stream", "window"))
    assert len(got) == len(want) == {"k": 3, "l": 2, "s": 3}[key]
    for g, w in zip(got.itertuples(index=False), want.itertuples(index=False)):
        assert repr(g.key) == repr(w.key) and close(g.g, w.g) and g.q == w.q


@pytest.mark.parametrize("setup, column", [
    ("CREATE TABLE t (k VARCHAR COLLATE NOCASE, x DOUBLE, w DOUBLE)", "k"),  # the column's own collation
    ("SET default_collation = 'nocase'; CREATE TABLE t (k VARCHAR, x DOUBLE, w DOUBLE)", "k"),
    ("SET default_collation = 'noaccent'; CREATE TABLE t (k VARCHAR, x DOUBLE, w DOUBLE)", "k"),
    ("CREATE TABLE t (k VARCHAR COLLATE NOCASE, x DOUBLE, w DOUBLE)", "k || ''"),  # kept through an expression
])
def test_text_keys_under_a_collation_group_as_group_by_does(setup, column, tiny_batches):
    # GROUP BY merges 'Ab'/'AB' (and 'é'/'e' without accents); the stream compares bytes, so the planner
    # keeps the window plan. The merged groups' rows are the reference (numpy, uneven.reference)
    con = duckdb.connect()
    con.execute(setup)
    accented = "noaccent" in setup
    rows = [("Ab", 1.0, 1.0), ("Ab", 2.0, 1.0), ("AB" if not accented else "Ab", 3.0, 1.0),
            ("AB" if not accented else "Ab", 4.0, 2.0),
            ("\u00e9" if accented else "cd", 5.0, 1.0), ("e" if accented else "CD", 9.0, 3.0)]
    con.executemany("INSERT INTO t VALUES (?, ?, ?)", rows)
    sql = f"SELECT gini(x, w) AS g, quantile_w(x, 0.5, w) AS q FROM t GROUP BY {column} ORDER BY g"
    got = uneven.query(sql, con)
    want = sorted([R.gini(np.array([1.0, 2, 3, 4]), np.array([1.0, 1, 1, 2])),
                   R.gini(np.array([5.0, 9]), np.array([1.0, 3]))])
    assert len(got) == 2 and all(close(g, w) for g, w in zip(got.g, want))
    assert "collation" in str(uneven.explain(sql, con))
    assert uneven.query(sql, con, ordered="stream").g.tolist() == got.g.tolist()


def test_text_keys_without_a_collation_still_stream():
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT chr(CAST(65 + i % 3 AS INTEGER)) AS k, i::DOUBLE AS x FROM range(1, 30) r(i)")
    assert "stream plan" in str(uneven.explain("SELECT k, gini(x) FROM t GROUP BY k", con))


# ---- every golden fixture with an ordered pass: stream equals window ---------------------------

STREAMED = []
for _path in GOLDEN:
    _query, _ = read_fixture(_path)
    _, _ctx = compile_with_context(_query, CompileOptions(stream=True, ordered="stream"))
    if _ctx.stream_jobs:
        STREAMED.append(_path)


def test_some_fixtures_are_streamed():
    assert len(STREAMED) >= 5


@pytest.mark.parametrize("path", STREAMED, ids=[p.stem for p in STREAMED])
def test_golden_fixture_streamed_equals_window(path, monkeypatch):
    import os
    monkeypatch.setattr(stream_engine, "BATCH_ROWS", 50)
    query, _ = read_fixture(path)
    con = duckdb.connect()
    before = os.getcwd()
    os.chdir(ROOT)
    try:
        con.execute("CREATE TABLE survey AS SELECT * FROM 'fixtures/data/survey.parquet'")
        con.execute("CREATE TABLE sellers AS SELECT * FROM 'fixtures/data/sellers.parquet'")
        compiled, ctx = compile_with_context(query, CompileOptions(stream=True, ordered="stream", pretty=False))
        with stream_engine.streamed(con, ctx.stream_jobs):
            got = con.execute(compiled).fetchall()
        want = con.execute(uneven.compile(query, ordered="window")).fetchall()
    finally:
        os.chdir(before)
    if "order by" not in query.lower():
        got, want = sorted(got, key=repr), sorted(want, key=repr)
    assert len(got) == len(want) > 0
    for g, w in zip(got, want):
        for a, b in zip(g, w):
            if isinstance(b, float):
                assert close(a, b), f"{path.name}: stream {g} vs window {w}"
            else:
                assert a == b, f"{path.name}: stream {g} vs window {w}"


# ---- user kernels: a user's own order-based measure through the same stream -------------------------

def _middle_start(W, T, n, lo, hi):
    return {"W": W, "T": T, "held": 0.0}


def _middle_update(state, x, w, c, lo, hi):
    before = c - w  # the running weight before each row
    take = np.clip(hi * state["W"] - before, 0.0, w) - np.clip(lo * state["W"] - before, 0.0, w)
    return {**state, "held": state["held"] + float(np.dot(x, take))}


def _middle_finish(state, lo, hi):
    return state["held"] / state["T"] if state["T"] > 0 else None


def middle_share_reference(x, lo, hi, w=None):
    """Independent of the kernel: the Lorenz curve's points (C_i/W, S_i/T) from a sort and
    np.cumsum, read at lo and hi by linear interpolation (np.interp); DESIGN.md's definition."""
    x = np.asarray(x, float)
    w = np.ones_like(x) if w is None else np.asarray(w, float)
    order = np.argsort(x, kind="stable")
    xs, ws = x[order], w[order]
    px = np.concatenate(([0.0], np.cumsum(ws) / ws.sum()))
    py = np.concatenate(([0.0], np.cumsum(ws * xs) / (ws * xs).sum()))
    return float(np.interp(hi, px, py) - np.interp(lo, px, py))


@pytest.fixture()
def middle_share():
    measure = uneven.define_measure(
        "middle_share", params=["lo", "hi"], result="(lorenz(hi) - lorenz(lo))",
        reference=middle_share_reference,
        kernel=uneven.ChunkKernel(_middle_start, _middle_update, _middle_finish))
    yield measure
    uneven.remove_measure("middle_share")


@pytest.mark.parametrize("batch", [5, None])
def test_user_kernel_runs_through_the_stream(grouped, middle_share, batch, monkeypatch):
    if batch:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", batch)
    con, df = grouped
    sql = "SELECT a, middle_share(x, 0.5, 0.9, w) AS m, gini(x, w) AS g FROM t GROUP BY a ORDER BY a"
    found = uneven.explain(sql, con, ordered="stream")
    assert [p["kind"] for p in found.passes] == ["stream"]
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    valid = df.dropna(subset=["x", "w"])
    valid = valid[valid.w > 0]
    for row in got.itertuples(index=False):
        sel = valid[valid.a.isna()] if pd.isna(row.a) else valid[valid.a == row.a]
        assert close(row.m, middle_share_reference(sel.x.to_numpy(), 0.5, 0.9, sel.w.to_numpy()), 1e-12)


def test_user_kernel_only_on_the_ordered_pass():
    with pytest.raises(uneven.UnevenError, match="kernel must be a ChunkKernel"):
        uneven.define_measure("bad_kernel", result="sum(x)", pass_="moment", reference=lambda x, w=None: 0.0,
                              kernel=uneven.ChunkKernel(_middle_start, _middle_update, _middle_finish))
    assert uneven.catalog.lookup("bad_kernel") is None


def test_values_near_the_double_limit_as_the_window_plan(tiny_batches):
    # T fits but the Gini's products overflow: the scaled form (catalog/scaling.py); T overflows: NULL
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 1, 2, 2, 2], "x": [1e308, 1.0, 2.0, 1e308, 1e308, 2.0]}))
    sql = "SELECT g, gini(x) AS gi, top_share(x, 0.2) AS ts, quantile_w(x, 0.5) AS q FROM t GROUP BY g ORDER BY g"
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert close(got.gi[0], R.gini(np.array([1e308, 1.0, 2.0])), 1e-12)  # numpy reference
    assert got.gi.isna()[1] and got.ts.isna()[1] and got.q[1] == 1e308


# ---- the plain prefix sum of integer weights, and its fallback --------------------------------------

def _exact_prefix(w, start=0) -> list[Fraction]:
    """Running sums in exact rational arithmetic (Python fractions): the outside check."""
    out, run = [], Fraction(start)
    for v in w:
        run += Fraction(float(v))
        out.append(run)
    return out


@pytest.mark.parametrize("w, start, plain", [
    (np.random.default_rng(3).integers(0, 1000, 5000).astype(float), 0.0, True),  # small integers
    (np.array([2.0 ** 52, 2.0 ** 51, 2.0 ** 50, 1.0, 1.0]), 0.0, True),  # large, below 2^53: exact
    (np.array([2.0 ** 53 - 4, 1.0, 1.0, 1.0, 1.0, 1.0, 3.0]), 0.0, False),  # crosses 2^53: must fall back
    (np.array([1.0, 2.0, 3.0]), 2.0 ** 53 - 2, False),  # the carried running weight crosses it
    (np.array([1.0, 2.0, 3.0]), 0.5, False),  # a carried running weight that is not an integer
    (np.array([1.0, 0.1, 3.0]), 0.0, False),  # a fractional weight
])
def test_integer_weights_take_the_plain_prefix_sum_only_where_exact(w, start, plain):
    from uneven.engine.streamsums import compensated_prefix, prefix_sums
    hi, lo = prefix_sums(w, start)
    assert (lo is None) == plain
    exact = _exact_prefix(w, start if math.isfinite(start) else 0)
    got = [Fraction(float(h)) + (Fraction(float(v)) if lo is not None else 0) + Fraction(start)
           for h, v in zip(hi, lo if lo is not None else hi)]
    assert got == exact  # exact rational arithmetic: integers below 2^53, or two-sum's recovered errors
    c_hi, c_lo = compensated_prefix(w)  # where the plain sum is taken, the compensated one agrees bit for bit
    if plain:
        assert np.array_equal(hi, c_hi) and not c_lo.any()


@pytest.mark.parametrize("scale", [1.0, 2.0 ** 46])
def test_integer_weights_stream_as_exact_fractions_and_as_the_compensated_path(scale, tiny_batches, monkeypatch):
    # integer weights, batches of 7 rows cutting the groups; at 2^46 each the running weight of the
    # large group crosses 2^53 within the stream, so later batches must take the compensated path
    import uneven.engine.streamsums as sums
    rng = np.random.default_rng(29)
    n = 60
    x = rng.lognormal(3.0, 1.2, n)
    w = rng.integers(1, 9, n).astype(float) * scale
    g = np.where(np.arange(n) < 45, 1, 2)
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": g, "x": x, "w": w}))
    sql = "SELECT g, gini(x, w) AS gi, lorenz(x, 0.3, w) AS lo, quantile_w(x, 0.6, w) AS q FROM t GROUP BY g ORDER BY g"
    taken = []
    original = sums.prefix_sums

    def spy(v, start=0.0):
        out = original(v, start)
        taken.append(out[1] is None)
        return out
    monkeypatch.setattr(sums, "prefix_sums", spy)
    got = uneven.query(sql, con, ordered="stream")
    assert any(taken) and (all(taken) if scale == 1.0 else not all(taken)), taken
    for i, key in enumerate((1, 2)):
        xs, ws = x[g == key], w[g == key]
        assert rel(got.gi[i], exact_gini(xs, ws)) <= 1e-12
        assert rel(got.lo[i], exact_lorenz(xs, ws, 0.3)) <= 1e-12
        assert got.q[i] == float(exact_quantile(xs, ws, 0.6))
    monkeypatch.setattr(sums, "prefix_sums", lambda v, start=0.0: sums.compensated_prefix(v))
    assert_same_frames(got, uneven.query(sql, con, ordered="stream"), tol=0.0)


# ---- the reader thread: errors come through, nothing is left running ------------------------------

def _reader_threads() -> list:
    import threading

    from uneven.engine.prefetch import THREAD_NAME
    return [t for t in threading.enumerate() if t.name == THREAD_NAME]


def test_reader_thread_hands_over_items_in_order_and_the_readers_own_error():
    from uneven.engine.prefetch import prefetched
    failure = ValueError("the reader failed")

    def reader():
        yield from range(5)
        raise failure
    got = []
    with pytest.raises(ValueError) as info:
        for item in prefetched(reader(), depth=2):
            got.append(item)
    assert got == [0, 1, 2, 3, 4] and info.value is failure
    assert not _reader_threads()


def test_a_consumer_that_stops_leaves_no_reader_thread():
    import contextlib

    from uneven.engine.prefetch import prefetched
    with contextlib.closing(prefetched(iter(range(10_000)), depth=1)) as items:
        assert next(items) == 0  # the thread now waits on a full queue
    assert not _reader_threads()


def test_an_error_while_reducing_stops_the_reader_and_frees_the_connection(grouped, tiny_batches, monkeypatch):
    con, _ = grouped
    monkeypatch.setattr(stream_engine, "PREFETCH", True)
    sql = "SELECT a, gini(x, w) FROM t GROUP BY a ORDER BY a"
    want = uneven.query(sql, con, ordered="stream")
    seen = []
    original_feed = stream_engine.StreamState.feed

    def failing_feed(self, batch, keys):
        seen.append(batch.num_rows)
        if len(seen) == 2:
            raise uneven.ExecutionError("stopped while reducing")
    monkeypatch.setattr(stream_engine.StreamState, "feed", failing_feed)
    with pytest.raises(uneven.ExecutionError, match="stopped while reducing"):
        uneven.query(sql, con, ordered="stream")
    assert not _reader_threads()
    monkeypatch.setattr(stream_engine.StreamState, "feed", original_feed)
    assert_same_frames(uneven.query(sql, con, ordered="stream"), want, tol=0.0)  # the connection still works


def test_reader_errors_are_the_serial_paths_errors(monkeypatch):
    # an Arrow reader failing midway: the same UnevenError with and without the reader thread
    import pyarrow as pa

    from uneven.compiler.passes.stream import StreamJob

    def batches():
        yield pa.record_batch({"_uv_x": pa.array([1.0, 2.0]), "_uv_w": pa.array([1.0, 1.0])})
        raise pa.ArrowInvalid("the rows stopped coming")

    class Relation:
        def to_arrow_reader(self, rows):
            schema = pa.schema([("_uv_x", pa.float64()), ("_uv_w", pa.float64())])
            return pa.RecordBatchReader.from_batches(schema, batches())

    class Connection:  # DuckDB's connection, but for the rows query
        def __init__(self):
            self.con = duckdb.connect()

        def sql(self, q):
            return Relation()

        def __getattr__(self, name):
            return getattr(self.con, name)
    job = StreamJob("_uv_str_1", [], True, None, None, [], [])
    job.rows_sql = "SELECT 1"
    errors = []
    for prefetch in (True, False):
        monkeypatch.setattr(stream_engine, "PREFETCH", prefetch)
        with pytest.raises(uneven.UnevenError) as info:
            stream_engine.run_job(Connection(), job)
        errors.append((type(info.value), str(info.value)))
    assert errors[0] == errors[1] and "the rows stopped coming" in errors[0][1]
    assert not _reader_threads()


def test_values_out_of_order_within_a_group_are_caught_and_a_new_group_may_start_lower():
    # the order check (docs/plans.md, "Memory"): a value below its predecessor is allowed only where a
    # group starts, also across a batch boundary
    import pyarrow as pa

    from uneven.catalog.kernels import Need
    from uneven.engine.streamsums import StreamState

    def fed(*batches) -> bool:
        state = StreamState([Need("W")], weighted=False)
        for keys, xs in batches:
            state.feed(pa.record_batch({"_uv_k1": pa.array(keys), "_uv_x": pa.array(xs, pa.float64())}), ["_uv_k1"])
        return state.unsorted
    assert not fed(([1, 1, 2, 2], [5.0, 6.0, 1.0, 2.0]))  # steps down where the group starts
    assert fed(([1, 1, 2, 2], [5.0, 6.0, 2.0, 1.0]))  # steps down inside group 2
    assert not fed(([1, 1], [5.0, 6.0]), ([2, 2], [1.0, 2.0]))
    assert fed(([1, 1], [5.0, 6.0]), ([1, 2], [4.0, 7.0]))  # group 1 goes on lower in the next batch
