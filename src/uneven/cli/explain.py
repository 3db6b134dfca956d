"""``uneven explain``: the passes the planner chose for a query, and on request DuckDB's profile."""

from __future__ import annotations

import json

import uneven
from uneven.cli.common import add_engine_options, add_engine_url_option, connection, read_sql, settings

EPILOG = """examples:
  uneven explain "SELECT region, gini(income, w), palma(income, w) FROM 'x.parquet' GROUP BY region"
  uneven explain --profile "SELECT gini(items) FROM 'sales.parquet'"
  uneven explain --show-sql --tie-grouping off @query.sql
"""


def register(sub) -> None:
    import argparse

    p = sub.add_parser("explain", help="show the passes a query compiles to (and where DuckDB spends time)",
                       description="Show the passes the planner chose for a query: per pass its kind and "
                       "variant, value, weight or entity, FILTER, the measure calls it serves, the CTEs it "
                       "adds and why. With --profile the query also runs once under DuckDB's profiler and "
                       "the slowest operators are listed.",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("sql", metavar="SQL", help="the query: its text, - for standard input, or @FILE")
    p.add_argument("--profile", action="store_true",
                   help="run the query once and show time per DuckDB operator (on another engine: its plan, "
                   "analyzed where it can be, and the run time)")
    p.add_argument("--top", type=int, default=15, metavar="N", help="operators to list with --profile (default 15)")
    p.add_argument("--show-sql", action="store_true", help="also print the compiled SQL")
    p.add_argument("--json", action="store_true", help="print the explanation as JSON")
    p.add_argument("--tie-grouping", choices=("auto", "on", "off"), default="auto",
                   help="group tied values before the ordered pass's window: auto (probe the data, default), "
                   "on, off")
    p.add_argument("--ordered", choices=("auto", "refine", "window", "stream"), default="auto",
                   help="plan of the ordered measures: auto (default), refine, window or stream (docs/plans.md)")
    p.add_argument("--strict", action="store_true", help="compile every measure call as strict")
    add_engine_options(p)
    add_engine_url_option(p)
    p.set_defaults(handler=run)


def run(args) -> int:
    if args.top < 1:
        from uneven.errors import UnevenError
        raise UnevenError(f"--top must be at least 1, got {args.top}")
    found = uneven.explain(read_sql(args.sql), connection(args), profile=args.profile, strict=args.strict,
                            tie_grouping=args.tie_grouping, ordered=args.ordered, **settings(args))
    if args.json:
        doc: dict[str, object] = {"passes": found.passes, "read_once": found.read_once, "sql": found.sql}
        if found.operators is not None:
            doc.update({"total_seconds": found.total_seconds, "result_rows": found.result_rows,
                        "operators": found.operators, "system": found.system})
        if found.engine_plan is not None:  # another engine: its own plan, and its run time when profiled
            doc.update({"engine": found.engine, "engine_plan": found.engine_plan})
            if found.total_seconds is not None:
                doc.update({"total_seconds": found.total_seconds, "result_rows": found.result_rows})
        print(json.dumps(doc, indent=2))
    else:
        print(found.text(show_sql=args.show_sql, top=args.top))
    return 0
