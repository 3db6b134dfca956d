"""The tie probe through ``query(con=…)`` / ``explain(con=…)`` on PostgreSQL, Spark and SQLite
(engine/ties.py: adapter_tie_probe): repeated integer values get the ties variant of the ordered
pass as on DuckDB, values that rarely repeat keep the plain one, and the numbers equal the numpy
reference (``uneven.reference``, checked against exact fractions in test_reference.py) to 1e-9.
A module of its own: it loads tables ``t_ties`` and ``t_wide``."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import uneven
from engines import engine_or_skip
from uneven import reference as R

_rng = np.random.default_rng(11)
N = 600
TIES = pd.DataFrame({"grp": np.where(np.arange(N) % 3 == 0, "a", "b"),
                     "x": _rng.integers(1, 9, N).astype("int64"),  # 8 values: heavy ties
                     "w": _rng.integers(1, 4, N).astype(float)})
WIDE = pd.DataFrame({"grp": np.where(np.arange(N) % 3 == 0, "a", "b"),
                     "x": ((np.arange(N) * 7919) % 100003).astype("int64"),  # all distinct
                     "v": _rng.lognormal(2.0, 0.7, N)})


@pytest.fixture(params=["postgres", "sqlite", "spark"], scope="module")
def engine(request):
    eng = engine_or_skip(request.param)
    eng.load(TIES, "t_ties")
    eng.load(WIDE, "t_wide")
    yield eng
    eng.close()


def _con(eng):
    return eng.spark if eng.name == "spark" else eng.con


def test_repeated_integers_get_the_ties_variant(engine):
    con = _con(engine)
    sql = "SELECT grp, gini(x, w) AS g, top_share(x, 0.2) AS t FROM t_ties GROUP BY grp ORDER BY grp"
    chosen = uneven.explain(sql, con).passes[0]
    assert (chosen["kind"], chosen["variant"]) == ("ordered", "ties") and "distinct" in chosen["reason"], chosen
    got = uneven.query(sql, con)
    for _, row in got.iterrows():
        d = TIES[TIES["grp"] == row["grp"]]
        x, w = d["x"].to_numpy(float), d["w"].to_numpy(float)
        assert row["g"] == pytest.approx(R.gini(x, w), rel=1e-9)
        assert row["t"] == pytest.approx(R.top_share(x, 0.2), rel=1e-9)


def test_values_that_rarely_repeat_keep_the_plain_variant(engine):
    con = _con(engine)
    distinct = uneven.explain("SELECT grp, gini(x) FROM t_wide GROUP BY grp", con).passes[0]
    assert distinct["variant"] == "rows" and "distinct" in distinct["reason"], distinct
    floating = uneven.explain("SELECT grp, gini(v) FROM t_wide GROUP BY grp", con).passes[0]
    assert floating["variant"] == "rows", floating
    # SQLite keeps no column types: the count runs there; elsewhere a double is not probed
    assert ("distinct" in floating["reason"]) == (engine.name == "sqlite"), floating
    off = uneven.explain("SELECT grp, gini(x) FROM t_ties GROUP BY grp", con, tie_grouping="off").passes[0]
    assert off["variant"] == "rows"
    got = uneven.query("SELECT grp, gini(x) AS g FROM t_wide GROUP BY grp ORDER BY grp", con)
    for _, row in got.iterrows():
        assert row["g"] == pytest.approx(R.gini(WIDE.loc[WIDE["grp"] == row["grp"], "x"].to_numpy(float)), rel=1e-9)
