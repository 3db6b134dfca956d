"""Linearized pass: standard errors from influence functions, with optional strata and PSUs.

A measure's linearization (catalog/uncertainty.py) is its estimate θ and its per-row score
u_k = w_k·z_k written as Σ_j c_j·t_kj: row-level terms t_kj (window columns of the sorted rows)
with coefficients c_j built from group aggregates (θ, W, T, quantiles …). The with-replacement
variance of the weighted total of z is a quadratic form in the c_j:

    v = Σ_h n_h/(n_h−1) · Σ_c (U_hc − Ū_h)²,   U_hc = Σ_{k in PSU c of stratum h} u_k
      = Σ_j Σ_l c_j c_l · K_jl,   K_jl = Σ_h (n_h·Q_hjl − S_hj·S_hl)/(n_h − 1)

with S_hj = Σ_c U_hcj and Q_hjl = Σ_c U_hcj·U_hcl. Every level is a plain GROUP BY, so the pass
is one sort (shared with C and S) and aggregates — no join back to the rows:

    _rows → _win (C, S, m [, W, n]) → [_psu: GROUP BY keys, h, c] → [_str: GROUP BY keys, h]
          → _agg: GROUP BY keys → _coef: θ and the c_j per group → _var: v per group
          → _lin: SE and intervals

Plain measures on the same value, weight and FILTER (gini next to gini_se) ride on the pass too
(plan.share_passes), so asking for an estimate and its SE costs one sort.

Without a PSU every row is its own PSU; without strata there is one stratum. A stratum with one
PSU has no variance estimate: the group's SE is then NULL.
"""

from __future__ import annotations

from collections.abc import Mapping
from statistics import NormalDist

from sqlglot import exp

from uneven.catalog import variance_floor
from uneven.catalog.linearize import Lin
from uneven.catalog.spec import PassKind
from uneven.compiler.passes.rows import Aggregates, RowContext, lower_rows
from uneven.compiler.passes.source import Source, cte, grouped, table
from uneven.sqltree import build as s


class Terms:
    """Distinct row terms of the pass (``_uv_u{j}``) and the pairs whose cross sums are needed."""

    def __init__(self):
        self.items: dict[str, tuple[str, exp.Expression]] = {}
        self.pairs: list[tuple[int, int]] = []

    def index(self, term: exp.Expression) -> int:
        key = term.sql("duckdb")
        if key not in self.items:
            self.items[key] = (f"_uv_u{len(self.items) + 1}", term)
        return list(self.items).index(key) + 1

    def vector(self, terms) -> dict[int, exp.Expression]:
        """{term index: coefficient} for a list of (term, coefficient), registering the pairs."""
        out: dict[int, exp.Expression] = {}
        for term, coef in terms:
            j = self.index(term)
            out[j] = s.add(out[j], coef) if j in out else coef
        for j in out:
            for k in out:
                if j <= k and (j, k) not in self.pairs:
                    self.pairs.append((j, k))
        return out


def _sum_name(j: int) -> str:
    return f"_uv_su{j}"


def _cross_name(j: int, k: int) -> str:
    return f"_uv_q{j}_{k}"


def _stats(terms: Terms, unit_cols: Mapping[int, exp.Expression]) -> list[exp.Expression]:
    """n, Σ U_j and Σ U_j·U_l over the units (rows or PSUs) of a stratum or group."""
    out: list[exp.Expression] = [s.alias(s.agg_count_star(), "_uv_nu")]
    out += [s.alias(s.agg_sum(unit_cols[j].copy()), _sum_name(j)) for j in unit_cols]
    out += [s.alias(s.agg_sum(s.mul(unit_cols[j].copy(), unit_cols[k].copy())), _cross_name(j, k))
            for j, k in terms.pairs]
    return out


def _per_unit(num: exp.Expression, n: exp.Expression) -> exp.Expression:
    """num/(n − 1) over ``n`` units, NULL for one unit (``n`` owned, placed twice: copied once)."""
    return s.case(s.gt(n.copy(), s.lit(1)), s.div(num, s.sub(s.cast_double(n), s.lit(1.0))))


def _k_between(j: int, k: int, n: exp.Expression) -> exp.Expression:
    """(n·Q_jk − S_j·S_k)/(n − 1): the centred cross product of one stratum's units."""
    num = s.sub(s.mul(s.cast_double(n.copy()), s.col(_cross_name(j, k))),
                s.mul(s.col(_sum_name(j)), s.col(_sum_name(k))))
    return _per_unit(num, n)


