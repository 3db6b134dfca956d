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
    assert {r["case"] for r in results} >= {"sort", "scan", "pandas", "window_sql", "uneven_w", "uneven_u"}
    assert all(r["status"] == "ok" for r in results)


@pytest.mark.bench
def test_out_of_core_runs_stay_bounded_and_clean(tmp_path):
    out = tmp_path / "ooc.json"
    run = subprocess.run([sys.executable, str(ROOT / "bench" / "ooc.py"), "--rows", "300000", "--json", str(out)],
                         capture_output=True, text=True, timeout=1200)
    assert run.returncode == 0, run.stdout[-2000:] + run.stderr[-2000:]
    runs = json.loads(out.read_text())["runs"]
    assert {(r["data"], r["case"]) for r in runs} == {(d, c) for d in ("one", "g10k") for c in ("uneven_w", "uneven_u")}
    assert all(r["ok"] and r["temp_files_left"] == [] for r in runs)
