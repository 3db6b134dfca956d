"""uneven brackets: measures with bounds from a bracket table (published tabulations)."""

from __future__ import annotations

import argparse
import sys

from uneven.cli.common import add_engine_url_option, add_output_options, connection, emit_result
from uneven.cli.tables import RELATION_HELP

EPILOG = """the bracket table has one row per bracket (and group):
  low    the bracket's lower end            high   its upper end (NULL: the open top bracket)
  units  units in the bracket (a count)     total  the sum of their values (NULL: not published)

examples:
  uneven brackets tabulation.csv --by province
  uneven brackets "read_csv('tab.csv')" --low from_amount --high to_amount --units households \\
      --total income --measure gini --measure "top_share(0.01) AS top1"
  uneven brackets tabulation.csv --by province --by year --format csv -o bounds.csv
  uneven brackets tabulation --by province --engine postgresql://localhost/stats

For every measure: the point estimate and its bounds <measure>_lo, <measure>_hi (inf: no limit).
Every figure from a bracket table is approximate; see docs/brackets.md."""


def register(sub) -> None:
    p = sub.add_parser("brackets", help="Gini, shares, Palma, quantiles with bounds from a bracket table",
                       description="Measures from a bracket table (from-to, units, total per bracket; an "
                       "open top bracket; totals may be missing): per group, certified lower and upper "
                       "bounds that hold for any data the table could come from, and a point estimate "
                       "(linear density within brackets keeping each bracket's mean, a Pareto tail on "
                       "the open top bracket). Brackets without a total are counted in missing_totals.",
                       epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("relation", metavar="RELATION", help=RELATION_HELP)
    p.add_argument("--by", action="append", default=[], metavar="EXPR",
                   help="group key (repeat for several); rows of a group naming the same bracket add up")
    p.add_argument("--measure", "-m", action="append", default=[], metavar="MEASURE",
                   help="gini, lorenz(p), bottom_share(p), top_share(p), palma, s80s20, quantile_w(p), "
                   "percentile_ratio(hi, lo), mean; 'AS name' renames (repeat; default: gini, top_share(0.1), "
                   "bottom_share(0.4), palma, s80s20, quantile_w(0.5))")
    for role, meaning in (("low", "lower end"), ("high", "upper end"), ("units", "units"), ("total", "total")):
        p.add_argument(f"--{role}", default=role, metavar="EXPR",
                       help=f"column or expression of the bracket's {meaning} (default: {role})")
    add_output_options(p)
    p.add_argument("--database", metavar="FILE", help="a DuckDB database file holding the table (default: in memory)")
    add_engine_url_option(p)
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.brackets import CAUTION, from_brackets
    from uneven.brackets.run import DEFAULT_MEASURES
    df = from_brackets(args.relation, args.measure or DEFAULT_MEASURES, low=args.low, high=args.high,
                       units=args.units, total=args.total, by=args.by, con=connection(args))
    code = emit_result(df, args)
    print(CAUTION, file=sys.stderr)
    return code
