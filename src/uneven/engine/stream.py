"""Run the streamed ordered passes of a compiled query on DuckDB, then the query itself.

For each job (compiler/passes/stream.StreamJob): the group totals first when a measure reads a cut
(one hash aggregate, groups in the rows' order), then the sorted rows drained as Arrow batches
(``con.sql(q).to_arrow_reader(rows)``: no extra copy, unlike ``con.execute``) into the numpy
state of engine/streamsums.py, the kernels applied per group, and the results registered on the
connection under the job's ``_uv_str_N`` name for the compiled query to join; unregistered at the
end, whatever happened. Errors of the input policy raised by DuckDB while the rows stream come back
as the same ``UnevenError``s as from the window plan. A job of the direct form (the final SELECT reads
its table alone) also brings the rows its kernels do not count (NULL value, zero weight): ``KeptGroups``
drops them and keeps the groups none of whose rows counts, with NULL results.
"""

from __future__ import annotations

import contextlib
from collections.abc import Generator, Iterator
from dataclasses import replace

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from uneven.compiler import compile_sql
from uneven.compiler.context import CompileOptions
from uneven.compiler.passes.stream import StreamJob
from uneven.compiler.pipeline import compile_with_context
from uneven.engine.columns import DuckDBSchema
from uneven.engine.heap import keep_batch_memory
from uneven.engine.prefetch import prefetched
from uneven.engine.runner import execute_df, translate_error
from uneven.engine.streamranked import RankedState
from uneven.engine.streamsums import GroupValues, StreamState, key_changes, same_keys
from uneven.errors import ExecutionError


class StreamMemoryError(ExecutionError):
    """The sorted rows did not stream within DuckDB's memory limit (query() with ordered="auto" then
    runs the window plan, which spills its sort inside the window operator)."""


# rows per Arrow batch: large enough that numpy's per-batch overhead vanishes (a few dozen numpy
# calls per batch), small enough that a batch of keys, x and w stays a few MB of the memory limit
BATCH_ROWS = 1 << 16
# read the batches ahead on a thread of their own while numpy reduces the last ones (engine/prefetch.py):
# off. It measured 0.93-0.94x the serial loop on an idle machine at 20M rows x 1000 groups while every
# batch faulted its numpy temporaries in; since the heap keeps them (engine/heap.py) the numpy side is
# small and the thread's hand-over costs more than it overlaps: 1.05x and 1.04x the serial loop there,
# 1.10x and 0.88x over 1M groups of 6 rows (two idle runs; bench/README.md, "fourth round"; DuckDB
# holds the GIL for about 60% of a batch's fetch). bench/stream.py's stream_p case measures both
PREFETCH = False


# stream the rows with the input checks in numpy (compiler/passes/stream_checks.py) where the job has
# that form; a batch with a row the checks may refuse sends the job back to the checked queries
NUMPY_CHECKS = True


class _Suspect(Exception):
    """A streamed batch holds a NaN or infinite value, or a negative, NaN or infinite weight."""


def suspect(batch: pa.RecordBatch, weighted: bool) -> bool:
    """Whether a row of ``batch`` may be one the input policy refuses (NULLs are no such row)."""
    values = [n for n in batch.schema.names if n == "_uv_x" or (n[:5] == "_uv_v" and n[5:].isdigit())]  # (ranked)
    for name in values + ["_uv_w"] if weighted else values:
        column = batch.column(name)
        v = (column.drop_null() if column.null_count else column).to_numpy(zero_copy_only=False)
        if len(v) == 0:
            continue
        low, high = v.min(), v.max()  # NaN anywhere makes both NaN
        if not (np.isfinite(low) and np.isfinite(high)) or (name == "_uv_w" and low < 0):
            return True
    return False


def run_job(con: duckdb.DuckDBPyConnection, job: StreamJob, batch_rows: int | None = None) -> pa.Table:
    """The job's result table: its key columns and one DOUBLE column per call (NULL where undefined)."""
    if NUMPY_CHECKS and job.fast_rows_sql:
        try:
            return _run_job(con, job, batch_rows, job.fast_rows_sql, job.fast_totals_sql, checked=False)
        except _Suspect:  # the checked queries decide: DuckDB's error names the group, as on the window plan
            pass
    return _run_job(con, job, batch_rows, job.rows_sql, job.totals_sql, checked=True)


