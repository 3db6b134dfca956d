"""Pictures and a shareable report, computed in the database: Lorenz points and plots, and a
self-contained HTML (or Markdown) report with measures per group, a ranking by Gini, Lorenz curves
and a trend."""

from __future__ import annotations

from pathlib import Path

from uneven.engine.output import write_all
from uneven.errors import UnevenError
from uneven.report.data import ReportData, collect
from uneven.report.lorenz import lorenz_points
from uneven.report.plot import plot_lorenz
from uneven.report.query import make_spec, open_connection

__all__ = ["lorenz_points", "plot_lorenz", "write_report", "report_data", "render_report", "report_format"]

DEFAULT_POINTS = 50


def report_data(source, value: str, *, weight: str | None = None, by=None, time: str | None = None,
                points: int = DEFAULT_POINTS, title: str | None = None, dominance=None,
                dominance_generalized: bool = False, con=None, **settings) -> ReportData:
    """Run the report's queries (on ``con`` or a new in-memory connection) and return their results.
    ``dominance``: two groups of ``by`` (``"A,B"`` or a pair of labels) whose Lorenz curves (generalized
    with ``dominance_generalized``) the report compares with a test (docs/dominance.md)."""
    connection, owned = open_connection(con, **settings)
    try:
        return collect(connection, make_spec(connection, source, value, weight, by, time), points=points,
                       title=title, dominance=dominance, generalized=dominance_generalized)
    finally:
        if owned:
            connection.close()


def report_format(path: str | Path | None, fmt: str | None) -> str:
    if fmt is None:
        fmt = "md" if path is not None and Path(path).suffix.lower() in (".md", ".markdown") else "html"
    if fmt not in ("html", "md"):
        raise UnevenError(f"report format must be html or md, got {fmt!r}")
    return fmt


def render_report(data: ReportData, path: str | Path, fmt: str) -> dict[Path, str]:
    """{file: text} of the report at ``path``: one HTML file, or Markdown plus its SVG side files."""
    target = Path(path)
    if fmt == "html":
        from uneven.report.html import render_html
        return {target: render_html(data)}
    from uneven.report.markdown import render_markdown
    text, side = render_markdown(data, target.stem)
    return {target: text, **{target.parent / name: svg for name, svg in side.items()}}


def write_report(source, value: str, path: str | Path, *, weight: str | None = None, by=None,
                 time: str | None = None, format: str | None = None, points: int = DEFAULT_POINTS,  # noqa: A002
                 title: str | None = None, overwrite: bool = False, dominance=None,
                 dominance_generalized: bool = False, con=None, **settings) -> Path:
    """Compute and write a report (HTML by default, Markdown for ``format="md"`` or a .md path).

    ``source``: a Parquet/CSV file or glob, a table or view of ``con``, or a DataFrame/Arrow table.
    ``dominance``: two groups of ``by`` to compare (a section with the test, its chart and table).
    Returns the report's path. An existing file is replaced only with ``overwrite=True``.
    """
    fmt = report_format(path, format)
    data = report_data(source, value, weight=weight, by=by, time=time, points=points, title=title,
                       dominance=dominance, dominance_generalized=dominance_generalized, con=con, **settings)
    write_all(render_report(data, path, fmt), overwrite=overwrite)
    return Path(path)
