"""gini(x[, w] ORDER BY x) registered in PostgreSQL (uneven/pg_functions.py) on the matrix's
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
    assert uneven.install(eng.con) == ["_uv_gini_final", "_uv_gini_step", "_uv_gini_step_w", "gini"]
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
    assert names == {"gini", "_uv_gini_step", "_uv_gini_step_w", "_uv_gini_final"}
    assert sorted(uneven.uninstall(eng.con)) == sorted(names)
    assert uneven.pg_functions.installed(eng.con) == []
    count = eng.con.execute("SELECT count(*) FROM pg_proc WHERE proname = 'gini' "
                            "AND pronamespace = current_schema()::regnamespace").fetchone()[0]
    assert count == 0


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