def _run_job(con: duckdb.DuckDBPyConnection, job: StreamJob, batch_rows: int | None, rows_sql: str,
             totals_sql: str, checked: bool) -> pa.Table:
    batch_rows = batch_rows or BATCH_ROWS
    keep_batch_memory()  # (engine/heap.py: a batch's numpy temporaries reused, not faulted in again)
    state: StreamState | RankedState = (RankedState(job.ranked, job.weighted) if job.ranked
                                        else StreamState(job.needs, job.weighted))
    kept = KeptGroups(job.keys, job.weighted) if job.keeps_groups else None
    totals_keys = None
    con.abort()  # a result the caller left unfinished would refuse con.sql (con.execute drops it too)
    # an ordered result streamed to Arrow keeps its batches within memory_limit only without
    # insertion-order preservation (the ORDER BY still orders it: checked per batch below)
    found = con.execute("SELECT current_setting('preserve_insertion_order')").fetchone()
    preserve = bool(found[0]) if found else True
    con.execute("SET preserve_insertion_order = false")
    try:
        if totals_sql:
            totals = con.sql(totals_sql).arrow()
            totals = totals.read_all() if isinstance(totals, pa.RecordBatchReader) else totals
            state.totals, state.totals_t, state.totals_n = (  # (T and n only for a user's kernel)
                totals.column(name).to_numpy(zero_copy_only=False).astype(np.float64)
                if name in totals.column_names else None for name in ("_uv_wt", "_uv_tt", "_uv_n"))
            totals_keys = totals.select(job.keys)
        reader = con.sql(rows_sql).to_arrow_reader(batch_rows)
        schema = reader.schema
        try:  # an overflowing sum is allowed: such a group takes the scaled form, or is NULL
            with np.errstate(over="ignore", invalid="ignore"), \
                    contextlib.closing(prefetched(reader) if PREFETCH else _serial(reader)) as batches:
                for batch in batches:
                    if not checked and suspect(batch, job.weighted):
                        raise _Suspect
                    state.feed(batch if kept is None else kept.take(batch), job.keys)
        finally:  # (the reader thread is joined first: closing(prefetched) returns only then)
            reader.close()  # an open result refuses every later call on the connection
    except (duckdb.Error, pa.ArrowException, OSError) as e:  # DuckDB's errors may surface through the Arrow reader
        error = translate_error(e)
        if "Out of Memory" in str(e):
            raise StreamMemoryError(str(error)) from None
        raise error from None
    finally:
        con.execute(f"SET preserve_insertion_order = {'true' if preserve else 'false'}")
    if state.unsorted:
        raise ExecutionError("the streamed ordered pass received rows out of order (values not sorted within "
                             "a group, or a group split in two); run with ordered='window'")
    values, m = state.finish()
    groups = state.started
    if job.keys:
        keys = (pa.Table.from_batches(state.key_parts) if state.key_parts
                else pa.Table.from_batches([], schema=pa.schema([schema.field(k) for k in job.keys])))
        if totals_keys is not None and not same_keys(keys, totals_keys.cast(keys.schema)):
            raise ExecutionError("the streamed ordered pass found its groups in another order than the group "
                                 "totals (an engine sorting keys inconsistently); run with ordered='window'")
        empty = kept.finish() if kept is not None else []
        if empty:  # the groups none of whose rows counts: NULL results (appended after the others)
            keys = pa.concat_tables([keys] + [pa.Table.from_batches([e]).cast(keys.schema) for e in empty])
        if not _increasing(keys) and _distinct_rows(keys) != keys.num_rows:
            raise ExecutionError("the streamed ordered pass received a group in two parts (rows not sorted by "
                                 "the group keys); run with ordered='window'")
        columns = {name: keys.column(name) for name in job.keys}
    else:  # one group, the whole input: one row, of NULLs when it has no rows
        columns = {}
    acc = GroupValues(values, m, state.totals)
    nulls = keys.num_rows - groups if job.keys else 0
    for column, kernel, params in job.columns:
        if groups:
            result = np.asarray(kernel(acc, params), dtype=np.float64)
            if result.ndim == 2:  # lorenz_curve: a list of (p, L(p)) per group, NULL where T ≤ 0
                columns[column] = curve_column(result)
            else:
                result = np.broadcast_to(result, (groups,))
                columns[column] = pa.array(result, type=pa.float64(), from_pandas=True)  # NaN → NULL
            if nulls:
                columns[column] = pa.concat_arrays([columns[column], pa.nulls(nulls, columns[column].type)])
        else:
            columns[column] = pa.nulls(nulls if job.keys else 1, CURVE_TYPE if getattr(kernel, "curve", False)
                                       else pa.float64())
    for name in job.kept_totals:  # sums of the totals query, one per group in the stream's order (stream_line.py)
        columns[name] = totals.column(name)
    return pa.table(columns)


CURVE_TYPE = pa.list_(pa.struct([("p", pa.float64()), ("lorenz", pa.float64())]))  # the window plan's type


def curve_column(values: np.ndarray) -> pa.Array:
    """(groups, k+1) ordinates as the window plan's list of structs {p: j/k, lorenz: L(j/k)} per group;
    NULL for a row of NaN (a group whose total is ≤ 0)."""
    groups, points = values.shape
    k = points - 1
    p = np.tile(np.arange(points) / k, groups)
    structs = pa.StructArray.from_arrays([pa.array(p), pa.array(values.ravel())], names=["p", "lorenz"])
    offsets = pa.array(np.arange(groups + 1, dtype=np.int32) * points)
    defined = ~np.isnan(values).all(axis=1)
    return pa.ListArray.from_arrays(offsets, structs, type=CURVE_TYPE, mask=pa.array(~defined))


