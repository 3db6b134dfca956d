"""Monte Carlo coverage of the 95% intervals computed in SQL (slow: run with ``pytest -m slow``).

Each run puts every sample in one table as a group, so one query gives all the intervals.
True values: lognormal σ = 1 Gini 2Φ(σ/√2) − 1 (handbook closed form, quoted from memory); the population Gini of a
fixed invented population of 10^6 for the weighted design (numpy reference)."""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as R

pytestmark = pytest.mark.slow


def test_coverage_unweighted_lognormal_sql():
    rng = np.random.default_rng(1001)
    true = 2 * NormalDist().cdf(1 / math.sqrt(2)) - 1
    samples, n = 1000, 1000
    df = pd.DataFrame({"s": np.repeat(np.arange(samples), n), "x": rng.lognormal(0, 1, samples * n)})
    res = uneven.query("SELECT s, gini_ci_lo(x) AS lo, gini_ci_hi(x) AS hi FROM df GROUP BY s")
    rate = ((res.lo <= true) & (true <= res.hi)).mean()
    print(f"unweighted coverage {rate:.3f} over {samples} samples")
    assert 0.92 <= rate <= 0.98


def test_coverage_weighted_pps_sql():
    rng = np.random.default_rng(2002)
    N, n, samples = 1_000_000, 2000, 400
    y = rng.lognormal(0, 1, N)
    size = np.exp(0.5 * np.log(y) + rng.normal(0, 0.5, N))  # size measure correlated with income
    p = size / size.sum()
    true = R.gini(y)
    idx = rng.choice(N, (samples, n), p=p)  # with-replacement PPS draws, π_i = n p_i
    df = pd.DataFrame({"s": np.repeat(np.arange(samples), n), "x": y[idx].reshape(-1),
                       "w": (1 / (n * p[idx])).reshape(-1)})
    res = uneven.query("SELECT s, gini_ci_lo(x, w) AS lo, gini_ci_hi(x, w) AS hi FROM df GROUP BY s")
    rate = ((res.lo <= true) & (true <= res.hi)).mean()
    print(f"weighted PPS coverage {rate:.3f} over {samples} samples")
    assert 0.92 <= rate <= 0.98


def test_coverage_clustered_design_sql():
    # a two-stage design: 20 strata × 30 PSUs of 20 households sharing a PSU effect; the interval
    # with strata := h, psu := c covers the population Gini; ignoring the clusters would not
    rng = np.random.default_rng(3003)
    H, C, m, samples = 20, 30, 20, 400
    pop_psu = rng.normal(0, 0.5, (H, 400))
    pop = np.exp(pop_psu[:, :, None] + rng.normal(0, 0.8, (H, 400, 50)))
    true = R.gini(pop.reshape(-1))
    rows = []
    for s_ in range(samples):
        cs = rng.integers(0, 400, (H, C))
        hh = rng.integers(0, 50, (H, C, m))
        x = pop[np.arange(H)[:, None, None], cs[:, :, None], hh]
        rows.append(pd.DataFrame({"s": s_, "h": np.repeat(np.arange(H), C * m),
                                  "c": np.repeat(np.arange(H * C), m), "x": x.reshape(-1)}))
    df = pd.concat(rows, ignore_index=True)
    res = uneven.query("SELECT s, gini_ci_lo(x, strata := h, psu := c) AS lo, gini_ci_hi(x, strata := h, psu := c) "
                        "AS hi, gini_ci_lo(x) AS lo0, gini_ci_hi(x) AS hi0 FROM df GROUP BY s")
    rate = ((res.lo <= true) & (true <= res.hi)).mean()
    naive = ((res.lo0 <= true) & (true <= res.hi0)).mean()
    print(f"clustered design coverage {rate:.3f}; ignoring the design {naive:.3f}")
    assert 0.92 <= rate <= 0.98
    assert naive < rate
