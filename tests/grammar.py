"""A seeded generator of query shapes drawn from the expression grammar analysts write.

Every shape is one ``SELECT`` over the test tables (``survey``, ``rough`` and the small dimension
table ``dim``, see ``test_query_shapes.py``) calling one or more measures. The grammar covers:

- conditions: AND / OR / NOT nested at every position and written with or without parentheses (the
  text means what the engine's precedence makes of it; compiler and oracle read the same text),
  comparisons, IN lists, IN / NOT IN subqueries, BETWEEN, LIKE, IS [NOT] DISTINCT FROM,
  IS [NOT] NULL, CASE, COALESCE, NULLIF;
- numbers: arithmetic of mixed precedence, unary minus, CASE, COALESCE, NULLIF, CAST, abs;
- places: WHERE, FILTER (WHERE …) on measures and ordinary aggregates, HAVING, join conditions,
  measure value and weight (or entity) arguments, grouping expressions, constant parameters;
- sources: a table, a filtering subquery, UNION ALL, chains of CTEs (each reading the one before),
  joins with ``dim`` (inner and left, ON with AND/OR);
- windows over measure results (in the same SELECT and over a subquery of it), ordinary
  aggregates beside measures, GROUP BY expressions / aliases / positions / ALL, ORDER BY, LIMIT.

A shape is a ``Shape`` (structured, so the metamorphic checks can rewrite one part) whose
``sql()`` is the query text. ``Grammar(rng, features)`` draws them; ``features`` switches off what
one engine cannot be compared on (see ``ENGINE_FEATURES``) and ``wide_params`` widens the constant
parameter forms to those whose meaning depends on constant folding (casts to INTEGER, integer
division).

Forms kept out on purpose (each differs between engines by definition, not by a compiler fault):
division by a value that can be 0 (DuckDB gives inf, PostgreSQL raises), CAST of a fractional value
to INTEGER in data expressions (engines round differently), ``%`` on fractional values, string
ordering (collations differ) and case-changing functions on non-ASCII text (SQLite folds ASCII
only). LIKE patterns use letters that occur in one case only in the data, since SQLite's LIKE
ignores ASCII case.
"""

from __future__ import annotations

import contextlib
import dataclasses
import random
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd

