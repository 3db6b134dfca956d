"""examples/dbt_quembraland_postgres: a real `dbt build` (dbt-postgres) on the matrix's throwaway
PostgreSQL server; the model calls gini(x, w ORDER BY x), theil, atkinson and cv registered by uneven.install (prepare.py);
numbers checked against the numpy reference (``uneven.reference``) to 1e-9."""

from __future__ import annotations

import importlib.util
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from engines import engine_or_skip
from uneven import reference as R

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "dbt_quembraland_postgres"


@pytest.mark.skipif(importlib.util.find_spec("dbt") is None or importlib.util.find_spec("dbt.adapters.postgres") is None,
                    reason="dbt-core and dbt-postgres are not installed (pip install -e '.[test]')")
def test_dbt_postgres_build_computes_the_reference_numbers(tmp_path):
    import psycopg

    from engines import PostgresEngine
    pg = engine_or_skip("postgres")
    info = psycopg.conninfo.conninfo_to_dict(PostgresEngine.server.dsn)
    project = tmp_path / "dbt_quembraland_postgres"  # beside a copy of the DuckDB example (its households)
    shutil.copytree(EXAMPLE, project, ignore=shutil.ignore_patterns("target", "logs"))
    shutil.copytree(ROOT / "examples" / "dbt_quembraland", tmp_path / "dbt_quembraland",
                    ignore=shutil.ignore_patterns("target", "logs", "*.duckdb"))
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src"), "DBT_SEND_ANONYMOUS_USAGE_STATS": "false", "DO_NOT_TRACK": "1",
           "PGHOST": info.get("host", "localhost"), "PGPORT": str(info.get("port", 5432)),
           "PGUSER": info.get("user", "postgres"), "PGDATABASE": info.get("dbname", "postgres"),
           "PGPASSWORD": info.get("password", "")}
    prep = subprocess.run([sys.executable, "prepare.py"], cwd=project, env=env, capture_output=True, text=True)
    assert prep.returncode == 0, prep.stderr[-2000:]
    try:
        run = subprocess.run([sys.executable, "-c", "from dbt.cli.main import cli; cli()", "build", "--profiles-dir",
                              ".", "--project-dir", "."], cwd=project, env=env, capture_output=True, text=True,
                             timeout=600, check=False)
        assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-3000:]
        assert "Completed successfully" in run.stdout
        sys.path.insert(0, str(ROOT / "examples" / "dbt_quembraland"))
        try:
            from prepare import households  # the invented households the seed was written from
        finally:
            sys.path.pop(0)
        rows = households()
        got = pg.con.execute("SELECT province, year, households, gini, theil, atkinson_half, cv, top10_share, palma "
                             "FROM quembraland.province_gini").fetchall()
        assert len(got) == 8
        for province, year, n, gini, theil, atkinson, cv, top10, palma in got:
            x = np.array([r[3] for r in rows if r[1] == province and r[2] == year])
            w = np.array([r[4] for r in rows if r[1] == province and r[2] == year])
            assert n == len(x)
            assert gini == pytest.approx(R.gini(x, w), rel=1e-9)
            assert theil == pytest.approx(R.theil(x, w), rel=1e-9)
            assert atkinson == pytest.approx(R.atkinson(x, 0.5, w), rel=1e-9)
            assert cv == pytest.approx(R.cv(x, w), rel=1e-9)
            assert top10 == pytest.approx(R.top_share(x, 0.1, w), rel=1e-9)
            assert palma == pytest.approx(R.palma(x, w), rel=1e-9)
    finally:
        import uneven
        uneven.uninstall(pg.con)
        pg.con.execute("DROP SCHEMA IF EXISTS quembraland CASCADE")
        pg.close()
