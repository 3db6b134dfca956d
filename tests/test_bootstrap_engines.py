"""The in-database bootstrap on every engine of the matrix.

Each engine draws its replicates from its own 64-bit hash (DuckDB hash, PostgreSQL
hashtextextended, Spark xxhash64, SQLite a registered function), so the draws differ between
engines and the exact numpy rebuild of tests/test_bootstrap.py is DuckDB's alone. What every engine
must show: the same draws on a rerun (the seed fixes them), and a bootstrap standard error that
agrees with the linearized one — the published variance of the Gini (Langel and Tillé 2013, cited
from memory) computed
independently in numpy by ``reference.se`` — within the sampling noise of R replicates.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from uneven.reference import se as RS

R = 60  # replicates: the SE of a bootstrap SE is about 1/sqrt(2R) ≈ 9% of it


@pytest.fixture(scope="module")
def rows(engine):
    rng = np.random.default_rng(20261202)
    n = 500
    df = pd.DataFrame({"g": np.repeat(["a", "b"], n), "x": rng.lognormal(0, 0.8, 2 * n),
                       "w": rng.uniform(0.5, 3.0, 2 * n), "id": np.arange(2 * n)})
    engine.load(df, "boot")
    return df


def test_bootstrap_runs_reproducibly_and_agrees_with_linearization(engine, rows):
    sql = (f"SELECT g, gini_boot_se(x, w, replicates := {R}, key := id, seed := 11) AS se, "
           f"gini_boot_lo(x, w, replicates := {R}, key := id, seed := 11) AS lo, "
           f"gini_boot_hi(x, w, replicates := {R}, key := id, seed := 11) AS hi, "
           "gini(x, w) AS est FROM boot GROUP BY g ORDER BY g")
    first = engine.run(sql)
    again = engine.run(sql)
    assert list(first["g"]) == ["a", "b"]
    for (_, a), (_, b) in zip(first.iterrows(), again.iterrows()):
        # the seed fixes the draws; parallel summation may change the last bits only
        assert float(a.se) == pytest.approx(float(b.se), rel=1e-9)
    for _, row in first.iterrows():
        part = rows[rows.g == row.g]
        lin = RS.se("gini", part.x.to_numpy(), (), part.w.to_numpy())
        # 5 standard errors of the bootstrap SE (≈ 9% each) plus the O(1/n) gap of the two methods
        assert abs(float(row.se) / lin - 1) < 0.45, (engine.name, row.g, float(row.se), lin)
        assert float(row.lo) < float(row.est) < float(row.hi)
