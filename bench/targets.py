"""The speed targets as ratios measured in one run of bench/run.py (parent side)."""

from __future__ import annotations

# (label, data set, case, reference case, measured quantity, bound): time ratio unless "rss"
TARGETS = [
    ("weighted Gini <= 1.5x sort", "g1000", "uneven_w", "sort", "time", 1.5),
    ("weighted Gini <= 1.5x sort", "g100k", "uneven_w", "sort", "time", 1.5),
    ("weighted Gini <= 1.5x sort", "ties", "uneven_w", "sort", "time", 1.5),
    ("weighted Gini <= 1.5x sort", "one", "uneven_w", "sort", "time", 1.5),
    ("unweighted Gini <= 1.2x sort", "g1000", "uneven_u", "sort", "time", 1.2),
    ("unweighted Gini <= 1.2x sort", "g100k", "uneven_u", "sort", "time", 1.2),
    ("unweighted Gini <= 1.2x sort", "ties", "uneven_u", "sort", "time", 1.2),
    ("unweighted Gini <= 1.2x sort", "one", "uneven_u", "sort", "time", 1.2),
    ("ten measures <= 1.3x one Gini", "g1000", "uneven_ten", "uneven_w", "time", 1.3),
    ("ten measures <= 1.3x one Gini", "g100k", "uneven_ten", "uneven_w", "time", 1.3),
    ("moment measures <= 1.5x scan", "g1000", "uneven_moment", "scan", "time", 1.5),
    ("moment measures <= 1.5x scan", "g100k", "uneven_moment", "scan", "time", 1.5),
    ("pandas >= 8x weighted Gini's time", "g1000", "uneven_w", "pandas", "time", 1 / 8),
    ("pandas >= 8x weighted Gini's time", "g100k", "uneven_w", "pandas", "time", 1 / 8),
    ("peak RSS <= 1/4 of pandas", "g1000", "uneven_w", "pandas", "rss", 0.25),
    ("peak RSS <= 1/4 of pandas", "g100k", "uneven_w", "pandas", "rss", 0.25),
    ("textbook window SQL, weighted, for scale", "g1000", "window_sql", "sort", "time", None),
    ("textbook window SQL, unweighted, for scale", "g1000", "window_sql_u", "sort", "time", None),
]


def targets(by_data: dict[str, dict[str, dict]]) -> list[dict]:
    out = []
    for label, data, case, ref, what, bound in TARGETS:
        a = by_data.get(data, {}).get(case, {})
        b = by_data.get(data, {}).get(ref, {})
        if a.get("status") != "ok" or b.get("status") != "ok":
            continue
        key = "peak_rss_mb" if what == "rss" else "seconds"
        if not a.get(key) or not b.get(key):
            continue
        r = a[key] / b[key]
        out.append({"target": label, "data": data, "case": case, "against": ref, "ratio": r,
                    "bound": bound, "met": None if bound is None else r <= bound})
    return out


def print_targets(rows: list[dict]) -> None:
    if not rows:
        return
    print("\ntargets (ratios in this run):")
    for t in rows:
        flag = "" if t["met"] is None else ("met" if t["met"] else "MISSED")
        print(f"  {t['target']:<42} {t['data']:<6} {t['case']:>15} / {t['against']:<10} "
              f"{t['ratio']:6.2f}  {flag}")
