"""``uneven demo``: write the invented Quembraland household survey and print a per-province report."""

from __future__ import annotations

import sys
import time
from pathlib import Path

import pandas as pd

import uneven
from uneven.demo.data import COUNTRY, write_survey
from uneven.engine.output import render_table
from uneven.engine.runner import connect

# The report is the SQL an analyst would write, kept as plain text so the demo can show it.
MEASURE_COLUMNS = """gini(gross_income, weight)                 AS "Gini gross",
       gini(disposable_income, weight)            AS "Gini disp",
       palma(gross_income, weight)                AS "Palma gross",
       palma(disposable_income, weight)           AS "Palma disp",
       s80s20(gross_income, weight)               AS "S80/S20 gross",
       s80s20(disposable_income, weight)          AS "S80/S20 disp",
       theil(gross_income, weight)                AS "Theil gross",
       theil(disposable_income, weight)           AS "Theil disp",
       top_share(gross_income, 0.1, weight)       AS "Top10% gross",
       top_share(disposable_income, 0.1, weight)  AS "Top10% disp"
""".rstrip()

PER_PROVINCE_SQL = """SELECT province, count(*) AS households,
       """ + MEASURE_COLUMNS + """
FROM survey
WHERE year = (SELECT max(year) FROM survey)
GROUP BY province
ORDER BY "Gini disp" DESC"""

OVERALL_SQL = """SELECT '(all provinces)' AS province, count(*) AS households,
       """ + MEASURE_COLUMNS + """
FROM survey
WHERE year = (SELECT max(year) FROM survey)"""


def run_demo(rows: int = 2_000_000, folder: str = "uneven-demo", seed: int = 20261201, con=None,
             **settings) -> int:
    if rows < 1:
        raise uneven.UnevenError("--rows must be at least 1")
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    path = out / "quembraland_survey.parquet"
    t0 = time.perf_counter()
    write_survey(path, rows=rows, seed=seed)
    print(f"Wrote {rows:,} invented households of the {COUNTRY} to {path} "
          f"({time.perf_counter() - t0:.1f} s).", file=sys.stderr)

    con = connect(con, **{k: v for k, v in settings.items() if v is not None})
    con.read_parquet(str(path)).create_view("survey")
    print("\nThe report is one query (the survey Parquet file is the view `survey`):\n")
    print(PER_PROVINCE_SQL + "\n")
    t0 = time.perf_counter()
    per_province = uneven.query(PER_PROVINCE_SQL, con)
    overall = uneven.query(OVERALL_SQL, con)
    seconds = time.perf_counter() - t0
    table = pd.concat([per_province, overall], ignore_index=True)
    year = con.execute("SELECT max(year) FROM survey").fetchone()[0]
    print(f"Inequality of household income in the {COUNTRY}, {year}, before (gross) and after "
          "taxes and transfers (disp), weighted by survey weights:\n")
    print(render_table(table, float_format="{:.4f}"))
    print(f"\n{len(per_province)} provinces, {rows:,} rows, computed in {seconds:.2f} s. "
          "Invented data: no real country, person or organisation.")
    print(f"\nTry your own: uneven query \"SELECT year, gini(disposable_income, weight) FROM '{path}' "
          "GROUP BY year ORDER BY year\"")
    report = write_demo_report(con, path, out / "quembraland_report.html")
    print(f"\nReport (measures, ranking, Lorenz curves, trend; one self-contained HTML file): {report}")
    return 0


def write_demo_report(con, survey: Path, target: Path) -> Path:
    """The shareable report of the survey: disposable income by province, with its trend by year."""
    from uneven.engine.output import write_all
    from uneven.report import render_report
    from uneven.report.data import collect
    from uneven.report.query import make_spec

    spec = make_spec(con, str(survey), "disposable_income", "weight", "province", "year")
    data = collect(con, spec, title=f"Disposable household income in the {COUNTRY} by province "
                   "(invented data)")
    write_all(render_report(data, target, "html"), overwrite=True)
    return target
