"""In-database bootstrap: the replicate estimates rebuilt in numpy from the engine's own hash values
(so everything but the hash function is checked against numpy), reproducibility, and agreement of
the bootstrap SE with the linearization SE on large samples."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest
from scipy import stats

import uneven
from uneven import reference as R
from uneven.errors import MeasureArgumentError

TWO_64 = 2.0 ** 64


def _poisson_multipliers(con, table: str, unit: str, replicates: int, seed: int) -> np.ndarray:
    """m[r, row] ~ Poisson(1) from the engine's hash(unit, r, seed): u = hash/2^64, then the smallest
    k with u < F(k) (scipy's Poisson CDF), capped at 10."""
    h = con.execute(f"SELECT hash({unit}, r, {seed}) FROM {table}, range(1, {replicates + 1}) AS t(r) "
                    f"ORDER BY rowid, r").fetchnumpy()
    u = np.array([float(v) for v in list(h.values())[0]]).reshape(-1, replicates).T / TWO_64
    cdf = stats.poisson.cdf(np.arange(10), 1.0)
    return np.searchsorted(cdf, u, side="right").astype(float).clip(max=10)


@pytest.fixture(scope="module")
def con():
    rng = np.random.default_rng(31)
    n = 300
    df = pd.DataFrame({"id": np.arange(n) * 7 + 3, "x": rng.lognormal(1, 0.9, n), "w": rng.uniform(0.5, 3, n),
                       "c": rng.integers(0, 40, n)})
    c = duckdb.connect()
    c.register("_df", df)
    c.execute("CREATE TABLE t AS SELECT * FROM _df")
    yield c, df
    c.close()


@pytest.mark.parametrize("measure,params,ref,unit", [
    ("gini", (), R.gini, "id"), ("theil", (), R.theil, "c"),
    ("top_share", (0.1,), lambda x, w: R.top_share(x, 0.1, w), "id"),
    ("quantile_w", (0.5,), lambda x, w: R.quantile_w(x, 0.5, w), "c"),
], ids=["gini-key", "theil-psu", "top_share-key", "quantile-psu"])
def test_bootstrap_matches_numpy_from_engine_draws(con, measure, params, ref, unit):
    c, df = con
    Rn, seed = 30, 17
    m = _poisson_multipliers(c, "t", unit, Rn, seed)
    thetas = np.array([ref(df.x.to_numpy(), df.w.to_numpy() * m[r]) for r in range(Rn)])
    args = "".join(f", {p}" for p in params)
    opt = f"replicates := {Rn}, seed := {seed}, " + ("key := id" if unit == "id" else "psu := c")
    sql = (f"SELECT {measure}_boot_se(x{args}, w, {opt}) AS se, {measure}_boot_lo(x{args}, w, {opt}) AS lo, "
           f"{measure}_boot_hi(x{args}, w, {opt}, level := 0.8) AS hi, "
           f"{measure}_boot_lo(x{args}, w, {opt}, interval := 'normal') AS nlo FROM t")
    got = uneven.query(sql, c).iloc[0]
    # sd with R − 1 (common practice); percentile ends: inverted-CDF quantiles of the replicates (numpy)
    assert abs(got.se - thetas.std(ddof=1)) <= 1e-9 * thetas.std(ddof=1)
    assert abs(got.lo - np.quantile(thetas, 0.025, method="inverted_cdf")) < 1e-12
    assert abs(got.hi - np.quantile(thetas, 0.9, method="inverted_cdf")) < 1e-12
    est = ref(df.x.to_numpy(), df.w.to_numpy())
    assert abs(got.nlo - (est - 1.959963984540054 * thetas.std(ddof=1))) < 1e-9


def test_bootstrap_is_reproducible_and_seeded(con):
    c, _ = con
    q = "SELECT gini_boot_se(x, w, replicates := 20, key := id, seed := {s}) AS se FROM t"
    a, b, other = (uneven.query(q.format(s=s), c)["se"][0] for s in (5, 5, 6))
    # the same draws; parallel sums may differ in the last bits only
    assert a == pytest.approx(b, rel=1e-12) and abs(a - other) > 1e-9 * a
    # without a key: identical rows are numbered among themselves, so the draws still repeat
    q2 = "SELECT gini_boot_se(x, w, replicates := 20, seed := 5) AS se FROM t"
    assert uneven.query(q2, c)["se"][0] == pytest.approx(uneven.query(q2, c)["se"][0], rel=1e-12)


@pytest.mark.slow
def test_bootstrap_se_close_to_linearization_on_large_samples():
    # 4 groups × 20,000 rows, 400 replicates: the bootstrap SE within 10% of the linearization SE
    rng = np.random.default_rng(8)
    n = 20_000
    df = pd.DataFrame({"g": np.repeat(np.arange(4), n), "x": rng.lognormal(0, 1, 4 * n),
                       "w": rng.uniform(1, 3, 4 * n), "id": np.arange(4 * n)})
    res = uneven.query("SELECT g, gini_se(x, w) AS lin, gini_boot_se(x, w, replicates := 400, key := id, "
                        "seed := 3) AS boot, theil_se(x) AS tl, theil_boot_se(x, replicates := 400, key := id, "
                        "seed := 3) AS tb FROM df GROUP BY g")
    assert (abs(res.boot / res.lin - 1) < 0.10).all(), res
    assert (abs(res.tb / res.tl - 1) < 0.10).all(), res


@pytest.mark.parametrize("sql,needle", [
    ("SELECT gini_boot_se(x, replicates := 1) FROM t", "replicates must be a whole number from 2 to 1000"),
    ("SELECT gini_boot_se(x, seed := -1) FROM t", "seed must be a whole number"),
    ("SELECT gini_boot_lo(x, interval := 'bca') FROM t", "interval must be 'percentile' or 'normal'"),
    ("SELECT gini_boot_se(x, key := avg(x)) FROM t", "key must be a row-level expression"),
])
def test_bootstrap_option_errors(sql, needle):
    with pytest.raises(MeasureArgumentError) as e:
        uneven.compile(sql)
    assert needle in str(e.value)
