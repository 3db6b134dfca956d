"""The group-size probe of ``ordered="auto"``: a cut-based pass over groups of a few rows each streams
instead of taking the refine plan.

The refine plan (compiler/passes/refine.py) bins every group's rows and sorts only the rows of the bins
that hold a cut; its cost grows with the number of (group, bin) cells, so with groups of a few rows it
sorts nearly every row and pays the bins on top. There the stream plan measured cheapest, then the
window plan, the refine plan far behind (bench/README.md, "Stream plan: the per-entity case and the
group-size probe"). Where uneven runs the query on DuckDB itself, a scan counts the pass's rows and
about how many groups they fall in (engine/groups.py); below ``REFINE_MIN_ROWS`` rows per group on
average, over at least ``PROBE_MIN_ROWS`` rows, the pass is not refined (plan.route_refine) and streams
(plan.stream_pays), or keeps the window plan where it cannot stream; explain says why. Without an engine
(``compile()``), without group keys, or when the probe cannot run, nothing changes.
"""

from __future__ import annotations

from typing import Any

from uneven.compiler.passes.refine import refinable

# rows per group on average below which "auto" does not refine a cut-based pass (module constants: tests
# may monkeypatch them). Measured on 1.2M rows (bench/stream_se.py, a shared machine): the stream took
# 0.17-0.29x the refine plan's time at 25 rows per group, 0.26x and 0.20x at 100, 0.48x and 0.29x at 400,
# 0.69x and 0.74x at 2000, 1.00x and 0.70x at 8000 (cut-based errors, then the measures themselves); at
# 20,000 (2M x 100) 1.52x and 0.91x. The threshold sits where the errors still gain.
REFINE_MIN_ROWS = 4000.0
# below this many rows the plans differ by milliseconds: auto refines as it did without the probe
PROBE_MIN_ROWS = 100_000


def small_groups(plan: Any, scope: Any) -> str | None:
    """explain's words for a pass (compiler/plan.PassPlan) whose measures are all cut-based and whose
    groups hold fewer than ``REFINE_MIN_ROWS`` rows on average, or None (``scope``: plan.PlanScope).
    The probe runs once per pass; its answer is kept on the pass (``plan.groups``)."""
    options = scope.options
    if (options.ordered != "auto" or not options.stream or not scope.keys or scope.engine is None
            or plan.options or plan.columns or any(refinable(c) for c in plan.calls)):  # (never refined)
        return None
    if plan.groups is None:
        probe = getattr(scope.engine, "group_counts", None)  # DuckDB's schema (engine/columns.py)
        found = probe(scope.select, scope.keys, plan.x, plan.condition) if probe is not None else None
        plan.groups = found or "unknown"
    if plan.groups == "unknown" or not plan.groups[0]:
        return None
    groups, rows = plan.groups
    if rows < PROBE_MIN_ROWS or rows / groups >= REFINE_MIN_ROWS:
        return None
    return (f"about {groups:,} groups of {rows / groups:.1f} rows on average: the refine plan's bins cost "
            f"per group (auto refines from {REFINE_MIN_ROWS:g} rows per group)")
