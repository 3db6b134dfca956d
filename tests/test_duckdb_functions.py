"""Measures registered inside DuckDB (uneven.install): aggregate and table macros against the
compiler (1e-12) and the numpy reference (1e-9), persistence in a database file read by a process
that never imports uneven, install.sql kept up to date, and errors that name function and argument."""

from __future__ import annotations

import ast
import math
import subprocess
import sys
import textwrap

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from conftest import make_groups
from roundtrip import emission_checked
from test_measures_engines import CASES, ENTITY_CASES, _expected, close
from uneven.catalog import MEASURES
from uneven.duckdb_functions import install_sql, installed, uninstall
from uneven.duckdb_functions.install import INSTALL_SQL, FunctionConflictError, has_aggregate_macro, has_macros

# (template, reference, weighted); entity measures take no weight; lorenz_curve has no macro, nor do
# the measures on passes a macro cannot express (has_aggregate_macro; see docs)
AGG_CASES = [(t, r, wt) for t, r in CASES + ENTITY_CASES
             if has_aggregate_macro(MEASURES[t.split("(")[0]])
             for wt in ((False,) if t.startswith(("hhi", "cr")) else (False, True))]


@pytest.fixture(scope="module")
def con():
    df = make_groups()
    extra = pd.DataFrame({"grp": ["zeros"] * 3 + ["nulls"] * 2, "x": [0.0, 0.0, 0.0, None, None],
                          "w": [1.0, 2.0, 1.0, 1.0, 1.0], "e": [1, 2, 3, 1, 2]})
    extra["x"] = extra["x"].astype("Float64")
    extra["w"] = extra["w"].astype("Float64")
    df = pd.concat([df, extra], ignore_index=True)
    c = duckdb.connect()
    c.register("frame", df)
    c.execute("CREATE TABLE t AS SELECT * FROM frame")
    c.unregister("frame")
    uneven.install(c)
    yield c, df
    c.close()


def _rows(result: pd.DataFrame) -> dict:
    return {(None if pd.isna(k) else k): (None if v is None or (isinstance(v, float) and math.isnan(v)) else v)
            for k, v in zip(result["grp"], result["v"])}


def _agree(a, b, tol=1e-12) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= tol * max(1.0, abs(b))


@pytest.mark.parametrize("template,ref,weighted", AGG_CASES,
                         ids=[t + ("-weighted" if wt else "") for t, _, wt in AGG_CASES])
def test_aggregate_form_equals_compiler_and_reference(con, template, ref, weighted):
    c, df = con
    entity = template.startswith(("hhi", "cr"))
    call = template.format(w=", w" if weighted else "")
    sql = f"SELECT grp, {call} AS v FROM t GROUP BY grp"
    registered = _rows(c.execute(sql).fetchdf())  # plain DuckDB: the macro
    compiled = _rows(uneven.query(sql, con=c))  # the compiler rewrites the call first
    assert set(registered) == set(compiled)
    for key in compiled:
        assert _agree(registered[key], compiled[key]), (key, registered[key], compiled[key])
    expected = _expected(df, ref, weighted, entity, "grp")  # numpy reference (uneven.reference)
    for key, want in expected.items():
        assert close(registered[None if pd.isna(key) else key], want), (key, registered, want)


TABLE_CASES = [("gini", [], "w"), ("top_share", [0.1], "w"), ("quantile_w", [0.5], None), ("ge", [0.0], "w"),
               ("ge", [2.0], None), ("atkinson", [1.0], "w"), ("cv", [], "w"), ("hoover", [], None),
               ("cr", [2], "e"), ("hhi", [], None), ("percentile_ratio", [0.9, 0.1], "w"), ("theil", [], "w"),
               # the relative poverty line has the table form only (aggregate.OrderedListContext.median_row)
               ("below_line_share", [0.6], "w"), ("median_gap", [0.6], None), ("fgt_relative", [2.0, 0.5], "w"),
               ("fgt", [1.0, 12.0], "w"), ("wolfson", [], None)]


