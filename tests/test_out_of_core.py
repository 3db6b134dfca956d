"""A Parquet file several times DuckDB's memory limit: sorts and windows spill, results stay exact."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as R


def test_file_larger_than_memory_limit(tmp_path):
    rng = np.random.default_rng(42)
    n = 4_000_000
    df = pd.DataFrame({"g": rng.integers(0, 3, n).astype(np.int32), "x": rng.lognormal(0, 1, n),
                       "w": rng.uniform(0.5, 2.0, n)})
    path = tmp_path / "big.parquet"
    df.to_parquet(path, row_group_size=500_000)
    spill = tmp_path / "spill"
    # 4M rows × (x, w, running weight, keys) in the window is well over 10× this limit
    res = uneven.query(f"SELECT g, gini(x, w) AS gw, gini(x) AS gu, top_share(x, 0.1, w) AS top "
                        f"FROM '{path}' GROUP BY g ORDER BY g",
                        memory_limit="40MB", threads=2, temp_directory=str(spill))
    assert len(res) == 3
    for g, d in df.groupby("g"):
        x, w = d.x.to_numpy(), d.w.to_numpy()
        row = res[res.g == g].iloc[0]
        assert row.gw == pytest.approx(R.gini(x, w), rel=1e-9)
        assert row.gu == pytest.approx(R.gini(x), rel=1e-9)
        assert row.top == pytest.approx(R.top_share(x, 0.1, w), rel=1e-9)
    leftovers = [p for p in spill.rglob("*") if p.is_file()] if spill.exists() else []
    assert leftovers == []
