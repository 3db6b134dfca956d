"""State shared by one compilation: the SQL text (for error positions) and deterministic names."""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from typing import Protocol, TypeVar

from sqlglot import exp

from uneven.errors import UnevenError
from uneven.sqltree.spans import span, text  # noqa: F401  (re-exported to the stages)

E = TypeVar("E", bound=UnevenError)


@dataclass(frozen=True)
class CompileOptions:
    """The options of one compilation, built once at the front door (api, builder, CLI) and checked
    by ``pipeline.check_options``."""

    dialect: str = "duckdb"  # the target engine: some plan variants need one of its functions
    read: str = "duckdb"  # the dialect the SQL text is written in: constant parameters mean what it says
    pretty: bool = True
    strict: bool = False  # every measure call strict unless it says strict := false
    tie_grouping: str = "auto"  # the ordered pass's variant: "auto" | "on" | "off" (plan.choose_variant)
    method: str = "exact"  # or "bounded": intervals from one-pass binned summaries (compiler/bounded.py)
    resolution: float | None = None  # relative bin width of the summary pass (method="bounded"; None: default)
    ordered: str = "auto"  # the ordered measures: "auto" | "refine" | "window" | "stream" (plan.route_refine,
    #                        plan.route_stream)
    stream: bool = False  # uneven runs the query on DuckDB itself: an ordered pass may be streamed


class EngineSchema(Protocol):
    """What an engine can tell the compiler about a query's sources (engine/columns.DuckDBSchema,
    engine/adapters/base.AdapterSchema). Each answer is a help: None means unknown, and the compiler
    then decides from the SQL alone."""

    probes_ties: bool  # whether ``tie_counts`` looks at the data (else the planner never asks)

    def source_columns(self, select: exp.Select) -> set[str] | None:
        """The columns the SELECT's FROM clause provides (group key resolution, keys.py)."""

    def expression_types(self, select: exp.Select, exprs: list[exp.Expression]) -> list[str] | None:
        """Type names of expressions over the SELECT's FROM clause (argument checks, types.py)."""

    def tie_counts(self, select: exp.Select, x: exp.Expression, condition: exp.Expression | None,
                   keys: list[exp.Expression]) -> tuple[int, int] | None:
        """(distinct (keys, x) pairs, rows) of an ordered pass's value (plan.choose_variant)."""


@dataclass
class CompileContext:
    sql: str | None = None
    options: CompileOptions = CompileOptions()
    engine: EngineSchema | None = None  # None: compile without looking at any data
    counters: dict[str, int] = field(default_factory=lambda: defaultdict(int))
    # what the planner chose, one record per pass (read by explain)
    chosen: list[dict] = field(default_factory=list)
    # sources read once through a MATERIALIZED CTE, one record each (materialize.py; read by explain)
    read_once: list[dict] = field(default_factory=list)
    # the streamed ordered passes to run before the query (compiler/passes/stream.py), innermost first
    stream_jobs: list = field(default_factory=list)

    def name(self, kind: str) -> str:
        """Next deterministic name of a kind: ``_uv_ord_1``, ``_uv_ord_2``, …"""
        self.counters[kind] += 1
        return f"_uv_{kind}_{self.counters[kind]}"

    def error(self, cls: type[E], message: str, node: exp.Expression | None = None,
              function: str | None = None) -> E:
        start, end = span(node) if node is not None else (None, None)
        return cls(message, sql=self.sql, start=start, end=end, function=function)
