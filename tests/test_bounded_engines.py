"""method="bounded" on every engine of the backend matrix (DuckDB, PostgreSQL, Spark, SQLite).

The same check as test_bounded.py: the numpy reference (``uneven.reference``, itself checked
against exact fractions and closed forms in test_reference.py) lies inside [lo, hi], and the point
estimate too, for every measure with a bounded form, weighted and not, on groups with a NULL key,
NULL values and weights, zero weights, ties, zeros and negative values. The intervals an engine
gives are also compared with DuckDB's: the bins are the same unless an engine's LN rounds a value
at a bin edge the other way, which the test data (one decimal) avoid.
Each engine runs one batched query; Spark's holds each measure once (see spark_items).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import uneven
from conftest import make_groups
from engines import EngineError, engine_or_skip
from test_bounded import MEASURES, RATIOS, gini_bounds_two_sums

# (output name, select item, weighted, reference): every call of MEASURES, weighted and unweighted
ITEMS = [(f"w{i}", m, True, r) for i, (m, r) in enumerate(MEASURES)] + \
        [(f"u{i}", m.replace(", w)", ")"), False, r) for i, (m, r) in enumerate(MEASURES)]


def spark_items() -> list:
    """Spark plans a 44-call query in over a minute on a busy machine: it runs each measure name once
    (its first call in MEASURES), weighted and unweighted in turn, and the unweighted Gini too; the
    bounded formulas are the same SQL either way, only the bins pass reads w or 1."""
    seen, out = set(), []
    for name, item, weighted, ref in ITEMS[:len(MEASURES)]:
        measure = item.split("(")[0]
        if measure not in seen:
            seen.add(measure)
            flip = len(seen) % 2 == 0
            out.append(ITEMS[int(name[1:]) + len(MEASURES)] if flip else (name, item, weighted, ref))
    return out + [ITEMS[len(MEASURES)]]


def items_for(engine) -> list:
    return spark_items() if engine.name == "spark" else ITEMS


def query(items) -> str:
    return "SELECT grp, " + ", ".join(f"{item} AS {name}" for name, item, _, _ in items) + " FROM t GROUP BY grp"


def bounded_data() -> pd.DataFrame:
    """make_groups (NULL key, NULL x and w, zero weights, ties, zeros) with negative values in one group."""
    df = make_groups(seed=11)
    neg = df.index[(df["grp"] == "g2").to_numpy()][:6]
    df.loc[neg, "x"] = -df.loc[neg, "x"]
    return df


@pytest.fixture(scope="module")
def data():
    return bounded_data()


@pytest.fixture(scope="module")
def batch(engine, data):
    engine.load(data)
    return engine.run(query(items_for(engine)), method="bounded")


@pytest.fixture(scope="module")
def duckdb_batch(data):
    engine = engine_or_skip("duckdb")
    engine.load(data)
    yield engine.run(query(ITEMS), method="bounded")
    engine.close()


def _row(df: pd.DataFrame, key):
    match = df[df["grp"].isna()] if key is None else df[df["grp"] == key]
    assert len(match) == 1, f"group {key!r}: {len(match)} rows"
    return match.iloc[0]


def _number(v):
    return None if v is None or pd.isna(v) else float(v)


def test_reference_inside_interval(engine, data, batch):
    assert len(batch) == data["grp"].nunique(dropna=False)
    checked = 0
    for key, sub in data.groupby("grp", dropna=False):
        key = None if pd.isna(key) else key
        row = _row(batch, key)
        for name, item, weighted, reference in items_for(engine):
            ok = sub["x"].notna() & (sub["w"].notna() & (sub["w"] > 0) if weighted else True)
            x = sub.loc[ok, "x"].to_numpy(float)
            w = sub.loc[ok, "w"].to_numpy(float) if weighted else None
            exact = reference(x, w) if len(x) else None
            point, lo, hi = (_number(row[c]) for c in (name, f"{name}_lo", f"{name}_hi"))
            label = (engine.name, item, key, lo, exact, hi)
            if exact is None or (isinstance(exact, float) and np.isnan(exact)):
                assert point is None and lo is None and hi is None, label
                continue
            if lo is None and item.startswith(RATIOS):
                continue  # an unbounded ratio is NULL, never a made-up number
            assert lo is not None and hi is not None, label
            slack = 1e-12 * max(1.0, abs(exact))  # the engine's own float rounding of a tight interval
            assert lo - slack <= exact <= hi + slack, label
            assert lo <= point <= hi, (engine.name, item, key, lo, point, hi)
            checked += 1
    assert checked >= len(items_for(engine)) * 3  # most measures are defined on most groups


def test_same_intervals_as_duckdb(engine, batch, duckdb_batch):
    for key in duckdb_batch["grp"]:
        key = None if pd.isna(key) else key
        mine, theirs = _row(batch, key), _row(duckdb_batch, key)
        for name, item, _, _ in items_for(engine):
            for col in (name, f"{name}_lo", f"{name}_hi"):
                a, b = _number(mine[col]), _number(theirs[col])
                assert (a is None) == (b is None), (engine.name, item, key, col, a, b)
                if a is not None:
                    assert a == pytest.approx(b, rel=1e-9, abs=1e-12), (engine.name, item, key, col, a, b)


def test_gini_one_running_sum_on_every_engine(engine, batch):
    # the Gini's SQL uses one running sum (docs/bounded.md, "Gini", *One running sum*); on every engine
    # its interval equals the proof's two-running-sum form computed in numpy from that engine's own
    # stored bins (summarize(), compiled for the engine and run there), widened by the rounding
    # allowance 1e-11·(1 + |bound|)
    bins = engine.execute(uneven.summarize("t", "x", "w", by=["grp"], dialect=engine.dialect))
    bins = bins.assign(**{c: pd.to_numeric(bins[c]) for c in ("uv_w", "uv_wx", "uv_min", "uv_max")})
    compared = 0
    for key, part in bins.groupby("grp", dropna=False):
        row = _row(batch, None if pd.isna(key) else key)
        got_lo, got_hi = _number(row["w0_lo"]), _number(row["w0_hi"])  # w0: gini(x, w)
        if part["uv_wx"].sum() <= 0:
            assert got_lo is None and got_hi is None, (engine.name, key)
            continue
        lo, hi = gini_bounds_two_sums(part)
        assert got_lo == pytest.approx(lo - 1e-11 * (1 + abs(lo)), rel=1e-10, abs=1e-13), (engine.name, key)
        assert got_hi == pytest.approx(hi + 1e-11 * (1 + abs(hi)), rel=1e-10, abs=1e-13), (engine.name, key)
        compared += 1
    assert compared >= 3


def test_negative_weight_stops_the_bounded_query(engine, batch):
    if engine.name == "spark":
        # one Spark query per run here (CI time); Spark's raise_error rule is the one
        # test_measures_engines.py checks on the exact method
        pytest.skip("Spark runs only the batched query of this file")
    with pytest.raises(EngineError, match="uneven: negative weight"):
        engine.run("SELECT grp, gini(x, w - 3) FROM t GROUP BY grp", method="bounded")


# infinity as each engine writes it (SQLite: CAST('Infinity' AS REAL) is 0.0, 9e999 is +inf; SQLite has
# no NaN, so infinity is the value every engine can hold)
INFINITY = {"sqlite": "9e999"}


def test_infinite_value_stops_the_bounded_query(engine, batch):
    if engine.name == "spark":
        # one Spark query per run here (CI time); the summary pass checks x with the exact method's
        # expression (source.checked_value), whose raise_error on Spark test_hostile_input.py checks
        pytest.skip("Spark runs only the batched query of this file")
    inf = INFINITY.get(engine.name, "CAST('Infinity' AS DOUBLE)")
    source = f"(SELECT grp, CASE WHEN x > 9 THEN {inf} ELSE x END AS x, w FROM t) s"
    with pytest.raises(EngineError, match=r"uneven: NaN or infinite value in the value argument x \(the group "):
        engine.run(f"SELECT grp, gini(x, w) FROM {source} GROUP BY grp", method="bounded")


def test_summaries_from_three_engines_merge_and_certify():
    # disjoint parts of one data set summarised on DuckDB, SQLite and PostgreSQL (the same SELECT,
    # compiled per dialect), merged: the interval contains the exact value of the union (reference:
    # numpy on the whole data), bins that overlap after the merge being joined first
    data = bounded_data()
    data = data[data["grp"].notna() & data["x"].notna() & data["w"].notna()].reset_index(drop=True)
    parts = {name: data.iloc[i::3] for i, name in enumerate(("duckdb", "sqlite", "postgres"))}
    frames = []
    for name, part in parts.items():
        if name == "duckdb":  # the DataFrame is read by its name, as uneven.query reads it
            frames.append(uneven.summarize("part", "x", "w", by=["grp"], powers=[2]))
            continue
        engine = engine_or_skip(name)
        engine.load(part, "part")
        got = engine.execute(uneven.summarize("part", "x", "w", by=["grp"], powers=[2], dialect=name))
        frames.append(got.assign(**{c: pd.to_numeric(got[c]) for c in got.columns if c != "grp"}))
        engine.close()
    one, two, three = frames  # noqa: RUF059 (read by from_summary by name)
    merged = uneven.from_summary(["one", "two", "three"], ["gini AS g", "top_share(0.1) AS t", "theil AS th",
                                                           "quantile_w(0.5) AS q", "ge(2) AS ge2", "cv AS cv"])
    from uneven import reference as R
    assert sorted(merged["grp"]) == sorted(data["grp"].unique())
    for _, row in merged.iterrows():
        sub = data[(data["grp"] == row["grp"]) & (data["w"] > 0)]
        x, w = sub["x"].to_numpy(float), sub["w"].to_numpy(float)
        for col, exact in (("g", R.gini(x, w)), ("t", R.top_share(x, 0.1, w)), ("th", R.theil(x, w)),
                           ("q", R.quantile_w(x, 0.5, w)), ("ge2", R.ge(x, 2, w)), ("cv", R.cv(x, w))):
            if exact is None:
                assert pd.isna(row[col]), (row["grp"], col)
                continue
            assert row[f"{col}_lo"] <= exact <= row[f"{col}_hi"], (row["grp"], col, row[f"{col}_lo"], exact)
