"""Tests of the numpy reference (src/uneven/reference.py) against sources outside the project.

Every check names its source in a comment:
  * exact rational arithmetic with ``fractions.Fraction`` (by a route other than the one the
    reference takes),
  * brute-force pairwise sums,
  * numpy (``numpy.quantile``) and mpmath at high precision,
  * closed forms for textbook distributions (handbook formulas), on large seeded samples,
  * an open dataset shipped with statsmodels (``statsmodels.datasets.engel``),
  * facts of common practice, marked as such.

Every formula marked "handbook" and every "fact of common practice" is quoted from memory (no
reference text was consulted while writing this file); the distribution closed forms are also
borne out numerically by the large-sample checks below.
"""

from __future__ import annotations

import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from scipy.stats import norm

from uneven import reference as ref

# ---------------------------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------------------------

def assert_rel(got, want, rel=1e-12, zero_abs=1e-15):
    """|got - want| <= rel * |want|; when want is exactly 0, |got| <= zero_abs."""
    assert got is not None, f"expected {float(want)!r}, got None"
    want = float(want)
    if want == 0.0:
        assert abs(got) <= zero_abs, (got, want)
    else:
        assert abs(got - want) <= rel * abs(want), (got, want, abs(got - want) / abs(want))


def exact_rows(x, w=None):
    """(x, w) as exact Fractions of the given floats, zero-weight rows dropped, sorted by x."""
    if w is None:
        w = [1] * len(x)
    rows = [(Fraction(a), Fraction(b)) for a, b in zip(x, w) if b != 0]
    return sorted(rows)


def exact_gini_pairwise(x, w=None):
    # Source: mean-difference definition of Gini, G = sum_i sum_j w_i w_j |x_i - x_j| / (2 W^2 mu)
    # (handbook formula), in exact rational arithmetic.
    rows = exact_rows(x, w)
    W = sum(b for _, b in rows)
    T = sum(a * b for a, b in rows)
    mu = T / W
    total = sum(bi * bj * abs(ai - aj) for ai, bi in rows for aj, bj in rows)
    return total / (2 * W * W * mu)


def exact_lorenz_vertices(x, w=None):
    """Vertices (P_k, Q_k) of the Lorenz polygon: cumulative population and amount shares."""
    rows = exact_rows(x, w)
    W = sum(b for _, b in rows)
    T = sum(a * b for a, b in rows)
    verts = [(Fraction(0), Fraction(0))]
    c = s = Fraction(0)
    for a, b in rows:
        c += b
        s += a * b
        verts.append((c / W, s / T))
    return verts


def exact_lorenz_polygon(x, p, w=None):
    # Source: the Lorenz curve as the polygon through (cumulative population share, cumulative
    # amount share), read by explicit linear interpolation on the segment holding p (exact).
    p = Fraction(p)
    verts = exact_lorenz_vertices(x, w)
    for (p0, q0), (p1, q1) in zip(verts, verts[1:]):
        if p0 <= p <= p1:
            return q0 + (q1 - q0) * (p - p0) / (p1 - p0)
    raise AssertionError("p outside [0, 1]")


def exact_top_share_fill(x, p, w=None):
    # Source: top-p share by definition: fill a population mass p*W starting from the richest
    # row downward, and divide the amount collected by the total (exact rationals).
    rows = exact_rows(x, w)[::-1]
    W = sum(b for _, b in rows)
    T = sum(a * b for a, b in rows)
    room = Fraction(p) * W
    got = Fraction(0)
    for a, b in rows:
        take = min(b, room)
        got += take * a
        room -= take
    return got / T


def exact_hoover_max_gap(x, w=None):
    # Source: the Hoover index equals the largest vertical distance between the line of
    # equality and the Lorenz curve, max_p (p - L(p)) (handbook identity). The curve is a
    # polygon, so the maximum sits on a vertex.
    return max(p - q for p, q in exact_lorenz_vertices(x, w))


# Small data sets for the exact checks.
EXACT_SETS = {
    # unweighted, with ties and a zero
    "ties": ([3, 1, 4, 1, 5, 9, 2, 6, 5, 3, 5, 0], None),
    # integer weights, ties in x, one zero-weight row
    "int_weights": ([2, 7, 7, 1, 0, 10, 4, 7, 3], [3, 1, 2, 5, 1, 2, 4, 0, 1]),
    # dyadic rationals (exact in binary floating point) for both x and w
    "dyadic": ([0.5, 0.75, 0.625, 0.75, 2.75, 0.0, 3.5, 1.25],
               [0.25, 1.5, 0.125, 2.0, 1.25, 0.5, 0.75, 3.0]),
    # non-dyadic floats: compared with the exact value of the binary floats passed in
    "floats": ([0.1, 0.3, 0.3, 2.2, 1.7, 0.05], [1 / 3, 0.7, 1.1, 0.2, 0.9, 2.6]),
}

PS = [0.0, 0.05, 0.1, 0.2, 0.25, 0.3, 0.4, 0.5, 0.6, 0.75, 0.8, 0.9, 0.95, 1.0]


# ---------------------------------------------------------------------------------------------
# Exact rational arithmetic
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("name", sorted(EXACT_SETS))
def test_gini_exact_pairwise(name):
    x, w = EXACT_SETS[name]
    assert_rel(ref.gini(x, w), exact_gini_pairwise(x, w))


def test_gini_integer_weights_exact_by_row_expansion():
    # Source: population principle (handbook): an integer weight w is the same as w copies of
    # the row; the expanded data go through the unweighted pairwise formula, in Fractions.
    x, w = EXACT_SETS["int_weights"]
    expanded = [a for a, b in zip(x, w) for _ in range(b)]
    n = len(expanded)
    mu = Fraction(sum(expanded), n)
    pair_sum = sum(abs(Fraction(a) - b) for a in expanded for b in expanded)
    assert_rel(ref.gini(x, w), pair_sum / (2 * n * n * mu))


def test_gini_corrected_exact_distinct_pairs():
    # Source: for unweighted data, G * n/(n-1) = mean |x_i - x_j| over ordered pairs i != j,
    # divided by 2 mu (handbook form of the corrected Gini), exact rationals.
    x, _ = EXACT_SETS["ties"]
    n = len(x)
    mu = Fraction(sum(x), n)
    distinct = sum(abs(Fraction(x[i]) - x[j]) for i in range(n) for j in range(n) if i != j)
    assert_rel(ref.gini_corrected(x), distinct / (n * (n - 1)) / (2 * mu))