@pytest.mark.parametrize("name,params,trailing", TABLE_CASES, ids=[f"{c[0]}{c[1]}{c[2]}" for c in TABLE_CASES])
def test_table_form_equals_compiler(con, name, params, trailing):
    c, _ = con
    args = ", ".join([repr(p) for p in params] + (["NULL"] if trailing is None else [f"'{trailing}'"]))
    got = c.execute(f"SELECT grp, {name} AS v FROM {name}_by('t', 'x', {args}, ['grp'])").fetchdf()
    call_args = ", ".join(["x", *map(str, params)] + ([trailing] if trailing else []))
    want = uneven.query(f"SELECT grp, {name}({call_args}) AS v FROM t GROUP BY grp", con=c)
    got, want = _rows(got), _rows(want)
    assert set(got) == set(want)
    for key in want:
        assert _agree(got[key], want[key]), (key, got[key], want[key])


def test_table_form_several_keys(con):
    c, _ = con
    got = c.execute("SELECT * FROM gini_by('t', 'x', 'w', ['grp', 'e']) ORDER BY grp, e").fetchdf()
    want = uneven.query("SELECT grp, e, gini(x, w) AS gini FROM t GROUP BY grp, e ORDER BY grp, e", con=c)
    assert list(got.columns) == ["grp", "e", "gini"]
    assert np.allclose(got["gini"].to_numpy(float), want["gini"].to_numpy(float), rtol=1e-12, equal_nan=True)


def test_every_measure_but_lorenz_curve_has_both_forms(con):
    assert "equivalised" in {n for n, _, _ in installed(con[0])}  # the scalar, see test_equivalence.py
    c, _ = con
    names = {n for n, _, _ in installed(c)}
    for m in uneven.measures():
        if not has_macros(MEASURES[m["name"]]):  # standard errors, decompositions …: compiler only
            assert m["name"] not in names
            continue
        if m["name"] == "lorenz_curve":  # k shapes the plan (k+1 grid points): no macro (see docs)
            assert m["name"] not in names
            continue
        if m["name"] in ("below_line_share", "median_gap", "fgt_relative"):  # the line needs the median
            assert m["name"] not in names and f"{m['name']}_by" in names  # on every row: table form only
            continue
        assert m["name"] in names and f"{m['name']}_by" in names