# constant parameter forms, by kind; every one is exact and means the same on every engine
PARAMS = {
    "fraction": ["0.1", "0.25", "0.5", "0.9", "0.1 + 0.2", "0.5 * 0.5", "(0.4)", "CAST(0.25 AS DOUBLE)",
                 "1.0 / 4", "0.3 - 0.1", "0.75"],
    "alpha": ["0", "1", "2", "-1", "0.5", "1 + 1", "CAST(2 AS DOUBLE)", "-0.5"],
    "eps": ["0", "0.5", "1", "2", "1.5", "0.25 + 0.25", "CAST(1 AS DOUBLE)"],
    "count": ["1", "2", "3", "1 + 1"],
    # poverty lines: a fraction of the median in (0, 1], a poverty aversion of 0, 1 or 2, an absolute
    # line above 0 (on the scale of the values: 42.5 is a tied value of ``rough``, below_* is strict)
    "frac": ["0.6", "0.5", "0.4", "0.5 + 0.1", "CAST(0.6 AS DOUBLE)", "(0.7)", "1.2 / 2", "1"],
    "povalpha": ["0", "1", "2", "1 + 1", "CAST(2 AS DOUBLE)", "0.0", "2 - 1"],
    "line": ["15000", "25000.5", "42.5", "3", "1e4", "2000 + 500", "CAST(30000 AS DOUBLE)", "0.5 * 40000"],
    # bounds of a bounded outcome (concentration_erreygers): wide, or cutting the values
    "blo": ["-1e9", "0", "-1 * 1000"], "bhi": ["1e12", "50000", "CAST(1e9 AS DOUBLE)"],
}
# forms whose value depends on how constants are folded (integer division, casts to INTEGER), drawn by
# default: compiled SQL and oracle agree on them since constants are evaluated the engine's way
WIDE_PARAMS = {
    "fraction": ["1/4", "CAST(0.5 AS INTEGER)", "CAST(0.4 AS INTEGER)", "2 * 0.1", "1/2"],
    "alpha": ["CAST(1.6 AS INTEGER)", "4/2"],
    "eps": ["CAST(0.6 AS INTEGER)", "3/2"],
    "count": ["CAST(2.4 AS INTEGER)", "4/2"],
    "frac": ["3/5", "CAST(1.4 AS INTEGER)"],
    "povalpha": ["CAST(1.6 AS INTEGER)", "4/2", "CAST(0.4 AS INTEGER)"],
    "line": ["CAST(25000.6 AS INTEGER)", "50000/4"],
}
# (name, parameter kinds, trailing argument: weight / entity)
MEASURES = [
    ("gini", [], "weight"), ("gini_corrected", [], "weight"), ("lorenz", ["fraction"], "weight"),
    ("generalized_lorenz", ["fraction"], "weight"), ("bottom_share", ["fraction"], "weight"),
    ("top_share", ["fraction"], "weight"), ("palma", [], "weight"), ("s80s20", [], "weight"),
    ("quantile_w", ["fraction"], "weight"), ("percentile_ratio", ["hi", "lo"], "weight"),
    ("theil", [], "weight"), ("mld", [], "weight"), ("ge", ["alpha"], "weight"),
    ("atkinson", ["eps"], "weight"), ("cv", [], "weight"), ("hoover", [], "weight"),
    ("hhi", [], "entity"), ("cr", ["count"], "entity"),
    ("below_line_share", ["frac"], "weight"), ("median_gap", ["frac"], "weight"),
    ("fgt_relative", ["povalpha", "frac"], "weight"), ("fgt", ["povalpha", "line"], "weight"),
    ("wolfson", [], "weight"),
    # the ranked pass: the column argument is a second value (the ranking variable, or income)
    ("concentration", ["column"], "weight"), ("kakwani", ["column"], "weight"),
    ("reynolds_smolensky", ["column"], "weight"), ("concentration_erreygers", ["column", "blo", "bhi"], "weight"),
]
# standard errors, on with se_measures (UNEVEN_FUZZ_SE=1). Off by default for a known difference:
# the reference raises (TypeError) instead of giving NULL where the Gini is undefined (all weights 0,
# or a total <= 0). (The weighted SE of equal values is exactly 0 now; the reference gives 0 or ~1e-17.)
SE_MEASURES = [("gini_se", [], "weight"), ("theil_se", [], "weight"), ("top_share_se", ["fraction"], "weight"),
               ("gini_ci_hi", [], "weight"),
               # the cut-based errors and intervals the stream plan serves too (catalog/kernels_se.py)
               ("lorenz_se", ["fraction"], "weight"), ("generalized_lorenz_ci_lo", ["fraction"], "weight"),
               ("palma_se", [], "weight"), ("quantile_w_se", ["fraction"], "weight"),
               ("percentile_ratio_ci_hi", ["hi", "lo"], "weight"), ("wolfson_se", [], "weight"),
               # the moment errors the stream serves beside those (catalog/kernels_se_moment.py)
               ("mld_ci_lo", [], "weight"), ("ge_se", ["alpha"], "weight"), ("atkinson_se", ["eps"], "weight"),
               ("fgt_se", ["povalpha", "line"], "weight")]
# a survey design on a standard error (strata := …, psu := …), drawn on half of the SE calls: text,
# integer and expression columns, NULLs among them (a NULL stratum or PSU is a value of its own)
DESIGN_COLUMNS = ["t.province", "t.hh_size", "t.year", "t.hh_size % 3", "COALESCE(t.province, 'none')",
                  "t.hh_id % 7", "t.hh_id % 40", "CASE WHEN t.gross > 1000 THEN 'a' ELSE 'b' END"]
SE_NAMES = {m[0] for m in SE_MEASURES}
RATIOS = [("0.9", "0.1"), ("0.8", "0.2"), ("0.75", "0.25"), ("0.5 + 0.4", "0.1")]

MAIN_NUM = ["gross", "disposable", "weight"]
MAIN_INT = ["hh_size", "year", "hh_id"]
PROVINCES = ["'North'", "'South'", "'Bronquivet'", "'Abrazzle'", "'Dravquinth'", "'Évrazquelle'", "'Cuzzlemoor'", "'Nowhere'"]
LIKES = ["'B%'", "'%zz%'", "'%o%'", "'N%'", "'_r%'", "'%t'", "'É%'"]

