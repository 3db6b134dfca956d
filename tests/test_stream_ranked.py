"""The ranked pass on the stream plan (concentration, concentration_wagstaff, concentration_erreygers,
kakwani, reynolds_smolensky; compiler/passes/stream_ranked.py, engine/streamranked.py).

Checked against outside sources: exact rational arithmetic (Python ``fractions``), written here from
the published definition of the concentration index, C = 2·cov_w(y, R)/μ_y with R the fractional rank
of the ranking variable, tied rows taking the mid-rank (weight strictly below + half the tie group's
weight)/W (Kakwani, Wagstaff and van Doorslaer 1997, from memory); Kakwani's index C_tax − G_income
(Kakwani 1977, from memory) and the Reynolds–Smolensky index G_pre − C_post, post-tax income ranked
by pre-tax income (Reynolds and Smolensky 1977, from memory), with the Gini the concentration index of
a variable ranked by itself (a fact of common practice); Wagstaff's normalisation C·(hi − lo)·μ /
((hi − μ)(μ − lo)) (Wagstaff 2005, from memory) and Erreygers' 4·μ·C/(hi − lo) (Erreygers 2009,
from memory). And the window plan on the same query: values to 1e-12 relative, NULL for NULL, the
same errors. Batches of 3 rows cut groups and runs of tied ranking values anywhere; serially and on
the reader thread.
"""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
import uneven.engine.stream as stream_engine
from test_numerics import DATA, rel
from test_stream import assert_same_frames
from uneven.errors import InputDataError


def exact_concentration(y, r, w) -> Fraction | None:
    """2·cov_w(y, R)/μ_y in exact fractions, R the mid-rank fractional rank of r; None where Σw·y = 0."""
    rows = sorted((Fraction(float(a)), Fraction(float(b)), Fraction(float(c))) for a, b, c in zip(r, y, w))
    W = sum(c for _, _, c in rows)
    T = sum(b * c for _, b, c in rows)
    if T == 0:
        return None
    ranks: list[Fraction] = []
    below, i = Fraction(0), 0
    while i < len(rows):  # one tie group of r at a time: its rows share the mid-rank
        j = i
        while j < len(rows) and rows[j][0] == rows[i][0]:
            j += 1
        tied = sum(c for _, _, c in rows[i:j])
        ranks += [(below + tied / 2) / W] * (j - i)
        below += tied
        i = j
    mu, mean_rank = T / W, sum(c * q for (_, _, c), q in zip(rows, ranks)) / W
    cov = sum(c * (b - mu) * (q - mean_rank) for (_, b, c), q in zip(rows, ranks)) / W
    return 2 * cov / mu


def exact_all(y, r, w, lo: float, hi: float) -> dict:
    """Every ranked measure of (y ranked by r) in exact fractions (None: NULL)."""
    c, g = exact_concentration(y, r, w), exact_concentration(r, r, w)
    if g is not None and sum(Fraction(float(a)) * Fraction(float(b)) for a, b in zip(r, w)) <= 0:
        g = None  # the Gini asks T > 0
    W = sum(Fraction(float(b)) for b in w)
    mu = sum(Fraction(float(a)) * Fraction(float(b)) for a, b in zip(y, w)) / W
    L, H = Fraction(lo), Fraction(hi)
    inside = c is not None and min(y) >= lo and max(y) <= hi
    return {"c": c, "k": None if c is None or g is None else c - g,
            "rs": None if c is None or g is None else g - c,
            "wg": c * (H - L) * mu / ((H - mu) * (mu - L)) if inside and L < mu < H else None,
            "er": 4 * mu * c / (H - L) if inside else None}


def agrees(got, want, tol=1e-12) -> bool:
    if want is None:
        return pd.isna(got)
    return not pd.isna(got) and (rel(got, want) <= tol if want != 0 else abs(got) <= 1e-15)


def ranked_sql(weighted: bool, lo: float, hi: float, keys: str = "") -> str:
    w = ", w" if weighted else ""
    return (f"SELECT {keys}concentration(y, r{w}) AS c, kakwani(y, r{w}) AS k, reynolds_smolensky(r, y{w}) AS rs, "
            f"concentration_wagstaff(y, r, {lo!r}, {hi!r}{w}) AS wg, "
            f"concentration_erreygers(y, r, {lo!r}, {hi!r}{w}) AS er FROM t")


