import os

import numpy as np
import pandas as pd
import pytest

from engines import ENGINES, engine_or_skip, shutdown_engines

# The emission check (src/uneven/compiler/emit.py) runs explicitly on every golden fixture, every
# fuzzed shape, the installed macros and the emission tests (tests/roundtrip.py). Set
# UNEVEN_CHECK_EMISSION=1 to run it on every compile of the whole suite as well (about twice the
# compile time): a lost grouping then fails whichever test compiled it.
os.environ.setdefault("UNEVEN_CHECK_EMISSION", "0")


@pytest.fixture(scope="session", autouse=True)
def _stop_engines_at_end():
    """Servers and sessions start once per run, when a test first needs them, and stop here."""
    yield
    shutdown_engines()


@pytest.fixture(params=sorted(ENGINES), scope="module")
def engine(request):
    eng = engine_or_skip(request.param)
    yield eng
    eng.close()


def make_groups(seed: int = 7, n_groups: int = 4, rows: int = 60) -> pd.DataFrame:
    """Invented test data: groups with ties, zeros, NULL values and weights, plus a NULL group key."""
    rng = np.random.default_rng(seed)
    frames = []
    for g in range(n_groups):
        n = rows + 7 * g
        x = np.round(rng.lognormal(3 + 0.2 * g, 0.8, n), 1)
        x[rng.random(n) < 0.15] = np.round(rng.choice(x[:5]), 1)  # ties
        x[:2] = [0.0, 0.0] if g == 1 else x[:2]  # zeros in one group
        w = rng.integers(1, 5, n).astype(float)
        w[rng.random(n) < 0.05] = 0.0  # zero weights change nothing
        e = rng.integers(0, 6, n)
        key = None if g == n_groups - 1 else f"g{g}"
        frames.append(pd.DataFrame({"grp": key, "x": x, "w": w, "e": e}))
    df = pd.concat(frames, ignore_index=True)
    # NULL values and NULL weights: those rows are skipped
    df.loc[3, "x"] = np.nan
    df.loc[11, "w"] = np.nan
    df["x"] = df["x"].astype("Float64")
    df.loc[3, "x"] = pd.NA
    df["w"] = df["w"].astype("Float64")
    df.loc[11, "w"] = pd.NA
    return df


@pytest.fixture(params=[(3, True), (None, False)], ids=["batch3-reader", "whole"])
def batch(monkeypatch, request):
    """The stream plan's two batch settings (tests/test_stream*.py): batches of 3 rows read ahead on the
    reader thread (every group, tie run and cut crosses a batch boundary somewhere), and whole batches
    read in the caller's thread. Returns the batch's rows (None: whole)."""
    import uneven.engine.stream as stream_engine  # noqa: PLC0415
    rows, prefetch = request.param
    if rows:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", rows)
    monkeypatch.setattr(stream_engine, "PREFETCH", prefetch)
    return rows
