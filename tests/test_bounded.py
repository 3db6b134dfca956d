"""method="bounded": the exact value lies in every interval, on random data sets (hypothesis).

Oracle: the numpy reference (``uneven.reference``, itself checked against exact fractions, brute
force and closed forms in test_reference.py). The bounds are proved in docs/bounded.md; these tests
look for a data set that breaks one: ties, zeros, negative values, one row, skewed weights, values
at bin edges (powers of 1 + r), tiny and huge magnitudes.
"""

from __future__ import annotations

import functools
import math
import os

import duckdb
import numpy as np
import pandas as pd
import pytest
import sqlglot
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st
from sqlglot import exp

import uneven
from uneven import reference as ref

# (select item, reference on (x, w)); weighted calls use w, and the same on unweighted data
MEASURES = [
    ("gini(x, w)", lambda x, w: ref.gini(x, w)),
    ("gini_corrected(x, w)", lambda x, w: ref.gini_corrected(x, w)),
    ("lorenz(x, 0.3, w)", lambda x, w: ref.lorenz(x, 0.3, w)),
    ("bottom_share(x, 0.5, w)", lambda x, w: ref.bottom_share(x, 0.5, w)),
    ("top_share(x, 0.1, w)", lambda x, w: ref.top_share(x, 0.1, w)),
    ("generalized_lorenz(x, 0.7, w)", lambda x, w: ref.generalized_lorenz(x, 0.7, w)),
    ("palma(x, w)", lambda x, w: ref.palma(x, w)),
    ("s80s20(x, w)", lambda x, w: ref.s80s20(x, w)),
    ("quantile_w(x, 0.5, w)", lambda x, w: ref.quantile_w(x, 0.5, w)),
    ("quantile_w(x, 0.9, w)", lambda x, w: ref.quantile_w(x, 0.9, w)),
    ("quantile_w(x, 0.0, w)", lambda x, w: ref.quantile_w(x, 0.0, w)),
    ("quantile_w(x, 1.0, w)", lambda x, w: ref.quantile_w(x, 1.0, w)),
    ("percentile_ratio(x, 0.9, 0.1, w)", lambda x, w: ref.percentile_ratio(x, 0.9, 0.1, w)),
    ("hoover(x, w)", lambda x, w: ref.hoover(x, w)),
    ("theil(x, w)", lambda x, w: ref.theil(x, w)),
    ("mld(x, w)", lambda x, w: ref.mld(x, w)),
    ("cv(x, w)", lambda x, w: ref.cv(x, w)),
    ("ge(x, 2, w)", lambda x, w: ref.ge(x, 2, w)),
    ("ge(x, -1, w)", lambda x, w: ref.ge(x, -1, w)),
    ("atkinson(x, 0.5, w)", lambda x, w: ref.atkinson(x, 0.5, w)),
    ("atkinson(x, 1, w)", lambda x, w: ref.atkinson(x, 1, w)),
    ("atkinson(x, 2, w)", lambda x, w: ref.atkinson(x, 2, w)),
]
RATIOS = ("palma", "s80s20", "percentile_ratio")  # NULL interval when the denominator's interval reaches 0


def bounded_query(weighted: bool) -> str:
    items = [m if weighted else m.replace(", w)", ")") for m, _ in MEASURES]
    return "SELECT g, " + ", ".join(f"{item} AS m{i}" for i, item in enumerate(items)) + " FROM t GROUP BY g"


def check_inside(df: pd.DataFrame, data: pd.DataFrame, weighted: bool) -> None:
    for g, sub in data.groupby("g"):
        row = df[df["g"] == g].iloc[0]
        x = sub["x"].to_numpy(float)
        w = sub["w"].to_numpy(float) if weighted else None
        for i, (item, reference) in enumerate(MEASURES):
            exact = reference(x, w)
            point, lo, hi = row[f"m{i}"], row[f"m{i}_lo"], row[f"m{i}_hi"]
            if exact is None:
                assert pd.isna(point) and pd.isna(lo) and pd.isna(hi), (item, g, point)
                continue
            if pd.isna(lo) and item.startswith(RATIOS):
                continue  # unbounded ratio: NULL, never a made-up number
            assert lo <= exact <= hi, (item, g, lo, exact, hi, x.tolist(), None if w is None else w.tolist())
            assert lo <= point <= hi, (item, g, lo, point, hi)


