"""The difference of a measure between two groups of rows with its standard error
(structure.compare with group=/groups=, and `uneven compare --group`), against an independent
numpy computation written here from the published formulas: the linearized Gini of each row
(Langel & Tillé 2013, cited from memory, via uneven.reference.se.influence, itself checked
against numerical derivatives in test_uncertainty.py) and the with-replacement variance of a total
over strata and PSUs (common practice of survey sampling; Wolter 2007, §1.4, cited from memory);
plus a small Monte Carlo check that the SE tracks the spread of the
difference over repeated samples."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from uneven.cli.main import main
from uneven.errors import MeasureArgumentError
from uneven.reference import se as RSE
from uneven.tables.compare import compare


@pytest.fixture(scope="module")
def survey() -> pd.DataFrame:
    rng = np.random.default_rng(31)  # invented Quembraland survey: sex within shared households' clusters
    n = 700
    return pd.DataFrame({"prov": rng.choice(["Arquimbel", "Bozzlevar"], n), "x": np.round(rng.lognormal(3, 0.8, n), 1),
                         "w": rng.integers(1, 5, n).astype(float), "h": rng.integers(0, 3, n),
                         "c": rng.integers(0, 9, n), "sex": rng.choice(["f", "m", "x"], n, p=[0.45, 0.45, 0.1])})


def design_se(d: pd.DataFrame, a, b, strata=True, psu=True) -> tuple[float, float]:
    """G_a − G_b and its linearized SE: u_k = w_k z_k for group a, −w_k z_k for group b, 0 for the
    other rows of the design; variance of the total of u over the whole design."""
    u = np.zeros(len(d))
    est = []
    for sign, g in ((1.0, a), (-1.0, b)):
        m = (d["sex"] == g).to_numpy()
        gini, z = RSE.influence("gini", d["x"].to_numpy(float)[m], (), d["w"].to_numpy(float)[m])
        u[m] = sign * d["w"].to_numpy(float)[m] * z
        est.append(gini)
    v = RSE.design_variance(u, d["h"].to_numpy() if strata else None, d["c"].to_numpy() if psu else None)
    return est[0] - est[1], float(np.sqrt(v))


def test_design_difference_matches_numpy(survey):
    out = compare("survey", "x", group="sex", groups=("f", "m"), weight="w", strata="h", psu="c", by="prov")
    assert list(out["prov"]) == ["Arquimbel", "Bozzlevar"] and set(out["se_method"]) == {"design"}
    for _, row in out.iterrows():
        d = survey[survey["prov"] == row["prov"]].reset_index(drop=True)
        diff, se = design_se(d, "f", "m")
        assert row["difference"] == pytest.approx(diff, rel=1e-10)
        assert row["se"] == pytest.approx(se, rel=1e-9)
        assert row["z"] == pytest.approx(diff / se, rel=1e-9)
        assert row["rows_1"] == (d["sex"] == "f").sum() and row["rows_2"] == (d["sex"] == "m").sum()


def test_design_difference_without_design_columns(survey):
    # no strata, no PSU: every row its own PSU in one stratum
    out = compare("survey", "x", group="sex", groups=("m", "f"), weight="w")
    diff, se = design_se(survey, "m", "f", strata=False, psu=False)
    assert out["difference"][0] == pytest.approx(diff, rel=1e-10)
    assert out["se"][0] == pytest.approx(se, rel=1e-9)


@pytest.mark.parametrize("measure,params", [("gini", ()), ("theil", ()), ("top_share", (0.1,))])
def test_independent_difference_matches_numpy(survey, measure, params):
    out = compare("survey", "x", group="sex", groups=("f", "m"), measure=measure, params=params, se="independent",
                  weight="w", strata="h", psu="c", by="prov")
    for _, row in out.iterrows():
        d = survey[survey["prov"] == row["prov"]]
        est, ses = [], []
        for g in ("f", "m"):
            e = d[d["sex"] == g]
            args = (e["x"].to_numpy(float), params, e["w"].to_numpy(float))
            est.append(RSE.influence(measure, *args)[0])
            ses.append(RSE.se(measure, *args, e["h"].to_numpy(), e["c"].to_numpy()))
        assert row[f"{measure}_1"] == pytest.approx(est[0], rel=1e-10)
        assert row["difference"] == pytest.approx(est[0] - est[1], rel=1e-9)
        assert row["se"] == pytest.approx(np.hypot(*ses), rel=1e-9)
        assert row["se_method"] == "independent"


def test_monte_carlo_se_tracks_the_spread():
    # 150 samples of 20 clusters × 12 rows, cluster effects shared by both groups, in one query
    # (``by`` = replicate). The mean linearized SE should be close to the sd of the difference.
    rng = np.random.default_rng(2024)
    reps, clusters, size = 150, 20, 12
    n = reps * clusters * size
    rep = np.repeat(np.arange(reps), clusters * size)
    cluster = np.repeat(np.arange(reps * clusters), size)
    effect = rng.normal(0, 0.5, reps * clusters)[cluster]
    group = rng.choice(["a", "b"], n)
    x = np.exp(3 + effect + rng.normal(0, np.where(group == "a", 0.6, 0.9)))
    df = pd.DataFrame({"rep": rep, "c": cluster % clusters, "g": group, "x": x})  # noqa: F841 (read by name)
    out = compare("df", "x", group="g", groups=("a", "b"), psu="c", by="rep")
    sd, mean_se = out["difference"].std(ddof=1), out["se"].mean()
    assert len(out) == reps and out["se"].notna().all()
    assert 0.75 < mean_se / sd < 1.3, (mean_se, sd)  # sd over 150 samples: ~6% noise; 20 PSUs: small bias


def test_errors(survey):
    with pytest.raises(MeasureArgumentError, match="design.*Gini"):
        compare("survey", "x", group="sex", groups=("f", "m"), measure="theil", se="design")
    with pytest.raises(MeasureArgumentError, match="two different values"):
        compare("survey", "x", group="sex", groups=("f", "f"))
    with pytest.raises(MeasureArgumentError, match="not both"):
        compare("survey", "x", "w", group="sex", groups=("f", "m"))
    with pytest.raises(MeasureArgumentError, match="needs both"):
        compare("survey", "x", group="sex")
    with pytest.raises(MeasureArgumentError, match="measure must be one with a standard error"):
        compare("survey", "x", group="sex", groups=("f", "m"), measure="hhi")
    out = compare("survey", "x", group="sex", groups=("f", "nobody"))
    assert out["difference"].isna().all() and out["se"].isna().all()


def test_cli_two_groups(tmp_path, capsys, survey):
    path = tmp_path / "survey.parquet"
    survey.to_parquet(path)
    assert main(["compare", str(path), "x", "--group", "sex", "--groups", "f", "m", "--weight", "w",
                 "--strata", "h", "--psu", "c", "--format", "csv"]) == 0
    got = pd.read_csv(io.StringIO(capsys.readouterr().out))
    diff, se = design_se(survey, "f", "m")
    assert got["difference"][0] == pytest.approx(diff, rel=1e-9) and got["se"][0] == pytest.approx(se, rel=1e-9)
    assert main(["compare", str(path), "x", "--group", "sex", "--groups", "f", "m", "--measure", "nosuch"]) == 2
    assert "measure must be one with a standard error" in capsys.readouterr().err
