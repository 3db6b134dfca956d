"""engine/heap.py: glibc's malloc thresholds raised once while the stream plan runs, or left alone."""

from __future__ import annotations

import platform

import duckdb
import pytest

import uneven
from uneven.engine import heap

GLIBC = platform.system() == "Linux" and platform.libc_ver()[0] == "glibc"


def test_disabled_leaves_malloc_alone(monkeypatch):
    monkeypatch.setattr(heap, "_set", False)
    monkeypatch.setattr(heap, "ENABLED", False)
    assert heap.keep_batch_memory() is False
    assert heap._set is False


@pytest.mark.skipif(not GLIBC, reason="the thresholds are glibc's (other C libraries are left alone)")
def test_a_stream_raises_them_once(monkeypatch):
    monkeypatch.setattr(heap, "_set", False)
    calls = []
    real = heap.keep_batch_memory

    def counted():
        calls.append(heap._set)
        return real()
    monkeypatch.setattr("uneven.engine.stream.keep_batch_memory", counted)
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT i % 3 AS g, i * 1.5 + 1 AS x FROM range(30) r(i)")
    out = uneven.query("SELECT g, gini(x) AS gi FROM t GROUP BY g ORDER BY g", con, ordered="stream")
    # the Gini of an arithmetic sequence a + b·k, k = 0 … n−1: (n² − 1)·b / (3n·(2a + (n − 1)·b))
    # (a handbook closed form from Σ|x_i − x_j|; here a = 1 + 1.5·g, b = 4.5, n = 10)
    expect = [(100 - 1) * 4.5 / (30 * (2 * (1 + 1.5 * g) + 9 * 4.5)) for g in range(3)]
    assert out["gi"].tolist() == pytest.approx(expect, rel=1e-14)
    assert calls == [False] and heap._set is True  # raised by the stream, once per process
    assert heap.keep_batch_memory() is True
