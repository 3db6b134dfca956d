"""Bootstrap pass: R Poisson replicate weights drawn in the database, one sort for all replicates.

    _rows  keys, x, w, b (the resampling unit: the PSU, the key column, or the fallback key)
    _draw  keys, r, x, w·m          CROSS JOIN (VALUES (0) … (R)): the replicate is a row dimension;
                                   m ~ Poisson(1) by the inverse-CDF ladder on u = hash(b, r, seed)/2^64
                                   (r = 0: the full sample, m = 1)
    _kept  the rows with m > 0
    _win   … , C = running Σ w·m PARTITION BY (keys, r) ORDER BY x: ONE window specification
    _boot  keys, r, θ_r per call    (GROUP BY keys, r: the catalog's own builder)
    _long  … , θ (full sample) beside every θ_r
    _rank  … , rank of θ_r, number of replicates with a value, their mean (small windows)
    _bs    keys, SE = sd of θ_r; percentile ends = inverted-CDF quantiles of θ_r; normal ends θ ± z·SE

Every replicate estimate is built by the catalog's own builder over its (group, replicate)
partition with weight w·m, so any ordered or moment measure works, and the SQL text does not grow
with R (only the VALUES list of replicate numbers does). Rows drawn zero times (about e^−1 of them)
are dropped before the sort.
The draws depend only on (b, r, seed) and the engine's hash function: rerunning on the same engine
gives the same replicates; another engine's hash gives different (equally valid) ones.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes.line import window_ctes
from uneven.compiler.passes.linearized import critical_value
from uneven.compiler.passes.rows import RowContext, window_columns
from uneven.compiler.passes.source import Source, cte, grouped, table, value_weight_rows
from uneven.sqltree import build as s

# Poisson(1) cumulative probabilities F(k) = e^(−1) Σ_{j≤k} 1/j!, k = 0 … 9 (draws above 9 have
# probability 1.1e−7 and count as 10)
POISSON_CDF = tuple(math.exp(-1) * sum(1 / math.factorial(j) for j in range(k + 1)) for k in range(10))


UNIFORM = "uneven_uniform"  # portable marker; each dialect writes it with its engine's hash


def uniform(units: Sequence[exp.Expression], r: exp.Expression, seed: int) -> exp.Expression:
    """u in [0, 1) from the engine's 64-bit hash of (unit, r, seed): the marker function
    ``uneven_uniform(unit, r, seed)``, which the dialect's ``uniform_from_hash`` rule rewrites
    (DuckDB ``hash``, Spark ``xxhash64``, PostgreSQL ``hashtextextended``, SQLite a registered
    function). Another engine's hash gives different, equally valid draws."""
    return exp.Anonymous(this=UNIFORM, expressions=list(units) + [r, exp.Literal.number(seed)])


def poisson_draw(u: exp.Expression) -> exp.Expression:
    ifs = [exp.If(this=s.lt(u.copy(), s.lit(f)), true=s.lit(float(k))) for k, f in enumerate(POISSON_CDF)]
    return exp.Case(ifs=ifs, default=s.lit(float(len(POISSON_CDF))))


class ReplicateContext(RowContext):
    """The rows of one (group, replicate) partition, weighted by w·m (rows drawn zero times are
    dropped, so MIN, MAX and COUNT see the replicate's rows only)."""


    def __init__(self, name: str):
        super().__init__(weighted=True, name=name)


def replicate_numbers(R: int) -> exp.Expression:
    """(VALUES (0), (1), … (R)) AS _uv_reps(_uv_r): replicate 0 is the full sample."""
    return exp.Values(expressions=[exp.Tuple(expressions=[exp.Literal.number(r)]) for r in range(R + 1)],
                      alias=exp.TableAlias(this=exp.to_identifier("_uv_reps", quoted=True),
                                           columns=[exp.to_identifier("_uv_r", quoted=True)]))


