"""Lorenz points per group from the database, and their plots (PNG/SVG via matplotlib).

The points are compared with the numpy reference (uneven.reference, itself checked against exact
fractions in test_reference.py); the plotted curves are read back from the SVG and compared with
the same reference."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as R
from uneven.cli.main import main

K = 20


def _frame(seed=3, groups=("north", "south", None), n=120):
    rng = np.random.default_rng(seed)
    g = np.repeat(np.array(groups, dtype=object), n)
    x = rng.lognormal(0, 1, len(g)) * np.repeat(np.arange(1, len(groups) + 1), n)
    w = rng.integers(1, 6, len(g)).astype(float)
    return pd.DataFrame({"Region": g, "income": x, "w": w})


def _ref_curve(part, k=K):
    return np.array([v for _, v in R.lorenz_curve(part.income.to_numpy(), k, part.w.to_numpy())])


def _check_points(points, df, k=K):
    assert len(points) == df.Region.nunique(dropna=False) * (k + 1)
    for key, part in df.groupby("Region", dropna=False):
        got = points[points.Region.isna()] if pd.isna(key) else points[points.Region == key]
        assert got.p.tolist() == pytest.approx([j / k for j in range(k + 1)], abs=1e-15)
        assert got.lorenz.to_numpy() == pytest.approx(_ref_curve(part, k), abs=1e-12)
        # generalized Lorenz μ·L(p) against the reference's own generalized_lorenz
        want = [R.generalized_lorenz(part.income.to_numpy(), j / k, part.w.to_numpy()) for j in range(k + 1)]
        assert got.generalized_lorenz.to_numpy() == pytest.approx(want, rel=1e-11, abs=1e-12)


def test_points_from_a_parquet_glob_match_the_reference(tmp_path):
    df = _frame()
    df.iloc[:150].to_parquet(tmp_path / "part-1.parquet")
    df.iloc[150:].to_parquet(tmp_path / "part-2.parquet")
    points = uneven.lorenz_points(str(tmp_path / "*.parquet"), "income", weight="w", by="region", points=K)
    assert list(points.columns) == ["Region", "p", "lorenz", "generalized_lorenz"]  # the source's spelling
    _check_points(points, df)


def test_points_from_csv_frame_and_table(tmp_path):
    df = _frame(seed=4, groups=("a", "b"))
    df.to_csv(tmp_path / "d.csv", index=False)
    _check_points(uneven.lorenz_points(str(tmp_path / "d.csv"), "income", weight="w", by=["Region"], points=K), df)
    _check_points(uneven.lorenz_points(df, "income", weight="w", by="Region", points=K), df)
    con = duckdb.connect()
    con.register("frame", df)
    con.execute('CREATE SCHEMA s; CREATE TABLE s."My Table" AS SELECT * FROM frame')
    _check_points(uneven.lorenz_points("s.My Table", "income", weight="w", by="Region", points=K, con=con), df)


def test_uniform_grid_closed_form():
    # equally spaced values 1..n: L(p) = p(pn+1)/(n+1) at p = j/k with pn whole
    # (handbook: the Lorenz curve of a discrete uniform distribution; derived from the running sums
    # j(j+1)/2 over n(n+1)/2, common practice)
    n, k = 100, 10
    points = uneven.lorenz_points(pd.DataFrame({"x": np.arange(1, n + 1)}), "x", points=k)
    want = [(j / k) * (j * n / k + 1) / (n + 1) for j in range(k + 1)]
    assert points.lorenz.tolist() == pytest.approx(want, abs=1e-12)


def test_group_with_no_positive_total_gets_no_curve():
    df = pd.DataFrame({"g": ["a", "a", "b", "b"], "x": [1.0, 3.0, -2.0, 1.0]})
    points = uneven.lorenz_points(df, "x", by="g", points=4)
    assert points[points.g == "a"].lorenz.tolist() == pytest.approx([0, 0.125, 0.25, 0.625, 1.0])  # by hand: (0.5·1, 1, 1 + 0.5·3, 4) / 4
    assert points[points.g == "b"].lorenz.isna().all()  # T ≤ 0: undefined, never a made-up number


@pytest.mark.parametrize("kwargs, message", [
    ({"value": "incme"}, "--value incme: no such column"),
    ({"value": "Region"}, "a numeric column is needed"),
    ({"value": "income", "by": "nope"}, "--by nope: no such column"),
    ({"value": "income", "points": 0}, "points must be a whole number from 1 to 1000"),
])
def test_clear_errors(kwargs, message):
    with pytest.raises(uneven.UnevenError, match=re.escape(message)):
        uneven.lorenz_points(_frame(), **kwargs)


def test_source_errors(tmp_path):
    with pytest.raises(uneven.UnevenError, match="no file matches"):
        uneven.lorenz_points(str(tmp_path / "none*.parquet"), "x")
    with pytest.raises(uneven.UnevenError, match="unknown file type"):
        uneven.lorenz_points(str(tmp_path / "x.xlsx"), "x")
    with pytest.raises(uneven.UnevenError, match="no table or view missing"):
        uneven.lorenz_points("missing", "x")


def _svg_curves(path):
    """{gid: [(x, y), …]} of the plotted lines, in data units, read back from matplotlib's SVG: the
    equality line's ends are (0, 0) and (1, 1) in data units, which fixes the pixel mapping."""
    ns = {"s": "http://www.w3.org/2000/svg"}
    root = ET.parse(path).getroot()
    lines = {}
    for g in root.iter("{http://www.w3.org/2000/svg}g"):
        gid = g.get("id", "")
        if gid.startswith("lorenz-"):
            d = g.find("s:path", ns).get("d")
            nums = [float(v) for v in re.findall(r"-?\d+(?:\.\d+)?(?:e-?\d+)?", d)]
            lines[gid] = list(zip(nums[0::2], nums[1::2]))
    (x0, y0), (x1, y1) = lines.pop("lorenz-equality")[:2]
    return {gid: [((x - x0) / (x1 - x0), (y - y0) / (y1 - y0)) for x, y in pts] for gid, pts in lines.items()}


