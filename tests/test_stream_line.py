"""The stream plan of the measures at a relative poverty line (below_line_share, median_gap,
fgt_relative; compiler/passes/stream_line.py) against outside sources: exact rational arithmetic
(Python ``fractions``, written here from the definitions in docs/poverty.md: z = frac·M, M the
weighted median, the smallest x with C/W ≥ 1/2; H = Σ w·1(x < z)/W; M_p the smallest x below z
whose running weight reaches half the weight below z; FGT_α = Σ w·1(x < z)·((z − x)/z)^α / W,
Foster, Greer and Thorbecke 1984, from memory), the numpy reference (uneven.reference.poverty, tested
against closed forms in tests/test_poverty.py) on the rows DuckDB selects, and the window plan on the
same query (values to 1e-12, NULLs, errors). Batches of 3 and 7 rows cut groups, runs of tied values,
the median and the line anywhere; read serially and on the reader thread.
"""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from test_numerics import DATA, rel
from test_stream import assert_same_frames, close
from uneven.compiler.context import CompileOptions
from uneven.compiler.pipeline import compile_with_context
from uneven.engine.columns import DuckDBSchema
from uneven.reference import poverty as RP


def exact_line(x, w, frac: float, alpha: int | None = None):
    """(H, gap, FGT_alpha) in exact fractions, None where undefined (median ≤ 0, nobody below)."""
    pairs = sorted((Fraction(float(a)), Fraction(float(b))) for a, b in zip(x, w)
                   if not (pd.isna(a) or pd.isna(b)) and b > 0)
    if not pairs:
        return None, None, None
    W = sum(b for _, b in pairs)
    C, M = Fraction(0), pairs[-1][0]
    for a, b in pairs:
        C += b
        if C / W >= Fraction(1, 2):
            M = a
            break
    if M <= 0:
        return None, None, None
    z = Fraction(frac) * M  # frac: the double the SQL literal is
    below = [(a, b) for a, b in pairs if a < z]
    P = sum((b for _, b in below), Fraction(0))
    gap = None
    C = Fraction(0)
    for a, b in below:
        C += b
        if C >= P / 2:
            gap = (z - a) / z
            break
    fgt = None if alpha is None else sum((b * ((z - a) / z) ** alpha for a, b in below), Fraction(0)) / W
    return P / W, gap, fgt


def agrees(got, want, tol=1e-12) -> bool:
    if want is None:
        return pd.isna(got)
    if want == 0:
        return got == 0
    return not pd.isna(got) and rel(got, want) <= tol


EXACT_SQL = ("SELECT below_line_share(x, 0.6, w) AS h, below_line_share(x, 1, w) AS h1, median_gap(x, 0.6, w) AS g, "
             "median_gap(x, 1, w) AS g1, fgt_relative(x, 0, 0.5, w) AS f0, fgt_relative(x, 1, 0.6, w) AS f1, "
             "fgt_relative(x, 2, 0.5, w) AS f2 FROM t")


@pytest.mark.parametrize("name", sorted(DATA))
def test_line_measures_match_exact_fractions(name, batch):
    x, w = DATA[name]
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    assert [p["kind"] for p in uneven.explain(EXACT_SQL, con, ordered="stream").passes] == ["stream"]
    got = uneven.query(EXACT_SQL, con, ordered="stream").iloc[0]
    h, g, f0 = exact_line(x, w, 0.6, 0)
    h1, g1, _ = exact_line(x, w, 1.0)
    _, _, f1 = exact_line(x, w, 0.6, 1)
    _, _, f2 = exact_line(x, w, 0.5, 2)
    _, _, f0 = exact_line(x, w, 0.5, 0)
    for label, want in (("h", h), ("h1", h1), ("g", g), ("g1", g1), ("f0", f0), ("f1", f1), ("f2", f2)):
        assert agrees(got[label], want), f"{name} {label}: {got[label]} vs exact {want if want is None else float(want)}"
    if name == "offset":  # 1e12 plus small increments: nobody below 0.6·M, half the rows below M
        assert got.h == 0 and pd.isna(got.g) and got.f2 == 0 and 0.4 < got.h1 < 0.6


