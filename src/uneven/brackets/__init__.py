"""Measures from bracket tables (published tabulations: from–to, units, total per bracket).

table.py     one group's brackets: checks, identical brackets added
bounds.py    certified bounds (every unit at its bracket's mean / split between the ends)
estimate.py  the point estimate: linear densities within brackets, a Pareto tail on an open top
run.py       from_brackets(), merge_brackets() (overlapping brackets joined by the summaries' SQL)
"""

from uneven.brackets.run import CAUTION, from_brackets, merge_brackets

__all__ = ["from_brackets", "merge_brackets", "CAUTION"]