def test_cli_plot_svg_shows_the_reference_curves(tmp_path, capsys):
    df = _frame(seed=5, groups=("east", "west"))
    df.to_parquet(tmp_path / "d.parquet")
    out = tmp_path / "lorenz.svg"
    assert main(["lorenz", str(tmp_path / "*.parquet"), "--value", "income", "--weight", "w", "--by", "Region",
                 "--points", str(K), "--output", str(out)]) == 0
    curves = _svg_curves(out)
    assert sorted(curves) == ["lorenz-curve-0", "lorenz-curve-1"]
    for i, key in enumerate(["east", "west"]):  # groups in key order
        xy = np.array(curves[f"lorenz-curve-{i}"])
        assert xy[:, 0] == pytest.approx([j / K for j in range(K + 1)], abs=2e-4)
        assert xy[:, 1] == pytest.approx(_ref_curve(df[df.Region == key]), abs=2e-4)  # pixel rounding
    assert "<script" not in out.read_text()


def test_cli_plot_png_csv_and_the_group_cap(tmp_path, capsys):
    plt_image = pytest.importorskip("matplotlib.image")
    df = _frame(seed=6, groups=tuple(f"g{i:02d}" for i in range(14)), n=30)
    con = duckdb.connect(str(tmp_path / "db.duckdb"))
    con.register("frame", df)
    con.execute("CREATE TABLE households AS SELECT * FROM frame")
    con.close()
    base = ["lorenz", "households", "--database", str(tmp_path / "db.duckdb"), "--value", "income", "--weight", "w",
            "--by", "Region", "--points", str(K)]
    png = tmp_path / "l.png"
    assert main(base + ["--output", str(png)]) == 2
    err = capsys.readouterr().err
    assert "14 groups: a plot shows at most 12 curves" in err and "Traceback" not in err
    assert not png.exists()
    assert main(base + ["--output", str(png), "--max-groups", "14", "--generalized"]) == 0
    img = plt_image.imread(png)
    assert img.shape[0] > 300 and img.shape[1] > 300 and img[..., :3].std() > 0.05
    # the first curve's colour (#1f5fa8) is drawn
    first = np.array([0x1F, 0x5F, 0xA8]) / 255
    assert (np.abs(img[..., :3] - first).max(axis=2) < 0.04).sum() > 200
    csv = tmp_path / "points.csv"
    assert main(base + ["--output", str(csv)]) == 0
    back = pd.read_csv(csv)
    _check_points(back, df)
    assert main(base + ["--output", str(csv)]) == 2  # exists, no --force
    assert "already exists" in capsys.readouterr().err


def test_cli_points_to_terminal(tmp_path, capsys):
    df = _frame(seed=7, groups=("a",))
    df.to_csv(tmp_path / "d.csv", index=False)
    assert main(["lorenz", str(tmp_path / "d.csv"), "--value", "income", "--points", "4"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].split() == ["p", "lorenz", "generalized_lorenz"] and len(out) == 6
    want = [v for _, v in R.lorenz_curve(df.income.to_numpy(), 4)]
    assert [float(line.split()[1]) for line in out[1:]] == pytest.approx(want, rel=1e-5)