def variance(coefs: dict[int, exp.Expression], K) -> exp.Expression:
    """Σ_j Σ_l c_j c_l K_jl from the upper triangle (K(j, l) for j ≤ l)."""
    total = None
    for j in coefs:
        for k in coefs:
            if j > k:
                continue
            part = s.mul(s.mul(coefs[j].copy(), coefs[k].copy()), K(j, k))
            if j < k:
                part = s.mul(s.lit(2.0), part)
            total = part if total is None else s.add(total, part)
    return total if total is not None else s.lit(0.0)


def critical_value(level: float) -> float:
    """z with P(|Z| ≤ z) = level for a standard normal Z."""
    return NormalDist().inv_cdf(0.5 + level / 2.0)


def output(role: str, estimate: exp.Expression, se: exp.Expression, level: float) -> exp.Expression:
    if role == "se":
        return se
    z = s.mul(s.lit(critical_value(level)), se)
    return s.sub(estimate, z) if role == "lo" else s.add(estimate, z)


def lower_linearized_pass(source: Source, main, plan, name: str) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one linearized pass and, for each call key, the column holding its result."""
    ctx = RowContext(weighted=plan.trailing is not None, name=name)
    ctx.row_mean = True  # log and power measures and their scores in r = x/μ (catalog/linearize.py)
    strata, psu = plan.options.get("strata"), plan.options.get("psu")
    aggs, terms = Aggregates(), Terms()
    specs = _call_specs(plan, ctx, terms)
    ctes = lower_rows(source, plan, name, ctx, _design_columns(strata, psu))
    keys = source.key_columns()
    row_terms = {terms.index(t): t for _, t in terms.items.values()}
    equal, lifted = _lift_estimates(specs, ctx, aggs, row_terms, design=(strata, psu))
    ctes.append(_terms_cte(row_terms, name))
    level_ctes, K, enough, floor = _variance_levels(terms, row_terms, aggs, keys, name, design=(strata, psu))
    ctes += level_ctes
    named, variances, columns, results = _result_columns(lifted, equal, K, enough, floor, name)
    return ctes + _output_ctes(named, variances, columns, keys, name), results


def _call_specs(plan, ctx: RowContext, terms: Terms) -> list[tuple]:
    """(call, its linearization, its output role, its coefficient vector) for every call of the pass."""
    specs = []
    for call in plan.calls:
        if call.measure.pass_for(plan.trailing is not None) == "linearized":
            lin, role = call.measure.build(ctx, call.params)
            coefs = terms.vector(lin.terms) if lin.defined else None
        else:  # a plain measure on the same rows (see plan.share_passes): its estimate only
            lin, role, coefs = Lin(call.measure.build(ctx, call.params)), None, None
        specs.append((call, lin, role, coefs))
    return specs


def _design_columns(strata, psu) -> dict[str, exp.Expression]:
    """The design's row columns: the stratum and the primary sampling unit, where given."""
    extra = {}
    if strata is not None:
        extra["_uv_h"] = strata
    if psu is not None:
        extra["_uv_psu"] = psu
    return extra


def _lift_estimates(specs, ctx: RowContext, aggs: Aggregates, row_terms: dict, design: tuple) -> tuple:
    """(the every-value-equal flag, each call with its estimate and coefficients lifted to columns).

    Estimates and coefficients read the group's aggregates: lift them into columns first. The group
    CTE's own sums of the row terms (over rows, or over PSUs without strata) and its row count
    (without a design) serve the estimates too (e.g. Σ w, Σ w·x and the Gini's rank term)."""
    strata, psu = design
    if strata is None:
        for j, t in row_terms.items():
            aggs.reuse(s.agg_sum(t), _sum_name(j))
        if psu is None:
            aggs.reuse(s.agg_count_star(), "_uv_nu")
    # every value of the group equal: each measure is then a constant of the weights, so each
    # score is 0 and so is the variance, exactly (the quadratic form below would leave the
    # rounding of terms that cancel across j, e.g. w/W against w·x/T)
    equal = aggs.lift(exp.EQ(this=ctx.min_x, expression=s.agg_max(ctx.x)))
    lifted = []
    for call, lin, role, coefs in specs:
        est = aggs.lift(lin.estimate)
        lifted.append((call, est, role, {j: aggs.lift(c) for j, c in coefs.items()} if coefs is not None else None))
    return equal, lifted


