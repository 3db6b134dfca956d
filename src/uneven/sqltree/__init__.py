"""The bottom layer for SQL trees: helpers over sqlglot trees that know nothing of measures.

Modules here import sqlglot, duckdb and ``uneven.errors`` only, never the compiler or the catalog,
so every other layer (compiler, catalog, builder, tests' oracle) may use them.

* ``build``: the expression builders (``s.lit``, ``s.add``, ``s.window`` …), CTE and table references.
* ``spans``: where a node stands in the SQL text (for error carets) and how it reads in a message.
* ``constants``: the value of a constant parameter expression, with the meaning the engine gives it.
* ``grouping``: a scope's own column references (scope_columns) and which select items GROUP BY ALL
  groups by (DuckDB leaves constant items out).
* ``volatile``: the functions whose value changes between evaluations (random(), uuid(), nextval …).
"""