def test_ties_at_the_line_and_at_the_median_across_batches(batch):
    # integer weights and runs of tied values at z = 0.6·M (M = 10: z = 6, not below) and at M itself
    # (frac = 1), cut by the batches; checked in exact fractions per group
    rng = np.random.default_rng(21)
    x = np.repeat([1.0, 2.0, 4.5, 6.0, 10.0, 10.0, 12.0, 30.0], [6, 9, 7, 8, 12, 1, 10, 9])
    w = rng.integers(1, 4, len(x)).astype(float)
    g = rng.integers(0, 3, len(x))
    perm = rng.permutation(len(x))
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": g[perm], "x": x[perm], "w": w[perm]}))
    sql = ("SELECT g, below_line_share(x, 0.6, w) AS h, median_gap(x, 0.6, w) AS m, fgt_relative(x, 2, 0.6, w) AS f, "
           "below_line_share(x, 1, w) AS h1, median_gap(x, 1, w) AS m1 FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    for row in got.itertuples(index=False):
        part = (g == row.g)
        h, m, f = exact_line(x[part], w[part], 0.6, 2)
        h1, m1, _ = exact_line(x[part], w[part], 1.0)
        for a, b in ((row.h, h), (row.m, m), (row.f, f), (row.h1, h1), (row.m1, m1)):
            assert agrees(a, b), (row, a, b)


@pytest.fixture(scope="module")
def grouped():
    rng = np.random.default_rng(1001)
    n = 2500
    df = pd.DataFrame({"a": rng.integers(0, 4, n).astype(float), "b": rng.choice(["n", "s", "e"], n),
                       "x": rng.lognormal(2, 1, n).round(1), "w": rng.integers(0, 5, n).astype(float)})
    df.loc[rng.random(n) < 0.05, "a"] = None  # NULL keys: a group of their own
    df.loc[rng.random(n) < 0.03, "b"] = None
    df.loc[rng.random(n) < 0.04, "x"] = None  # skipped rows
    df.loc[rng.random(n) < 0.03, "w"] = None
    con = duckdb.connect()
    con.register("t", df)
    return con, df


# at 0.6 and 0.5 the sums come from the second streams' totals (median_gap streams the rows below those
# lines), at 0.7 from the line GROUP BY
LINE = ("below_line_share(x, 0.6, w) AS h, median_gap(x, 0.6, w) AS m, fgt_relative(x, 1, 0.6, w) AS f1, "
        "fgt_relative(x, 2, 0.5, w) AS f2, median_gap(x, 0.5, w) AS m5, below_line_share(x, 0.7, w) AS h7, "
        "fgt_relative(x, 2, 0.7, w) AS f7")


def forms(sql: str, con) -> list[str]:
    return [p["reason"] for p in uneven.explain(sql, con, ordered="stream").passes if p["kind"] == "stream"]


@pytest.mark.parametrize("extra, form", [("", "direct"), (", count(*) AS n", "joined")])
def test_multi_column_null_keys_match_window_and_reference_direct_and_joined(grouped, batch, extra, form):
    con, df = grouped
    sql = f"SELECT a, b, {LINE}{extra} FROM t GROUP BY a, b ORDER BY a, b"
    reasons = forms(sql, con)
    assert len(reasons) == 1 and reasons[0].split("; ")[-1].startswith(form)
    assert "_uv_str_1_line" in reasons[0] and "(_uv_str_1_pm1, _uv_str_1_pm2)" in reasons[0]
    assert "its totals query summing the other measures" in reasons[0]
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    valid = df.dropna(subset=["x", "w"])
    valid = valid[valid.w > 0]
    for row in got.itertuples(index=False):
        sel = valid[(valid.a.isna() if pd.isna(row.a) else valid.a == row.a)
                    & (valid.b.isna() if pd.isna(row.b) else valid.b == row.b)]
        xs, ws = sel.x.to_numpy(), sel.w.to_numpy()
        want = [RP.below_line_share(xs, 0.6, ws), RP.median_gap(xs, 0.6, ws), RP.fgt_relative(xs, 1.0, 0.6, ws),
                RP.fgt_relative(xs, 2.0, 0.5, ws), RP.median_gap(xs, 0.5, ws), RP.below_line_share(xs, 0.7, ws),
                RP.fgt_relative(xs, 2.0, 0.7, ws)]  # numpy reference
        for value, ref in zip((row.h, row.m, row.f1, row.f2, row.m5, row.h7, row.f7), want):
            assert close(value, ref, 1e-10), (row, ref)


def test_filter_unweighted_beside_a_gini_having_and_ctes(grouped, batch):
    con, _ = grouped
    sql = ("WITH s AS (SELECT * FROM t WHERE x < 60) "
           "SELECT b, gini(x, w) AS gi, below_line_share(x, 0.6, w) FILTER (WHERE a = 1) AS hf, "
           "median_gap(x, 0.6) AS mu, 100 * fgt_relative(x, 2, 0.6) AS fu, "
           "round(median_gap(x, 0.6, w) - median_gap(x, 0.6, w) FILTER (WHERE a = 1), 9) AS d "
           "FROM s GROUP BY b HAVING below_line_share(x, 0.6, w) > 0.05 ORDER BY median_gap(x, 0.6, w) DESC")
    kinds = [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes]
    assert kinds == ["stream", "stream", "stream"]  # weighted, weighted with FILTER, unweighted
    got = uneven.query(sql, con, ordered="stream")
    assert len(got) >= 2
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))


