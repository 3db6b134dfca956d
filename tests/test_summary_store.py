"""Stored summaries: merging summaries of disjoint parts equals the summary of the union; measures
from stored, merged and rolled-up summaries contain the exact value (numpy reference)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as ref


@pytest.fixture(scope="module")
def sales():
    # invented marketplace: seller revenue by category and month (fixed seed)
    rng = np.random.default_rng(20261201)
    n = 6000
    df = pd.DataFrame({"category": rng.integers(0, 3, n), "month": rng.integers(1, 7, n),
                       "revenue": rng.lognormal(6.0, 1.2, n), "w": rng.uniform(0.5, 2.0, n)})
    df.loc[rng.random(n) < 0.02, "revenue"] = 0.0
    return df


def _key(df):
    return df.sort_values(["category", "month", "uv_sign", "uv_bin"]).reset_index(drop=True)


def test_merge_of_disjoint_parts_is_the_summary_of_the_union(sales, tmp_path):
    first, second = sales[sales.month <= 3], sales[sales.month > 3]  # noqa: F841 (read by summarize)
    parts = []
    for name, _frame in (("first", first), ("second", second)):
        path = tmp_path / f"{name}.parquet"
        uneven.summarize(name, "revenue", "w", by=["category"], parquet=path, powers=[2])
        parts.append(str(path))
    merged = uneven.merge_summaries(parts)
    whole = uneven.summarize("sales", "revenue", "w", by=["category"], powers=[2])
    a = merged.sort_values(["category", "uv_sign", "uv_bin"]).reset_index(drop=True)
    b = whole.sort_values(["category", "uv_sign", "uv_bin"]).reset_index(drop=True)
    assert len(a) == len(b)
    for col in ("category", "uv_sign", "uv_bin", "uv_n", "uv_min", "uv_max"):
        assert (a[col].to_numpy() == b[col].to_numpy()).all(), col  # exactly equal
    for col in ("uv_w", "uv_wx", "uv_wx2", "uv_wlnx", "uv_wxlnx", "uv_pow_2"):
        np.testing.assert_allclose(a[col], b[col], rtol=1e-12, atol=0, err_msg=col)
    # counts against the data themselves (outside check): rows per category
    counts = a.groupby("category")["uv_n"].sum()
    assert counts.to_dict() == sales.groupby("category").size().to_dict()


def test_measures_from_rolled_up_summary_contain_exact(sales, tmp_path):
    path = tmp_path / "s.parquet"
    uneven.summarize("sales", "revenue", "w", by=["category", "month"], parquet=path, powers=[2, 0.5])
    wanted = ["gini", "top_share(0.1) AS top10", "quantile_w(0.5) AS med", "ge(2)", "ge(3)", "atkinson(0.5)",
              "theil", "palma"]
    refs = {"gini": lambda x, w: ref.gini(x, w), "top10": lambda x, w: ref.top_share(x, 0.1, w),
            "med": lambda x, w: ref.quantile_w(x, 0.5, w), "ge(2)": lambda x, w: ref.ge(x, 2, w),
            "ge(3)": lambda x, w: ref.ge(x, 3, w), "atkinson(0.5)": lambda x, w: ref.atkinson(x, 0.5, w),
            "theil": lambda x, w: ref.theil(x, w), "palma": lambda x, w: ref.palma(x, w)}
    by_cat = uneven.from_summary(str(path), wanted, by=["category"])
    for _, row in by_cat.iterrows():
        sub = sales[sales.category == row["category"]]
        for label, f in refs.items():
            exact = f(sub.revenue.to_numpy(), sub.w.to_numpy())
            assert row[f"{label}_lo"] <= exact <= row[f"{label}_hi"], (label, row["category"])
    everything = uneven.from_summary(str(path), wanted, by=[])
    for label, f in refs.items():
        exact = f(sales.revenue.to_numpy(), sales.w.to_numpy())
        assert everything[f"{label}_lo"][0] <= exact <= everything[f"{label}_hi"][0], label
    # ge(3) was not stored: bounded from the bins, not exact
    assert everything["ge(3)_hi"][0] > everything["ge(3)_lo"][0]


def test_overlapping_bins_are_joined(sales):
    # bins of one resolution where the same value was put in neighbouring bins (as engines whose LN
    # rounds differently at an edge do): the ranges overlap, are joined, and the bounds still hold
    s = uneven.summarize("sales", "revenue", "w", by=["category"])
    shifted = s.copy()
    shifted["uv_bin"] = shifted["uv_bin"] + (shifted.index % 2)  # scramble the index: bins collide
    out = uneven.from_summary("shifted", ["gini", "quantile_w(0.9) AS q9"], by=[])
    x, w = sales.revenue.to_numpy(), sales.w.to_numpy()
    assert out["gini_lo"][0] <= ref.gini(x, w) <= out["gini_hi"][0]
    assert out["q9_lo"][0] <= ref.quantile_w(x, 0.9, w) <= out["q9_hi"][0]


def test_summary_errors(sales, tmp_path):
    a, b = tmp_path / "a.parquet", tmp_path / "b.parquet"
    uneven.summarize("sales", "revenue", by=["category"], parquet=a)
    uneven.summarize("sales", "revenue", by=["category"], parquet=b, resolution=0.02)
    with pytest.raises(uneven.UnevenError, match="different resolutions"):
        uneven.from_summary([str(a), str(b)], ["gini"])
    with pytest.raises(uneven.UnevenError, match="exists"):
        uneven.summarize("sales", "revenue", by=["category"], parquet=a)
    with pytest.raises(uneven.UnevenError, match="not a key"):
        uneven.from_summary(str(a), ["gini"], by=["month"])
    with pytest.raises(uneven.UnevenError, match="cannot be computed from a summary"):
        uneven.from_summary(str(a), ["hhi"])
    with pytest.raises(uneven.UnevenError, match="not an uneven summary"):
        uneven.from_summary("sales", ["gini"])


def test_summarize_for_another_dialect_returns_its_sql():
    sql = uneven.summarize("t", "x", "w", by=["g"], dialect="postgres")
    assert isinstance(sql, str) and '"uv_bin"' in sql and "GROUP BY" in sql
    # PostgreSQL has no error(): the negative-weight stop is a failing cast there (dialects/postgres.py)
    assert "ERROR(" not in sql.upper() and "uneven: negative weight" in sql
    with pytest.raises(uneven.UnevenError, match="dialect"):
        uneven.summarize("t", "x", dialect="postgres", parquet="s.parquet")
    with pytest.raises(uneven.UnevenError, match="not supported"):
        uneven.summarize("t", "x", dialect="oracle")
