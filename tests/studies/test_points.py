"""Tests of tsunamifocus.studies.points: values at points of interest and their distances.

References: geodesic distances from pyproj.Geod (reference library) to densely sampled segment
lines (brute-force minimum); longitudes differing by 360 degrees name the same meridian (common
practice, no source).
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from pyproj import Geod
from shapely.geometry import LineString

from tsunamifocus.constants import DEFAULTS
from tsunamifocus.grid import GridInfo, make_grid
from tsunamifocus.io.scenario import PointOfInterest
from tsunamifocus.studies.points import nearest_segment, point_max_distance_km, points_table


def _case():
    """A 0.5-degree lon/lat grid 120..250 E, 0..65 N (0..360 numbers) with two coast segments."""
    lon = np.arange(120.0, 250.0 + 1e-9, 0.5)
    lat = np.arange(0.0, 65.0 + 1e-9, 0.5)
    depth = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326")
    tt = depth.copy(data=np.full(depth.shape, 600.0)).rename("travel_time_min")
    lens = depth.copy(data=np.full(depth.shape, 1.5)).rename("lensing_factor")
    # the "American" segment at 124.3 W (235.7 E) and an "Asian" one at 141 E, same latitudes
    seg = pd.DataFrame({
        "segment_id": ["S0001", "S0002"],
        "geometry": [LineString([(141.0, 41.0), (141.0, 42.0)]), LineString([(235.7, 41.3), (235.7, 42.3)])],
        "lensing_factor": [9.0, 2.0], "amp_1m_m": [5.0, 1.2], "first_arrival_s": [1800.0, 36000.0],
    })
    # the front reached the sea only west of 235 E (the point on the coast reads the nearest such cell)
    tt_v = tt.values.copy()
    tt_v[:, lon > 235.0] = np.nan
    tt = tt.copy(data=tt_v)
    analysis = SimpleNamespace(focusing=SimpleNamespace(segments=seg, travel_time_min=tt, lensing_factor=lens))
    return analysis, depth


def _brute_km(lon, lat, line, radius):
    g = Geod(a=radius, b=radius)
    (x0, y0), (x1, y1) = line.coords[0], line.coords[-1]
    t = np.linspace(0.0, 1.0, 20001)
    _, _, d = g.inv(np.full(t.size, lon), np.full(t.size, lat), x0 + t * (x1 - x0), y0 + t * (y1 - y0))
    return float(np.min(np.abs(d))) / 1000.0


def test_point_in_minus180_numbers_matches_the_right_segment_with_geodesic_distance():
    analysis, depth = _case()
    info = GridInfo.from_dataarray(depth)
    pts = [PointOfInterest("Harbour west coast", -124.2, 41.75)]
    tab = points_table(analysis, pts, depth, max_distance_km=80.0)
    r = tab.iloc[0]
    assert r["nearest_segment"] == "S0002"  # not the segment 7,000 km away in the west Pacific
    ref = _brute_km(-124.2, 41.75, analysis.focusing.segments["geometry"][1], info.radius_m)
    assert r["segment_distance_km"] == pytest.approx(ref, rel=1e-3)
    assert r["lensing_factor"] == 2.0 and r["amp_1m_m"] == 1.2
    # the sea cell read: the nearest cell west of 235 E, its geodesic distance (pyproj.Geod) reported
    g = Geod(a=info.radius_m, b=info.radius_m)
    dc = min(g.inv(-124.2, 41.75, 235.0, la)[2] for la in (41.5, 42.0)) / 1000.0
    assert r["snap_distance_km"] == pytest.approx(dc, rel=1e-6) and 50.0 < dc < 80.0
    assert r["first_arrival_min"] == 600.0 and r["lensing_factor_map"] == 1.5
    assert r["note"] == ""
    # with a search radius below the cell's distance the first arrival and the map value are left out
    # (no stand-in value), with a note and a warning
    t2 = points_table(analysis, pts, depth, max_distance_km=50.0)
    r2 = t2.iloc[0]
    assert "Harbour west coast" in t2.attrs["warnings"][0]
    assert math.isnan(r2["lensing_factor_map"]) and math.isnan(r2["first_arrival_min"])
    assert math.isnan(r2["snap_distance_km"])
    assert r2["note"].startswith("no first arrival or map value") and r2["lensing_factor"] == 2.0


def test_far_points_get_no_value_and_a_note():
    analysis, depth = _case()
    pts = [PointOfInterest("mid ocean", -150.0, 30.0), PointOfInterest("outside", -60.0, 40.0),
           PointOfInterest("inland", -118.0, 41.75)]
    tab = points_table(analysis, pts, depth, max_distance_km=50.0).set_index("name")
    mid = tab.loc["mid ocean"]
    # ~2,000 km from the nearest segment: no segment values; the sea cell is the point itself
    assert mid["segment_distance_km"] > 1000.0
    assert math.isnan(mid["lensing_factor"]) and math.isnan(mid["amp_1m_m"])
    assert mid["first_arrival_min"] == 600.0 and "no segment values" in mid["note"] and "search radius 50 km" in mid["note"]
    out = tab.loc["outside"]
    assert "outside the grid" in out["note"]
    assert all(math.isnan(out[c]) for c in ("first_arrival_min", "lensing_factor", "amp_1m_m", "lensing_factor_map"))
    inland = tab.loc["inland"]  # ~500 km east of the segment, no sea cell near: nothing made up
    assert inland["note"].startswith("no value")
    assert all(math.isnan(inland[c]) for c in ("first_arrival_min", "lensing_factor", "amp_1m_m"))
    assert len(points_table(analysis, pts, depth, max_distance_km=50.0).attrs["warnings"]) == 3


def test_default_limit_and_projected_distance():
    _, depth = _case()
    km, why = point_max_distance_km(depth)
    # one default, from the table of defaults
    assert (km, why) == (DEFAULTS["coast"]["point_max_distance_km"], "default")
    assert point_max_distance_km(depth, 12.0) == (12.0, "[coast] point_max_distance_km")
    # planar grid: plain Euclidean distance to the line (shapely-independent arithmetic)
    x = np.arange(0.0, 100e3, 1e3)
    d = make_grid(np.ones((x.size, x.size)), x, x, "EPSG:32633")
    seg = pd.DataFrame({"segment_id": ["A"], "geometry": [LineString([(10e3, 0.0), (10e3, 50e3)])]})
    k, dist = nearest_segment(seg, GridInfo.from_dataarray(d), 40e3, 80e3)
    assert k == 0 and dist == pytest.approx(math.hypot(30e3, 30e3))
