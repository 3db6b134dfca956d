"""Certified bounds from one-pass binned summaries (``method="bounded"``, ``summarize``, ``from_summary``).

bins.py      the summary: log-spaced bins per group and the sums each bin keeps
measures.py  per measure: point estimate and certified interval from the bins (proofs in docs/bounded.md)
run.py       running a bounded query: resolution from a tolerance, widths achieved, one refinement
lower.py     the SQL over a bins table: join overlapping bins, running sums, one GROUP BY of results
"""
