"""The report's pictures as SVG text: ranking (bars), Lorenz curves, trend (with a time column) and the
difference of two groups' curves with its band (with a dominance comparison)."""

from __future__ import annotations

from uneven.report import svg
from uneven.report.data import ReportData

MAX_BARS = 40


def ranking_svg(data: ReportData) -> str:
    groups = data.groups if len(data.groups) <= MAX_BARS else data.groups[:MAX_BARS // 2] + data.groups[-MAX_BARS // 2:]
    when = f", {data.time} {data.period}" if data.period else ""
    return svg.bar_chart([(g.label, g.values["gini"]) for g in groups], f"Groups ranked by Gini{when}",
                         f"Gini of {data.value} (0 = equal, 1 = one unit holds everything)",
                         ranks=[str(g.rank) if g.rank else "–" for g in groups])


def lorenz_svg(data: ReportData) -> str:
    series = [svg.Series(g.label, [p for p, _ in g.curve], [v for _, v in g.curve], svg.colour(i))
              for i, g in enumerate(data.shown()) if g.curve]
    if data.overall is not None and data.overall.curve:
        series.append(svg.Series(data.overall.label, [p for p, _ in data.overall.curve],
                                 [v for _, v in data.overall.curve], "#111111", dashed=True))
    when = f", {data.time} {data.period}" if data.period else ""
    return svg.lorenz_chart(series, f"Lorenz curves of {data.value}{when}")


def trend_svg(data: ReportData) -> str | None:
    if not data.time or not data.periods:
        return None
    shown = [g.label for g in data.shown()] if data.by else list(data.trend)
    series = [svg.Series(label, list(range(len(data.periods))), data.trend[label], svg.colour(i))
              for i, label in enumerate(shown) if label in data.trend]
    return svg.trend_chart(series, data.periods, f"Gini of {data.value} by {data.time}", "Gini")


def all_charts(data: ReportData) -> dict[str, str]:
    charts = {"ranking": ranking_svg(data), "lorenz": lorenz_svg(data)}
    trend = trend_svg(data)
    if trend:
        charts["trend"] = trend
    if data.dominance is not None:
        charts["dominance"] = data.dominance.svg()
    return charts
