"""Table functions: queries that return a table rather than one value per group.

base.py       the arguments every table shares (relation, group keys, weight) and its session
decompose.py  GE decomposition by subgroup (``decompose``) and the Gini by income source (``gini_sources``)
compare.py    one measure compared: two values of the same rows (paired) or two groups of rows
influence.py  does one record drive a result: without the k largest rows, exact leave-one-out
dominance.py  Lorenz dominance between two groups of rows, with a simultaneous test
"""

from uneven.tables.compare import MANY_COMPARISONS, compare, compare_groups
from uneven.tables.decompose import decompose, gini_sources
from uneven.tables.dominance import lorenz_dominance
from uneven.tables.influence import influence

__all__ = ["MANY_COMPARISONS", "compare", "compare_groups", "decompose", "gini_sources", "influence",
           "lorenz_dominance"]
