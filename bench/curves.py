"""Cost curves: time of the sort baseline and of exact Gini (weighted, unweighted) against the
number of rows (1000 groups) and against the number of groups (fixed rows), each case in a
fresh process as in run.py. Writes a table to stdout, the figures to JSON and a PNG plot.

    python bench/curves.py                                  # rows 1M..100M, groups 1..100k at 20M
    python bench/curves.py --rows 1000000,2000000,5000000 --groups 1,100,10000 --group-rows 2000000
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

CASES = ["sort", "uneven_w", "uneven_u"]


def ensure(rows: int, groups: int, a) -> Path:
    code = ("import sys; sys.path.insert(0, %r); import gen_data; "
            "print(gen_data.ensure('curve_%d', %d, data_dir=gen_data.Path(%r)))"
            % (str(BENCH_DIR), groups, rows, str(run.DATA_DIR)))
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True)
    return Path(out.stdout.strip().splitlines()[-1])


def measure(points: list[tuple[int, int]], a) -> list[dict]:
    rows = []
    for n, g in points:
        path = ensure(n, g, a)
        rec = {"rows": n, "groups": g}
        for case in CASES:
            r = run.run_repeated(case, f"curve_{n}_{g}", path, a.memory_limit, a)
            rec[case] = r.get("seconds") if r.get("status") == "ok" else None
            rec[case + "_rss_mb"] = r.get("peak_rss_mb")
        print(f"  {n:>12,} rows {g:>8,} groups  " + "  ".join(
            f"{c} {rec[c]:.2f}s" if rec[c] is not None else f"{c} failed" for c in CASES), file=sys.stderr)
        if a.cleanup:
            path.unlink(missing_ok=True)
        rows.append(rec)
    return rows


def table(rows: list[dict], axis: str) -> str:
    lines = [f"| {axis} | sort s | gini(x, w) s | x sort | gini(x) s | x sort |", "| ---: | ---: | ---: | ---: | ---: | ---: |"]
    for r in rows:
        def f(v):
            return "-" if v is None else f"{v:.2f}"
        def q(v):
            return "-" if v is None or not r["sort"] else f"{v / r['sort']:.2f}"
        lines.append(f"| {r[axis]:,} | {f(r['sort'])} | {f(r['uneven_w'])} | {q(r['uneven_w'])} | "
                     f"{f(r['uneven_u'])} | {q(r['uneven_u'])} |")
    return "\n".join(lines)


def plot(by_rows: list[dict], by_groups: list[dict], path: Path) -> None:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 2, figsize=(10, 4))
    labels = {"sort": "sort (DuckDB ORDER BY)", "uneven_w": "gini(x, w)", "uneven_u": "gini(x)"}
    for ax, rows, axis, title in ((axes[0], by_rows, "rows", "time vs rows (1000 groups)"),
                                  (axes[1], by_groups, "groups", "time vs groups")):
        for case in CASES:
            pts = [(r[axis], r[case]) for r in rows if r[case] is not None]
            if pts:
                ax.plot(*zip(*pts), marker="o", label=labels[case])
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel(axis)
        ax.set_ylabel("seconds")
        ax.set_title(title)
        ax.grid(True, which="both", alpha=0.3)
        ax.legend()
    fig.tight_layout()
    fig.savefig(path, dpi=110)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description="Cost curves of exact Gini against rows and groups.")
    p.add_argument("--rows", default="1000000,3000000,10000000,30000000,100000000",
                   help="row counts of the rows curve (1000 groups)")
    p.add_argument("--groups", default="1,100,1000,10000,100000", help="group counts of the groups curve")
    p.add_argument("--group-rows", type=int, default=20_000_000, help="rows of the groups curve")
    p.add_argument("--memory-limit", default="4GB")
    p.add_argument("--threads", type=int, default=2)
    p.add_argument("--repeat", type=int, default=1)
    p.add_argument("--timeout", type=float, default=3600.0)
    p.add_argument("--cleanup", action="store_true", help="delete each data file after its point")
    p.add_argument("--json", type=Path, default=run.RESULTS_DIR / "curves.json")
    p.add_argument("--plot", type=Path, default=BENCH_DIR / "curves.png")
    a = p.parse_args(argv)
    run.TMP_DIR.mkdir(parents=True, exist_ok=True)
    by_rows = measure([(int(n), 1000) for n in a.rows.split(",")], a)
    by_groups = measure([(a.group_rows, int(g)) for g in a.groups.split(",")], a)
    print("time vs rows (1000 groups)\n" + table(by_rows, "rows"))
    print(f"\ntime vs groups ({a.group_rows:,} rows)\n" + table(by_groups, "groups"))
    a.json.parent.mkdir(parents=True, exist_ok=True)
    a.json.write_text(json.dumps({"by_rows": by_rows, "by_groups": by_groups, "environment": run.environment(),
                                  "threads": a.threads, "memory_limit": a.memory_limit}, indent=2))
    plot(by_rows, by_groups, a.plot)
    print(f"\nwritten: {a.json}, {a.plot}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
