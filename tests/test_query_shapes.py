"""Random query shapes, compiled and run, against the oracle (tests/oracle.py: DuckDB's own
grouping, HAVING, ORDER BY, CTEs and subqueries, with each measure evaluated by the numpy
reference). Two sources: the survey fixture and ``rough``, invented rows with the same columns made
hostile (NULL keys, values and weights, many ties, zeros, weights of 0, negative values, values from
1e-9 to 1e12). Seeded: 200 shapes in CI; pytest -m slow runs 10,000 more (seed UNEVEN_SEED,
default 1; UNEVEN_SHAPES sets the count). A mismatch found once becomes a golden fixture."""

from __future__ import annotations

import math
import os
import random
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from oracle import install_oracle, oracle_sql

ROOT = Path(__file__).resolve().parents[1]

KEYS = ["province", "year", "hh_size > 2", "year % 2", "upper(province)"]
MEASURES = [
    "gini(gross)", "gini(gross, weight)", "gini(disposable, weight)", "palma(gross, weight)",
    "top_share(disposable, 0.1)", "lorenz(gross, 0.5, weight)", "quantile_w(gross, 0.5, weight)",
    "theil(gross)", "mld(disposable, weight)", "atkinson(disposable, 0.5)", "cv(gross, weight)",
    "hoover(gross)", "hhi(gross, hh_size)", "cr(gross, 2, hh_size)", "gini(gross) FILTER (WHERE year = 2024)",
    "s80s20(disposable)", "ge(gross, 2, weight)", "gini_corrected(disposable)",
]
AGGS = ["count(*)", "avg(gross)", "sum(weight)", "max(hh_size)"]
WHERES = ["year = 2024", "hh_size <= 3", "gross > 1000", "province IS NOT NULL"]


def make_shape(rng: random.Random) -> str:
    keys = rng.sample(KEYS, rng.randint(0, 2))
    items = [f"{k} AS k{i}" for i, k in enumerate(keys)]
    ms = rng.sample(MEASURES, rng.randint(1, 4))
    for i, m in enumerate(ms):
        form = rng.choice(["{m}", "round({m}, 6)", "{m} * 100", "coalesce({m}, -1)"])
        items.append(f"{form.format(m=m)} AS m{i}")
    if rng.random() < 0.5:
        items.append(f"{rng.choice(AGGS)} AS a0")
    if len(ms) > 1 and rng.random() < 0.3:
        items.append(f"{ms[0]} - {ms[1]} AS d0")
    source = rng.choice(["survey", "(SELECT * FROM survey WHERE weight IS NOT NULL) s", "src", "rough",
                         "(SELECT * FROM rough WHERE hh_size < 4) s"])
    sql = f"SELECT {', '.join(items)} FROM {source}"
    if rng.random() < 0.5:
        sql += f" WHERE {rng.choice(WHERES)}"
    if keys:
        how = rng.choice(["exprs", "all", "positions", "aliases"])
        if how == "exprs":
            sql += " GROUP BY " + ", ".join(keys)
        elif how == "aliases":
            sql += " GROUP BY " + ", ".join(f"k{i}" for i in range(len(keys)))
        elif how == "all":
            sql += " GROUP BY ALL"
        else:
            sql += " GROUP BY " + ", ".join(str(i + 1) for i in range(len(keys)))
        if rng.random() < 0.4:
            sql += f" HAVING {rng.choice(['count(*) > 3', f'{ms[0]} IS NOT NULL', f'{ms[-1]} > 0'])}"
    n_out = len(items)
    sql += " ORDER BY " + ", ".join(f"{i + 1} NULLS LAST" for i in range(n_out))
    if rng.random() < 0.2:
        sql += " LIMIT 3"
    if source == "src":
        sql = f"WITH src AS (SELECT * FROM {rng.choice(['survey', 'rough'])} WHERE gross IS NOT NULL) " + sql
    return sql


def _same(a, b) -> bool:
    if a is None or b is None or (isinstance(a, float) and math.isnan(a)) or (isinstance(b, float) and math.isnan(b)):
        na = a is None or (isinstance(a, float) and math.isnan(a))
        nb = b is None or (isinstance(b, float) and math.isnan(b))
        return na and nb
    if isinstance(a, float) or isinstance(b, float):
        return abs(float(a) - float(b)) <= 1e-9 * max(abs(float(b)), 1e-300) + 1e-9 * (abs(float(b)) < 1e-6)
    return a == b


@pytest.fixture(scope="module")
def con():
    c = duckdb.connect()
    c.execute(f"CREATE TABLE survey AS SELECT * FROM '{ROOT / 'fixtures' / 'data' / 'survey.parquet'}'")
    c.register("_rough", rough_rows())
    c.execute("CREATE TABLE rough AS SELECT * FROM _rough")
    c.unregister("_rough")
    install_oracle(c)
    yield c
    c.close()


def rough_rows(seed: int = 9, n: int = 600) -> pd.DataFrame:
    """Invented hostile rows with the survey's columns (fixed seed)."""
    rng = np.random.default_rng(seed)
    gross = 10.0 ** rng.uniform(-9, 12, n)
    mask = rng.random(n) < 0.3
    gross[mask] = rng.choice([0.0, 5.0, 1e12, 1e12 + 1.0], int(mask.sum()))  # large values 1 apart
    gross[rng.random(n) < 0.25] = 42.5  # ties
    gross[rng.random(n) < 0.05] = 0.0
    disposable = np.round(rng.normal(2000, 1500, n), 0)  # some negative
    weight = rng.integers(0, 5, n).astype(float)  # integer weights, zeros included
    frame = pd.DataFrame({
        "hh_id": np.arange(n), "province": rng.choice(["North", "South", "Évrazquelle", None], n),
        "year": rng.choice([2023, 2024], n), "gross": gross, "disposable": disposable, "weight": weight,
        "hh_size": rng.integers(1, 7, n)})
    for col, share in (("gross", 0.08), ("disposable", 0.05), ("weight", 0.06)):
        frame[col] = frame[col].astype("Float64")
        frame.loc[rng.random(n) < share, col] = pd.NA
    return frame


def test_random_query_shapes_match_oracle(con):
    check_shapes(con, seed=20261201, count=200)


@pytest.mark.slow
def test_many_random_query_shapes_match_oracle(con):
    check_shapes(con, seed=int(os.environ.get("UNEVEN_SEED", "1")), count=int(os.environ.get("UNEVEN_SHAPES", "10000")))


def check_shapes(con, seed: int, count: int) -> None:
    """Run ``count`` shapes; collect every mismatch (case number, SQL, rows) and fail listing them."""
    rng = random.Random(seed)
    mismatches = []
    for case in range(count):
        sql = make_shape(rng)
        problem = compare_shape(con, sql)
        if problem:
            mismatches.append(f"case {case} (seed {seed}): {sql}\n{problem}")
    assert not mismatches, f"{len(mismatches)} of {count} shapes differ from the oracle:\n" + "\n".join(mismatches[:5])


def compare_shape(con, sql: str) -> str | None:
    got = con.execute(uneven.compile(sql)).fetchall()
    want = con.execute(oracle_sql(sql)).fetchall()
    if len(got) != len(want):
        return f"{len(got)} rows vs oracle {len(want)}"
    if " LIMIT " in sql:  # ties in the ORDER BY may cut differently; compare as sets of the kept rows
        got, want = sorted(got, key=repr), sorted(want, key=repr)
    for g, w in zip(got, want):
        if not all(_same(a, b) for a, b in zip(g, w)):
            return f"compiled {g}\noracle   {w}"
    return None
