"""Generate the reproducible benchmark data for bench/run.py.

Writes to bench/data/ (git-ignored):

* ``g1000.parquet``: ``--rows`` rows (default 20,000,000) spread at random over 1000 groups.
  Columns ``grp INTEGER`` (0..999, rows in random order), ``x DOUBLE`` (lognormal, sigma 1,
  times a group-specific scale) and ``w DOUBLE`` (weights, uniform on [0.5, 3]).
* ``one.parquet``: ``--rows-one`` rows (default 100,000,000) in one group (``grp`` = 0), same
  columns and distributions.
* ``g100k.parquet``: like g1000 with 100,000 groups (``--rows`` rows: 200 per group at 20M).
* ``ties.parquet``: tie-heavy integer counts (e.g. items sold per stall of a fictional market):
  ``x BIGINT`` Poisson with a group-specific mean between about 2 and 45, 1000 groups, ``--rows``
  rows; at 20M rows about 1.4% of the (group, value) pairs are distinct.
* ``g10k.parquet``: like g1000 with 10,000 groups (out-of-core runs, ``bench/ooc.py``).
* ``curve_<rows>_<groups>.parquet``: cost-curve files (``bench/curves.py``), like g1000.

Data are generated with numpy from a fixed seed, one chunk of 1,000,000 rows at a time (one
Parquet row group per chunk), so memory stays small whatever the size. Each file records its
row count and seed in the Parquet key-value metadata; :func:`ensure` regenerates a file only
when those do not match the request.

Usage: python bench/gen_data.py [--rows N] [--rows-one M] [--skip-one] [--force]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

BENCH_DIR = Path(__file__).resolve().parent
DATA_DIR = BENCH_DIR / "data"
SEED = 20261201
CHUNK = 1_000_000
GROUPS = 1000
FORMAT_VERSION = "1"

SCHEMA = pa.schema([("grp", pa.int32()), ("x", pa.float64()), ("w", pa.float64())])

TIES_SCHEMA = pa.schema([("grp", pa.int32()), ("x", pa.int64()), ("w", pa.float64())])

_STREAM = {"g1000": 1, "one": 2, "g100k": 3, "ties": 4, "g10k": 5, "curve": 6}
GROUPS_OF = {"g1000": GROUPS, "one": 1, "g100k": 100_000, "ties": GROUPS, "g10k": 10_000}


def groups_of(kind: str) -> int:
    """Number of groups of a data kind; ``curve_<groups>`` names its own."""
    return int(kind.split("_")[1]) if kind.startswith("curve_") else GROUPS_OF[kind]


def _group_scales(seed: int, groups: int = GROUPS) -> np.ndarray:
    rng = np.random.default_rng([seed, 0])
    return np.exp(rng.uniform(-1.5, 1.5, groups)) * 1000.0


def _chunk(kind: str, seed: int, index: int, n: int, scales: np.ndarray) -> pa.Table:
    rng = np.random.default_rng([seed, _STREAM[kind.split("_")[0]], index])
    groups = len(scales)
    grp = (rng.integers(0, groups, size=n, dtype=np.int32) if groups > 1
           else np.zeros(n, dtype=np.int32))
    if kind == "ties":
        x = rng.poisson(scales[grp] / 66.0)  # means about 3.4 .. 68
        w = rng.uniform(0.5, 3.0, size=n)
        return pa.table({"grp": grp, "x": x.astype(np.int64), "w": w}, schema=TIES_SCHEMA)
    x = scales[grp] * np.exp(rng.standard_normal(n))
    w = rng.uniform(0.5, 3.0, size=n)
    return pa.table({"grp": grp, "x": x, "w": w}, schema=SCHEMA)


def _metadata(kind: str, rows: int, seed: int) -> dict[bytes, bytes]:
    return {b"uneven_bench_kind": kind.encode(), b"uneven_bench_rows": str(rows).encode(),
            b"uneven_bench_seed": str(seed).encode(),
            b"uneven_bench_version": FORMAT_VERSION.encode()}


def path_for(kind: str, data_dir: Path = DATA_DIR, rows: int | None = None) -> Path:
    if kind.startswith("curve_"):
        return Path(data_dir) / f"curve_{rows}_{groups_of(kind)}.parquet"
    return Path(data_dir) / f"{kind}.parquet"


def is_current(path: Path, kind: str, rows: int, seed: int = SEED) -> bool:
    """True if ``path`` exists and was written by :func:`write` with these parameters."""
    try:
        meta = pq.read_schema(path).metadata or {}
    except (OSError, pa.ArrowInvalid):
        return False
    return all(meta.get(k) == v for k, v in _metadata(kind, rows, seed).items())


def write(kind: str, rows: int, seed: int = SEED, data_dir: Path = DATA_DIR,
          verbose: bool = True) -> Path:
    """Write ``kind`` (g1000, one, g100k, ties, g10k or curve_<groups>) with ``rows`` rows; returns
    the file's path (``curve_<groups>`` is written as ``curve_<rows>_<groups>.parquet``)."""
    if kind.split("_")[0] not in _STREAM:
        raise ValueError(f"unknown data kind {kind!r}")
    path = path_for(kind, data_dir, rows)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".partial")
    scales = _group_scales(seed, groups_of(kind))
    started = time.perf_counter()
    schema = (TIES_SCHEMA if kind == "ties" else SCHEMA).with_metadata(_metadata(kind, rows, seed))
    with pq.ParquetWriter(tmp, schema, compression="snappy") as writer:
        for i, start in enumerate(range(0, rows, CHUNK)):
            n = min(CHUNK, rows - start)
            writer.write_table(_chunk(kind, seed, i, n, scales).replace_schema_metadata(
                schema.metadata), row_group_size=CHUNK)
    os.replace(tmp, path)
    if verbose:
        size = path.stat().st_size / 2**20
        print(f"wrote {path} ({rows:,} rows, {size:,.0f} MiB) in "
              f"{time.perf_counter() - started:.1f} s", file=sys.stderr)
    return path


def ensure(kind: str, rows: int, seed: int = SEED, data_dir: Path = DATA_DIR,
           force: bool = False, verbose: bool = True) -> Path:
    """Return the path of ``kind`` data with ``rows`` rows, generating it if needed."""
    path = path_for(kind, data_dir, rows)
    if not force and is_current(path, kind, rows, seed):
        if verbose:
            print(f"using existing {path} ({rows:,} rows)", file=sys.stderr)
        return path
    return write(kind, rows, seed, data_dir, verbose)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--rows", type=int, default=20_000_000, help="rows of g1000.parquet")
    p.add_argument("--rows-one", type=int, default=100_000_000, help="rows of one.parquet")
    p.add_argument("--skip-one", action="store_true", help="do not write one.parquet")
    p.add_argument("--kinds", default="g1000",
                   help="comma list of further kinds to write with --rows rows (g1000, g100k, ties, g10k)")
    p.add_argument("--seed", type=int, default=SEED)
    p.add_argument("--data-dir", type=Path, default=DATA_DIR)
    p.add_argument("--force", action="store_true", help="rewrite even if files are current")
    a = p.parse_args(argv)
    for kind in [k.strip() for k in a.kinds.split(",") if k.strip()]:
        ensure(kind, a.rows, a.seed, a.data_dir, a.force)
    if not a.skip_one:
        ensure("one", a.rows_one, a.seed, a.data_dir, a.force)
    return 0


if __name__ == "__main__":
    sys.exit(main())
