"""Metamorphic checks over the fuzzer's shapes (tests/grammar.py): equivalent forms of one
question, each compiled and run on DuckDB, give the same result — the same rows and values, the
same NULLs (NaN only where NaN), the same refusal or error. No oracle is involved: the way SQL
engines are tested for logic bugs, every pair below is equivalent by the definition of SQL.

- ``WHERE p`` vs ``FILTER (WHERE p)`` on every measure vs a subquery ``(SELECT … WHERE p)``:
  the subquery gives exactly the WHERE rows; FILTER keeps the groups that no row of p reaches,
  whose measures must all be NULL (a measure of no rows is NULL by contract), and agrees on the rest;
- a chain of CTEs vs the same query with each CTE written inline as a subquery;
- ``p`` vs ``NOT NOT p``, ``p AND TRUE``, ``p OR FALSE`` (SQL's three-valued logic keeps NULL
  NULL, and WHERE drops NULL and FALSE alike);
- commuted operands of every AND, OR, =, <>, + and * in the whole query (operands wrapped in
  parentheses, so the text means the commuted tree);
- grouping by expression vs alias vs position vs ALL;
- the same rows in another order (every table), and one column renamed (every table).

Values compare as in test_query_shapes.same_value (1e-9 relative): a sum over rows in another
order, or over more threads, may change the last bits. CI runs ``CI_SHAPES`` shapes with two
variants each; ``pytest -m slow`` runs UNEVEN_SHAPES (default 2,000) shapes with every variant.
"""

from __future__ import annotations

import os
import random
import time

import numpy as np
import pytest
import sqlglot
from sqlglot import exp

from engines import DuckDBEngine
from grammar import Grammar, fuzz_tables
from test_query_shapes import compare_rows, outcome_compiled, same_value

CI_SHAPES = 100
CI_SEED = 20261204
MAX_MEASURES = 1  # the forms below do not depend on how many measures share a query; one keeps CI quick
TABLES = ("survey", "rough", "dim")


@pytest.fixture(scope="module")
def eng():
    e = DuckDBEngine()
    tables = fuzz_tables()
    rng = np.random.default_rng(5)
    for name, frame in tables.items():
        e.load(frame, name)
        e.load(frame.iloc[rng.permutation(len(frame))].reset_index(drop=True), f"{name}_p")  # rows permuted
        e.load(frame.rename(columns={"gross": "pay"}) if "gross" in frame else frame, f"{name}_r")  # renamed
    yield e
    e.close()


# --- rewrites --------------------------------------------------------------------------------

def where_forms(shape, rng):
    p = shape.where
    return [shape.replace(where=rng.choice([f"NOT NOT ({p})", f"NOT NOT {p}"])),
            shape.replace(where=f"{p} AND TRUE"), shape.replace(where=f"{p} OR FALSE")]


_COMMUTING = (exp.And, exp.Or, exp.EQ, exp.NEQ, exp.Add, exp.Mul)


def commuted(sql: str) -> str:
    """Every commutative operator's operands swapped, each operand kept whole in parentheses."""
    tree = sqlglot.parse_one(sql, read="duckdb")
    for node in list(tree.find_all(*_COMMUTING)):
        a, b = node.this, node.expression
        node.set("this", exp.Paren(this=b))
        node.set("expression", exp.Paren(this=a))
    return tree.sql("duckdb")


def renamed_tables(sql: str, suffix: str, column: tuple[str, str] | None = None) -> str:
    def rename(node):
        if isinstance(node, exp.Table) and node.name in TABLES:
            return exp.Table(this=exp.to_identifier(node.name + suffix), alias=node.args.get("alias"))
        if column and isinstance(node, exp.Column) and node.name == column[0]:
            node = node.copy()
            node.set("this", exp.to_identifier(column[1]))
        return node
    return sqlglot.parse_one(sql, read="duckdb").transform(rename).sql("duckdb")


def variants(shape, rng) -> list[tuple[str, str]]:
    """(name, sql) pairs equivalent to ``shape.sql()``."""
    base = shape.sql()
    out = [("commuted", commuted(base)), ("permuted rows", renamed_tables(base, "_p")),
           ("renamed column", renamed_tables(base, "_r", ("gross", "pay")))]
    if shape.where:
        out += [(f"where {i}", s.sql()) for i, s in enumerate(where_forms(shape, rng))]
    if shape.source.layers and shape.source.as_ctes:
        out.append(("inlined CTEs", shape.sql(inline=True)))
    if shape.keys:
        # DuckDB leaves constant expressions out of GROUP BY ALL, so keys that are all constants make
        # it a query without GROUP BY (one row even over no rows): not equivalent to GROUP BY 1 then
        styles = ("exprs", "aliases", "positions") + (("all",) if not _constant_keys(shape) else ())
        out += [(f"group by {style}", shape.replace(group_style=style).sql())
                for style in styles if style != shape.group_style]
    return out


def _constant_keys(shape) -> bool:
    return not any(sqlglot.parse_one(k, read="duckdb").find(exp.Column) for k in shape.keys)


def same_outcome(a, b, ordered: bool) -> str | None:
    if a[0] != b[0]:
        return f"{a[0]} {a[1] if a[0] != 'rows' else a[1][:3]} vs {b[0]} {b[1] if b[0] != 'rows' else b[1][:3]}"
    if a[0] != "rows":
        return None  # refused or failed both times
    return compare_rows(b[1], a[1], ordered)


