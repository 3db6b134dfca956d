"""Python builder front-end: ``from_(source).filter(...).group_by(...).agg(...)`` → compiler."""

from uneven.builder.measures import MeasureCall, measure_factory
from uneven.builder.query import BuilderError, Query, from_

__all__ = ["from_", "Query", "MeasureCall", "measure_factory", "BuilderError"]