def _terms_cte(row_terms: dict, name: str) -> exp.CTE:
    """The row terms once per row (_terms), so the sums and cross sums read columns."""
    term_cols = [s.alias(t.copy(), f"_uv_t{j}") for j, t in row_terms.items()]
    return cte(exp.Select(expressions=[exp.Star()] + term_cols).from_(table(f"{name}_win"), copy=False),
               f"{name}_terms")


def _variance_levels(terms: Terms, row_terms: dict, aggs: Aggregates, keys, name: str, design: tuple) -> tuple:
    """The CTEs from the rows (or PSUs, or strata) up to one row per group (_agg), K(j, k) the
    between-unit covariance of terms j and k there, and the condition of enough units for a variance."""
    strata, psu = design
    ctes = []
    row_cols = {j: s.col(f"_uv_t{j}") for j in row_terms}
    strata_keys = [s.col("_uv_h")] if strata is not None else []
    if psu is not None:
        # one row per PSU: the sums of the terms over its rows
        units = [s.alias(s.agg_sum(c.copy()), f"_uv_U{j}") for j, c in row_cols.items()]
        ctes.append(cte(grouped(keys + strata_keys + [s.col("_uv_psu")], units + aggs.partial(), f"{name}_terms"),
                        f"{name}_psu"))
        below, unit_cols, level_aggs = f"{name}_psu", {j: s.col(f"_uv_U{j}") for j in row_terms}, aggs.combined
    else:
        below, unit_cols, level_aggs = f"{name}_terms", row_cols, aggs.partial
    if strata is not None:
        ctes.append(cte(grouped(keys + strata_keys, _stats(terms, unit_cols) + level_aggs(), below), f"{name}_str"))
        k_cols = [s.alias(s.agg_sum(_k_between(j, k, s.col("_uv_nu"))), f"_uv_K{j}_{k}") for j, k in terms.pairs]
        fewest = [s.alias(s.agg_min(s.col("_uv_nu")), "_uv_fewest"), s.alias(s.agg_sum(s.col("_uv_nu")), "_uv_units")]
        diag = [s.alias(s.agg_sum(_diag_bound(j, s.col("_uv_nu"))), f"_uv_A{j}") for j in row_terms]
        diag += [s.alias(s.agg_sum(s.absval(s.col(_sum_name(j)))), f"_uv_sa{j}") for j in row_terms]
        ctes.append(cte(grouped(keys, k_cols + diag + fewest + aggs.combined(), f"{name}_str"), f"{name}_agg"))
        floor = Floor({}, s.col("_uv_units"), "_uv_sa")
        return ctes, (lambda j, k: s.col(f"_uv_K{j}_{k}")), s.gt(s.col("_uv_fewest"), s.lit(1)), floor
    ctes.append(cte(grouped(keys, _stats(terms, unit_cols) + level_aggs(), below), f"{name}_agg"))
    floor = Floor({j: _diag_bound(j, s.col("_uv_nu")) for j in row_terms}, s.col("_uv_nu"), "_uv_su")
    return ctes, (lambda j, k: _k_between(j, k, s.col("_uv_nu"))), s.gt(s.col("_uv_nu"), s.lit(1)), floor


class Floor:
    """What the rounding bound of a group's variance reads (catalog/variance_floor.py): A_j (``_uv_A{j}``),
    the bound on the j-th diagonal of K, and the number of units summed; ``columns`` the A_j the _coef
    CTE forms (without strata: from _agg's sums; with strata _agg has them); ``sums`` the prefix of the
    columns whose 0 (with A_j's) marks a term that is 0 on every row: Σ t_j, or Σ_h |S_hj| with strata."""

    def __init__(self, columns: dict[int, exp.Expression], units: exp.Expression, sums: str):
        self.columns, self.units, self.sums = columns, units, sums

    def root_bound(self, coefs: dict[int, exp.Expression]) -> exp.Expression:
        return variance_floor.sql_root_bound([c.copy() for c in coefs.values()], [s.col(f"_uv_A{j}") for j in coefs])

    def negligible(self, v: exp.Expression, root: exp.Expression, terms: int) -> exp.Expression:
        return variance_floor.sql_within(v, s.mul(root, root.copy()), terms, self.units.copy())

    def lost(self, root: exp.Expression, coefs: dict[int, exp.Expression]) -> exp.Expression:
        present = [s.or_(s.neq(s.col(f"_uv_A{j}"), s.lit(0.0)), s.neq(s.col(f"{self.sums}{j}"), s.lit(0.0)))
                   for j in coefs]
        return variance_floor.sql_lost(root, [c.copy() for c in coefs.values()], present)


