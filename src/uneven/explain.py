"""``explain``: the passes the planner chose for a query and, on request, where DuckDB spends its time.

The plan part is the compiler's own record (``compiler/plan.py: describe_pass``): per pass its
kind, variant, value, weight or entity, FILTER, the measure calls it serves, the CTEs it adds and
why the variant was chosen. The profile part runs the compiled SQL once with DuckDB's JSON
profiling and sums operator times (self time of each physical operator, as DuckDB reports it).
"""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import dataclass, field, replace

import duckdb

from uneven.compiler.context import CompileOptions
from uneven.compiler.pipeline import compile_with_context
from uneven.engine.columns import DuckDBSchema
from uneven.engine.runner import translate_error


@dataclass
class Explanation:
    """What ``explain`` found: ``passes`` (one dict per pass), the compiled ``sql``, ``read_once``
    (one dict per source read once through a MATERIALIZED CTE: ``cte``, ``why``, ``clause``) and,
    when profiled, ``operators`` (name, seconds, rows, detail; slowest first), ``total_seconds``,
    ``result_rows`` and ``system`` (peak buffer memory, spilled bytes)."""

    passes: list[dict]
    sql: str
    read_once: list[dict] = field(default_factory=list)
    operators: list[dict] | None = None
    total_seconds: float | None = None
    result_rows: int | None = None
    system: dict = field(default_factory=dict)
    engine: str = "DuckDB"
    engine_plan: str | None = None  # the engine's own plan (engines other than DuckDB)

    def text(self, show_sql: bool = False, top: int = 15) -> str:
        lines = []
        for r in self.read_once:
            lines.append(f"rows read once: {r['cte']} AS MATERIALIZED (…), because {r['why']} ({r['clause']}); "
                         "every pass below reads these same rows")
        lines.append(f"passes ({len(self.passes)}):")
        for i, p in enumerate(self.passes, 1):
            kind = p["kind"] + (f" [{p['variant']}]" if p["variant"] else "")
            lines.append(f"  {i}. {kind}  value: {p['value']}")
            if p["weight"]:
                lines.append(f"     weight: {p['weight']}")
            if p["entity"]:
                lines.append(f"     entity: {p['entity']}")
            if p["filter"]:
                lines.append(f"     filter: {p['filter']}")
            lines.append(f"     measures: {', '.join(p['measures'])}")
            lines.append(f"     CTEs: {', '.join(p['ctes'])}")
            if p["reason"]:
                lines.append(f"     chosen because: {p['reason']}")
        if not self.passes:
            lines.append("  (no measure calls: the query runs as written)")
        if self.operators is not None and self.engine_plan is None:
            lines.append(f"\nprofile: {self.total_seconds:.3f} s in DuckDB, {self.result_rows} result rows")
            if self.system:
                lines.append("  " + ", ".join(f"{k.replace('_', ' ')}: {_size(v, k)}" for k, v in self.system.items()))
            lines.append(f"  {'operator':<24} {'seconds':>9} {'share':>6} {'rows':>12}  detail")
            total = sum(o["seconds"] for o in self.operators) or 1.0
            for o in self.operators[:top]:
                lines.append(f"  {o['name']:<24} {o['seconds']:9.3f} {o['seconds'] / total:6.1%} {o['rows']:>12,}  "
                             f"{o['detail']}")
            if len(self.operators) > top:
                rest = sum(o["seconds"] for o in self.operators[top:])
                lines.append(f"  ({len(self.operators) - top} more operators, {rest:.3f} s)")
        if self.engine_plan is not None:
            lines.append(f"\n{self.engine}'s plan:")
            lines += ["  " + line for line in self.engine_plan.splitlines()]
            if self.total_seconds is not None:
                lines.append(f"ran in {self.total_seconds:.3f} s on {self.engine}, {self.result_rows} result rows")
        if show_sql:
            lines += ["", "compiled SQL:", self.sql]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.text()


def _size(n, key: str = "") -> str:
    if key.endswith("_seconds"):
        return f"{n:.3f} s"
    if not isinstance(n, (int, float)):
        return str(n)
    for unit in ("B", "KB", "MB", "GB"):
        if abs(n) < 1024 or unit == "GB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024
    return str(n)