# what each engine can be compared on against an oracle that runs on DuckDB
ENGINE_FEATURES = {
    "duckdb": {"limit"},
    "sqlite": set(),
    "postgres": set(),
    "spark": set(),
}


@dataclass
class Source:
    """FROM: a base table, layers that filter it (each a CTE or a subquery), a UNION ALL, a join."""
    table: str
    layers: list[str] = field(default_factory=list)  # conditions over alias s, innermost first
    union: str | None = None  # second table of a UNION ALL under the layers
    as_ctes: bool = True  # layers written as a chain of CTEs (else nested subqueries)
    join: str | None = None  # e.g. "LEFT JOIN dim d ON t.province = d.province OR d.tier = 1"

    def base(self) -> str:
        if self.union:
            return f"(SELECT * FROM {self.table} UNION ALL SELECT * FROM {self.union})"
        return self.table

    def render(self, inline: bool = False) -> tuple[str, str]:
        """(WITH clause or '', FROM text) — ``inline`` writes CTE layers as nested subqueries."""
        ctes, ref = [], self.base()
        for i, cond in enumerate(self.layers):
            body = f"SELECT * FROM {ref} s WHERE {cond}"
            if self.as_ctes and not inline:
                ctes.append(f"c{i} AS ({body})")
                ref = f"c{i}"
            else:
                ref = f"({body})"
        with_ = f"WITH {', '.join(ctes)} " if ctes else ""
        from_ = f"{ref} t" + (f" {self.join}" if self.join else "")
        return with_, from_


@dataclass
class Shape:
    source: Source
    keys: list[str]  # grouping expressions
    items: list[str]  # select items after the keys (measures, aggregates, windows), without aliases
    measures: list[str]  # the plain measure calls used in items (for HAVING and the checks)
    where: str | None = None
    having: str | None = None
    group_style: str = "exprs"  # exprs / aliases / positions / all
    limit: int | None = None
    outer_window: str | None = None  # a window over the measure results, computed over a subquery

    def select_list(self) -> list[str]:
        return [f"{k} AS k{i}" for i, k in enumerate(self.keys)] + [f"{it} AS m{i}" for i, it in enumerate(self.items)]

    def width(self) -> int:
        return len(self.keys) + len(self.items)

    def sql(self, inline: bool = False) -> str:
        with_, from_ = self.source.render(inline)
        q = f"SELECT {', '.join(self.select_list())} FROM {from_}"
        if self.where:
            q += f" WHERE {self.where}"
        if self.keys:
            if self.group_style == "exprs":
                q += " GROUP BY " + ", ".join(self.keys)
            elif self.group_style == "aliases":
                q += " GROUP BY " + ", ".join(f"k{i}" for i in range(len(self.keys)))
            elif self.group_style == "positions":
                q += " GROUP BY " + ", ".join(str(i + 1) for i in range(len(self.keys)))
            else:
                q += " GROUP BY ALL"
        if self.having:
            q += f" HAVING {self.having}"
        n = self.width()
        if self.outer_window:
            q = f"SELECT q.*, {self.outer_window} AS w0 FROM ({q}) q"
            n += 1
        q += " ORDER BY " + ", ".join(f"{i + 1} NULLS LAST" for i in range(n))
        if self.limit:
            q += f" LIMIT {self.limit}"
        return with_ + q

    def replace(self, **changes) -> Shape:
        return dataclasses.replace(self, **changes)


