"""What the structure subcommands (decompose, sources, compare, influence) share: the relation,
value, weight and group options, and writing the resulting table."""

from __future__ import annotations

import argparse
import sys

from ineqsql.cli.common import add_engine_options, connection
from ineqsql.engine.output import FORMATS, format_text, write_result

RELATION_HELP = ("the rows: a table name, a quoted file path ('survey/*.parquet'), a table function "
                 "(read_csv('x.csv')) or a parenthesised query with an alias")


def add_table_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("relation", metavar="RELATION", help=RELATION_HELP)
    p.add_argument("--weight", "-w", metavar="EXPR", help="weight column or expression (default: every row 1)")
    p.add_argument("--by", action="append", default=[], metavar="EXPR",
                   help="group key (repeat for several keys); one block of rows per group")
    p.add_argument("--format", choices=FORMATS, default="table", help="output format (default: table)")
    p.add_argument("--output", "-o", metavar="FILE", help="write to FILE (atomically) instead of the terminal")
    p.add_argument("--force", action="store_true", help="replace FILE if it exists")
    add_engine_options(p)


def show(df, args) -> int:
    if args.output:
        write_result(df, args.output, args.format, overwrite=args.force)
        print(f"wrote {len(df)} rows to {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(format_text(df, args.format))
    return 0


def common(args) -> dict:
    return {"weight": args.weight, "by": args.by, "con": connection(args)}
