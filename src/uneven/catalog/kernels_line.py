"""The stream plan's kernels of the measures at a relative poverty line (catalog/poverty.py).

``below_line_share``, ``median_gap`` and ``fgt_relative`` read the line z = frac·M, M the group's
weighted median, on rows that the sorted stream passes before M is known. So their stream is in
stages (compiler/passes/stream_line.py): the pass's stream computes M (this module's ``median``,
the quantile at 0.5 exactly as catalog/ordered.quantile_at defines it); a GROUP BY of the rows
joined to the stream's table then sums the terms below the line; and ``median_gap`` reads the
weighted median of the rows below the line from a second stream over those rows alone
(``poor_median``: the same quantile at 0.5 of their own weight P, which is the window plan's
poor median, the smallest x below the line with C ≥ P/2: the rows below the line are the group's
first rows in the sort, so their running weight is the group's).

A kernel here is marked ``line``: its column in the pass's table holds M, not the measure, and the
lowering (stream_line.lower_line_stage) builds the measure from it.
"""

from __future__ import annotations


def median(acc, params):
    """M: the smallest x with C/W ≥ 0.5 (the largest x when rounding leaves none)."""
    return acc.quantile(0.5)


def poor_median(acc, params):
    """M_p over the rows below the line: the smallest x with C/P ≥ 0.5, P their weight."""
    return acc.quantile(0.5)


def weight(acc, params):
    """W, the group's weight (its row count when unweighted)."""
    return acc.W


median.line = True  # type: ignore[attr-defined]  # the pass's table holds M (stream_line.py builds the measure)


def is_line(kernel) -> bool:
    """The kernel is a median-line measure's (its column is the group's median, stream_line.py)."""
    return bool(getattr(kernel, "line", False))