def test_gini_corrected_weighted_counts_rows_with_positive_weight():
    # Source: contract: n is the number of rows with w > 0 (8 here: one row has w = 0);
    # the Gini itself comes from the exact pairwise sum.
    x, w = EXACT_SETS["int_weights"]
    n = sum(1 for b in w if b > 0)
    assert n == 8
    assert_rel(ref.gini_corrected(x, w), exact_gini_pairwise(x, w) * n / (n - 1))


@pytest.mark.parametrize("name", sorted(EXACT_SETS))
def test_lorenz_exact_polygon(name):
    x, w = EXACT_SETS[name]
    for p in PS + [1 / 3, 0.123, 0.999]:
        assert_rel(ref.lorenz(x, p, w), exact_lorenz_polygon(x, p, w))
        assert_rel(ref.bottom_share(x, p, w), exact_lorenz_polygon(x, p, w))


@pytest.mark.parametrize("name", sorted(EXACT_SETS))
def test_generalized_lorenz_exact(name):
    # Source: generalized Lorenz ordinate = mu * L(p) (handbook definition), exact rationals.
    x, w = EXACT_SETS[name]
    rows = exact_rows(x, w)
    mu = sum(a * b for a, b in rows) / sum(b for _, b in rows)
    for p in PS:
        assert_rel(ref.generalized_lorenz(x, p, w), mu * exact_lorenz_polygon(x, p, w))


@pytest.mark.parametrize("name", sorted(EXACT_SETS))
def test_top_share_exact_fill_from_top(name):
    x, w = EXACT_SETS[name]
    for p in PS + [0.01, 0.37]:
        assert_rel(ref.top_share(x, p, w), exact_top_share_fill(x, p, w))


@pytest.mark.parametrize("name", sorted(EXACT_SETS))
def test_palma_and_s80s20_exact(name):
    # Source: Palma = top 10% share / bottom 40% share; S80/S20 = top 20% / bottom 20%
    # (definitions of common practice); shares from the exact fill and the exact polygon.
    x, w = EXACT_SETS[name]
    bottom40 = exact_lorenz_polygon(x, 0.4, w)
    bottom20 = exact_lorenz_polygon(x, 0.2, w)
    palma = ref.palma(x, w)
    s80s20 = ref.s80s20(x, w)
    if bottom40 == 0:
        assert palma is None
    else:
        assert_rel(palma, exact_top_share_fill(x, 0.1, w) / bottom40)
    if bottom20 == 0:
        assert s80s20 is None
    else:
        assert_rel(s80s20, exact_top_share_fill(x, 0.2, w) / bottom20)


def test_s80s20_undefined_when_bottom_fifth_holds_nothing():
    # Source: hand count: the bottom 20% of these 10 equal-weight rows are the two zeros.
    x = [0, 0, 1, 2, 3, 4, 5, 6, 7, 8]
    assert ref.bottom_share(x, 0.2) == 0.0
    assert ref.s80s20(x) is None
    assert ref.palma(x) is not None


@pytest.mark.parametrize("name", sorted(EXACT_SETS))
def test_hoover_exact_max_gap(name):
    x, w = EXACT_SETS[name]
    assert_rel(ref.hoover(x, w), exact_hoover_max_gap(x, w))


@pytest.mark.parametrize("name", sorted(EXACT_SETS))
def test_lorenz_curve_exact(name):
    x, w = EXACT_SETS[name]
    k = 7
    curve = ref.lorenz_curve(x, k, w)
    assert len(curve) == k + 1
    for j, (p, L) in enumerate(curve):
        assert p == j / k  # contract: p computed as j/k
        assert_rel(L, exact_lorenz_polygon(x, j / k, w))
    assert curve[0][1] == 0.0 and curve[-1][1] == pytest.approx(1.0, abs=1e-15)


def test_hhi_and_cr_exact():
    # Source: hand computation checked with exact rationals. Entity sums a=15, b=40, c=5, d=40
    # out of 100; HHI = 15^2 + 40^2 + 5^2 + 40^2 = 3450.
    x = [10, 20, 5, 5, 40, 20]
    entity = ["a", "b", "a", "c", "d", "b"]
    sums = {}
    for v, e in zip(x, entity):
        sums[e] = sums.get(e, 0) + Fraction(v)
    total = sum(sums.values())
    exact_hhi = 10000 * sum((s / total) ** 2 for s in sums.values())
    assert exact_hhi == 3450
    assert_rel(ref.hhi(x, entity), exact_hhi)
    ordered = sorted(sums.values(), reverse=True)
    for k in (1, 2, 3):
        assert_rel(ref.cr(x, k, entity), sum(ordered[:k]) / total)
    assert ref.cr(x, 1, entity) == pytest.approx(0.40, rel=1e-12)
    assert ref.cr(x, 3, entity) == pytest.approx(0.95, rel=1e-12)


def test_hhi_without_entity_each_row_is_an_entity():
    # Source: exact rationals, each row its own firm.
    x = [0.1, 0.25, 0.3, 1.7, 0.05]
    total = sum(Fraction(v) for v in x)
    exact = 10000 * sum((Fraction(v) / total) ** 2 for v in x)
    assert_rel(ref.hhi(x), exact)
    assert_rel(ref.cr(x, 2), (Fraction(1.7) + Fraction(0.3)) / total)


def test_hhi_entity_with_a_negative_row_but_positive_sum():
    # Source: contract (entity sums first) and hand computation: a = 10 - 3 = 7, b = 5,
    # HHI = 10000 * (7^2 + 5^2) / 12^2.
    x = [10, -3, 5]
    entity = ["a", "a", "b"]
    assert_rel(ref.hhi(x, entity), Fraction(10000 * (49 + 25), 144))
    assert_rel(ref.cr(x, 1, entity), Fraction(7, 12))
    assert ref.hhi(x) is None  # without entity the -3 row is an entity with a negative sum


# ---------------------------------------------------------------------------------------------
# Brute force pairwise sums on random data
# ---------------------------------------------------------------------------------------------

def pairwise_gini_numpy(x, w):
    # Source: brute-force double sum sum_i sum_j w_i w_j |x_i - x_j| / (2 W^2 mu) by numpy
    # broadcasting (handbook mean-difference definition).
    x = np.asarray(x, float)
    w = np.asarray(w, float)
    W = w.sum()
    mu = (w * x).sum() / W
    return float((np.outer(w, w) * np.abs(x[:, None] - x[None, :])).sum() / (2 * W * W * mu))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_gini_pairwise_brute_force_random_weighted(seed):
    rng = np.random.default_rng(seed)
    n = 600
    x = rng.lognormal(0.0, 1.0, n)
    x[:40] = x[40:80]  # ties
    w = rng.gamma(2.0, 1.5, n)
    assert_rel(ref.gini(x, w), pairwise_gini_numpy(x, w))


