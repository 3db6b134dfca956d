"""The binned summary of one (value, weight) pair: per group, bins on a logarithmic scale of |x|.

A positive value x falls in bin k = floor(ln x / ln(1 + r)), i.e. [(1+r)^k, (1+r)^(k+1)): a bin's
largest value is at most (1 + r) times its smallest (r = the resolution, a relative width). Negative
values are binned the same way on −x (``uv_sign`` = −1, mirrored), zeros have a bin of their own
(``uv_sign`` = 0). The bin index is only a grouping key: every bound works from what the bin
*stores* (its exact min and max, weight and sums), so bins computed by engines whose LN rounds
differently at an edge, or summaries at different resolutions, still give valid bounds once
overlapping bins are joined (``lower.py``). A stored summary keeps the pair (``uv_sign``, ``uv_bin``);
the summary pass inside a query groups on the same bins through one BIGINT key (``bin_key``).

Each bin keeps, over its rows (NULL x or weight, and zero weights, skipped), what the measures
read of (a stored summary keeps them all):
    uv_n      row count                 uv_w      Σw              uv_wx     Σw·x
    uv_min    smallest x                uv_max    largest x       uv_wx2    Σw·x²
    uv_wlnx   Σw·ln x  (x > 0 rows)     uv_wxlnx  Σw·x·ln x  (x > 0 rows)
    uv_pow_<a> Σw·x^a (x > 0 rows), for the exponents asked for at summary time (GE, Atkinson)
The SQL is portable: LN, FLOOR, CAST, CASE, SUM, MIN, MAX, COUNT only.
"""

from __future__ import annotations

import math

from sqlglot import exp

from uneven.errors import MeasureArgumentError
from uneven.sqltree import build as s

DEFAULT_RESOLUTION = 0.01
MIN_RESOLUTION = 1e-6
MAX_RESOLUTION = 1.0

SIGN, BIN = "uv_sign", "uv_bin"
N, W, WX, MIN, MAX, WX2, WLNX, WXLNX = ("uv_n", "uv_w", "uv_wx", "uv_min", "uv_max", "uv_wx2", "uv_wlnx",
                                         "uv_wxlnx")
RESOLUTION = "uv_resolution"
POW_PREFIX = "uv_pow_"
SUMS = (N, W, WX, WX2, WLNX, WXLNX)  # added when bins merge
BIN_COLUMNS = (N, W, WX, MIN, MAX, WX2, WLNX, WXLNX)


def check_resolution(resolution: float) -> float:
    try:
        r = float(resolution)
    except (TypeError, ValueError):
        raise MeasureArgumentError(f"resolution must be a number, got {resolution!r}") from None
    if not (MIN_RESOLUTION <= r <= MAX_RESOLUTION):
        raise MeasureArgumentError(f"resolution must be a relative bin width between {MIN_RESOLUTION:g} and "
                                   f"{MAX_RESOLUTION:g}, got {resolution!r}")
    return r


def resolution_for_tolerance(tolerance: float) -> float:
    """A resolution whose Gini interval is about ``tolerance`` wide on smooth data.

    The Gini interval adds, per bin, at most W_b²·(max − min)/4 ≈ W_b²·r·x/4 over W·T; for a
    density smooth on the log scale Σ W_b² ∝ r, so the width grows like r² (docs/bounded.md).
    r = 3·sqrt(tolerance) meets the tolerance on lognormal data with σ ≥ 0.7; the result reports
    the width achieved, and ``query`` refines once when it is not met.
    """
    try:
        tol = float(tolerance)
    except (TypeError, ValueError):
        raise MeasureArgumentError(f"tolerance must be a number, got {tolerance!r}") from None
    if not (1e-12 <= tol <= 0.1):
        raise MeasureArgumentError(f"tolerance must be between 1e-12 and 0.1, got {tolerance!r}")
    return min(MAX_RESOLUTION, max(MIN_RESOLUTION, 3.0 * math.sqrt(tol)))


def power_column(a: float) -> str:
    """Column name of Σw·x^a: uv_pow_2, uv_pow_0p5, uv_pow_m1 (m for minus, p for the point)."""
    text = repr(float(a)).rstrip("0").rstrip(".") if float(a) != int(a) else str(int(a))
    return POW_PREFIX + text.replace("-", "m").replace(".", "p")


def power_of_column(name: str) -> float | None:
    if not name.startswith(POW_PREFIX):
        return None
    try:
        return float(name[len(POW_PREFIX):].replace("m", "-").replace("p", "."))
    except ValueError:
        return None


