"""Row-level columns the pass contexts share, so every context names them the same way.

``RowColumns``: the value ``x`` and the weight ``w`` (1.0 when unweighted) of a pass's rows.
``SortedColumns``: in a window CTE over rows sorted by x, the running weight ``c`` (C_i), the group
minimum ``min_row``, the group weight ``W_row`` and the relative poverty line's columns
(``median_row``, ``below_weight_row(frac)``, ``poor_median_row(frac)``, ``quantile_row(p)``: window
layers of passes/line.py);
reading one records it in ``used`` so the
lowering adds only the window columns a measure needs.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.sqltree import build as s


class RowColumns:
    weighted: bool

    @property
    def x(self):
        return s.col("_uv_x")

    @property
    def w(self):
        return s.col("_uv_w") if self.weighted else s.lit(1.0)


class LineColumns:
    """Mixin for the sorted-row contexts (passes/columns.SortedColumns)."""

    used: set[str]

    @property
    def median_row(self) -> exp.Expression:
        """M, the group's weighted median (smallest x with C/W ≥ 0.5), on every row."""
        self.used.update(("c", "wt", "med"))
        return s.col("_uv_md")

    def below_weight_row(self, frac: float) -> exp.Expression:
        """P, the group's weight strictly below the line frac·M, on every row."""
        self.median_row
        fracs = self.__dict__.setdefault("line_fracs", [])
        if frac not in fracs:
            fracs.append(frac)
        return s.col(f"_uv_pw{fracs.index(frac) + 1}")

    def poor_median_row(self, frac: float) -> exp.Expression:
        """M_p, the weighted median of the rows strictly below the line frac·M (the smallest x < frac·M
        with C ≥ P/2), on every row: an indicator 1(x ≤ M_p) read against it counts tied values alike."""
        self.below_weight_row(frac)
        fracs = self.__dict__.setdefault("poor_fracs", [])
        if frac not in fracs:
            fracs.append(frac)
        return s.col(f"_uv_pm{fracs.index(frac) + 1}")

    def quantile_row(self, p: float) -> exp.Expression:
        """Q_p, the group's weighted quantile (smallest x with C/W ≥ p), on every row: an indicator
        1(x ≤ Q_p) read against it counts tied values alike, whatever their order in the sort."""
        self.median_row
        ps = self.__dict__.setdefault("quantile_ps", [])
        if p not in ps:
            ps.append(p)
        return s.col(f"_uv_q{ps.index(p) + 1}")


class SortedColumns(RowColumns, LineColumns):
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
