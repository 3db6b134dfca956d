"""The worked example: Quembraland's invented bracket table of 2024 gross household income.

The shipped CSV is re-made from its seed and compared byte for byte; its bounds are checked against
the invented survey it was tabulated from (weighted values computed here with numpy: the handbook
weighted Gini Σ w x (2C − w − W)/(W·T), the Lorenz curve through (C/W, S/T), numpy's weighted
inverted-CDF quantile).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from uneven.brackets import from_brackets

HERE = Path(__file__).resolve().parents[1] / "examples" / "quembraland_brackets"


@pytest.fixture(scope="module")
def maker():
    spec = importlib.util.spec_from_file_location("make_table", HERE / "make_table.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.fixture(scope="module")
def survey(maker):
    return maker.survey()


def test_shipped_table_is_what_the_generator_makes(maker, survey, tmp_path):
    out = tmp_path / "t.csv"
    maker.tabulate(survey).to_csv(out, index=False)
    assert out.read_bytes() == (HERE / "gross_income_2024.csv").read_bytes()


def _weighted(x, w):
    o = np.argsort(x, kind="stable")
    x, w = x[o], w[o]
    C, S = np.cumsum(w), np.cumsum(w * x)
    W, T = C[-1], S[-1]
    lor = lambda p: float(np.interp(p * W, np.concatenate([[0], C]), np.concatenate([[0], S])) / T)  # noqa: E731
    q = lambda p: float(np.quantile(x, p, weights=w, method="inverted_cdf"))  # noqa: E731
    return {"gini": float(np.sum(w * x * (2 * C - w - W)) / (W * T)), "top10": 1 - lor(0.9),
            "bottom40": lor(0.4), "palma": (1 - lor(0.9)) / lor(0.4), "median": q(0.5), "p90p10": q(0.9) / q(0.1)}


def test_bounds_contain_the_survey_each_province_and_the_country(survey):
    cols = dict(low="income_from", high="income_to", units="households", total="income_total")
    measures = ["gini", "top_share(0.1) AS top10", "bottom_share(0.4) AS bottom40", "palma",
                "quantile_w(0.5) AS median", "percentile_ratio(0.9, 0.1) AS p90p10"]
    path = f"'{HERE / 'gross_income_2024.csv'}'"
    res = from_brackets(path, measures, by=["province"], **cols)
    assert len(res) == 8 and res["missing_totals"].sum() == 1
    for _, row in res.iterrows():
        part = survey[survey["province"] == row["province"]]
        truth = _weighted(part["gross_income"].to_numpy(), part["weight"].to_numpy())
        for name, value in truth.items():
            assert row[f"{name}_lo"] <= value <= row[f"{name}_hi"], (row["province"], name)
            assert row[f"{name}_lo"] <= row[name] <= row[f"{name}_hi"]
    # the whole country: the provinces' rows roll up (same brackets add)
    country = from_brackets(path, measures, **cols)
    truth = _weighted(survey["gross_income"].to_numpy(), survey["weight"].to_numpy())
    for name, value in truth.items():
        assert country.loc[0, f"{name}_lo"] <= value <= country.loc[0, f"{name}_hi"], name
    # nine brackets give the country's Gini to about ±0.01
    assert country.loc[0, "gini_hi"] - country.loc[0, "gini_lo"] < 0.03
