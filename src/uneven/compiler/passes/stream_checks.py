"""The stream's rows with the input policy's checks left to numpy (engine/stream.py).

The rows and totals queries of a stream job check every value and weight in SQL (``CASE WHEN … THEN
error(…) ELSE v END``, compiler/passes/source.py), which costs DuckDB about a fifth of its sort on a
per-entity table. ``unchecked`` gives the same queries with every checked value or weight replaced by
v itself (only the input policy's own checks, whose messages start with `uneven: `; a user's error()
calls stay), and a weight's row condition ``checked > 0`` by ``v <> 0``: the same rows, plus those with
a negative, NaN or infinite weight (``NaN <> 0`` holds in DuckDB), which the checked form would refuse.
engine/stream.py streams these and looks at each batch in numpy (values finite, weights finite and
≥ 0); a batch holding a row the checks may refuse sends the job back to the checked queries, so the
error and its text (the function, the argument, the group) are DuckDB's own, as on the window plan.
"""

from __future__ import annotations

from sqlglot import exp


def _ours(call: object) -> bool:
    """An error() call of the input policy's (source.row_error: its message starts with ``uneven: ``);
    a user's own error() call is never one, and stays where it is."""
    if not isinstance(call, exp.Anonymous) or call.name.lower() != "error" or not call.expressions:
        return False
    first = call.expressions[0]
    while True:  # the message's leading literal (a concatenation when it names the row's group)
        if isinstance(first, exp.Concat) and first.expressions:
            first = first.expressions[0]
        elif isinstance(first, exp.DPipe):
            first = first.this
        else:
            return isinstance(first, exp.Literal) and first.is_string and first.this.startswith("uneven: ")


def is_check(node: exp.Expression) -> bool:
    """A checked value or weight: a CASE with an ELSE whose branches include the input policy's error()."""
    if not isinstance(node, exp.Case) or node.args.get("default") is None:
        return False
    return any(_ours(branch.args.get("true")) for branch in node.args.get("ifs") or [])


def _strip(node: exp.Expression) -> exp.Expression:
    if isinstance(node, exp.GT) and is_check(node.this.unnest()):  # a weight's `checked > 0`: `v <> 0`
        return exp.NEQ(this=node.this.unnest().args["default"].copy(), expression=node.expression.copy())
    if is_check(node):
        return node.args["default"].copy()
    return node


def unchecked(tree: exp.Expression) -> exp.Expression:
    """A copy of ``tree`` (a stream job's rows or totals query) without the input policy's checks."""
    return tree.transform(_strip, copy=True)
