"""Python builder front-end: ``from_(source).filter(...).group_by(...).agg(...)`` → compiler."""

from ineqsql.builder.measures import MeasureCall, measure_factory
from ineqsql.builder.query import BuilderError, Query, from_

__all__ = ["from_", "Query", "MeasureCall", "measure_factory", "BuilderError"]
