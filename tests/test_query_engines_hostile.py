"""The hostile-input table (test_hostile_input.py: every case of docs/input-policy.md with its
outcome — the reference's value, NULL, or a clear error) through ``uneven.query(sql, con=…)`` on
every engine of the matrix (tests/engines.py: ThroughQuery), so the input policy holds through the
one call as it does for the compiled SQL. A module of its own: its cases replace the table ``t``."""

from __future__ import annotations

import pytest

from engines import ENGINES, ThroughQuery, engine_or_skip
from test_hostile_input import test_hostile_case  # noqa: F401  (collected here with the engines below)


@pytest.fixture(params=sorted(ENGINES), scope="module")
def engine(request):
    eng = engine_or_skip(request.param)
    yield ThroughQuery(eng)
    eng.close()
