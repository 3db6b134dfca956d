"""Functions whose value changes from one evaluation to the next (or that change state): a source
that calls one is read once (compiler/materialize.py), and a parameter that calls one is no constant
(constants.py). Also the constructs whose value depends on the order the engine happens to read
rows in (``is_order_dependent``): numbering rows or reading neighbours (with or without ORDER BY:
ties), ROWS frames, ``any_value``, ``first``/``last`` and list or string aggregates without ORDER BY;
two reads of a source using one may differ."""

from __future__ import annotations

from sqlglot import exp

VOLATILE_CLASSES = (exp.Rand, exp.Randn, exp.Randstr, exp.Uuid, exp.NextValueFor)
VOLATILE_NAMES = frozenset({"random", "rand", "randn", "uuid", "gen_random_uuid", "uuid_generate_v4", "setseed",
                            "randomblob", "random_bytes", "nextval", "newid", "uniform", "normal",
                            "random_normal"})
# fixed within one statement, but never a constant of the query text
CLOCK_CLASSES = (exp.CurrentDate, exp.CurrentTimestamp, exp.CurrentTime)
CLOCK_NAMES = frozenset({"now", "current_timestamp", "current_date", "get_current_time", "clock_timestamp"})


def is_volatile_call(node: exp.Expr) -> bool:
    if isinstance(node, VOLATILE_CLASSES):
        return True
    return isinstance(node, exp.Anonymous) and node.name.lower() in VOLATILE_NAMES


# window functions that number rows or read a neighbour: without ORDER BY the engine picks the order
NUMBERING_CLASSES = (exp.RowNumber, exp.Ntile, exp.Lag, exp.Lead, exp.FirstValue, exp.LastValue, exp.NthValue)
# aggregates whose value is one row's, or the rows in reading order, unless ordered
PICKING_CLASSES = (exp.AnyValue, exp.First, exp.Last, exp.ArrayAgg, exp.GroupConcat)
PICKING_NAMES = frozenset({"any_value", "arbitrary", "first", "last", "array_agg", "list", "string_agg",
                           "group_concat", "listagg", "collect_list", "array_agg_distinct", "first_value",
                           "last_value"})


def _unwrapped(node: exp.Expression) -> exp.Expression:
    while isinstance(node, (exp.IgnoreNulls, exp.RespectNulls)):
        node = node.this
    return node


def is_order_dependent(node: exp.Expression) -> bool:
    """A window or aggregate whose value depends on the order rows are read in: a numbering or
    neighbour window, or an aggregate window over a ROWS frame (an ORDER BY may tie); ``any_value``;
    ``first``/``last``, ``list``/``array_agg``/``string_agg``/``group_concat`` without an ORDER BY
    of their own (inside the call, WITHIN GROUP, or a sort of the list around it)."""
    if isinstance(node, exp.Window):
        # with or without ORDER BY: rows tied on the ORDER BY (which the query text cannot rule out)
        # are numbered, or read as neighbours, in an order the engine picks on each read;
        # rank()/dense_rank() and RANGE frames give tied rows one value, so they stay deterministic
        spec = node.args.get("spec")
        return isinstance(_unwrapped(node.this), NUMBERING_CLASSES) or (
            spec is not None and str(spec.args.get("kind") or "").upper() == "ROWS")
    if isinstance(node, exp.AnyValue) or (isinstance(node, exp.Anonymous) and node.name.lower() in
                                          ("any_value", "arbitrary")):
        return True
    if not (isinstance(node, PICKING_CLASSES) or (isinstance(node, exp.Anonymous)
                                                  and node.name.lower() in PICKING_NAMES)):
        return False
    if isinstance(node.this, exp.Order) or any(isinstance(a, exp.Order) for a in node.expressions):
        return False
    parent = node.parent
    while isinstance(parent, (exp.IgnoreNulls, exp.RespectNulls)):
        parent = parent.parent
    if isinstance(parent, exp.WithinGroup) or isinstance(parent, exp.ArraySort):
        return False
    if isinstance(parent, exp.Window) and parent.args.get("order") is not None:
        return False
    return True
