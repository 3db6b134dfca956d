"""Every benchmark figure in one command: the measure families against the baselines (run.py, three
repeats), the cost curves (curves.py), the out-of-core guarantee (ooc.py), the bounded method
(bounded.py) and the stream plan (stream.py, stream_line.py), one after the other, at full size. Takes about two
hours on 2 cores and writes about 6 GB of data to bench/data (deleted per point for the curves) and
the stream plan's Parquet files to the temp directory.

    python bench/all.py

(tests/test_bench_smoke.py runs the parts at small sizes.)

Exit status 1 if any part fails (a disagreement between results, a memory bound exceeded, …).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

BENCH_DIR = Path(__file__).resolve().parent

FULL = [
    ["run.py", "--repeat", "3"],
    ["curves.py", "--cleanup"],
    ["ooc.py", "--rows", "100000000"],
    ["bounded.py"],
    ["stream.py", "--sizes", "20000000x1000,100000000x1"],
    ["stream_line.py"],
    ["stream_design.py", "--repeat", "3"],
    ["stream_design.py", "--measures", "cuts", "--repeat", "3"],
    ["stream_design.py", "--measures", "moments", "--repeat", "3"],
    ["stream_design.py", "--measures", "theil", "--repeat", "3"],
    ["stream_design.py", "--measures", "moments", "--rows", "1200000", "--groups", "200000", "--strata", "2",
     "--psus", "3", "--cases", "sort,window,stream,window_0,stream_0", "--repeat", "3"],
    ["stream_se.py", "--sizes", "2000000x100"],
    ["stream_se_moment.py"],
    ["stream_se_moment.py", "--data", "entities", "--sizes", "1200000x200000"],
    ["stream_ranked.py"],
]
def main(argv=None) -> int:
    argparse.ArgumentParser(description="Run every benchmark part in sequence, at full size.").parse_args(argv)
    failed = []
    for part in FULL:
        print(f"== python bench/{' '.join(part)}", flush=True)
        if subprocess.run([sys.executable, str(BENCH_DIR / part[0]), *part[1:]]).returncode != 0:
            failed.append(part[0])
    if failed:
        print("failed: " + ", ".join(failed), file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
