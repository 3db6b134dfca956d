"""The report as Markdown: a table and lists in the text, and each chart as an SVG file written
next to it (``NAME-ranking.svg``, ``NAME-lorenz.svg``, ``NAME-trend.svg``, ``NAME-dominance.svg``)
that the text links by a relative path, so the folder renders wherever Markdown shows local images."""

from __future__ import annotations

from pathlib import Path

from uneven.report import dominance as dom
from uneven.report.charts import all_charts
from uneven.report.data import ReportData, format_value
from uneven.report.html import FEW_FLAG, cautions, describe, notes


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _table(data: ReportData) -> list[str]:
    group_head = ", ".join(data.by) if data.by else "group"
    head = ["rank", group_head] + [c.label for c in data.columns]
    lines = ["| " + " | ".join(_cell(h) for h in head) + " |",
             "|" + "|".join(["---:", ":---"] + ["---:"] * len(data.columns)) + "|"]
    rows = [(str(g.rank) if g.rank else "—", g) for g in data.groups]
    if data.overall is not None:
        rows.append(("", data.overall))
    for rank, g in rows:
        label = f"**{g.label}**" if g is data.overall else g.label
        label += f" {FEW_FLAG}" if g.few_rows else ""
        lines.append("| " + " | ".join([rank, _cell(label)] + [_cell(format_value(c, g.values))
                                                               for c in data.columns]) + " |")
    return lines


def _dominance(data: ReportData, stem: str) -> list[str]:
    d = data.dominance
    if d is None:
        return []
    lines = ["", f"## Dominance: {_cell(str(d.groups[0]))} and {_cell(str(d.groups[1]))}", "",
             f"**{d.verdict}**", "", dom.summary(d), "", f"![Difference of the curves]({stem}-dominance.svg)", "",
             "| " + " | ".join(dom.HEADERS) + " |", "|" + "|".join(["---:"] * len(dom.HEADERS)) + "|"]
    lines += ["| " + " | ".join(_cell(c) for c in row) + " |" for row in dom.cells(d)]
    return lines + ["", dom.NOTE]


def render_markdown(data: ReportData, stem: str) -> tuple[str, dict[str, str]]:
    """The Markdown text and the side files it links ({file name: SVG text})."""
    charts = all_charts(data)
    files = {f"{stem}-{name}.svg": text for name, text in charts.items()}
    out = [f"# {data.title}", ""] + describe(data) + [""]
    out += ["## Ranking by Gini", ""]
    for g in data.groups:
        if g.rank:
            out.append(f"{g.rank}. {g.label} — Gini {g.values['gini']:.4f}" + (f" {FEW_FLAG}" if g.few_rows else ""))
    out += ["", f"![Groups ranked by Gini]({stem}-ranking.svg)", "", "## Lorenz curves", "",
            f"![Lorenz curves]({stem}-lorenz.svg)", "", "## Measures per group", ""] + _table(data)
    out += ["", "**Read with care:**", ""] + [f"- {n}" for n in cautions(data)]
    if "trend" in charts:
        out += ["", f"## Trend by {data.time}", "", f"![Gini by {data.time}]({stem}-trend.svg)"]
    out += _dominance(data, stem)
    out += ["", "## Notes", ""] + [f"- {n}" for n in notes(data)] + [""]
    return "\n".join(out), files


def side_file_names(path: Path, trend: bool = True, dominance: bool = False) -> list[str]:
    names = ("ranking", "lorenz") + (("trend",) if trend else ()) + (("dominance",) if dominance else ())
    return [f"{path.stem}-{name}.svg" for name in names]
