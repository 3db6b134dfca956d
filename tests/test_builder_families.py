"""The builder reaches every measure family: column arguments (ranking variable, subgroup, second
value) and named options (strata, psu, level, strict, bootstrap settings) give the SQL front-end's
numbers (the SQL front-end itself is checked against the numpy references in test_structure.py,
test_uncertainty.py and test_measures_engines.py); a few are also checked here against the numpy
references directly."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from uneven.errors import MeasureArgumentError
from uneven.reference import se as RSE
from uneven.reference import structure as RS

# (builder call, the same call in SQL text)
FAMILIES = [
    (lambda: uneven.concentration("y", "x", weight="w"), "concentration(y, x, w)"),
    (lambda: uneven.concentration_erreygers("b", "x", 0, 1, weight="w"), "concentration_erreygers(b, x, 0, 1, w)"),
    (lambda: uneven.concentration_wagstaff("b", "x", lo=0, hi=1), "concentration_wagstaff(b, x, 0, 1)"),
    (lambda: uneven.kakwani("tax", "x", weight="w"), "kakwani(tax, x, w)"),
    (lambda: uneven.reynolds_smolensky("x", "post", weight="w"), "reynolds_smolensky(x, post, w)"),
    (lambda: uneven.ge_between("x", 0, "r"), "ge_between(x, 0, r)"),
    (lambda: uneven.ge_within("x", 2, "r", weight="w"), "ge_within(x, 2, r, w)"),
    (lambda: uneven.gini_diff("x", "post", weight="w"), "gini_diff(x, post, w)"),
    (lambda: uneven.gini_diff_se("x", "post"), "gini_diff_se(x, post)"),
    (lambda: uneven.gini_se("x", weight="w", strata="h", psu="c"), "gini_se(x, w, strata := h, psu := c)"),
    (lambda: uneven.top_share_ci_hi("x", 0.1, weight="w", psu="c", level=0.9),
     "top_share_ci_hi(x, 0.1, w, psu := c, level := 0.9)"),
    (lambda: uneven.theil_se("x", strata="h"), "theil_se(x, strata := h)"),
    (lambda: uneven.gini_boot_se("x", weight="w", replicates=40, seed=5, key="id"),
     "gini_boot_se(x, w, replicates := 40, seed := 5, key := id)"),
    (lambda: uneven.gini_boot_lo("x", replicates=40, interval="normal"),
     "gini_boot_lo(x, replicates := 40, interval := 'normal')"),
    (lambda: uneven.gini("x", weight="w", strict=True), "gini(x, w, strict := true)"),
]


@pytest.fixture(scope="module")
def survey() -> pd.DataFrame:
    rng = np.random.default_rng(23)  # invented Quembraland survey: strata h, clusters c, regions r
    n = 600
    x = np.round(rng.lognormal(3, 0.8, n), 1)
    return pd.DataFrame({"id": np.arange(n), "prov": rng.choice(["Arquimbel", "Bozzlevar"], n), "x": x,
                         "y": np.round(rng.lognormal(1, 0.5, n) + 0.01 * x, 2),
                         "b": rng.integers(0, 2, n).astype(float), "tax": np.round(0.05 * x + 0.002 * x ** 2, 3),
                         "post": np.round(x - (0.05 * x + 0.002 * x ** 2), 3), "w": rng.integers(1, 5, n).astype(float),
                         "h": rng.integers(0, 3, n), "c": rng.integers(0, 6, n), "r": rng.choice(["N", "S", "E"], n)})


@pytest.fixture(scope="module")
def con(survey):
    c = duckdb.connect()
    c.register("src", survey)
    c.execute("CREATE TABLE s AS SELECT * FROM src")
    yield c
    c.close()


def test_every_family_matches_the_sql_front_end(con):
    built = uneven.from_("s", con=con).group_by("prov").agg(**{f"m{i}": f() for i, (f, _) in enumerate(FAMILIES)})
    got = built.df().sort_values("prov").reset_index(drop=True)
    items = ", ".join(f"{sql} AS m{i}" for i, (_, sql) in enumerate(FAMILIES))
    want = uneven.query(f"SELECT prov, {items} FROM s GROUP BY prov ORDER BY prov", con=con)
    assert list(got["prov"]) == ["Arquimbel", "Bozzlevar"]
    for i, (_, sql) in enumerate(FAMILIES):
        assert want[f"m{i}"].notna().all(), sql  # every family is defined on this data
        assert np.allclose(got[f"m{i}"], want[f"m{i}"], rtol=1e-12, atol=0), sql


def test_builder_against_numpy_references(con, survey):
    out = uneven.from_("s", con=con).group_by("prov").agg(
        c=uneven.concentration("y", "x", weight="w"), k=uneven.kakwani("tax", "x", weight="w"),
        gb=uneven.ge_between("x", 0, "r"), se=uneven.gini_se("x", weight="w", strata="h", psu="c")).df()
    for prov, d in survey.groupby("prov"):
        row = out[out["prov"] == prov].iloc[0]
        x, w = d["x"].to_numpy(float), d["w"].to_numpy(float)
        assert row["c"] == pytest.approx(RS.concentration(d["y"].to_numpy(float), x, w), rel=1e-10)
        assert row["k"] == pytest.approx(RS.kakwani(d["tax"].to_numpy(float), x, w), rel=1e-10)
        assert row["gb"] == pytest.approx(RS.ge_between(x, 0.0, d["r"].to_numpy(object)), rel=1e-10)
        # linearized SE with strata and PSUs (reference.se: z per row + with-replacement design variance,
        # the usual formula of survey practice: common practice, from memory)
        want = RSE.se("gini", x, (), w, d["h"].to_numpy(), d["c"].to_numpy())
        assert row["se"] == pytest.approx(want, rel=1e-9)
        assert row["c"] > 0 and row["k"] > 0  # y rises with x; the tax is progressive by construction


def test_builder_sql_quotes_column_arguments(survey):
    q = uneven.from_(survey).agg(c=uneven.concentration("y", 'x"; DROP TABLE s; --'),
                               se=uneven.gini_se("x", psu="c c"))
    text = q.sql()
    assert '"x""; DROP TABLE s; --"' in text and '"c c"' in text


def test_builder_argument_errors():
    with pytest.raises(MeasureArgumentError, match=r"concentration\(\): rank_by must be a column name"):
        uneven.concentration("y", 0.5)
    with pytest.raises(MeasureArgumentError, match=r"gini_se\(\): psu must be a column name"):
        uneven.gini_se("x", psu=3)
    with pytest.raises(MeasureArgumentError, match=r"gini\(\): unknown argument 'psu'"):
        uneven.gini("x", psu="c")
    with pytest.raises(MeasureArgumentError, match=r"lo must be below hi"):
        uneven.concentration_wagstaff("b", "x", 1, 0)
    with pytest.raises(MeasureArgumentError, match=r"ge_between\(\): alpha must be a number"):
        uneven.ge_between("x", "r", 0)
