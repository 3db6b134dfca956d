"""The adaptive variant of the centred pass (DuckDB): Theil, MLD, GE and Atkinson from one pass of
compensated sums, with an error bound per group; only groups whose bound exceeds 1e-11 of the value
take the centred pass (compiler/passes/centred.py, catalog/moment.py).

Checked against mpmath at 60 digits (the definitions in DESIGN.md written out), on ordinary data
(every group one-pass: the centred scan is skipped) and on data mixing ordinary groups with groups
whose spread is tiny or whose values are near the DOUBLE range (those groups are centred)."""

from __future__ import annotations

import duckdb
import mpmath as mp
import numpy as np
import pandas as pd
import pytest

import uneven

mp.mp.dps = 60

SQL = ("SELECT g, theil(x, w), mld(x, w), ge(x, 2, w), ge(x, -1, w), ge(x, 0.7, w), atkinson(x, 1, w), "
       "atkinson(x, 0.5, w), atkinson(x, 2.5, w) FROM t GROUP BY g ORDER BY g")


def mp_values(x, w):
    """The same eight measures by their usual definitions (common practice; Theil 1967, Shorrocks
    1980 for GE and Atkinson 1970 cited from memory), in 60-digit arithmetic on the exact doubles."""
    xs, ws = [mp.mpf(float(v)) for v in x], [mp.mpf(float(v)) for v in w]
    W = sum(ws)
    mu = sum(a * b for a, b in zip(xs, ws)) / W

    def mean(f):
        return sum(b * f(a) for a, b in zip(xs, ws)) / W

    def ge(a):
        return (mean(lambda v: (v / mu) ** a) - 1) / (a * (a - 1))

    def atk(e):
        if e == 1:
            return 1 - mp.exp(mean(mp.log)) / mu
        return 1 - mean(lambda v: v ** (1 - e)) ** (1 / (1 - e)) / mu

    return [mean(lambda v: (v / mu) * mp.log(v / mu)), mean(lambda v: mp.log(mu / v)), ge(2), ge(-1),
            ge(mp.mpf("0.7")), atk(1), atk(mp.mpf("0.5")), atk(mp.mpf("2.5"))]


def run(df: pd.DataFrame, sql: str = SQL):
    con = duckdb.connect()
    con.register("t", df)
    return uneven.query(sql, con=con)


def centred_groups(df: pd.DataFrame, sql: str = SQL) -> int:
    """How many groups the plan sent through the centred CTE (its deterministic name)."""
    compiled = uneven.compile(sql)
    assert "FSUM(" in compiled
    counted = compiled[:compiled.rindex("SELECT")] + 'SELECT count(*) FROM "_uv_cen_1"'
    con = duckdb.connect()
    con.register("t", df)
    return con.execute(counted).fetchone()[0]


def frame(groups: list[np.ndarray], rng) -> pd.DataFrame:
    parts = [pd.DataFrame({"g": i, "x": x, "w": rng.uniform(0.5, 3.0, len(x))}) for i, x in enumerate(groups)]
    return pd.concat(parts, ignore_index=True)


def check_against_mpmath(df: pd.DataFrame, got: pd.DataFrame, rel_tol: float) -> None:
    for i, (_, part) in enumerate(df.groupby("g")):
        want = mp_values(part.x.to_numpy(), part.w.to_numpy())
        for j, e in enumerate(want):
            g = got.iloc[i, j + 1]
            assert abs(mp.mpf(float(g)) - e) <= rel_tol * abs(e), f"group {i} measure {j}: {g} vs {mp.nstr(e, 17)}"


def test_plan_is_adaptive_on_duckdb_only():
    text = str(uneven.explain("SELECT g, theil(x, w), ge(x, 2, w) FROM t GROUP BY g"))
    assert "centred [adaptive]" in text, text
    # another engine has no compensated sum: every group centred, no FSUM in its SQL
    assert "FSUM" not in uneven.compile("SELECT g, theil(x, w) FROM t GROUP BY g", dialect="postgres").upper()
    # cv and hoover have no one-pass form: with them in the pass, every group is centred
    mixed = str(uneven.explain("SELECT theil(x, w), cv(x, w) FROM t"))
    assert "centred [centred]" in mixed and "cv" in mixed


