"""Progress on stderr for long queries (on a terminal only) and a clean stop on Ctrl-C."""

from __future__ import annotations

import io
import os
import select
import signal
import subprocess
import sys
import time

import duckdb
import numpy as np
import pytest

from uneven.engine.progress import progress_line, run_watched

# a query that never ends by itself: 10^12 rows through a Gini
ENDLESS = ("SELECT gini(x) FROM (SELECT CAST(hash(a.range * 1000003 + b.range) % 1000 AS DOUBLE) AS x "
           "FROM range(1000000) a, range(1000000) b)")


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def _pairs_sql(n_a, n_b):
    return f"SELECT count(*) FROM range({n_a}) a, range({n_b}) b WHERE (a.range + b.range) % 7 = 0"


def _pairs_want(n_a, n_b):
    # exact count of pairs with (a + b) ≡ 0 (mod 7), from the residue counts (plain arithmetic)
    ra = np.bincount(np.arange(n_a) % 7, minlength=7)
    rb = np.bincount(np.arange(n_b) % 7, minlength=7)
    return int(sum(ra[r] * rb[(7 - r) % 7] for r in range(7)))


def test_progress_line_text():
    assert progress_line(42.4, 3.2) == "uneven: running the query [########............]  42% 3 s"
    assert progress_line(-1, 1.6, "computing") == "uneven: computing… 2 s"


def test_progress_is_drawn_on_a_terminal_and_cleared():
    con = duckdb.connect()
    term = _Terminal()
    got = run_watched(con, lambda: con.execute(_pairs_sql(20000, 4000)).fetchone()[0], stream=term, delay=0.0)
    assert got == _pairs_want(20000, 4000)
    text = term.getvalue()
    assert "uneven: running the query" in text
    assert text.endswith("\r\x1b[2K")  # the line is wiped at the end


def test_no_progress_when_not_a_terminal_and_errors_pass_through():
    con = duckdb.connect()
    plain = io.StringIO()
    assert run_watched(con, lambda: con.execute(_pairs_sql(2000, 500)).fetchone()[0], stream=plain,
                       delay=0.0) == _pairs_want(2000, 500)
    assert plain.getvalue() == ""
    with pytest.raises(ZeroDivisionError):
        run_watched(con, lambda: 1 / 0, stream=plain)


def _start_on_terminal(args, cwd):
    """Run the command with stderr on a pseudo-terminal and stdout on a pipe."""
    master, slave = os.openpty()
    proc = subprocess.Popen([sys.executable, "-m", "uneven.cli.main", *args], stdout=subprocess.PIPE,
                            stderr=slave, stdin=subprocess.DEVNULL, cwd=cwd)
    os.close(slave)
    return proc, master


def _read_until(master, needle: bytes, seconds: float) -> bytes:
    seen, end = b"", time.monotonic() + seconds
    while needle not in seen and time.monotonic() < end:
        ready, _, _ = select.select([master], [], [], 0.2)
        if ready:
            try:
                seen += os.read(master, 4096)
            except OSError:
                break
    return seen


def _interrupt(proc, master, needle: bytes) -> tuple[int, bytes, bytes]:
    try:
        seen = _read_until(master, needle, 60)
        assert needle in seen, seen
        proc.send_signal(signal.SIGINT)
        rc = proc.wait(60)
        seen += _read_until(master, b"\x00", 1)
        return rc, seen, proc.stdout.read()
    finally:
        if proc.poll() is None:
            proc.kill()
        os.close(master)


def test_query_shows_progress_then_ctrl_c_stops_it_cleanly(tmp_path):
    proc, master = _start_on_terminal(["query", ENDLESS], tmp_path)
    rc, err, out = _interrupt(proc, master, b"uneven: running the query")
    assert rc == 130
    assert b"interrupted" in err and b"Traceback" not in err
    assert out == b""  # the progress line never reaches stdout


def test_ctrl_c_during_a_report_leaves_no_file(tmp_path):
    con = duckdb.connect(str(tmp_path / "big.duckdb"))
    con.execute("CREATE VIEW big AS SELECT a.range % 5 AS g, CAST(hash(a.range * 1000003 + b.range) % 1000 AS DOUBLE) "
                "AS x FROM range(1000000) a, range(1000000) b")
    con.close()
    proc, master = _start_on_terminal(["report", "big", "--database", "big.duckdb", "--value", "x", "--by", "g",
                                       "--output", "r.html"], tmp_path)
    rc, err, _ = _interrupt(proc, master, b"uneven: computing the report")
    assert rc == 130 and b"Traceback" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["big.duckdb"]
