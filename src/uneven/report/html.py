"""The report as one self-contained HTML file: inline CSS and inline SVG, no scripts, no fonts or
anything else fetched from elsewhere, so it can be mailed or archived and opens offline."""

from __future__ import annotations

import datetime as _dt
from html import escape

import uneven
from uneven.report import dominance as dom
from uneven.report.charts import all_charts
from uneven.report.data import CAUTIONS, FEW_ROWS, INTERVAL_NOTE, ReportData, format_value

TABLE_HEAD = "#dce6f2"  # the table header's background (the screenshot test looks for it)

CSS = """
body { font-family: system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif;
       margin: 24px auto; max-width: 1320px; padding: 0 16px; color: #222; background: #fff; }
h1 { font-size: 24px; margin: 0 0 4px; }
h2 { font-size: 18px; margin: 28px 0 8px; border-bottom: 1px solid #ccd; padding-bottom: 4px; }
p.meta { color: #555; margin: 2px 0; }
.charts { display: flex; flex-wrap: wrap; gap: 16px; align-items: flex-start; }
.charts figure { margin: 0; border: 1px solid #dde; }
.table-wrap { overflow-x: auto; }
table.measures { border-collapse: collapse; font-variant-numeric: tabular-nums; font-size: 14px; }
table.measures th { background: TABLE_HEAD; text-align: right; padding: 5px 7px; border-bottom: 2px solid #9ab; }
table.measures th.group, table.measures td.group { text-align: left; white-space: nowrap; }
table.measures td { text-align: right; padding: 4px 7px; border-bottom: 1px solid #e4e4ea; white-space: nowrap; }
table.measures tr.overall td { font-weight: 600; border-top: 2px solid #9ab; }
.notes { color: #555; font-size: 13px; }
table.measures .ci { color: #666; font-size: 80%; }
table.measures tr.few td { background: #fff6e0; }
table.measures .flag { color: #a05a00; font-weight: 600; }
p.verdict { font-size: 16px; font-weight: 600; margin: 6px 0 10px; }
.cautions { font-size: 13px; background: #fff6e0; border-left: 4px solid #d9a441; padding: 6px 12px 6px 28px; }
""".replace("TABLE_HEAD", TABLE_HEAD)


def _cell(column, values) -> str:
    """A value, with its interval (if any) on a second, smaller line so the table stays narrow."""
    value, sep, interval = format_value(column, values).partition(" [")
    return f"<td>{escape(value)}" + (f'<br><span class="ci">[{escape(interval)}</span>' if sep else "") + "</td>"


def _table(data: ReportData) -> str:
    group_head = ", ".join(data.by) if data.by else "group"
    head = "".join(f"<th>{escape(c.label)}</th>" for c in data.columns)
    rows = [f'<tr><th>rank</th><th class="group">{escape(group_head)}</th>{head}</tr>']
    for g in data.groups:
        cells = "".join(_cell(c, g.values) for c in data.columns)
        flag = f' <span class="flag" title="fewer than {FEW_ROWS} rows">{FEW_FLAG}</span>' if g.few_rows else ""
        few = ' class="few"' if g.few_rows else ""
        rows.append(f'<tr{few}><td>{g.rank if g.rank else "—"}</td><td class="group">{escape(g.label)}{flag}</td>'
                    f'{cells}</tr>')
    if data.overall is not None:
        cells = "".join(_cell(c, data.overall.values) for c in data.columns)
        rows.append(f'<tr class="overall"><td></td><td class="group">{escape(data.overall.label)}</td>{cells}</tr>')
    return '<div class="table-wrap"><table class="measures">\n' + "\n".join(rows) + "\n</table></div>"


FEW_FLAG = "(few rows)"  # after the label of a group with fewer than FEW_ROWS rows


def few_rows_note(data: ReportData) -> str:
    """The sentence on flagged groups ("" when no group is flagged)."""
    few = [g.label for g in data.groups if g.few_rows]
    if data.overall is not None and data.overall.few_rows:
        few.append(data.overall.label)
    if not few:
        return ""
    return (f"{FEW_FLAG}: {len(few)} group{'s' if len(few) > 1 else ''} with fewer than {FEW_ROWS} rows "
            f"({', '.join(few[:8])}{', …' if len(few) > 8 else ''}): "
            + ("their figures rest on few records; read them, and their places in the ranking, with care."
               if len(few) > 1 else "its figures rest on few records; read them, and its place in the ranking, "
               "with care."))


