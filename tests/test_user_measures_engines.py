"""User-defined measures on every engine of the backend matrix (DuckDB, PostgreSQL, Spark, SQLite):
the worked example ``middle_share`` (ordered pass) and a moment-pass measure, weighted and not, per
group (NULL key, ties, zero weights), in one batched query per engine, against numpy references.
The references: ``middle_share`` = L(hi) − L(lo) from ``uneven.reference.lorenz`` (itself checked
against exact fractions in test_reference.py); the moment measure E[x²]/μ² computed here with numpy."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

import uneven
from conftest import make_groups
from test_user_measures import middle_share_reference
from uneven import reference as R


def mean_square_ratio_reference(x, w=None):
    """Σw·x² / W / μ²: the second moment over the squared mean (1 + CV² with the population variance)."""
    x = np.asarray(x, float)
    w = np.ones(len(x)) if w is None else np.asarray(w, float)
    keep = w > 0
    x, w = x[keep], w[keep]
    if len(x) == 0 or (w * x).sum() == 0:
        return None
    mu = (w * x).sum() / w.sum()
    return float((w * x * x).sum() / w.sum() / mu ** 2)


CALLS = [  # (SQL call, reference(x, w))
    ("middle_share(x, 0.4, 0.9)", lambda x, w: middle_share_reference(x, 0.4, 0.9)),
    ("middle_share(x, 0.4, 0.9, w)", lambda x, w: middle_share_reference(x, 0.4, 0.9, w)),
    ("middle_share(x, 0, 0.25, w)", lambda x, w: middle_share_reference(x, 0.0, 0.25, w)),
    ("user_msr(x)", lambda x, w: mean_square_ratio_reference(x)),
    ("user_msr(x, w)", lambda x, w: mean_square_ratio_reference(x, w)),
    ("gini(x, w)", lambda x, w: R.gini(x, w)),  # a built-in beside them in the same query
]


@pytest.fixture(scope="module")
def user_measures():
    uneven.define_measure("middle_share", params=["lo", "hi"], pass_="ordered",
                           result="lorenz(hi) - lorenz(lo)", reference=middle_share_reference,
                           formula="L(hi) − L(lo): share of the middle of the distribution")
    uneven.define_measure("user_msr", pass_="moment", params=[],
                           result="sum(w * x * x) / total_weight / (mean * mean)",
                           reference=mean_square_ratio_reference, formula="E[x²]/μ²")
    yield
    uneven.remove_measure("middle_share")
    uneven.remove_measure("user_msr")


def _null(v) -> bool:
    return v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v))


def test_user_measures_on_every_engine(engine, user_measures):
    df = make_groups(seed=13)
    engine.load(df)
    calls = ", ".join(f"{c} AS m{i}" for i, (c, _) in enumerate(CALLS))
    res = engine.run(f"SELECT grp, {calls} FROM t GROUP BY grp")  # one query (Spark starts slowly)
    groups = list(df.groupby("grp", dropna=False, sort=False))
    assert len(res) == len(groups)
    for key, d in groups:
        row = res[res["grp"].map(_null)] if _null(key) else res[res["grp"] == key]
        assert len(row) == 1, key
        row = row.iloc[0]
        d = d[d["x"].notna()]
        for i, (call, ref) in enumerate(CALLS):
            dd = d[d["w"].notna()] if ", w)" in call else d
            want = ref(dd["x"].to_numpy(float), dd["w"].to_numpy(float) if ", w)" in call else None)
            got = row[f"m{i}"]
            assert want is not None and not _null(got), (engine.name, call, key, got)
            assert abs(float(got) - want) <= 1e-9 * abs(want) + 1e-12, (engine.name, call, key, got, want)
