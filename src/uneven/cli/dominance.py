"""uneven dominance: is one group's Lorenz curve above another's, with a test."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from uneven.cli.common import add_engine_options, add_engine_url_option, add_output_options, connection, emit_result
from uneven.cli.compare import group_values
from uneven.cli.tables import RELATION_HELP

DESCRIPTION = (
    "Compare the Lorenz curves (or, with --generalized, the generalized Lorenz curves μ·L(p)) of two "
    "groups of rows at --points evenly spaced fractions p strictly between 0 and 1. At each p: both "
    "ordinates, the difference A − B, its standard error (each group's linearized SE, the groups taken "
    "as independent samples), a simultaneous band (difference ± c·se) and t = difference/se.\n\n"
    "The verdict (Bishop, Chakraborti and Thistle 1989; Davidson and Duclos 2000; from memory), with c the "
    "critical value for all points at once (Šidák's bound at --level):\n"
    "  'A dominates B'                       some t > c and none < −c (A's curve lies above: A is more equal)\n"
    "  'B dominates A'                       some t < −c and none > c\n"
    "  'curves cross'                        some t > c and some t < −c (neither is unambiguously more equal)\n"
    "  'not distinguishable at this level'   every |t| ≤ c\n\n"
    "The verdict goes to stderr, the table to stdout (or --output). Estimates from samples, not findings "
    "about particular people; see docs/dominance.md.")


def register(sub) -> None:
    p = sub.add_parser("dominance", help="Lorenz dominance of one group over another, with a test",
                       description=DESCRIPTION,
                       epilog="examples:\n  uneven dominance 'survey.parquet' disposable --group year --groups "
                       "2024 2023 --weight w\n  uneven dominance 'survey.parquet' income --group province "
                       "--groups Arquimbel Bozzlevar --generalized --points 9 --level 0.9",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("relation", metavar="RELATION", help=RELATION_HELP)
    p.add_argument("value", metavar="VALUE", help="the value (income) column or expression")
    p.add_argument("--group", required=True, metavar="EXPR", help="the column whose values name the groups")
    p.add_argument("--groups", required=True, nargs=2, metavar=("A", "B"), help="the two values of --group")
    p.add_argument("--weight", "-w", metavar="EXPR", help="weight column or expression (default: every row 1)")
    p.add_argument("--generalized", action="store_true", help="compare μ·L(p) instead of L(p)")
    p.add_argument("--points", type=int, default=19, help="number of fractions p = k/(points+1) (default: 19)")
    p.add_argument("--level", type=float, default=0.95, help="simultaneous confidence level (default: 0.95)")
    p.add_argument("--strata", metavar="EXPR", help="stratum of each row (survey design, within each group)")
    p.add_argument("--psu", metavar="EXPR", help="primary sampling unit of each row (survey design)")
    p.add_argument("--svg", metavar="FILE", help="also write the chart of the difference with its band (SVG)")
    add_output_options(p)
    add_engine_options(p)
    add_engine_url_option(p)
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.tables.dominance import lorenz_dominance
    res = lorenz_dominance(args.relation, args.value, args.group, group_values(args.groups), weight=args.weight,
                           generalized=args.generalized, points=args.points, level=args.level,
                           strata=args.strata, psu=args.psu, con=connection(args))
    kind = "generalized Lorenz" if res.generalized else "Lorenz"
    print(f"{kind}, A = {res.groups[0]}, B = {res.groups[1]}: {res.verdict} (level {res.level:g}, "
          f"{len(res.table)} points, c = {res.critical_value:.3f})", file=sys.stderr)
    if args.svg:
        from uneven.engine.output import write_all
        write_all({Path(args.svg): res.svg()}, overwrite=args.force)
        print(f"wrote the chart to {args.svg}", file=sys.stderr)
    return emit_result(res.table, args)
