"""The numpy references ("oracle") the tests hold the compiled SQL against; they share no code with
the compiler.

measures.py   every inequality measure from its written definition (``uneven.reference.gini`` …)
linearized.py the linearized influence z_k of each inequality measure, row by row
se.py         standard errors and intervals: ``influence`` of any measure, the design variance
density.py    the density at a quantile (Hall–Sheather bandwidth), for quantile-based SEs
structure.py  decompositions, concentration, progressivity, the paired Gini difference
poverty.py    poverty lines, FGT and Wolfson, and their influence functions

The package itself answers for ``measures`` (``from uneven import reference as R; R.gini(x)``).
"""

from uneven.reference.measures import (
                                       REFERENCES,
                                       Rows,
                                       atkinson,
                                       bottom_share,
                                       check_fraction,
                                       cr,
                                       cv,
                                       ge,
                                       generalized_lorenz,
                                       gini,
                                       gini_corrected,
                                       hhi,
                                       hoover,
                                       lorenz,
                                       lorenz_curve,
                                       mld,
                                       palma,
                                       percentile_ratio,
                                       quantile_w,
                                       s80s20,
                                       theil,
                                       top_share,
)

__all__ = [
    "gini", "gini_corrected", "lorenz", "generalized_lorenz", "bottom_share", "top_share",
    "palma", "s80s20", "quantile_w", "percentile_ratio", "lorenz_curve", "theil", "mld", "ge",
    "atkinson", "cv", "hoover", "hhi", "cr", "REFERENCES", "Rows", "check_fraction",
]
