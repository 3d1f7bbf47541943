"""Tests of the comparison appendix (tsunamifocus.products.comparison)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import shapely

from tsunamifocus.products.comparison import comparison_appendix
from tsunamifocus.studies.compare import compare_runs


def _segments(lensing, reliable):
    n = len(lensing)
    return pd.DataFrame({
        "segment_id": [f"S{k + 1:04d}" for k in range(n)],
        "name": [f"segment {k}" for k in range(n)],
        "lensing_factor": np.asarray(lensing, dtype=float),
        "amp_1m_m": 0.1 * np.asarray(lensing, dtype=float),
        "reliable": reliable,
        "geometry": [shapely.LineString([(1000.0 * k, 0.0), (1000.0 * k + 900.0, 500.0)]) for k in range(n)],
    })


def test_appendix_table_does_not_show_unranked_values_as_ranks(tmp_path):
    # Run B does not rank S0001 (a ray shadow, say; its value 11.6 is the largest of all): the
    # envelope table lists S0001 for run A, and B's cell must say the value is not ranked instead
    # of giving it a rank (common practice, no source: a rank is a place among the ranked).
    a = _segments([9.0, 4.0, 3.0, 2.0, 1.0], [True] * 5)
    b = _segments([11.6, 2.0, 3.0, 5.0, 4.0], [False, True, True, True, True])
    runs = [("A", a.set_index("segment_id"), {}), ("B", b.set_index("segment_id"), {})]
    cmp = compare_runs(runs, top_k=2)
    comparison_appendix(cmp, runs, tmp_path)
    html = (tmp_path / "comparison_appendix.html").read_text(encoding="utf-8")
    assert "(11.60, not ranked)" in html
    # the sections of a single run's appendix point to the runs' own instead of reading "none supplied"
    assert "No validation summary was supplied" not in html and "No numerical health checks" not in html
    assert "validation summary (its wave check, when run) is in its own appendix" in html
    assert "numerical health checks are in its own appendix" in html
    assert (tmp_path / "comparison_appendix.pdf").read_bytes().startswith(b"%PDF")
    # both rankings are compared: the amplitude envelope table and scatter beside the lensing ones
    assert "segments of the envelope ranking by indicative amplitude" in html
    assert "Amplitude (m), A" in html and "Runs with it in their top 2" in html
    assert (tmp_path / "comparison_scatter.png").exists() and (tmp_path / "comparison_scatter_amplitude.png").exists()