def lower_bootstrap_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one bootstrap pass: the rows, their draws per replicate, every call's estimate per
    (group, replicate), then the spread of the replicates' estimates per group."""
    settings = plan.calls[0].settings
    ctx = ReplicateContext(name)
    built = _distinct_builds(plan, ctx)
    unit = settings.get("psu") if settings.get("psu") is not None else settings.get("key")
    rows = _rows_cte(source, plan, unit, name)
    keys = source.key_columns()
    ctes = [rows] + _draw_ctes(keys, plan.trailing is not None, unit, settings, name)
    ctes += _replicate_ctes(ctx, built, keys, name)
    ctes += _spread_ctes(keys, len(built), name)
    out_cols: list[exp.Expression] = []
    results: dict[tuple, exp.Expression] = {}
    for i, (call, _) in enumerate(built, start=1):
        out_cols.append(s.alias(_result(call, i), f"_uv_r{i}"))
        results[call.key] = s.col(f"_uv_r{i}", name)
    ctes.append(cte(grouped(keys, out_cols, f"{name}_rank"), name))
    return ctes, results


def _distinct_builds(plan, ctx: ReplicateContext) -> list[tuple]:
    """Distinct calls and their estimate over one (group, replicate) partition."""
    built, seen = [], set()
    for call in plan.calls:
        if call.key in seen:
            continue
        seen.add(call.key)
        built.append((call, call.measure.build(ctx, call.params)))
    return built


def _rows_cte(source: Source, plan, unit, name: str) -> exp.CTE:
    """Rows: keys, x, w and the resampling unit."""
    x, w, condition = plan.x, plan.trailing, plan.condition
    # x checked (docs/input-policy.md): a NaN or infinite value stops the query naming the group; it was
    # resampled unchecked and gave a number
    columns, cond = value_weight_rows(x, w, condition, weight_name="_uv_w0", keys=source.keys)
    proj = source.key_projections() + columns
    if unit is not None:
        proj.append(s.alias(unit.copy(), "_uv_b"))
    else:
        # no key: identical rows are numbered within (keys, x, w), so a row's draw depends on its
        # values and its place among its duplicates only (one extra partitioning of the rows); the
        # ORDER BY names the value, constant within a partition, since Spark refuses a row_number
        # without one
        part = [k.copy() for k in source.keys] + [x.copy()] + ([w.copy()] if w is not None else [])
        proj.append(s.alias(s.window(exp.RowNumber(), part, [x.copy()]), "_uv_dup"))
    return cte(source.rows(proj, cond), f"{name}_rows")


def _draw_ctes(keys, weighted: bool, unit, settings: dict, name: str) -> list[exp.CTE]:
    """Long form: one row per (row, replicate) — the replicate number is a row dimension, so the SQL
    does not grow with R — with its multiplier m (replicate 0: the full sample, m = 1); then the
    rows drawn at least once."""
    w0 = s.col("_uv_w0") if weighted else s.lit(1.0)
    if unit is not None:
        drawn = [s.col("_uv_b")]
    else:
        drawn = ([s.col("_uv_x")] + ([s.col("_uv_w0")] if weighted else []) + [k.copy() for k in keys]
                 + [s.col("_uv_dup")])
    rr = s.col("_uv_r")
    u = uniform(drawn, rr, settings["seed"])
    m = s.case(exp.EQ(this=rr.copy(), expression=exp.Literal.number(0)), s.lit(1.0), poisson_draw(u))
    base = keys + [s.col("_uv_x")]
    draw = exp.Select(expressions=[k.copy() for k in base] + [rr.copy(), s.alias(s.mul(w0, m), "_uv_w")])
    draw = draw.from_(table(f"{name}_rows"), copy=False)
    draw.append("joins", exp.Join(this=replicate_numbers(settings["replicates"]), kind="CROSS"))
    kept = exp.Select(expressions=[exp.Star()]).from_(table(f"{name}_draw"), copy=False).where(
        s.gt(s.col("_uv_w"), s.lit(0.0)), copy=False)
    return [cte(draw, f"{name}_draw"), cte(kept, f"{name}_kept")]


