"""Functions whose value changes from one evaluation to the next (or that change state): a source
that calls one is read once (compiler/materialize.py), and a parameter that calls one is no constant
(constants.py)."""

from __future__ import annotations

from sqlglot import exp

VOLATILE_CLASSES = (exp.Rand, exp.Randn, exp.Randstr, exp.Uuid, exp.NextValueFor)
VOLATILE_NAMES = frozenset({"random", "rand", "randn", "uuid", "gen_random_uuid", "uuid_generate_v4", "setseed",
                            "randomblob", "random_bytes", "nextval", "newid", "uniform", "normal",
                            "random_normal"})
# fixed within one statement, but never a constant of the query text
CLOCK_CLASSES = (exp.CurrentDate, exp.CurrentTimestamp, exp.CurrentTime)
CLOCK_NAMES = frozenset({"now", "current_timestamp", "current_date", "get_current_time", "clock_timestamp"})


def is_volatile_call(node: exp.Expression) -> bool:
    if isinstance(node, VOLATILE_CLASSES):
        return True
    return isinstance(node, exp.Anonymous) and node.name.lower() in VOLATILE_NAMES
