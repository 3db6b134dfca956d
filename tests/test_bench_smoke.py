"""The benchmark runs end to end at a tiny size and its cases agree (on demand: pytest -m bench)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.bench
def test_bench_runs_and_cases_agree(tmp_path):
    out = tmp_path / "bench.json"
    run = subprocess.run([sys.executable, str(ROOT / "bench" / "run.py"), "--rows", "200000", "--rows-one",
                          "300000", "--repeat", "1", "--json", str(out)], capture_output=True, text=True,
                         timeout=1200)
    assert run.returncode == 0, run.stdout[-2000:] + run.stderr[-2000:]
    results = json.loads(out.read_text())["results"]
    assert {r["case"] for r in results} >= {"sort", "scan", "pandas", "window_sql", "ineqsql_w", "ineqsql_u"}
    assert all(r["status"] == "ok" for r in results)
