"""Tests of the invented demo data generators (uneven.demo.data)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from uneven.demo import data

ROWS = 20_000


def _sorted_gini(x: np.ndarray) -> float:
    """Unweighted Gini by the sorted-values identity (no pairwise differences).

    For x sorted ascending with ranks i = 1..n:  G = sum((2i - n - 1) * x_i) / (n * sum(x)).
    """
    x = np.sort(np.asarray(x, dtype=float))
    n = x.size
    i = np.arange(1, n + 1)
    return float(np.sum((2 * i - n - 1) * x) / (n * np.sum(x)))


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    path = tmp_path_factory.mktemp("survey") / "survey.parquet"
    out = data.write_survey(path, rows=ROWS, seed=7)
    assert out == path
    return pq.read_table(path)


def test_sorted_gini_identity_on_known_values():
    assert _sorted_gini(np.array([1.0, 1.0, 1.0])) == pytest.approx(0.0)
    # One person holds everything among n: G = (n - 1) / n.
    assert _sorted_gini(np.array([0.0, 0.0, 0.0, 5.0])) == pytest.approx(0.75)
    # Brute-force mean absolute difference definition on a small sample.
    x = np.array([3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0])
    mad = np.abs(x[:, None] - x[None, :]).sum() / (2 * x.size**2 * x.mean())
    assert _sorted_gini(x) == pytest.approx(mad)


def test_survey_schema_and_row_count(survey):
    assert survey.num_rows == ROWS
    assert survey.schema.equals(data.SURVEY_SCHEMA)
    assert [f.type for f in survey.schema] == [
        pa.int64(), pa.string(), pa.int32(), pa.int32(), pa.float64(), pa.float64(), pa.float64()]
    assert survey.column("household_id").to_numpy().tolist() == list(range(1, ROWS + 1))


def test_survey_values_are_plausible(survey):
    df = survey.to_pandas()
    assert df.notna().all().all()
    assert set(df["province"]) == set(data.PROVINCES)
    assert len(data.PROVINCES) == 8
    assert set(df["year"]) == {2022, 2023, 2024}
    assert (df["weight"] > 0).all()
    assert df["weight"].between(50, 2000).all()
    assert (df["gross_income"] >= 0).all()
    assert (df["disposable_income"] >= 0).all()
    assert (df["household_size"] >= 1).all()
    zero_share = (df["gross_income"] == 0).mean()
    assert 0.01 < zero_share < 0.03
    # Weights differ by province (sampling design).
    mean_w = df.groupby("province")["weight"].mean()
    assert mean_w.max() / mean_w.min() > 1.5


def test_disposable_less_unequal_than_gross_in_every_province(survey):
    df = survey.to_pandas()
    for province, part in df.groupby("province"):
        g_gross = _sorted_gini(part["gross_income"].to_numpy())
        g_disp = _sorted_gini(part["disposable_income"].to_numpy())
        assert 0.2 < g_disp < g_gross < 0.8, (province, g_gross, g_disp)
        assert g_gross - g_disp > 0.05, (province, g_gross, g_disp)


def test_survey_is_deterministic(tmp_path, survey):
    a = data.write_survey(tmp_path / "a.parquet", rows=ROWS, seed=7)
    b = data.write_survey(tmp_path / "b.parquet", rows=ROWS, seed=7)
    ta, tb = pq.read_table(a), pq.read_table(b)
    assert ta.equals(tb)
    assert ta.equals(survey)
    c = pq.read_table(data.write_survey(tmp_path / "c.parquet", rows=ROWS, seed=8))
    assert not c.equals(ta)


def test_survey_spans_chunks(tmp_path, monkeypatch):
    monkeypatch.setattr(data, "CHUNK_ROWS", 1_000)
    path = data.write_survey(tmp_path / "s.parquet", rows=2_500, seed=3, years=(2030,))
    meta = pq.ParquetFile(path).metadata
    assert meta.num_rows == 2_500
    assert meta.num_row_groups == 3
    t = pq.read_table(path)
    assert t.column("household_id").to_numpy().tolist() == list(range(1, 2_501))
    assert set(t.column("year").to_pylist()) == {2030}


def test_empty_survey(tmp_path):
    t = pq.read_table(data.write_survey(tmp_path / "e.parquet", rows=0))
    assert t.num_rows == 0
    assert t.schema.equals(data.SURVEY_SCHEMA)


def test_marketplace(tmp_path):
    a = pq.read_table(data.write_marketplace(tmp_path / "m1.parquet", rows=1_200, seed=5))
    b = pq.read_table(data.write_marketplace(tmp_path / "m2.parquet", rows=1_200, seed=5))
    assert a.equals(b)
    assert a.schema.equals(data.MARKETPLACE_SCHEMA)
    df = a.to_pandas()
    assert len(df) == 1_200
    assert df["seller_id"].nunique() == 100
    assert (df.groupby("seller_id")["category"].nunique() == 1).all()
    assert (df.groupby("seller_id")["month"].nunique() == 12).all()
    assert set(df["category"]) <= set(data.CATEGORIES)
    assert (df["revenue"] >= 0).all()
