"""Make the worked example: a published-looking bracket table of Quembraland's 2024 gross household
income, by province (invented: the fictional country of uneven's demo survey, fixed seed).

The table is what a statistics office might publish from its survey: per province and income
bracket, the estimated number of households (the sum of survey weights) and their total gross
income; the top bracket is open; one total is suppressed (left empty, as offices do for cells
resting on few records). The survey the table comes from is kept out of the table but can be
re-made from the same seed, so the tests can check the table's bounds against it.

    python examples/quembraland_brackets/make_table.py        # rewrites gross_income_2024.csv
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from uneven.demo.data import write_survey

HERE = Path(__file__).parent
TABLE = HERE / "gross_income_2024.csv"
ROWS, SEED, YEAR = 120_000, 20261203, 2024
EDGES = (0, 5_000, 10_000, 15_000, 20_000, 30_000, 50_000, 100_000, 250_000)  # the last bracket is open
SUPPRESSED = ("Isle of Quazzelan", 100_000)  # (province, bracket start) whose total is not published


def survey() -> pd.DataFrame:
    """The invented survey behind the table: province, gross_income, weight (2024, fixed seed)."""
    with tempfile.TemporaryDirectory() as tmp:
        path = write_survey(Path(tmp) / "survey.parquet", rows=ROWS, seed=SEED, years=(YEAR,))
        return pd.read_parquet(path, columns=["province", "gross_income", "weight"])


def tabulate(df: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for province, part in sorted(df.groupby("province"), key=lambda kv: kv[0]):
        x, w = part["gross_income"].to_numpy(), part["weight"].to_numpy()
        for i, lo in enumerate(EDGES):
            hi = EDGES[i + 1] if i + 1 < len(EDGES) else None
            sel = (x >= lo) & ((x < hi) if hi is not None else True)
            total = float(np.sum(w[sel] * x[sel]))
            rows.append({"province": province, "income_from": float(lo), "income_to": hi,
                         "households": float(np.sum(w[sel])),
                         "income_total": None if (province, lo) == SUPPRESSED else total})
    return pd.DataFrame(rows)


def write(path: Path = TABLE) -> Path:
    table = tabulate(survey())
    table.to_csv(path, index=False)  # shortest text that reads back to the same double
    return path


if __name__ == "__main__":
    print(write(Path(sys.argv[1]) if len(sys.argv) > 1 else TABLE))