def _replicate_ctes(ctx: ReplicateContext, built: list[tuple], keys, name: str) -> list[exp.CTE]:
    """Rows drawn at least once, sorted by (keys, replicate, x) in ONE window specification, then one
    row per (group, replicate) with every call's estimate."""
    part_keys = keys + [s.col("_uv_r")]
    win = exp.Select(expressions=[k.copy() for k in part_keys] + [s.col("_uv_x"), s.col("_uv_w")]
                     + window_columns(ctx, part_keys)).from_(table(f"{name}_kept"), copy=False)
    ctes = window_ctes(win, ctx, part_keys, name)  # + the relative poverty line's layers (line.py)
    # (grouped() projects the keys, the replicate number among them, before these)
    est_cols = [s.alias(theta, f"_uv_v{i}") for i, (_, theta) in enumerate(built, start=1)]
    ctes.append(cte(grouped(part_keys, est_cols, f"{name}_win"), f"{name}_boot"))
    return ctes


def _spread_ctes(keys, n: int, name: str) -> list[exp.CTE]:
    """The full-sample estimate beside every replicate's (a window over the small table), then each
    replicate estimate's rank, count and mean within its group."""
    rr = s.col("_uv_r")
    long_cols = [k.copy() for k in keys] + [rr.copy()]
    for i in range(1, n + 1):
        full = s.agg_max(s.case(exp.EQ(this=rr.copy(), expression=exp.Literal.number(0)), s.col(f"_uv_v{i}")))
        long_cols += [s.alias(s.window(full, [k.copy() for k in keys]), f"_uv_e{i}"), s.col(f"_uv_v{i}")]
    long = exp.Select(expressions=long_cols).from_(table(f"{name}_boot"), copy=False)
    rank_cols = [k.copy() for k in keys] + [s.col(f"_uv_{c}{i}") for i in range(1, n + 1) for c in "ev"]
    for i in range(1, n + 1):
        v = s.col(f"_uv_v{i}")
        rank_cols += [s.alias(s.window(exp.RowNumber(), [k.copy() for k in keys], [v.copy()]), f"_uv_rk{i}"),
                      s.alias(s.window(exp.Count(this=v.copy()), [k.copy() for k in keys]), f"_uv_nv{i}"),
                      s.alias(s.window(exp.Avg(this=v.copy()), [k.copy() for k in keys]), f"_uv_av{i}")]
    replicas = exp.Select(expressions=rank_cols).from_(table(f"{name}_long"), copy=False).where(
        s.gt(rr.copy(), exp.Literal.number(0)), copy=False)
    return [cte(long, f"{name}_long"), cte(replicas, f"{name}_rank")]


def _result(call, i: int) -> exp.Expression:
    v, n = s.col(f"_uv_v{i}"), s.cast_double(s.agg_max(s.col(f"_uv_nv{i}")))
    sd = s.sqrt(s.div(s.agg_sum(s.power(s.sub(v, s.col(f"_uv_av{i}")), s.lit(2.0))), s.sub(n, s.lit(1.0))))
    se = s.case(s.gt(n.copy(), s.lit(1.0)), sd)
    role = call.measure.name.rsplit("_", 1)[-1]
    if role == "se":
        return se
    level = call.settings.get("level", 0.95)
    if call.settings.get("interval", "percentile") == "normal":
        est, z = s.agg_max(s.col(f"_uv_e{i}")), s.lit(critical_value(level))
        return s.sub(est, s.mul(z, se)) if role == "lo" else s.add(est, s.mul(z, se))
    q = (1.0 - level) / 2.0 if role == "lo" else (1.0 + level) / 2.0
    # inverted-CDF quantile of the replicate estimates: the smallest with rank ≥ q · (number of values)
    reached = s.and_(s.not_null(v.copy()), s.gte(s.cast_double(s.col(f"_uv_rk{i}")),
                                                 s.mul(s.lit(q), s.cast_double(s.col(f"_uv_nv{i}")))))
    return s.agg_min(s.case(reached, v.copy()))


# the registry's entry (passes/registry.py)
KIND = PassKind.BOOTSTRAP
PREFIX = "bs"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_bootstrap_pass(source, main, plan, name)