def check_where_filter_subquery(eng, shape) -> str | None:
    """WHERE p vs FILTER (WHERE p) vs a subquery, on the shape's keys and measures."""
    plain = shape.replace(items=list(shape.measures), having=None, outer_window=None, limit=None,
                          group_style="exprs")
    where_sql = plain.sql()
    filtered = plain.replace(where=None, items=[f"{m} FILTER (WHERE {shape.where})" for m in shape.measures])
    w, f = outcome_compiled(eng, where_sql), outcome_compiled(eng, filtered.sql())
    problems = []
    if not shape.source.join:
        with_, from_ = plain.source.render()
        sub = plain.replace(where=None).sql().replace(f"FROM {from_}", f"FROM (SELECT * FROM {from_} WHERE {shape.where}) t", 1)
        problem = same_outcome(w, outcome_compiled(eng, sub), ordered=True)
        if problem:
            problems.append(f"subquery: {problem}")
    if "SELECT" in shape.where:
        pass  # a subquery inside FILTER is refused by name (row-level conditions only)
    elif w[0] != f[0]:
        problems.append(f"filter: {w[0]} vs {f[0]}")
    elif w[0] == "rows":
        nk = len(plain.keys)
        kept = {tuple(r[:nk]): r for r in w[1]}
        for row in f[1]:
            key = tuple(row[:nk])
            if key in kept:
                if not all(same_value(a, b) for a, b in zip(row, kept.pop(key))):
                    problems.append(f"filter: group {key}: {row} vs where {kept.get(key)}")
            elif any(v is not None for v in row[nk:]):
                problems.append(f"filter: group {key} has no row where p holds, yet {row[nk:]}")
        if kept and nk:
            problems.append(f"filter: groups {list(kept)[:3]} missing")
    return "\n".join(problems) or None


def check_metamorphic(eng, seed: int, count: int, per_shape: int | None) -> None:
    rng = random.Random(seed)
    g = Grammar(random.Random(seed), {"limit"}, max_measures=MAX_MEASURES,
                se_measures=os.environ.get("UNEVEN_FUZZ_SE") == "1")  # standard errors too (test_query_shapes.py)
    failures, checks, start = [], 0, time.monotonic()
    for case in range(count):
        shape = g.shape()
        base = outcome_compiled(eng, shape.sql())
        chosen = variants(shape, rng)
        if per_shape is not None:
            chosen = rng.sample(chosen, min(per_shape, len(chosen)))
        for name, sql in chosen:
            checks += 1
            problem = same_outcome(base, outcome_compiled(eng, sql), ordered=shape.limit is None)
            if problem:
                failures.append(f"case {case} (seed {seed}) {name}:\n{shape.sql()}\n{sql}\n{problem}")
        if per_shape is None or rng.random() < 0.5:
            # the window plan forced against the default (refine where every measure on a value
            # is cut-based, docs/refine.md): two plans of one question, the same rows
            checks += 1
            problem = same_outcome(base, outcome_compiled(eng, shape.sql(), ordered="window"),
                                   ordered=shape.limit is None)
            if problem:
                failures.append(f"case {case} (seed {seed}) window plan:\n{shape.sql()}\n{problem}")
        if per_shape is None:  # the stream plan forced (query() on DuckDB: docs/plans.md) against the default
            checks += 1
            problem = same_outcome(base, outcome_compiled(eng, shape.sql(), ordered="stream"),
                                   ordered=shape.limit is None)
            if problem:
                failures.append(f"case {case} (seed {seed}) stream plan:\n{shape.sql()}\n{problem}")
        if shape.where and (per_shape is None or rng.random() < 0.5):
            checks += 1
            problem = check_where_filter_subquery(eng, shape)
            if problem:
                failures.append(f"case {case} (seed {seed}) where/filter/subquery:\n{shape.sql()}\n{problem}")
    print(f"metamorphic: {count} shapes, {checks} checks, {len(failures)} failures, {time.monotonic() - start:.1f} s")
    assert not failures, f"{len(failures)} of {checks} equivalent forms differ:\n" + "\n\n".join(failures[:8])


def test_equivalent_forms_agree(eng):
    check_metamorphic(eng, CI_SEED, CI_SHAPES, per_shape=2)


@pytest.mark.slow
def test_many_equivalent_forms_agree(eng):
    check_metamorphic(eng, int(os.environ.get("UNEVEN_SEED", "1")), int(os.environ.get("UNEVEN_SHAPES", "2000")),
                      per_shape=None)


def test_rewrites_keep_meaning():
    # the rewrites themselves, on a query whose reading is fixed by SQL precedence (common practice:
    # AND binds tighter than OR, * tighter than +)
    assert commuted("SELECT a + b * c FROM t WHERE x = 1 OR y AND z") == \
        "SELECT ((c) * (b)) + (a) FROM t WHERE ((z) AND (y)) OR ((1) = (x))"
    assert renamed_tables("SELECT gross FROM survey s JOIN dim d ON TRUE", "_r", ("gross", "pay")) == \
        "SELECT pay FROM survey_r AS s JOIN dim_r AS d ON TRUE"
