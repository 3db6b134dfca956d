"""``uneven lorenz``: Lorenz curves per group as a points table (terminal, CSV, JSON, Parquet) or a
plot (PNG, SVG), computed in the database."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from uneven.cli.common import add_engine_options, add_engine_url_option, connection, settings
from uneven.engine.output import format_text, write_result
from uneven.engine.progress import run_watched
from uneven.errors import UnevenError

EPILOG = """examples:
  uneven lorenz 'survey/*.parquet' --value income --weight w --by region --output lorenz.png
  uneven lorenz survey.csv --value income --points 10
  uneven lorenz households --database survey.duckdb --value income --by year --output points.csv
"""
TABLE_SUFFIXES = {".csv": "csv", ".json": "json", ".parquet": "parquet"}
PLOT_SUFFIXES = (".png", ".svg")


def add_source_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("source", metavar="SOURCE",
                   help="a Parquet or CSV file or glob (e.g. 'data/*.parquet'), or a table or view of --database")
    p.add_argument("--value", required=True, metavar="COL", help="the column whose spread is measured (numeric)")
    p.add_argument("--weight", metavar="COL",
                   help="a weight column (e.g. survey weights); default: every row counts once")
    p.add_argument("--by", metavar="COLS", help="group columns, comma-separated (default: all rows together)")


def open_for(args):
    """The connection a command works on (the --database file, or in memory) with its settings."""
    from uneven.report.query import open_connection
    return open_connection(connection(args), **settings(args))[0]


def register(sub) -> None:
    p = sub.add_parser("lorenz", help="Lorenz curves per group: a points table or a plot (PNG/SVG)",
                       description="Compute the Lorenz curve of each group in the database (one query, "
                       "points at p = 0, 1/K, …, 1) and print them, write them as a table (.csv, .json, "
                       ".parquet) or plot them (.png, .svg; needs matplotlib: pip install 'uneven[plot]').",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_source_options(p)
    p.add_argument("--points", type=int, default=100, metavar="K",
                   help="segments of the grid: K+1 points per group (1-1000, default 100)")
    p.add_argument("--generalized", action="store_true",
                   help="plot generalized Lorenz curves μ·L(p) (the table always has both)")
    p.add_argument("--max-groups", type=int, default=12, metavar="N",
                   help="most curves in one plot (default 12)")
    p.add_argument("--title", help="plot title")
    p.add_argument("--output", "-o", metavar="FILE",
                   help="write to FILE: .png or .svg (plot), .csv, .json or .parquet (points table)")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")
    add_engine_options(p)
    add_engine_url_option(p)
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.report.lorenz import lorenz_points
    out = Path(args.output) if args.output else None
    suffix = out.suffix.lower() if out else ""
    if out is not None:
        if suffix not in TABLE_SUFFIXES and suffix not in PLOT_SUFFIXES:
            raise UnevenError(f"--output {out}: use .png or .svg for a plot, .csv, .json or .parquet for the points")
        if out.exists() and not args.force:
            raise UnevenError(f"{out} already exists; pass --force to replace it")
        if suffix in PLOT_SUFFIXES:
            from uneven.report.plot import load_matplotlib
            load_matplotlib()  # fail before the query when matplotlib is missing
    con = open_for(args)
    try:
        points = run_watched(con, lambda: lorenz_points(args.source, args.value, weight=args.weight, by=args.by,
                                                        points=args.points, con=con),
                             label="computing Lorenz curves")
    finally:
        con.close()
    if out is None:
        sys.stdout.write(format_text(points, "table"))
        return 0
    if suffix in PLOT_SUFFIXES:
        from uneven.report.plot import plot_lorenz
        plot_lorenz(points, out, generalized=args.generalized, title=args.title, max_groups=args.max_groups,
                    overwrite=args.force)
    else:
        write_result(points, out, TABLE_SUFFIXES[suffix], overwrite=args.force)
    print(f"wrote {out}", file=sys.stderr)
    return 0