EDGE = pd.DataFrame({
    # 1: ordinary; 2: median ≤ 0; 3: all equal (nobody below); 4: one row; 5: no valid value;
    # 6: every weight 0; 7: zero weights beside others; 8: median exactly 0
    "g": [1, 1, 1, 1, 2, 2, 2, 3, 3, 3, 4, 5, 5, 6, 6, 7, 7, 7, 7, 8, 8, 8],
    "x": [1.0, 2.0, 5.0, 9.0, -4.0, -1.0, 3.0, 7.0, 7.0, 7.0, 5.0, None, None, 1.0, 2.0, 1.0, 3.0, 8.0, 0.5,
          -1.0, 0.0, 4.0],
    "w": [1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 2.0, 1.0, 3.0, 1.0, 1.0, 0.0, 0.0, 1.0, 1.0, 1.0, 0.0,
          1.0, 1.0, 1.0]})


@pytest.mark.parametrize("gap", [True, False], ids=["with-gap", "sums-only"])
@pytest.mark.parametrize("extra", ["", ", count(*) AS n"])
def test_edge_groups_give_the_window_plans_nulls(batch, extra, gap):
    # with a median_gap the sums come from its second stream's totals, without one from the line GROUP BY
    con = duckdb.connect()
    con.register("t", EDGE)
    sql = (f"SELECT g, below_line_share(x, 0.6, w) AS h, {'median_gap(x, 0.6, w)' if gap else '0'} AS m, "
           f"fgt_relative(x, 1, 0.6, w) AS f{extra} FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.g.tolist() == [1, 2, 3, 4, 5, 6, 7, 8]
    # group 1: M = 2 (C/W reaches 1/2 at x = 2), z = 1.2, one row of four below (x = 1): H = 1/4,
    # M_p = 1, gap (1.2 − 1)/1.2, FGT_1 = ((1.2 − 1)/1.2)/4 (by hand)
    assert got.h[0] == 0.25 and got.f[0] == pytest.approx(0.2 / 1.2 / 4, rel=1e-15)
    assert got.h.isna().tolist() == [False, True, False, False, True, True, False, True]
    assert got.h[2] == 0 and got.f[2] == 0 and got.h[3] == 0  # nobody below the line: 0, and no gap
    # group 7 without its zero-weight row: 1, 3, 8; M = 3, z = 1.8, one row below of three
    assert got.h[6] == pytest.approx(1 / 3, rel=1e-15)
    if gap:
        assert got.m[0] == pytest.approx(0.2 / 1.2, rel=1e-15)
        assert got.m.isna().tolist() == [False, True, True, True, True, True, False, True]


def test_no_group_keys_and_no_rows(batch):
    con = duckdb.connect()
    con.register("t", EDGE)
    sql = "SELECT below_line_share(x, 0.6, w) AS h, median_gap(x, 0.6, w) AS m, fgt_relative(x, 2, 0.6, w) AS f FROM t"
    for where in ("", " WHERE g = 1", " WHERE x > 100"):
        got = uneven.query(sql + where, con, ordered="stream")
        assert len(got) == 1
        assert_same_frames(got, uneven.query(sql + where, con, ordered="window"))
    assert uneven.query(sql + " WHERE x > 100", con, ordered="stream").isna().all().all()


@pytest.mark.parametrize("key", ["k", "l", "s"])
def test_nan_signed_zero_list_and_struct_keys_join_the_medians(batch, key):
    # the rows are joined back to the streamed medians on the keys: keys that GROUP BY merges (NaN,
    # −0.0 and 0.0) or that are lists and structs must find their group's median
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT CASE WHEN i % 4 = 0 THEN 'nan'::DOUBLE WHEN i % 4 = 1 THEN -0.0 "
                "WHEN i % 4 = 2 THEN 0.0 END AS k, [i % 2] AS l, {'a': i % 3} AS s, i::DOUBLE AS x "
                "FROM range(1, 60) r(i)")
    sql = (f"SELECT {key} AS key, below_line_share(x, 0.6) AS h, median_gap(x, 0.6) AS m, "
           f"fgt_relative(x, 1, 0.6) AS f FROM t GROUP BY {key} ORDER BY {key}")
    got, want = (uneven.query(sql, con, ordered=plan) for plan in ("stream", "window"))
    assert len(got) == len(want) == {"k": 3, "l": 2, "s": 3}[key]
    for g, w in zip(got.itertuples(index=False), want.itertuples(index=False)):
        assert repr(g.key) == repr(w.key) and close(g.h, w.h) and close(g.m, w.m) and close(g.f, w.f)
        assert g.h > 0 and g.m > 0