def test_gini_pairwise_brute_force_with_negative_values():
    # The pairwise identity holds for any sign of x as long as T > 0 (result may exceed 1).
    rng = np.random.default_rng(11)
    x = rng.normal(0.3, 1.0, 500)
    w = rng.uniform(0.1, 3.0, 500)
    assert (w * x).sum() > 0
    assert_rel(ref.gini(x, w), pairwise_gini_numpy(x, w))
    heavy_negative = np.array([-5.0, 1.0, 1.0, 1.0, 3.0])
    g = ref.gini(heavy_negative)
    assert g > 1.0
    assert_rel(g, pairwise_gini_numpy(heavy_negative, np.ones(5)))


# ---------------------------------------------------------------------------------------------
# Integer-weight replication (population principle)
# ---------------------------------------------------------------------------------------------

# Source: population principle (handbook fact): a row of integer weight w counts like w copies
# of the row. Each measure is called weighted, then unweighted on np.repeat(x, w).
# gini_corrected is left out on purpose: its n/(n-1) factor counts rows, not weight (contract).
REPLICATION_CASES = {
    "gini": lambda x, w: ref.gini(x, w),
    "lorenz": lambda x, w: [ref.lorenz(x, p, w) for p in (0.0, 0.13, 0.37, 0.5, 0.81, 1.0)],
    "generalized_lorenz": lambda x, w: [ref.generalized_lorenz(x, p, w) for p in (0.21, 0.64)],
    "bottom_share": lambda x, w: [ref.bottom_share(x, p, w) for p in (0.1, 0.4, 0.55)],
    "top_share": lambda x, w: [ref.top_share(x, p, w) for p in (0.01, 0.1, 0.2, 0.77)],
    "palma": lambda x, w: ref.palma(x, w),
    "s80s20": lambda x, w: ref.s80s20(x, w),
    "quantile_w": lambda x, w: [ref.quantile_w(x, p, w) for p in np.linspace(0, 1, 41)],
    "percentile_ratio": lambda x, w: [ref.percentile_ratio(x, 0.9, 0.1, w),
                                      ref.percentile_ratio(x, 0.75, 0.25, w)],
    "lorenz_curve": lambda x, w: [v for pt in ref.lorenz_curve(x, 9, w) for v in pt],
    "theil": lambda x, w: ref.theil(x, w),
    "mld": lambda x, w: ref.mld(x, w),
    "ge": lambda x, w: [ref.ge(x, a, w) for a in (-1.0, 0.0, 0.5, 1.0, 2.0, 3.0)],
    "atkinson": lambda x, w: [ref.atkinson(x, e, w) for e in (0.0, 0.5, 1.0, 1.5, 3.0)],
    "cv": lambda x, w: ref.cv(x, w),
    "hoover": lambda x, w: ref.hoover(x, w),
}


@pytest.fixture(scope="module")
def replication_data():
    rng = np.random.default_rng(2024)
    n = 80
    x = np.round(rng.lognormal(1.0, 0.9, n), 1)  # rounding makes ties
    w = rng.integers(0, 6, n)  # includes zero weights: repeated 0 times
    w[0] = 0
    return x, w


@pytest.mark.parametrize("measure", sorted(REPLICATION_CASES))
def test_integer_weights_equal_repeated_rows(measure, replication_data):
    x, w = replication_data
    f = REPLICATION_CASES[measure]
    weighted = np.atleast_1d(np.asarray(f(x, w.astype(float)), dtype=float))
    repeated = np.atleast_1d(np.asarray(f(np.repeat(x, w), None), dtype=float))
    assert weighted.shape == repeated.shape
    np.testing.assert_allclose(weighted, repeated, rtol=1e-12, atol=1e-15)


def test_replication_covers_every_weighted_measure():
    # Every measure with a weight argument is in the replication table (except the corrected
    # Gini, see above); hhi and cr take entity labels instead of weights.
    weighted = set(ref.REFERENCES) - {"hhi", "cr", "gini_corrected"}
    assert weighted == set(REPLICATION_CASES)


def test_hhi_rows_repeated_equal_rows_scaled():
    # Source: HHI works on entity totals (definition): repeating a row k times within its
    # entity adds the same as one row of k * x.
    rng = np.random.default_rng(5)
    x = rng.uniform(1, 50, 30)
    entity = rng.integers(0, 7, 30)
    k = rng.integers(1, 4, 30)
    assert_rel(ref.hhi(np.repeat(x, k), np.repeat(entity, k)), ref.hhi(x * k, entity))
    assert_rel(ref.cr(np.repeat(x, k), 3, np.repeat(entity, k)), ref.cr(x * k, 3, entity))


# ---------------------------------------------------------------------------------------------
# numpy quantiles
# ---------------------------------------------------------------------------------------------

def test_quantile_w_matches_numpy_inverted_cdf_integer_weights():
    # Source: numpy.quantile(method="inverted_cdf", weights=...) (numpy >= 2.0).
    rng = np.random.default_rng(7)
    x = np.round(rng.normal(10, 3, 200), 1)
    w = rng.integers(1, 6, 200)
    ps = np.concatenate(([0.0, 1.0, 0.5], rng.random(500)))
    want = np.quantile(x, ps, method="inverted_cdf", weights=w)
    got = [ref.quantile_w(x, p, w) for p in ps]
    np.testing.assert_array_equal(got, want)


def test_quantile_w_matches_numpy_unweighted():
    # Source: numpy.quantile(method="inverted_cdf") without weights.
    rng = np.random.default_rng(8)
    x = rng.exponential(2.0, 151)
    ps = np.concatenate(([0.0, 1.0], rng.random(300)))
    want = np.quantile(x, ps, method="inverted_cdf")
    got = [ref.quantile_w(x, p) for p in ps]
    np.testing.assert_array_equal(got, want)


def test_quantile_w_matches_numpy_float_weights_away_from_jumps():
    # Source: numpy.quantile(method="inverted_cdf", weights=...); p values within 1e-9 of a
    # jump of the weighted CDF are skipped (rounding may put them on either side).
    rng = np.random.default_rng(9)
    x = rng.normal(0, 1, 120)
    w = rng.uniform(0.01, 2.0, 120)
    cdf = np.cumsum(w[np.argsort(x)]) / w.sum()
    ps = [p for p in rng.random(400) if np.min(np.abs(cdf - p)) > 1e-9]
    assert len(ps) > 350
    want = np.quantile(x, ps, method="inverted_cdf", weights=w)
    got = [ref.quantile_w(x, p, w) for p in ps]
    np.testing.assert_array_equal(got, want)


