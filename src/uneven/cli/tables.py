"""What the structure subcommands (decompose, sources, compare, influence) share: the relation,
value, weight and group options, and writing the resulting table."""

from __future__ import annotations

import argparse

from uneven.cli.common import add_engine_options, add_engine_url_option, add_output_options, connection

RELATION_HELP = ("the rows: a table name, a quoted file path ('survey/*.parquet'), a table function "
                 "(read_csv('x.csv')) or a parenthesised query with an alias")


def add_table_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("relation", metavar="RELATION", help=RELATION_HELP)
    p.add_argument("--weight", "-w", metavar="EXPR", help="weight column or expression (default: every row 1)")
    p.add_argument("--by", action="append", default=[], metavar="EXPR",
                   help="group key (repeat for several keys); one block of rows per group")
    add_output_options(p)
    add_engine_options(p)
    add_engine_url_option(p)  # --engine URL: PostgreSQL, SQLite, Spark (the tables compile for each)


def common(args) -> dict:
    return {"weight": args.weight, "by": args.by, "con": connection(args)}