def bin_keys(x: exp.Expression, resolution: float) -> list[exp.Expression]:
    """[sign, bin index] of a DOUBLE value x (aliased ``uv_sign``, ``uv_bin``)."""
    zero = s.lit(0.0)
    scale = s.lit(1.0 / math.log1p(resolution))
    sign = s.case(s.gt(x.copy(), zero), s.lit(1), s.case(s.lt(x.copy(), zero), s.lit(-1), s.lit(0)))
    index = lambda v: exp.cast(exp.Floor(this=s.mul(s.ln(v), scale.copy())), "bigint")  # noqa: E731
    bin_ = s.case(s.gt(x.copy(), zero), index(x.copy()),
                  s.case(s.lt(x.copy(), zero), index(exp.Neg(this=s.paren(x.copy()))), s.lit(0)))
    return [s.alias(sign, SIGN), s.alias(bin_, BIN)]


KEY_OFFSET = 1 << 31  # above |floor(ln|x| / ln(1 + r))| for every finite x ≠ 0 and r ≥ MIN_RESOLUTION (< 7.5e8)


def bin_key(x: exp.Expression, resolution: float) -> exp.Expression:
    """The (sign, bin index) pair of ``bin_keys`` as one BIGINT grouping key, for a summary that is
    grouped and measured in the same query (the summary pass): 0 for zero, KEY_OFFSET + the index for
    x > 0, −(KEY_OFFSET + the index of −x) for x < 0. The same bins as the pair (one index per pair,
    FLOOR on every engine: a CAST alone rounds on some engines and truncates on others), one key
    column less to hash, and non-decreasing in x like the pair's order. One LN per row."""
    zero = s.lit(0.0)
    scale = s.lit(1.0 / math.log1p(resolution))

    def index(v: exp.Expression) -> exp.Expression:
        return s.add(exp.cast(exp.Floor(this=s.mul(s.ln(v), scale.copy())), "bigint"), s.lit(KEY_OFFSET))

    return exp.Case(ifs=[exp.If(this=s.gt(x.copy(), zero), true=index(x.copy())),
                         exp.If(this=s.lt(x.copy(), zero.copy()),
                                true=exp.Neg(this=s.paren(index(exp.Neg(this=s.paren(x.copy()))))))],
                    default=s.lit(0))


def bin_aggregates(x: exp.Expression, w: exp.Expression, powers=()) -> list[exp.Expression]:
    """The aggregates one bin keeps, over DOUBLE columns x and w (w a literal 1.0 when unweighted)."""
    zero = s.lit(0.0)
    pos = lambda term: s.case(s.gt(x.copy(), zero), term)  # noqa: E731  (NULL elsewhere: SUM skips it)
    cols: list[exp.Expression] = [
        s.alias(s.agg_count_star(), N),
        s.alias(s.agg_sum(w.copy()) if not s.is_one(w) else s.cast_double(s.agg_count_star()), W),
        s.alias(s.agg_sum(s.mul(w.copy(), x.copy())), WX),
        s.alias(s.agg_min(x.copy()), MIN),
        s.alias(s.agg_max(x.copy()), MAX),
        s.alias(s.agg_sum(s.mul(w.copy(), s.mul(x.copy(), x.copy()))), WX2),
        s.alias(exp.Coalesce(this=s.agg_sum(pos(s.mul(w.copy(), s.ln(x.copy())))), expressions=[zero.copy()]),
                WLNX),
        s.alias(exp.Coalesce(this=s.agg_sum(pos(s.mul(w.copy(), s.mul(x.copy(), s.ln(x.copy()))))),
                             expressions=[zero.copy()]), WXLNX),
    ]
    for a in powers:
        term = pos(s.mul(w.copy(), s.power(x.copy(), s.lit(float(a)))))
        cols.append(s.alias(exp.Coalesce(this=s.agg_sum(term), expressions=[zero.copy()]), power_column(a)))
    return cols


def merged_aggregates(columns, table: str | None = None) -> list[exp.Expression]:
    """Aggregates that combine bins (or whole summaries): sums add, min/max take min/max."""
    out: list[exp.Expression] = []
    for name in columns:
        c = s.col(name, table)
        agg: exp.Expression
        if name == MIN:
            agg = s.agg_min(c)
        elif name in (MAX, RESOLUTION):
            agg = s.agg_max(c)  # the coarsest resolution among the parts
        else:
            agg = s.agg_sum(c)
        out.append(s.alias(agg, name))
    return out
