"""The ``uneven`` command line: query, compile, measures, demo."""

from __future__ import annotations

import argparse
import importlib
import sys

import uneven
from uneven.cli.common import (
    add_engine_options,
    add_engine_url_option,
    add_output_options,
    connection,
    emit_result,
    read_sql,
    settings,
)
from uneven.compiler.dialects import EXECUTED_DIALECTS, SUPPORTED_DIALECTS
from uneven.errors import UnevenError

EPILOG = """examples:
  uneven query "SELECT region, gini(income, w), palma(income, w) FROM 'x/*.parquet' GROUP BY region"
  uneven query --format csv --output out.csv "SELECT gini(income) FROM 'survey.parquet'"
  uneven compile "SELECT region, theil(income) FROM t GROUP BY region"
  uneven explain --profile "SELECT region, gini(income, w) FROM 'x/*.parquet' GROUP BY region"
  uneven compile --dialect postgres "SELECT region, gini(income, w) FROM t GROUP BY region"
  uneven query --method bounded "SELECT region, gini(income, w) FROM 'x/*.parquet' GROUP BY region"
  uneven measures
  uneven demo --rows 200000
"""


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="uneven", description="Inequality measures in SQL: write gini(x, w), palma(x), theil(x) … in a "
        "SELECT; uneven compiles them to window-function SQL and runs it in DuckDB.",
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"uneven {uneven.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    q = sub.add_parser("query", help="compile and run a query on DuckDB",
                       description="Compile SQL with measure calls and run it on DuckDB. SQL is the text, "
                       "'-' for standard input, or @FILE.")
    q.add_argument("sql", metavar="SQL", help="the query: its text, - for standard input, or @FILE")
    add_output_options(q)
    q.add_argument("--strict", action="store_true",
                   help="stop with an error naming the group where a measure is undefined (instead of NULL)")
    add_method_options(q)
    add_engine_options(q)
    add_engine_url_option(q)

    c = sub.add_parser("compile", help="print the plain SQL a query compiles to",
                       description="Print the plain SQL (no measure calls left) a query compiles to.")
    c.add_argument("sql", metavar="SQL", help="the query: its text, - for standard input, or @FILE")
    c.add_argument("--dialect", default="duckdb", metavar="NAME",
                   help=f"target SQL dialect: {', '.join(SUPPORTED_DIALECTS)} (default: duckdb; "
                   f"{', '.join(d for d in SUPPORTED_DIALECTS if d not in EXECUTED_DIALECTS)} are emitted, "
                   "not executed in uneven's tests; see docs/engines.md)")
    c.add_argument("--read", default="duckdb", metavar="NAME",
                   help="dialect the input is written in, e.g. spark (default: duckdb)")
    c.add_argument("--strict", action="store_true", help="compile every measure call as strict")
    add_method_options(c)

    sub.add_parser("measures", help="list the measures with their arguments and formulas",
                   description="List every measure: arguments, formula, domain.")

    d = sub.add_parser("demo", help="generate an invented household survey and print a report",
                       description="Write a fictional country's household survey to Parquet and print "
                       "a per-province report of inequality before and after taxes.")
    d.add_argument("--rows", type=int, default=2_000_000, help="households to generate (default: 2,000,000)")
    d.add_argument("--dir", default="uneven-demo", help="folder for the data (default: ./uneven-demo)")
    d.add_argument("--seed", type=int, default=20261201, help="random seed (default: 20261201)")
    add_engine_options(d)
    for name in COMMAND_MODULES:
        importlib.import_module(f"uneven.cli.{name}").register(sub)
    return parser


def add_method_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--method", choices=("exact", "bounded"), default="exact",
                   help="exact (sorts the rows) or bounded: one pass into log-spaced bins, no sort; each measure "
                   "gets <name>_lo and <name>_hi columns, a guaranteed interval (docs/bounded.md)")
    p.add_argument("--tolerance", type=float, metavar="WIDTH",
                   help="with --method bounded: the Gini interval width to aim at (picks the resolution)")
    p.add_argument("--resolution", type=float, metavar="R",
                   help="with --method bounded: relative bin width (default 0.01)")
    p.add_argument("--ordered", choices=("auto", "refine", "window", "stream"), default="auto",
                   help="plan of the ordered measures: refine (bins, then a sort of the cut bins only), window "
                   "(a sort of every row in SQL), stream (DuckDB sorts, numpy reduces; when uneven runs the "
                   "query on DuckDB), auto (refine where every measure on the value is cut-based, stream for a "
                   "weighted Gini and its family on DuckDB, default; docs/plans.md)")


def method_kwargs(args) -> dict:
    return {"method": args.method, "tolerance": args.tolerance, "resolution": args.resolution,
            "ordered": args.ordered}


def cmd_query(args) -> int:
    import duckdb

    from uneven.engine.progress import enable_tracking, run_watched, wants_progress
    sql = read_sql(args.sql)
    con = connection(args) or duckdb.connect()
    show = wants_progress() and enable_tracking(con)  # a progress line on a terminal's stderr only
    try:
        df = run_watched(con, lambda: uneven.query(sql, con, strict=args.strict, progress=show,
                                                    **method_kwargs(args), **settings(args)), show=show)
    finally:
        con.close()
    info = df.attrs.get("uneven")
    if info:
        widths = ", ".join(f"{k} {v:.3g}" for k, v in info["widths"].items())
        print(f"bounded: resolution {info['resolution']:.3g}; widest intervals: {widths or 'none'}", file=sys.stderr)
    return emit_result(df, args)


def cmd_compile(args) -> int:
    print(uneven.compile(read_sql(args.sql), dialect=args.dialect, read=args.read, strict=args.strict,
                          **method_kwargs(args)))
    return 0


def cmd_measures(args) -> int:
    rows = uneven.measures()
    width = max(len(r["signature"]) for r in rows)
    for r in rows:
        print(f"{r['signature']:<{width}}  {r['formula']}  [{r['domain']}]")
    print(INPUT_POLICY)
    print(CAUTIONS)
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


CAUTIONS = """
Read with care (docs/uncertainty.md):
  Small samples: the Gini is biased downward (expected value about (n-1)/n of the population's);
  gini_corrected applies n/(n-1). A top share rests on the few largest records: the top 10 % of
  200 rows is 20 records, and one of them can move it by points (uneven influence shows how much).
  Intervals (_se, _ci_lo/_ci_hi) without psu := / strata := treat rows as independent draws: too
  narrow for a clustered or stratified survey design.  Comparing many pairs (z values) inflates
  false positives.
  HHI and CR_k are estimates from the data given, not legal or regulatory findings; screening
  thresholds are for the competent authority to apply."""


def cmd_demo(args) -> int:
    from uneven.demo.report import run_demo
    return run_demo(rows=args.rows, folder=args.dir, seed=args.seed, con=connection(args), **settings(args))


# Further subcommands live in modules of their own under uneven/cli/, one line each here: a module's
# register(sub) adds its parser and sets ``handler`` (a function of the parsed args returning the exit code).
COMMAND_MODULES: tuple[str, ...] = (
    "decompose", "sources", "compare", "influence", "dominance",
    "lorenz", "report",
    "explain",
    "brackets",
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
    except UnevenError as e:
        print(f"uneven: error: {e}", file=sys.stderr)
        return 2
    except OSError as e:  # a file or folder the user named cannot be read or written
        where = f" ({e.filename})" if getattr(e, "filename", None) else ""
        print(f"uneven: error: {e.strerror or e}{where}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("uneven: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # e.g. `uneven measures | head`: the reader left, nothing to report
        import os
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":
    sys.exit(main())
