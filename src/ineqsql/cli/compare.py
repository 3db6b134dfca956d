"""ineqsql compare: Gini of two values of the same rows, their difference and its paired SE."""

from __future__ import annotations

import argparse

from ineqsql.cli.common import emit_result
from ineqsql.cli.tables import add_table_options, common


def register(sub) -> None:
    p = sub.add_parser("compare", help="Gini of two values of the same rows and the paired difference",
                       description="Gini of FIRST and SECOND (e.g. gross and disposable income) on the rows where "
                       "both are present, their difference, its standard error accounting for the pairing "
                       "(linearised Gini of each row, with-replacement variance) and difference/se. "
                       "The SE treats the rows as one stratum of independently drawn units.",
                       epilog="example: ineqsql compare 'survey.parquet' gross disposable --weight w --by province",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    add_table_options(p)
    p.add_argument("first", metavar="FIRST", help="the first value")
    p.add_argument("second", metavar="SECOND", help="the second value")
    p.set_defaults(handler=run)


def run(args) -> int:
    from ineqsql.structure import compare
    return emit_result(compare(args.relation, args.first, args.second, **common(args)), args)
