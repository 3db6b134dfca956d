"""``uneven report``: one self-contained HTML file (or Markdown with SVG files beside it) with the
measures per group, the ranking by Gini, Lorenz curves and, with --time, the trend."""

from __future__ import annotations

import argparse
from pathlib import Path

from uneven.cli.common import add_engine_options, add_engine_url_option
from uneven.cli.lorenz import add_source_options, open_for
from uneven.engine.progress import run_watched

EPILOG = """examples:
  uneven report 'survey/*.parquet' --value income --weight w --by region --time year -o report.html
  uneven report households --database survey.duckdb --value income --by region --format md -o report.md
  uneven report 'survey/*.parquet' --value income --weight w --by region --dominance Arquimbel,Bozzlevar

The HTML file has everything inline (styles, SVG charts): it opens offline and can be sent as it is.
The Markdown version links its charts as SVG files written next to it (NAME-ranking.svg,
NAME-lorenz.svg, NAME-trend.svg, NAME-dominance.svg).

--dominance A,B adds a section comparing the Lorenz curves of two groups of --by (one --by column):
the difference A − B at p = 0.05, 0.10, …, 0.95 with its simultaneous 95 % band, the table of
ordinates, differences and intervals, and the verdict: 'A dominates B', 'B dominates A', 'curves
cross' or 'not distinguishable at this level' (see `uneven dominance --help` and docs/dominance.md).
With --time the comparison is for the latest period, as the table is.
"""


def register(sub) -> None:
    p = sub.add_parser("report", help="a shareable HTML (or Markdown) report: measures, ranking, Lorenz curves, trend",
                       description="Compute inequality measures per group in the database and write a "
                       "self-contained report: a table of measures per group ranked by Gini, the groups' "
                       "Lorenz curves and, with --time, Gini over time. The table and curves are for the "
                       "latest --time value.", epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_source_options(p)
    p.add_argument("--time", metavar="COL",
                   help="a time column (e.g. year): adds the trend; the table is for its latest value")
    p.add_argument("--format", choices=("html", "md"), help="html (default; .md output implies md) or md")
    p.add_argument("--output", "-o", metavar="FILE", help="the report file (default: uneven-report.html or .md)")
    p.add_argument("--title", help="the report's title")
    p.add_argument("--points", type=int, default=50, metavar="K", help="Lorenz grid: K+1 points per group (default 50)")
    p.add_argument("--dominance", metavar="A,B",
                   help="compare the Lorenz curves of two groups of --by (a section with a test, chart and table)")
    p.add_argument("--dominance-generalized", action="store_true",
                   help="with --dominance: compare generalized Lorenz curves μ·L(p) instead")
    p.add_argument("--force", action="store_true", help="replace the report (and its SVG files) if they exist")
    add_engine_options(p)
    add_engine_url_option(p)
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.engine.output import check_targets, write_all
    from uneven.errors import UnevenError
    from uneven.report import render_report, report_format
    from uneven.report.data import collect
    from uneven.report.dominance import pair
    from uneven.report.markdown import side_file_names
    from uneven.report.query import make_spec

    fmt = report_format(args.output, args.format)
    if args.dominance_generalized and not args.dominance:
        raise UnevenError("--dominance-generalized needs --dominance A,B")
    pair(args.dominance)  # a malformed pair is refused before anything runs
    out = Path(args.output or f"uneven-report.{fmt}")
    sides = side_file_names(out, bool(args.time), bool(args.dominance))
    targets = [out] + ([out.parent / n for n in sides] if fmt == "md" else [])
    check_targets(targets, args.force)  # before the queries: a refusal should not cost a long run
    con = open_for(args)
    try:
        data = run_watched(con, lambda: collect(con, make_spec(con, args.source, args.value, args.weight, args.by,
                                                               args.time), points=args.points, title=args.title,
                                                dominance=args.dominance, generalized=args.dominance_generalized),
                           label="computing the report")
    finally:
        con.close()
    write_all(render_report(data, out, fmt), overwrite=args.force)
    print(out)
    return 0
