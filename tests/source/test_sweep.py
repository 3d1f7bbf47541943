"""Tests of tsunamifocus.source.sweep: ruptures placed along a trench line."""

from __future__ import annotations

import numpy as np
import pytest
from pyproj import Geod

from tsunamifocus.io.sourceset import SweepConfig
from tsunamifocus.source.faults import strasser2010_interface
from tsunamifocus.source.sweep import line_positions, sweep_sources

GEOD = Geod(ellps="WGS84")
LINE = ((150.0, -40.0), (150.0, -35.0), (151.0, -31.0))


def sweep(**kw):
    args = dict(name="t", trace=LINE, spacing_km=100.0, magnitudes=(8.0, 8.6), magnitude_weights=(3.0, 1.0),
                dip_deg=(10.0, 20.0), top_depth_km=6.0, rake_deg=90.0, weight=2.0)
    args.update(kw)
    return SweepConfig(**args)


def test_positions_follow_the_line_geodesically():
    d1 = GEOD.inv(*LINE[0], *LINE[1])[2] / 1e3
    pts = line_positions(LINE, np.array([0.0, 100.0, d1 + 50.0]))
    # distances from the first point along a meridian: pyproj's geodesic inverse (reference library)
    assert GEOD.inv(*LINE[0], pts[1][0], pts[1][1])[2] / 1e3 == pytest.approx(100.0, rel=1e-9)
    assert pts[0][3] == 0 and pts[2][3] == 1  # piece of the line holding each point
    assert GEOD.inv(*LINE[1], pts[2][0], pts[2][1])[2] / 1e3 == pytest.approx(50.0, rel=1e-9)
    assert pts[0][2] == pytest.approx(0.0, abs=1e-6)  # due north along the meridian


def test_ruptures_have_the_scaling_length_width_and_spacing():
    members = sweep_sources(sweep())
    total = sum(GEOD.inv(*a, *b)[2] for a, b in zip(LINE, LINE[1:])) / 1e3
    for mw, mw_w in ((8.0, 3.0), (8.6, 1.0)):
        L, W = strasser2010_interface(mw)  # Strasser et al. (2010) interface relation
        ms = [m for m in members if m.source.segments[0].magnitude == mw]
        # centres at L/2, L/2 + s, ... while the rupture stays on the line
        assert len(ms) == int(np.floor((total - L) / 100.0)) + 1
        for m in ms:
            seg = m.source.segments[0]
            assert GEOD.inv(*seg.trace[0], *seg.trace[1])[2] / 1e3 == pytest.approx(L, rel=1e-6)
            assert seg.width_km == pytest.approx(W)
            assert m.weight == pytest.approx(2.0 * mw_w)
        mids = [GEOD.npts(*m.source.segments[0].trace[0], *m.source.segments[0].trace[1], 1)[0] for m in ms]
        # consecutive centres on the first (straight) piece are one spacing apart
        on_first = [p for p in mids if p[1] < -35.0 - 1e-6]
        if len(on_first) >= 2:
            assert GEOD.inv(*on_first[0], *on_first[1])[2] / 1e3 == pytest.approx(100.0, rel=1e-3)


def test_dip_per_piece_and_long_ruptures():
    members = sweep_sources(sweep(magnitudes=(8.0,), magnitude_weights=(1.0,)))
    dips = {m.source.segments[0].dip_deg for m in members}
    assert dips == {10.0, 20.0}
    short = ((150.0, -40.0), (150.0, -39.0))  # 111 km, shorter than a Mw 9 rupture (~600 km)
    one = sweep_sources(sweep(trace=short, magnitudes=(9.0,), magnitude_weights=(1.0,), dip_deg=(12.0,)))
    assert len(one) == 1
    mid = GEOD.npts(*one[0].source.segments[0].trace[0], *one[0].source.segments[0].trace[1], 1)[0]
    assert mid[1] == pytest.approx(-39.5, abs=0.01)
