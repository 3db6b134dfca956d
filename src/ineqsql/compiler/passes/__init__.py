"""Pass kinds: each lowers a group of measure calls that share their input to CTEs.

- ``ordered``: rows sorted by value per group, running weight (Gini, Lorenz, shares, quantiles, Hoover).
- ``moment``: sums that ride on the scope's own GROUP BY (Theil, MLD, GE, Atkinson, CV, HHI of rows).
- ``entity``: values summed per entity and ranked (HHI, CR_k).
"""
