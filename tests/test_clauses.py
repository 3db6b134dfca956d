"""Every clause of a scope with measure calls is carried with its meaning or refused by name, and a
random or volatile source is evaluated once.

* The classification tables of compiler/clauses.py cover every argument sqlglot gives a SELECT, a
  table and a join, and every join kind, side and method any sqlglot input dialect parses: a new one
  fails ``test_every_*_is_classified`` until it is classified here.
* Each carried argument has a query in ``CARRIED`` that is compiled, run on DuckDB and compared with
  the oracle (tests/oracle.py: DuckDB groups the rows in one statement, the numpy reference computes
  each measure); each refused one has an example in ``REFUSED`` that must fail with its label.
* Sampled and volatile sources: ``count(*)``, ``sum(x)`` and ``list(x)`` ride on the main aggregate,
  the measures on other passes; the measures must equal the numpy reference over exactly the rows
  ``list(x)`` saw (internal consistency), and with a seeded sample on one thread, the oracle.

Data: a fictional marketplace (sellers' revenue by category, region and month), generated with a
fixed seed.
"""

from __future__ import annotations

import math

import duckdb
import numpy as np
import pandas as pd
import pytest
import sqlglot
from sqlglot import exp
from sqlglot.dialects import DIALECTS
from sqlglot.dialects.dialect import Dialect

import uneven
from engines import engine_or_skip
from oracle import install_oracle, oracle_sql
from uneven import reference as R
from uneven.compiler import clauses
from uneven.compiler.context import CompileContext
from uneven.compiler.pipeline import compile_tree
from uneven.errors import UnsupportedSqlError

N_SALES = 4000


def sales_rows(seed: int = 16) -> pd.DataFrame:
    """Invented marketplace rows: a lognormal revenue per seller and month."""
    rng = np.random.default_rng(seed)
    n = N_SALES
    return pd.DataFrame({
        "seller": np.arange(n) % 400,
        "category": rng.choice(["books", "garden", "toys"], n),
        "region": rng.choice(["north", "south"], n),
        "month": rng.integers(1, 13, n),
        "revenue": np.round(rng.lognormal(6.0, 1.1, n), 2),
        "units": rng.integers(1, 9, n).astype(float),
    })


@pytest.fixture(scope="module")
def con():
    c = duckdb.connect()
    c.register("_sales", sales_rows())
    c.execute("CREATE TABLE sales AS SELECT * FROM _sales")
    c.unregister("_sales")
    c.execute("CREATE TABLE fees AS SELECT * FROM (VALUES ('books', 0.08), ('garden', 0.12)) v(category, rate)")
    c.execute("CREATE TABLE tiers AS SELECT * FROM (VALUES (0.0, 'small'), (400.0, 'mid'), (2000.0, 'large')) "
              "v(threshold, tier)")
    c.execute("CREATE TABLE wide AS SELECT seller, region, sum(revenue) FILTER (WHERE month <= 6) AS h1, "
              "sum(revenue) FILTER (WHERE month > 6) AS h2 FROM sales GROUP BY seller, region")
    c.execute("CREATE TABLE pos AS SELECT revenue AS r2 FROM sales")
    install_oracle(c)
    yield c
    c.close()


def _same(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, float):
        if math.isnan(a) or math.isnan(b):
            return math.isnan(a) and math.isnan(b)
        return abs(a - b) <= 1e-9 * max(abs(b), 1.0)
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    return a == b


def assert_matches_oracle(con, sql: str) -> list:
    got = con.execute(uneven.compile(sql)).fetchall()
    want = con.execute(oracle_sql(sql)).fetchall()
    assert len(got) == len(want) and len(want) > 0, (sql, got, want)
    for g, w in zip(got, want):
        assert _same(tuple(g), tuple(w)), (sql, g, w)
    return got


# -- carried: one executed query per argument (and per join kind / side / method) --------------------