@contextlib.contextmanager
def streamed(con: duckdb.DuckDBPyConnection, jobs: list[StreamJob], batch_rows: int | None = None) -> Iterator[None]:
    """Run every job and register its results for the compiled query; unregistered on the way out."""
    registered = []
    try:
        for job in jobs:
            table = run_job(con, job, batch_rows)
            con.register(job.table, table)
            registered.append(job.table)
        yield
    finally:
        for name in registered:
            con.unregister(name)


class KeptGroups:
    """The rows of a direct job's batches that the kernels count (value not NULL, weight > 0), and the
    groups none of whose rows counts (kept, so the result table has every group of the user's WHERE).
    A group may span batches: the open group's key row and whether it counted a row carry over."""

    def __init__(self, keys: list[str], weighted: bool):
        self.keys, self.weighted = keys, weighted
        self.last: pa.RecordBatch | None = None  # the key row of the last row seen (the open group's)
        self.counted = False  # whether the open group has a counted row
        self.empty: list[pa.RecordBatch] = []  # key rows of the groups without a counted row

    def take(self, batch: pa.RecordBatch) -> pa.RecordBatch:
        n = batch.num_rows
        if n == 0:
            return batch
        keys = batch.select(self.keys)
        x = batch.column("_uv_x")
        valid = np.ones(n, dtype=bool) if x.null_count == 0 else x.is_valid().to_numpy(zero_copy_only=False)
        if self.weighted:
            w = batch.column("_uv_w").to_numpy(zero_copy_only=False)
            with np.errstate(invalid="ignore"):
                valid &= w > 0.0  # (NULL is NaN here: not counted)
        if valid.all() and (self.counted or self.last is None):  # the common batch: nothing to keep
            self.last, self.counted = _last_row(keys), True
            return batch
        continues = self.last is not None and same_keys(pa.Table.from_batches([keys.slice(0, 1)]),
                                                        pa.Table.from_batches([self.last]))
        if not continues:
            self._close()
        starts = np.flatnonzero(key_changes(list(keys.columns), n))
        seg = np.concatenate(([0], starts))
        counted = np.logical_or.reduceat(valid, seg)
        if continues:
            counted[0] |= self.counted
        idle = seg[:-1][~counted[:-1]]  # closed groups (all but the last) without a counted row
        if len(idle):
            self.empty.append(keys.take(pa.array(idle)))
        self.last, self.counted = _last_row(keys), bool(counted[-1])
        return batch if valid.all() else batch.filter(pa.array(valid))

    def _close(self) -> None:
        if self.last is not None and not self.counted:
            self.empty.append(self.last)
        self.last = None

    def finish(self) -> list[pa.RecordBatch]:
        self._close()
        return self.empty


def _last_row(keys: pa.RecordBatch) -> pa.RecordBatch:
    """The last row, copied (a slice would hold the whole batch in memory while it is kept)."""
    return keys.take(pa.array([keys.num_rows - 1]))


def _serial(reader: pa.RecordBatchReader) -> Generator[pa.RecordBatch, None, None]:
    yield from reader


def _increasing(keys: pa.Table) -> bool:
    """One integer key without NULLs, strictly increasing: every group once, seen without a hash
    aggregate (which took a tenth of the stream's time over 200k groups of 6 rows)."""
    if keys.num_columns != 1 or not pa.types.is_integer(keys.schema.types[0]) or keys.column(0).null_count:
        return False
    k = keys.column(0).to_numpy()
    return bool((k[1:] > k[:-1]).all())


def _distinct_rows(keys: pa.Table) -> int:
    try:
        return keys.group_by(keys.column_names).aggregate([]).num_rows
    except pa.ArrowNotImplementedError:  # lists, structs …: as Python values
        return len({repr(row) for row in zip(*(c.to_pylist() for c in keys.columns))})


def execute_streamed(con: duckdb.DuckDBPyConnection, sql: str, jobs: list[StreamJob],
                     batch_rows: int | None = None) -> pd.DataFrame:
    """Run the jobs, then ``sql``, and fetch its result as a DataFrame."""
    with streamed(con, jobs, batch_rows):
        try:
            return con.execute(sql).fetchdf()
        except duckdb.Error as e:
            raise translate_error(e) from None


def execute_planned(con: duckdb.DuckDBPyConnection, sql: str, options: CompileOptions) -> pd.DataFrame:
    """Compile ``sql`` for a run by uneven itself on DuckDB, where an ordered pass may stream, and run
    it; with ``ordered="auto"``, a stream whose sorted rows do not fit in the memory limit runs again
    on the plan ``compile()`` emits (the window plan spills its sort)."""
    compiled, ctx = compile_with_context(sql, replace(options, stream=True), DuckDBSchema(con))
    try:
        return execute_streamed(con, compiled, ctx.stream_jobs)
    except StreamMemoryError:
        if options.ordered != "auto":
            raise
    return execute_df(con, compile_sql(sql, options, DuckDBSchema(con)))