class Grammar:
    def __init__(self, rng: random.Random, features: set[str] | frozenset = frozenset({"limit"}),
                 wide_params: bool = False, se_measures: bool = False, max_measures: int = 3):
        self.rng = rng
        self.features = set(features)
        self.params = {k: v + (WIDE_PARAMS.get(k, []) if wide_params else []) for k, v in PARAMS.items()}
        self.measures = MEASURES + (SE_MEASURES if se_measures else [])
        self.max_measures = max_measures
        self.subqueries = True  # off inside measure arguments and FILTER (refused there by name)

    @contextlib.contextmanager
    def row_level(self):
        """Inside a measure call: no subquery (the compiler refuses one there, by name)."""
        saved, self.subqueries = self.subqueries, False
        try:
            yield
        finally:
            self.subqueries = saved

    def chance(self, p: float) -> bool:
        return self.rng.random() < p

    def pick(self, seq):
        return self.rng.choice(seq)

    # --- numbers ------------------------------------------------------------------------------
    def num_atom(self, q: str, dim: bool, integer: bool = False) -> str:
        r = self.rng.random()
        if r < 0.7:
            cols = [f"{q}.{c}" for c in (MAIN_INT if integer else MAIN_NUM + MAIN_INT)]
            if dim:
                cols += ["d.tier"] if integer else ["d.factor", "d.tier"]
            return self.pick(cols)
        return self.pick(["2", "3", "10", "1000"] if integer else ["2", "0.5", "1000", "1e6", "42.5", "3", "0"])

    def num(self, q: str, dim: bool, depth: int = 2, integer: bool = False) -> str:
        """A numeric expression; ``integer`` keeps it integral (for %, IN lists of integers)."""
        if depth <= 0 or self.chance(0.35):
            return self.num_atom(q, dim, integer)
        a, b = self.num(q, dim, depth - 1, integer), self.num(q, dim, depth - 1, integer)
        kinds = ["+", "-", "*", "neg", "paren", "case", "coalesce", "nullif", "abs"]
        if integer:
            kinds += ["mod"]
        else:
            kinds += ["div", "cast"]
        k = self.pick(kinds)
        if k in "+-*":
            return f"{a} {k} {b}"
        if k == "neg":
            return f"-{a}" if not a.startswith("-") else f"-({a})"
        if k == "paren":
            return f"({a} {self.pick('+-*')} {b})"
        if k == "div":  # by a constant or a column that is never 0, so every engine agrees
            return f"{a} / {self.pick(['4', '2.5', '1000'] + (['d.factor'] if dim else []))}"
        if k == "mod":
            return f"{a} % {self.pick(['2', '3'])}"
        if k == "case":
            return f"CASE WHEN {self.cond(q, dim, 1)} THEN {a} ELSE {b} END"
        if k == "coalesce":
            return f"COALESCE({a}, {self.num_atom(q, dim, integer)})"
        if k == "nullif":
            return f"NULLIF({a}, {self.pick(['0', '2', '42.5', '3'])})"
        if k == "cast":
            return f"CAST({a} AS DOUBLE)"
        return f"abs({a})"

    # --- conditions ---------------------------------------------------------------------------
    def predicate(self, q: str, dim: bool) -> str:
        k = self.pick(["cmp", "cmp", "cmp2", "str", "in", "insub" if self.subqueries else "in", "between", "like", "distinct", "null",
                       "coalesce", "nullif", "case", "bool"])
        col = self.num(q, dim, 1)
        if k == "cmp":
            return f"{col} {self.pick(['=', '<>', '<', '<=', '>', '>='])} {self.pick(['0', '3', '1000', '2024', '42.5', '-5'])}"
        if k == "cmp2":
            return f"{col} {self.pick(['<', '>=', '<>', '='])} {self.num(q, dim, 1)}"
        if k == "str":
            s = self.pick([f"{q}.province"] + (["d.zone"] if dim else []))
            return f"{s} {self.pick(['=', '<>'])} {self.pick(PROVINCES + ([chr(39) + 'n' + chr(39)] if dim else []))}"
        if k == "in":
            neg = "NOT " if self.chance(0.3) else ""
            if self.chance(0.5):
                vals = self.rng.sample(PROVINCES, self.rng.randint(1, 3)) + (["NULL"] if self.chance(0.2) else [])
                return f"{q}.province {neg}IN ({', '.join(vals)})"
            vals = self.rng.sample(["1", "2", "3", "5", "2024", "42"], self.rng.randint(1, 3))
            return f"{self.num(q, dim, 1, integer=True)} {neg}IN ({', '.join(vals)})"
        if k == "insub":
            neg = "NOT " if self.chance(0.3) else ""
            if self.chance(0.5):
                inner = self.pick(["tier > 1", "tier < 4", "zone = 'n'", "factor >= 1 OR tier = 2", "province IS NOT NULL"])
                return f"{q}.province {neg}IN (SELECT province FROM dim WHERE {inner})"
            inner = self.pick(["factor > 1", "NOT tier = 3", "zone <> 'z'"])
            return f"{q}.hh_size {neg}IN (SELECT tier FROM dim WHERE {inner})"
        if k == "between":
            lo, hi = sorted(self.rng.sample([0, 1, 2, 3, 4, 100, 1000, 5000], 2))
            neg = "NOT " if self.chance(0.3) else ""
            return f"{self.num(q, dim, 1)} {neg}BETWEEN {lo} AND {hi}"
        if k == "like":
            neg = "NOT " if self.chance(0.3) else ""
            return f"{q}.province {neg}LIKE {self.pick(LIKES)}"
        if k == "distinct":
            neg = "NOT " if self.chance(0.4) else ""
            right = self.pick(PROVINCES + ["NULL"]) if self.chance(0.6) else None
            if right:
                return f"{q}.province IS {neg}DISTINCT FROM {right}"
            return f"{self.num(q, dim, 0)} IS {neg}DISTINCT FROM {self.num(q, dim, 0)}"
        if k == "null":
            return f"{self.pick([f'{q}.province', f'{q}.gross', f'{q}.weight', f'{q}.disposable'] + (['d.zone'] if dim else []))} IS {self.pick(['', 'NOT '])}NULL"
        if k == "coalesce":
            return f"COALESCE({q}.province, 'none') {self.pick(['=', '<>'])} {self.pick([chr(39) + 'none' + chr(39)] + PROVINCES)}"
        if k == "nullif":
            return f"NULLIF({q}.hh_size, {self.pick(['1', '3'])}) {self.pick(['>', '<='])} 2"
        if k == "case":
            return f"CASE WHEN {self.cond(q, dim, 0)} THEN {col} ELSE {self.num_atom(q, dim)} END > {self.pick(['0', '1000', '3'])}"
        return self.pick(["TRUE", "FALSE", f"({q}.year = 2024) = ({q}.hh_size > 2)"])

    def cond(self, q: str, dim: bool, depth: int = 2) -> str:
        """AND / OR / NOT over predicates, parentheses sometimes written, sometimes left to precedence."""
        if depth <= 0 or self.chance(0.3):
            return self.predicate(q, dim)
        k = self.pick(["and", "or", "or", "not", "paren"])
        if k == "not":
            return f"NOT {self.cond(q, dim, depth - 1)}" if self.chance(0.5) else f"NOT ({self.cond(q, dim, depth - 1)})"
        if k == "paren":
            return f"({self.cond(q, dim, depth - 1)})"
        return f"{self.cond(q, dim, depth - 1)} {k.upper()} {self.cond(q, dim, depth - 1)}"

    # --- measures -----------------------------------------------------------------------------
    def value_arg(self, dim: bool) -> str:
        if self.chance(0.45):
            return self.pick(["t.gross", "t.disposable", "t.gross", "t.hh_size"])
        return self.num("t", dim, 2)

    def weight_arg(self, dim: bool) -> str:
        """A weight that is never negative (negative weights are refused by contract)."""
        forms = ["t.weight", "t.weight", "CAST(t.hh_size AS DOUBLE)", "t.hh_size", "COALESCE(t.weight, 1)",
                 "NULLIF(t.weight, 0)", "t.weight * 2", "t.weight + t.hh_size", "abs(t.disposable)",
                 f"CASE WHEN {self.cond('t', dim, 1)} THEN t.weight ELSE 0 END"]
        if dim:
            forms += ["d.factor", "t.weight * d.factor"]
        return self.pick(forms)

    def entity_arg(self, dim: bool) -> str:
        forms = ["t.hh_size", "t.province", "t.hh_size % 3", "t.year", f"CASE WHEN {self.cond('t', dim, 1)} THEN 'a' ELSE 'b' END",
                 "COALESCE(t.province, 'none')"]
        return self.pick(forms + (["d.zone"] if dim else []))

    def measure(self, dim: bool) -> str:
        with self.row_level():
            return self._measure(dim)

    def _measure(self, dim: bool) -> str:
        name, kinds, trailing = self.pick(self.measures)
        args = [self.value_arg(dim)]
        if kinds == ["hi", "lo"]:
            args += list(self.pick(RATIOS))
        else:
            args += [self.value_arg(dim) if k == "column" else self.pick(self.params[k]) for k in kinds]
        if self.chance(0.6):
            args.append(self.weight_arg(dim) if trailing == "weight" else self.entity_arg(dim))
        if name in SE_NAMES and self.chance(0.5):
            design = self.pick([["strata"], ["psu"], ["strata", "psu"], ["strata", "psu"]])
            args += [f"{k} := {self.pick(DESIGN_COLUMNS)}" for k in design]
        return f"{name}({', '.join(args)})"

    def measure_item(self, m: str, dim: bool) -> str:
        if self.chance(0.25):
            with self.row_level():
                m = f"{m} FILTER (WHERE {self.cond('t', dim, 2)})"
        # thresholds avoid round values a measure can equal exactly (0.3 vs 0.30000000000000004); the
        # rounding is shifted off the halfway points that exact rationals hit (1/128 = 0.0078125 rounds
        # up or down at 6 digits depending on the last bit)
        form = self.pick(["{m}", "{m}", "{m}", "round({m} + 0.0000003137, 6)", "{m} * 100", "coalesce({m}, -1)", "-{m}",
                          "CASE WHEN {m} > 0.3137 THEN 1 ELSE 0 END", "{m} + 1"])
        return form.format(m=m)

    def aggregate(self, dim: bool) -> str:
        a = self.pick(["count(*)", "count(t.gross)", "avg(t.gross)", "sum(t.weight)", "max(t.hh_size)",
                       "min(t.disposable)", "sum(CASE WHEN {c} THEN 1 ELSE 0 END)", "count(*) FILTER (WHERE {c})"])
        return a.format(c=self.cond("t", dim, 1)) if "{c}" in a else a

    def key(self, dim: bool) -> str:
        forms = ["t.province", "t.year", "t.hh_size > 2", "t.year % 2", "length(t.province)",
                 "COALESCE(t.province, 'none')", f"CASE WHEN {self.cond('t', dim, 1)} THEN 'a' ELSE 'b' END",
                 "t.hh_size BETWEEN 2 AND 4", "t.province IS NULL", "t.province IN ('North', 'Bronquivet')",
                 "t.hh_size + 1", "-t.hh_size", "t.hh_size"]
        return self.pick(forms + (["d.zone", "d.tier"] if dim else []))

    # --- sources ------------------------------------------------------------------------------
    def source(self) -> Source:
        src = Source(self.pick(["survey", "rough"]))
        r = self.rng.random()
        if r < 0.15:
            src.union = "rough" if src.table == "survey" else "survey"
        if self.chance(0.4):
            src.layers = [self.cond("s", False, 1) for _ in range(self.rng.randint(1, 3))]
            src.as_ctes = self.chance(0.6)
        if self.chance(0.3):
            kind = self.pick(["JOIN", "LEFT JOIN"])
            on = self.pick(["t.province = d.province", "t.province IS NOT DISTINCT FROM d.province",
                            "t.hh_size = d.tier"])
            if self.chance(0.5):
                on = f"{on} {self.pick(['AND', 'OR'])} {self.cond('t', True, 1)}"
            src.join = f"{kind} dim d ON {on}"
        return src

    # --- a whole shape ------------------------------------------------------------------------
    def shape(self) -> Shape:
        src = self.source()
        dim = src.join is not None
        keys = [self.key(dim) for _ in range(self.rng.randint(0, 2))]
        keys = list(dict.fromkeys(keys))
        measures = [self.measure(dim) for _ in range(self.rng.randint(1, self.max_measures))]
        items = [self.measure_item(m, dim) for m in measures]
        if self.chance(0.4):
            items.append(self.aggregate(dim))
        if len(measures) > 1 and self.chance(0.2):
            # a sum of magnitudes: a difference of two measures of 1e5 that nearly cancel keeps their
            # absolute rounding (1e-11), which no relative tolerance on the result can judge
            items.append(f"abs({measures[0]}) + abs({measures[1]})")
        shape = Shape(src, keys, items, measures)
        if self.chance(0.6):
            shape.where = self.cond("t", dim, 3)
        if keys:
            shape.group_style = self.pick(["exprs", "aliases", "positions", "all"])
            if self.chance(0.35):
                shape.having = self.having(measures, dim)
            if self.chance(0.15):
                # ranks order rounded values: groups whose measures tie exactly in arithmetic (e.g. the
                # same mix of values) differ in the last bits between engines, and so would their ranks
                shape.items.append(self.pick([f"rank() OVER (ORDER BY round({measures[0]} + 0.0000003137, 6) NULLS LAST)",
                                              "sum(count(*)) OVER ()",
                                              f"rank() OVER (ORDER BY round({measures[-1]} + 0.0000003137, 6) DESC NULLS LAST)"]))
            elif self.chance(0.15):
                shape.outer_window = self.pick(["abs(q.m0) + avg(abs(q.m0)) OVER ()", "max(q.m0) OVER ()",
                                                "rank() OVER (ORDER BY round(q.m0 + 0.0000003137, 6) NULLS LAST)",
                                                "count(q.m0) OVER ()"])
        if "limit" in self.features and self.chance(0.15):
            shape.limit = self.pick([1, 3])
        return shape

    def having(self, measures: list[str], dim: bool) -> str:
        def atom():
            m = self.pick(measures + [self.measure(dim)])
            # bounds off the round values an exact rational measure can equal (a Palma of 1/2 comes out
            # as 0.5 on one side and 0.5000000000000001 on the other); 0 stays: exact zeros are exact
            return self.pick(["count(*) > 3", f"{m} IS NOT NULL", f"{m} > 0.2137", f"NOT {m} < 0", f"{m} IS NULL",
                              f"{m} BETWEEN 0 AND 0.5137", "sum(t.weight) > 1000"])
        a = atom()
        if self.chance(0.5):
            a = f"{a} {self.pick(['AND', 'OR'])} {atom()}"
        return a