CARRIED = {
    "Select.with_": "WITH s AS (SELECT * FROM sales WHERE month <= 6) SELECT category, gini(revenue) FROM s "
                    "GROUP BY category ORDER BY 1",
    "Select.expressions": "SELECT category, round(gini(revenue, units) * 100, 3) AS g, count(*) AS n FROM sales "
                          "GROUP BY category ORDER BY 1",
    "Select.distinct": "SELECT DISTINCT ON (region) region, category, gini(revenue) AS gi FROM sales "
                       "GROUP BY region, category ORDER BY region, gi DESC",
    "Select.from_": "SELECT region, theil(revenue) FROM sales GROUP BY region ORDER BY 1",
    "Select.joins": "SELECT f.category, gini(s.revenue, s.units) FROM sales s JOIN fees f ON s.category = f.category "
                    "GROUP BY f.category ORDER BY 1",
    "Select.where": "SELECT region, palma(revenue) FROM sales WHERE month = 3 OR month = 4 GROUP BY region ORDER BY 1",
    "Select.group": "SELECT month % 4 AS q, gini(revenue) FROM sales GROUP BY q ORDER BY 1",
    "Select.having": "SELECT category, gini(revenue) AS g FROM sales GROUP BY category HAVING gini(revenue) > 0.5 "
                     "ORDER BY 1",
    "Select.qualify": "SELECT category, region, gini(revenue) AS g FROM sales GROUP BY category, region "
                      "QUALIFY row_number() OVER (PARTITION BY category ORDER BY gini(revenue) DESC) = 1 ORDER BY 1",
    "Select.order": "SELECT category, hoover(revenue) AS h FROM sales GROUP BY category ORDER BY h DESC",
    "Select.limit": "SELECT seller, gini(revenue) AS g FROM sales GROUP BY seller ORDER BY g DESC, seller LIMIT 5",
    "Select.offset": "SELECT seller, gini(revenue) AS g FROM sales GROUP BY seller ORDER BY g DESC, seller "
                     "LIMIT 5 OFFSET 3",
    "Select.sample": "SELECT category, count(*), sum(revenue), gini(revenue, units), theil(revenue), "
                     "hhi(revenue, seller) FROM sales USING SAMPLE 20 PERCENT (bernoulli, 42) GROUP BY category "
                     "ORDER BY 1",
    "From.this": "SELECT gini(revenue), count(*) FROM (SELECT revenue FROM sales WHERE month > 6) s",
    "Group.expressions": "SELECT region, month > 6 AS late, gini(revenue) FROM sales GROUP BY 1, month > 6 "
                         "ORDER BY 1, 2",
    "Group.all": "SELECT region, category, top_share(revenue, 0.2) FROM sales GROUP BY ALL ORDER BY 1, 2",
    "Table.this": "SELECT gini(revenue) FROM sales",
    "Table.alias": "SELECT s.region, gini(s.revenue) FROM sales AS s GROUP BY s.region ORDER BY 1",
    "Table.db": "SELECT gini(revenue) FROM main.sales",
    "Table.catalog": "SELECT gini(revenue) FROM memory.main.sales",
    "Table.joins": "SELECT f.rate, gini(s.revenue) FROM (sales s JOIN fees f ON s.category = f.category) "
                   "GROUP BY f.rate ORDER BY 1",
    "Table.pivots": "SELECT gini(north), gini(south), count(*) FROM sales PIVOT (sum(revenue) FOR region IN "
                    "('north', 'south') GROUP BY seller)",
    "Table.ordinality": "SELECT i % 3 AS k, gini(v) FROM generate_series(1, 30) WITH ORDINALITY AS u(v, i) "
                        "GROUP BY k ORDER BY 1",
    "Table.sample": "SELECT region, count(*), gini(revenue), mld(revenue) FROM sales TABLESAMPLE reservoir(300 ROWS) "
                    "REPEATABLE (7) GROUP BY region ORDER BY 1",
    "Join.this": "SELECT f.rate, gini(revenue) FROM sales JOIN fees f USING (category) GROUP BY f.rate ORDER BY 1",
    "Join.on": "SELECT fees.rate, cv(revenue) FROM sales JOIN fees ON sales.category = fees.category OR fees.rate > 0.1 "
               "GROUP BY fees.rate ORDER BY 1",
    "Join.side": "SELECT f.rate, gini(revenue) FROM sales LEFT JOIN fees f USING (category) GROUP BY f.rate ORDER BY 1",
    "Join.kind": "SELECT category, gini(revenue) FROM sales SEMI JOIN fees USING (category) GROUP BY category "
                 "ORDER BY 1",
    "Join.using": "SELECT category, atkinson(revenue, 0.5) FROM sales JOIN fees USING (category) GROUP BY category "
                  "ORDER BY 1",
    "Join.method": "SELECT t.tier, gini(s.revenue) FROM sales s ASOF JOIN tiers t ON s.revenue >= t.threshold "
                   "GROUP BY t.tier ORDER BY 1",
    "Join.pivots": None,  # refused (see REFUSED); listed here so that it has one entry in each table
    "kind:": "SELECT gini(revenue) FROM sales, fees WHERE sales.category = fees.category",
    "kind:INNER": "SELECT gini(revenue) FROM sales INNER JOIN fees USING (category)",
    "kind:OUTER": "SELECT f.rate, gini(revenue) FROM sales FULL OUTER JOIN fees f USING (category) "
                  "GROUP BY f.rate ORDER BY 1",
    "kind:CROSS": "SELECT fees.category, gini(revenue) FROM sales CROSS JOIN fees GROUP BY 1 ORDER BY 1",
    "kind:SEMI": "SELECT gini(revenue) FROM sales SEMI JOIN fees USING (category)",
    "kind:ANTI": "SELECT category, gini(revenue), count(*) FROM sales ANTI JOIN fees USING (category) "
                 "GROUP BY category",
    "side:": "SELECT gini(revenue) FROM sales JOIN fees USING (category)",
    "side:LEFT": "SELECT f.rate, gini(revenue) FROM sales LEFT JOIN fees f USING (category) GROUP BY 1 ORDER BY 1",
    "side:RIGHT": "SELECT f.rate, gini(revenue) FROM fees f RIGHT JOIN sales USING (category) GROUP BY 1 ORDER BY 1",
    "side:FULL": "SELECT f.rate, gini(revenue) FROM fees f FULL JOIN sales USING (category) GROUP BY 1 ORDER BY 1",
    "method:": "SELECT gini(revenue) FROM sales JOIN fees USING (category)",
    "method:NATURAL": "SELECT rate, gini(revenue) FROM sales NATURAL JOIN fees GROUP BY rate ORDER BY 1",
    "method:ASOF": "SELECT t.tier, gini(s.revenue), count(*) FROM sales s ASOF JOIN tiers t "
                   "ON s.revenue >= t.threshold GROUP BY t.tier ORDER BY 1",
    "method:POSITIONAL": "SELECT gini(r2), sum(r2), gini(revenue) FROM sales POSITIONAL JOIN pos",
}

