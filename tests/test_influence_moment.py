"""Exact leave-one-out influence for Theil and MLD (influence(measure="theil"|"mld")) against a
brute-force numpy recomputation without each row in turn (uneven.reference, itself checked in
test_reference.py against closed forms)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from uneven import reference as R
from uneven.tables.influence import influence


@pytest.mark.parametrize("measure", ["theil", "mld"])
@pytest.mark.parametrize("weighted", [False, True])
def test_largest_single_row_change_matches_brute_force(measure, weighted):
    rng = np.random.default_rng(41)  # invented marketplace sellers' revenue per region, ties and an outlier
    n = 90
    df = pd.DataFrame({"region": rng.choice(["north", "south", "west"], n), "rev": np.round(rng.lognormal(2, 0.7, n), 0),
                       "w": rng.integers(1, 5, n).astype(float)})
    df.loc[5, "rev"] = 400.0
    if measure == "theil":
        df.loc[7, "rev"] = 0.0  # a zero adds 0 to the Theil
    out = influence("df", "rev", weight="w" if weighted else None, by="region", k=2, measure=measure)
    ref = getattr(R, measure)
    for _, r in out.iterrows():
        d = df[df["region"] == r["region"]]
        x, w = d["rev"].to_numpy(float), (d["w"].to_numpy(float) if weighted else None)
        full = ref(x, w)
        change = np.array([ref(np.delete(x, i), None if w is None else np.delete(w, i)) - full for i in range(len(x))])
        k = int(np.argmax(np.abs(change)))
        assert r[measure] == pytest.approx(full, rel=1e-12)
        assert r["top_row_change"] == pytest.approx(change[k], rel=1e-9, abs=1e-13)
        assert r[f"{measure}_without_top_row"] == pytest.approx(full + change[k], rel=1e-9)
        assert r["top_row_value"] == x[k] or abs(change[x == r["top_row_value"]]).max() == pytest.approx(abs(change[k]))


def test_undefined_cases_are_null():
    df = pd.DataFrame({"x": [0.0, 1.0, 3.0]})  # MLD needs x > 0: undefined, and so is every leave-one-out  # noqa: F841 (read by name)
    out = influence("df", "x", measure="mld", k=1)
    assert pd.isna(out["mld"][0]) and pd.isna(out["mld_without_top_row"][0])
    one = pd.DataFrame({"x": [5.0]})  # removing the only row leaves nothing  # noqa: F841 (read by name)
    out = influence("one", "x", measure="theil", k=0)
    assert out["theil"][0] == 0.0 and pd.isna(out["theil_without_top_row"][0])
