"""Stored summaries: write them (``summarize``), combine them (``merge_summaries``) and compute
certified measures from them later, at the same or coarser group keys (``from_summary``)."""

from uneven.summary.store import from_summary, merge_summaries, summarize

__all__ = ["summarize", "merge_summaries", "from_summary"]