# further source shapes the brief of this module names: carried by copying, checked the same way
SOURCES = {
    "values": "SELECT k, gini(v), count(*) FROM (VALUES ('a', 1.0), ('a', 3.0), ('b', 2.0), ('b', 2.0), ('a', 8.0)) "
              "t(k, v) GROUP BY k ORDER BY 1",
    "union": "SELECT gini(x), count(*) FROM (SELECT revenue AS x FROM sales WHERE month = 1 UNION "
             "SELECT revenue FROM sales WHERE month <= 2) u",
    "union all": "SELECT gini(x), count(*) FROM (SELECT revenue AS x FROM sales WHERE month = 1 UNION ALL "
                 "SELECT revenue FROM sales WHERE month <= 2) u",
    "intersect": "SELECT gini(x) FROM (SELECT revenue AS x FROM sales WHERE month < 8 INTERSECT "
                 "SELECT revenue FROM sales WHERE month > 4) u",
    "except all": "SELECT gini(x), count(*) FROM (SELECT revenue AS x FROM sales EXCEPT ALL "
                  "SELECT revenue FROM sales WHERE month > 4) u",
    "lateral": "SELECT s.category, gini(l.net) FROM sales s, LATERAL (SELECT s.revenue * 0.9 AS net) l "
               "GROUP BY 1 ORDER BY 1",
    "unnest": "SELECT gini(v) FROM unnest([1.0, 2.0, 7.0, 7.0]) u(v)",
    "unpivot": "SELECT half, gini(amount) FROM wide UNPIVOT (amount FOR half IN (h1, h2)) GROUP BY half ORDER BY 1",
    "ordered aggregates": "SELECT category, gini(revenue), string_agg(CAST(seller AS VARCHAR), ',' ORDER BY revenue "
                          "DESC, seller), list(revenue ORDER BY revenue DESC, seller)[1:3], "
                          "first(seller ORDER BY revenue DESC, seller) FROM sales GROUP BY category ORDER BY 1",
    "aggregate filter": "SELECT category, count(*) FILTER (WHERE month = 1 OR month = 2), gini(revenue) FILTER "
                        "(WHERE region = 'north' OR month = 2), sum(revenue) FILTER (WHERE NOT month > 3) "
                        "FROM sales GROUP BY category ORDER BY 1",
    "distinct": "SELECT DISTINCT count(*) > 0 AS seen, gini(revenue) > 2 AS big FROM sales GROUP BY category",
    "subquery limit": "SELECT gini(revenue), count(*), sum(revenue) FROM (SELECT * FROM sales ORDER BY revenue, "
                      "seller, month LIMIT 100) s",
    "window in source": "SELECT gini(revenue), count(*) FROM (SELECT *, row_number() OVER (PARTITION BY seller "
                        "ORDER BY month, revenue) AS r FROM sales) s WHERE r = 1",
}


@pytest.mark.parametrize("key", sorted(k for k, v in CARRIED.items() if v))
def test_carried_argument_matches_oracle(con, key):
    if key in ("Select.sample", "Table.sample"):
        con.execute("SET threads = 1")  # DuckDB repeats a seeded sample on one thread
        try:
            assert_matches_oracle(con, CARRIED[key])
        finally:
            con.execute("RESET threads")
        return
    assert_matches_oracle(con, CARRIED[key])


@pytest.mark.parametrize("name", sorted(SOURCES))
def test_carried_source_shape_matches_oracle(con, name):
    assert_matches_oracle(con, SOURCES[name])


def test_distinct_on_reads_the_keys(con):
    """DISTINCT ON (region) keeps one row per region: the one with the largest Gini (ORDER BY)."""
    rows = assert_matches_oracle(con, CARRIED["Select.distinct"])
    assert [r[0] for r in rows] == ["north", "south"]


# -- refused: one example per argument, with the label it must name ----------------------------------

def _with_arg(sql: str, target: str, key: str, value) -> exp.Expression:
    """The parsed query with one argument set on its first node of kind ``target``."""
    tree = sqlglot.parse_one(sql, read="duckdb")
    node = tree if target == "Select" else next(tree.find_all(getattr(exp, target)))
    node.set(key, value)
    return tree


