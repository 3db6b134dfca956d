"""Invented demo data for uneven examples, tests and tutorials.

Everything here is made up. The *Republic of Quembraland* is a fictional country with eight
fictional provinces; its household survey below is produced by a random generator with a fixed
seed and describes no real person, place or organisation. The same holds for the fictional online
marketplace of :func:`write_marketplace`.

Both writers stream their rows to one Parquet file in chunks (``pyarrow.parquet.ParquetWriter``),
so a few million rows need only a few hundred megabytes of memory at most. The output depends only
on ``seed`` and ``rows`` (and ``years`` for the survey): every chunk draws from its own generator
``numpy.random.default_rng([seed, stream, chunk_index])`` and the chunk size is a module constant.

Survey scenario, in short:

* Each province has a population share, a sampling design (some small provinces are
  over-sampled, hence smaller weights) and its own income location and dispersion
  (lognormal sigma between 0.62 and 0.98).
* Gross household income is lognormal, rising mildly with household size and across years;
  about 1% of households get a Pareto tail above the province's lognormal 99th percentile and
  about 2% have no gross income at all.
* Disposable income = gross income - progressive income tax (brackets in :data:`TAX_BRACKETS`)
  + a flat basic transfer per household + a supplement per additional household member.
  It is never negative and clearly less unequal than gross income.
"""

from __future__ import annotations

import datetime as _dt
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

__all__ = [
    "COUNTRY",
    "PROVINCES",
    "CATEGORIES",
    "TAX_BRACKETS",
    "BASIC_TRANSFER",
    "MEMBER_SUPPLEMENT",
    "SURVEY_SCHEMA",
    "MARKETPLACE_SCHEMA",
    "write_survey",
    "write_marketplace",
]

COUNTRY = "Republic of Quembraland"

#: Rows generated per chunk (and per Parquet row group). Part of the output's definition:
#: changing it changes the data produced for a given seed.
CHUNK_ROWS = 500_000

_SURVEY_STREAM = 1
_MARKET_STREAM = 2


@dataclass(frozen=True)
class _Province:
    name: str
    population_share: float   # share of the country's households
    sample_share: float       # share of the survey sample (the sampling design)
    mu: float                 # log-income location for a one-person household in the first year
    sigma: float              # log-income dispersion
    mean_extra_members: float  # Poisson mean of household members beyond the first


# Eight invented provinces of different sizes and income levels.
_PROVINCES: tuple[_Province, ...] = (
    _Province("Vexquormark", 0.24, 0.18, 10.45, 0.98, 1.0),
    _Province("Zumbrafell", 0.17, 0.15, 10.25, 0.85, 1.3),
    _Province("Plonquireach", 0.14, 0.13, 10.05, 0.78, 1.5),
    _Province("Quivvelbrook Vale", 0.12, 0.12, 10.20, 0.72, 1.2),
    _Province("Druzzlemoor", 0.11, 0.12, 9.80, 0.90, 1.8),
    _Province("Oxtarnvick", 0.09, 0.11, 9.90, 0.66, 1.6),
    _Province("Glomvizzholt", 0.08, 0.11, 9.65, 0.62, 2.0),
    _Province("Isle of Quazzelan", 0.05, 0.08, 9.95, 0.80, 1.4),
)

#: Names of the fictional provinces of Quembraland, largest first.
PROVINCES: list[str] = [p.name for p in _PROVINCES]

#: Progressive income tax on household gross income: (lower bound of bracket, marginal rate).
TAX_BRACKETS: tuple[tuple[float, float], ...] = (
    (0.0, 0.0),
    (12_000.0, 0.15),
    (35_000.0, 0.28),
    (80_000.0, 0.40),
    (200_000.0, 0.48),
)
#: Flat transfer every household receives per year.
BASIC_TRANSFER = 3_600.0
#: Yearly transfer per household member beyond the first.
MEMBER_SUPPLEMENT = 1_500.0

_TOP_SHARE = 0.01      # share of households drawn from the Pareto tail
_PARETO_ALPHA = 1.9    # tail index of that tail
_ZERO_SHARE = 0.02     # share of households without gross income
_YEAR_GROWTH = 0.025   # log-income growth per year
_SIZE_ELASTICITY = 0.18  # log-income rise per log household size
_Z99 = 2.3263478740408408  # standard normal 99th percentile

