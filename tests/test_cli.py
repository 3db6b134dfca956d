"""The uneven command: output formats, atomic writes, errors without tracebacks, the demo."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from uneven import reference as R
from uneven.cli.main import main


@pytest.fixture()
def parquet(tmp_path):
    rng = np.random.default_rng(1)
    df = pd.DataFrame({"g": np.repeat(["a", "b"], 50), "x": rng.lognormal(0, 1, 100), "w": rng.integers(1, 4, 100) * 1.0})
    path = tmp_path / "d.parquet"
    df.to_parquet(path)
    return path, df


def _sql(path):
    return f"SELECT g, gini(x, w) AS gini FROM '{path}' GROUP BY g ORDER BY g"


def _want(df):
    return [R.gini(d.x.to_numpy(), d.w.to_numpy()) for _, d in df.groupby("g")]


def test_query_table_csv_json(parquet, capsys):
    path, df = parquet
    assert main(["query", _sql(path)]) == 0
    out = capsys.readouterr().out
    assert "gini" in out and out.count("\n") == 3
    assert main(["query", "--format", "csv", _sql(path)]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0] == "g,gini"
    assert [float(v.split(",")[1]) for v in lines[1:]] == pytest.approx(_want(df), rel=1e-12)
    assert main(["query", "--format", "json", _sql(path)]) == 0
    rows = json.loads(capsys.readouterr().out)
    assert [r["gini"] for r in rows] == pytest.approx(_want(df), rel=1e-12)


def test_output_file_is_written_once_and_not_overwritten(parquet, tmp_path, capsys):
    path, df = parquet
    out = tmp_path / "res.parquet"
    assert main(["query", "--format", "parquet", "--output", str(out), _sql(path)]) == 0
    assert pd.read_parquet(out)["gini"].tolist() == pytest.approx(_want(df), rel=1e-12)
    before = out.read_bytes()
    assert main(["query", "--format", "parquet", "--output", str(out), _sql(path)]) == 2
    assert "already exists" in capsys.readouterr().err
    assert out.read_bytes() == before
    assert main(["query", "--format", "csv", "--force", "--output", str(out), _sql(path)]) == 0
    assert out.read_text().startswith("g,gini")
    assert [p.name for p in tmp_path.iterdir() if p.name.endswith(".part")] == []


def test_failed_query_leaves_no_file(tmp_path, capsys):
    out = tmp_path / "res.csv"
    assert main(["query", "--output", str(out), "SELECT gini(x) FROM no_such_table"]) == 2
    assert not out.exists() and list(tmp_path.iterdir()) == []
    assert "no_such_table" in capsys.readouterr().err


def test_errors_are_messages_not_tracebacks(capsys):
    assert main(["query", "SELECT top_share(x, 1.5) FROM t"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("uneven: error: top_share(): p must be a fraction")
    assert "line 1, column 8" in err and "Traceback" not in err


def test_sql_from_file_and_stdin(parquet, tmp_path, capsys, monkeypatch):
    path, df = parquet
    f = tmp_path / "q.sql"
    f.write_text(_sql(path))
    assert main(["query", "--format", "csv", f"@{f}"]) == 0
    assert capsys.readouterr().out.startswith("g,gini")
    import io
    monkeypatch.setattr(sys, "stdin", io.StringIO(_sql(path)))
    assert main(["query", "--format", "csv", "-"]) == 0
    assert capsys.readouterr().out.startswith("g,gini")


def test_compile_and_measures(capsys):
    assert main(["compile", "SELECT g, gini(x) FROM t GROUP BY g"]) == 0
    out = capsys.readouterr().out
    assert "ROW_NUMBER() OVER" in out
    import sqlglot

    from uneven.compiler.calls import find_calls
    assert not find_calls(sqlglot.parse_one(out, read="duckdb"))  # only the output alias says gini
    assert main(["measures"]) == 0
    out = capsys.readouterr().out
    for name in R.REFERENCES:
        assert f"\n{name}(" in "\n" + out
    # the cautions where numbers can mislead close the list
    tail = out[out.index("Read with care"):]
    for words in ("biased downward", "few largest records", "independent draws", "false positives",
                  "not legal or regulatory findings", "competent authority"):
        assert words in " ".join(tail.split()), words


def test_help_texts_print_percent_signs_once(capsys):
    helps = {}
    for command in ("sources", "compare"):
        with pytest.raises(SystemExit):
            main([command, "--help"])
        helps[command] = " ".join(capsys.readouterr().out.split())
        assert "%%" not in helps[command]
    assert "grows by 1% for everyone" in helps["sources"]
    assert "inflates false positives" in helps["compare"]


def test_compare_says_many_comparisons_inflate_false_positives(parquet, capsys):
    path, df = parquet
    assert main(["compare", str(path), "x", "x * x", "--format", "csv"]) == 0
    cap = capsys.readouterr()
    assert "inflates false positives" in cap.err and "inflates" not in cap.out
    out = pd.read_csv(__import__("io").StringIO(cap.out))  # stdout holds the table only
    x = df.x.to_numpy()
    assert out["difference"].iloc[0] == pytest.approx(R.gini(x) - R.gini(x * x), rel=1e-10)  # numpy reference


def test_demo_small(tmp_path, capsys):
    assert main(["demo", "--rows", "20000", "--dir", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "Gini gross" in out and "(all provinces)" in out
    assert (tmp_path / "quembraland_survey.parquet").exists()
    # the report's overall weighted Gini of disposable income equals the reference on the file
    df = pd.read_parquet(tmp_path / "quembraland_survey.parquet")
    d = df[df.year == df.year.max()]
    want = R.gini(d.disposable_income.to_numpy(), d.weight.to_numpy())
    line = [ln for ln in out.splitlines() if ln.strip().startswith("(all provinces)")][0]
    assert f"{want:.4f}" in line.split()


def test_console_script_help():
    out = subprocess.run([sys.executable, "-m", "uneven.cli.main", "--help"], capture_output=True, text=True)
    assert out.returncode == 0
    for word in ("query", "compile", "measures", "demo"):
        assert word in out.stdout


def test_list_results_are_json_in_csv(capsys):
    sql = "SELECT lorenz_curve(x, 2) AS c FROM (VALUES (1.0), (3.0)) t(x)"
    assert main(["query", "--format", "csv", sql]) == 0
    import csv
    import io
    rows = list(csv.reader(io.StringIO(capsys.readouterr().out)))
    assert len(rows) == 2 and rows[0] == ["c"]
    points = json.loads(rows[1][0])
    # Lorenz of (1, 3): L(0.5) = 1/4 (the poorer half holds 1 of 4), from the definition
    assert [p["p"] for p in points] == [0.0, 0.5, 1.0]
    assert points[1]["lorenz"] == pytest.approx(0.25, rel=1e-12)


def test_database_option(tmp_path, capsys):
    import duckdb
    db = tmp_path / "w.duckdb"
    con = duckdb.connect(str(db))
    con.execute("CREATE TABLE inc AS SELECT * FROM (VALUES (1.0), (3.0)) t(x)")
    con.close()
    assert main(["query", "--database", str(db), "--format", "csv", "SELECT gini(x) AS g FROM inc"]) == 0
    # (1, 3): Gini 1/4 by the pairwise definition
    assert float(capsys.readouterr().out.splitlines()[1]) == pytest.approx(0.25, rel=1e-12)
    missing = tmp_path / "nope.duckdb"
    assert main(["query", "--database", str(missing), "SELECT 1"]) == 2
    assert "no database file" in capsys.readouterr().err and not missing.exists()


def test_strict_flag(capsys):
    sql = "SELECT g, mld(x) FROM (VALUES ('a', 0.0), ('a', 1.0)) t(g, x) GROUP BY g"
    assert main(["query", sql]) == 0
    capsys.readouterr()
    assert main(["query", "--strict", sql]) == 2
    assert "undefined (NULL) for the group g=a" in capsys.readouterr().err


def test_unwritable_demo_folder_is_a_message(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    assert main(["demo", "--rows", "10", "--dir", str(blocker / "sub")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("uneven: error:") and "Traceback" not in err
