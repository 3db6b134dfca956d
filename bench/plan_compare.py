"""Time the SQL two versions of the compiler emit for the same queries, in one process.

    python bench/plan_compare.py --base f4c9f3b                       # g1000, every family below
    python bench/plan_compare.py --base HEAD~3 --data g100k --families moment,ten --repeat 5
    python bench/plan_compare.py --base HEAD~1 --families se,se_design            # linearized SEs
    python bench/plan_compare.py --base 1907c59 --families se,se_design,se_fgt,se_fgt_mix   # fgt_se's shift

The base revision's ``src/`` is exported with ``git archive`` to a temporary folder; each query is
compiled by that version and by the working tree (each in a subprocess), then both SQL texts run
interleaved on one DuckDB connection (2 threads, memory_limit 4GB), best of ``--repeat``. Prints
each time as a multiple of a plain scan of the same file, the speedup, and the largest relative
difference between the two results (both must compute the same numbers).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tarfile
import tempfile
import time
from io import BytesIO
from pathlib import Path

import numpy as np

BENCH_DIR = Path(__file__).resolve().parent
ROOT = BENCH_DIR.parent

FAMILIES = {
    "gini_w": "gini(x, w)",
    "gini_u": "gini(x)",
    "ten": "gini(x, w), palma(x, w), s80s20(x, w), top_share(x, 0.1, w), quantile_w(x, 0.5, w), "
           "lorenz(x, 0.4, w), hoover(x, w), theil(x, w), cv(x, w), atkinson(x, 0.5, w)",
    "moment": "theil(x, w), mld(x, w), ge(x, 2, w), atkinson(x, 1, w)",
    "centred": "cv(x, w), hoover(x, w)",
    "se": "gini_se(x, w), palma_se(x, w), lorenz_se(x, 0.4, w), quantile_w_se(x, 0.5, w)",
    "se_design": "gini_se(x, w, strata := hash(x) % 5, psu := hash(w) % 40), "
                 "palma_se(x, w, strata := hash(x) % 5, psu := hash(w) % 40)",
    # the fixed line's errors alone (a window over the partition for the group's smallest value) and beside
    # theil_se (whose μ is such a window already); the line near the data's median
    "se_fgt": "fgt_se(x, 0, 1000, w), fgt_se(x, 2, 1000, w)",
    "se_fgt_mix": "theil_se(x, w), fgt_se(x, 2, 1000, w)",
}


def export_src(rev: str, into: Path) -> Path:
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "src"], check=True, capture_output=True).stdout
    with tarfile.open(fileobj=BytesIO(archive)) as tar:
        tar.extractall(into, filter="data")
    return into / "src"


def compile_with(src: Path, sql: str) -> str:
    code = "import sys, uneven; sys.stdout.write(uneven.compile(sys.stdin.read()))"
    return subprocess.run([sys.executable, "-c", code], input=sql, capture_output=True, text=True, check=True,
                          env={"PYTHONPATH": str(src), "PATH": "/usr/bin:/bin"}).stdout


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description="Same-run timing of the SQL of two compiler versions.")
    p.add_argument("--base", required=True, help="git revision to compare the working tree with")
    p.add_argument("--data", default="g1000", help="data set in bench/data (see gen_data.py)")
    p.add_argument("--families", default=",".join(FAMILIES), help="comma list of " + ", ".join(FAMILIES))
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--threads", type=int, default=2)
    a = p.parse_args(argv)
    import duckdb

    path = BENCH_DIR / "data" / f"{a.data}.parquet"
    if not path.exists():
        print(f"no {path}: run python bench/gen_data.py first", file=sys.stderr)
        return 2
    src = f"read_parquet('{path}')"
    with tempfile.TemporaryDirectory() as tmp:
        base = export_src(a.base, Path(tmp))
        variants = {"scan": f"SELECT grp, sum(x), sum(w), count(*) FROM {src} GROUP BY grp"}
        names = [f.strip() for f in a.families.split(",")]
        for name in names:
            query = f"SELECT grp, {FAMILIES[name]} FROM {src} GROUP BY grp ORDER BY grp"
            variants[f"{name} base"] = compile_with(base, query)
            variants[f"{name} now"] = compile_with(ROOT / "src", query)
    con = duckdb.connect(config={"threads": a.threads, "memory_limit": "4GB"})
    best, results = {k: float("inf") for k in variants}, {}
    for _ in range(a.repeat):
        for key, sql in variants.items():
            t0 = time.perf_counter()
            results[key] = con.execute(sql).fetchall()
            best[key] = min(best[key], time.perf_counter() - t0)
    print(f"{path.name}, base {a.base}, best of {a.repeat}; times as multiples of the scan ({best['scan']:.3f} s)")
    for name in names:
        old = np.array([r[1:] for r in results[f"{name} base"]], dtype=float)
        new = np.array([r[1:] for r in results[f"{name} now"]], dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            diff = np.nanmax(np.abs(old - new) / np.abs(old))
        print(f"  {name:8s} base {best[f'{name} base'] / best['scan']:6.2f}x  now {best[f'{name} now'] / best['scan']:6.2f}x"
              f"  speedup {best[f'{name} base'] / best[f'{name} now']:5.2f}  max relative difference {diff:.1e}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
