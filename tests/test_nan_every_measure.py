"""The input policy on every measure of the catalog (docs/input-policy.md): a NaN value in a group
stops the query with the InputDataError naming the argument and the group, whatever the pass that
computes the measure. The linearized, ranked, paired, bootstrap and subgroup passes once read their
values unchecked and gave NULL, or (the bootstrap) a number resampled from the NaN row."""

from __future__ import annotations

import re

import duckdb
import pytest

import uneven
from uneven.errors import InputDataError

# a constant for each numeric parameter a signature may name (within each parameter's range)
NUMBERS = {"p": "0.5", "q": "0.5", "hi": "0.9", "lo": "0.1", "alpha": "1", "eps": "1", "epsilon": "1", "k": "2",
           "line": "2", "z": "2", "frac": "0.6", "n": "2"}


def _call(measure: dict) -> str | None:
    """A call of the measure on the value x (weight w where it takes one; other columns e or id)."""
    found = re.match(r"(\w+)\((.*)\)", measure["signature"])
    if not found:
        return None
    name, args = found.groups()
    required = [a.strip() for a in args.split("[")[0].split(",") if a.strip()]
    out = ["x"] + [NUMBERS.get(a, "id" if a in ("entity", "unit", "id") else "e") for a in required[1:]]
    return f"{name}({', '.join(out)}{', w' if '[, w]' in args else ''})"


CALLS = sorted(c for c in map(_call, uneven.measures()) if c)


@pytest.fixture(scope="module")
def con():
    c = duckdb.connect()
    c.execute("CREATE TABLE t AS SELECT * FROM (VALUES ('a', 1.0, 1.0, 1, 1.5), ('a', 'NaN'::DOUBLE, 2.0, 2, 2.5), "
              "('a', 2.0, 3.0, 3, 3.5), ('a', 5.0, 1.0, 4, 1.0), ('b', 3.0, 1.0, 5, 2.0)) v(g, x, w, id, e)")
    return c


def test_every_measure_is_drawn():
    assert len(CALLS) == len(uneven.measures()) and len(CALLS) > 100


def test_a_nan_value_stops_every_measure_naming_the_group(con):
    wrong = []
    for call in CALLS:
        try:
            got = uneven.query(f"SELECT g, {call} AS m FROM t GROUP BY g", con=con)
            wrong.append(f"{call}: no error, {got['m'].tolist()}")
        except InputDataError as e:
            if "NaN or infinite value in the value argument x (the group g=a)" not in str(e):
                wrong.append(f"{call}: {e}")
        except uneven.UnevenError as e:
            wrong.append(f"{call}: {type(e).__name__}: {e}")
    assert not wrong, "\n".join(wrong)
    # and the same rows without the NaN give numbers (the calls are valid ones)
    got = uneven.query("SELECT g, gini(x, w) AS a, gini_diff(x, e, w) AS b, ge_within(x, 1, e, w) AS c, "
                       "concentration(x, e, w) AS d FROM t WHERE id <> 2 GROUP BY g ORDER BY g", con=con)
    assert got.iloc[0, 1:].notna().all()