@pytest.mark.parametrize("rows", [3, None], ids=["batch3", "whole"])
@pytest.mark.parametrize("name", sorted(DATA))
def test_numerics_data_match_exact_fractions(name, rows, monkeypatch):
    # the hard data of tests/test_numerics.py ranked by x (1e12 plus small increments: many ties, a
    # Gini near 1e-10), the outcome y = x times a factor in [0.5, 1.5) (fixed seed)
    if rows:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", rows)
    r, w = DATA[name]
    y = r * np.random.default_rng(7).uniform(0.5, 1.5, len(r))
    lo, hi = float(np.floor(y.min())) - 1.0, float(np.ceil(y.max())) + 1.0
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"r": r, "y": y, "w": w}))
    sql = ranked_sql(True, lo, hi)
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes] == ["stream"]
    got = uneven.query(sql, con, ordered="stream").iloc[0]
    want = exact_all(y, r, w, lo, hi)
    scale = max(abs(want["c"]), abs(exact_concentration(r, r, w)))
    for label, value in want.items():
        assert value is not None
        if label in ("k", "rs"):  # a difference of two indices: to 1e-12 of the larger one (span: K = 2.5e-5)
            assert abs(got[label] - value) <= 1e-12 * scale, (label, got[label], float(value))
        else:
            assert agrees(got[label], value), (label, got[label], value)


# hand data: runs of tied ranking values of 4, 2, 5, 1 and 3 rows, so that batches of 3 rows cut
# every run of more than one row, with integer weights (two zero) and outcomes of either sign
HAND = pd.DataFrame({
    "r": [1.0, 1.0, 1.0, 1.0, 2.0, 2.0, 3.0, 3.0, 3.0, 3.0, 3.0, 4.5, 7.0, 7.0, 7.0],
    "y": [2.0, -1.0, 4.0, 0.5, 3.0, 3.0, -2.0, 6.0, 1.0, 1.0, 8.0, 5.0, 9.0, -3.0, 2.5],
    "w": [1.0, 2.0, 1.0, 3.0, 2.0, 0.0, 1.0, 1.0, 4.0, 2.0, 1.0, 5.0, 1.0, 0.0, 2.0]})


@pytest.mark.parametrize("weighted", [True, False], ids=["weighted", "unweighted"])
def test_ties_cut_by_the_batches_match_exact_fractions(batch, weighted):
    con = duckdb.connect()
    con.register("t", HAND)
    sql = ranked_sql(weighted, -3.0, 9.0)
    got = uneven.query(sql, con, ordered="stream").iloc[0]
    kept = HAND[HAND.w > 0] if weighted else HAND
    want = exact_all(kept.y.to_numpy(), kept.r.to_numpy(), kept.w.to_numpy() if weighted else np.ones(len(kept)),
                     -3.0, 9.0)
    for label, value in want.items():
        assert value is not None and agrees(got[label], value), (label, got[label], value)
    assert_same_frames(uneven.query(sql, con, ordered="stream"), uneven.query(sql, con, ordered="window"))


# edge groups: 1 ordinary with ties; 2 one row; 3 every weight zero; 4 zero weights beside others;
# 5 NULL outcomes and NULL ranking values beside valid rows; 6 every outcome NULL; 7 outcomes summing
# to 0 (C NULL); 8 ranking values summing to ≤ 0 (its Gini NULL, so Kakwani and R–S NULL); 9 every
# value equal; 10 outcomes outside [lo, hi]; 11 a mean on the bound; NULL key: ordinary rows
EDGE = pd.DataFrame({
    "g": [1, 1, 1, 1, 1, 1, 2, 3, 3, 4, 4, 4, 5, 5, 5, 5, 6, 6, 7, 7, 7, 8, 8, 8, 9, 9, 9, 10, 10, 11, 11,
          None, None, None],
    "r": [1.0, 2.0, 2.0, 2.0, 5.0, 5.0, 3.0, 1.0, 2.0, 1.0, 2.0, 3.0, 1.0, None, 3.0, 4.0, 1.0, 2.0, 1.0, 2.0, 3.0,
          -5.0, 1.0, 4.0, 2.0, 2.0, 2.0, 1.0, 2.0, 1.0, 2.0, 1.0, 1.0, 3.0],
    "y": [1.0, 3.0, 2.0, 5.0, 4.0, 4.0, 2.0, 1.0, 2.0, 1.0, 5.0, 2.0, 2.0, 3.0, None, 6.0, None, None, -1.0, 2.0,
          -1.0, 1.0, 2.0, 3.0, 4.0, 4.0, 4.0, 1.0, 12.0, 0.0, 0.0, 2.0, 5.0, 1.0],
    "w": [1.0, 2.0, 1.0, 1.0, 3.0, 1.0, 2.0, 0.0, 0.0, 1.0, 0.0, 2.0, 1.0, 1.0, 1.0, 2.0, 1.0, 1.0, 1.0, 1.0, 1.0,
          1.0, 1.0, 1.0, 1.0, 2.0, 1.0, 1.0, 1.0, 1.0, 1.0, 2.0, 1.0, 1.0]})


