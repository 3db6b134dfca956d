"""Write the files this example is built from: the seed of invented households (fixed seed) and
the dbt macro that creates uneven's measures in DuckDB (from uneven's generated install SQL).

    python prepare.py          # then: dbt build --profiles-dir .
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

import uneven.duckdb_functions as functions

HERE = Path(__file__).resolve().parent
PROVINCES = {"Zarnquill Vale": 0.55, "Plovexa Coast": 0.75, "Umbertrox": 0.65, "Snivvelgard Uplands": 0.9}


def households(seed: int = 20240611, per_province: int = 60):
    """Invented households of the Republic of Quembraland: lognormal incomes, survey weights 1..5."""
    rng = np.random.default_rng(seed)
    rows, hid = [], 0
    for province, sigma in PROVINCES.items():
        for year in (2023, 2024):
            incomes = np.round(rng.lognormal(10.2, sigma, per_province), 2)
            weights = rng.integers(1, 6, per_province)
            for income, weight in zip(incomes, weights):
                hid += 1
                rows.append((hid, province, year, float(income), float(weight)))
    return rows


def write(root: Path = HERE) -> None:
    lines = ["household_id,province,year,income,weight"]
    lines += [f"{h},{p},{y},{x:.2f},{w:.0f}" for h, p, y, x, w in households()]
    (root / "seeds").mkdir(exist_ok=True)
    (root / "seeds" / "households.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (root / "macros").mkdir(exist_ok=True)
    macro = ("{% macro uneven_install() %}\n{% raw %}\n" + functions.install_sql() + "{% endraw %}\n{% endmacro %}\n")
    (root / "macros" / "uneven_install.sql").write_text(macro, encoding="utf-8")


if __name__ == "__main__":
    write()
    print("wrote seeds/households.csv and macros/uneven_install.sql")
