"""The cut measures registered in PostgreSQL as ordered-set aggregates (uneven/pg_cuts.py, installed by
uneven/pg_functions.py): lorenz, bottom_share, top_share, palma, s80s20, quantile_w, percentile_ratio,
unweighted (ORDER BY x) and weighted (ORDER BY (x, w)), on the matrix's PostgreSQL server.

Values per group (a NULL group key included) against the numpy reference (``uneven.reference``,
itself checked against exact fractions and brute force in test_reference.py) and against the compiled
query on the same connection, to 1e-9; ties in any order, zero weights and NULLs change nothing; the
input policy's refusals; install recorded, uninstall removing every function and the point type."""

from __future__ import annotations

from fractions import Fraction

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
    eng.load(data, "t_pgc")
    uneven.uninstall(eng.con)
    uneven.install(eng.con)
    yield eng, data
    uneven.uninstall(eng.con)
    eng.close()


def close(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= 1e-9 * abs(b) + 1e-12


# (registered call with {arg} standing for `x` or `(x, w)`, compiled call with {w} standing for `` or `, w`,
#  reference taking x, w)
CUTS = [
    ("lorenz(0.3)", "lorenz(x, 0.3{w})", lambda x, w: R.lorenz(x, 0.3, w)),
    ("bottom_share(0.4)", "bottom_share(x, 0.4{w})", lambda x, w: R.bottom_share(x, 0.4, w)),
    ("bottom_share(0)", "bottom_share(x, 0{w})", lambda x, w: R.bottom_share(x, 0.0, w)),
    ("top_share(0.1)", "top_share(x, 0.1{w})", lambda x, w: R.top_share(x, 0.1, w)),
    ("top_share(1)", "top_share(x, 1{w})", lambda x, w: R.top_share(x, 1.0, w)),
    ("palma()", "palma(x{w})", lambda x, w: R.palma(x, w)),
    ("s80s20()", "s80s20(x{w})", lambda x, w: R.s80s20(x, w)),
    ("quantile_w(0.5)", "quantile_w(x, 0.5{w})", lambda x, w: R.quantile_w(x, 0.5, w)),
    ("quantile_w(0.37)", "quantile_w(x, 0.37{w})", lambda x, w: R.quantile_w(x, 0.37, w)),
    ("percentile_ratio(0.9, 0.1)", "percentile_ratio(x, 0.9, 0.1{w})", lambda x, w: R.percentile_ratio(x, 0.9, 0.1, w)),
    ("generalized_lorenz(0.5)", "generalized_lorenz(x, 0.5{w})", lambda x, w: R.generalized_lorenz(x, 0.5, w)),
    ("hoover()", "hoover(x{w})", lambda x, w: R.hoover(x, w)),
]


def _group_rows(data, key):
    d = data[(data["grp"] == key) if key is not None else data["grp"].isna()]
    return d[d["x"].notna()]


@pytest.mark.parametrize("weighted", [True, False], ids=["weighted", "unweighted"])
def test_per_group_against_the_reference_and_the_compiled_query(pg, weighted):
    eng, data = pg
    arg, w = ("(x, w)", ", w") if weighted else ("x", "")
    registered = eng.con.execute("SELECT grp, " + ", ".join(
        f"{call} WITHIN GROUP (ORDER BY {arg})" for call, _, _ in CUTS) + " FROM t_pgc GROUP BY grp").fetchall()
    compiled = uneven.query("SELECT grp, " + ", ".join(
        f"{c.format(w=w)} AS m{i}" for i, (_, c, _) in enumerate(CUTS)) + " FROM t_pgc GROUP BY grp", eng.con)
    assert len(registered) == 4 == len(compiled)  # the NULL key is a group of its own
    by_key = {(r["grp"] if isinstance(r["grp"], str) else None): r for _, r in compiled.iterrows()}
    assert None in by_key
    for key, *values in registered:
        d = _group_rows(data, key)
        if weighted:
            d = d[d["w"].notna()]
        x = d["x"].astype(float).to_numpy()
        wv = d["w"].astype(float).to_numpy() if weighted else None
        for i, ((call, _, ref), got) in enumerate(zip(CUTS, values)):
            assert close(got, ref(x, wv)), (key, call, got, ref(x, wv))
            other = by_key[key][f"m{i}"]
            assert close(got, None if other is None or other != other else float(other)), (key, call, got, other)


def one(eng, sql):
    return eng.con.execute(sql).fetchone()[0]


def test_exact_values_ties_zero_weights_and_nulls(pg):
    eng, _ = pg
    # exact fractions by hand (DESIGN.md's contract): values 1, 1, 1, 1, 6: T = 10; the top fifth holds 6
    five = "(VALUES (1.0), (1.0), (6.0), (1.0), (1.0)) s(v)"
    assert close(one(eng, f"SELECT top_share(0.2) WITHIN GROUP (ORDER BY v) FROM {five}"), float(Fraction(6, 10)))
    # the bottom 30%: 1.5 rows of 1 → 1.5 / 10; the bottom fifth 1/10, so S80/S20 = 0.6 / 0.1 = 6
    assert close(one(eng, f"SELECT bottom_share(0.3) WITHIN GROUP (ORDER BY v) FROM {five}"), float(Fraction(3, 20)))
    assert close(one(eng, f"SELECT s80s20() WITHIN GROUP (ORDER BY v) FROM {five}"), 6.0)
    # ties with different weights in any input order give the same value
    rows = [(2.0, 1.0), (2.0, 3.0), (5.0, 2.0), (2.0, 0.5), (9.0, 1.0), (5.0, 4.0)]
    results = set()
    for perm in (rows, rows[::-1], rows[2:] + rows[:2]):
        values = ", ".join(f"({a}, {b})" for a, b in perm)
        results.add(round(one(eng, f"SELECT lorenz(0.45) WITHIN GROUP (ORDER BY (v, w)) FROM (VALUES {values}) s(v, w)"),
                          14))
    x, w = np.array([r[0] for r in rows]), np.array([r[1] for r in rows])
    assert len(results) == 1 and close(results.pop(), R.lorenz(x, 0.45, w))
    # weighted = replicated rows; weight 0, NULL values and NULL weights change nothing
    got = one(eng, "SELECT top_share(0.5) WITHIN GROUP (ORDER BY (v, w)) FROM (VALUES (1.0, 2.0), (3.0, 1.0), "
                   "(7.0, 0.0), (NULL, 1.0), (4.0, NULL)) s(v, w)")
    assert close(got, R.top_share(np.array([1.0, 1.0, 3.0]), 0.5))
    # weighted inverted CDF with integer weights: C/W = 2/4 reaches 0.5 at the first value
    got = one(eng, "SELECT quantile_w(0.5) WITHIN GROUP (ORDER BY (v, w)) FROM (VALUES (1.0, 2), (3.0, 1), (8.0, 1)) s(v, w)")
    assert got == 1.0
    # Hoover (handbook): the share of the total to move for equality; 1, 1, 1, 1, 6: μ = 2, ½ Σ|x − μ| / T = 4/10
    assert close(one(eng, f"SELECT hoover() WITHIN GROUP (ORDER BY v) FROM {five}"), float(Fraction(4, 10)))
    # integer and numeric columns are accepted (implicit casts to double precision)
    assert close(one(eng, "SELECT palma() WITHIN GROUP (ORDER BY (v, w)) FROM (VALUES (1, 1), (2, 1), (3, 1), (4, 1), "
                          "(5, 1), (6, 1), (7, 1), (8, 1), (9, 1), (10, 1)) s(v, w)"), R.palma(np.arange(1.0, 11.0)))


def test_empty_and_undefined_groups_are_null(pg):
    eng, _ = pg
    for sql in ("SELECT top_share(0.1) WITHIN GROUP (ORDER BY v) FROM (VALUES (1.0)) s(v) WHERE v > 2",
                "SELECT quantile_w(0.5) WITHIN GROUP (ORDER BY (v, w)) FROM (VALUES (1.0, 0.0)) s(v, w)",
                "SELECT lorenz(0.5) WITHIN GROUP (ORDER BY v) FROM (VALUES (0.0), (0.0)) s(v)",
                "SELECT bottom_share(0.5) WITHIN GROUP (ORDER BY v) FROM (VALUES (-4.0), (1.0)) s(v)",
                # the bottom 40% hold 0: palma has no value
                "SELECT palma() WITHIN GROUP (ORDER BY v) FROM (VALUES (0.0), (0.0), (0.0), (0.0), (5.0)) s(v)",
                "SELECT percentile_ratio(0.9, 0.1) WITHIN GROUP (ORDER BY v) FROM (VALUES (0.0), (3.0)) s(v)"):
        assert one(eng, sql) is None, sql
    # negative values are allowed while the total is positive (the shares leave [0, 1])
    got = one(eng, "SELECT bottom_share(0.5) WITHIN GROUP (ORDER BY v) FROM (VALUES (-1.0), (4.0)) s(v)")
    assert close(got, R.bottom_share(np.array([-1.0, 4.0]), 0.5)) and got < 0


@pytest.mark.parametrize("sql, error, text", [
    ("SELECT top_share(0.1) WITHIN GROUP (ORDER BY (v, w)) FROM (VALUES (1.0, -1.0), (2.0, 1.0)) s(v, w)",
     InputDataError, "negative weight in the weight argument of top_share()"),
    ("SELECT palma() WITHIN GROUP (ORDER BY v) FROM (VALUES (1.0), ('NaN'::float8)) s(v)", InputDataError,
     "NaN or infinite value in the value argument of palma()"),
    ("SELECT quantile_w(0.5) WITHIN GROUP (ORDER BY (v, w)) FROM (VALUES (1.0, 'Infinity'::float8)) s(v, w)",
     InputDataError, "NaN or infinite weight in the weight argument of quantile_w()"),
    ("SELECT lorenz(1.5) WITHIN GROUP (ORDER BY v) FROM (VALUES (1.0)) s(v)", ExecutionError,
     "lorenz(): p must be a fraction between 0 and 1"),
    ("SELECT percentile_ratio(0.9, -0.1) WITHIN GROUP (ORDER BY v) FROM (VALUES (1.0)) s(v)", ExecutionError,
     "percentile_ratio(): lo must be a fraction between 0 and 1"),
])
def test_refusals(pg, sql, error, text):
    eng, _ = pg
    with pytest.raises(Exception) as info:
        eng.con.execute(sql).fetchall()
    err = translate_error(info.value, engine="PostgreSQL")
    assert isinstance(err, error) and text in str(err), err


def test_subset_install_and_uninstall(pg):
    eng, _ = pg
    uneven.uninstall(eng.con)
    created = uneven.install(eng.con, measures=["palma", "theil"])
    assert set(created) == {"palma", "_uv_palma_final", "_uv_palma_final_w", "_uv_point", "theil", "_uv_theil_final",
                            "_uv_theil_step", "_uv_theil_step_w"}
    assert close(one(eng, "SELECT palma() WITHIN GROUP (ORDER BY x) FROM t_pgc WHERE grp = 'g0'"),
                 float(uneven.query("SELECT palma(x) AS v FROM t_pgc WHERE grp = 'g0'", eng.con)["v"][0]))
    # installing another cut measure keeps the point type and the first one working
    uneven.install(eng.con, measures=["top_share"])
    assert one(eng, "SELECT palma() WITHIN GROUP (ORDER BY (x, w)) FROM t_pgc WHERE grp = 'g0'") is not None
    removed = uneven.uninstall(eng.con)
    assert {"palma", "top_share", "_uv_point"} <= set(removed)
    left = eng.con.execute("SELECT count(*) FROM pg_proc WHERE proname IN ('palma', 'top_share', '_uv_palma_final') "
                           "AND pronamespace = current_schema()::regnamespace").fetchone()[0]
    assert left == 0
    assert one(eng, "SELECT to_regtype('_uv_point')") is None
    uneven.install(eng.con)  # the module's other tests expect everything installed