@pytest.mark.parametrize("extra", ["", ", count(*) AS n"], ids=["direct", "joined"])
def test_edge_groups_give_the_window_plans_values_and_nulls(batch, extra):
    con = duckdb.connect()
    con.register("t", EDGE)
    sql = ranked_sql(True, 0.0, 10.0, keys="g, ").replace(" FROM t", f"{extra} FROM t GROUP BY g ORDER BY g")
    plan = uneven.explain(sql, con, ordered="stream").passes
    assert [p["kind"] for p in plan] == ["stream"] and ("direct:" in plan[0]["reason"]) == (extra == "")
    got = uneven.query(sql, con, ordered="stream")
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    assert got.g.isna().sum() == 1 and len(got) == 12
    c = dict(zip(got.g.fillna(0).astype(int), got.c))
    assert pd.isna(c[3]) and pd.isna(c[6]) and pd.isna(c[7]) and c[2] == 0 and c[9] == 0  # by hand
    k = dict(zip(got.g.fillna(0).astype(int), got.k))
    assert pd.isna(k[8]) and not pd.isna(c[8])
    # group 1 by hand: r = 1 | 2 2 2 | 5 5 with w = 1 | 2 1 1 | 3 1: W = 9, mid-ranks 0.5/9, 3/9, 7/9;
    # y·w = 1 | 6 2 5 | 12 4, T = 30, C = Σ w y (2R − 1)/T
    want = (1 * (1 / 9 - 1) + 13 * (6 / 9 - 1) + 16 * (14 / 9 - 1)) / 30
    assert c[1] == pytest.approx(want, rel=1e-14)


def test_filter_having_ctes_multi_and_nan_keys(batch):
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT CASE WHEN i % 3 = 0 THEN 'nan'::DOUBLE ELSE (i % 3)::DOUBLE END AS a, "
                "i % 2 AS b, (i * 7 % 11)::DOUBLE AS r, (i * 5 % 13)::DOUBLE - 2 AS y, (i % 4)::DOUBLE AS w "
                "FROM range(1, 90) t(i)")
    sql = ("WITH s AS (SELECT * FROM t WHERE r < 10) "
           "SELECT a, b, concentration(y, r, w) FILTER (WHERE y > 0) AS cf, kakwani(y, r, w) AS k, "
           "1 + reynolds_smolensky(r, y) AS rs FROM s GROUP BY a, b "
           "HAVING concentration(y, r, w) > -0.5 ORDER BY a, b")
    assert [p["kind"] for p in uneven.explain(sql, con, ordered="stream").passes] == ["stream"] * 3  # (w, FILTER, unweighted)
    got = uneven.query(sql, con, ordered="stream")
    assert len(got) >= 3
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
    whole = "SELECT concentration(y, r, w) AS c, kakwani(y, r) AS k FROM t"
    for where in ("", " WHERE r > 100"):  # no group keys: one row, of NULLs when no row is left
        assert_same_frames(uneven.query(whole + where, con, ordered="stream"),
                           uneven.query(whole + where, con, ordered="window"))


