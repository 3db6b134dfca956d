"""The compiler: SQL with measure calls in, plain SQL out.

Stages (each a small function over sqlglot trees):
parse (``parse.py``) → find calls and their scopes (``calls.py``) → resolve group keys
(``keys.py``) → plan passes (``plan.py``) → lower passes (``passes/``) → assemble the scope
(``scope.py``) → generate for the target dialect (``generate.py``).

``compile_sql`` and ``compile_tree`` live in ``pipeline``; they are loaded on first use so that
importing one stage (``uneven.compiler.emit``, say) does not load the whole pipeline.
"""

from __future__ import annotations

__all__ = ["compile_sql", "compile_tree"]


def __getattr__(name: str):
    if name in __all__:
        from uneven.compiler import pipeline

        return getattr(pipeline, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