def explain_on(sql: str, adapter, options: CompileOptions, *, profile: bool = False) -> Explanation:
    """``explain_query`` on another engine (engine/adapters): the passes compiled for its dialect and
    its own plan; with ``profile`` the query runs once (PostgreSQL: EXPLAIN ANALYZE) and is timed."""
    import time

    compiled, ctx = compile_with_context(sql, replace(options, dialect=adapter.dialect, pretty=True), adapter.schema())
    out = Explanation(passes=ctx.chosen, sql=compiled, engine=adapter.label, read_once=ctx.read_once)
    try:
        if profile and adapter.dialect == "postgres":
            out.engine_plan = adapter.plan_analyzed(compiled)
        else:
            out.engine_plan = adapter.plan(compiled)
        if profile:
            start = time.perf_counter()
            out.result_rows = len(adapter.execute(compiled))
            out.total_seconds = time.perf_counter() - start
    except adapter.errors() as e:
        raise adapter.translate(e) from None
    return out


def explain_query(sql: str, con: duckdb.DuckDBPyConnection, options: CompileOptions, *,
                  profile: bool = False) -> Explanation:
    """Compile ``sql`` as ``query`` would on ``con`` (same probes) and describe its passes; with
    ``profile`` also run it once under DuckDB's profiler."""
    # the column and tie probes of query(); the argument types are not probed here
    compiled, ctx = compile_with_context(sql, replace(options, dialect="duckdb", pretty=True, stream=True),
                                         DuckDBSchema(con, types=False))
    out = Explanation(passes=ctx.chosen, sql=compiled, read_once=ctx.read_once)
    if profile:
        import time

        from uneven.engine.stream import streamed  # noqa: PLC0415 (numpy and pyarrow only when profiling)

        start = time.perf_counter()
        with streamed(con, ctx.stream_jobs):  # the streamed passes run first; their time is shown apart
            if ctx.stream_jobs:
                out.system["stream_seconds"] = round(time.perf_counter() - start, 3)
            run_profiled(con, compiled, out)
    return out


def run_profiled(con: duckdb.DuckDBPyConnection, sql: str, out: Explanation) -> None:
    fd, path = tempfile.mkstemp(prefix="uneven-profile-", suffix=".json")
    os.close(fd)
    try:
        con.execute("SET enable_profiling = 'json'")
        con.execute("SET profiling_output = " + "'" + path.replace("'", "''") + "'")
        try:
            out.result_rows = len(con.execute(sql).fetchall())
        except duckdb.Error as e:
            raise translate_error(e) from None
        finally:
            con.execute("PRAGMA disable_profiling")
        with open(path) as f:
            doc = json.load(f)
    finally:
        os.unlink(path)
    summarise_profile(doc, out)


def summarise_profile(doc: dict, out: Explanation) -> None:
    """Operators of DuckDB's JSON profile, slowest first (names of older and newer formats)."""
    ops = []

    def walk(node):
        name = node.get("name") or node.get("operator_name") or node.get("operator_type")
        seconds = node.get("timing", node.get("operator_timing"))
        if name and seconds is not None:
            info = node.get("extra_info") or {}
            detail = info.get("Projections") or info.get("Aggregates") or info.get("Function") or info.get("Text") or ""
            detail = " ".join(detail) if isinstance(detail, list) else str(detail)
            ops.append({"name": name.strip(), "seconds": float(seconds),
                        "rows": int(node.get("intermediate_rows", node.get("operator_cardinality", 0)) or 0),
                        "detail": detail[:90].replace("\n", " ")})
        for child in node.get("children", []) + node.get("operator", []):
            walk(child)

    walk(doc)
    ops.sort(key=lambda o: -o["seconds"])
    query = doc.get("query") or {}
    out.operators = ops
    out.total_seconds = float(query.get("total_time", doc.get("latency", doc.get("operator_timing", 0.0))) or 0.0)
    system = doc.get("system") or {}
    out.system.update({k: system[k] for k in ("peak_buffer_memory", "peak_temp_dir_size", "total_bytes_spilled")
                       if k in system})
