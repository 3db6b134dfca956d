"""``uneven report --engine spark:local[1]`` end to end in a process of its own: a one-core local
Spark session reads the invented groups (conftest.make_groups) as the view ``t``, the command line
writes the Markdown report on that session, and the report's Gini per group equals the numpy
reference (``uneven.reference``, checked against exact fractions in test_reference.py) to the four
decimals the ranking prints. A separate process, since the matrix's session (tests/engines.py) is
local[2] and a process has one active session. Slow (a JVM of its own, every report query a Spark
job on one core): run with ``pytest -m slow tests/test_cli_spark_report.py``."""

from __future__ import annotations

import importlib.util
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import make_groups
from engines import engine_or_skip, require_engines
from uneven import reference as R

ROOT = Path(__file__).resolve().parents[1]

DRIVER = """
import sys
from pyspark.sql import SparkSession
data, out, folder = sys.argv[1:4]
spark = (SparkSession.builder.master("local[1]").appName("uneven-cli-test")
         .config("spark.sql.shuffle.partitions", "1").config("spark.ui.enabled", "false")
         .config("spark.ui.showConsoleProgress", "false").config("spark.local.dir", folder)
         .config("spark.sql.warehouse.dir", folder + "/warehouse").getOrCreate())
spark.sparkContext.setLogLevel("FATAL")
spark.read.parquet(data).createOrReplaceTempView("t")
from uneven.cli.main import main
code = main(["report", "--engine", "spark:local[1]", "t", "--value", "x", "--weight", "w", "--by", "grp",
             "--points", "4", "-o", out])
print("master", spark.sparkContext.master)
spark.stop()
sys.exit(code)
"""


@pytest.mark.slow  # a JVM of its own and several Spark jobs on one core: 7 minutes on a loaded 2-core machine
def test_report_on_spark_local_one_core(tmp_path):
    if importlib.util.find_spec("pyspark") is None or shutil.which("java") is None:
        if require_engines():
            pytest.fail("engine spark is required (UNEVEN_REQUIRE_ENGINES=1) but pyspark or java is missing")
        pytest.skip("pyspark or java is not available here")
    data = make_groups()
    data.to_parquet(tmp_path / "t.parquet", index=False)
    out = tmp_path / "report.md"
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src") + os.pathsep + os.environ.get("PYTHONPATH", "")}
    run = subprocess.run([sys.executable, "-c", DRIVER, str(tmp_path / "t.parquet"), str(out), str(tmp_path / "spark")],
                         env=env, capture_output=True, text=True, timeout=540)
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-3000:]
    assert "master local[1]" in run.stdout
    text = out.read_text()
    for key in ("g0", "g1", "g2"):
        rows = data[(data["grp"] == key) & data["x"].notna() & data["w"].notna()]
        want = R.gini(rows["x"].astype(float).to_numpy(), rows["w"].astype(float).to_numpy())
        assert f"{key} — Gini {want:.4f}" in text, key  # the ranking prints Gini to four decimals
    assert (tmp_path / "report-lorenz.svg").exists() and (tmp_path / "report-ranking.svg").exists()


def test_report_on_the_matrix_spark_session(tmp_path):
    """The same report in this process, on the test matrix's Spark session (local[2], already
    running for the engine tests): ``--engine spark:local[2]`` takes the running session, so CI
    proves the report's door on Spark without a JVM of its own."""
    from uneven.cli.main import main  # noqa: PLC0415

    eng = engine_or_skip("spark")
    data = make_groups()
    eng.load(data, "t_report")
    out = tmp_path / "report.md"
    code = main(["report", "--engine", "spark:local[2]", "t_report", "--value", "x", "--weight", "w",
                 "--by", "grp", "--points", "4", "-o", str(out)])
    assert code in (0, None)
    text = out.read_text()
    for key in ("g0", "g1", "g2"):
        rows = data[(data["grp"] == key) & data["x"].notna() & data["w"].notna()]
        want = R.gini(rows["x"].astype(float).to_numpy(), rows["w"].astype(float).to_numpy())
        assert f"{key} — Gini {want:.4f}" in text, key  # the ranking prints Gini to four decimals
    assert (tmp_path / "report-lorenz.svg").exists() and (tmp_path / "report-ranking.svg").exists()
