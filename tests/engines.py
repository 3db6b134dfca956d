"""The backend test matrix: every engine the suite can run compiled SQL on.

Each engine loads a pandas DataFrame as table ``t`` and runs a compiled query. DuckDB is always
present; further engines join this list (and skip with a reason where they are absent; with
INEQSQL_REQUIRE_ENGINES=1, as in CI, an absent engine fails instead).
"""

from __future__ import annotations

import os

import duckdb
import pandas as pd
import pytest

import ineqsql


class DuckDBEngine:
    name = "duckdb"
    dialect = "duckdb"

    def __init__(self):
        self.con = duckdb.connect()

    def load(self, df: pd.DataFrame, table: str = "t") -> None:
        self.con.register("_iq_test_df", df)
        self.con.execute(f'CREATE OR REPLACE TABLE "{table}" AS SELECT * FROM _iq_test_df')
        self.con.unregister("_iq_test_df")

    def run(self, sql: str) -> pd.DataFrame:
        compiled = ineqsql.compile(sql, dialect=self.dialect)
        return self.con.execute(compiled).fetchdf()

    def close(self):
        self.con.close()


ENGINES = {"duckdb": DuckDBEngine}


def require_engines() -> bool:
    return os.environ.get("INEQSQL_REQUIRE_ENGINES") == "1"


def engine_or_skip(name: str):
    try:
        return ENGINES[name]()
    except Exception as e:  # an engine absent on this machine
        if require_engines():
            pytest.fail(f"engine {name} is required (INEQSQL_REQUIRE_ENGINES=1) but could not start: {e}")
        pytest.skip(f"engine {name} is not available here: {e}")
