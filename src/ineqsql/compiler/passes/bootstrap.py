"""Bootstrap pass: R Poisson replicate weights drawn in the database, one sort for all replicates.

    _rows  keys, x, w, b (the resampling unit: the PSU, the key column, or the fallback key)
    _unif  … , u_1 … u_R           u_r = hash(b, r, seed) / 2^64
    _draw  … , m_1 … m_R           m_r ~ Poisson(1): the inverse-CDF ladder on u_r
    _win   … , C_r = running Σ w·m_r for every r, in ONE window specification (one sort)
    _boot  keys, θ (full sample) and θ_1 … θ_R per call            (GROUP BY keys)
    _long  keys, r, θ_r             (CROSS JOIN the replicate numbers: one row per replicate)
    _rank  … , rank of θ_r, number of replicates with a value, their mean (small windows)
    _bs    keys, SE = sd of θ_r; percentile ends = inverted-CDF quantiles of θ_r; normal ends θ ± z·SE

Every replicate estimate is built by the catalog's own builder against a context whose weight is
w·m_r and whose aggregates skip rows drawn zero times, so any ordered or moment measure works.
The draws depend only on (b, r, seed) and the engine's hash function: rerunning on the same engine
gives the same replicates; another engine's hash gives different (equally valid) ones.
"""

from __future__ import annotations

import math

from sqlglot import exp

from ineqsql.compiler import sqlx as s
from ineqsql.compiler.passes.linearized import critical_value
from ineqsql.compiler.passes.rows import RowContext, window_columns
from ineqsql.compiler.passes.source import Source, checked_weight, cte, grouped, table, weight_label

# Poisson(1) cumulative probabilities F(k) = e^(−1) Σ_{j≤k} 1/j!, k = 0 … 9 (draws above 9 have
# probability 1.1e−7 and count as 10)
POISSON_CDF = tuple(math.exp(-1) * sum(1 / math.factorial(j) for j in range(k + 1)) for k in range(10))
TWO_64 = 18446744073709551616.0


def uniform(unit: exp.Expression, r: int, seed: int) -> exp.Expression:
    """u in [0, 1) from the engine's 64-bit hash of (unit, r, seed) (DuckDB ``hash``: UBIGINT)."""
    h = exp.Anonymous(this="hash", expressions=[unit, exp.Literal.number(r), exp.Literal.number(seed)])
    return s.div(s.cast_double(h), s.lit(TWO_64))


def poisson_draw(u: exp.Expression) -> exp.Expression:
    ifs = [exp.If(this=s.lt(u.copy(), s.lit(f)), true=s.lit(float(k))) for k, f in enumerate(POISSON_CDF)]
    return exp.Case(ifs=ifs, default=s.lit(float(len(POISSON_CDF))))


class ReplicateContext(RowContext):
    """The sorted rows seen with replicate weights w·m_r (r = 0: the full sample, m = 1)."""

    def __init__(self, weighted: bool, name: str, r: int):
        super().__init__(weighted=True, name=name)
        self.base_weighted, self.r = weighted, r

    @property
    def w(self):
        base = s.col("_iq_w") if self.base_weighted else None
        if self.r == 0:
            return base if base is not None else s.lit(1.0)
        m = s.col(f"_iq_m{self.r}")
        return s.mul(base, m) if base is not None else m

    def _suffix(self, name):
        return s.col(name if self.r == 0 else f"{name}_{self.r}")

    @property
    def c(self):
        self.used.add("c")
        return self._suffix("_iq_c")

    @property
    def W_row(self):
        self.used.add("wt")
        return self._suffix("_iq_wt")

    @property
    def n_row(self):
        self.used.add("nt")
        return self._suffix("_iq_nt")

    @property
    def s(self):
        raise NotImplementedError("the running Σ w·x is not needed by any estimate")

    @property
    def W(self):
        return s.agg_sum(self.w)

    def drawn(self, expr: exp.Expression) -> exp.Expression:
        """Aggregates over the rows drawn at least once (m_r > 0): a MIN, MAX or COUNT must not see
        a row the replicate left out (sums already weight it by zero)."""
        if self.r == 0:
            return expr
        cond = s.gt(s.col(f"_iq_m{self.r}"), s.lit(0.0))

        def fn(node):
            if isinstance(node, (exp.Min, exp.Max)):
                return type(node)(this=s.case(cond.copy(), node.this.copy()))
            if isinstance(node, exp.Count):
                return exp.Count(this=s.case(cond.copy(), s.lit(1)))
            return node
        return expr.transform(fn)


