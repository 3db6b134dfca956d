"""Where a node came from in the SQL text the user wrote, and how a node reads in a message."""

from __future__ import annotations

from sqlglot import exp


def span(node: exp.Expression) -> tuple[int | None, int | None]:
    """Character offsets of the first token of ``node`` that sqlglot positioned."""
    for sub in node.walk():
        meta = getattr(sub, "_meta", None) or {}
        if "start" in meta:
            return meta["start"], meta.get("end")
        if isinstance(sub, exp.Expression) and isinstance(sub.this, exp.Identifier):
            m = getattr(sub.this, "_meta", None) or {}
            if "start" in m:
                return m["start"], m.get("end")
    return None, None


def text(node: exp.Expr) -> str:
    """SQL of a node for messages, function names as written in lower case."""
    return node.sql("duckdb", normalize_functions="lower")
