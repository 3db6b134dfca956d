"""Lorenz dominance: closed-form situations (a mean-preserving spread is dominated, two-point
distributions whose curves cross, two samples of one distribution), the table's numbers against the
numpy reference, the CLI, and the errors."""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as R
from uneven.cli.main import main
from uneven.reference import se as RSE
from uneven.tables.dominance import critical_value, decide, grid

N = 3000


def _two(a, b, w=None) -> pd.DataFrame:
    df = pd.DataFrame({"g": ["A"] * len(a) + ["B"] * len(b), "x": np.r_[a, b]})
    if w is not None:
        df["w"] = w
    return df


def test_mean_preserving_spread_is_dominated():
    # x_B = μ + λ(x − μ), λ > 1, has L_B(p) = (1 − λ)p + λ·L_A(p) ≤ L_A(p) (a mean-preserving spread,
    # Atkinson 1970, from memory): A dominates B, and B's generalized curve lies below as well
    rng = np.random.default_rng(2)
    base = rng.uniform(1, 3, N)
    df = _two(rng.uniform(1, 3, N), 2 + 1.5 * (base - 2), rng.uniform(1, 2, 2 * N))
    res = uneven.lorenz_dominance("df", "x", "g", ("A", "B"), weight="w")
    assert res.verdict == "A dominates B"
    assert (res.table["t"] > res.critical_value).all()
    assert uneven.lorenz_dominance("df", "x", "g", ("B", "A"), weight="w").verdict == "A dominates B"
    assert uneven.lorenz_dominance("df", "x", "g", ("A", "B"), weight="w", generalized=True).verdict == "A dominates B"


def test_crossing_curves():
    # A: half at 1, half at 3 (L_A(0.1) = 0.05, L_A(0.5) = 0.25); B: a tenth at 0.5, the rest at 2.5
    # (L_B(0.1) = 0.05/2.3 ≈ 0.022, L_B(0.5) = 1.05/2.3 ≈ 0.457): B lies below at 0.1 and above at 0.5
    rng = np.random.default_rng(3)
    a = np.where(rng.random(N) < 0.5, 1.0, 3.0) * rng.lognormal(0, 0.05, N)
    b = np.where(rng.random(N) < 0.1, 0.5, 2.5) * rng.lognormal(0, 0.05, N)
    df = _two(a, b)
    res = uneven.lorenz_dominance("df", "x", "g", ("A", "B"), points=9)
    assert res.verdict == "curves cross"
    assert res.table["t"].max() > res.critical_value and res.table["t"].min() < -res.critical_value


def test_two_samples_of_one_distribution():
    rng = np.random.default_rng(4)
    df = _two(rng.lognormal(0, 0.7, N), rng.lognormal(0, 0.7, N))
    assert uneven.lorenz_dominance("df", "x", "g", ("A", "B")).verdict == "not distinguishable at this level"


def test_table_matches_the_reference():
    rng = np.random.default_rng(5)
    a, b = rng.lognormal(0, 0.6, 300), rng.lognormal(0.1, 0.8, 250)
    wa, wb = rng.uniform(1, 3, 300), rng.uniform(1, 3, 250)
    df = _two(a, b, np.r_[wa, wb])
    res = uneven.lorenz_dominance("df", "x", "g", ("A", "B"), weight="w", points=4, level=0.9)
    t = res.table
    assert list(t["p"]) == [0.2, 0.4, 0.6, 0.8]
    for i, p in enumerate(t["p"]):
        la, lb = R.lorenz(a, p, wa), R.lorenz(b, p, wb)
        se = math.hypot(RSE.se("lorenz", a, (p,), wa), RSE.se("lorenz", b, (p,), wb))
        assert t["ordinate_a"][i] == pytest.approx(la, rel=1e-9)
        assert t["ordinate_b"][i] == pytest.approx(lb, rel=1e-9)
        assert t["se"][i] == pytest.approx(se, rel=1e-9)
        c = NormalDist().inv_cdf((1 + 0.9 ** (1 / 4)) / 2)  # Šidák (1967, from memory)
        assert t["band_lo"][i] == pytest.approx(la - lb - c * se, rel=1e-9)
    gen = uneven.lorenz_dominance("df", "x", "g", ("A", "B"), weight="w", points=4, generalized=True).table
    assert gen["ordinate_a"][1] == pytest.approx(R.generalized_lorenz(a, 0.4, wa), rel=1e-9)


