"""Where the stream plan's time goes, in one process: DuckDB's sort, the job's queries drained, the
job (``engine/stream.run_job``) and the whole ``uneven.query``, alternating, median of --repeat.

    python bench/stream_parts.py --file F.parquet --measures ten
    PYTHONPATH=OLD/src python bench/stream_parts.py …        # the same on an earlier source tree

``--measures``: one (gini(x, w)), u (gini(x)), ten (bench/stream.py's ten measures); ``--window`` adds
the window plan's whole query, in the same loop. Data: the Parquet
files bench/stream.py writes (grp, x, w). Run it on two source trees one after the other, or
alternate the two processes, to compare revisions (bench/README.md, "Stream plan, speed round").
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--file", required=True)
    ap.add_argument("--measures", choices=("one", "u", "ten"), default="one")
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--window", action="store_true", help="time the window plan's whole query too")
    a = ap.parse_args()
    sys.path.insert(0, str(Path(__file__).parent))
    import duckdb
    from stream import TEN

    import uneven
    import uneven.engine.stream as se
    from uneven.compiler.context import CompileOptions
    from uneven.compiler.pipeline import compile_with_context
    from uneven.engine.columns import DuckDBSchema
    con = duckdb.connect()
    con.execute("SET threads = 2")
    con.execute("SET preserve_insertion_order = false")
    src = f"read_parquet('{a.file}')"
    measures = {"one": "gini(x, w)", "u": "gini(x)", "ten": TEN}[a.measures]
    query = f"SELECT grp, {measures} FROM {src} GROUP BY grp"
    _, ctx = compile_with_context(query, CompileOptions(ordered="stream", stream=True), DuckDBSchema(con))
    job = ctx.stream_jobs[0]
    cols = "grp, x" if a.measures == "u" else "grp, x, w"
    se.PREFETCH = False

    def drain(sql: str):
        def run():
            for _ in con.sql(sql).to_arrow_reader(se.BATCH_ROWS):
                pass
        return run

    last = cols.split(", ")[-1]  # (read, or DuckDB drops the weight from the sort: bench/stream.py)
    sort_sql = f"SELECT max({last}) FROM (SELECT {cols} FROM {src} ORDER BY grp, x)"
    steps = {"sort": lambda: con.execute(sort_sql).fetchall(),
             "rows drained (checked)": drain(job.rows_sql)}
    if getattr(job, "fast_rows_sql", ""):
        steps["rows drained (unchecked)"] = drain(job.fast_rows_sql)
    if job.totals_sql:
        steps["totals"] = drain(job.totals_sql)
    if getattr(job, "fast_totals_sql", ""):
        steps["totals (unchecked)"] = drain(job.fast_totals_sql)
    steps["job (run_job)"] = lambda: se.run_job(con, job)
    steps["query"] = lambda: uneven.query(query, con, ordered="stream")
    if a.window:
        steps["window plan (query)"] = lambda: uneven.query(query, con, ordered="window")
    times: dict[str, list[float]] = {k: [] for k in steps}
    for _ in range(a.repeat):
        for name, step in steps.items():
            t0 = time.perf_counter()
            step()
            times[name].append(time.perf_counter() - t0)
    sort = statistics.median(times["sort"])
    print(f"{a.file} {a.measures}: uneven from {os.path.dirname(uneven.__file__)}; load average "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}; median of {a.repeat}")
    for name, ts in times.items():
        m = statistics.median(ts)
        print(f"  {name:<26} {m:7.3f} s  {m / sort:5.2f}x the sort")


if __name__ == "__main__":
    main()
