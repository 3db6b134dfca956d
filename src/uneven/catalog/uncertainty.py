"""Standard errors and confidence intervals: for each measure with a linearization
(catalog/linearize.py), three catalog entries with the measure's own arguments:

    <m>_se(x, …[, w])      the linearization standard error
    <m>_ci_lo(x, …[, w])   estimate − z·SE      (level := 0.95 by default)
    <m>_ci_hi(x, …[, w])   estimate + z·SE

Named arguments: ``strata := h`` and ``psu := c`` (a survey design: with-replacement variance of
the PSU totals within strata), ``level := 0.9`` (intervals only), ``strict := true``.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.catalog.kernels_se import KERNELS as CUT_SE_KERNELS
from uneven.catalog.kernels_se_moment import KERNELS as MOMENT_SE_KERNELS
from uneven.catalog.linearize import LINEARIZE
from uneven.catalog.spec import Measure
from uneven.reference import se as rse
from uneven.sqltree.constants import ConstantError, evaluate_constant, literal_value

DESIGN = ("strata", "psu")


def check_row_level(name: str, value: exp.Expression) -> None:
    for sub in value.walk():
        if isinstance(sub, (exp.AggFunc, exp.Window, exp.Subquery, exp.Select, exp.Star)):
            raise ValueError(f"{name} must be a row-level expression (a column), not {sub.sql('duckdb')}")
    if isinstance(value, exp.Null):
        raise ValueError(f"{name} cannot be NULL")


def read_level(value: exp.Expression | None, default: float = 0.95, read: str = "duckdb") -> float:
    """The confidence level: a constant (sqltree/constants.py) strictly between 0 and 1."""
    if value is None:
        return default
    level = _constant("level", value, read)
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must be a number strictly between 0 and 1 (e.g. 0.95), got {_shown(value, level)}")
    return level


def _constant(name: str, value: exp.Expression, read: str) -> float:
    """A named option's constant value; a ConstantError (a ValueError) names the option and the offending part."""
    try:
        return evaluate_constant(value, read)
    except ConstantError as e:
        raise ConstantError(f"{name} {e.reason}", e.node) from None


def _shown(value: exp.Expression, v: float) -> str:
    plain = literal_value(value) is not None
    return value.sql("duckdb") if plain else f"{value.sql('duckdb')} = {v:g}"


def read_design(options: dict, read: str = "duckdb") -> dict:
    settings = {}
    for name in DESIGN:
        if name in options:
            check_row_level(name, options[name])
    if "level" in options:
        settings["level"] = read_level(options["level"], read=read)
    return settings


def _constant_int(name: str, value: exp.Expression, low: int, high: int, read: str = "duckdb") -> int:
    v = _constant(name, value, read)
    if v != int(v) or not low <= v <= high:
        raise ValueError(f"{name} must be a whole number from {low} to {high}, got {_shown(value, v)}")
    return int(v)


def read_bootstrap(options: dict, read: str = "duckdb") -> dict:
    settings = {"replicates": 200, "seed": 0, "key": options.get("key"), "psu": options.get("psu")}
    for name in ("key", "psu"):
        if name in options:
            check_row_level(name, options[name])
    if "replicates" in options:
        settings["replicates"] = _constant_int("replicates", options["replicates"], 2, MAX_REPLICATES, read)
    if "seed" in options:
        settings["seed"] = _constant_int("seed", options["seed"], 0, 2 ** 31 - 1, read)
    if "level" in options:
        settings["level"] = read_level(options["level"], read=read)
    if "interval" in options:
        value = options["interval"]
        if not (isinstance(value, exp.Literal) and value.is_string and value.this in ("percentile", "normal")):
            raise ValueError(f"interval must be 'percentile' or 'normal', got {value.sql('duckdb')}")
        settings["interval"] = value.this
    return settings


MAX_REPLICATES = 1000
BOOTSTRAP = ("replicates", "key", "seed", "psu")


def _build(base: str, role: str):
    linearize = LINEARIZE[base]
    return lambda ctx, params: (linearize(ctx, params), role)


def _reference(base: str, role: str):
    def ref(x, *args, level=0.95, strata=None, psu=None):
        *params, w = args
        if role == "se":
            return rse.se(base, x, tuple(params), w, strata, psu)
        lo, hi = rse.ci(base, x, tuple(params), w, level, strata, psu)
        return lo if role == "lo" else hi
    return ref


ROLES = {"se": ("standard error of {m} (linearization)", ()),
         "ci_lo": ("lower end of the normal confidence interval of {m}: {m} − z·SE", ("level",)),
         "ci_hi": ("upper end of the normal confidence interval of {m}: {m} + z·SE", ("level",))}


def uncertainty_measures(base_catalog: dict[str, Measure]) -> list[Measure]:
    out = []
    for base in LINEARIZE:
        m = base_catalog[base]
        for suffix, (formula, extra) in ROLES.items():
            role = suffix.split("_")[-1]
            out.append(Measure(
                f"{base}_{suffix}", "linearized", m.params, "weight", formula.format(m=base),
                _build(base, role), _reference(base, role),
                domain=f"as {base}; strata := h, psu := c for a survey design; NULL when a stratum has one PSU",
                options=("strict", *DESIGN, *extra), pass_options=DESIGN, read_options=read_design,
                stream=CUT_SE_KERNELS.get(f"{base}_{suffix}") or MOMENT_SE_KERNELS.get(f"{base}_{suffix}")))
    for base in BOOTSTRAPPABLE:
        m = base_catalog[base]
        for suffix, (formula, extra) in BOOT_ROLES.items():
            out.append(Measure(
                f"{base}_{suffix}", "bootstrap", m.params, "weight", formula.format(m=base),
                m.build, _no_reference, domain=f"as {base}; replicates := R (200), key := id, seed := s, psu := c",
                options=("strict", *BOOTSTRAP, *extra), pass_options=BOOTSTRAP, read_options=read_bootstrap))
    return out


def _no_reference(*args, **kwargs):
    raise NotImplementedError("bootstrap draws come from the engine's hash function; the tests rebuild "
                              "them from the engine (tests/test_bootstrap.py)")


BOOTSTRAPPABLE = (*LINEARIZE, "gini_corrected")
BOOT_ROLES = {"boot_se": ("bootstrap standard error of {m} (Poisson replicate weights)", ()),
              "boot_lo": ("lower end of the bootstrap interval of {m} (percentile, or interval := 'normal')",
                          ("level", "interval")),
              "boot_hi": ("upper end of the bootstrap interval of {m} (percentile, or interval := 'normal')",
                          ("level", "interval"))}


__all__ = ["uncertainty_measures", "read_level", "read_design", "check_row_level"]