BASE = "SELECT gini(revenue) FROM sales"
JOINED = "SELECT gini(revenue) FROM sales JOIN fees USING (category)"
REFUSED = {
    "Select.kind": ("bigquery", "SELECT AS STRUCT gini(revenue) AS g FROM sales"),
    "Select.hint": ("spark", "SELECT /*+ REPARTITION(2) */ gini(revenue) FROM sales"),
    "Select.into": ("postgres", "SELECT gini(revenue) INTO t2 FROM sales"),
    "Select.operation_modifiers": ("mysql", "SELECT HIGH_PRIORITY gini(revenue) FROM sales"),
    "Select.exclude": _with_arg(BASE, "Select", "exclude", [exp.column("units")]),
    "Select.match": ("snowflake", "SELECT gini(revenue) FROM sales MATCH_RECOGNIZE (PARTITION BY seller "
                                  "ORDER BY month PATTERN (a) DEFINE a AS revenue > 0)"),
    "Select.laterals": ("spark", "SELECT gini(v) FROM sales LATERAL VIEW explode(array(revenue)) e AS v"),
    "Select.connect": ("oracle", "SELECT gini(revenue) FROM sales START WITH seller = 1 CONNECT BY PRIOR seller = month"),
    "Select.pivots": _with_arg(BASE, "Select", "pivots", [sqlglot.parse_one(
        "SELECT * FROM t PIVOT (sum(x) FOR g IN (1))", read="duckdb").find(exp.Pivot)]),
    "Select.prewhere": ("clickhouse", "SELECT gini(revenue) FROM sales PREWHERE month > 1"),
    "Select.windows": ("duckdb", "SELECT gini(revenue), max(month) OVER w FROM sales GROUP BY month "
                                 "WINDOW w AS (ORDER BY month)"),
    "Select.distribute": ("spark", "SELECT gini(revenue) FROM sales DISTRIBUTE BY month"),
    "Select.sort": ("spark", "SELECT gini(revenue) FROM sales SORT BY month"),
    "Select.cluster": ("spark", "SELECT gini(revenue) FROM sales CLUSTER BY month"),
    "Select.locks": ("postgres", "SELECT gini(revenue) FROM sales FOR UPDATE"),
    "Select.settings": ("clickhouse", "SELECT gini(revenue) FROM sales SETTINGS max_threads = 1"),
    "Select.format": ("clickhouse", "SELECT gini(revenue) FROM sales FORMAT JSON"),
    "Select.options": ("tsql", "SELECT gini(revenue) AS g FROM sales OPTION (RECOMPILE)"),
    "Select.for_": ("tsql", "SELECT gini(revenue) AS g FROM sales FOR XML PATH"),
    "Table.laterals": _with_arg(BASE, "Table", "laterals", [exp.Lateral(this=exp.func("explode", exp.column("a")),
                                                                          view=True)]),
    "Table.hints": ("tsql", "SELECT gini(revenue) AS g FROM sales WITH (NOLOCK)"),
    "Table.system_time": _with_arg(BASE, "Table", "system_time", exp.Literal.string("2020-01-01")),
    "Table.version": ("bigquery", "SELECT gini(revenue) FROM sales FOR SYSTEM_TIME AS OF TIMESTAMP '2020-01-01'"),
    "Table.format": _with_arg(BASE, "Table", "format", exp.Literal.string("csv")),
    "Table.pattern": _with_arg(BASE, "Table", "pattern", exp.Literal.string(".*")),
    "Table.when": ("snowflake", "SELECT gini(revenue) FROM sales AT (TIMESTAMP => 1)"),
    "Table.only": ("postgres", "SELECT gini(revenue) FROM ONLY sales"),
    "Table.partition": ("mysql", "SELECT gini(revenue) FROM sales PARTITION (p0)"),
    "Table.changes": ("snowflake", "SELECT gini(revenue) FROM sales CHANGES (INFORMATION => DEFAULT) "
                                   "AT (TIMESTAMP => 1)"),
    "Table.rows_from": _with_arg(BASE, "Table", "rows_from", [exp.Anonymous(this="gen_rows", expressions=[exp.Literal.number(1)])]),
    "Table.indexed": ("sqlite", "SELECT gini(revenue) FROM sales INDEXED BY sales_idx"),
    "Join.global_": _with_arg(JOINED, "Join", "global_", True),
    "Join.hint": _with_arg(JOINED, "Join", "hint", "HASH"),
    "Join.match_condition": ("snowflake", "SELECT gini(revenue) FROM sales ASOF JOIN tiers "
                                          "MATCH_CONDITION (sales.revenue >= tiers.threshold)"),
    "Join.nearest": _with_arg(JOINED, "Join", "nearest", exp.column("month")),
    "Join.directed": _with_arg(JOINED, "Join", "directed", True),
    "Join.expressions": _with_arg(JOINED, "Join", "expressions", [exp.column("month")]),
    "Join.pivots": ("duckdb", "SELECT gini(revenue) FROM sales JOIN fees USING (category) "
                              "PIVOT (sum(rate) FOR category IN ('books'))"),
    "Group.grouping_sets": ("duckdb", "SELECT region, gini(revenue) FROM sales GROUP BY GROUPING SETS ((region), ())"),
    "Group.cube": ("duckdb", "SELECT region, gini(revenue) FROM sales GROUP BY CUBE (region)"),
    "Group.rollup": ("mysql", "SELECT region, gini(revenue) FROM sales GROUP BY region WITH ROLLUP"),
    "Group.totals": ("clickhouse", "SELECT region, gini(revenue) FROM sales GROUP BY region WITH TOTALS"),
    "kind:STRAIGHT_JOIN": ("mysql", "SELECT gini(revenue) FROM sales STRAIGHT_JOIN fees ON sales.category = fees.category"),
    "kind:ARRAY": ("clickhouse", "SELECT gini(revenue) FROM sales ARRAY JOIN [1, 2] AS a"),
    "kind:ALL": ("clickhouse", "SELECT gini(revenue) FROM sales ALL INNER JOIN fees ON sales.category = fees.category"),
    "kind:ANY": ("clickhouse", "SELECT gini(revenue) FROM sales ANY LEFT JOIN fees ON sales.category = fees.category"),
    "kind:ASOF": ("clickhouse", "SELECT gini(revenue) FROM sales ASOF JOIN tiers ON sales.revenue >= tiers.threshold"),
    "kind:PASTE": ("clickhouse", "SELECT gini(revenue) FROM sales PASTE JOIN fees"),
}


