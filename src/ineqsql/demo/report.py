"""``ineqsql demo``: write the invented Vareland household survey and print a per-province report."""

from __future__ import annotations

import sys
import time
from pathlib import Path

import pandas as pd

import ineqsql
from ineqsql.demo.data import COUNTRY, write_survey
from ineqsql.engine.output import render_table
from ineqsql.engine.runner import connect

MEASURES = [
    ("Gini", "gini({v}, weight)"),
    ("Palma", "palma({v}, weight)"),
    ("S80/S20", "s80s20({v}, weight)"),
    ("Theil", "theil({v}, weight)"),
    ("Top10%", "top_share({v}, 0.1, weight)"),
]
INCOMES = [("gross", "gross_income"), ("disp", "disposable_income")]


def report_sql(by_province: bool) -> str:
    cols = [f"{call.format(v=col)} AS \"{label} {short}\""
            for label, call in MEASURES for short, col in INCOMES]
    head = "province" if by_province else "'(all provinces)' AS province"
    tail = "GROUP BY province\nORDER BY \"Gini disp\" DESC" if by_province else ""
    return (f"SELECT {head}, count(*) AS households,\n       " + ",\n       ".join(cols)
            + "\nFROM survey\nWHERE year = (SELECT max(year) FROM survey)\n" + tail).strip()


def run_demo(rows: int = 2_000_000, folder: str = "ineqsql-demo", seed: int = 20261201, con=None,
             **settings) -> int:
    if rows < 1:
        raise ineqsql.IneqsqlError("--rows must be at least 1")
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    path = out / "vareland_survey.parquet"
    t0 = time.perf_counter()
    write_survey(path, rows=rows, seed=seed)
    print(f"Wrote {rows:,} invented households of the {COUNTRY} to {path} "
          f"({time.perf_counter() - t0:.1f} s).", file=sys.stderr)

    con = connect(con, **{k: v for k, v in settings.items() if v is not None})
    con.read_parquet(str(path)).create_view("survey")
    sql = report_sql(by_province=True)
    print("\nThe report is one query (the survey Parquet file is the view `survey`):\n")
    print(sql + "\n")
    t0 = time.perf_counter()
    per_province = ineqsql.query(sql, con)
    overall = ineqsql.query(report_sql(by_province=False), con)
    seconds = time.perf_counter() - t0
    table = pd.concat([per_province, overall], ignore_index=True)
    year = con.execute("SELECT max(year) FROM survey").fetchone()[0]
    print(f"Inequality of household income in the {COUNTRY}, {year}, before (gross) and after "
          "taxes and transfers (disp), weighted by survey weights:\n")
    print(render_table(table, float_format="{:.4f}"))
    print(f"\n{len(per_province)} provinces, {rows:,} rows, computed in {seconds:.2f} s. "
          "Invented data: no real country, person or organisation.")
    print(f"\nTry your own: ineqsql query \"SELECT year, gini(disposable_income, weight) FROM '{path}' "
          "GROUP BY year ORDER BY year\"")
    return 0