SURVEY_SCHEMA = pa.schema([
    ("household_id", pa.int64()),
    ("province", pa.string()),
    ("year", pa.int32()),
    ("household_size", pa.int32()),
    ("gross_income", pa.float64()),
    ("disposable_income", pa.float64()),
    ("weight", pa.float64()),
])

#: Invented product categories of the fictional marketplace, with the Pareto index of seller
#: sizes (a smaller index means a few sellers dominate the category).
_CATEGORIES: tuple[tuple[str, float], ...] = (
    ("Lantern Oils", 0.9),
    ("Clockwork Toys", 1.1),
    ("Moss Textiles", 1.4),
    ("Skyfruit Preserves", 1.7),
    ("Tinker Kits", 1.2),
    ("Glow Trinkets", 2.2),
)
CATEGORIES: list[str] = [c[0] for c in _CATEGORIES]

MARKETPLACE_SCHEMA = pa.schema([
    ("seller_id", pa.int64()),
    ("category", pa.string()),
    ("month", pa.date32()),
    ("revenue", pa.float64()),
])


def _income_tax(gross: np.ndarray) -> np.ndarray:
    """Tax due on ``gross`` under :data:`TAX_BRACKETS` (marginal rates per bracket)."""
    tax = np.zeros_like(gross)
    bounds = [b for b, _ in TAX_BRACKETS] + [np.inf]
    for (lower, rate), upper in zip(TAX_BRACKETS, bounds[1:]):
        if rate:
            tax += rate * np.clip(gross - lower, 0.0, upper - lower)
    return tax


def _survey_chunk(rng: np.random.Generator, first_id: int, n: int,
                  years: np.ndarray) -> pa.Table:
    prov_sample = np.array([p.sample_share for p in _PROVINCES])
    prov_sample = prov_sample / prov_sample.sum()
    prov_pop = np.array([p.population_share for p in _PROVINCES])
    prov_pop = prov_pop / prov_pop.sum()
    mu = np.array([p.mu for p in _PROVINCES])
    sigma = np.array([p.sigma for p in _PROVINCES])
    extra = np.array([p.mean_extra_members for p in _PROVINCES])

    prov = rng.choice(len(_PROVINCES), size=n, p=prov_sample)
    year_idx = rng.integers(0, len(years), size=n)
    size = 1 + np.minimum(rng.poisson(extra[prov]), 9)

    # Gross income: lognormal body, Pareto tail above the body's 99th percentile, some zeros.
    loc = mu[prov] + _YEAR_GROWTH * year_idx + _SIZE_ELASTICITY * np.log(size)
    sig = sigma[prov] * (1.0 + 0.01 * year_idx)
    gross = np.exp(loc + sig * rng.standard_normal(n))
    top = rng.random(n) < _TOP_SHARE
    threshold = np.exp(loc + _Z99 * sig)
    tail = threshold * (1.0 - rng.random(n)) ** (-1.0 / _PARETO_ALPHA)
    gross = np.where(top, tail, gross)
    zero = rng.random(n) < _ZERO_SHARE
    gross = np.where(zero, 0.0, np.round(gross, 2))

    transfers = BASIC_TRANSFER + MEMBER_SUPPLEMENT * (size - 1)
    disposable = np.round(np.maximum(gross - _income_tax(gross) + transfers, 0.0), 2)

    # Weights: population share over sample share times a country-wide scale, with
    # within-province variation (non-response adjustment); richer households answer less often.
    base = 400.0 * prov_pop[prov] / prov_sample[prov]
    weight = base * np.exp(0.35 * rng.standard_normal(n)) * np.where(top, 1.3, 1.0)
    weight = np.round(np.clip(weight, 50.0, 2000.0), 3)

    names = np.array(PROVINCES, dtype=object)
    return pa.table({
        "household_id": pa.array(np.arange(first_id, first_id + n, dtype=np.int64)),
        "province": pa.array(names[prov], type=pa.string()),
        "year": pa.array(years[year_idx].astype(np.int32)),
        "household_size": pa.array(size.astype(np.int32)),
        "gross_income": pa.array(gross),
        "disposable_income": pa.array(disposable),
        "weight": pa.array(weight),
    }, schema=SURVEY_SCHEMA)