@pytest.mark.parametrize("rows, words", [
    ("(1, 1.0, 1.0), (2, 2.0, -1.0)", "negative weight in the weight argument w"),
    ("(1, 1.0, 1.0), (2, 'nan'::DOUBLE, 1.0)", "NaN or infinite value"),
    ("(1, 1.0, 1.0), (2, 2.0, 'inf'::DOUBLE)", "NaN or infinite weight"),
])
def test_input_policy_errors_name_the_group(rows, words):
    con = duckdb.connect()
    con.execute(f"CREATE TABLE t AS SELECT * FROM (VALUES {rows}) v(g, x, w)")
    for plan in ("stream", "window"):
        with pytest.raises(uneven.InputDataError) as info:
            uneven.query("SELECT g, median_gap(x, 0.6, w), below_line_share(x, 0.6, w) FROM t GROUP BY g", con,
                         ordered=plan)
        assert words in str(info.value) and "the group g=2" in str(info.value)


def test_strict_names_the_undefined_group():
    con = duckdb.connect()
    con.register("t", EDGE[EDGE.g.isin([1, 2, 3])])
    for measure, group in (("below_line_share(x, 0.6, w)", 2), ("median_gap(x, 0.6, w)", 2),
                           ("fgt_relative(x, 2, 0.6, w)", 2)):
        with pytest.raises(uneven.UndefinedResultError, match=f"the group g={group}"):
            uneven.query(f"SELECT g, {measure} FROM t GROUP BY g ORDER BY g", con, ordered="stream", strict=True)
    with pytest.raises(uneven.UndefinedResultError, match="the group g=3"):  # nobody below the line: no gap
        uneven.query("SELECT g, median_gap(x, 0.6, w) FROM t WHERE g <> 2 GROUP BY g", con, ordered="stream",
                     strict=True)