def _label(key: str) -> str:
    table, _, arg = key.partition(".")
    if ":" in key:
        part, value = key.split(":")
        return {"kind": clauses.JOIN_KINDS, "side": clauses.JOIN_SIDES, "method": clauses.JOIN_METHODS}[part][value]
    return {k: v[1] for k, v in TABLES.items()}[table][arg]


def _compile_refused(example):
    if isinstance(example, tuple):
        read, sql = example
        return uneven.compile(sql, read=read)
    return compile_tree(example, CompileContext(sql=None))


@pytest.mark.parametrize("key", sorted(REFUSED))
def test_refused_argument_names_the_construct(key):
    label = _label(key)
    assert isinstance(label, str) and label not in (clauses.CARRIED, clauses.SOURCE)
    with pytest.raises(UnsupportedSqlError) as err:
        _compile_refused(REFUSED[key])
    assert label in str(err.value) and "cannot be combined with measure calls" in str(err.value)


def test_refusal_gives_line_and_column():
    with pytest.raises(UnsupportedSqlError) as err:
        uneven.compile("SELECT gini(revenue), max(month) OVER w\nFROM sales\nWINDOW w AS (ORDER BY month)")
    assert (err.value.line, err.value.column) == (3, 8) and "WINDOW clause" in str(err.value)
    with pytest.raises(UnsupportedSqlError) as err:  # no position kept for the lock: the SELECT's
        uneven.compile("SELECT gini(revenue)\nFROM sales\nFOR UPDATE", read="postgres")
    assert err.value.line is not None and "FOR UPDATE" in str(err.value)


# -- every argument and join word sqlglot knows is classified ------------------------------------------

TABLES = {"Select": (exp.Select, clauses.SELECT_ARGS), "Table": (exp.Table, clauses.TABLE_ARGS),
          "Join": (exp.Join, clauses.JOIN_ARGS), "From": (exp.From, clauses.FROM_ARGS),
          "Group": (exp.Group, clauses.GROUP_ARGS)}


@pytest.mark.parametrize("kind", sorted(TABLES))
def test_every_argument_is_classified(kind):
    """Each arg_types key of the node class has an entry, and the entry has its proof here: an executed
    query (carried, source) or a refusal example."""
    cls, table = TABLES[kind]
    assert set(cls.arg_types) == set(table), f"unclassified: {set(cls.arg_types) - set(table)}; " \
                                             f"gone: {set(table) - set(cls.arg_types)}"
    for arg, state in table.items():
        key = f"{kind}.{arg}"
        if state in (clauses.CARRIED, clauses.SOURCE):
            assert CARRIED.get(key), f"{key} is carried but has no executed query"
        else:
            assert key in REFUSED, f"{key} is refused but has no example"


def _parser_words():
    """Join kinds, sides and methods the parser of every sqlglot dialect accepts."""
    words = {"kind": set(), "side": set(), "method": set()}
    for name in DIALECTS:
        parser = Dialect.get_or_raise(name.lower()).parser_class
        words["kind"] |= {t.name for t in parser.JOIN_KINDS}
        words["side"] |= {t.name for t in parser.JOIN_SIDES}
        words["method"] |= {t.name for t in parser.JOIN_METHODS}
    return words


def test_every_join_word_of_every_dialect_is_classified():
    tables = {"kind": clauses.JOIN_KINDS, "side": clauses.JOIN_SIDES, "method": clauses.JOIN_METHODS}
    words = _parser_words()
    assert len(DIALECTS) >= 20 and words["kind"] >= {"INNER", "CROSS", "SEMI", "ANTI"}
    for part, found in words.items():
        assert found | {""} == set(tables[part]), (part, found ^ set(tables[part]))
        for word, state in tables[part].items():
            key = f"{part}:{word}"
            if state == clauses.CARRIED or isinstance(state, tuple):
                assert CARRIED.get(key), f"{key} is carried but has no executed query"
            else:
                assert key in REFUSED, f"{key} is refused but has no example"


@pytest.mark.parametrize("sql, dialect, words", [
    ("SELECT gini(revenue) FROM sales ASOF JOIN tiers ON sales.revenue >= tiers.threshold", "postgres", "ASOF JOIN"),
    ("SELECT gini(revenue) FROM sales POSITIONAL JOIN pos", "sqlite", "POSITIONAL JOIN"),
    ("SELECT gini(revenue) FROM sales SEMI JOIN fees USING (category)", "postgres", "SEMI JOIN"),
    ("SELECT gini(revenue) FROM sales ANTI JOIN fees USING (category)", "sqlite", "ANTI JOIN"),
])
def test_dialect_bound_joins_are_refused_elsewhere(sql, dialect, words):
    with pytest.raises(UnsupportedSqlError, match=f"{words} cannot be compiled for {dialect}"):
        uneven.compile(sql, dialect=dialect)


# -- random and volatile sources: evaluated once -------------------------------------------------------

