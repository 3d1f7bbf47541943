"""The caution text shipped in the package is the repository's CAUTIONS.md (one source of the text)."""

from __future__ import annotations

import pathlib

from tsunamifocus.cautions import caution_lines, caution_summary, caution_text

REPO = pathlib.Path(__file__).resolve().parents[1]


def test_package_copy_identical_to_top_level():
    top = (REPO / "CAUTIONS.md").read_bytes()
    pkg = (REPO / "tsunamifocus" / "data" / "CAUTIONS.md").read_bytes()
    assert pkg == top, "tsunamifocus/data/CAUTIONS.md differs from CAUTIONS.md: copy it again"


def test_text_content():
    text = caution_text()
    top = (REPO / "CAUTIONS.md").read_text(encoding="utf-8")
    assert not text.startswith("#") and text in top
    # the points every output must carry (project rule: screening only, defer to official centres)
    for phrase in ("SCREENING ESTIMATES ONLY", "not a tsunami warning", "official", "licensed"):
        assert phrase in text
    assert "\n" not in caution_summary() and caution_summary().startswith("SCREENING ESTIMATES ONLY")
    lines = caution_lines(width=80)
    assert max(len(x) for x in lines) <= 80
    # re-wrapping keeps every word
    assert " ".join(" ".join(lines).split()) == " ".join(text.split())