def _replicate_windows(contexts: list[ReplicateContext], keys) -> list[exp.Expression]:
    """C_r, W_r and n_r for every replicate: the running sums share one window specification."""
    cols = []
    for ctx in contexts:
        for e in window_columns(_WindowView(ctx), keys):
            if ctx.r and e.alias in ("_iq_m",):
                continue  # the group minimum does not depend on the replicate
            if ctx.r:
                e = s.alias(e.this, f"{e.alias}_{ctx.r}")
            cols.append(e)
    return cols


class _WindowView:
    """What ``window_columns`` needs from a replicate context: its weight and the columns used."""

    def __init__(self, ctx: ReplicateContext):
        self.used = ctx.used - {"s"}
        self.weighted = True
        self.w = ctx.w if (ctx.r or ctx.base_weighted) else s.lit(1.0)
        if ctx.r:
            # n_r: rows drawn at least once
            self.count_of = s.case(s.gt(s.col(f"_iq_m{ctx.r}"), s.lit(0.0)), s.lit(1))


def lower_bootstrap_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    settings = plan.calls[0].settings
    R, seed = settings["replicates"], settings["seed"]
    weighted = plan.trailing is not None
    contexts = [ReplicateContext(weighted, name, r) for r in range(R + 1)]
    built = []  # per distinct call: (call, [θ_0, θ_1 … θ_R])
    seen = set()
    for call in plan.calls:
        if call.key in seen:
            continue
        seen.add(call.key)
        built.append((call, [ctx.drawn(call.measure.build(ctx, call.params)) for ctx in contexts]))

    # rows: keys, x, w and the resampling unit
    x, w, condition = plan.x, plan.trailing, plan.condition
    proj = source.key_projections() + [s.alias(s.cast_double(x.copy()), "_iq_x")]
    cond = s.and_(s.paren(condition.copy()) if condition is not None else None, s.not_null(x.copy()))
    if w is not None:
        cw = checked_weight(w, weight_label(w))
        proj.append(s.alias(cw, "_iq_w"))
        cond = s.and_(cond, s.gt(cw.copy(), s.lit(0.0)))
    unit = settings.get("psu") if settings.get("psu") is not None else settings.get("key")
    if unit is not None:
        proj.append(s.alias(unit.copy(), "_iq_b"))
    else:
        # no key: identical rows are numbered within (keys, x, w), so a row's draw depends on its
        # values and its place among its duplicates only (one extra partitioning of the rows)
        part = [k.copy() for k in source.keys] + [x.copy()] + ([w.copy()] if w is not None else [])
        proj.append(s.alias(s.window(exp.RowNumber(), part), "_iq_dup"))
    ctes = [cte(source.rows(proj, cond), f"{name}_rows")]
    keys = source.key_columns()
    base = keys + [s.col("_iq_x")] + ([s.col("_iq_w")] if weighted else [])
    if unit is not None:
        unit_key = s.col("_iq_b")
    else:
        parts = [s.col("_iq_x")] + ([s.col("_iq_w")] if weighted else []) + [s.col("_iq_dup")] + [k.copy() for k in keys]
        unit_key = exp.Anonymous(this="hash", expressions=parts)
    # the hash once per replicate (_unif), then its Poisson draw (_draw): the ladder reads a column
    unif = [s.alias(uniform(unit_key.copy(), r, seed), f"_iq_u{r}") for r in range(1, R + 1)]
    ctes.append(cte(exp.Select(expressions=[k.copy() for k in base] + unif).from_(table(f"{name}_rows"), copy=False),
                    f"{name}_unif"))
    draws = [s.alias(poisson_draw(s.col(f"_iq_u{r}")), f"_iq_m{r}") for r in range(1, R + 1)]
    ctes.append(cte(exp.Select(expressions=[k.copy() for k in base] + draws).from_(table(f"{name}_unif"), copy=False),
                    f"{name}_draw"))
    mult = [s.col(f"_iq_m{r}") for r in range(1, R + 1)]
    win_cols = _replicate_windows(contexts, keys)
    ctes.append(cte(exp.Select(expressions=[k.copy() for k in base] + mult + win_cols).from_(table(f"{name}_draw"), copy=False),
                    f"{name}_win"))

    # one row per group: the full-sample estimate and every replicate's
    est_cols = []
    for i, (call, thetas) in enumerate(built, start=1):
        est_cols += [s.alias(t, f"_iq_b{i}_{r}") for r, t in enumerate(thetas)]
    ctes.append(cte(grouped(keys, est_cols, f"{name}_win"), f"{name}_boot"))

    # long form: one row per (group, replicate)
    reps = exp.Values(expressions=[exp.Tuple(expressions=[exp.Literal.number(r)]) for r in range(1, R + 1)],
                      alias=exp.TableAlias(this=exp.to_identifier("_iq_reps", quoted=True),
                                           columns=[exp.to_identifier("_iq_r", quoted=True)]))
    long_cols = [k.copy() for k in keys]
    for i, _ in enumerate(built, start=1):
        pick = exp.Case(ifs=[exp.If(this=exp.EQ(this=s.col("_iq_r"), expression=exp.Literal.number(r)),
                                    true=s.col(f"_iq_b{i}_{r}")) for r in range(1, R + 1)])
        long_cols += [s.alias(s.col(f"_iq_b{i}_0"), f"_iq_e{i}"), s.alias(pick, f"_iq_v{i}")]
    long = exp.Select(expressions=long_cols).from_(table(f"{name}_boot"), copy=False)
    long.append("joins", exp.Join(this=reps, kind="CROSS"))
    ctes.append(cte(long, f"{name}_long"))

    rank_cols = [k.copy() for k in keys] + [s.col(f"_iq_{c}{i}") for i in range(1, len(built) + 1) for c in "ev"]
    for i in range(1, len(built) + 1):
        v = s.col(f"_iq_v{i}")
        rank_cols += [s.alias(s.window(exp.RowNumber(), [k.copy() for k in keys], [v.copy()]), f"_iq_rk{i}"),
                      s.alias(s.window(exp.Count(this=v.copy()), [k.copy() for k in keys]), f"_iq_nv{i}"),
                      s.alias(s.window(exp.Avg(this=v.copy()), [k.copy() for k in keys]), f"_iq_av{i}")]
    ctes.append(cte(exp.Select(expressions=rank_cols).from_(table(f"{name}_long"), copy=False), f"{name}_rank"))

    out_cols, results = [], {}
    for i, (call, _) in enumerate(built, start=1):
        out_cols.append(s.alias(_result(call, i), f"_iq_r{i}"))
        results[call.key] = s.col(f"_iq_r{i}", name)
    ctes.append(cte(grouped(keys, out_cols, f"{name}_rank"), name))
    for call in plan.calls:  # repeated calls read the column of their first occurrence
        if call.key not in results:
            results[call.key] = results[next(c.key for c, _ in built if c.key == call.key)]
    return ctes, results