RANDOM_SOURCES = {
    "using sample percent": "FROM sales USING SAMPLE 10 PERCENT (bernoulli)",
    "using sample rows": "FROM sales USING SAMPLE 500 ROWS",
    "using sample after where": "FROM sales WHERE month <= 6 USING SAMPLE 25 PERCENT (bernoulli)",
    "tablesample": "FROM sales TABLESAMPLE bernoulli(10%)",
    "tablesample on a joined table": "FROM fees JOIN sales TABLESAMPLE reservoir(15%) USING (category)",
    "using sample over a join": "FROM sales JOIN fees USING (category) USING SAMPLE 20 PERCENT (bernoulli)",
    "random() in where": "FROM sales WHERE random() < 0.3",
    "random() in a join condition": "FROM sales JOIN (SELECT category AS cat FROM fees) f ON sales.category = f.cat "
                                    "AND random() < 0.3",
    "random() in a source subquery": "FROM (SELECT category, revenue * (1 + random()) AS revenue, units, seller "
                                     "FROM sales) s",
    "uuid() in a source subquery": "FROM (SELECT *, uuid() AS id FROM sales) s WHERE hash(id) % 3 = 0",
    "sample in a CTE": "FROM smp",
    "limit in a source subquery": "FROM (SELECT * FROM sales LIMIT 700) s",
    "limit on a union in a source": "FROM (SELECT * FROM sales WHERE month < 4 UNION ALL SELECT * FROM sales "
                                    "WHERE month > 9 LIMIT 900) s",
    # which rows or values these give depends on the order the engine reads rows in
    "row_number() over () in a source": "FROM (SELECT *, row_number() OVER () AS rn FROM sales) s WHERE rn % 3 = 0",
    "any_value in a source": "FROM (SELECT category, seller, any_value(revenue) AS revenue, any_value(units) AS units "
                             "FROM sales GROUP BY category, seller) s",
    "first and last without order in a source": "FROM (SELECT category, seller, first(revenue) AS revenue, last(units) "
                                                "AS units FROM sales GROUP BY category, seller) s",
    "list element as a value in where": "FROM sales WHERE seller = (SELECT list(seller)[1] FROM sales)",
    "string_agg part as a value in where": "FROM sales WHERE CAST(seller AS VARCHAR) = (SELECT split_part(string_agg("
                                           "CAST(seller AS VARCHAR), ','), ',', 1) FROM sales)",
}
KEEP_ALL = {"random() in a source subquery"}  # a draw that keeps every row
CTE = "WITH smp AS (SELECT * FROM sales USING SAMPLE 10 PERCENT (bernoulli)) "


@pytest.mark.parametrize("wrap", ["plain", "in a CTE body", "bounded"])
@pytest.mark.parametrize("name", sorted(RANDOM_SOURCES))
def test_random_source_is_read_once(con, name, wrap):
    """count(*), sum(x) and list(x) (main aggregate) and the measures (ordered, centred, entity and
    weighted ordered passes) describe the same rows: the measures equal the numpy reference over
    exactly the list (handbook definitions, reference.py); and the rows are a sample (fewer)."""
    sql = (f"{CTE if 'CTE' in name else ''}SELECT category, count(*), sum(revenue), "
           f"list(struct_pack(x := revenue, w := units, e := seller)), gini(revenue), gini(revenue, units), "
           f"theil(revenue), hhi(revenue, seller), top_share(revenue, 0.1) {RANDOM_SOURCES[name]} "
           f"GROUP BY category ORDER BY 1")
    if wrap == "in a CTE body":  # the scope is the body of a CTE that the statement reads
        sql = f"WITH _r AS ({sql.replace(CTE, '')}) SELECT * FROM _r ORDER BY 1"
        sql = (CTE.replace("WITH ", "WITH ").rstrip() + ", " + sql[len("WITH "):]) if "CTE" in name else sql
    compiled = uneven.compile(sql, method="bounded" if wrap == "bounded" else "exact")
    assert "MATERIALIZED" in compiled
    rows = con.execute(compiled).fetchall()
    total = 0
    assert rows
    for row in rows:
        if wrap == "bounded":  # each measure gives point, lo, hi: the exact value of the same rows inside
            n, x = row[1], [r["x"] for r in row[3]]
            lo, hi = row[5], row[6]
            assert n == len(x) and lo - 1e-12 <= R.gini(x) <= hi + 1e-12 and hi - lo < 0.05
            total += n
            continue
        cat, n, sx, items, gi, giw, th, hh, top = row
        x = [r["x"] for r in items]
        w = [r["w"] for r in items]
        e = [r["e"] for r in items]
        total += n
        assert n == len(x) and math.isclose(sx, sum(x), rel_tol=1e-12)
        assert math.isclose(gi, R.gini(x), rel_tol=1e-9)
        assert math.isclose(giw, R.gini(x, w), rel_tol=1e-9)
        assert math.isclose(th, R.theil(x), rel_tol=1e-9, abs_tol=1e-12)
        assert math.isclose(hh, R.hhi(x, e), rel_tol=1e-9)
        assert math.isclose(top, R.top_share(x, 0.1), rel_tol=1e-9)
    if name not in KEEP_ALL:
        assert 0 < total < N_SALES  # a sample was drawn (the unsampled source has N_SALES rows)


def test_sample_without_materializing_would_differ(con):
    """The check above can fail: two evaluations of the same random source differ (DuckDB evaluates
    the subquery once per use), which is what every pass would see without the MATERIALIZED CTE."""
    a, b = con.execute("SELECT (SELECT count(*) FROM (SELECT * FROM sales WHERE random() < 0.5)), "
                       "(SELECT count(*) FROM (SELECT * FROM sales WHERE random() < 0.5))").fetchone()
    c, d = con.execute("SELECT (SELECT sum(revenue) FROM (SELECT * FROM sales USING SAMPLE 50%)), "
                       "(SELECT sum(revenue) FROM (SELECT * FROM sales USING SAMPLE 50%))").fetchone()
    assert a != b or c != d


