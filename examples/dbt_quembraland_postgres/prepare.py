"""Write the seed (the same invented households as examples/dbt_quembraland) and register uneven's
PostgreSQL aggregates in the database's default schema, using the PG* environment variables.

    python prepare.py          # then: dbt build --profiles-dir .
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import psycopg

import uneven

HERE = Path(__file__).resolve().parent


def households():
    """The DuckDB example's invented households (examples/dbt_quembraland/prepare.py, beside this folder)."""
    spec = importlib.util.spec_from_file_location("quembraland_households", HERE.parent / "dbt_quembraland" / "prepare.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.households()


def write(root: Path = HERE) -> None:
    lines = ["household_id,province,year,income,weight"]
    lines += [f"{h},{p},{y},{x:.2f},{w:.0f}" for h, p, y, x, w in households()]
    (root / "seeds").mkdir(exist_ok=True)
    (root / "seeds" / "households.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")


def register() -> list[str]:
    """uneven.install in the database's default schema (public), which dbt's sessions search."""
    with psycopg.connect("", autocommit=True) as con:  # libpq reads PGHOST, PGUSER … from the environment
        return uneven.install(con)


if __name__ == "__main__":
    write()
    print("wrote seeds/households.csv; registered", ", ".join(register()))
