"""One group's bracket table as arrays and its checks.

A bracket b holds ``units`` n_b ≥ 0 (a count or a weighted count) whose values lie in
[low_b, high_b] (published as "from … to"; high_b = +inf for an open top bracket) and whose values
add up to ``total`` t_b (NaN when the table does not give it). Values are taken to be ≥ 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from uneven.errors import InputDataError

TOTAL_SLACK = 1e-9  # a total may exceed [low·n, high·n] by this relative amount (rounding of published totals)


@dataclass
class Brackets:
    """One group's brackets, sorted by ``low``, brackets with no units left out.

    ``total`` is the sum of the totals given; ``unknown`` the units whose total was not given (a
    bracket's rows may give it for some parts and not others, e.g. after a roll-up). The bracket's
    mean is known to lie in [mean_lo, mean_hi]: the given total plus the unknown units at the low
    end, resp. at the high end (one value when every total is given).
    """

    low: np.ndarray
    high: np.ndarray      # +inf for the open top bracket
    units: np.ndarray
    total: np.ndarray     # the totals given (0 where none)
    unknown: np.ndarray   # units without a total

    @property
    def known(self) -> np.ndarray:
        return self.unknown <= 0

    @cached_property
    def mean_lo(self) -> np.ndarray:
        m = (self.total + self.unknown * self.low) / self.units
        return np.clip(m, self.low, self.high)

    @cached_property
    def mean_hi(self) -> np.ndarray:
        with np.errstate(invalid="ignore"):  # 0 unknown units · inf high end (the open top) is 0
            extra = np.where(self.unknown > 0, self.unknown * self.high, 0.0)
        return np.clip((self.total + extra) / self.units, self.low, self.high)

    @cached_property
    def before(self) -> np.ndarray:
        """Units of the brackets below each bracket, C_{<b}."""
        return np.concatenate([[0.0], np.cumsum(self.units)[:-1]])

    @property
    def open_top(self) -> bool:
        return bool(len(self.high)) and math.isinf(self.high[-1])

    @property
    def missing(self) -> int:
        return int((~self.known).sum())


def _where(group: str) -> str:
    return f" (group {group})" if group else ""


def _bracket(low: float, high: float) -> str:
    hi = "open" if math.isinf(high) else f"{high:g}"
    return f"[{low:g}, {hi})"


def check_brackets(low, high, units, total, group: str = "", allow_empty: bool = False) -> Brackets | None:
    """Validate one group's rows (any order) and return them sorted, empty brackets dropped.

    Rows with the same (low, high) are one bracket: their units and totals add; the units of rows
    without a total are counted apart (``Brackets.unknown``). Raises InputDataError naming the group
    and the bracket for: a missing or non-finite low, a negative low, high < low (high = low: a
    bracket of one value, e.g. 0), an open high anywhere but the top, brackets that overlap,
    missing/negative/non-finite units, a total outside [low·n, high·n], and an open top bracket with
    units but no total (its mean, hence every bound, would be unlimited).
    """
    low = np.array(low, dtype=float)
    high = np.array(high, dtype=float)
    units = np.array(units, dtype=float)
    total = np.array(total, dtype=float)
    where = _where(group)
    if len(low) == 0:
        raise InputDataError(f"from_brackets: no brackets{where}")
    for i in range(len(low)):
        lo, hi, n, t = low[i], high[i], units[i], total[i]
        if math.isnan(lo) or math.isinf(lo):
            got = "a missing value (NULL)" if math.isnan(lo) else lo
            raise InputDataError(f"from_brackets: a bracket's low end must be a finite number, got {got}{where}")
        if lo < 0:
            raise InputDataError(f"from_brackets: bracket {_bracket(lo, hi)} starts below 0{where}; bracket "
                                 "tables of negative values are not supported")
        if math.isnan(hi):  # NULL: the open top
            hi = high[i] = math.inf
        if hi < lo:
            raise InputDataError(f"from_brackets: bracket from {lo:g} to {hi:g} ends before it starts{where}: "
                                 "the high end must not be below the low end")
        if math.isnan(n) or math.isinf(n) or n < 0:
            got = "no units (NULL)" if math.isnan(n) else f"units {n:g}"
            raise InputDataError(f"from_brackets: bracket {_bracket(lo, hi)} has {got}{where}: units "
                                 "must be a finite number ≥ 0")
        if math.isinf(t):
            raise InputDataError(f"from_brackets: bracket {_bracket(lo, hi)} has a total of {t}{where}")
        if not math.isnan(t):
            slack = TOTAL_SLACK * max(abs(t), abs(lo * n), 1.0)
            top = hi * n if not math.isinf(hi) else math.inf
            if t < lo * n - slack or (n == 0 and t > slack) or t > top + slack:
                raise InputDataError(
                    f"from_brackets: bracket {_bracket(lo, hi)} has {n:g} units and a total of {t:g}{where}: "
                    f"the total must lie between low·units = {lo * n:g} and high·units = "
                    f"{'unlimited' if math.isinf(top) else f'{top:g}'}")
    order = np.lexsort((high, low))
    low, high, units, total = low[order], high[order], units[order], total[order]
    # rows naming the same bracket add up; the units of rows without a total are kept apart
    unknown = np.where(np.isnan(total), units, 0.0)
    total = np.where(np.isnan(total), 0.0, total)
    keep: list[list[float]] = []
    for i in range(len(low)):
        if keep and low[i] == keep[-1][0] and high[i] == keep[-1][1]:
            keep[-1][2] += units[i]
            keep[-1][3] += total[i]
            keep[-1][4] += unknown[i]
            continue
        keep.append([low[i], high[i], units[i], total[i], unknown[i]])
    low, high, units, total, unknown = (np.array([r[j] for r in keep]) for j in range(5))
    for i in range(1, len(low)):
        if low[i] < high[i - 1]:
            raise InputDataError(
                f"from_brackets: brackets {_bracket(low[i - 1], high[i - 1])} and {_bracket(low[i], high[i])} "
                f"overlap{where}. A table's brackets must not overlap; tables with different bracket edges "
                "are combined with merge_brackets, which joins overlapping brackets into one")
    if any(math.isinf(h) for h in high[:-1]):
        raise InputDataError(f"from_brackets: only the top bracket may be open (no high end){where}")
    if math.isinf(high[-1]) and unknown[-1] > 0:
        raise InputDataError(f"from_brackets: the open top bracket {_bracket(low[-1], high[-1])} has no "
                             f"total{where}: without it the top bracket's mean, and so every bound, is "
                             "unlimited; give its total (or a high end)")
    used = units > 0
    if not used.any():
        if allow_empty:
            return None
        raise InputDataError(f"from_brackets: every bracket has 0 units{where}")
    return Brackets(low[used], high[used], units[used], total[used], unknown[used])
