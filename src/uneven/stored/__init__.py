"""Stored summaries: write them (``summarize``), combine them (``merge_summaries``) and compute
certified measures from them later, at the same or coarser group keys (``from_summary``).

Naming: a *summary* is always a binned summary (the bins of ``bounds/bins.py``). The *summary pass*
(``compiler/passes/summary.py``) builds one inside a query and measures it at once; a *stored
summary* (this package) is one written to a table or file, merged and measured later.
"""

from uneven.stored.store import from_summary, merge_summaries, summarize

__all__ = ["summarize", "merge_summaries", "from_summary"]