@pytest.mark.parametrize("source", [
    "FROM sales WHERE month > 2",
    "FROM (SELECT *, rank() OVER (ORDER BY seller, month) AS rn FROM sales) s WHERE rn % 3 = 0",
    "FROM (SELECT *, sum(revenue) OVER (ORDER BY month) AS run FROM sales) s WHERE run > 100",
    "FROM (SELECT category, seller, first(revenue ORDER BY revenue) AS revenue FROM sales GROUP BY ALL) s",
    "FROM sales WHERE seller = (SELECT list_sort(list(seller))[1] FROM sales)",
    "FROM (SELECT *, sum(revenue) OVER (PARTITION BY seller) AS tot FROM sales) s WHERE tot > 100",
])
def test_deterministic_source_is_not_materialized(source):
    # ranks and RANGE running sums (tied rows share one value), ordered first(), a sorted list, a
    # partition total: the same rows every read
    assert "MATERIALIZED" not in uneven.compile(f"SELECT gini(revenue), count(*) {source}")


@pytest.mark.parametrize("window", [
    "row_number() OVER (ORDER BY month)", "row_number() OVER (PARTITION BY seller ORDER BY month, revenue)",
    "lag(revenue) OVER (ORDER BY month)", "ntile(4) OVER (ORDER BY revenue)",
    "sum(revenue) OVER (ORDER BY month ROWS BETWEEN 2 PRECEDING AND CURRENT ROW)",
])
def test_ordered_numbering_is_read_once(con, window):
    """Rows tied on the ORDER BY (several sales per month) are numbered in an order the engine picks on
    each read, so the passes of one query could keep different rows: the source is read once, and
    the counts listed by the main aggregate give the measures of the other passes."""
    sql = (f"SELECT category, count(*), sum(revenue), list(revenue), gini(revenue), theil(revenue) "
           f"FROM (SELECT *, {window} AS k FROM sales) s WHERE k % 3 = 0 GROUP BY category ORDER BY 1")
    compiled = uneven.compile(sql)
    assert "MATERIALIZED" in compiled
    for _cat, n, sx, listed, gi, th in con.execute(compiled).fetchall():
        assert n == len(listed) and math.isclose(sx, sum(listed), rel_tol=1e-12)
        assert math.isclose(gi, R.gini(listed), rel_tol=1e-9)
        assert math.isclose(th, R.theil(listed), rel_tol=1e-9)
    with pytest.raises(uneven.UnevenError, match="order"):
        uneven.compile(sql.replace("list(revenue)", "count(revenue)"), dialect="spark")


def test_seeded_sample_equals_oracle(con):
    """A seeded sample is the same sample in the oracle's single statement (one thread)."""
    con.execute("SET threads = 1")
    try:
        rows = assert_matches_oracle(con, "SELECT region, count(*), gini(revenue), cv(revenue, units), "
                                          "cr(revenue, 3, seller) FROM sales USING SAMPLE 15 PERCENT "
                                          "(bernoulli, 11) GROUP BY region ORDER BY 1")
    finally:
        con.execute("RESET threads")
    assert 0 < sum(r[1] for r in rows) < N_SALES


@pytest.mark.parametrize("engine_name, sql", [
    ("sqlite", "SELECT category, count(*), sum(revenue), group_concat(revenue, ','), gini(revenue), "
               "theil(revenue) FROM sales WHERE abs(random()) % 3 = 0 GROUP BY category ORDER BY 1"),
    ("postgres", "SELECT category, count(*), sum(revenue), string_agg(CAST(revenue AS VARCHAR), ','), gini(revenue), "
                 "theil(revenue) FROM sales WHERE random() < 0.3 GROUP BY category ORDER BY 1"),
    ("sqlite", "SELECT category, count(*), sum(revenue), group_concat(revenue, ','), gini(revenue), "
               "theil(revenue) FROM (SELECT *, row_number() OVER () AS rn FROM sales) s WHERE rn % 3 = 0 "
               "GROUP BY category ORDER BY 1"),
    ("postgres", "SELECT category, count(*), sum(revenue), string_agg(CAST(revenue AS VARCHAR), ','), gini(revenue), "
                 "theil(revenue) FROM (SELECT *, row_number() OVER () AS rn FROM sales) s WHERE rn % 3 = 0 "
                 "GROUP BY category ORDER BY 1"),
    ("postgres", "SELECT category, count(*), sum(revenue), string_agg(CAST(revenue AS VARCHAR), ','), gini(revenue), "
                 "theil(revenue) FROM sales TABLESAMPLE bernoulli(30%) GROUP BY category ORDER BY 1"),
    ("postgres", "SELECT category, count(*), sum(revenue), string_agg(CAST(revenue AS VARCHAR), ','), gini(revenue), "
                 "theil(revenue) FROM sales USING SAMPLE 30 PERCENT (bernoulli, 5) GROUP BY category ORDER BY 1"),
])
def test_random_source_is_read_once_on_other_engines(engine_name, sql):
    """The same consistency on SQLite (≥ 3.35) and PostgreSQL (≥ 12), which honour MATERIALIZED: the
    values listed by the main aggregate give the measures of the other passes."""
    engine = engine_or_skip(engine_name)
    engine.load(sales_rows(), "sales")
    compiled = uneven.compile(sql, dialect=engine.dialect)
    assert "MATERIALIZED" in compiled
    frame = engine.execute(compiled)
    total = 0
    for row in frame.itertuples(index=False):
        cat, n, sx, listed, gi, th = row
        x = [float(v) for v in str(listed).split(",")]
        total += n
        assert n == len(x) and math.isclose(sx, sum(x), rel_tol=1e-9)
        assert math.isclose(gi, R.gini(x), rel_tol=1e-9)
        assert math.isclose(th, R.theil(x), rel_tol=1e-9)
    assert 0 < total < N_SALES