def test_percentile_ratio_matches_numpy():
    # Source: ratio of numpy.quantile(method="inverted_cdf", weights=...) values.
    rng = np.random.default_rng(10)
    x = rng.lognormal(0, 1, 300)
    w = rng.integers(1, 4, 300)
    q = np.quantile(x, [0.9, 0.1], method="inverted_cdf", weights=w)
    assert_rel(ref.percentile_ratio(x, 0.9, 0.1, w), q[0] / q[1])
    assert ref.percentile_ratio([0, 0, 1, 2], 0.9, 0.1) is None  # lower quantile is 0


# ---------------------------------------------------------------------------------------------
# Closed forms on large samples
# ---------------------------------------------------------------------------------------------
# Closed forms quoted from memory (handbook formulas). n = 400_000 per sample, fixed seeds. Each tolerance is about 5 sampling standard deviations
# of the estimate at this n; the standard deviations were measured once by rerunning the same
# estimates on 20 other seeds (n = 200_000, scaled by 1/sqrt(2)).

N_LARGE = 400_000
SIGMA = 0.8  # lognormal shape
ALPHA = 3.0  # Pareto tail index (> 2, so the variance is finite)


@pytest.fixture(scope="module")
def lognormal_sample():
    return np.random.default_rng(101).lognormal(0.0, SIGMA, N_LARGE)


@pytest.fixture(scope="module")
def pareto_sample():
    # Inverse CDF of Pareto(x_m = 1, alpha): x = U^(-1/alpha), U uniform on (0, 1].
    u = 1.0 - np.random.default_rng(102).random(N_LARGE)
    return u ** (-1.0 / ALPHA)


def test_lognormal_gini(lognormal_sample):
    # Source: handbook closed form, lognormal(sigma): G = 2 Phi(sigma / sqrt 2) - 1.
    want = 2 * norm.cdf(SIGMA / math.sqrt(2)) - 1
    assert abs(ref.gini(lognormal_sample) - want) < 4e-3


def test_lognormal_theil_and_mld(lognormal_sample):
    # Source: handbook closed form, lognormal(sigma): Theil T = MLD = sigma^2 / 2.
    want = SIGMA**2 / 2
    assert abs(ref.theil(lognormal_sample) - want) < 8e-3
    assert abs(ref.mld(lognormal_sample) - want) < 6e-3


@pytest.mark.parametrize("eps, tol", [(0.5, 3e-3), (1.0, 4e-3), (2.0, 5e-3)])
def test_lognormal_atkinson(lognormal_sample, eps, tol):
    # Source: handbook closed form, lognormal(sigma): A(eps) = 1 - exp(-eps sigma^2 / 2).
    want = 1 - math.exp(-eps * SIGMA**2 / 2)
    assert abs(ref.atkinson(lognormal_sample, eps) - want) < tol


@pytest.mark.parametrize("p, tol", [(0.1, 4e-3), (0.01, 2.5e-3)])
def test_lognormal_top_share(lognormal_sample, p, tol):
    # Source: lognormal Lorenz curve L(u) = Phi(Phi^-1(u) - sigma) (handbook), so the top-p
    # share is 1 - L(1 - p) = Phi(sigma - Phi^-1(1 - p)).
    want = norm.cdf(SIGMA - norm.ppf(1 - p))
    assert abs(ref.top_share(lognormal_sample, p) - want) < tol


@pytest.mark.parametrize("alpha, tol", [(-1.0, 8e-3), (0.5, 6e-3), (2.0, 2.5e-2)])
def test_lognormal_ge(lognormal_sample, alpha, tol):
    # Source: lognormal moments E[X^a] = exp(a m + a^2 sigma^2 / 2) (handbook) give
    # GE(alpha) = (exp(alpha (alpha - 1) sigma^2 / 2) - 1) / (alpha (alpha - 1)).
    a = alpha
    want = (math.exp(a * (a - 1) * SIGMA**2 / 2) - 1) / (a * (a - 1))
    assert abs(ref.ge(lognormal_sample, alpha) - want) < tol


def test_lognormal_cv(lognormal_sample):
    # Source: lognormal moments (handbook): CV = sqrt(exp(sigma^2) - 1).
    want = math.sqrt(math.exp(SIGMA**2) - 1)
    assert abs(ref.cv(lognormal_sample) - want) < 2.5e-2


def test_pareto_gini(pareto_sample):
    # Source: handbook closed form, Pareto(alpha > 1): G = 1 / (2 alpha - 1).
    assert abs(ref.gini(pareto_sample) - 1 / (2 * ALPHA - 1)) < 3e-3


@pytest.mark.parametrize("p, tol", [(0.1, 2.5e-3), (0.01, 2e-3)])
def test_pareto_top_share(pareto_sample, p, tol):
    # Source: handbook closed form, Pareto(alpha > 1): top-p share = p^(1 - 1/alpha).
    assert abs(ref.top_share(pareto_sample, p) - p ** (1 - 1 / ALPHA)) < tol


def test_exponential_gini():
    # Source: handbook closed form: the exponential distribution has Gini 1/2.
    x = np.random.default_rng(103).exponential(2.5, N_LARGE)
    assert abs(ref.gini(x) - 0.5) < 2.5e-3


def test_uniform_gini_lorenz_cv():
    # Source: handbook closed forms for uniform(0, 1): Gini 1/3, Lorenz L(u) = u^2,
    # CV = sd / mean = (1/sqrt 12) / (1/2) = 1/sqrt 3.
    x = np.random.default_rng(104).random(N_LARGE)
    assert abs(ref.gini(x) - 1 / 3) < 2e-3
    assert abs(ref.lorenz(x, 0.3) - 0.09) < 1e-3
    assert abs(ref.lorenz(x, 0.7) - 0.49) < 2e-3
    assert abs(ref.cv(x) - 1 / math.sqrt(3)) < 3e-3


# ---------------------------------------------------------------------------------------------
# Generalized entropy limits and identities
# ---------------------------------------------------------------------------------------------

GE_X = [0.5, 1.7, 2.2, 3.9, 3.9, 12.5, 0.03, 6.0]
GE_W = [1.0, 2.5, 0.3, 1.1, 0.7, 0.2, 4.0, 1.5]


