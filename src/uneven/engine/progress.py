"""A progress line on stderr for queries that run longer than about a second, and a clean stop on
Ctrl-C.

The work (one or more queries on one connection) runs in a worker thread; the calling thread waits
for it, so Ctrl-C reaches Python at once. While waiting, it reads ``con.query_progress()`` (the
percentage DuckDB estimates for the running query; -1 while it has none; it needs
``enable_progress_bar`` on, and ``enable_progress_bar_print`` off keeps DuckDB's own bar from
printing). Nothing is drawn unless the stream is a terminal, so piped output stays clean. On
Ctrl-C, ``con.interrupt()`` stops the running query (and any query the worker starts after it) and
``KeyboardInterrupt`` is raised once the worker has finished.
"""

from __future__ import annotations

import sys
import threading
import time
from collections.abc import Callable
from typing import TypeVar

import duckdb

T = TypeVar("T")

DELAY = 1.0      # seconds before a line is drawn
INTERVAL = 0.1   # seconds between reads of the progress


def wants_progress(stream=None) -> bool:
    stream = sys.stderr if stream is None else stream
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def enable_tracking(con: duckdb.DuckDBPyConnection) -> bool:
    """Let DuckDB track progress without printing its own bar; False where the settings are refused
    (and for other engines, engine/adapters, which draw no progress line)."""
    if not isinstance(con, duckdb.DuckDBPyConnection):
        return False
    try:
        con.execute("SET enable_progress_bar_print = false")
        con.execute("SET enable_progress_bar = true")
        return True
    except duckdb.Error:
        return False


def progress_line(percent: float, seconds: float, label: str = "running the query") -> str:
    if percent is None or percent < 0:
        return f"uneven: {label}… {seconds:.0f} s"
    filled = int(round(min(percent, 100.0) / 5))
    return f"uneven: {label} [{'#' * filled}{'.' * (20 - filled)}] {percent:3.0f}% {seconds:.0f} s"


class _Line:
    def __init__(self, stream):
        self.stream, self.drawn = stream, False

    def draw(self, text: str) -> None:
        try:
            self.stream.write("\r\x1b[2K" + text)
            self.stream.flush()
            self.drawn = True
        except (OSError, ValueError):
            pass

    def clear(self) -> None:
        if self.drawn:
            self.draw("")
            self.drawn = False


def run_watched(con: duckdb.DuckDBPyConnection, work: Callable[[], T], *, show: bool | None = None,
                stream=None, label: str = "running the query", delay: float = DELAY) -> T:
    """Run ``work()`` (queries on ``con``) in a worker thread; draw progress on ``stream`` (stderr)
    when it is a terminal and the work lasts longer than ``delay``; stop cleanly on Ctrl-C."""
    stream = sys.stderr if stream is None else stream
    show = wants_progress(stream) if show is None else show
    if show:  # DuckDB reports progress; other engines (engine/adapters) run without a line
        show = isinstance(con, duckdb.DuckDBPyConnection) and enable_tracking(con)
    outcome: dict = {}
    done = threading.Event()  # waited on instead of join(): a join cut by Ctrl-C can mark a live
    #                           thread as stopped (CPython 3.11, threading._wait_for_tstate_lock)

    def target():
        try:
            outcome["value"] = work()
        except BaseException as e:  # handed to the calling thread
            outcome["error"] = e
        finally:
            done.set()

    worker = threading.Thread(target=target, name="uneven-query", daemon=True)
    line = _Line(stream)
    start = time.monotonic()
    worker.start()
    try:
        while not done.wait(INTERVAL):
            elapsed = time.monotonic() - start
            if show and elapsed >= delay:
                line.draw(progress_line(_progress(con), elapsed, label))
    except KeyboardInterrupt:
        _stop(con, done)
        line.clear()
        raise
    line.clear()
    if "error" in outcome:
        raise outcome["error"]
    return outcome["value"]


def _progress(con) -> float:
    try:
        return float(con.query_progress())
    except (duckdb.Error, TypeError, ValueError):
        return -1.0


def _stop(con, done: threading.Event) -> None:
    """Interrupt until the worker ends: a worker between two queries starts the next one, which the
    next interrupt stops."""
    while not done.is_set():
        try:
            con.interrupt()  # DuckDB's, or an engine adapter's (cancel on PostgreSQL, Spark, SQLite)
        except Exception:  # noqa: BLE001  the interrupt is a request; the worker's outcome decides
            pass
        done.wait(0.05)
