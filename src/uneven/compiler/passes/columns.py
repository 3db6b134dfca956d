"""Row-level columns the pass contexts share, so every context names them the same way.

``RowColumns``: the value ``x`` and the weight ``w`` (1.0 when unweighted) of a pass's rows.
``SortedColumns``: in a window CTE over rows sorted by x, the running weight ``c`` (C_i), the group
minimum ``min_row`` and the group weight ``W_row``; reading one records it in ``used`` so the
lowering adds only the window columns a measure needs.
"""

from __future__ import annotations

from uneven.compiler import sqlx as s


class RowColumns:
    weighted: bool

    @property
    def x(self):
        return s.col("_uv_x")

    @property
    def w(self):
        return s.col("_uv_w") if self.weighted else s.lit(1.0)


class SortedColumns(RowColumns):
    used: set[str]

    @property
    def c(self):
        """C_i: the running weight up to and including row i (rows sorted by x)."""
        self.used.add("c")
        return s.col("_uv_c")

    @property
    def min_row(self):
        self.used.add("min")
        return s.col("_uv_m")

    @property
    def W_row(self):
        self.used.add("wt")
        return s.col("_uv_wt")