def test_ge_limits_are_mld_and_theil():
    # Source: handbook: GE(alpha) -> MLD as alpha -> 0 and -> Theil T as alpha -> 1; the
    # error of the limit is O(|alpha - limit|) = O(1e-7), hence the loose 1e-5 tolerance.
    mld = ref.mld(GE_X, GE_W)
    theil = ref.theil(GE_X, GE_W)
    for a in (1e-7, -1e-7):
        assert ref.ge(GE_X, a, GE_W) == pytest.approx(mld, rel=1e-5)
    for a in (1 - 1e-7, 1 + 1e-7):
        assert ref.ge(GE_X, a, GE_W) == pytest.approx(theil, rel=1e-5)


def test_ge_2_is_half_cv_squared():
    # Source: handbook identity GE(2) = CV^2 / 2 (population CV).
    cv = ref.cv(GE_X, GE_W)
    assert ref.ge(GE_X, 2, GE_W) == pytest.approx(cv**2 / 2, rel=1e-12)


# ---------------------------------------------------------------------------------------------
# mpmath at high precision
# ---------------------------------------------------------------------------------------------

def _mp_data(x, w):
    X = [mpmath.mpf(v) for v in x]  # exact conversion of the binary floats
    Wt = [mpmath.mpf(v) for v in w]
    W = mpmath.fsum(Wt)
    T = mpmath.fsum(a * b for a, b in zip(X, Wt))
    return X, Wt, W, T, T / W


def mp_theil(x, w):
    X, Wt, W, T, mu = _mp_data(x, w)
    return mpmath.fsum(b * a * mpmath.log(a / mu) for a, b in zip(X, Wt) if a > 0) / T


def mp_mld(x, w):
    X, Wt, W, T, mu = _mp_data(x, w)
    return mpmath.fsum(b * mpmath.log(mu / a) for a, b in zip(X, Wt)) / W


def mp_ge(x, alpha, w):
    X, Wt, W, T, mu = _mp_data(x, w)
    a = mpmath.mpf(alpha)
    return (mpmath.fsum(b * (v / mu) ** a for v, b in zip(X, Wt)) / W - 1) / (a * (a - 1))


def mp_atkinson(x, eps, w):
    # Written on raw x (the reference divides by mu first): an independent route.
    X, Wt, W, T, mu = _mp_data(x, w)
    e = mpmath.mpf(eps)
    if e == 1:
        ede = mpmath.exp(mpmath.fsum(b * mpmath.log(a) for a, b in zip(X, Wt)) / W)
    else:
        ede = (mpmath.fsum(b * a ** (1 - e) for a, b in zip(X, Wt)) / W) ** (1 / (1 - e))
    return 1 - ede / mu


GE_X0 = GE_X + [0.0]  # a zero: allowed for Theil, GE(alpha > 0) and Atkinson(eps < 1)
GE_W0 = GE_W + [0.6]


def test_mpmath_theil_mld():
    # Source: mpmath at 50 significant digits, direct formulas.
    with mpmath.workdps(50):
        assert_rel(ref.theil(GE_X, GE_W), mp_theil(GE_X, GE_W))
        assert_rel(ref.theil(GE_X0, GE_W0), mp_theil(GE_X0, GE_W0))
        assert_rel(ref.mld(GE_X, GE_W), mp_mld(GE_X, GE_W))
        assert_rel(ref.theil(GE_X), mp_theil(GE_X, [1] * len(GE_X)))


@pytest.mark.parametrize("alpha", [-2.0, -1.0, -0.5, 0.5, 2.0, 3.0, 0.25])
def test_mpmath_ge(alpha):
    # Source: mpmath at 50 significant digits, direct formula.
    with mpmath.workdps(50):
        assert_rel(ref.ge(GE_X, alpha, GE_W), mp_ge(GE_X, alpha, GE_W))
        if alpha > 0:
            assert_rel(ref.ge(GE_X0, alpha, GE_W0), mp_ge(GE_X0, alpha, GE_W0))


@pytest.mark.parametrize("eps", [0.25, 0.5, 1.0, 1.5, 2.0, 3.5])
def test_mpmath_atkinson(eps):
    # Source: mpmath at 50 significant digits, direct formula on raw x.
    with mpmath.workdps(50):
        assert_rel(ref.atkinson(GE_X, eps, GE_W), mp_atkinson(GE_X, eps, GE_W))
        if eps < 1:
            assert_rel(ref.atkinson(GE_X0, eps, GE_W0), mp_atkinson(GE_X0, eps, GE_W0))


def test_mpmath_cv():
    # Source: mpmath at 50 significant digits, population CV.
    with mpmath.workdps(50):
        X, Wt, W, T, mu = _mp_data(GE_X, GE_W)
        var = mpmath.fsum(b * (a - mu) ** 2 for a, b in zip(X, Wt)) / W
        assert_rel(ref.cv(GE_X, GE_W), mpmath.sqrt(var) / mu)


# ---------------------------------------------------------------------------------------------
# Facts of common practice
# ---------------------------------------------------------------------------------------------

def test_all_equal_means_no_inequality():
    # Fact of common practice: when every unit holds the same amount, Gini, Theil, MLD,
    # Atkinson, Hoover and CV are 0, every bottom-p share is p, Palma = 0.1/0.4, S80/S20 = 1.
    x = [7.3] * 10
    w = [1.0, 2.0, 0.5, 3.0, 1.0, 1.0, 2.5, 1.0, 4.0, 0.25]
    for weights in (None, w):
        for value in (ref.gini(x, weights), ref.theil(x, weights), ref.mld(x, weights),
                      ref.hoover(x, weights), ref.cv(x, weights),
                      ref.atkinson(x, 0.5, weights), ref.atkinson(x, 1.0, weights),
                      ref.atkinson(x, 2.0, weights), ref.ge(x, 2.0, weights)):
            assert abs(value) < 1e-14
        for p in (0.1, 0.33, 0.5, 0.9):
            assert ref.bottom_share(x, p, weights) == pytest.approx(p, rel=1e-13)
        assert ref.palma(x, weights) == pytest.approx(0.25, rel=1e-13)
        assert ref.s80s20(x, weights) == pytest.approx(1.0, rel=1e-13)


@pytest.mark.parametrize("n", [2, 3, 10, 57])
def test_one_unit_holds_everything(n):
    # Fact of common practice: one of n units holds everything -> Gini (n-1)/n,
    # Hoover (n-1)/n, Theil ln n (its maximum), corrected Gini 1.
    x = [0.0] * (n - 1) + [5.0]
    assert ref.gini(x) == pytest.approx((n - 1) / n, rel=1e-13)
    assert ref.gini_corrected(x) == pytest.approx(1.0, rel=1e-13)
    assert ref.hoover(x) == pytest.approx((n - 1) / n, rel=1e-13)
    assert ref.theil(x) == pytest.approx(math.log(n), rel=1e-13)
    assert ref.mld(x) is None  # zeros are outside the MLD domain