@functools.cache
def compiled(weighted: bool, resolution: float) -> str:
    return uneven.compile(bounded_query(weighted), method="bounded", resolution=resolution)


def run_bounded(con, data: pd.DataFrame, weighted: bool, resolution: float) -> pd.DataFrame:
    con.register("t", data)
    try:
        return con.execute(compiled(weighted, resolution)).fetchdf()
    finally:
        con.unregister("t")


EDGE = 1.01  # values at bin edges of the default resolution
values = st.one_of(
    st.floats(0.01, 1000.0, allow_nan=False),
    st.sampled_from([0.0, 1.0, 2.0, 5.0, EDGE ** 10, EDGE ** 11, EDGE ** -3, 1e-9, 1e9]),
    st.floats(-50.0, -0.01, allow_nan=False),
    st.integers(1, 20).map(float),
)


@st.composite
def one_data_set(draw):
    n = draw(st.integers(1, 40))
    xs = draw(st.lists(values, min_size=n, max_size=n))
    if draw(st.booleans()):
        xs = [abs(v) for v in xs]  # most data are non-negative: keep the moment measures defined often
    weights = draw(st.one_of(st.lists(st.integers(1, 5).map(float), min_size=n, max_size=n),
                             st.lists(st.floats(0.01, 100.0), min_size=n, max_size=n)))
    return xs, weights


def data_sets(most: int):
    """Several independent data sets, one per group of one table (one query checks them all)."""
    def frame(sets):
        return pd.DataFrame([{"g": g, "x": x, "w": w} for g, (xs, ws) in enumerate(sets) for x, w in zip(xs, ws)])
    return st.lists(one_data_set(), min_size=1, max_size=most).map(frame)


@pytest.fixture(scope="module")
def con():
    c = duckdb.connect()
    yield c
    c.close()


def _prop(con, data, weighted, resolution):
    check_inside(run_bounded(con, data, weighted, resolution), data, weighted)


# hand-picked data sets every CI run sees: negatives, zeros, ties, bin edges, one row, skewed weights
PINNED = pd.DataFrame(
    [{"g": 0, "x": x, "w": w} for x, w in [(-3.5, 1.0), (-0.02, 2.0), (0.0, 1.0), (0.0, 5.0), (EDGE ** 10, 1.0),
                                           (EDGE ** 11, 1.0), (2.0, 3.0), (2.0, 3.0), (1e9, 0.01)]]
    + [{"g": 1, "x": 7.0, "w": 4.0}]
    + [{"g": 2, "x": x, "w": w} for x, w in [(1e-9, 100.0), (1.0, 1.0), (5.0, 1.0), (1000.0, 0.5)]])

# CI: 8 random examples of up to 8 data sets each (~35 data sets) at two resolutions, plus the pinned
# data sets at two more; every example checks every measure of MEASURES, weighted or not. Each
# (weighted, resolution) pair costs one compile of the 22-measure query, most of this test's time.
# The wide search is test_exact_value_inside_interval_many (-m slow). UNEVEN_BOUNDED_EXAMPLES
# raises the CI count.
CI_EXAMPLES = int(os.environ.get("UNEVEN_BOUNDED_EXAMPLES", "8"))


@settings(max_examples=CI_EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=data_sets(8), weighted=st.booleans(), resolution=st.sampled_from([0.01, 1.0]))
@example(data=PINNED, weighted=True, resolution=0.001)
@example(data=PINNED, weighted=False, resolution=0.3)
def test_exact_value_inside_interval(con, data, weighted, resolution):
    _prop(con, data, weighted, resolution)


