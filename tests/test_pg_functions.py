"""gini(x[, w] ORDER BY x) and the moment aggregates registered in PostgreSQL (uneven/pg_functions.py,
uneven/pg_moments.py) on the matrix's
PostgreSQL server: values against the numpy reference (``uneven.reference``, itself checked against
brute force and exact fractions in test_reference.py) to 1e-9; the input policy (NULL skipped,
weight 0 ignored, negative weight and NaN refused, empty group NULL); rows out of order refused;
install recorded, idempotent, refusing a function it did not create; uninstall removes exactly it."""

from __future__ import annotations

import numpy as np
import pytest

import uneven
from conftest import make_groups
from engines import engine_or_skip
from uneven import reference as R
from uneven.engine.runner import translate_error
from uneven.errors import ExecutionError, InputDataError


@pytest.fixture(scope="module")
def pg():
    eng = engine_or_skip("postgres")
    data = make_groups()
    eng.load(data, "t_pgf")
    uneven.uninstall(eng.con)
    yield eng, data
    uneven.uninstall(eng.con)
    eng.close()


def close(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= 1e-9 * abs(b) + 1e-12


def test_gini_per_group_matches_the_reference(pg):
    eng, data = pg
    assert uneven.install(eng.con, measures=["gini"]) == ["_uv_gini_final", "_uv_gini_step", "_uv_gini_step_w", "gini"]
    rows = eng.con.execute('SELECT grp, gini(x, w ORDER BY x), gini(x ORDER BY x) FROM t_pgf GROUP BY grp').fetchall()
    assert len(rows) == 4
    for key, weighted, plain in rows:
        d = data[(data["grp"] == key) if key is not None else data["grp"].isna()]
        x = d[d["x"].notna()]
        xw = x[x["w"].notna()]
        assert close(weighted, R.gini(xw["x"].astype(float).to_numpy(), xw["w"].astype(float).to_numpy())), key
        assert close(plain, R.gini(x["x"].astype(float).to_numpy())), key
    # the compiled query on the same engine agrees
    q = uneven.query("SELECT grp, gini(x, w) AS g FROM t_pgf GROUP BY grp", eng.con)
    by_key = {r[0]: r[1] for r in rows}
    for _, r in q.iterrows():
        assert close(by_key[r["grp"] if isinstance(r["grp"], str) else None], r["g"])


def test_closed_forms_and_policy(pg):
    eng, _ = pg
    uneven.install(eng.con)
    one = lambda sql: eng.con.execute(sql).fetchone()[0]  # noqa: E731
    # fact of the trade: equal values give 0; one unit holding everything among n gives (n − 1)/n
    assert close(one("SELECT gini(v ORDER BY v) FROM (VALUES (5.0), (5.0), (5.0)) s(v)"), 0.0)
    assert close(one("SELECT gini(v ORDER BY v) FROM (VALUES (0.0), (0.0), (0.0), (8.0)) s(v)"), 3 / 4)
    # weighted = replicated rows (DESIGN.md: Σ wi wj |xi − xj| / (2 W² μ)); weight 0 and NULLs change nothing
    got = one("SELECT gini(v, w ORDER BY v) FROM (VALUES (1.0, 2.0), (3.0, 1.0), (7.0, 0.0), (NULL, 1.0), (4.0, NULL)) s(v, w)")
    assert close(got, R.gini(np.array([1.0, 1.0, 3.0])))
    # large values close together: centring keeps the digits (the shift by the minimum cancels)
    got = one("SELECT gini(v ORDER BY v) FROM (VALUES (1e12 + 1), (1e12 + 2), (1e12 + 3)) s(v)")
    assert close(got, R.gini(np.array([1.0, 2.0, 3.0]) + 1e12))
    # empty group and zero total: NULL
    assert one("SELECT gini(v ORDER BY v) FROM (VALUES (1.0)) s(v) WHERE v > 2") is None
    assert one("SELECT gini(v ORDER BY v) FROM (VALUES (0.0), (0.0)) s(v)") is None


@pytest.mark.parametrize("sql, error, text", [
    ("SELECT gini(v, w ORDER BY v) FROM (VALUES (1.0, -1.0)) s(v, w)", InputDataError,
     "negative weight in the weight argument of gini()"),
    ("SELECT gini(v ORDER BY v) FROM (VALUES (1.0), ('NaN'::float8)) s(v)", InputDataError,
     "NaN or infinite value in the value argument of gini()"),
    ("SELECT gini(v) FROM (VALUES (3.0), (1.0)) s(v)", ExecutionError, "write gini(x ORDER BY x)"),
])
def test_refusals(pg, sql, error, text):
    eng, _ = pg
    uneven.install(eng.con)
    with pytest.raises(Exception) as info:
        eng.con.execute(sql).fetchall()
    err = translate_error(info.value, engine="PostgreSQL")
    assert isinstance(err, error) and text in str(err), err


def test_install_is_recorded_and_removable(pg):
    eng, _ = pg
    uneven.install(eng.con)
    uneven.install(eng.con)  # again: replaces its own functions
    names = {r[0] for r in uneven.pg_functions.installed(eng.con)}
    measures = ("gini", "theil", "mld", "ge", "atkinson", "cv", "hhi")
    cuts = ("lorenz", "bottom_share", "top_share", "palma", "s80s20", "quantile_w", "percentile_ratio",
            "generalized_lorenz", "hoover")
    assert names == set(measures) | {f"_uv_{m}_{part}" for m in measures for part in ("step", "final")} | {
        f"_uv_{m}_step_w" for m in measures if m != "hhi"} | set(cuts) | {
        f"_uv_{m}_final{tail}" for m in cuts for tail in ("", "_w")} | {"_uv_point"}
    assert {r[2] for r in uneven.pg_functions.installed(eng.con)} == set(measures) | set(cuts) | {"cut"}
    assert sorted(uneven.uninstall(eng.con)) == sorted(names)
    assert uneven.pg_functions.installed(eng.con) == []
    count = eng.con.execute("SELECT count(*) FROM pg_proc WHERE proname = 'gini' "
                            "AND pronamespace = current_schema()::regnamespace").fetchone()[0]
    assert count == 0
    # a subset, and a measure that is not registered on PostgreSQL: a clear refusal
    assert "theil" in uneven.install(eng.con, measures=["theil"]) and {r[2] for r in uneven.pg_functions.installed(eng.con)} == {"theil"}
    with pytest.raises(uneven.UnevenError, match="not registered on PostgreSQL"):
        uneven.install(eng.con, measures=["lorenz_curve"])
    uneven.uninstall(eng.con)


def test_a_function_of_the_same_name_is_not_overwritten(pg):
    eng, _ = pg
    eng.con.execute("CREATE FUNCTION gini(a integer) RETURNS integer LANGUAGE sql AS 'SELECT a'")
    try:
        with pytest.raises(uneven.pg_functions.FunctionConflictError, match="did not create"):
            uneven.install(eng.con)
        assert eng.con.execute("SELECT gini(7)").fetchone()[0] == 7
    finally:
        eng.con.execute("DROP FUNCTION gini(integer)")
    assert "gini" in uneven.install(eng.con)  # once the other function is gone


# ---- the moment aggregates (uneven/pg_moments.py) ---------------------------------------------------
# call in PostgreSQL → the numpy reference (uneven.reference, checked against exact fractions and mpmath
# in test_reference.py / test_numerics.py) for x, w (w None: unweighted)
MOMENTS = [
    ("theil(x, w)", lambda x, w: R.theil(x, w)), ("theil(x)", lambda x, w: R.theil(x)),
    ("mld(x, w)", lambda x, w: R.mld(x, w)), ("mld(x)", lambda x, w: R.mld(x)),
    ("ge(x, 2, w)", lambda x, w: R.ge(x, 2, w)), ("ge(x, 0.5)", lambda x, w: R.ge(x, 0.5)),
    ("ge(x, -1, w)", lambda x, w: R.ge(x, -1, w)), ("ge(x, 0, w)", lambda x, w: R.ge(x, 0, w)),
    ("ge(x, 1, w)", lambda x, w: R.ge(x, 1, w)),
    ("atkinson(x, 0.5, w)", lambda x, w: R.atkinson(x, 0.5, w)), ("atkinson(x, 1, w)", lambda x, w: R.atkinson(x, 1, w)),
    ("atkinson(x, 2)", lambda x, w: R.atkinson(x, 2)), ("atkinson(x, 0, w)", lambda x, w: R.atkinson(x, 0, w)),
    ("cv(x, w)", lambda x, w: R.cv(x, w)), ("cv(x)", lambda x, w: R.cv(x)),
    ("hhi(x)", lambda x, w: R.hhi(x)),
]


def _group_rows(data, key):
    d = data[(data["grp"] == key) if key is not None else data["grp"].isna()]
    return d[d["x"].notna()]


def test_moment_aggregates_per_group_match_the_reference_and_the_compiled_query(pg):
    eng, data = pg
    uneven.install(eng.con)
    calls = ", ".join(f"{c} AS m{i}" for i, (c, _) in enumerate(MOMENTS))
    registered = eng.con.execute(f"SELECT grp, {calls} FROM t_pgf GROUP BY grp").fetchall()
    compiled = uneven.query(f"SELECT grp, {calls} FROM t_pgf GROUP BY grp", eng.con)
    assert len(registered) == 4 == len(compiled)
    by_key = {(r["grp"] if isinstance(r["grp"], str) else None): r for _, r in compiled.iterrows()}
    nulls = 0
    for key, *values in registered:
        d = _group_rows(data, key)
        xw = d[d["w"].notna()]
        x, w = xw["x"].astype(float).to_numpy(), xw["w"].astype(float).to_numpy()
        xu = d["x"].astype(float).to_numpy()
        for i, ((call, ref), got) in enumerate(zip(MOMENTS, values)):
            want = ref(x, w) if ", w)" in call else ref(xu, None)
            assert close(got, want), (key, call, got, want)
            other = by_key[key][f"m{i}"]
            assert close(got, None if other is None or other != other else float(other)), (key, call, got, other)
            nulls += got is None
    assert nulls >= 4  # the group with zeros: mld, ge(−1), ge(0), atkinson(1) are NULL there (domain)


def test_moment_aggregates_closed_forms_and_policy(pg):
    eng, _ = pg
    uneven.install(eng.con)
    one = lambda sql: eng.con.execute(sql).fetchone()[0]  # noqa: E731
    equal = "(VALUES (5.0, 1.0), (5.0, 2.0), (5.0, 3.0)) s(v, w)"
    # fact of the trade: equal values give 0 for every inequality measure
    for call in ("theil(v, w)", "mld(v)", "ge(v, 2, w)", "ge(v, -1)", "atkinson(v, 0.5, w)", "atkinson(v, 1)", "cv(v, w)"):
        assert abs(one(f"SELECT {call} FROM {equal}")) < 1e-12, call
    # fact of the trade: n equal firms give HHI = 10000 / n; one firm holding everything gives 10000
    assert close(one(f"SELECT hhi(v) FROM {equal}"), 10000 / 3)
    assert close(one("SELECT hhi(v) FROM (VALUES (0.0), (0.0), (7.0)) s(v)"), 10000.0)
    # handbook: one unit holding everything among n: Theil = ln n (zeros add 0·ln 0 = 0)
    assert close(one("SELECT theil(v) FROM (VALUES (0.0), (0.0), (0.0), (8.0)) s(v)"), float(np.log(4)))
    # weighted = replicated rows; weight 0 and NULLs change nothing
    got = one("SELECT ge(v, 2, w) FROM (VALUES (1.0, 2.0), (3.0, 1.0), (7.0, 0.0), (NULL, 1.0), (4.0, NULL)) s(v, w)")
    assert close(got, R.ge(np.array([1.0, 1.0, 3.0]), 2))
    # outside the domain, empty, total ≤ 0: NULL (never a row filter)
    for sql in ("SELECT theil(v) FROM (VALUES (-1.0), (4.0)) s(v)", "SELECT mld(v) FROM (VALUES (0.0), (4.0)) s(v)",
                "SELECT atkinson(v, 2) FROM (VALUES (0.0), (4.0)) s(v)", "SELECT cv(v) FROM (VALUES (-3.0), (1.0)) s(v)",
                "SELECT hhi(v) FROM (VALUES (-3.0), (5.0)) s(v)", "SELECT theil(v) FROM (VALUES (1.0)) s(v) WHERE v > 2",
                "SELECT ge(v, 2) FROM (VALUES (0.0), (0.0)) s(v)"):
        assert one(sql) is None, sql
    # values far apart in magnitude: the ratios to the first positive value keep every sum in range
    big = np.array([3e200, 1e200, 2e200])
    assert close(one("SELECT ge(v, 2) FROM (VALUES (3e200::float8), (1e200::float8), (2e200::float8)) s(v)"), R.ge(big, 2))
    assert close(one("SELECT cv(v) FROM (VALUES (3e-200::float8), (1e-200::float8), (2e-200::float8)) s(v)"), R.cv(np.array([3.0, 1.0, 2.0]) * 1e-200))


@pytest.mark.parametrize("sql, error, text", [
    ("SELECT theil(v, w) FROM (VALUES (1.0, -1.0)) s(v, w)", InputDataError, "negative weight in the weight argument of theil()"),
    ("SELECT cv(v) FROM (VALUES (1.0), ('NaN'::float8)) s(v)", InputDataError, "NaN or infinite value in the value argument of cv()"),
    ("SELECT mld(v, w) FROM (VALUES (1.0, 'Infinity'::float8)) s(v, w)", InputDataError,
     "NaN or infinite weight in the weight argument of mld()"),
    ("SELECT atkinson(v, -0.5) FROM (VALUES (1.0)) s(v)", ExecutionError, "eps must be a finite number >= 0"),
    ("SELECT ge(v, v) FROM (VALUES (1.0), (2.0)) s(v)", ExecutionError, "the same for every row of a group"),
])
def test_moment_refusals(pg, sql, error, text):
    eng, _ = pg
    uneven.install(eng.con)
    with pytest.raises(Exception) as info:
        eng.con.execute(sql).fetchall()
    err = translate_error(info.value, engine="PostgreSQL")
    assert isinstance(err, error) and text in str(err), err