@pytest.mark.parametrize("n", [1, 2, 4, 5, 20])
def test_hhi_facts(n):
    # Fact of common practice: HHI of n equal firms is 10000/n (10000 for a monopoly);
    # CRk with k >= number of firms is 1.
    assert ref.hhi([3.5] * n) == pytest.approx(10000 / n, rel=1e-13)
    assert ref.cr([3.5] * n, n) == 1.0
    assert ref.cr([3.5] * n, n + 3) == 1.0
    assert ref.hhi([2.0, 5.0, 1.0], ["m", "m", "m"]) == pytest.approx(10000, rel=1e-13)


def test_scale_invariance():
    # Fact of common practice: the relative measures do not change when every amount is
    # multiplied by the same positive number (HHI too).
    rng = np.random.default_rng(12)
    x = rng.lognormal(0, 1, 300)
    w = rng.uniform(0.5, 2, 300)
    for f in (ref.gini, ref.theil, ref.mld, ref.cv, ref.hoover, ref.palma, ref.s80s20):
        assert f(1000 * x, w) == pytest.approx(f(x, w), rel=1e-12)
    assert ref.atkinson(1000 * x, 1.5, w) == pytest.approx(ref.atkinson(x, 1.5, w), rel=1e-12)
    assert ref.hhi(1000 * x) == pytest.approx(ref.hhi(x), rel=1e-12)


# ---------------------------------------------------------------------------------------------
# Open dataset: statsmodels engel (household income and food expenditure)
# ---------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def engel():
    sm_datasets = pytest.importorskip("statsmodels.datasets")
    return sm_datasets.engel.load_pandas().data


def test_engel_gini_and_theil_of_income(engel):
    # Source: statsmodels.datasets.engel, column "income" (235 households). Gini by numpy
    # pairwise double sum, Theil by its direct formula summed with math.fsum.
    income = engel["income"].to_numpy(dtype=float)
    assert income.size == 235 and np.all(income > 0)
    n = income.size
    mu = income.mean()
    gini_pairwise = np.abs(income[:, None] - income[None, :]).sum() / (2 * n * n * mu)
    mu_exact = math.fsum(income) / n
    theil_direct = math.fsum(v / mu_exact * math.log(v / mu_exact) for v in income) / n
    assert_rel(ref.gini(income), gini_pairwise)
    assert_rel(ref.theil(income), theil_direct)


def test_engel_food_share_weighted_gini(engel):
    # Source: statsmodels engel data; food expenditure weighted by income, checked with the
    # numpy pairwise double sum.
    food = engel["foodexp"].to_numpy(dtype=float)
    income = engel["income"].to_numpy(dtype=float)
    assert_rel(ref.gini(food, income), pairwise_gini_numpy(food, income))


# ---------------------------------------------------------------------------------------------
# Undefined results, invalid arguments, zero weights
# ---------------------------------------------------------------------------------------------

# Each measure called with its extra parameters (source: the contract).
CALLS = {
    "gini": lambda x, w: ref.gini(x, w),
    "gini_corrected": lambda x, w: ref.gini_corrected(x, w),
    "lorenz": lambda x, w: ref.lorenz(x, 0.3, w),
    "generalized_lorenz": lambda x, w: ref.generalized_lorenz(x, 0.3, w),
    "bottom_share": lambda x, w: ref.bottom_share(x, 0.4, w),
    "top_share": lambda x, w: ref.top_share(x, 0.1, w),
    "palma": lambda x, w: ref.palma(x, w),
    "s80s20": lambda x, w: ref.s80s20(x, w),
    "quantile_w": lambda x, w: ref.quantile_w(x, 0.5, w),
    "percentile_ratio": lambda x, w: ref.percentile_ratio(x, 0.9, 0.1, w),
    "lorenz_curve": lambda x, w: ref.lorenz_curve(x, 4, w),
    "theil": lambda x, w: ref.theil(x, w),
    "mld": lambda x, w: ref.mld(x, w),
    "ge": lambda x, w: ref.ge(x, 0.5, w),
    "atkinson": lambda x, w: ref.atkinson(x, 0.5, w),
    "cv": lambda x, w: ref.cv(x, w),
    "hoover": lambda x, w: ref.hoover(x, w),
}


def test_references_dict_names():
    assert set(ref.REFERENCES) == set(CALLS) | {"hhi", "cr"}
    for name, f in ref.REFERENCES.items():
        assert f is getattr(ref, name)


@pytest.mark.parametrize("name", sorted(CALLS))
def test_empty_input_is_none(name):
    assert CALLS[name]([], None) is None
    assert CALLS[name]([1.0, 2.0], [0.0, 0.0]) is None  # every row dropped


def test_empty_input_is_none_hhi_cr():
    assert ref.hhi([]) is None
    assert ref.cr([], 2) is None
    assert ref.hhi([], []) is None


@pytest.mark.parametrize("name", sorted(set(CALLS) - {"quantile_w", "percentile_ratio",
                                                      "generalized_lorenz"}))
def test_nonpositive_total_is_none(name):
    # T <= 0: a zero total and a negative total.
    assert CALLS[name]([0.0, 0.0, 0.0], None) is None
    assert CALLS[name]([-3.0, 1.0, 1.0], None) is None


def test_generalized_lorenz_and_quantiles_defined_when_total_not_positive():
    # Contract: generalized Lorenz is None only when empty; quantiles do not need T > 0.
    x = [-3.0, 1.0, 1.0]
    assert_rel(ref.generalized_lorenz(x, 1.0), Fraction(-1, 3))
    assert_rel(ref.generalized_lorenz(x, 1 / 3), Fraction(-1))  # bottom third: the -3 row
    assert ref.quantile_w(x, 0.2) == -3.0
    assert ref.quantile_w(x, 0.5) == 1.0
    assert ref.percentile_ratio(x, 0.9, 0.1) == pytest.approx(-1 / 3, rel=1e-15)