@pytest.mark.slow
# on demand: 400 examples of up to 20 data sets each (~4000 data sets)
@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=data_sets(20), weighted=st.booleans(), resolution=st.sampled_from([0.01, 0.3, 1.0, 0.001]))
def test_exact_value_inside_interval_many(con, data, weighted, resolution):
    _prop(con, data, weighted, resolution)


def test_lognormal_width_at_default_resolution(con):
    # invented data: lognormal sigma 1, 20,000 rows in 2 groups; the Gini interval at r = 0.01 is
    # about r²/(14σ) ≈ 7e-6 wide (docs/bounded.md): well under the 1e-5 target
    rng = np.random.default_rng(20261201)
    data = pd.DataFrame({"g": rng.integers(0, 2, 20000), "x": rng.lognormal(3.0, 1.0, 20000),
                         "w": rng.uniform(0.5, 3.0, 20000)})
    df = run_bounded(con, data, True, 0.01)
    check_inside(df, data, True)
    assert (df["m0_hi"] - df["m0_lo"]).max() <= 1e-5
    finer = run_bounded(con, data, True, 0.003)
    assert (finer["m0_hi"] - finer["m0_lo"]).max() <= 1e-6


def test_query_tolerance_reaches_1e6():
    rng = np.random.default_rng(7)
    t = pd.DataFrame({"x": rng.lognormal(0.0, 1.0, 3000)})  # noqa: F841 (read by the query)
    df = uneven.query("SELECT gini(x) AS g FROM t", method="bounded", tolerance=1e-6)
    info = df.attrs["uneven"]
    assert info["widths"]["g"] <= 1e-6
    assert df["g_lo"][0] <= ref.gini(t["x"].to_numpy()) <= df["g_hi"][0]


def test_no_sort_of_the_rows():
    sql = uneven.compile("SELECT g, gini(x, w) FROM t GROUP BY g", method="bounded")
    assert '"_uv_x"' in sql and 'ORDER BY "_uv_x"' not in sql  # windows run over bins only
    assert "ORDER BY \"uv_min\"" in sql


def test_bounded_errors():
    with pytest.raises(uneven.MeasureUsageError, match="whole select item"):
        uneven.compile("SELECT round(gini(x), 3) FROM t", method="bounded")
    with pytest.raises(uneven.MeasureUsageError, match="no interval form"):
        uneven.compile("SELECT lorenz_curve(x, 4) FROM t", method="bounded")
    with pytest.raises(uneven.MeasureUsageError, match="method must be"):
        uneven.compile("SELECT gini(x) FROM t", method="approx")
    with pytest.raises(uneven.UnevenError, match="bounded. only"):
        uneven.compile("SELECT gini(x) FROM t", tolerance=1e-3)
    with pytest.raises(uneven.UnevenError, match="resolution must"):
        uneven.compile("SELECT gini(x) FROM t", method="bounded", resolution=0)


def test_entity_measures_stay_exact():
    t = pd.DataFrame({"x": [5.0, 3.0, 2.0, 7.0], "e": [1, 1, 2, 3]})  # noqa: F841
    df = uneven.query("SELECT hhi(x, e) AS h, gini(x) AS g FROM t", method="bounded")
    exact = ref.hhi(np.array([5.0, 3.0, 2.0, 7.0]), np.array([1, 1, 2, 3]))
    assert df["h"][0] == pytest.approx(exact, rel=1e-9) and df["h_lo"][0] == df["h_hi"][0] == df["h"][0]
    assert df["g_lo"][0] <= ref.gini(np.array([5.0, 3.0, 2.0, 7.0])) <= df["g_hi"][0]


