"""State shared by one compilation: the SQL text (for error positions) and deterministic names."""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Callable
from dataclasses import dataclass, field

from sqlglot import exp

from uneven.errors import UnevenError
from uneven.sqltree.spans import span, text  # noqa: F401  (re-exported to the stages)


@dataclass
class CompileContext:
    sql: str | None = None
    strict: bool = False  # every measure call strict unless it says strict := false
    # columns the FROM clause of a SELECT provides, when an engine can say (None: unknown)
    source_columns: Callable[[exp.Select], set[str] | None] | None = None
    method: str = "exact"  # or "bounded": intervals from one-pass binned summaries (compiler/bounded.py)
    resolution: float = 0.01  # relative bin width of the summary pass (method="bounded")
    # type names of expressions over a SELECT's FROM clause, when an engine can say (compiler/types.py)
    expression_types: Callable[[exp.Select, list[exp.Expression]], list[str] | None] | None = None
    counters: dict[str, int] = field(default_factory=lambda: defaultdict(int))
    # planner options (compiler/plan.py): "auto" | "on" | "off", and the engine's tie probe
    tie_grouping: str = "auto"
    ordered: str = "auto"  # cut-based measures: "auto" | "refine" | "window" (plan.route_refine)
    dialect: str = "duckdb"  # the target engine: some plan variants need one of its functions
    read: str = "duckdb"  # the dialect the SQL text is written in: constant parameters mean what it says
    tie_probe: Callable | None = None
    # what the planner chose, one record per pass (read by explain)
    chosen: list[dict] = field(default_factory=list)
    # sources read once through a MATERIALIZED CTE, one record each (materialize.py; read by explain)
    read_once: list[dict] = field(default_factory=list)

    def name(self, kind: str) -> str:
        """Next deterministic name of a kind: ``_uv_ord_1``, ``_uv_ord_2``, …"""
        self.counters[kind] += 1
        return f"_uv_{kind}_{self.counters[kind]}"

    def error(self, cls: type[UnevenError], message: str, node: exp.Expression | None = None,
              function: str | None = None) -> UnevenError:
        start, end = span(node) if node is not None else (None, None)
        return cls(message, sql=self.sql, start=start, end=end, function=function)