def test_domain_rules():
    # Contract domains: MLD needs x > 0; Theil needs x >= 0; GE(alpha <= 0) and
    # Atkinson(eps >= 1) need x > 0; GE(alpha > 0) and Atkinson(eps < 1) allow zeros.
    with_zero = [0.0, 1.0, 2.0, 5.0]
    with_negative = [-1.0, 2.0, 3.0, 5.0]
    assert ref.mld(with_zero) is None
    assert ref.theil(with_zero) is not None
    assert ref.theil(with_negative) is None
    assert ref.ge(with_zero, 0.0) is None
    assert ref.ge(with_zero, -1.0) is None
    assert ref.ge(with_zero, 2.0) is not None
    assert ref.ge(with_negative, 2.0) is None
    assert ref.atkinson(with_zero, 1.0) is None
    assert ref.atkinson(with_zero, 2.0) is None
    assert ref.atkinson(with_zero, 0.5) is not None
    assert ref.atkinson(with_negative, 0.5) is None
    assert ref.cv([-1.0, 1.0]) is None  # mu = 0
    assert ref.cv([-1.0, 3.0]) is not None  # negative values allowed while mu > 0
    assert ref.gini_corrected([4.0]) is None  # n < 2
    assert ref.gini_corrected([4.0, 9.0], [1.0, 0.0]) is None  # n = 1 after dropping w = 0
    assert ref.hhi([5.0, -1.0], ["a", "b"]) is None  # an entity sum < 0
    assert ref.cr([5.0, -1.0], 1, ["a", "b"]) is None
    assert ref.hhi([0.0, 0.0]) is None  # total <= 0


@pytest.mark.parametrize("name", sorted(CALLS))
def test_negative_weight_raises(name):
    with pytest.raises(ValueError):
        CALLS[name]([1.0, 2.0, 3.0], [1.0, -0.5, 1.0])


def test_invalid_parameters_raise():
    x = [1.0, 2.0, 3.0]
    for p in (-0.01, 1.01, float("nan")):
        with pytest.raises(ValueError):
            ref.lorenz(x, p)
        with pytest.raises(ValueError):
            ref.generalized_lorenz(x, p)
        with pytest.raises(ValueError):
            ref.top_share(x, p)
        with pytest.raises(ValueError):
            ref.bottom_share(x, p)
        with pytest.raises(ValueError):
            ref.quantile_w(x, p)
        with pytest.raises(ValueError):
            ref.percentile_ratio(x, p, 0.5)
        with pytest.raises(ValueError):
            ref.percentile_ratio(x, 0.5, p)
    with pytest.raises(ValueError):
        ref.atkinson(x, -0.5)
    for a in (float("inf"), float("nan")):
        with pytest.raises(ValueError):
            ref.ge(x, a)
    for k in (0, -1, 1.5):
        with pytest.raises(ValueError):
            ref.cr(x, k)
        with pytest.raises(ValueError):
            ref.lorenz_curve(x, k)
    with pytest.raises(ValueError):
        ref.gini([1.0, 2.0], [1.0])  # lengths differ


@pytest.mark.parametrize("name", sorted(CALLS))
def test_zero_weight_rows_change_nothing(name):
    # Contract: rows with w = 0 are dropped first, whatever their x (even outside a domain).
    rng = np.random.default_rng(13)
    x = rng.lognormal(0, 0.7, 25)
    w = rng.uniform(0.2, 2.0, 25)
    x_more = np.concatenate((x[:10], [-1e6, 0.0], x[10:], [1e9]))
    w_more = np.concatenate((w[:10], [0.0, 0.0], w[10:], [0.0]))
    assert CALLS[name](x_more, w_more) == CALLS[name](x, w)
    assert CALLS[name](x, w) is not None


def test_results_are_python_floats_never_nan():
    rng = np.random.default_rng(14)
    x = rng.lognormal(0, 1, 40)
    for name, f in CALLS.items():
        value = f(x, None)
        if name == "lorenz_curve":
            assert all(type(p) is float and type(v) is float for p, v in value)
        else:
            assert type(value) is float and not math.isnan(value), name
    assert type(ref.hhi(x)) is float and type(ref.cr(x, 3)) is float


# ---------------------------------------------------------------------------------------------
# Small spread: the reference keeps its digits (mpmath at 60 digits)
# ---------------------------------------------------------------------------------------------

def _narrow(spread: float, seed: int, n: int = 60):
    """Values mean·(1 + spread·z), z standard normal (seeded), with weights in [0.5, 2)."""
    rng = np.random.default_rng(seed)
    mean = 1234.5
    x = mean * (1.0 + spread * rng.standard_normal(n))
    w = rng.uniform(0.5, 2.0, n)
    return [float(v) for v in x], [float(v) for v in w]


SPREADS = [1e-1, 1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 1e-7, 1e-8, 1e-9]


@pytest.mark.parametrize("spread", SPREADS)
def test_log_and_power_measures_keep_digits_at_small_spread(spread):
    # Source: mpmath at 60 significant digits, the direct (textbook) formulas on the exact binary
    # values; at a spread of 1e-9 they cancel about 18 digits, leaving 40. The old one-pass
    # reference was off by 2e-3 relative at a spread of 1e-6; the contract is 1e-9 relative.
    x, w = _narrow(spread, seed=int(-math.log10(spread)))
    with mpmath.workdps(60):
        assert_rel(ref.theil(x, w), mp_theil(x, w), rel=1e-10)
        assert_rel(ref.mld(x, w), mp_mld(x, w), rel=1e-10)
        assert_rel(ref.theil(x), mp_theil(x, [1] * len(x)), rel=1e-10)
        for alpha in (-2.0, -0.5, 0.5, 2.0, 3.0, 0.25, 7.5):
            assert_rel(ref.ge(x, alpha, w), mp_ge(x, alpha, w), rel=1e-10)
        for eps in (0.25, 0.5, 1.0, 1.5, 2.0, 3.5):
            assert_rel(ref.atkinson(x, eps, w), mp_atkinson(x, eps, w), rel=1e-10)
        X, Wt, W, T, mu = _mp_data(x, w)
        var = mpmath.fsum(b * (a - mu) ** 2 for a, b in zip(X, Wt)) / W
        assert_rel(ref.cv(x, w), mpmath.sqrt(var) / mu, rel=1e-10)


def test_small_spread_with_a_zero_and_far_values():
    # Source: mpmath at 60 digits, direct formulas. One zero (r = 0: the term's limit) and one value
    # 1e6 times the others (far outside the series range) beside a tight cluster.
    x = [0.0, 5e6] + [5.0 * (1 + 1e-7 * k) for k in range(20)]
    w = [1.0] * len(x)
    with mpmath.workdps(60):
        assert_rel(ref.theil(x, w), mp_theil(x, w), rel=1e-12)
        for alpha in (0.5, 2.0, 3.0):
            assert_rel(ref.ge(x, alpha, w), mp_ge(x, alpha, w), rel=1e-12)
        assert_rel(ref.atkinson(x, 0.5, w), mp_atkinson(x, 0.5, w), rel=1e-12)


