"""The report's charts are drawn by ``uneven.svg`` (a bottom-layer module that the table functions'
charts use too); this name keeps the report's imports where they were."""

from uneven.svg import (
                        BAR_COLOUR,
                        FONT,
                        PALETTE,
                        Series,
                        bar_chart,
                        colour,
                        difference_chart,
                        lorenz_chart,
                        nice_ticks,
                        trend_chart,
)

__all__ = ["BAR_COLOUR", "FONT", "PALETTE", "Series", "bar_chart", "colour", "difference_chart", "lorenz_chart",
           "nice_ticks", "trend_chart"]
