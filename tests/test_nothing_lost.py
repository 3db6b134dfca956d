"""Nothing lost: a result file is written whole or not at all (temporary file, then rename), an
existing file survives a failed replacement, DuckDB leaves no spill files behind, and the source
data are never modified."""

from __future__ import annotations

import hashlib

import duckdb
import pandas as pd
import pytest

import uneven
from uneven.cli.main import main
from uneven.engine import output
from uneven.errors import InputDataError, OutputError

DF = pd.DataFrame({"g": ["a", "b"], "gini": [0.25, 0.5]})


def _leftovers(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".part"))


@pytest.mark.parametrize("failure", [OSError("disk full"), KeyboardInterrupt()], ids=["error", "interrupt"])
def test_failed_write_leaves_no_file_and_no_temporary(tmp_path, monkeypatch, failure):
    target = tmp_path / "out.csv"

    def half_written(df, fmt, path):
        with open(path, "w") as f:
            f.write("g,gini\na,0.2")  # a partial file, then the failure
        raise failure

    monkeypatch.setattr(output, "_serialize", half_written)
    with pytest.raises((OutputError, KeyboardInterrupt)):
        output.write_result(DF, target, "csv")
    assert not target.exists()
    assert _leftovers(tmp_path) == []


def test_failed_replacement_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "out.json"
    output.write_result(DF, target, "json")
    before = target.read_bytes()

    def broken(df, fmt, path):
        open(path, "w").write("[{")
        raise ValueError("cannot serialise")

    monkeypatch.setattr(output, "_serialize", broken)
    with pytest.raises(OutputError, match="could not write"):
        output.write_result(DF, target, "json", overwrite=True)
    assert target.read_bytes() == before
    assert _leftovers(tmp_path) == []


def test_existing_file_needs_force(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("keep me\n")
    with pytest.raises(OutputError, match="already exists"):
        output.write_result(DF, target, "csv")
    assert target.read_text() == "keep me\n"


def test_query_failing_on_bad_data_writes_nothing(tmp_path, capsys):
    src = tmp_path / "rows.parquet"
    duckdb.sql("SELECT i % 3 AS g, CASE WHEN i = 500 THEN CAST('NaN' AS DOUBLE) ELSE i END AS x "
               "FROM range(1000) r(i)").write_parquet(str(src))
    out = tmp_path / "out.csv"
    code = main(["query", "--format", "csv", "--output", str(out), f"SELECT g, gini(x) FROM '{src}' GROUP BY g"])
    assert code == 2
    assert "NaN or infinite value in the value argument x (the group g=2)" in capsys.readouterr().err
    assert not out.exists() and _leftovers(tmp_path) == []


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_spills_are_removed_and_source_untouched(tmp_path):
    src = tmp_path / "big.parquet"
    duckdb.sql("SELECT i % 4 AS g, (hash(i) % 100000)::DOUBLE AS x, 1 + i % 3 AS w FROM range(1500000) r(i)"
               ).write_parquet(str(src))
    before = _digest(src)
    spill = tmp_path / "spill"
    sql = f"SELECT g, gini(x, w), theil(x, w) FROM '{src}' GROUP BY g ORDER BY g"
    df = uneven.query(sql, memory_limit="40MB", threads=1, temp_directory=str(spill))
    assert len(df) == 4 and df.iloc[:, 1].between(0, 1).all()
    # a run that fails half way (a negative weight in the last rows) leaves no spill either
    bad = f"SELECT g, gini(x, CASE WHEN x > 99990 THEN -1 ELSE w END) FROM '{src}' GROUP BY g"
    with pytest.raises(InputDataError, match="negative weight"):
        uneven.query(bad, memory_limit="40MB", threads=1, temp_directory=str(spill))
    assert not spill.exists() or list(spill.rglob("*")) == []
    assert _digest(src) == before