def test_persists_in_a_file_for_a_process_without_uneven(tmp_path):
    path = tmp_path / "survey.duckdb"
    c = duckdb.connect(str(path))
    c.execute("CREATE TABLE h AS SELECT i % 3 AS region, (i + 1)::DOUBLE AS income, 1 + i % 2 AS w "
              "FROM range(30) r(i)")
    uneven.install(c)
    want = uneven.query("SELECT region, gini(income, w) AS g, top_share(income, 0.1) AS t FROM h "
                         "GROUP BY region ORDER BY region", con=c)
    c.close()
    code = textwrap.dedent(f"""
        import sys, duckdb
        c = duckdb.connect({str(path)!r}, read_only=True)
        rows = c.execute("SELECT region, gini(income, w), top_share(income, 0.1) FROM h GROUP BY region ORDER BY region").fetchall()
        print(repr([list(r) for r in rows]))
        print('uneven' in sys.modules)
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         env={"PATH": "/usr/bin:/bin", "PYTHONPATH": ""}).stdout.splitlines()
    rows = ast.literal_eval(out[0])
    assert out[1] == "False"
    assert np.allclose([r[1] for r in rows], want["g"], rtol=1e-12)
    assert np.allclose([r[2] for r in rows], want["t"], rtol=1e-12)


def test_install_sql_is_up_to_date_and_runs_in_plain_duckdb():
    with emission_checked():  # every macro's text parsed back gives the tree it was printed from
        assert INSTALL_SQL.read_text(encoding="utf-8") == install_sql(), \
            "sql/duckdb/install.sql is stale: run python -m uneven.duckdb_functions"
    c = duckdb.connect()
    for statement in INSTALL_SQL.read_text(encoding="utf-8").split(";\n"):
        if statement.strip() and not statement.strip().startswith("--") or "CREATE" in statement:
            c.execute(statement)
    # equal values: Gini 0; one unit holds everything among 4: (n-1)/n = 0.75 (facts of the trade)
    assert c.execute("SELECT gini(x) FROM (VALUES (5), (5), (5)) v(x)").fetchone()[0] == pytest.approx(0, abs=1e-15)
    assert c.execute("SELECT gini(x) FROM (VALUES (0), (0), (0), (8)) v(x)").fetchone()[0] == pytest.approx(0.75, rel=1e-9)


def test_install_refuses_to_overwrite_a_users_macro_and_uninstall_drops_only_its_own():
    c = duckdb.connect()
    c.execute("CREATE MACRO gini(a) AS 42")
    c.execute("CREATE MACRO my_own(a) AS a + 1")
    with pytest.raises(FunctionConflictError, match="gini"):
        uneven.install(c)
    assert c.execute("SELECT gini(1)").fetchone()[0] == 42  # untouched
    uneven.install(c, measures=["theil"])
    uneven.install(c, measures=["theil"])  # again: its own macros are replaced quietly
    uneven.install(c, replace=True)
    assert c.execute("SELECT gini(x) FROM (VALUES (1), (1)) v(x)").fetchone()[0] == 0
    dropped = uninstall(c)
    assert "gini" in dropped and "theil_by" in dropped
    assert c.execute("SELECT my_own(1)").fetchone()[0] == 2
    assert not c.execute("SELECT count(*) FROM duckdb_functions() WHERE function_name = 'gini' "
                         "AND NOT internal").fetchone()[0]


@pytest.mark.parametrize("sql,words", [
    ("SELECT gini(x, w) FROM (VALUES (1.0, -1.0), (2.0, 1.0)) v(x, w)", ["negative weight", "w", "gini"]),
    ("SELECT gini(x, w) FROM (VALUES (1.0, 'a'), (2.0, 'b')) v(x, w)", ["gini", "weight w", "text"]),
    ("SELECT top_share(x, 1.5) FROM (VALUES (1.0), (2.0)) v(x)", ["top_share", "p", "fraction"]),
    ("SELECT cr(x, 0) FROM (VALUES (1.0), (2.0)) v(x)", ["cr", "k", "whole number"]),
    ("SELECT gini(x, 1, 2, 3) FROM (VALUES (1.0)) v(x)", ["gini"]),
    ("SELECT * FROM gini_by('t', 'x', 'w', ['grp']) WHERE gini < 0 AND x_by(1)", ["x_by"]),
])
def test_bad_input_errors_name_function_and_argument(con, sql, words):
    c, _ = con
    with pytest.raises(duckdb.Error) as err:
        c.execute(sql).fetchall()
    for word in words:
        assert word in str(err.value)


def test_null_for_undefined_groups_as_the_compiler(con):
    c, _ = con
    got = c.execute("SELECT grp, gini(x) AS g, theil(x, w) AS t, cv(x) AS c FROM t WHERE grp IN ('zeros', 'nulls') "
                    "GROUP BY grp ORDER BY grp").fetchall()
    assert got == [("nulls", None, None, None), ("zeros", None, None, None)]


# every measure with a macro and numeric parameters, each parameter in turn made volatile
# (lorenz_curve has none: its grid needs the number of points when the plan is built)
PARAMETERIZED = [m for m in MEASURES.values() if has_macros(m) and m.params and m.name != "lorenz_curve"]


def _args(measure, volatile: int) -> str:
    ok = {"fraction": "0.3", "count": "2"}
    return ", ".join("random()" if i == volatile else ok.get(p.kind, "0.5") for i, p in enumerate(measure.params))


@pytest.mark.parametrize("measure", PARAMETERIZED, ids=[m.name for m in PARAMETERIZED])
def test_a_volatile_parameter_stops_the_macro_naming_it(con, measure):
    # the compiled route refuses random() as a parameter (it is not a constant); the macros stop too,
    # in the aggregate and the table form, naming the function and the parameter
    c, _ = con
    for i, p in enumerate(measure.params):
        args = _args(measure, i)
        aggregate = (f"SELECT grp, {measure.name}(x, {args}) FROM t GROUP BY grp",
                     f"SELECT {measure.name}(x, {args}) FROM t WHERE grp = 'g1'")
        # the relative poverty lines have the table form only (install.has_aggregate_macro)
        for sql in (aggregate if has_aggregate_macro(measure) else ()) + (
                f"SELECT * FROM {measure.name}_by('t', 'x', {args}, NULL, ['grp'])",):
            with pytest.raises(duckdb.Error) as err:
                c.execute(sql).fetchall()
            assert f"{measure.name}(): {p.name} must be a numeric constant" in str(err.value), sql
        with pytest.raises(uneven.UnevenError, match=f"{measure.name}\\(\\): {p.name} must be a numeric constant"):
            uneven.compile(f"SELECT {measure.name}(x, {args}) FROM t")


def test_a_parameter_constant_per_group_is_accepted_by_the_macros(con):
    # a door difference by construction (docs/registered_functions.md): a column that the query groups
    # by is one value per group, so the macro evaluates it per group; the compiled route takes
    # constants only. The values equal the macro's own at the literal parameter of each group.
    c, _ = con
    got = c.execute("SELECT grp, p, top_share(x, p, w) FROM (SELECT *, CASE WHEN grp = 'g0' THEN 0.1 ELSE 0.3 END AS p "
                    "FROM t) GROUP BY grp, p ORDER BY grp").fetchall()
    for grp, p, v in got:
        lit = c.execute(f"SELECT top_share(x, {p}, w) FROM t WHERE grp IS NOT DISTINCT FROM ?", [grp]).fetchall()[0][0]
        assert _agree(v, lit), (grp, p, v, lit)
    # a column that varies within the group is refused by DuckDB's binder before anything runs
    with pytest.raises(duckdb.BinderException, match="must appear in the GROUP BY"):
        c.execute("SELECT grp, top_share(x, x / 100) FROM t GROUP BY grp").fetchall()


def test_a_group_over_the_list_budget_stops_and_points_to_the_table_form():
    # the list forms hold a group in memory outside DuckDB's memory_limit: a group with more rows than
    # the budget stops with our error (naming the function and its table form) before the lambdas run;
    # the budget is lowered here with the variable instead of using a large group
    c = duckdb.connect()
    c.execute("CREATE TABLE b AS SELECT i % 2 AS grp, CAST(1 + i AS DOUBLE) AS x, CAST(1 + i % 3 AS DOUBLE) AS w, "
              "i % 7 AS e FROM range(101) r(i)")  # group 0: 51 rows, group 1: 50 rows
    uneven.install(c)
    c.execute("SET VARIABLE uneven_list_rows = 50")
    for call, form in [("gini(x, w)", "gini_by("), ("top_share(x, 0.1)", "top_share_by("), ("cv(x, w)", "cv_by("),
                       ("hhi(x, e)", "hhi_by("), ("cr(x, 2)", "cr_by(")]:
        with pytest.raises(duckdb.Error) as err:
            c.execute(f"SELECT grp, {call} FROM b GROUP BY grp").fetchall()
        message = str(err.value)
        assert f"{call.split('(')[0]}(): a group of 51 rows" in message and form in message, message
        assert "SET VARIABLE uneven_list_rows" in message
        # the group within the budget is measured as usual
        assert c.execute(f"SELECT {call} FROM b WHERE grp = 1").fetchone()[0] is not None
    # a moment measure keeps a few sums per group: no budget. fgt(x, 0, line) is the weighted share
    # below the line (the headcount ratio, common practice), counted here directly
    frame = c.execute("SELECT grp, x, w FROM b").fetchdf()
    for grp, got in c.execute("SELECT grp, fgt(x, 0, 30, w) FROM b GROUP BY grp").fetchall():
        part = frame[frame["grp"] == grp]
        assert got == pytest.approx(part["w"][part["x"] < 30].sum() / part["w"].sum(), rel=1e-12)
    # 0 turns the budget off: the numbers are the numpy reference's (uneven.reference, tested against
    # closed forms and exact fractions in test_reference.py)
    c.execute("SET VARIABLE uneven_list_rows = 0")
    rows = c.execute("SELECT grp, gini(x, w) FROM b GROUP BY grp ORDER BY grp").fetchall()
    for grp, got in rows:
        part = frame[frame["grp"] == grp]
        assert got == pytest.approx(uneven.reference.gini(part["x"].to_numpy(), part["w"].to_numpy()), rel=1e-12)
    c.close()


def test_the_list_budget_follows_memory_limit():
    c = duckdb.connect()
    uneven.install(c, measures=["gini"])
    c.execute("SET memory_limit = '40MB'")  # DuckDB prints it as 38.1 MiB
    assert c.execute("SELECT current_setting('memory_limit')").fetchone()[0] == "38.1 MiB"
    # the budget is memory_limit / bytes per row of the form (duckdb_functions/aggregate.py)
    assert c.execute("SELECT _uv_list_budget(240)").fetchone()[0] == pytest.approx(38.1 * 2 ** 20 / 240)
    with pytest.raises(duckdb.Error, match="gini\\(\\): a group of 250000 rows .* memory_limit = 38.1 MiB "
                                           "allows 166461 rows"):
        c.execute("SELECT gini(i) FROM range(250000) r(i)").fetchall()
    # a group of 1000 rows is within it: 1..1000 has Gini (n + 1) / (3n) - ... = (n - 1) / (3n) (uniform
    # integers, handbook closed form for 1..n, from memory; checked here by the pairwise definition)
    n = 1000
    pairwise = sum(abs(i - j) for i in range(1, n + 1) for j in range(1, n + 1)) / (2 * n * n * (n + 1) / 2)
    assert c.execute(f"SELECT gini(i + 1) FROM range({n}) r(i)").fetchone()[0] == pytest.approx(pairwise, rel=1e-12)
    assert pairwise == pytest.approx((n - 1) / (3 * n), rel=1e-12)
    c.close()


def _entity_frame() -> pd.DataFrame:
    """Groups that exercise the entity forms: one entity, two, many (with zero values), tied totals,
    NULL entities and values, a negative entity total (NULL), mixed signs with a positive total."""
    rng = np.random.default_rng(18)
    parts = [
        pd.DataFrame({"grp": "one", "x": [1.5, 2.5, 4.0], "e": ["a", "a", "a"]}),
        pd.DataFrame({"grp": "two", "x": [3.0, 1.0, 2.0, 0.0], "e": ["b", "a", "a", "b"]}),
        pd.DataFrame({"grp": "many", "x": np.where(rng.random(3000) < 0.1, 0.0, rng.lognormal(1.0, 1.5, 3000)),
                      "e": [f"f{i}" for i in rng.integers(0, 700, 3000)]}),
        # four entities of total 6 and two of total 2: cr(x, 3, e) cuts through the tie
        pd.DataFrame({"grp": "ties", "x": [1.0, 5.0, 2.0, 4.0, 3.0, 3.0, 6.0, 2.0, 1.0, 1.0],
                      "e": ["p", "p", "q", "q", "r", "r", "s", "t", "u", "u"]}),
        pd.DataFrame({"grp": "nulls", "x": [1.0, None, 4.0, 2.0, 7.0, None],
                      "e": ["a", "a", None, "b", None, "c"]}),
        pd.DataFrame({"grp": "zeros", "x": [0.0, 0.0, 0.0], "e": ["a", "b", "b"]}),
        pd.DataFrame({"grp": "negative", "x": [5.0, -2.0, -1.0, 3.0], "e": ["a", "b", "b", "c"]}),
        pd.DataFrame({"grp": "mixed", "x": [5.0, -2.0, 3.0, 1.0, 4.0], "e": ["a", "a", "b", "b", "c"]}),
    ]
    df = pd.concat(parts, ignore_index=True)
    df["x"] = df["x"].astype("Float64")
    return df


@pytest.mark.parametrize("call,ref", [("hhi(x, e)", lambda x, e: uneven.reference.hhi(x, e)),
                                      ("cr(x, 1, e)", lambda x, e: uneven.reference.cr(x, 1, e)),
                                      ("cr(x, 3, e)", lambda x, e: uneven.reference.cr(x, 3, e)),
                                      ("cr(x, 50, e)", lambda x, e: uneven.reference.cr(x, 50, e))])
@pytest.mark.parametrize("key_type", ["varchar", "integer"])
def test_entity_forms_equal_compiler_and_reference(call, ref, key_type):
    # the entity totals of the macro (running sums restarting at each entity) against the compiled
    # entity pass (GROUP BY entity, 1e-12) and the numpy reference (uneven.reference: exact sums per
    # entity; rows with a NULL value or entity left out, as the SQL aggregate convention skips them)
    df = _entity_frame()
    c = duckdb.connect()
    c.register("frame", df)
    entity = "e" if key_type == "varchar" else "CAST(hash(e) % 100000 AS INTEGER)"
    c.execute(f"CREATE TABLE t AS SELECT grp, x, {entity} AS e FROM frame")
    c.unregister("frame")
    uneven.install(c)
    sql = f"SELECT grp, {call} AS v FROM t GROUP BY grp"
    registered = _rows(c.execute(sql).fetchdf())
    compiled = _rows(uneven.query(sql, con=c))
    assert set(registered) == set(compiled) == set(df["grp"])
    for key in compiled:
        assert _agree(registered[key], compiled[key]), (key, registered[key], compiled[key])
    table = c.execute("SELECT grp, x, e FROM t WHERE x IS NOT NULL AND e IS NOT NULL").fetchdf()
    for key in compiled:
        part = table[table["grp"] == key]
        want = ref(part["x"].to_numpy(float), part["e"].to_list()) if len(part) else None
        assert _agree(registered[key], want), (key, registered[key], want)
    # the outcomes the groups were built for: NULL without a positive total or with a negative entity
    assert registered["zeros"] is None and registered["negative"] is None and registered["mixed"] is not None
    c.close()


def test_entity_totals_restart_at_each_entity():
    # _uv_segment_scan against plain numpy: the running sum of each run of equal keys (np.cumsum per
    # run), on runs of length 1 to 40 so that every doubling stride crosses run boundaries
    rng = np.random.default_rng(7)
    lengths = rng.integers(1, 41, 300)
    keys = np.repeat(np.arange(lengths.size), lengths)
    values = rng.normal(size=keys.size)
    c = duckdb.connect()
    uneven.install(c, measures=["hhi"])
    got = c.execute("SELECT _uv_segment_scan(?::DOUBLE[], ?::BIGINT[], ?)",
                    [values.tolist(), keys.tolist(), int(keys.size)]).fetchone()[0]
    starts = np.concatenate([[0], np.cumsum(lengths)[:-1]])
    want = np.concatenate([np.cumsum(values[s:s + n]) for s, n in zip(starts, lengths)])
    assert np.allclose(got, want, rtol=1e-12, atol=1e-12)
    # one element and none
    assert c.execute("SELECT _uv_segment_scan([2.5], [1], 1)").fetchone()[0] == [2.5]
    assert c.execute("SELECT _uv_segment_scan([]::DOUBLE[], []::INTEGER[], 0)").fetchone()[0] == []
    c.close()
