"""Pass kinds: each lowers a group of measure calls that share their input to CTEs.

- ``ordered``: rows sorted by value per group, running weight (Gini, Lorenz, shares, quantiles).
- ``refine``: cut-based measures (shares, quantiles) from log-spaced bins and a sort of the cut bins only.
- ``moment``: sums that ride on the scope's own GROUP BY (Theil, MLD, GE, Atkinson, HHI of rows).
- ``centred``: sums of deviations from the group mean, joined back to the rows (CV, Hoover).
- ``entity``: values summed per entity and ranked (HHI, CR_k).
"""
