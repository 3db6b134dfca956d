"""Certified bounds from one-pass binned summaries (``method="bounded"``, ``summarize``, ``from_summary``).

The maths and the SQL over bins only; running a bounded query (resolution from a tolerance, the
widths achieved, one refinement) is ``uneven.engine.bounded``.


bins.py      the summary: log-spaced bins per group and the sums each bin keeps
measures.py  per measure: point estimate and certified interval from the bins (proofs in docs/bounded.md)
lower.py     the SQL over a bins table: join overlapping bins, running sums, one GROUP BY of results
"""