def cautions(data: ReportData) -> list[str]:
    """What can mislead in these numbers: the flagged groups first, then the general cautions."""
    note = few_rows_note(data)
    return ([note] if note else []) + list(CAUTIONS)


def describe(data: ReportData) -> list[str]:
    """Sentences saying what the report is computed from (shared with the Markdown version)."""
    lines = [f"Source: {data.source}; value: {data.value}; "
             + (f"weighted by {data.weight}" if data.weight else "unweighted (every row counts once)")
             + (f"; groups: {', '.join(data.by)}" if data.by else "") + "."]
    if data.period:
        lines.append(f"The table, the ranking and the Lorenz curves are for {data.time} {data.period} "
                     f"(the latest); the trend shows every {data.time}.")
    return lines


def notes(data: ReportData) -> list[str]:
    out = [f"{c.label}: {c.note}." for c in data.columns if c.note] + [f"{INTERVAL_NOTE}."]
    out.append("Gini = Σ w_i x_i (2C_i − w_i − W) / (W·T) over rows sorted by value (C_i running weight, "
               "W total weight, T weighted total); the Lorenz curve joins (C_i/W, S_i/T). — marks a "
               "measure that is undefined for the group (e.g. total ≤ 0).")
    out.append("Figures are computed from the rows given; they are estimates for the population the "
               "data represent, not official statistics.")
    if data.shown_note():
        out.append(data.shown_note())
    return out


def _dominance(data: ReportData, chart: str) -> list[str]:
    d = data.dominance
    if d is None:
        return []
    head = "".join(f"<th>{escape(h)}</th>" for h in dom.HEADERS)
    rows = [f"<tr>{head}</tr>"] + ["<tr>" + "".join(f"<td>{escape(c)}</td>" for c in row) + "</tr>"
                                   for row in dom.cells(d)]
    return [f'<h2 id="dominance">Dominance: {escape(str(d.groups[0]))} and {escape(str(d.groups[1]))}</h2>',
            f'<p class="verdict" id="dominance-verdict">{escape(d.verdict)}</p>',
            f'<p class="meta">{escape(dom.summary(d))}</p>',
            f'<div class="charts"><figure id="dominance-chart">{chart}</figure></div>',
            '<div class="table-wrap"><table class="measures" id="dominance-table">\n' + "\n".join(rows)
            + "\n</table></div>", f'<p class="notes">{escape(dom.NOTE)}</p>']


def render_html(data: ReportData) -> str:
    charts = all_charts(data)
    today = _dt.date.today().isoformat()
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             f"<title>{escape(data.title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>",
             f"<h1>{escape(data.title)}</h1>"]
    parts += [f'<p class="meta">{escape(s)}</p>' for s in describe(data)]
    parts.append(f'<p class="meta">Made with uneven {escape(uneven.__version__)} on {today}.</p>')
    parts += ['<h2 id="ranking">Ranking and Lorenz curves</h2>', '<div class="charts">',
              f'<figure id="ranking-chart">{charts["ranking"]}</figure>',
              f'<figure id="lorenz-chart">{charts["lorenz"]}</figure>', "</div>"]
    parts += ['<h2 id="measures">Measures per group</h2>', _table(data)]
    parts.append('<ul class="cautions" id="cautions">'
                 + "".join(f"<li>{escape(n)}</li>" for n in cautions(data)) + "</ul>")
    if "trend" in charts:
        assert data.time is not None  # the trend is drawn only for a time column
        parts += [f'<h2 id="trend">Trend by {escape(data.time)}</h2>',
                  f'<div class="charts"><figure id="trend-chart">{charts["trend"]}</figure></div>']
    parts += _dominance(data, charts.get("dominance", ""))
    parts.append('<h2 id="notes">Notes</h2><ul class="notes">'
                 + "".join(f"<li>{escape(n)}</li>" for n in notes(data)) + "</ul>")
    parts += ["</body>", "</html>", ""]
    return "\n".join(parts)