def _diag_bound(j: int, n: exp.Expression) -> exp.Expression:
    """n·Q_jj/(n − 1): |n·Q_jl| and |S_j·S_l| are each at most n·sqrt(Q_jj·Q_ll) (Cauchy–Schwarz), the
    two parts whose rounding k counts twice (catalog/variance_floor.py)."""
    return _per_unit(s.mul(s.cast_double(n.copy()), s.col(_cross_name(j, j))), n)


def _result_columns(lifted, equal, K, enough, floor: Floor, name: str) -> tuple:
    """Estimates and coefficients once per group (_coef), the variances over them (_var), then the
    standard errors: NULL where the variance is (no density at a quantile: a NULL coefficient),
    exactly 0 where the values are equal or the variance is within its rounding of 0 (or below it)."""
    named: list[exp.Expression] = []
    variances: list[exp.Expression] = []
    columns: list[exp.Expression] = []
    results: dict[tuple, exp.Column] = {}
    named += [s.alias(a, f"_uv_A{j}") for j, a in floor.columns.items()]
    for i, (call, est, role, coefs) in enumerate(lifted, start=1):
        named.append(s.alias(est, f"_uv_e{i}"))
        named += [s.alias(c, f"_uv_c{i}_{j}") for j, c in (coefs or {}).items()]
        e = s.col(f"_uv_e{i}")
        value: exp.Expression
        if role is None:
            value = e
        elif coefs is None:
            value = output(role, e, exp.Cast(this=exp.Null(), to=s.DOUBLE.copy()), 0.95)
        else:
            variances.append(s.alias(variance({j: s.col(f"_uv_c{i}_{j}") for j in coefs}, K), f"_uv_v{i}"))
            variances.append(s.alias(floor.root_bound({j: s.col(f"_uv_c{i}_{j}") for j in coefs}), f"_uv_bnd{i}"))
            v = s.col(f"_uv_v{i}")
            negligible = floor.negligible(v.copy(), s.col(f"_uv_bnd{i}"), len(coefs))
            lost = floor.lost(s.col(f"_uv_bnd{i}"), {j: s.col(f"_uv_c{i}_{j}") for j in coefs})
            value = output(role, e.copy(), _standard_error(e, v, equal, enough, negligible, lost),
                           call.settings.get("level", 0.95))
        col = f"_uv_r{len(columns) + 1}"
        columns.append(s.alias(value, col))
        results[call.key] = s.col(col, name)
    return named, variances, columns, results


def _standard_error(e: exp.Expression, v: exp.Expression, equal, enough, negligible, lost) -> exp.Expression:
    # every value equal: 0; the terms below the scale where their cross sums keep digits: NULL; v ≤ k·eps·B
    # (below 0 too): within the rounding of an exactly vanishing form, 0 (variance_floor.py)
    known = s.and_(s.not_null(e.copy()), enough.copy(), s.not_null(v.copy()))
    inner = exp.Case(ifs=[exp.If(this=s.paren(equal.copy()), true=s.lit(0.0)),
                          exp.If(this=lost, true=exp.Cast(this=exp.Null(), to=s.DOUBLE.copy())),
                          exp.If(this=negligible, true=s.lit(0.0))], default=s.sqrt(v))
    return s.case(known, inner)


def _output_ctes(named, variances, columns, keys, name: str) -> list[exp.CTE]:
    coef = exp.Select(expressions=[exp.Star()] + named).from_(table(f"{name}_agg"), copy=False)
    ctes = [cte(coef, f"{name}_coef")]
    below = f"{name}_coef"
    if variances:
        var = exp.Select(expressions=[exp.Star()] + variances).from_(table(below), copy=False)
        ctes.append(cte(var, f"{name}_var"))
        below = f"{name}_var"
    final = exp.Select(expressions=[k.copy() for k in keys] + columns).from_(table(below), copy=False)
    ctes.append(cte(final, name))
    return ctes


def can_share(call) -> bool:
    """Whether a plain measure call can be computed on a linearized pass (its builder needs only the
    sorted rows' columns and aggregates: no Lorenz grid, no centred mean, no entity)."""
    return call.measure.name in SHARED


SHARED = {"gini", "gini_corrected", "lorenz", "generalized_lorenz", "bottom_share", "top_share", "palma",
          "s80s20", "quantile_w", "percentile_ratio", "theil", "mld", "ge", "atkinson"}


# the registry's entry (passes/registry.py)
KIND = PassKind.LINEARIZED
PREFIX = "lin"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_linearized_pass(source, main, plan, name)