def test_critical_value_and_rule():
    # one comparison: the two-sided normal quantile (1.96 at 95%, a textbook value)
    assert critical_value(0.95, 1) == pytest.approx(1.959964, abs=1e-6)
    assert critical_value(0.95, 19) > critical_value(0.95, 5) > 1.96
    assert grid(3) == [0.25, 0.5, 0.75]
    assert decide([3.1, 0.2], 3.0, "a", "b") == "a dominates b"
    assert decide([-3.1, 0.2, None], 3.0, "a", "b") == "b dominates a"
    assert decide([-3.1, 3.2], 3.0, "a", "b") == "curves cross"
    assert decide([2.9, -2.9], 3.0, "a", "b") == "not distinguishable at this level"


def test_cli(tmp_path, capsys):
    rng = np.random.default_rng(6)
    base = rng.uniform(1, 3, 2000)
    path = tmp_path / "d.parquet"
    _two(rng.uniform(1, 3, 2000), 2 + 1.6 * (base - 2)).to_parquet(path)
    assert main(["dominance", f"'{path}'", "x", "--group", "g", "--groups", "A", "B", "--points", "5",
                 "--format", "csv"]) == 0
    out = capsys.readouterr()
    assert "A dominates B" in out.err
    table = pd.read_csv(pd.io.common.StringIO(out.out))
    assert list(table.columns) == ["p", "ordinate_a", "ordinate_b", "difference", "se", "band_lo", "band_hi", "t"]
    assert len(table) == 5


@pytest.mark.parametrize("kwargs,needle", [
    ({"groups": ("A", "A")}, "two different values"),
    ({"groups": ("A", "Z")}, "no rows with a value for the group 'Z'"),
    ({"groups": ("A", "B"), "points": 0}, "points must be a whole number"),
    ({"groups": ("A", "B"), "level": 1.0}, "level must be a number strictly between 0 and 1"),
])
def test_errors(kwargs, needle):
    df = _two([1.0, 2.0, 3.0], [1.0, 5.0, 9.0])  # noqa: F841 (read by name)
    with pytest.raises(uneven.UnevenError, match=needle):
        uneven.lorenz_dominance("df", "x", "g", **kwargs)


def test_chart_reads_back_as_the_table(tmp_path):
    # the SVG's difference polyline and band polygon, mapped back through the axes, are the table's
    # differences and band ends (pixels rounded to 0.01 of a frame a few hundred pixels tall)
    import re
    rng = np.random.default_rng(7)
    base = rng.uniform(1, 3, 2000)
    path = tmp_path / "d.parquet"
    _two(rng.uniform(1, 3, 2000), 2 + 1.6 * (base - 2)).to_parquet(path)
    svg_path = tmp_path / "diff.svg"
    assert main(["dominance", f"'{path}'", "x", "--group", "g", "--groups", "A", "B", "--points", "7",
                 "--svg", str(svg_path), "--format", "csv"]) == 0
    text = svg_path.read_text()
    res = uneven.lorenz_dominance(f"'{path}'", "x", "g", ("A", "B"), points=7)
    line = re.search(r'class="series"[^>]*points="([^"]+)"', text).group(1)
    band = re.search(r'class="band" points="([^"]+)"', text).group(1)
    zero = re.search(r'class="zero" x1="([\d.]+)" y1="([\d.]+)"', text)
    pts = [tuple(map(float, p.split(","))) for p in line.split()]
    bpts = [tuple(map(float, p.split(","))) for p in band.split()]
    t = res.table
    # two known levels fix the y mapping: zero and the first point's difference
    y0 = float(zero.group(2))
    scale = (pts[0][1] - y0) / t["difference"][0]
    for i, (_, y) in enumerate(pts):
        assert (y - y0) / scale == pytest.approx(t["difference"][i], abs=2e-4)
    for i in range(7):
        assert (bpts[i][1] - y0) / scale == pytest.approx(t["band_hi"][i], abs=2e-4)
    assert "A dominates B" in text