def test_cli_bounded(capsys):
    from uneven.cli.main import main
    code = main(["query", "--method", "bounded", "--format", "csv",
                 "SELECT gini(x) AS g FROM (VALUES (1.0), (2.0), (4.0), (10.0)) t(x)"])
    out, err = capsys.readouterr()
    assert code == 0 and "g,g_lo,g_hi" in out and "resolution 0.01" in err
    lo, hi = (float(v) for v in out.splitlines()[1].split(",")[1:3])
    assert lo <= ref.gini(np.array([1.0, 2.0, 4.0, 10.0])) <= hi
    assert main(["compile", "--method", "bounded", "SELECT gini(x) FROM t"]) == 0
    assert "uv_bin" in capsys.readouterr().out
    assert main(["query", "--tolerance", "1e-3", "SELECT gini(x) FROM (VALUES (1)) t(x)"]) == 2


def test_edge_values_land_consistently(con):
    # values exactly at powers of 1.01 and their neighbours: whatever bin LN puts them in, the stored
    # min and max keep the bounds valid
    edges = [EDGE ** k for k in range(-5, 6)]
    xs = edges + [math.nextafter(e, 0) for e in edges] + [math.nextafter(e, math.inf) for e in edges]
    data = pd.DataFrame({"g": 0, "x": xs, "w": 1.0})
    check_inside(run_bounded(con, data, False, 0.01), data, False)


# --- what the bins keep: only the sums a query's measures read -------------------------------------

def _bins_select(sql: str) -> exp.Select:
    tree = sqlglot.parse_one(sql, read="duckdb")
    (bins,) = [c.this for c in tree.find_all(exp.CTE) if c.alias.endswith("_bins")]
    return bins


def test_gini_only_bins_take_no_log():
    # a Gini reads Σw, Σw·x, min and max per bin (docs/bounded.md, "Gini"): its bins GROUP BY keeps
    # those four, and the one LN per row is the bin key's (two branches: x > 0 and x < 0), never
    # inside an aggregate (no Σw·ln x, Σw·x·ln x)
    sql = uneven.compile("SELECT g, gini(x, w) FROM t GROUP BY g", method="bounded")
    bins = _bins_select(sql)
    assert sorted(e.alias for e in bins.expressions if e.alias.startswith("uv_")) == \
        ["uv_max", "uv_min", "uv_w", "uv_wx"]
    tree = sqlglot.parse_one(sql, read="duckdb")
    logs = list(tree.find_all(exp.Ln))
    assert len(logs) == 2
    assert all(ln.find_ancestor(exp.AggFunc) is None for ln in logs)
    assert all(ln.find_ancestor(exp.Alias).alias == "uv_bin" for ln in logs)
    # the same walk finds the log sums where a measure reads them (Theil: Σw·x·ln x)
    theil = sqlglot.parse_one(uneven.compile("SELECT g, theil(x, w) FROM t GROUP BY g", method="bounded"),
                              read="duckdb")
    assert any(ln.find_ancestor(exp.AggFunc) is not None for ln in theil.find_all(exp.Ln))


def _fixed_data() -> pd.DataFrame:
    # invented: three groups of lognormal values with real weights, one with negatives and zeros
    rng = np.random.default_rng(20261204)
    parts = []
    for g, n in enumerate((400, 150, 1)):
        x = rng.lognormal(2.0, 1.2, n)
        if g == 1:
            x[:20] = -x[:20]
            x[20:25] = 0.0
        parts.append(pd.DataFrame({"g": g, "x": x, "w": rng.uniform(0.2, 4.0, n)}))
    return pd.concat(parts, ignore_index=True)


