"""Out-of-core guarantee: exact Gini (weighted and unweighted) on 100M rows in one group and on
100M rows x 10,000 groups completes at memory_limit=1GB with peak RSS <= 1.5 GB (10^9 bytes,
the process's VmHWM, interpreter and imports included), and DuckDB's temp files are gone after.

    python bench/ooc.py                        # full size (100M rows each; data ~1.6 GB per file)
    python bench/ooc.py --rows 2000000         # quick check

Exit status 1 when a run fails, exceeds the RSS bound or leaves temp files behind.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

BENCH_DIR = Path(__file__).resolve().parent
sys.path.insert(0, str(BENCH_DIR))

import run  # noqa: E402  (bench/ is not a package)

RSS_BOUND_MB = 1.5e9 / 2**20  # 1.5 GB in MiB, as VmHWM is reported


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description="Out-of-core runs at a 1GB memory limit.")
    p.add_argument("--rows", type=int, default=100_000_000)
    p.add_argument("--memory-limit", default="1GB")
    p.add_argument("--threads", type=int, default=2)
    p.add_argument("--timeout", type=float, default=7200.0)
    p.add_argument("--json", type=Path, default=run.RESULTS_DIR / "ooc.json")
    a = p.parse_args(argv)
    a.repeat = 1
    subprocess.run([sys.executable, str(BENCH_DIR / "gen_data.py"), "--rows", str(a.rows), "--rows-one",
                    str(a.rows), "--kinds", "g10k", "--data-dir", str(run.DATA_DIR)], check=True)
    failures, out = 0, []
    for data in ("one", "g10k"):
        for case in ("uneven_w", "uneven_u"):
            tmp = run.TMP_DIR / f"ooc_{data}_{case}"
            tmp.mkdir(parents=True, exist_ok=True)
            saved, run.TMP_DIR = run.TMP_DIR, tmp
            try:
                r = run.run_case(case, data, run.DATA_DIR / f"{data}.parquet", a.memory_limit, a)
            finally:
                run.TMP_DIR = saved
            left = [f.name for f in tmp.rglob("*") if f.is_file()]
            ok = r.get("status") == "ok" and r["peak_rss_mb"] <= RSS_BOUND_MB and not left
            failures += not ok
            rec = {"data": data, "case": case, "rows": a.rows, "status": r.get("status"),
                   "seconds": r.get("seconds"), "peak_rss_mb": r.get("peak_rss_mb"), "temp_files_left": left,
                   "ok": ok, "error": r.get("error")}
            out.append(rec)
            print(f"{data:<5} {case:<10} {rec['status']:<7} {rec['seconds'] or 0:9.1f} s  peak RSS "
                  f"{rec['peak_rss_mb'] or 0:7.0f} MB (bound {RSS_BOUND_MB:.0f})  temp files left: {len(left)}  "
                  f"{'ok' if ok else 'FAILED ' + (rec['error'] or '')[:200]}")
            tmp.rmdir() if not left else None
    a.json.parent.mkdir(parents=True, exist_ok=True)
    a.json.write_text(json.dumps({"memory_limit": a.memory_limit, "threads": a.threads, "runs": out,
                                  "environment": run.environment()}, indent=2))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
