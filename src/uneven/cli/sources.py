"""uneven sources: the Gini of a total decomposed by income source (Lerman and Yitzhaki 1985, cited from memory)."""

from __future__ import annotations

import argparse

from uneven.cli.common import emit_result
from uneven.cli.tables import add_table_options, common


def register(sub) -> None:
    p = sub.add_parser("sources", help="Gini of a total decomposed by income source",
                       description="The total is the sum of the SOURCE columns. Columns per source: "
                       "part_of_total (its share of the total), own_gini, conc_by_total (its concentration "
                       "ranked by the total), corr_with_total (the Gini correlation), gini_points (they add up "
                       "to the Gini of the total), part_of_gini, and the change in the Gini when the source "
                       "grows by 1% for everyone (gini_change_1pct; gini_pct_change_1pct in percent of the "
                       "Gini). See docs/structure.md.",
                       epilog="example: uneven sources 'survey.parquet' wages rents transfers --weight w --by year",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    add_table_options(p)
    p.add_argument("sources", nargs="+", metavar="SOURCE", help="two or more source columns or expressions")
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.tables.decompose import gini_sources
    return emit_result(gini_sources(args.relation, args.sources, **common(args)), args)