@pytest.mark.parametrize("bad, words", [
    ("(2, 2.0, 'nan'::DOUBLE)", "NaN or infinite value in the value argument y (the group g=2)"),
    ("(2, 'inf'::DOUBLE, 1.0)", "NaN or infinite value in the value argument r (the group g=2)"),
    ("(2, '-inf'::DOUBLE, 1.0)", "NaN or infinite value in the value argument r (the group g=2)"),
])
def test_non_finite_values_stop_both_plans_naming_the_group(batch, bad, words):
    # the input policy (docs/input-policy.md): a NaN or infinite value, in the ranking value or in the
    # outcome, stops the query with the same InputDataError on both plans, never a NULL or NaN measure
    con = duckdb.connect()
    con.execute(f"CREATE TABLE t AS SELECT * FROM (VALUES (1, 1.0, 2.0), (1, 3.0, 1.0), (2, 1.0, 2.0), {bad}) v(g, r, y)")
    sql = "SELECT g, concentration(y, r) AS c, kakwani(y, r) AS k FROM t GROUP BY g ORDER BY g"
    texts = []
    for ordered in ("stream", "window"):
        with pytest.raises(InputDataError) as info:
            uneven.query(sql, con, ordered=ordered)
        texts.append(str(info.value))
    assert texts[0] == texts[1] and words in texts[0]
    # the row filtered away by WHERE is never checked (as on every pass)
    assert_same_frames(uneven.query(sql.replace("GROUP BY", "WHERE g = 1 GROUP BY"), con, ordered="stream"),
                       uneven.query(sql.replace("GROUP BY", "WHERE g = 1 GROUP BY"), con, ordered="window"))


@pytest.mark.parametrize("rows, words", [
    ("(1, 1.0, 1.0, 1.0), (2, 2.0, 3.0, -1.0)", "negative weight in the weight argument w"),
    ("(1, 1.0, 1.0, 1.0), (2, 2.0, 3.0, 'nan'::DOUBLE)", "NaN or infinite weight"),
    ("(1, 1.0, 1.0, 1.0), (2, 2.0, 3.0, 'inf'::DOUBLE)", "NaN or infinite weight"),
])
def test_input_policy_errors_are_the_window_plans(rows, words):
    con = duckdb.connect()
    con.execute(f"CREATE TABLE t AS SELECT * FROM (VALUES {rows}) v(g, r, y, w)")
    for sql in ("SELECT g, concentration(y, r, w) FROM t GROUP BY g",
                "SELECT g, kakwani(y, r, w), count(*) FROM t GROUP BY g"):
        texts = []
        for plan in ("stream", "window"):
            with pytest.raises(uneven.InputDataError) as info:
                uneven.query(sql, con, ordered=plan)
            texts.append(str(info.value))
        assert texts[0] == texts[1] and words in texts[0]


def test_strict_names_the_undefined_group():
    con = duckdb.connect()
    con.register("t", EDGE[EDGE.g.isin([1, 7])])
    for plan in ("stream", "window"):
        with pytest.raises(uneven.UndefinedResultError, match="the group g=7"):
            uneven.query("SELECT g, concentration(y, r, w) FROM t GROUP BY g", con, ordered=plan, strict=True)


def test_explain_and_compile():
    con = duckdb.connect()
    con.register("t", HAND)
    sql = "SELECT concentration(y, r, w), reynolds_smolensky(r, y, w) FROM t"
    (streamed,) = uneven.explain(sql, con, ordered="stream").passes
    assert streamed["kind"] == "stream" and "open tie group" in streamed["reason"]
    (window,) = uneven.explain(sql, con, ordered="window").passes
    assert window["kind"] == "ranked"
    assert uneven.compile(sql, ordered="stream") == uneven.compile(sql, ordered="window")


def test_auto_streams_unless_the_ranking_value_has_few_distinct_values():
    # plan.RANKED_STREAMS: the window plan sums each tie group first, so few distinct ranking values
    # (the tie probe, integer types) keep it; a DOUBLE ranking value is not probed and streams
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT i % 7 AS g, i % 5 AS few, i AS many, (i * 37 % 101)::DOUBLE + 0.5 AS y, (i % 3)::DOUBLE AS w, "
                "i / 3.0 AS f FROM range(1, 400) t(i)")
    for rank_by, kind, words in (("few", "ranked", "distinct ranking values"), ("many", "stream", "unless"),
                                 ("f", "stream", "unless")):
        sql = f"SELECT g, concentration(y, {rank_by}, w) AS c, kakwani(y, {rank_by}) AS k FROM t GROUP BY g ORDER BY g"
        passes = uneven.explain(sql, con).passes
        assert [p["kind"] for p in passes] == [kind, kind] and all(words in p["reason"] for p in passes), passes
        assert_same_frames(uneven.query(sql, con), uneven.query(sql, con, ordered="window"))
