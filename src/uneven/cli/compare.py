"""uneven compare: a measure of two values of the same rows, or of two groups of rows, their
difference and its standard error."""

from __future__ import annotations

import argparse
import sys

from uneven.cli.common import emit_result
from uneven.cli.tables import add_table_options, common
from uneven.tables.compare import MANY_COMPARISONS


def register(sub) -> None:
    p = sub.add_parser("compare", help="the difference of a measure between two values or two groups, with its SE",
                       description="Two values of the same rows (FIRST and SECOND, e.g. gross and disposable "
                       "income): the Gini of each on the rows where both are present, their difference, its "
                       "standard error accounting for the pairing (linearised Gini of each row, with-replacement "
                       "variance; the rows are one stratum of independently drawn units) and difference/se.\n\n"
                       "Two groups of rows (FIRST only, with --group COL --groups A B): the measure in group A "
                       "and in group B, the difference A − B and its standard error: --se design (Gini, the "
                       "default for it) linearizes the difference under the survey design shared by both "
                       "groups (--strata/--psu; covariance through shared PSUs included); --se independent "
                       "(any measure with an SE) is sqrt(se_A² + se_B²), each group's own linearized SE. "
                       "The column se_method says which was computed.\n\n" + MANY_COMPARISONS,
                       epilog="examples:\n  uneven compare 'survey.parquet' gross disposable --weight w --by province\n"
                       "  uneven compare 'survey.parquet' income --group sex --groups f m --weight w "
                       "--strata stratum --psu cluster\n"
                       "  uneven compare 'survey.parquet' income --group province --groups Arquimbel Bozzlevar "
                       "--measure top_share --param 0.1",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    add_table_options(p)
    p.add_argument("first", metavar="FIRST", help="the (first) value")
    p.add_argument("second", metavar="SECOND", nargs="?", help="the second value of the same rows")
    g = p.add_argument_group("two groups of rows")
    g.add_argument("--group", metavar="EXPR", help="the column whose values name the groups")
    g.add_argument("--groups", nargs=2, metavar=("A", "B"), help="the two values of --group to compare (A − B)")
    g.add_argument("--measure", default="gini", help="a measure with a standard error (default: gini)")
    g.add_argument("--param", action="append", type=float, default=[], metavar="NUMBER",
                   help="the measure's numeric parameters, in order (e.g. --param 0.1 for top_share)")
    g.add_argument("--se", choices=("design", "independent"), help="how the SE of the difference is computed "
                   "(default: design for gini, independent otherwise)")
    g.add_argument("--strata", metavar="EXPR", help="stratum of each row (survey design)")
    g.add_argument("--psu", metavar="EXPR", help="primary sampling unit of each row (survey design)")
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.tables.compare import compare
    if args.group is None and args.groups is None:
        out = compare(args.relation, args.first, args.second, **common(args))
    else:
        out = compare(args.relation, args.first, args.second, group=args.group, groups=group_values(args.groups),
                      measure=args.measure, params=args.param, se=args.se, strata=args.strata, psu=args.psu,
                      **common(args))
    code = emit_result(out, args)
    print(MANY_COMPARISONS, file=sys.stderr)  # stderr: the table on stdout stays machine-readable
    return code


def group_values(pair):
    """Group values from the command line: numbers when both read as numbers, else text."""
    if pair is None:
        return None
    try:
        return tuple(int(v) if v.lstrip("-").isdigit() else float(v) for v in pair)
    except ValueError:
        return tuple(pair)