# ---------------------------------------------------------------------------------------------
# Values near the double range: the reference honours its own contract
# ---------------------------------------------------------------------------------------------

HUGE = [1e308, 1.0, 2.0]  # its total (1e308 + 3) fits in a double; w·x·2C and x² do not


def test_huge_value_whose_total_fits_gives_exact_values():
    # Source: exact rational arithmetic (pairwise Gini, shares of sums) and mpmath at 60 digits
    # for the rest; every measure is defined here, so every one gives a finite value.
    assert_rel(ref.gini(HUGE), exact_gini_pairwise(HUGE))
    exact = [Fraction(v) for v in HUGE]
    total = sum(exact)
    assert_rel(ref.hhi(HUGE), 10000 * sum((v / total) ** 2 for v in exact))
    assert_rel(ref.hhi(HUGE, ["a", "b", "b"]), 10000 * ((exact[0] / total) ** 2 + ((exact[1] + exact[2]) / total) ** 2))
    assert_rel(ref.cr(HUGE, 1), exact[0] / total)
    assert_rel(ref.cr(HUGE, 2), (exact[0] + exact[2]) / total)
    assert_rel(ref.hoover(HUGE), sum(abs(v / total - Fraction(1, 3)) for v in exact) / 2)
    assert_rel(ref.lorenz(HUGE, 0.5), (exact[1] + exact[2] / 2) / total)
    assert_rel(ref.top_share(HUGE, 0.2), (exact[0] * Fraction(3, 5)) / total)
    with mpmath.workdps(60):
        X, Wt, W, T, mu = _mp_data(HUGE, [1.0] * 3)
        var = mpmath.fsum((a - mu) ** 2 for a in X) / W
        assert_rel(ref.cv(HUGE), mpmath.sqrt(var) / mu)
        assert_rel(ref.theil(HUGE), mp_theil(HUGE, [1.0] * 3))
        assert_rel(ref.mld(HUGE), mp_mld(HUGE, [1.0] * 3))
        for alpha in (-1.0, 0.5, 2.0, 3.0):
            assert_rel(ref.ge(HUGE, alpha, None), mp_ge(HUGE, alpha, [1.0] * 3))
        for eps in (0.5, 1.0, 2.0):
            assert_rel(ref.atkinson(HUGE, eps), mp_atkinson(HUGE, eps, [1.0] * 3))


def test_overflowing_total_gives_none():
    # docs/input-policy.md: "sums past the DOUBLE range: NULL" (the reference's None); a quantile
    # and a generalized Lorenz ordinate need no total and keep their values.
    big = [1e308, 1e308, 2.0]
    for name in ("gini", "gini_corrected", "palma", "s80s20", "theil", "mld", "cv", "hoover", "hhi"):
        assert ref.REFERENCES[name](big) is None, name
    assert ref.lorenz(big, 0.5) is None and ref.top_share(big, 0.1) is None
    assert ref.ge(big, 2) is None and ref.atkinson(big, 0.5) is None
    assert ref.cr(big, 1, ["p", "p", "q"]) is None and ref.cr(big, 1) is None and ref.hhi(big, ["p", "p", "q"]) is None
    assert ref.quantile_w(big, 0.5) == 1e308
    # sorted [2, 1e308, 1e308], half of W = 3 is 1.5 rows: (2 + 1e308/2) / 3 (exact arithmetic)
    assert_rel(ref.generalized_lorenz(big, 0.5), (2 + Fraction(1e308) / 2) / 3)
    # an entity total past the range (its rows fit one by one): None, not an exception
    assert ref.hhi([1e308, 1e308, 1.0], ["a", "a", "b"]) is None


def test_never_nan_never_raises_near_the_range():
    # the reference's contract: a float or None, for every measure, on data at the edge of the range
    rows = [HUGE, [1e308, 1e308, 2.0], [-1e308, 1e308, 5.0], [1e-308, 2e-308, 5e-324], [1.7e308, 0.0, 0.0]]
    params = {"lorenz": (0.3,), "generalized_lorenz": (0.3,), "bottom_share": (0.3,), "top_share": (0.3,),
              "quantile_w": (0.3,), "percentile_ratio": (0.9, 0.1), "lorenz_curve": (4,), "ge": (2.0,),
              "atkinson": (0.5,), "cr": (1,)}
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no numpy overflow warning either
        for x in rows:
            for name, f in ref.REFERENCES.items():
                value = f(x, *params.get(name, ()))
                if name == "lorenz_curve":
                    assert value is None or all(math.isfinite(v) for _, v in value), (name, x)
                else:
                    assert value is None or (type(value) is float and math.isfinite(value)), (name, x, value)


def test_standard_error_reference_where_the_measure_is_undefined_or_weights_are_zero():
    """The SE reference follows the measure contract (shared/DESIGN.md): where the measure is NULL
    (no positive total) its standard error is NULL, never an exception; rows of weight 0 change
    nothing; equal values give Gini 0 in every sample, so its standard error is 0 (common practice)."""
    from uneven.reference import se as S
    assert S.se("gini", [1.0, 2.0, 3.0], (), [0.0, 0.0, 0.0]) is None
    assert S.se("lorenz", [-1.0, -2.0, 1.0], (0.4,), [1.0, 1.0, 1.0]) is None
    assert S.ci("top_share", [-1.0, -2.0, 1.0], (0.1,), [1.0, 1.0, 1.0]) == (None, None)
    # GL = B/W needs no positive total (its domain: any x): by hand, sorted −2, −1, 1, W = 3, p·W = 1.5,
    # GL = (−2 − 0.5)/3, Q = −1, z = (p·Q + (x − Q)·1(C ≤ 1.5) − GL)/W = (−2/9, 1/9, 1/9), mean 0,
    # variance 3/2 · (4 + 1 + 1)/81 = 1/9, so the error is 1/3
    assert S.se("generalized_lorenz", [-1.0, -2.0, 1.0], (0.5,), [1.0, 1.0, 1.0]) == pytest.approx(1 / 3, rel=1e-12)
    assert S.se("gini", [1.0, 2.0, 3.0, 4.0], (), [1.0, 0.0, 2.0, 1.0]) == \
        S.se("gini", [1.0, 3.0, 4.0], (), [1.0, 2.0, 1.0])
    assert S.se("gini", [5.0, 5.0, 5.0, 5.0], (), [1.0, 2.0, 1.0, 3.0]) == 0.0
