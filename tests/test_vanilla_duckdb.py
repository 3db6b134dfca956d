"""Compiled SQL runs in a DuckDB process that has never imported uneven."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

import uneven
from uneven import reference as R

ROOT = Path(__file__).resolve().parents[1]


def test_compiled_query_runs_in_plain_duckdb_process():
    data = ROOT / "fixtures" / "data" / "survey.parquet"
    sql = uneven.compile(f"SELECT province, gini(gross, weight) AS g, theil(gross) AS t FROM '{data}' "
                          "WHERE province IS NOT NULL GROUP BY province ORDER BY province")
    code = ("import duckdb, json, sys; assert 'uneven' not in sys.modules; "
            "rows = duckdb.connect().execute(sys.stdin.read()).fetchall(); "
            "assert 'uneven' not in sys.modules; print(json.dumps(rows))")
    out = subprocess.run([sys.executable, "-c", code], input=sql, capture_output=True, text=True, cwd="/")
    assert out.returncode == 0, out.stderr
    rows = json.loads(out.stdout)
    import pandas as pd
    df = pd.read_parquet(data)
    assert len(rows) == 4
    for prov, g, t in rows:
        d = df[(df.province == prov) & df.gross.notna()]
        dw = d[d.weight.notna()]
        assert g == pytest.approx(R.gini(dw.gross.to_numpy(), dw.weight.to_numpy()), rel=1e-9)
        assert t == pytest.approx(R.theil(d.gross.to_numpy()), rel=1e-9)
