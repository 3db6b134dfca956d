"""Milliseconds per ``uneven.compile`` for a few query kinds, optionally beside another revision.

    python bench/compile_speed.py                      # the working tree
    python bench/compile_speed.py --base 58845b5       # the same queries, base and now, one run
    python bench/compile_speed.py --install            # also time uneven.install() on a new DuckDB

The base revision's ``src/`` is exported with ``git archive`` to a temporary folder (as
bench/plan_compare.py does). Each version runs in its own subprocess on the same list of queries
(the fuzzer's shapes are drawn once, here, from tests/grammar.py with a fixed seed), taking the best
of ``--repeat`` rounds of every kind, the two versions' runs interleaved (``--rounds`` each). Times
are CPU time of the compiling process (``time.process_time``), so other jobs on a shared machine
move them less than wall time. Both versions also hand back the SQL they emit, which must be
identical (the speed work changes no output). Needs no data: only compiling is timed.
"""

from __future__ import annotations

import argparse
import json
import random
import subprocess
import sys
import tarfile
import tempfile
from io import BytesIO
from pathlib import Path

BENCH_DIR = Path(__file__).resolve().parent
ROOT = BENCH_DIR.parent

KINDS = {
    "mixed": "SELECT g, gini(x, w), palma(x, w), top_share(x, 0.1, w), theil(x) FROM t "
             "WHERE a = 1 OR b = 2 GROUP BY g",
    "one_gini": "SELECT g, gini(x, w) FROM t GROUP BY g",
    "ten": "SELECT g, gini(x, w), palma(x, w), s80s20(x, w), top_share(x, 0.1, w), quantile_w(x, 0.5, w), "
           "lorenz(x, 0.4, w), hoover(x, w), theil(x, w), cv(x, w), atkinson(x, 0.5, w) FROM t GROUP BY g",
    "moment": "SELECT g, theil(x, w), mld(x, w), ge(x, 2, w), atkinson(x, 1, w) FROM t GROUP BY g",
    "se": "SELECT g, gini_se(x, w), theil_se(x, w), top_share_se(x, 0.1, w) FROM t GROUP BY g",
}
DIALECT_KINDS = {"mixed@postgres": "postgres", "mixed@sqlite": "sqlite", "mixed@spark": "spark"}

# the child: time every kind with the uneven found on PYTHONPATH; JSON in on stdin, JSON out
CHILD = r"""
import json, sys, time
import uneven
job = json.load(sys.stdin)
out = {"ms": {}, "sql": {}, "errors": {}}
def run(queries, dialect):
    texts = []
    for q in queries:
        try:
            texts.append(uneven.compile(q, dialect=dialect))
        except uneven.UnevenError as e:
            texts.append("error: " + type(e).__name__)
    return texts
for kind, (queries, dialect) in job["kinds"].items():
    run(queries, dialect)  # warm (imports, caches)
    best = float("inf")
    for _ in range(job["repeat"]):
        t0 = time.process_time()
        texts = run(queries, dialect)
        best = min(best, time.process_time() - t0)
    out["ms"][kind] = 1000 * best / len(queries)
    out["sql"][kind] = texts
    out["errors"][kind] = sum(t.startswith("error: ") for t in texts)
if job["install"]:
    import duckdb
    t0, c0 = time.perf_counter(), time.process_time()
    uneven.install(duckdb.connect())
    out["install_s"] = time.perf_counter() - t0
    out["install_cpu_s"] = time.process_time() - c0
json.dump(out, sys.stdout)
"""


def fuzz_shapes(count: int, seed: int = 20261203) -> list[str]:
    sys.path.insert(0, str(ROOT / "tests"))
    from grammar import Grammar  # the fuzzer's grammar (tests/grammar.py)

    g = Grammar(random.Random(seed), {"limit"}, wide_params=True)
    return [g.shape().sql() for _ in range(count)]


def export_src(rev: str, into: Path) -> Path:
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "src"], check=True, capture_output=True).stdout
    with tarfile.open(fileobj=BytesIO(archive)) as tar:
        tar.extractall(into, filter="data")
    return into / "src"


def run_child(src: Path, job: dict) -> dict:
    done = subprocess.run([sys.executable, "-c", CHILD], input=json.dumps(job), capture_output=True, text=True,
                          env={"PYTHONPATH": str(src), "PATH": "/usr/bin:/bin"})
    if done.returncode != 0:
        raise SystemExit(f"the compile run under {src} failed:\n{done.stderr[-2000:]}")
    return json.loads(done.stdout)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description="Milliseconds per compile, per query kind.")
    p.add_argument("--base", help="git revision to time beside the working tree")
    p.add_argument("--repeat", type=int, default=3, help="rounds per kind in one run; the best is kept")
    p.add_argument("--rounds", type=int, default=2, help="runs per version, interleaved; the best is kept")
    p.add_argument("--shapes", type=int, default=100, help="fuzzer shapes in the 'fuzz' kind")
    p.add_argument("--install", action="store_true", help="also time uneven.install() on a new DuckDB")
    a = p.parse_args(argv)
    kinds = {k: ([q], "duckdb") for k, q in KINDS.items()}
    kinds.update({k: ([KINDS["mixed"]], d) for k, d in DIALECT_KINDS.items()})
    kinds["fuzz"] = (fuzz_shapes(a.shapes), "duckdb")
    job = {"kinds": kinds, "repeat": a.repeat, "install": a.install}
    runs: dict[str, dict] = {}
    with tempfile.TemporaryDirectory() as tmp:
        sources = {"base": export_src(a.base, Path(tmp))} if a.base else {}
        sources["now"] = ROOT / "src"
        for _ in range(a.rounds):
            for name, src in sources.items():
                got = run_child(src, job)
                if name not in runs:
                    runs[name] = got
                    continue
                for kind, ms in got["ms"].items():
                    runs[name]["ms"][kind] = min(runs[name]["ms"][kind], ms)
                for key in ("install_s", "install_cpu_s"):
                    if key in got:
                        runs[name][key] = min(runs[name][key], got[key])
    names = list(runs)
    print(f"CPU ms per compile, best of {a.rounds} x {a.repeat}" + (f"; base {a.base}" if a.base else ""))
    print(f"{'kind':16s}" + "".join(f"{n:>10s}" for n in names) + ("   speedup" if a.base else ""))
    for kind in kinds:
        row = f"{kind:16s}" + "".join(f"{runs[n]['ms'][kind]:10.2f}" for n in names)
        if a.base:
            row += f"{runs['base']['ms'][kind] / runs['now']['ms'][kind]:9.2f}x"
        if kind == "fuzz":
            row += f"   ({a.shapes} shapes, {runs['now']['errors'][kind]} refused)"
        print(row)
    if a.install:
        print(f"{'install() wall':16s}" + "".join(f"{runs[n]['install_s']:9.2f}s" for n in names))
        print(f"{'install() CPU':16s}" + "".join(f"{runs[n]['install_cpu_s']:9.2f}s" for n in names))
    if a.base:
        differ = [k for k in kinds if runs["base"]["sql"][k] != runs["now"]["sql"][k]]
        print("emitted SQL identical to the base's" if not differ else f"emitted SQL DIFFERS in: {', '.join(differ)}")
        return 1 if differ else 0
    return 0


if __name__ == "__main__":
    sys.exit(main())