def _result(call, i: int) -> exp.Expression:
    v, n = s.col(f"_iq_v{i}"), s.cast_double(s.agg_max(s.col(f"_iq_nv{i}")))
    sd = s.sqrt(s.div(s.agg_sum(s.power(s.sub(v, s.col(f"_iq_av{i}")), s.lit(2.0))), s.sub(n, s.lit(1.0))))
    se = s.case(s.gt(n.copy(), s.lit(1.0)), sd)
    role = call.measure.name.rsplit("_", 1)[-1]
    if role == "se":
        return se
    level = call.settings.get("level", 0.95)
    if call.settings.get("interval", "percentile") == "normal":
        est, z = s.agg_max(s.col(f"_iq_e{i}")), s.lit(critical_value(level))
        return s.sub(est, s.mul(z, se)) if role == "lo" else s.add(est, s.mul(z, se))
    q = (1.0 - level) / 2.0 if role == "lo" else (1.0 + level) / 2.0
    # inverted-CDF quantile of the replicate estimates: the smallest with rank ≥ q · (number of values)
    reached = s.and_(s.not_null(v.copy()), s.gte(s.cast_double(s.col(f"_iq_rk{i}")),
                                                 s.mul(s.lit(q), s.cast_double(s.col(f"_iq_nv{i}")))))
    return s.agg_min(s.case(reached, v.copy()))
