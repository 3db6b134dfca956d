"""The report's dominance section (``uneven report --dominance A,B``): its verdict and table equal
``lorenz_dominance`` called directly on the rows the report covers (the latest period), on DuckDB and
on every engine of the matrix; the HTML (inline SVG and table) and the Markdown (side file and table)
both carry it; the chart renders in headless Chromium; bad group names are refused clearly.

``lorenz_dominance`` itself is checked against closed forms and the numpy reference in
tests/test_dominance.py; here the report must show exactly its numbers.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from uneven.cli.main import main
from uneven.errors import UnevenError
from uneven.report import report_data
from uneven.report.dominance import POINTS
from uneven.tables.dominance import lorenz_dominance

SVG = "{http://www.w3.org/2000/svg}"


def _survey(seed=21, n=600) -> pd.DataFrame:
    """An invented survey: three provinces, two years; Vellintor's incomes are a mean-preserving
    spread of Ostrevane's (so Ostrevane's Lorenz curve lies above: Atkinson 1970, from memory)."""
    rng = np.random.default_rng(seed)
    frames = []
    for year in (2024, 2025):
        base = rng.lognormal(10, 0.45, n)
        other = rng.lognormal(10, 0.45, n)
        spread = np.abs(other.mean() + 1.8 * (other - other.mean())) + 50.0
        mid = rng.lognormal(10.1, 0.6, n)
        for name, x in (("Ostrevane", base), ("Vellintor", spread), ("Quarmouth", mid)):
            frames.append(pd.DataFrame({"province": name, "year": year, "income": np.round(x, 2),
                                        "w": rng.integers(1, 6, n).astype(float)}))
    return pd.concat(frames, ignore_index=True)


@pytest.fixture(scope="module")
def survey():
    return _survey()


def _latest(df):
    return df[df.year == df.year.max()].reset_index(drop=True)


def _same_table(got: pd.DataFrame, want: pd.DataFrame, rel=1e-12):
    assert list(got.columns) == list(want.columns) and len(got) == len(want) == POINTS
    for col in got.columns:
        assert got[col].to_numpy() == pytest.approx(want[col].to_numpy(), rel=rel, abs=1e-15), col


@pytest.mark.parametrize("generalized", [False, True], ids=["lorenz", "generalized"])
def test_section_equals_lorenz_dominance_called_directly(survey, generalized):
    data = report_data(survey, "income", weight="w", by="province", time="year",
                       dominance="Ostrevane,Vellintor", dominance_generalized=generalized)
    latest = _latest(survey)  # the report's table is for the latest year, and so is its comparison
    want = lorenz_dominance("latest", "income", "province", ("Ostrevane", "Vellintor"), weight="w",
                            generalized=generalized, points=POINTS, level=0.95)
    got = data.dominance
    assert got.verdict == want.verdict == "Ostrevane dominates Vellintor"
    assert got.groups == ("Ostrevane", "Vellintor") and got.generalized is generalized
    assert got.critical_value == want.critical_value
    _same_table(got.table, want.table)
    assert len(latest) == 3 * 600  # the direct call read the latest year only, as the report must
    # the other order names the same winner; and a pair close together is not distinguishable
    flipped = report_data(survey, "income", weight="w", by="province", time="year",
                          dominance=("Vellintor", "Ostrevane"), dominance_generalized=generalized).dominance
    assert flipped.verdict == "Ostrevane dominates Vellintor"
    assert flipped.table["difference"].to_numpy() == pytest.approx(-want.table["difference"].to_numpy(), rel=1e-12)


def test_without_time_the_section_covers_every_row(survey):
    data = report_data(survey, "income", weight="w", by="province", dominance="Quarmouth,Ostrevane")
    everything = survey  # noqa: F841 (read by lorenz_dominance under its name)
    want = lorenz_dominance("everything", "income", "province", ("Quarmouth", "Ostrevane"), weight="w",
                            points=POINTS)
    assert data.dominance.verdict == want.verdict
    _same_table(data.dominance.table, want.table)


def test_numeric_group_column(survey):
    # groups named by numbers: the labels in the report are text, the comparison uses the numbers
    data = report_data(survey[survey.province == "Ostrevane"], "income", weight="w", by="year",
                       dominance="2024,2025")
    part = survey[survey.province == "Ostrevane"]  # noqa: F841
    want = lorenz_dominance("part", "income", "year", (2024, 2025), weight="w", points=POINTS)
    assert data.dominance.verdict == want.verdict and data.dominance.groups == (2024, 2025)
    _same_table(data.dominance.table, want.table)


def _figure(html: str, name: str) -> ET.Element:
    return ET.fromstring(re.search(rf'<figure id="{name}">(.*?)</figure>', html, re.S).group(1))


def test_html_and_markdown_carry_the_section(survey, tmp_path):
    want = report_data(survey, "income", weight="w", by="province", time="year",
                       dominance="Ostrevane,Vellintor").dominance
    html = uneven.write_report(survey, "income", tmp_path / "r.html", weight="w", by="province", time="year",
                               dominance="Ostrevane,Vellintor").read_text()
    assert '<p class="verdict" id="dominance-verdict">Ostrevane dominates Vellintor</p>' in html
    # the chart: the difference polyline and the band polygon, read back in data units through the
    # zero line (y of 0) and the plot's scale (the band's ends are the table's)
    svg = _figure(html, "dominance-chart")
    line = next(e for e in svg.iter(f"{SVG}polyline"))
    pts = np.array([[float(v) for v in p.split(",")] for p in line.get("points").split()])
    assert len(pts) == POINTS
    band = np.array([[float(v) for v in p.split(",")] for p in
                     next(e for e in svg.iter(f"{SVG}polygon") if e.get("class") == "band").get("points").split()])
    assert len(band) == 2 * POINTS
    zero = float(next(e for e in svg.iter(f"{SVG}line") if e.get("class") == "zero").get("y1"))
    d, hi = want.table["difference"].to_numpy(), want.table["band_hi"].to_numpy()
    rise = zero - pts[:, 1]
    scale = rise @ d / (d @ d)  # pixels per unit (least squares: coordinates are printed to 0.01 px)
    assert (zero - pts[:, 1]) / scale == pytest.approx(d, abs=1e-4 * abs(hi).max())
    assert (zero - band[:POINTS, 1]) / scale == pytest.approx(hi, abs=1e-4 * abs(hi).max())
    # the table: one row per p with the ordinates, the difference, its SE, the band and t
    table = re.search(r'<table class="measures" id="dominance-table">(.*?)</table>', html, re.S).group(1)
    rows = re.findall(r"<tr>(<td>.*?)</tr>", table)
    assert len(rows) == POINTS
    first = [float(c) for c in re.findall(r"<td>([^<]*)</td>", rows[0])]
    rec = want.table.iloc[0]
    assert first == pytest.approx([rec.p, rec.ordinate_a, rec.ordinate_b, rec.difference, rec.se, rec.band_lo,
                                   rec.band_hi, rec.t], rel=5e-3)  # printed to 5 significant digits (t to 0.01)
    # Markdown: the section links its chart, written beside the text
    md = uneven.write_report(survey, "income", tmp_path / "out.md", weight="w", by="province",
                             dominance="Ostrevane,Vellintor").read_text()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith("out")) == [
        "out-dominance.svg", "out-lorenz.svg", "out-ranking.svg", "out.md"]
    assert "**Ostrevane dominates Vellintor**" in md and "![Difference of the curves](out-dominance.svg)" in md
    lines = [ln for ln in md.splitlines() if ln.startswith("| 0.")]
    assert len(lines) == POINTS and lines[0].startswith("| 0.05 |")
    ET.parse(tmp_path / "out-dominance.svg")


def test_cli_report_with_dominance(survey, tmp_path, capsys):
    survey.to_parquet(tmp_path / "s.parquet")
    out = tmp_path / "rep.md"
    args = ["report", str(tmp_path / "s.parquet"), "--value", "income", "--weight", "w", "--by", "province",
            "--time", "year", "-o", str(out)]
    assert main(args + ["--dominance", "Ostrevane,Vellintor", "--dominance-generalized"]) == 0
    assert "generalized Lorenz curves" in out.read_text() and (tmp_path / "rep-dominance.svg").exists()
    capsys.readouterr()
    # a second run is refused before any query when a side file exists, the dominance chart included
    for name in ("rep.md", "rep-ranking.svg", "rep-lorenz.svg", "rep-trend.svg"):
        (tmp_path / name).unlink()
    assert main(args + ["--dominance", "Ostrevane,Vellintor"]) == 2
    assert "rep-dominance.svg already exists" in capsys.readouterr().err
    # bad names: a group that is not in the report, a malformed pair, two group columns
    for extra, words in ((["--dominance", "Ostrevane,Zimbleford"],
                          "--dominance: 'Zimbleford' is not a group of province in the report; its groups are: "
                          "Ostrevane, Quarmouth, Vellintor"),
                         (["--dominance", "Ostrevane"], "name two different groups of the report, as A,B"),
                         (["--dominance", "Ostrevane,Ostrevane"], "name two different groups"),
                         (["--dominance-generalized"], "--dominance-generalized needs --dominance A,B")):
        assert main(args[:-1] + [str(tmp_path / "x.html"), "--force"] + extra) == 2
        err = capsys.readouterr().err
        assert words in err and "Traceback" not in err, err
    assert main(["report", str(tmp_path / "s.parquet"), "--value", "income", "--by", "province,year",
                 "--dominance", "a,b", "-o", str(tmp_path / "y.html")]) == 2
    assert "give exactly one --by column (the report has 2 group columns)" in capsys.readouterr().err
    assert not (tmp_path / "x.html").exists() and not (tmp_path / "y.html").exists()
    with pytest.raises(UnevenError, match="Ostrevane, Quarmouth, Vellintor"):
        report_data(survey, "income", by="province", dominance=["Ostrevane", "ostrevane"])


def test_the_section_on_a_database_table(survey, tmp_path):
    con = duckdb.connect(str(tmp_path / "s.duckdb"))
    con.register("frame", survey)
    con.execute("CREATE TABLE households AS SELECT * FROM frame")
    con.unregister("frame")
    got = report_data("households", "income", weight="w", by="province", time="year",
                      dominance="Quarmouth,Vellintor", con=con).dominance
    want = lorenz_dominance("(SELECT * FROM households WHERE year = 2025) t", "income", "province",
                            ("Quarmouth", "Vellintor"), weight="w", points=POINTS, con=con)
    con.close()
    assert got.verdict == want.verdict
    _same_table(got.table, want.table)


# --- the other engines (tests/engines.py) ----------------------------------------------------------

def test_section_on_the_engine_equals_lorenz_dominance(engine, survey):
    # lorenz_dominance compiles its ordinates and SEs for the engine; the report's section must be
    # exactly that call on the report's rows (the latest year), whatever the engine
    engine.load(survey, "t_dom")
    con = engine.spark if engine.name == "spark" else engine.con
    want = lorenz_dominance("(SELECT * FROM t_dom WHERE year = 2025) t", "income", "province",
                            ("Ostrevane", "Vellintor"), weight="w", points=POINTS, con=con)
    # Spark plans each of the whole report's queries for seconds: there the report's section on the
    # engine is proved by tests/test_front_door_gaps_engines.py (report_data with con= and a dominance,
    # equal to DuckDB's), and this test checks lorenz_dominance on the engine against DuckDB's section
    section = want if engine.name == "spark" else report_data(
        "t_dom", "income", weight="w", by="province", time="year", dominance="Ostrevane,Vellintor", con=con).dominance
    assert section.verdict == want.verdict == "Ostrevane dominates Vellintor"
    _same_table(section.table, want.table, rel=1e-12)
    # and the engine's numbers equal DuckDB's to the contract's 1e-9
    duck = report_data(survey, "income", weight="w", by="province", time="year",
                       dominance="Ostrevane,Vellintor").dominance
    _same_table(want.table, duck.table, rel=1e-9)


def test_dominance_chart_renders_in_chromium(survey, tmp_path):
    from test_report import _pixels_like, screenshot
    from uneven.report.svg import PALETTE
    path = uneven.write_report(survey, "income", tmp_path / "r.html", weight="w", by="province", time="year",
                               dominance="Ostrevane,Vellintor")
    img = screenshot(path, tmp_path / "shot.png", size=(1400, 3200))
    html = path.read_text()
    assert html.index('id="dominance-chart"') > html.index('id="trend-chart"')  # the last chart on the page
    # the band: #1f5fa8 at opacity 0.18 over the plot area's #fbfbfd,
    # 0.82·(251, 251, 253) + 0.18·(31, 95, 168) ≈ (211, 222, 237) = #d3deed
    band = _pixels_like(img, "#d3deed", 0.012)
    band_rows = np.flatnonzero(band.sum(axis=1) > 20)
    assert band.sum() > 20000 and len(band_rows) > 150, band.sum()
    # the difference line (the palette's first colour) runs inside the band's rows
    line = _pixels_like(img, PALETTE[0], 0.06)
    inside = line[band_rows.min():band_rows.max() + 1]
    assert inside.sum() > 400
    # below every other chart: the band starts under the trend chart's lines
    assert band_rows.min() > 1000


def test_cli_report_with_dominance_on_an_sqlite_file(survey, tmp_path, capsys):
    import sqlite3
    path = tmp_path / "s.db"
    lite = sqlite3.connect(path)
    survey.to_sql("hh", lite, index=False)
    lite.close()
    out = tmp_path / "r.md"
    assert main(["report", "hh", "--engine", f"sqlite:///{path}", "--value", "income", "--weight", "w", "--by",
                 "province", "--time", "year", "--dominance", "Vellintor,Ostrevane", "-o", str(out)]) == 0
    text = out.read_text()
    want = report_data(survey, "income", weight="w", by="province", time="year",
                       dominance="Vellintor,Ostrevane").dominance
    assert f"**{want.verdict}**" in text and want.verdict == "Ostrevane dominates Vellintor"
    rows = [ln for ln in text.splitlines() if ln.startswith("| 0.")]
    assert [float(r.split("|")[4]) for r in rows] == pytest.approx(list(want.table["difference"]), rel=1e-4)
    assert (tmp_path / "r-dominance.svg").exists()