def write_survey(path: str | os.PathLike, rows: int = 2_000_000, seed: int = 20261201,
                 years: tuple[int, ...] = (2022, 2023, 2024)) -> Path:
    """Write the invented Quembraland household survey to one Parquet file at ``path``.

    Columns: ``household_id`` (1..rows), ``province``, ``year``, ``household_size``,
    ``gross_income``, ``disposable_income`` and ``weight`` (survey weight, 50-2000).
    The data values depend only on ``rows``, ``seed`` and ``years``. Returns the path.
    """
    if rows < 0:
        raise ValueError("rows must be >= 0")
    if not years:
        raise ValueError("years must not be empty")
    year_arr = np.asarray(sorted(years), dtype=np.int64)
    return _write_chunks(path, rows, SURVEY_SCHEMA,
                         lambda i, start, n: _survey_chunk(
                             np.random.default_rng([seed, _SURVEY_STREAM, i]), start + 1, n,
                             year_arr),
                         chunk_rows=CHUNK_ROWS)


def _market_chunk(rng: np.random.Generator, first_row: int, n: int, months: list) -> pa.Table:
    # Rows are seller-months: seller k has rows 12k .. 12k+11, one per month of the year.
    rows = np.arange(first_row, first_row + n)
    seller = rows // 12
    month = rows % 12
    first_seller = int(seller[0]) if n else 0
    n_sellers = int(seller[-1]) - first_seller + 1 if n else 0
    cat = rng.integers(0, len(_CATEGORIES), size=n_sellers)
    alpha = np.array([a for _, a in _CATEGORIES])[cat]
    scale = 2_000.0 * (1.0 - rng.random(n_sellers)) ** (-1.0 / alpha)  # Pareto seller sizes
    local = seller - first_seller
    season = 1.0 + 0.25 * np.sin(2 * np.pi * (month - 2) / 12.0)
    revenue = scale[local] * season * np.exp(0.3 * rng.standard_normal(n))
    inactive = rng.random(n) < 0.05  # some sellers sell nothing in a month
    revenue = np.where(inactive, 0.0, np.round(revenue, 2))
    names = np.array(CATEGORIES, dtype=object)
    return pa.table({
        "seller_id": pa.array(seller.astype(np.int64) + 1),
        "category": pa.array(names[cat[local]], type=pa.string()),
        "month": pa.array(np.asarray(months, dtype="datetime64[D]")[month], type=pa.date32()),
        "revenue": pa.array(revenue),
    }, schema=MARKETPLACE_SCHEMA)


def write_marketplace(path: str | os.PathLike, rows: int = 36_000, seed: int = 20261202,
                      year: int = 2024) -> Path:
    """Write an invented marketplace's monthly seller revenues (for HHI / CRk examples).

    One row per seller and month of ``year``: ``seller_id``, ``category``, ``month`` (first day
    of the month) and ``revenue`` (heavy-tailed; some months are zero). Returns the path.
    """
    if rows < 0:
        raise ValueError("rows must be >= 0")
    months = [_dt.date(year, m, 1) for m in range(1, 13)]
    chunk = (CHUNK_ROWS // 12) * 12  # keep each seller's twelve months in one chunk
    return _write_chunks(path, rows, MARKETPLACE_SCHEMA,
                         lambda i, start, n: _market_chunk(
                             np.random.default_rng([seed, _MARKET_STREAM, i]), start, n, months),
                         chunk_rows=chunk)


def _write_chunks(path, rows: int, schema: pa.Schema, make_chunk, chunk_rows: int) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".partial")
    with pq.ParquetWriter(tmp, schema, compression="zstd") as writer:
        if rows == 0:
            writer.write_table(schema.empty_table())
        for i, start in enumerate(range(0, rows, chunk_rows)):
            n = min(chunk_rows, rows - start)
            writer.write_table(make_chunk(i, start, n), row_group_size=chunk_rows)
    os.replace(tmp, path)
    return path
