"""uneven influence: does one record drive a result?"""

from __future__ import annotations

import argparse

from uneven.cli.common import emit_result
from uneven.cli.tables import add_table_options, common


def register(sub) -> None:
    p = sub.add_parser("influence", help="a measure without the largest rows; the most influential row",
                       description="Per group: the measure on all rows and without the 1..K largest rows (by "
                       "value, then weight); for the Gini, Theil and MLD also the row whose removal changes "
                       "it most, with the exact measure without it.",
                       epilog="examples:\n  uneven influence 'survey.parquet' --value income --by province\n"
                       "  uneven influence sales.csv --value revenue --measure top_share --param 0.1 -k 5",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    add_table_options(p)
    p.add_argument("--value", "-x", required=True, metavar="EXPR", help="the value (e.g. income)")
    p.add_argument("--measure", default="gini", help="a measure of one value (default: gini)")
    p.add_argument("--param", action="append", type=float, default=[], metavar="NUMBER",
                   help="the measure's numeric parameters, in order (e.g. --param 0.1 for top_share)")
    p.add_argument("-k", type=int, default=3, help="drop up to K largest rows (default: 3)")
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.tables.influence import influence
    return emit_result(influence(args.relation, args.value, k=args.k, measure=args.measure, params=args.param,
                          **common(args)), args)
