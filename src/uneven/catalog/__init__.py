"""The measure catalog: one declarative entry per measure (see ``spec.Measure``)."""

from __future__ import annotations

from uneven.catalog import entity, linearize, moment, ordered, poverty, poverty_lin, structure, uncertainty
from uneven.catalog.spec import Measure, Param

MEASURES: dict[str, Measure] = {m.name: m for m in (*ordered.MEASURES, *moment.MEASURES, *entity.MEASURES,
                                                 *structure.MEASURES, *poverty.MEASURES)}
linearize.LINEARIZE.update(poverty_lin.LINEARIZE)  # the poverty-line indicators' and Wolfson's scores
uncertainty.BOOTSTRAPPABLE = (*uncertainty.BOOTSTRAPPABLE, *poverty_lin.LINEARIZE)
MEASURES.update({m.name: m for m in uncertainty.uncertainty_measures(MEASURES)})  # <m>_se, <m>_ci_lo/hi …


def lookup(name: str) -> Measure | None:
    return MEASURES.get(name.lower())


def register(measure: Measure) -> None:
    """Add a measure to the catalog (used by user-defined measures)."""
    MEASURES[measure.name] = measure


__all__ = ["MEASURES", "Measure", "Param", "lookup", "register"]
