"""The compiler: SQL with measure calls in, plain SQL out.

Stages (each a small function over sqlglot trees):
parse (``parse.py``) → find calls and their scopes (``calls.py``) → resolve group keys
(``keys.py``) → plan passes (``plan.py``) → lower passes (``passes/``) → assemble the scope
(``scope.py``) → generate for the target dialect (``generate.py``).
"""

from uneven.compiler.pipeline import compile_sql, compile_tree

__all__ = ["compile_sql", "compile_tree"]