def test_ordinary_data_skips_the_centred_scan_and_meets_1e11():
    rng = np.random.default_rng(21)
    groups = [rng.lognormal(3.0, s, 400) for s in (0.3, 1.0, 2.0)] + [rng.pareto(2.5, 400) + 1.0]
    df = frame(groups, rng)
    assert centred_groups(df) == 0
    check_against_mpmath(df, run(df), 2e-11)


def test_hard_groups_are_centred_and_keep_their_digits():
    rng = np.random.default_rng(22)
    ordinary = rng.lognormal(2.0, 1.0, 300)
    tiny = 1e6 * (1 + 1e-9 * rng.standard_normal(300))  # spread 1e-9 of the mean: the one-pass form cancels
    near = 1e6 * (1 + 1e-4 * rng.standard_normal(300))
    huge = 1e300 * rng.uniform(1.0, 50.0, 300)  # x ln x overflows in the one-pass sums
    df = frame([ordinary, tiny, near, huge], rng)
    assert centred_groups(df) == 3  # tiny, near (bounds above 1e-11 of the value) and huge
    got = run(df)
    check_against_mpmath(df[df.g == 0], got.iloc[[0]], 2e-11)
    check_against_mpmath(df[df.g == 2], got.iloc[[2]].reset_index(drop=True), 1e-9)
    # the tiny group: relative 1e-6 (the measures are about 1e-19; the centred terms keep most digits)
    check_against_mpmath(df[df.g == 1], got.iloc[[1]].reset_index(drop=True), 1e-6)
    # near the DOUBLE range: every value finite and as the definitions say
    check_against_mpmath(df[df.g == 3], got.iloc[[3]].reset_index(drop=True), 1e-9)


@pytest.mark.parametrize("seed", range(6))
def test_random_groups_within_bound(seed):
    """Random shapes: zeros (Theil only), ties, offsets and heavy tails; every result within 2e-11 of
    mpmath where the one-pass form was used, and within 1e-9 everywhere."""
    rng = np.random.default_rng(100 + seed)
    groups = []
    for _ in range(4):
        kind = rng.integers(0, 4)
        n = int(rng.integers(2, 200))
        if kind == 0:
            x = rng.lognormal(rng.uniform(-5, 10), rng.uniform(0.01, 3), n)
        elif kind == 1:
            x = rng.integers(1, 5, n).astype(float)
        elif kind == 2:
            x = 10.0 ** rng.uniform(-3, 8) * (1 + rng.uniform(0, 1e-3, n))
        else:
            x = rng.pareto(1.2, n) + 1e-3
        groups.append(x)
    df = frame(groups, rng)
    check_against_mpmath(df, run(df), 1e-9)
    one_pass = len(groups) - centred_groups(df)
    assert one_pass >= 1  # the ordinary shapes took the one-pass form


def test_theil_with_zero_values():
    """A zero value adds 0·ln 0 = 0 to Theil (its limit); the one-pass bound uses the smallest
    positive value. Reference: mpmath with the zero term left out."""
    rng = np.random.default_rng(23)
    x = np.concatenate([np.zeros(20), rng.lognormal(1.0, 1.0, 200)])
    df = pd.DataFrame({"g": 0, "x": x, "w": rng.uniform(0.5, 3.0, len(x))})
    got = run(df, "SELECT g, theil(x, w) FROM t GROUP BY g").iloc[0, 1]
    xs, ws = [mp.mpf(float(v)) for v in df.x], [mp.mpf(float(v)) for v in df.w]
    W = sum(ws)
    mu = sum(a * b for a, b in zip(xs, ws)) / W
    want = sum(b * (a / mu) * mp.log(a / mu) for a, b in zip(xs, ws) if a > 0) / W
    assert abs(mp.mpf(float(got)) - want) <= 2e-11 * want
    assert centred_groups(df, "SELECT g, theil(x, w) FROM t GROUP BY g") == 0
