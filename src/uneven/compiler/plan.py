"""Plan the passes of one scope: measure calls grouped by pass kind and shared input."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from sqlglot import exp

from uneven.catalog.design_kernels import stream_kernel
from uneven.catalog.kernels_se_moment import LINE_ERRORS, LINE_ERRORS_WHY, MOMENT_ERRORS
from uneven.catalog.spec import PassKind
from uneven.compiler import clauses
from uneven.compiler.calls import MeasureCall
from uneven.compiler.context import CompileOptions, EngineSchema, text
from uneven.compiler.direct import direct_blocked, summary_direct_blocked
from uneven.compiler.group_sizes import small_groups
from uneven.compiler.passes import stream_ranked
from uneven.compiler.passes.linearized import can_share
from uneven.compiler.passes.refine import refinable


@dataclass
class PassPlan:
    kind: PassKind
    x: exp.Expression
    trailing: exp.Expression | None  # the weight (ordered, moment) or the entity (entity)
    condition: exp.Expression | None = None  # a FILTER (WHERE …) shared by the pass's calls
    columns: tuple[exp.Expression, ...] = ()  # further row-level arguments (rank_by, subgroup …)
    calls: list[MeasureCall] = field(default_factory=list)
    variant: str = "rows"  # ordered pass: "rows" (one row per input row) or "ties" (per distinct value)
    reason: str = ""  # why the planner chose the variant (shown by explain)
    options: dict = field(default_factory=dict)  # the pass-shaping named arguments (strata, psu, …)
    order_reason: str = ""  # why cut-based measures run on the window plan or the refine plan (route_refine)
    probed: Any = None  # the tie probe's answer, once asked ((distinct, rows), or "unknown")
    job: Any = None  # the stream pass's job, set by its lowering (passes/stream.StreamJob)
    direct: bool = False  # stream or summary pass: the final SELECT reads its result alone (choose_*_form)
    groups: Any = None  # the group-size probe's answer, once asked ((groups, rows), or "unknown": group_sizes.py)


def plan_passes(calls: list[MeasureCall]) -> list[PassPlan]:
    """One pass per (kind, value, weight-or-entity, FILTER condition, further columns), in order of
    first appearance.

    All measures on the same value and weight share one ordered pass, however many there are.
    """
    plans: dict[tuple, PassPlan] = {}
    for call in calls:
        kind = call.pass_kind
        trailing = call.trailing
        cond = call.filter
        x, columns = call.pass_inputs
        shaping = {k: call.options[k] for k in call.measure.pass_options if k in call.options}
        key = (kind, x.sql("duckdb"), trailing.sql("duckdb") if trailing is not None else None,
               cond.sql("duckdb") if cond is not None else None, tuple(c.sql("duckdb") for c in columns),
               tuple(sorted((k, v.sql("duckdb")) for k, v in shaping.items())))
        if key not in plans:
            plans[key] = PassPlan(kind, x, trailing, cond, columns, options=shaping)
        plans[key].calls.append(call)
    return list(plans.values())


@dataclass(frozen=True)
class PlanScope:
    """What the plan rules read about one scope: its SELECT and group keys, the compile options and
    what the engine knows (None when compiling without an engine)."""

    select: exp.Select
    keys: list[exp.Expression]
    options: CompileOptions = CompileOptions()
    engine: EngineSchema | None = None


def apply_rules(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    """The scope's passes after every rule of PLAN_RULES, in order (as sqlglot's optimizer RULES)."""
    for rule in PLAN_RULES:
        plans = rule(plans, scope)
    return plans


# Tie grouping (the "ties" variant of the ordered pass) pays when the distinct (keys, value) pairs
# are at most this share of the rows: with few distinct pairs the running-sum window over them plus
# one hash aggregate beats the window over every row, with as many pairs as rows it loses (the hash
# aggregate then has as many groups as rows). The measured break-even is in bench/README.md.
TIE_SHARE = 0.25

TIE_GROUPING = ("auto", "on", "off")


def choose_variants(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    for plan in plans:
        choose_variant(plan, scope)
    return plans


def choose_variant(plan: PassPlan, scope: PlanScope) -> PassPlan:
    """Pick the ordered pass's variant: "ties" when asked (``on``), or, with ``auto``, when an engine
    probe reports few distinct values (share of rows ≤ TIE_SHARE); else "rows". The centred pass is
    "adaptive" on DuckDB when every call has a one-pass error bound (choose_centred). Other passes
    keep their one form. ``engine.tie_counts(select, x, condition, keys)`` returns (distinct pairs, rows) or
    None (unknown, e.g. a value type where ties are rare and the probe is not worth a scan)."""
    tie_grouping = scope.options.tie_grouping
    if plan.kind == PassKind.CENTRED:
        return choose_centred(plan, scope.options.dialect)
    if plan.kind != PassKind.ORDERED:
        return plan
    if tie_grouping == "on":
        plan.variant, plan.reason = "ties", "tie grouping requested"
    elif tie_grouping == "off":
        plan.variant, plan.reason = "rows", "tie grouping turned off"
    elif scope.engine is None or not scope.engine.probes_ties:
        plan.variant, plan.reason = "rows", "no engine to probe for ties (compile only)"
    else:
        found = probe_ties(plan, scope)
        if found is None:
            plan.variant, plan.reason = "rows", "value type rarely ties (not probed)"
        else:
            distinct, rows = found
            share = distinct / rows if rows else 1.0
            plan.variant = "ties" if share <= TIE_SHARE else "rows"
            plan.reason = (f"about {distinct:,} distinct values in {rows:,} rows ({share:.0%}; "
                           f"ties grouped at ≤ {TIE_SHARE:.0%})")
    return plan


# The adaptive centred variant: one scan of compensated sums (FSUM) for most groups (figures in
# bench/README.md, "Moment measures"): the centred pass costs a
# second scan, a hash join of every row and a second GROUP BY; with a filtered mean CTE that keeps no
# group, DuckDB skips that scan. FSUM is DuckDB's; other engines keep the centred pass.
ADAPTIVE_DIALECTS = ("duckdb",)


def choose_centred(plan: PassPlan, dialect: str) -> PassPlan:
    if dialect not in ADAPTIVE_DIALECTS:
        plan.variant, plan.reason = "centred", f"every group centred (no compensated sum on {dialect})"
    elif all(call.measure.error_bound is not None for call in plan.calls):
        plan.variant, plan.reason = "adaptive", ("one pass of compensated sums; a group takes the centred "
                                                 "pass only where an error bound exceeds 1e-11 of its value")
    else:
        plan.variant, plan.reason = "centred", "every group centred (a measure has no one-pass form: " + ", ".join(
            dict.fromkeys(c.measure.name for c in plan.calls if c.measure.error_bound is None)) + ")"
    return plan


# Only centred calls move: moving the moment sums too (leaving the main aggregate with the group
# list only) measured within noise (bench/README.md, "Plan shape"), and the moment pass keeps its
# own row-validity rules in one place (passes/moment.py).
FUSED_KINDS = (PassKind.CENTRED,)


def fuse_centred(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    """Move the calls of a centred pass onto the ordered pass of the same value, weight and FILTER.

    The ordered pass already sorts the group's valid rows in a window; the group mean as a
    partition total (Σ w·x / Σ w OVER (PARTITION BY keys)) costs little there, and its GROUP BY
    then sums the centred terms too: no second scan and no hash join of every row to its group's
    mean (about a third of a ten-measure query over many small groups: bench/README.md, "Plan
    shape"). The deviations
    x − μ are the same as on the centred pass, so the digits kept on a small spread are too.
    Without group keys (one group) the centred pass stays: its join is to a single row, while a
    whole-input window would carry μ through the sort.
    """
    if not scope.keys:
        return plans
    ordered = {_rows_key(p): p for p in plans if p.kind == PassKind.ORDERED and not p.columns and not p.options}
    out = []
    for plan in plans:
        target = ordered.get(_rows_key(plan)) if plan.kind in FUSED_KINDS and not plan.columns \
            and not plan.options else None
        if target is None:
            out.append(plan)
        else:
            target.calls += plan.calls
    return out


def describe_pass(plan: PassPlan, ctes: list[str]) -> dict:
    """What explain shows of one lowered pass."""
    trailing = text(plan.trailing) if plan.trailing is not None else None
    reason = "; ".join(r for r in (plan.order_reason, plan.reason) if r)
    return {"kind": plan.kind.value, "variant": plan.variant if plan.kind in (PassKind.ORDERED, PassKind.CENTRED)
            else "", "value": text(plan.x), "weight": trailing if plan.kind != PassKind.ENTITY else None,
            "entity": trailing if plan.kind == PassKind.ENTITY else None,
            "filter": text(plan.condition) if plan.condition is not None else None,
            "measures": list(dict.fromkeys(text(c.node) for c in plan.calls)), "ctes": ctes,
            "reason": reason}


ORDERED_PLANS = ("auto", "refine", "window", "stream")


def route_refine(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    """Turn an ordered pass into a refine pass (compiler/passes/refine.py: bins, then a sort of only
    the bins that hold a cut) when every call on it depends on the order only at cut points.

    ``scope.options.ordered``: "auto" refines wherever it can (well below the window plan's time:
    bench/README.md, "Refine plan"), except when tie grouping is
    asked for (a variant of the window plan); "refine" the same, whatever tie grouping says;
    "window" never. A pass with a measure that needs the full order (Gini and its family) keeps
    the window plan, and says which measure. A linearized pass without a survey design whose calls
    are all cut-based (their standard errors and intervals too) is refined the same way: the
    scores' sums come from the bins (passes/refine_se.py)."""
    for plan in plans:
        if plan.kind not in (PassKind.ORDERED, PassKind.LINEARIZED) or plan.columns or plan.options:
            continue
        if scope.options.ordered == "window":
            plan.order_reason = "window plan requested"
            continue
        if scope.options.ordered == "stream":
            plan.order_reason = "stream plan requested"  # route_stream decides (or falls back to the window)
            continue
        if scope.options.ordered == "auto" and scope.options.tie_grouping == "on" and plan.kind == PassKind.ORDERED:
            plan.order_reason = "window plan: tie grouping requested"
            continue
        blocking = list(dict.fromkeys(r for r in (refinable(c) for c in plan.calls) if r))
        if blocking:
            plan.order_reason = "window plan: " + ", ".join(blocking)
            continue
        small = small_groups(plan, scope)  # auto: groups of a few rows stream instead (compiler/group_sizes.py)
        if small:
            plan.order_reason = "window plan: " + small
            continue
        plan.kind, plan.variant = PassKind.REFINE, "refine"
        plan.order_reason = ("refine plan: every measure reads the order only at its cuts (bins, then a sort "
                             "of the rows in the cut bins only)")
    return plans


def route_stream(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    """Turn an ordered pass, or a linearized pass (with a survey design too), into a stream pass
    (compiler/passes/stream.py: DuckDB sorts, numpy reduces) where uneven runs the query on DuckDB
    itself (``scope.options.stream``) and every call on the pass has a kernel. "stream" asks for it;
    "auto" takes it where it is measured to be cheaper (``stream_pays``). Otherwise the pass keeps the
    window plan, and ``order_reason`` says why."""
    for plan in plans:
        if plan.kind not in (PassKind.ORDERED, PassKind.LINEARIZED, PassKind.RANKED) or (
                plan.columns and plan.kind != PassKind.RANKED):
            continue
        if plan.options and (plan.kind != PassKind.LINEARIZED or not DESIGN_STREAMS):  # (DESIGN_STREAMS below)
            if plan.kind == PassKind.LINEARIZED and scope.options.ordered == "stream" and scope.options.stream:
                plan.order_reason = ("window plan: a survey design (" + ", ".join(sorted(plan.options))
                                     + ") is not streamed (stream plan requested)")
            continue
        fusing = plan.kind == PassKind.ORDERED and scope.keys and not _has_curve(plan) and any(
            p.kind in FUSED_KINDS and _rows_key(p) == _rows_key(plan) for p in plans)
        wanted = scope.options.ordered == "stream" or (scope.options.ordered == "auto" and scope.options.stream
                                                        and not fusing and stream_pays(plan, scope))
        if not wanted:
            continue
        blocking = stream_blocked(plan, scope)
        if blocking:
            small = small_groups(plan, scope)  # (asked already by route_refine: the answer is kept)
            plan.order_reason = f"window plan: {blocking}" + (" (stream plan requested)"
                                                              if scope.options.ordered == "stream" else "") + (
                f"; not refined: {small}" if small else "")
            continue
        ranked = plan.kind == PassKind.RANKED
        pays = "" if scope.options.ordered == "stream" else f"; {RANKED_PAYS if ranked else _pays_words(plan, scope)}"
        plan.kind, plan.variant = PassKind.STREAM, stream_ranked.VARIANT if ranked else "stream"
        plan.order_reason = (stream_ranked.REASON if ranked else "stream plan: DuckDB sorts the rows by (keys, "
                             "value), numpy carries each group's running weight across the batches") + pays
        if plan.options:
            plan.order_reason += "; " + design_reason(plan)
    return plans


# When "auto" streams (figures in bench/README.md, "Stream plan"): a pass with a measure that needs
# the full order (the refine plan cannot serve it). Weighted, the window plan pays a running sum(w)
# window over every row; unweighted, its row_number() form measured slower than the stream too
# (0.68-0.92x on 2M x 100, 5M x 1 and 200k groups of 6 rows, and 0.82-0.91x on a quiet machine).
# Not where centred measures would fuse onto the window plan (fuse_centred: the stream leaves them a
# scan and a join of their own), except beside a lorenz_curve (_has_curve). A Gini beside theil measured
# 0.73x too at 2M x 100, but the many-small-groups case, where that join weighs most, is not measured.
# A linearized pass (gini_se and the estimates sharing its sort) streams under "auto" as well: measured
# cheaper than its window plan's chain of CTEs (bench/README.md, "Stream plan"). The cut-based errors beside
# gini_se (catalog/kernels_se.py) stream with it: 0.63-0.83x the window plan (2M x 100, 200k groups of 6
# rows); alone they keep the refine plan, 0.72-0.78x the stream at 2M x 100 (bench/README.md, "Stream
# plan: cut-based standard errors").
# The median-line measures (below_line_share, median_gap, fgt_relative: compiler/passes/stream_line.py) stream
# under "auto" too: their stream, line GROUP BY and (median_gap) second stream of the rows below the line
# measured 0.50-0.87x the window plan at 2M x 100, each alone and the three beside a Gini, weighted or not
# (two runs); over 200k groups of 6 rows 0.85-1.13x alone and 1.00x the three beside a Gini.
LINEARIZED_STREAMS = True
# The moment measures' errors (theil_se, mld_se, ge_se, atkinson_se, fgt_se: catalog/kernels_se_moment.py) stream
# beside gini_se or a cut-based error, whose window plan sorts anyway: gini_se, theil_se and atkinson_se measured
# 0.39-0.42x the window plan at 2M x 100 (two runs), 0.96-1.03x over 200k groups of 6 rows. Alone their window
# plan sorts nothing (μ over the partition, then sums): the stream measured 2.75-3.58x it at 2M x 100 and
# 1.10-1.19x on 6-row groups (bench/README.md, "Stream plan: the moment measures' standard errors"). With a
# survey design (catalog/design_kernels_moment.py) the same rule: beside gini_se 0.66-0.73x the window plan
# (2M x 100, 200k groups of 6 rows); theil_se alone 2.0-2.3x at 2M x 100, where the window plan groups the
# PSUs without a sort, 0.82-0.88x over groups of 6 to 25 rows (bench/README.md, "Stream plan, survey
# designs: the moment measures' errors").
MOMENT_ERRORS_KEEP = ("window plan: the moment measures' errors alone need no sort (sums over the group and its "
                      "mean, with a survey design per stratum and PSU), so auto keeps the window plan; beside "
                      "gini_se or a cut-based error they stream "
                      "(bench/README.md, \"Stream plan: the moment measures' standard errors\")")
# A linearized pass with a survey design (strata :=, psu :=) streams too: the stream carries each
# group's sums per (stratum, PSU) (engine/streamdesign.py; the cut-based errors' terms:
# engine/streamdesign_cuts.py, the moment errors' too), which the refine plan cannot; measured in
# bench/README.md, "Stream plan, survey designs".
DESIGN_STREAMS = True


def design_reason(plan: PassPlan) -> str:
    """explain's words for a streamed survey design."""
    parts = [k for k in ("strata", "psu") if k in plan.options]
    return ("the survey design (" + ", ".join(parts) + ") is carried per group as sums of the score's terms per "
            + " and ".join({"strata": "stratum", "psu": "PSU"}[k] for k in parts))


# The ranked pass (concentration indices, Kakwani, Reynolds–Smolensky: passes/stream_ranked.py) streams
# under "auto" (bench/README.md, "Stream plan: the ranked pass"): 0.29-0.58x its window plan with a tie-free
# ranking value (2M x 100, 5M x 1, 200k groups of 6 rows), but its window plan groups the tie groups before
# its window, so with few distinct ranking values it sorts far fewer rows (20 values per group: the stream
# 3.0-5.8x the window plan); with distinct (keys, value) pairs a quarter of the rows, 0.65-1.07x. So a
# ranking value the tie probe finds at most TIE_SHARE distinct keeps the window plan (``ranked_ties``).
RANKED_STREAMS = True
RANKED_PAYS = ("auto streams the ranked pass unless the ranking value has few distinct values (bench/README.md, "
               "\"Stream plan: the ranked pass\")")


def ranked_ties(plan: PassPlan, scope: PlanScope) -> str | None:
    """Why ``auto`` keeps a ranked pass on the window plan (few distinct ranking values), or None."""
    if scope.engine is None or not scope.engine.probes_ties:
        return None
    found = probe_ties(plan, scope)
    if found is None or not found[1] or found[0] / found[1] > TIE_SHARE:
        return None
    distinct, rows = found
    return (f"window plan: about {distinct:,} distinct ranking values in {rows:,} rows ({distinct / rows:.0%}; "
            f"its window runs over the tie groups, streamed above {TIE_SHARE:.0%})")


STREAM_PAYS = "auto streams a pass whose measures need the full order (bench/README.md, \"Stream plan\")"


def _has_curve(plan: PassPlan) -> bool:
    """A lorenz_curve on the pass: its window form (cells, then a grid of k+1 conditional sums) costs
    more than the centred measures' own pass that streaming leaves them (the report's ordered pass,
    the curve beside theil: stream 0.76x window at 2M x 100, bench/README.md, "Stream plan")."""
    return any(c.measure.name == "lorenz_curve" for c in plan.calls)


def _pays_words(plan: PassPlan, scope: PlanScope) -> str:
    small = small_groups(plan, scope)
    return f"auto streams cut-based measures over small groups: {small}" if small else STREAM_PAYS


def stream_pays(plan: PassPlan, scope: PlanScope) -> bool:
    if plan.kind == PassKind.RANKED:
        plan.order_reason = ranked_ties(plan, scope) or ""
        return RANKED_STREAMS and not plan.order_reason
    # a pass the refine plan could serve streams only over small groups (compiler/group_sizes.py)
    order_wanted = any(refinable(c) for c in plan.calls) or small_groups(plan, scope) is not None
    if plan.kind == PassKind.LINEARIZED:  # the window plan's linearized pass has no ties variant: no probe
        if all(c.measure.name in MOMENT_ERRORS for c in plan.calls):
            plan.order_reason = MOMENT_ERRORS_KEEP
            return False
        # (with a survey design the refine plan cannot take the cut-based errors: they stream, DESIGN_STREAMS)
        return LINEARIZED_STREAMS and (bool(plan.options) and DESIGN_STREAMS or order_wanted)
    if scope.options.tie_grouping == "on" or not order_wanted:
        return False
    if scope.options.tie_grouping == "auto" and scope.engine is not None and scope.engine.probes_ties:
        found = probe_ties(plan, scope)  # few distinct values: the window plan's ties variant sorts far fewer rows
        if found is not None and found[1] and found[0] / found[1] <= TIE_SHARE:
            return False
    return True


def probe_ties(plan: PassPlan, scope: PlanScope) -> tuple[int, int] | None:
    """The engine's tie probe of the pass's value, asked once per pass (it scans the data)."""
    if plan.probed is None:
        assert scope.engine is not None
        found = scope.engine.tie_counts(scope.select, plan.x, plan.condition, scope.keys)
        plan.probed = "unknown" if found is None else found
    return None if plan.probed == "unknown" else plan.probed


def stream_blocked(plan: PassPlan, scope: PlanScope) -> str | None:
    """Why the pass cannot be streamed, or None."""
    if not scope.options.stream:
        return "the stream plan runs only when uneven runs the query on DuckDB (compiled SQL is portable)"
    missing = list(dict.fromkeys(c.measure.name for c in plan.calls
                                 if stream_kernel(c.measure, bool(plan.options)) is None))
    if missing:
        why = f" ({LINE_ERRORS_WHY})" if not plan.options and LINE_ERRORS.intersection(missing) else ""
        return "no stream kernel for " + ", ".join(missing) + (" with a survey design" if plan.options else "") + why
    if not all(isinstance(v, (int, float)) for c in plan.calls for v in c.params):
        return "a parameter known only at run time"
    if scope.select.parent is not None:
        return "the measures are in a subquery or CTE (streamed only in the outermost SELECT)"
    if clauses.volatile_reason(scope.select) is not None or any(
            c.args.get("materialized") for c in scope.select.find_all(exp.CTE)):
        return "the rows are read once through a MATERIALIZED CTE, which a stream would read again"
    probe = getattr(scope.engine, "collated_keys", None)  # DuckDB's schema (the only engine that streams)
    design = [plan.options[k] for k in ("strata", "psu") if k in plan.options]  # (grouped by GROUP BY too)
    for columns, what in ((scope.keys, "the group key"), (design, "the survey design's column")):
        collated = probe(scope.select, columns) if probe is not None and columns else None
        if collated is not None:
            return (f"{what} {collated} compares text under a collation (GROUP BY merges strings the stream, "
                    "which compares bytes, would keep apart)")
    return None


# The direct form of a streamed scope (compiler/direct.py): the final SELECT reads the stream's table
# alone, without the main aggregate's second read of the source and its join on the keys (bench/README.md,
# "Stream plan"). A switch for measuring the joined form beside it (bench/stream.py); always on otherwise.
STREAM_DIRECT = True


def choose_stream_form(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    """Mark the stream pass ``direct`` where the scope's final SELECT can read its result table alone
    (compiler/direct.py says when); else it joins the table on the keys. ``reason`` says which and why."""
    for plan in plans:
        if plan.kind != PassKind.STREAM:
            continue
        if not STREAM_DIRECT:
            blocking: str | None = "the direct form is turned off"
        else:
            probe = getattr(scope.engine, "key_types", None)  # DuckDB's schema (the only engine that streams)
            blocking = direct_blocked([p.kind.value for p in plans if p is not plan], scope.select, scope.keys,
                                      lambda: probe(scope.select, scope.keys) if probe is not None else None)
        _mark_direct(plan, blocking, "the stream's table")
    return plans


# The direct form of the summary pass (method="bounded"; compiler/direct.py): the final SELECT reads the
# pass's result CTE, one row per group, without a second read of the source and a join on the keys
# (docs/bounded.md, "Cost"). A switch for measuring the joined form beside it (bench/bounded_direct.py).
SUMMARY_DIRECT = True


def choose_summary_form(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    """Mark the summary pass ``direct`` where the scope's final SELECT can read its result CTE alone."""
    for plan in plans:
        if plan.kind != PassKind.SUMMARY:
            continue
        blocking = ("the direct form is turned off" if not SUMMARY_DIRECT else
                    summary_direct_blocked([p.kind.value for p in plans if p is not plan], scope.select))
        _mark_direct(plan, blocking, "the pass's result")
    return plans


def _mark_direct(plan: PassPlan, blocking: str | None, read: str) -> None:
    plan.direct = blocking is None
    plan.reason = (f"direct: the final SELECT reads {read}, one row per group (no second read of the source, "
                   "no join on the keys)" if plan.direct else f"joined on the keys to the main GROUP BY: {blocking}")


SHAREABLE = {PassKind.ORDERED, PassKind.MOMENT}  # plain passes whose measures a linearized pass can also compute


def share_passes(plans: list[PassPlan], scope: PlanScope) -> list[PassPlan]:
    """Move the calls of an ordered or moment pass onto a linearized pass of the same value, weight
    and FILTER (when ``can_share(call)``), so an estimate and its standard error share one sort."""
    linearized: dict[tuple, PassPlan] = {}
    for plan in plans:
        if plan.kind == PassKind.LINEARIZED:
            linearized.setdefault(_rows_key(plan), plan)
    out = []
    for plan in plans:
        target = linearized.get(_rows_key(plan)) if plan.kind in SHAREABLE else None
        if target is None:
            out.append(plan)
            continue
        moved = [c for c in plan.calls if can_share(c)]
        target.calls += moved
        plan.calls = [c for c in plan.calls if not can_share(c)]
        if plan.calls:
            out.append(plan)
    return out


def _rows_key(plan: PassPlan) -> tuple:
    return (plan.x.sql("duckdb"), plan.trailing.sql("duckdb") if plan.trailing is not None else None,
            plan.condition.sql("duckdb") if plan.condition is not None else None)


# The rules a scope's planned passes go through, in order: share a sort with a linearized pass, send
# cut-based measures to the refine plan, fuse centred sums onto the ordered pass, pick each variant.
PLAN_RULES: tuple[Callable[[list[PassPlan], PlanScope], list[PassPlan]], ...] = (
    share_passes,
    route_refine,
    route_stream,
    fuse_centred,
    choose_variants,
    choose_stream_form,
    choose_summary_form,
)
