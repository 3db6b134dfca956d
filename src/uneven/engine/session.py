"""One connection for one call: open it (or take the caller's), let the SQL read the data frames the
caller holds, and leave the connection as it was found afterwards.

``session`` yields a DuckDB connection when ``con`` is one (or None: a new in-memory connection,
closed at the end), else the engine adapter of ``con`` (engine/adapters). The frames registered for
the call are unregistered on the way out, whatever happened inside.
"""

from __future__ import annotations

import contextlib
import types
from collections.abc import Iterator

import duckdb

from uneven.engine.adapters import Adapter, adapt, is_duckdb
from uneven.engine.frames import register_caller_frames, register_frames_on
from uneven.engine.runner import connect
from uneven.errors import UnevenError


@contextlib.contextmanager
def session(con=None, sql: str = "", caller: types.FrameType | None = None, *, memory_limit: str | None = None,
            threads: int | None = None, temp_directory: str | None = None,
            progress: bool | None = None) -> Iterator[duckdb.DuckDBPyConnection | Adapter]:
    """The connection (DuckDB) or adapter (another engine) for one call. ``sql`` names the tables the
    call reads; data frames of those names held by ``caller`` (a frame of the calling code) are
    registered for it. ``memory_limit``, ``threads``, ``temp_directory`` and ``progress`` are DuckDB
    settings: given with another engine's connection they are an error."""
    settings = {"memory_limit": memory_limit, "threads": threads, "temp_directory": temp_directory,
                "progress": progress}
    if not is_duckdb(con):
        adapter = adapt(con)
        try:
            check_duckdb_settings(adapter.label, **settings)
        except UnevenError:
            adapter.close()  # an adapter made here (a SQLAlchemy pool's connection goes back)
            raise
        registered = register_frames_on(adapter, sql, caller)
        try:
            yield adapter
        finally:
            for name in registered:
                adapter.unregister(name)
        return
    connection = connect(con, memory_limit=memory_limit, threads=threads, temp_directory=temp_directory,
                         progress=bool(progress))
    registered = register_caller_frames(connection, sql, caller)
    try:
        yield connection
    finally:
        for name in registered:
            connection.unregister(name)
        if con is None:
            connection.close()


def check_duckdb_settings(engine: str, **settings) -> None:
    """Refuse DuckDB settings given with another engine's connection, naming that engine."""
    given = [name for name, value in settings.items() if value not in (None, False)]
    if given:
        raise UnevenError(f"{', '.join(given)} {'is a DuckDB setting' if len(given) == 1 else 'are DuckDB settings'}"
                          f"; it does not apply to {engine}: set {engine}'s own options on its connection instead")