# --- the tables the shapes read ---------------------------------------------------------------

def survey_frame() -> pd.DataFrame:
    """The survey fixture with nullable column types (NULL stays NULL on every engine's loader)."""
    from pathlib import Path

    import pandas as pd
    frame = pd.read_parquet(Path(__file__).resolve().parents[1] / "fixtures" / "data" / "survey.parquet")
    return _nullable(frame)


def rough_rows(seed: int = 9, n: int = 600) -> pd.DataFrame:
    """Invented hostile rows with the survey's columns (fixed seed): NULL keys, values and weights,
    many ties, zeros, weights of 0, negative values, values from 1e-9 to 1e12 (some 1 apart)."""
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(seed)
    gross = 10.0 ** rng.uniform(-9, 12, n)
    mask = rng.random(n) < 0.3
    gross[mask] = rng.choice([0.0, 5.0, 1e12, 1e12 + 1.0], int(mask.sum()))  # large values 1 apart
    gross[rng.random(n) < 0.25] = 42.5  # ties
    gross[rng.random(n) < 0.05] = 0.0
    disposable = np.round(rng.normal(2000, 1500, n), 0)  # some negative
    weight = rng.integers(0, 5, n).astype(float)  # integer weights, zeros included
    frame = pd.DataFrame({
        "hh_id": np.arange(n), "province": rng.choice(["North", "South", "Évrazquelle", None], n),
        "year": rng.choice([2023, 2024], n), "gross": gross, "disposable": disposable, "weight": weight,
        "hh_size": rng.integers(1, 7, n)})
    for col, share in (("gross", 0.08), ("disposable", 0.05), ("weight", 0.06)):
        frame[col] = frame[col].astype("Float64")
        frame.loc[rng.random(n) < share, col] = pd.NA
    return _nullable(frame)


def dim_frame() -> pd.DataFrame:
    """A small invented dimension table: a NULL key, a key no row has, keys only one table has."""
    import pandas as pd
    frame = pd.DataFrame({"province": ["North", "South", "Abrazzle", None, "Nowhere", "Bronquivet"],
                          "zone": ["n", "s", "n", "x", "z", None], "factor": [1.5, 0.5, 2.0, 1.0, 3.0, 0.25],
                          "tier": [1, 2, 3, 4, 5, 2]})
    return _nullable(frame)


def _nullable(frame):
    for col in frame.columns:
        if frame[col].dtype.kind == "f":
            frame[col] = frame[col].astype("Float64")
        elif frame[col].dtype.kind in "iu":
            frame[col] = frame[col].astype("Int64")
    return frame


def fuzz_tables() -> dict:
    return {"survey": survey_frame(), "rough": rough_rows(), "dim": dim_frame()}
