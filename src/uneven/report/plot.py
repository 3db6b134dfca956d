"""Plot Lorenz points (from ``lorenz_points``) with matplotlib: the equality line and one curve per
group, or generalized Lorenz curves (μ·L(p)). PNG or SVG; matplotlib is the ``plot`` extra.

Each curve carries the gid ``lorenz-curve-N`` and the equality line ``lorenz-equality`` in SVG
output, so the drawn data can be read back."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from uneven.errors import OutputError, UnevenError
from uneven.report.lorenz import POINT_COLUMNS
from uneven.report.query import group_label
from uneven.report.svg import PALETTE

MAX_GROUPS = 12
FORMATS = ("png", "svg")


def load_matplotlib():
    try:
        import matplotlib
        from matplotlib.figure import Figure
    except ImportError:
        raise UnevenError("plots need matplotlib: pip install 'uneven[plot]' (or write the points "
                           "with --output FILE.csv)") from None
    return matplotlib, Figure


def curves(points: pd.DataFrame, column: str) -> list[tuple[str, list[float], list[float]]]:
    """(label, p, y) per group, in the table's order."""
    by = list(points.attrs.get("by", [c for c in points.columns if c not in POINT_COLUMNS]))
    if not by:
        return [("all rows", points["p"].tolist(), points[column].tolist())]
    out = []
    for _, part in points.groupby(by, dropna=False, sort=False):
        out.append((group_label(part.iloc[0], by), part["p"].tolist(), part[column].tolist()))
    return out


def plot_lorenz(points: pd.DataFrame, path: str | Path | None = None, *, generalized: bool = False,
                title: str | None = None, max_groups: int = MAX_GROUPS, overwrite: bool = False):
    """A matplotlib Figure of the curves in ``points``; written to ``path`` (.png or .svg) if given."""
    series = curves(points, "generalized_lorenz" if generalized else "lorenz")
    if len(series) > max_groups:
        raise UnevenError(f"{len(series)} groups: a plot shows at most {max_groups} curves to stay readable; "
                           "group by fewer columns, filter the source, raise the limit (--max-groups), or "
                           "write the points table instead (--output FILE.csv)")
    fmt = ""
    if path is not None:
        fmt = Path(path).suffix.lower().lstrip(".")
        if fmt not in FORMATS:
            raise OutputError(f"{path}: a plot is written as .png or .svg (points as .csv)")
    matplotlib, Figure = load_matplotlib()
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "uneven"}):
        fig = Figure(figsize=(7.5, 6), dpi=110)
        ax = fig.add_subplot()
        value = points.attrs.get("value", "value")
        if generalized:
            ax.set_ylabel(f"generalized Lorenz μ·L(p) of {value}")
        else:
            (eq,) = ax.plot([0, 1], [0, 1], color="#888888", linestyle="--", linewidth=1.2, label="equality")
            eq.set_gid("lorenz-equality")
            ax.set_ylabel(f"cumulative share of {value}")
        for i, (label, ps, ys) in enumerate(series):
            (line,) = ax.plot(ps, ys, color=PALETTE[i % len(PALETTE)], linewidth=2, label=label)
            line.set_gid(f"lorenz-curve-{i}")
        ax.set_xlabel("cumulative share of the population (poorest first)")
        ax.set_xlim(0, 1)
        if not generalized:
            ax.set_ylim(min(0.0, min((min(y for y in ys if y == y) for _, _, ys in series if any(y == y for y in ys)),
                                     default=0.0)), None)
        ax.grid(True, color="#e4e4ea")
        ax.set_title(title or ("Generalized Lorenz curves" if generalized else "Lorenz curves")
                     + (f" of {value}" if value else ""))
        ax.legend(loc="upper left", fontsize=9, frameon=True)
        fig.tight_layout()
        if path is not None:
            _save(fig, Path(path), fmt, overwrite)
    return fig


def _save(fig, path: Path, fmt: str, overwrite: bool) -> None:
    import io

    from uneven.engine.output import write_all
    buf = io.BytesIO()
    # no date in an SVG, so the same curves write the same file
    metadata: dict[str, str | None] = {"Date": None} if fmt == "svg" else {"Software": "uneven"}
    fig.savefig(buf, format=fmt, metadata=metadata)
    write_all({path: buf.getvalue()}, overwrite=overwrite)