def test_gini_interval_same_with_every_bin_column(con):
    # a Gini-only query (four bin columns) against the same Gini in a query whose other measures
    # make the bins keep every column (Σw·x², both log sums, the count, a power sum): the bins are
    # the same, so the interval is the same to rounding (1e-12)
    data = _fixed_data()
    rest = ", theil(x, w) AS t, mld(x, w) AS m, cv(x, w) AS c, ge(x, 3, w) AS e, gini_corrected(x, w) AS k"
    con.register("t", data)
    try:
        alone = con.execute(uneven.compile("SELECT g, gini(x, w) AS gi FROM t GROUP BY g ORDER BY g",
                                           method="bounded")).fetchdf()
        full_sql = uneven.compile(f"SELECT g, gini(x, w) AS gi{rest} FROM t GROUP BY g ORDER BY g", method="bounded")
        full = con.execute(full_sql).fetchdf()
    finally:
        con.unregister("t")
    kept = {e.alias for e in _bins_select(full_sql).expressions}
    assert {"uv_n", "uv_wx2", "uv_wlnx", "uv_wxlnx", "uv_pow_3"} <= kept
    for col in ("gi", "gi_lo", "gi_hi"):
        np.testing.assert_allclose(alone[col].to_numpy(float), full[col].to_numpy(float), rtol=1e-12, atol=1e-15)
    for g, sub in data.groupby("g"):  # and the reference inside (uneven.reference)
        exact = ref.gini(sub["x"].to_numpy(float), sub["w"].to_numpy(float))
        assert alone["gi_lo"][g] <= exact <= alone["gi_hi"][g]


def test_in_query_key_makes_the_stored_summary_bins(con):
    # the summary pass groups on one key (bins.bin_key: sign and index in one BIGINT); a stored
    # summary keeps the (uv_sign, uv_bin) pair. Both must make the same bins: the intervals from
    # the stored summary equal the query's to rounding (1e-12), at two resolutions
    data = _fixed_data()
    con.register("t", data)
    try:
        for r in (0.01, 0.3):
            q = con.execute(uneven.compile("SELECT g, gini(x, w) AS gi, top_share(x, 0.1, w) AS ts FROM t "
                                           "GROUP BY g ORDER BY g", method="bounded", resolution=r)).fetchdf()
            summary = uneven.summarize("t", "x", "w", by=["g"], resolution=r, con=con)
            con.register("s", summary)
            try:
                stored = uneven.from_summary("s", ["gini AS gi", "top_share(0.1) AS ts"], by=["g"], con=con)
            finally:
                con.unregister("s")
            stored = stored.sort_values("g").reset_index(drop=True)
            for col in ("gi", "gi_lo", "gi_hi", "ts", "ts_lo", "ts_hi"):
                np.testing.assert_allclose(q[col].to_numpy(float), stored[col].to_numpy(float), rtol=1e-12,
                                           atol=1e-15)
    finally:
        con.unregister("t")


def test_nan_or_infinite_value_stops_the_bounded_query():
    # the input policy (docs/input-policy.md): the same error as the exact method, naming the group,
    # before the bin key's LN or cast could fail on the value
    t = pd.DataFrame({"g": ["a", "a", "b"], "x": [1.0, 2.0, 3.0], "bad": [False, True, False]})  # noqa: F841
    for value in ("CAST('NaN' AS DOUBLE)", "CAST('Infinity' AS DOUBLE)", "-CAST('Infinity' AS DOUBLE)"):
        source = f"(SELECT g, CASE WHEN bad THEN {value} ELSE x END AS x FROM t) s"
        for method in ("bounded", "exact"):
            with pytest.raises(uneven.InputDataError, match=r"NaN or infinite value in the value argument x "
                                                            r"\(the group g=a\)"):
                uneven.query(f"SELECT g, gini(x) FROM {source} GROUP BY g", method=method)


def test_nan_or_infinite_value_stops_a_stored_summary():
    # summarize() reads the same checked value as the query's summary pass (docs/input-policy.md)
    t = pd.DataFrame({"g": ["a", "a", "b"], "x": [1.0, math.inf, 3.0], "w": [1.0, 2.0, 1.0]})  # noqa: F841
    with pytest.raises(uneven.InputDataError, match=r"NaN or infinite value in the value argument x \(the group g=a\)"):
        uneven.summarize("t", "x", "w", by=["g"])
    t2 = pd.DataFrame({"g": ["a", "b"], "x": [1.0, 3.0], "w": [1.0, -2.0]})  # noqa: F841
    with pytest.raises(uneven.InputDataError, match=r"negative weight in the weight argument w \(the group g=b\)"):
        uneven.summarize("t2", "x", "w", by=["g"])


