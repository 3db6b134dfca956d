"""uneven decompose: GE(α) split into between- and within-subgroup parts."""

from __future__ import annotations

import argparse

from uneven.cli.common import emit_result
from uneven.cli.tables import add_table_options, common


def register(sub) -> None:
    p = sub.add_parser("decompose", help="split GE(alpha) into between- and within-subgroup parts",
                       description="GE(alpha) of VALUE split exactly into a between-subgroup part (the GE of the "
                       "subgroup means) and a within-subgroup part (the subgroups' own GE weighted by "
                       "v^(1-alpha) s^alpha, v and s their weight and value shares). One row per subgroup "
                       "(group_mean, weight_share, value_share, group_ge, ge_term), then within, between "
                       "and total (in ge_term). See docs/structure.md.",
                       epilog="example: uneven decompose 'survey.parquet' --value income --subgroup province "
                       "--alpha 1 --weight w", formatter_class=argparse.RawDescriptionHelpFormatter)
    add_table_options(p)
    p.add_argument("--value", "-x", required=True, metavar="EXPR", help="the value (e.g. income)")
    p.add_argument("--subgroup", "-g", required=True, metavar="EXPR", help="the subgroup of each row")
    p.add_argument("--alpha", type=float, default=0.0,
                   help="GE parameter: 0 = mean log deviation (default), 1 = Theil, 2 = half the squared CV")
    p.set_defaults(handler=run)


def run(args) -> int:
    from uneven.tables.decompose import decompose
    return emit_result(decompose(args.relation, args.value, args.subgroup, alpha=args.alpha, **common(args)), args)
