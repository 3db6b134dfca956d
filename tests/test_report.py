"""The shareable report: its numbers against the numpy reference, its charts read back from the
inline SVG, Markdown with side files, the command on Parquet globs and database tables, and a real
rendering in headless Chromium checked pixel by pixel."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import tempfile
import xml.etree.ElementTree as ET
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from engines import require_engines
from uneven import reference as R
from uneven.cli.main import main
from uneven.reference import se as RS
from uneven.report import report_data
from uneven.report.html import TABLE_HEAD
from uneven.report.svg import BAR_COLOUR, PALETTE

SVG = "{http://www.w3.org/2000/svg}"
K = 50  # the report's default Lorenz grid


def _survey(seed=11, n=90):
    rng = np.random.default_rng(seed)
    groups = np.array(["Aplovique", "Bruzzelon", "Cravquell"], dtype=object)
    g = np.repeat(groups, n * 3)
    year = np.tile(np.repeat([2021, 2022, 2023], n), 3)
    spread = np.repeat([0.5, 0.9, 1.3], n * 3)
    x = np.round(np.exp(10 + spread * rng.standard_normal(len(g))), 2)
    w = rng.integers(1, 5, len(g)).astype(float)
    return pd.DataFrame({"region": g, "year": year.astype(np.int32), "income": x, "w": w})


@pytest.fixture(scope="module")
def survey():
    return _survey()


def _latest(df):
    return df[df.year == df.year.max()]


def test_report_numbers_match_the_reference(survey):
    data = report_data(survey, "income", weight="w", by="region", time="year")
    latest = _latest(survey)
    assert data.period == "2023" and data.periods == ["2021", "2022", "2023"]
    want = {}
    for key, part in latest.groupby("region"):
        x, w = part.income.to_numpy(), part.w.to_numpy()
        want[key] = {"rows": len(part), "population": w.sum(), "mean": np.average(x, weights=w),
                     "median": R.quantile_w(x, 0.5, w), "gini": R.gini(x, w), "bottom40": R.bottom_share(x, 0.4, w),
                     "top10": R.top_share(x, 0.1, w), "palma": R.palma(x, w), "s80s20": R.s80s20(x, w),
                     "theil": R.theil(x, w)}
    # the 95 % intervals of the Gini, the shares, the ratios and Theil (reference.se: linearization,
    # rows as independent draws; numpy written from the influence functions)
    intervals = {"gini": ("gini", ()), "bottom40": ("bottom_share", (0.4,)), "top10": ("top_share", (0.1,)),
                 "palma": ("palma", ()), "s80s20": ("s80s20", ()), "theil": ("theil", ())}
    for key, part in latest.groupby("region"):
        for col, (name, params) in intervals.items():
            lo, hi = RS.ci(name, part.income.to_numpy(), params, part.w.to_numpy(), level=0.95)
            want[key].update({f"{col}_lo": lo, f"{col}_hi": hi})
    for g in data.groups:
        assert g.values == pytest.approx(want[g.label], rel=1e-10)
        for col in intervals:
            assert g.values[f"{col}_lo"] < g.values[col] < g.values[f"{col}_hi"]
        assert g.few_rows  # 90 rows per group in the latest year: under the report's threshold of 100
        assert [v for _, v in g.curve] == pytest.approx(
            [v for _, v in R.lorenz_curve(latest[latest.region == g.label].income.to_numpy(), K,
                                          latest[latest.region == g.label].w.to_numpy())], abs=1e-12)
    # ranked by Gini, most unequal first
    assert [g.label for g in data.groups] == sorted(want, key=lambda k: -want[k]["gini"])
    assert [g.rank for g in data.groups] == [1, 2, 3]
    assert data.overall.values["gini"] == pytest.approx(R.gini(latest.income.to_numpy(), latest.w.to_numpy()), rel=1e-10)
    for (key, year), part in survey.groupby(["region", "year"]):
        got = data.trend[key][data.periods.index(str(year))]
        assert got == pytest.approx(R.gini(part.income.to_numpy(), part.w.to_numpy()), rel=1e-10)


def _svg(html: str, figure: str) -> ET.Element:
    m = re.search(rf'<figure id="{figure}">(.*?)</figure>', html, re.S)
    return ET.fromstring(m.group(1))


def _read_lorenz(svg: ET.Element) -> dict[str, np.ndarray]:
    """Curves in data units: the equality line runs from (0, 0) to (1, 1)."""
    eq = svg.find(f"{SVG}line[@class='equality']")
    x0, y0, x1, y1 = (float(eq.get(a)) for a in ("x1", "y1", "x2", "y2"))
    out = {}
    for line in svg.iter(f"{SVG}polyline"):
        pts = np.array([[float(v) for v in p.split(",")] for p in line.get("points").split()])
        out[line.get("data-label")] = np.column_stack([(pts[:, 0] - x0) / (x1 - x0), (pts[:, 1] - y0) / (y1 - y0)])
    return out


def test_html_is_self_contained_and_its_charts_show_the_data(survey, tmp_path):
    path = uneven.write_report(survey, "income", tmp_path / "r.html", weight="w", by="region", time="year")
    html = path.read_text()
    # nothing fetched from elsewhere: no scripts, links, imports or URLs but the SVG namespace
    assert not re.search(r"<script|<link|<img|@import|url\(", html)
    assert set(re.findall(r"https?://[^\s\"']+", html)) == {"http://www.w3.org/2000/svg"}
    latest = _latest(survey)
    curves = _read_lorenz(_svg(html, "lorenz-chart"))
    assert set(curves) == {"Aplovique", "Bruzzelon", "Cravquell", "all groups"}
    for key, xy in curves.items():
        part = latest if key == "all groups" else latest[latest.region == key]
        want = R.lorenz_curve(part.income.to_numpy(), K, part.w.to_numpy())
        assert xy[:, 0] == pytest.approx([p for p, _ in want], abs=1e-4)  # 0.01 px on a ~400 px axis
        assert xy[:, 1] == pytest.approx([v for _, v in want], abs=1e-4)
    bars = [(b.get("data-label"), float(b.get("data-value"))) for b in _svg(html, "ranking-chart").iter(f"{SVG}rect")
            if b.get("class") == "bar"]
    want_gini = {k: R.gini(p.income.to_numpy(), p.w.to_numpy()) for k, p in latest.groupby("region")}
    assert [k for k, _ in bars] == sorted(want_gini, key=lambda k: -want_gini[k])
    assert [v for _, v in bars] == pytest.approx([want_gini[k] for k, _ in bars], rel=1e-12)
    trend = {line.get("data-label"): line for line in _svg(html, "trend-chart").iter(f"{SVG}polyline")}
    assert set(trend) == set(want_gini) and len(trend["Aplovique"].get("points").split()) == 3
    # the table lists every group and the overall row, ranked
    rows = re.findall(r'<td>(\d)</td><td class="group">(\w+) <span class="flag"[^>]*>\(few rows\)</span></td>'
                      r'<td>[\d,]+</td>', html)  # 90 rows per group: each flagged
    assert [r[1] for r in rows] == [k for k, _ in bars] and [r[0] for r in rows] == ["1", "2", "3"]
    assert f"{want_gini['Cravquell']:.4f}" in html and "all groups" in html


def test_markdown_report_with_side_files(survey, tmp_path):
    path = uneven.write_report(survey, "income", tmp_path / "out.md", weight="w", by="region")
    text = path.read_text()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out-lorenz.svg", "out-ranking.svg", "out.md"]
    assert "![Lorenz curves](out-lorenz.svg)" in text
    table = [line for line in text.splitlines() if line.startswith("| ")]
    assert table[0].startswith("| rank | region | rows |") and len(table) == 1 + 3 + 1
    for line in table[1:4]:
        cells = [c.strip() for c in line.strip("|").split("|")]
        part = survey[survey.region == cells[1]]
        gini, interval = cells[6].split(" ", 1)  # "0.6515 [0.6094, 0.6937]": the value, then its 95 % interval
        assert float(gini) == pytest.approx(R.gini(part.income.to_numpy(), part.w.to_numpy()), abs=5e-5)
        lo, hi = RS.ci("gini", part.income.to_numpy(), (), part.w.to_numpy())
        assert interval == f"[{lo:.4f}, {hi:.4f}]"
    ET.parse(tmp_path / "out-lorenz.svg")  # well-formed on its own


def test_cli_report_on_a_glob_and_a_database_table(survey, tmp_path, capsys):
    for i, (_, part) in enumerate(survey.groupby("year")):
        part.to_parquet(tmp_path / f"y{i}.parquet")
    out = tmp_path / "rep.html"
    args = ["--value", "income", "--weight", "w", "--by", "region", "--time", "year", "--output", str(out)]
    assert main(["report", str(tmp_path / "y*.parquet")] + args) == 0
    assert capsys.readouterr().out.strip() == str(out)
    first = out.read_text()
    assert main(["report", str(tmp_path / "y*.parquet")] + args) == 2  # no --force: kept
    assert "already exists" in capsys.readouterr().err and out.read_text() == first
    con = duckdb.connect(str(tmp_path / "s.duckdb"))
    con.register("frame", survey)
    con.execute("CREATE TABLE households AS SELECT * FROM frame")
    con.close()
    assert main(["report", "households", "--database", str(tmp_path / "s.duckdb"), "--force", "--format", "md"]
                + args[:-2] + ["--output", str(tmp_path / "rep.md")]) == 0
    assert (tmp_path / "rep-trend.svg").exists()
    assert main(["report", "households", "--database", str(tmp_path / "s.duckdb"), "--value", "incom",
                 "--output", str(tmp_path / "x.html")]) == 2
    err = capsys.readouterr().err
    assert "--value incom: no such column in the table households" in err and "Traceback" not in err
    assert not (tmp_path / "x.html").exists()


# --- a real rendering -------------------------------------------------------------------------------

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--hide-scrollbars"]


def _chromium() -> str:
    path = shutil.which("chromium") or shutil.which("chromium-browser")
    if path is None:
        if require_engines():
            pytest.fail("chromium is required (UNEVEN_REQUIRE_ENGINES=1) but is not installed "
                        "(apt-get install chromium)")
        pytest.skip("chromium is not installed here (apt-get install chromium)")
    return path


def screenshot(html: Path, png: Path, size=(1400, 1700)) -> np.ndarray:
    from matplotlib.image import imread
    with tempfile.TemporaryDirectory(prefix="uneven-chromium-") as profile:
        subprocess.run([_chromium(), *CHROMIUM_FLAGS, f"--user-data-dir={profile}", f"--screenshot={png}",
                        f"--window-size={size[0]},{size[1]}", html.resolve().as_uri()],
                       check=True, capture_output=True, timeout=120, env={**os.environ, "HOME": profile})
    return imread(png)[..., :3]


def _pixels_like(img: np.ndarray, hex_colour: str, tol: float = 0.03) -> np.ndarray:
    rgb = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)]) / 255
    return np.abs(img - rgb).max(axis=2) < tol


def test_demo_report_renders_with_table_curves_and_ranking(tmp_path, capsys):
    assert main(["demo", "--rows", "12000", "--dir", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    report = tmp_path / "quembraland_report.html"
    assert str(report) in out.splitlines()[-1]
    img = screenshot(report, tmp_path / "shot.png")
    assert img.shape[:2] == (1700, 1400)
    assert img.std() > 0.05  # not a blank page
    assert (img.min(axis=2) > 0.97).mean() > 0.5  # a white page with things drawn on it
    # the ranking: eight bars of the bar colour, stacked in the upper part of the page
    bars = _pixels_like(img, BAR_COLOUR)
    assert bars.sum() > 8 * 100 * 10
    bar_rows = np.flatnonzero(bars.sum(axis=1) > 20)
    assert len(np.split(bar_rows, np.flatnonzero(np.diff(bar_rows) > 1) + 1)) == 8
    # the Lorenz curves, right of the bars: every province's colour is drawn (a legend line at least:
    # curves close together hide each other) and the curves add up to long lines
    right = img[:, 650:]
    drawn = [int(_pixels_like(right, colour, 0.06).sum()) for colour in PALETTE[:8]]
    assert min(drawn) > 30 and sum(drawn) > 2500, drawn
    # the table: its header band, below the charts and as wide as the table
    head = _pixels_like(img, TABLE_HEAD, 0.01)
    head_rows = np.flatnonzero(head.sum(axis=1) > 800)
    assert len(head_rows) > 15 and head_rows.min() > bar_rows.max()


def test_many_groups_charts_show_the_extremes_and_the_table_lists_all(tmp_path):
    rng = np.random.default_rng(5)
    spread = np.repeat(np.linspace(0.2, 1.5, 14), 40)  # Gini rises with the group number
    df = pd.DataFrame({"g": np.repeat([f"g{i:02d}" for i in range(14)], 40),
                       "x": np.exp(spread * rng.standard_normal(len(spread)))})
    html = uneven.write_report(df, "x", tmp_path / "r.html", by="g").read_text()
    gini = {k: R.gini(p.x.to_numpy()) for k, p in df.groupby("g")}
    ranked = sorted(gini, key=lambda k: -gini[k])
    curves = _read_lorenz(_svg(html, "lorenz-chart"))
    assert set(curves) == set(ranked[:6] + ranked[-6:] + ["all groups"])
    assert "show the 6 most and 6 least unequal of 14 groups" in html
    assert len(re.findall(r'<td class="group">g\d\d <span class="flag"[^>]*>\(few rows\)</span></td>', html)) == 14
    assert "14 groups with fewer than 100 rows" in html  # 40 rows each; the 560 of all groups are not flagged


def test_groups_with_few_rows_are_flagged_and_the_cautions_printed(tmp_path):
    rng = np.random.default_rng(9)
    sizes = {"Quezzlewort": 99, "Plimbrasco": 100, "Dorvankipple": 12}  # the threshold is 100 rows
    df = pd.DataFrame({"g": np.repeat(list(sizes), list(sizes.values())),
                       "x": np.exp(rng.standard_normal(sum(sizes.values())))})
    df.loc[0, "x"] = None  # a row without a value does not count: Quezzlewort uses 98 rows
    df = pd.concat([df, pd.DataFrame({"g": ["Plimbrasco"], "x": [None]})], ignore_index=True)
    data = report_data(df, "x", by="g")
    flags = {g.label: (g.values["rows"], g.few_rows) for g in data.groups}
    assert flags == {"Quezzlewort": (98, True), "Plimbrasco": (100, False), "Dorvankipple": (12, True)}
    assert not data.overall.few_rows
    html = uneven.write_report(df, "x", tmp_path / "r.html", by="g").read_text()
    flagged = re.findall(r'<td class="group">(\w+) <span class="flag"', html)
    assert sorted(flagged) == ["Dorvankipple", "Quezzlewort"]
    assert "2 groups with fewer than 100 rows" in html
    for words in ("biased downward in small samples", "too narrow", "rests on the few largest records"):
        assert words in html
    text = uneven.write_report(df, "x", tmp_path / "r.md", by="g").read_text()
    assert "| Dorvankipple (few rows) |" in text and "| Plimbrasco |" in text
    assert "biased downward in small samples" in text and "2 groups with fewer than 100 rows" in text


def test_an_interval_pair_is_shown_beside_its_value():
    from uneven.report.data import Column, format_value
    col = Column("gini", "Gini", lambda s: None, "{:.3f}", interval=(lambda s: None, lambda s: None))
    assert format_value(col, {"gini": 0.41234, "gini_lo": 0.4, "gini_hi": 0.425}) == "0.412 [0.400, 0.425]"
    assert format_value(col, {"gini": 0.41234}) == "0.412"  # no interval computed: the value alone
    assert format_value(col, {"gini": float("nan")}) == "—"