def gini_bounds_two_sums(bins: pd.DataFrame) -> tuple[float, float]:
    """The Gini interval of one group's bins, in numpy, in the form of docs/bounded.md ("Gini") with
    two running sums: G_lo = Σ_b (T_b·C_{<b} − W_b·S_{<b}) / (W·T), G_hi = G_lo + Σ_b W_b²(c − m)(m − a)
    / ((c − a)·W·T) (bounds for grouped data from class means and limits, Gastwirth 1972, cited from
    memory). Independent of the compiler's form, which uses one running sum."""
    bins = bins.sort_values(["uv_min", "uv_max"])
    wb, tb = bins["uv_w"].to_numpy(float), bins["uv_wx"].to_numpy(float)
    a, c = bins["uv_min"].to_numpy(float), bins["uv_max"].to_numpy(float)
    cp, sp = np.cumsum(wb) - wb, np.cumsum(tb) - tb
    m = np.clip(tb / wb, a, c)
    den = wb.sum() * tb.sum()
    lo = float(np.sum(tb * cp - wb * sp)) / den
    spread = np.where(c > a, c - a, 1.0)
    within = float(np.sum(np.where(c > a, wb * wb * (c - m) * (m - a) / spread, 0.0))) / den
    return lo, lo + within


def test_gini_one_running_sum_equals_two(con):
    # the Gini's between-bin term is computed with one running sum, Σ_b T_b·(2·C_{<b} + W_b) − W·T,
    # equal in exact arithmetic to the proof's Σ_b (T_b·C_{<b} − W_b·S_{<b}): the interval equals the
    # two-sum form computed in numpy from the stored bins of the same data to 1e-12 (both widened by
    # the rounding allowance, 1e-11·(1 + |bound|)), at two resolutions
    data = _fixed_data()
    con.register("t", data)
    try:
        for r in (0.01, 0.3):
            q = con.execute(uneven.compile("SELECT g, gini(x, w) AS gi FROM t GROUP BY g ORDER BY g",
                                           method="bounded", resolution=r)).fetchdf()
            summary = uneven.summarize("t", "x", "w", by=["g"], resolution=r, con=con)
            for g, bins in summary.groupby("g"):
                lo, hi = gini_bounds_two_sums(bins)
                assert q["gi_lo"][g] == pytest.approx(lo - 1e-11 * (1 + abs(lo)), rel=1e-12, abs=1e-15)
                assert q["gi_hi"][g] == pytest.approx(hi + 1e-11 * (1 + abs(hi)), rel=1e-12, abs=1e-15)
                exact = ref.gini(data.loc[data["g"] == g, "x"].to_numpy(float),
                                 data.loc[data["g"] == g, "w"].to_numpy(float))
                assert lo <= exact <= hi and hi - lo < (0.05 if r == 0.3 else 1e-3)
    finally:
        con.unregister("t")


def test_gini_reads_one_window():
    # a Gini-only query runs one window over the bins (the running weight C_{<b}); Theil runs none
    def windows(sql: str) -> list[exp.Window]:
        return list(sqlglot.parse_one(sql, read="duckdb").find_all(exp.Window))
    gini = windows(uneven.compile("SELECT g, gini(x, w) FROM t GROUP BY g", method="bounded"))
    assert len(gini) == 1 and gini[0].this.this.name == "uv_w"
    assert windows(uneven.compile("SELECT g, theil(x, w) FROM t GROUP BY g", method="bounded")) == []
    # a Lorenz ordinate reads the running weight and the group's total weight
    assert len(windows(uneven.compile("SELECT g, lorenz(x, 0.3, w) FROM t GROUP BY g", method="bounded"))) == 2
