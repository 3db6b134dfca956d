"""The ``ineqsql`` command line: query, compile, measures, demo."""

from __future__ import annotations

import argparse
import importlib
import sys
from pathlib import Path

import ineqsql
from ineqsql.engine.output import FORMATS, format_text, write_result
from ineqsql.cli.common import add_engine_options, connection, read_sql, settings
from ineqsql.errors import IneqsqlError

EPILOG = """examples:
  ineqsql query "SELECT region, gini(income, w), palma(income, w) FROM 'x/*.parquet' GROUP BY region"
  ineqsql query --format csv --output out.csv "SELECT gini(income) FROM 'survey.parquet'"
  ineqsql compile "SELECT region, theil(income) FROM t GROUP BY region"
  ineqsql measures
  ineqsql demo --rows 200000
"""


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ineqsql", description="Inequality measures in SQL: write gini(x, w), palma(x), theil(x) … in a "
        "SELECT; ineqsql compiles them to window-function SQL and runs it in DuckDB.",
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"ineqsql {ineqsql.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    q = sub.add_parser("query", help="compile and run a query on DuckDB",
                       description="Compile SQL with measure calls and run it on DuckDB. SQL is the text, "
                       "'-' for standard input, or @FILE.")
    q.add_argument("sql", metavar="SQL", help="the query: its text, - for standard input, or @FILE")
    q.add_argument("--format", choices=FORMATS, default="table", help="output format (default: table)")
    q.add_argument("--output", "-o", metavar="FILE", help="write to FILE (atomically) instead of the terminal")
    q.add_argument("--force", action="store_true", help="replace FILE if it exists")
    q.add_argument("--strict", action="store_true",
                   help="stop with an error naming the group where a measure is undefined (instead of NULL)")
    add_engine_options(q)

    c = sub.add_parser("compile", help="print the plain SQL a query compiles to",
                       description="Print the plain SQL (no measure calls left) a query compiles to.")
    c.add_argument("sql", metavar="SQL", help="the query: its text, - for standard input, or @FILE")
    c.add_argument("--dialect", default="duckdb", help="target SQL dialect (default: duckdb)")
    c.add_argument("--read", default="duckdb", help="dialect the input is written in (default: duckdb)")
    c.add_argument("--strict", action="store_true", help="compile every measure call as strict")

    sub.add_parser("measures", help="list the measures with their arguments and formulas",
                   description="List every measure: arguments, formula, domain.")

    d = sub.add_parser("demo", help="generate an invented household survey and print a report",
                       description="Write a fictional country's household survey to Parquet and print "
                       "a per-province report of inequality before and after taxes.")
    d.add_argument("--rows", type=int, default=2_000_000, help="households to generate (default: 2,000,000)")
    d.add_argument("--dir", default="ineqsql-demo", help="folder for the data (default: ./ineqsql-demo)")
    d.add_argument("--seed", type=int, default=20261201, help="random seed (default: 20261201)")
    add_engine_options(d)
    for name in COMMAND_MODULES:
        importlib.import_module(f"ineqsql.cli.{name}").register(sub)
    return parser


def cmd_query(args) -> int:
    df = ineqsql.query(read_sql(args.sql), connection(args), strict=args.strict, **settings(args))
    if args.output:
        write_result(df, args.output, args.format, overwrite=args.force)
        print(f"wrote {len(df)} rows to {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(format_text(df, args.format))
    return 0


def cmd_compile(args) -> int:
    print(ineqsql.compile(read_sql(args.sql), dialect=args.dialect, read=args.read, strict=args.strict))
    return 0


def cmd_measures(args) -> int:
    rows = ineqsql.measures()
    width = max(len(r["signature"]) for r in rows)
    for r in rows:
        print(f"{r['signature']:<{width}}  {r['formula']}  [{r['domain']}]")
    print(INPUT_POLICY)
    print("HHI and CR_k are estimates from the data given, not legal or regulatory findings; screening "
          "thresholds are for the competent authority to apply.")
    return 0


INPUT_POLICY = """
Input policy (docs/input-policy.md has every case):
  x: the value; w: an optional weight; p: a fraction in [0, 1]; k: a whole number >= 1; eps >= 0.
  NULL value or weight: the row is skipped.  Weight 0: the row changes nothing.
  NaN or infinite value or weight, negative weight: an error naming the argument and the group.
  Text, dates or booleans as value or weight: an error naming the argument (query; compile alone
  leaves it to the engine's CAST).  Integers and decimals are summed as DOUBLE (no overflow).
  Negative values: Gini, Lorenz, shares, quantiles and Hoover are defined (and may leave [0, 1]);
  log and power measures are NULL outside their domain (shown in brackets above).
  Empty group, total <= 0, bottom share 0, sums past the DOUBLE range: NULL.
  With strict := true in a call (or --strict for the query) every such NULL stops the query
  instead, naming the group."""


def cmd_demo(args) -> int:
    from ineqsql.demo.report import run_demo
    return run_demo(rows=args.rows, folder=args.dir, seed=args.seed, con=connection(args), **settings(args))


# Further subcommands live in modules of their own under ineqsql/cli/, one line each here: a module's
# register(sub) adds its parser and sets ``handler`` (a function of the parsed args returning the exit code).
COMMAND_MODULES: tuple[str, ...] = (
)

COMMANDS = {"query": cmd_query, "compile": cmd_compile, "measures": cmd_measures, "demo": cmd_demo}


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return 2
    try:
        handler = getattr(args, "handler", None) or COMMANDS[args.command]
        return handler(args)
    except IneqsqlError as e:
        print(f"ineqsql: error: {e}", file=sys.stderr)
        return 2
    except OSError as e:  # a file or folder the user named cannot be read or written
        where = f" ({e.filename})" if getattr(e, "filename", None) else ""
        print(f"ineqsql: error: {e.strerror or e}{where}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("ineqsql: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # e.g. `ineqsql measures | head`: the reader left, nothing to report
        import os
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":
    sys.exit(main())
