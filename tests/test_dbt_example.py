"""examples/dbt_quembraland: a real `dbt build` (dbt-duckdb) in a temporary copy; models call the
macros created by the on-run-start hook; numbers checked against the numpy reference."""

from __future__ import annotations

import importlib.util
import os
import shutil
import subprocess
import sys
from pathlib import Path

import duckdb
import numpy as np
import pytest

from uneven import reference as R

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "dbt_quembraland"


@pytest.mark.skipif(importlib.util.find_spec("dbt") is None or importlib.util.find_spec("dbt.adapters.duckdb") is None,
                    reason="dbt-core and dbt-duckdb are not installed (pip install -e '.[test]')")
def test_dbt_build_computes_the_reference_numbers(tmp_path):
    project = tmp_path / "project"
    shutil.copytree(EXAMPLE, project, ignore=shutil.ignore_patterns("target", "logs", "*.duckdb"))
    src = str(Path(__file__).resolve().parents[1] / "src")
    env = {**os.environ, "PYTHONPATH": src, "QUEMBRALAND_DB": str(tmp_path / "quembraland.duckdb"),
           "DBT_SEND_ANONYMOUS_USAGE_STATS": "false", "DO_NOT_TRACK": "1"}
    subprocess.run([sys.executable, "prepare.py"], cwd=project, env=env, check=True, capture_output=True)
    run = subprocess.run([sys.executable, "-c", "from dbt.cli.main import cli; cli()", "build", "--profiles-dir", ".",
                          "--project-dir", "."], cwd=project, env=env, capture_output=True, text=True, timeout=600,
                         check=False)
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-3000:]
    assert "Completed successfully" in run.stdout

    sys.path.insert(0, str(project))
    try:
        from prepare import households
    finally:
        sys.path.remove(str(project))
    rows = households()
    con = duckdb.connect(str(tmp_path / "quembraland.duckdb"), read_only=True)
    got = con.execute("SELECT province, year, households, gini, top10_share, palma, theil FROM province_inequality").fetchall()
    assert len(got) == 8
    for province, year, n, gini, top10, palma, theil in got:
        x = np.array([r[3] for r in rows if r[1] == province and r[2] == year])
        w = np.array([r[4] for r in rows if r[1] == province and r[2] == year])
        assert n == len(x)
        assert gini == pytest.approx(R.gini(x, w), rel=1e-9)
        assert top10 == pytest.approx(R.top_share(x, 0.1, w), rel=1e-9)
        assert palma == pytest.approx(R.palma(x, w), rel=1e-9)
        assert theil == pytest.approx(R.theil(x, w), rel=1e-9)
    large = dict(con.execute("SELECT province, gini_table_form FROM province_gini_large").fetchall())
    for province, value in large.items():
        x = np.array([r[3] for r in rows if r[1] == province])
        w = np.array([r[4] for r in rows if r[1] == province])
        assert value == pytest.approx(R.gini(x, w), rel=1e-9)
