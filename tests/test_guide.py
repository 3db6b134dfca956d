"""The contributor guide stays short and points at files that exist."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
GUIDE = ROOT / "DEVELOPERS.md"


def test_guide_is_at_most_10_kb():
    # the guide is the map and the recipes; detail lives in docs/ and in module docstrings
    assert len(GUIDE.read_bytes()) <= 10 * 1024


def test_paths_the_guide_names_exist():
    text = GUIDE.read_text(encoding="utf-8")
    named = set(re.findall(r"`((?:src/uneven/|tests/|docs/|bench/|compiler/|catalog/|reference/|bounds/|"
                           r"sqltree/|fixtures/|sql/)[\w/.]*\.(?:py|md|sql))", text))
    named |= set(re.findall(r"\b(docs/[\w-]+\.md)\b", text))
    assert len(named) > 20  # the pattern finds the guide's paths (an empty set would pass vacuously)
    missing = []
    for p in sorted(named):
        candidates = [ROOT / p, ROOT / "src" / "uneven" / p]
        if not any(c.exists() for c in candidates):
            missing.append(p)
    assert missing == []