@pytest.mark.parametrize("sql, dialect, message", [
    ("SELECT gini(revenue), count(*) FROM sales WHERE random() < 0.5", "spark", "spark cannot promise"),
    ("SELECT gini(revenue), count(*) FROM sales WHERE rand() < 0.5", "trino", "trino cannot promise"),
    ("SELECT gini(revenue) FROM sales USING SAMPLE 10%", "bigquery", "cannot be compiled for bigquery"),
    ("SELECT gini(revenue) FROM sales USING SAMPLE 10%", "snowflake", "cannot be compiled for snowflake"),
    ("SELECT gini(revenue) FROM sales TABLESAMPLE bernoulli(10%)", "sqlite", "cannot be compiled for sqlite"),
    ("SELECT gini(revenue) FROM sales USING SAMPLE 100 ROWS", "postgres", "RESERVOIR by rows cannot be compiled"),
    ("SELECT gini(revenue) FROM sales JOIN fees USING (category) USING SAMPLE 10 PERCENT (bernoulli)", "postgres",
     "USING SAMPLE over joins or a subquery cannot be compiled for postgres"),
    ("SELECT gini(revenue * random()), count(*) FROM sales", "duckdb", "would be evaluated anew by each pass"),
    ("SELECT gini(revenue), count(*) FROM sales GROUP BY random() < 0.5", "duckdb", "evaluated anew by each pass"),
    ("SELECT random() < 0.5 AS r, gini(revenue), count(*) FROM sales GROUP BY r", "duckdb", "evaluated anew by each"),
    ("SELECT random() < 0.5 AS r, gini(revenue), count(*) FROM sales GROUP BY 1", "duckdb", "evaluated anew by each"),
    ("SELECT uuid() AS r, gini(revenue), count(*) FROM sales GROUP BY ALL", "duckdb", "evaluated anew by each"),
    ("SELECT gini(revenue), count(*) FROM (SELECT *, row_number() OVER () AS rn FROM sales) s WHERE rn < 900",
     "spark", r"order the engine reads rows in: row_number\(\) OVER \(\)\).*spark cannot promise"),
    ("SELECT gini(revenue) FROM (SELECT seller, any_value(revenue) AS revenue FROM sales GROUP BY seller) s",
     "trino", r"order the engine reads rows in: any_value\(revenue\)\).*trino cannot promise"),
    ("SELECT count(*), gini(revenue) FILTER (WHERE random() < 0.5) FROM sales", "duckdb", "evaluated anew"),
    ("SELECT gini(revenue), (SELECT max(f.rate) FROM fees f WHERE f.category = s.category) FROM sales s "
     "WHERE random() < 0.5 GROUP BY s.category", "duckdb", "a subquery that reads a column of a sampled"),
])
def test_random_source_refused_where_it_cannot_be_read_once(sql, dialect, message):
    with pytest.raises(UnsupportedSqlError, match=message):
        uneven.compile(sql, dialect=dialect)


def test_volatile_outside_aggregates_is_carried(con):
    """random() in the select list outside any aggregate, or in ORDER BY, is evaluated once by the
    final SELECT, and inside an ordinary aggregate by the main aggregate alone: no refusal, and the
    measures are those of the whole table (the oracle)."""
    rows = con.execute(uneven.compile("SELECT category, gini(revenue), random() < 2 AS r, avg(random()) AS a "
                                      "FROM sales GROUP BY category ORDER BY random()")).fetchall()
    want = dict(con.execute(oracle_sql("SELECT category, gini(revenue) FROM sales GROUP BY category")).fetchall())
    assert "MATERIALIZED" not in uneven.compile("SELECT avg(random()), gini(revenue) FROM sales")
    # avg of ~1300 uniform draws: 0.5 within 0.1 (standard error about 0.008; common practice)
    assert len(rows) == 3 and all(r[2] is True and _same(r[1], want[r[0]]) and abs(r[3] - 0.5) < 0.1 for r in rows)


def test_materialized_names_read_as_written(con):
    """Messages and output names keep the user's column names through the materialized source."""
    sql = "SELECT s.category, gini(s.revenue, s.units), count(*) FROM sales s USING SAMPLE 50% GROUP BY s.category"
    names = [d[0] for d in con.execute(uneven.compile(sql)).description]
    plain = [d[0] for d in con.execute(uneven.compile(sql.replace(" USING SAMPLE 50%", ""))).description]
    assert names == plain and names[0] == "category"
    with pytest.raises(Exception, match="negative weight in the weight argument"):
        # every weight negative, and a seeded row-level sample that keeps rows: the error cannot
        # depend on which rows the sample happens to draw
        con.execute(uneven.compile("SELECT gini(revenue, units - 1e9) FROM sales "
                                   "USING SAMPLE 90 PERCENT (bernoulli, 7)")).fetchall()
