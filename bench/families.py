"""Benchmark cases for every measure family through uneven (child side of bench/run.py).

Each case runs one uneven query over the data file in a fresh process (see run.py) and returns
its time. The families, on value ``x`` and weight ``w`` per group ``grp``:

  uneven_w        gini(x, w)                                   ordered pass, weighted
  uneven_u        gini(x)                                      ordered pass, unweighted (row_number)
  uneven_ten      ten measures on x, w: gini, palma, s80s20, top_share(0.1), quantile_w(0.5),
                   lorenz(0.4), hoover, theil, cv, atkinson(0.5)  (one shared ordered pass + scans)
  uneven_moment   theil(x, w), mld(x, w), ge(x, 2, w), atkinson(x, 1, w)   moment sums on one scan
  uneven_centred  cv(x, w), hoover(x, w)                       centred pass (a second scan + join;
                   with an ordered pass on the same x, w they ride on it instead)
  uneven_lorenz   lorenz_curve(x, 10, w)                       ordered pass + grid cells
  uneven_hhi      hhi(x)                                       concentration of rows per group
  uneven_w_rows / uneven_u_rows   gini with tie grouping off (on the tie-heavy data)

Results of uneven_w/uneven_u are returned per group so run.py can compare them with the
hand-written SQL and pandas; the others return their row count.

Before the clock starts, the query is compiled once (``first_compile_seconds``: the first compile in
a process also initialises sqlglot's dialect tables, like an import); then a second compile is
timed alone (``compile_seconds``) and the timed ``uneven.query`` includes its own compile. On small
files the compile is a visible share of a moment query (a 2M-row scan takes about 0.05 s, a compile
about 0.02 s), so ``compile_seconds`` is reported beside the time.
"""

from __future__ import annotations

import time

FAMILIES = {
    "uneven_w": ("gini(x, w)", {}),
    "uneven_u": ("gini(x)", {}),
    "uneven_w_rows": ("gini(x, w)", {"tie_grouping": "off"}),
    "uneven_u_rows": ("gini(x)", {"tie_grouping": "off"}),
    "uneven_ten": ("gini(x, w), palma(x, w), s80s20(x, w), top_share(x, 0.1, w), quantile_w(x, 0.5, w), "
                    "lorenz(x, 0.4, w), hoover(x, w), theil(x, w), cv(x, w), atkinson(x, 0.5, w)", {}),
    "uneven_moment": ("theil(x, w), mld(x, w), ge(x, 2, w), atkinson(x, 1, w)", {}),
    "uneven_centred": ("cv(x, w), hoover(x, w)", {}),
    "uneven_lorenz": ("lorenz_curve(x, 10, w)", {}),
    "uneven_hhi": ("hhi(x)", {}),
}
GINI_CASES = ("uneven_w", "uneven_u", "uneven_w_rows", "uneven_u_rows")


def sql_string_literal(text: str) -> str:
    """Quote ``text`` as a SQL string literal (single quotes doubled)."""
    return "'" + text.replace("'", "''") + "'"


def family_case(name: str):
    calls, options = FAMILIES[name]

    def run(a):
        import pandas  # noqa: F401  (imported before the clock starts)
        try:
            import uneven
        except ImportError as e:
            return {"status": "n/a", "reason": f"uneven not importable: {e}"}, None
        sql = f"SELECT grp, {calls} FROM read_parquet({sql_string_literal(a.file)}) GROUP BY grp"
        t0 = time.perf_counter()
        uneven.compile(sql)
        first_compile = time.perf_counter() - t0
        t0 = time.perf_counter()
        uneven.compile(sql)
        compile_seconds = time.perf_counter() - t0
        t0 = time.perf_counter()
        df = uneven.query(sql, threads=a.threads, memory_limit=a.memory_limit, temp_directory=a.temp_dir,
                           **options)
        elapsed = time.perf_counter() - t0
        extra = {"compile_seconds": compile_seconds, "first_compile_seconds": first_compile}
        if name not in GINI_CASES:
            return {"result_rows": len(df), **extra}, elapsed
        df = df.sort_values(df.columns[0])
        return {"grp": [int(g) for g in df.iloc[:, 0]], "gini": [float(v) for v in df.iloc[:, 1]], **extra}, elapsed

    return run


CASES = {name: family_case(name) for name in FAMILIES}