def test_jobs_stream_the_rows_below_the_line_only_after_the_medians(grouped):
    con, _ = grouped
    sql = f"SELECT a, {LINE} FROM t GROUP BY a"
    compiled, ctx = compile_with_context(sql, CompileOptions(stream=True, ordered="stream"), DuckDBSchema(con))
    assert [j.table for j in ctx.stream_jobs] == ["_uv_str_1", "_uv_str_1_pm1", "_uv_str_1_pm2"]
    first, *poor = ctx.stream_jobs
    assert [c[0] for c in first.columns] == ["_uv_md", "_uv_wa"]  # one median serves every line measure
    for job in poor:  # the rows below the line, joined to the medians; P and the fgt sums from their totals
        assert '"_uv_str_1"."_uv_md"' in job.rows_sql and "FSUM" in job.totals_sql
    assert [j.kept_totals for j in poor] == [["_uv_wt", "_uv_s1"], ["_uv_wt", "_uv_s1"]]
    assert "_uv_str_1_line" in compiled
    # compile() never streams: the same portable window SQL whatever the option
    assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")
    assert "_uv_str" not in uneven.compile(sql, ordered="stream")


def test_results_are_unregistered_afterwards(grouped):
    con, _ = grouped
    uneven.query("SELECT a, median_gap(x, 0.6, w) FROM t GROUP BY a", con, ordered="stream")
    names = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables() UNION ALL "
                                       "SELECT view_name FROM duckdb_views()").fetchall()}
    assert not any(n.startswith("_uv_") for n in names)
    for table in ("_uv_str_1", "_uv_str_1_pm1"):
        with pytest.raises(duckdb.Error):
            con.execute(f"SELECT * FROM {table}")


def test_auto_streams_the_line_measures_and_says_why(grouped):
    # measured cheaper than the window plan, each alone and beside a Gini, weighted or not
    # (bench/README.md, "Stream plan, the median-line measures")
    con, _ = grouped
    for measures in ("below_line_share(x, 0.6, w)", "median_gap(x, 0.6)", "fgt_relative(x, 2, 0.6, w)",
                     "gini(x, w), below_line_share(x, 0.6, w), median_gap(x, 0.6, w), fgt_relative(x, 2, 0.6, w)"):
        found = uneven.explain(f"SELECT a, {measures} FROM t GROUP BY a", con)
        assert [p["kind"] for p in found.passes] == ["stream"], found.passes
        assert "bench/README.md" in found.passes[0]["reason"] and "median-line" in found.passes[0]["reason"]
    # beside a centred measure the pass keeps the window plan, which carries it in its own sort
    found = uneven.explain("SELECT a, below_line_share(x, 0.6, w), theil(x, w) FROM t GROUP BY a", con)
    assert [p["kind"] for p in found.passes] == ["ordered"]


@pytest.mark.parametrize("measure, words", [
    ("below_line_share(x, 0, w)", "frac must be above 0"),
    ("median_gap(x, 1.5, w)", "frac must be a fraction between 0 and 1"),
    ("fgt_relative(x, -1, 0.6, w)", "alpha must be at least 0"),
    ("fgt_relative(x, 2, x, w)", "frac must be a numeric constant"),
])
def test_bad_parameters_stop_both_plans_alike(measure, words):
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 2], "x": [1.0, 2.0], "w": [1.0, 1.0]}))
    for plan in ("stream", "window"):
        with pytest.raises(uneven.MeasureArgumentError, match=words):
            uneven.query(f"SELECT g, {measure} FROM t GROUP BY g", con, ordered=plan)
