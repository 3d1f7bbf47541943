"""Tests of tsunamifocus.coast: coastline contours, file reading, segmentation."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pyogrio.raw
import pytest
import shapely
from pyproj import Geod
from shapely.geometry import LineString, Point

from tsunamifocus.coast.segments import SEGMENT_COLUMNS, segment_coastline
from tsunamifocus.coast.coastline import coastline_from_grid, line_length_m
from tsunamifocus.io.coastline import read_coastline
from tsunamifocus.constants import EARTH_RADIUS_M
from tsunamifocus.errors import CoastError, InputError, ResolutionWarning
from tsunamifocus.grid import GridInfo, make_grid

UTM31N = "EPSG:32631"


def shelf_grid(nx=81, ny=61, dx=1000.0, slope=0.01, x_land=10_000.0, island=None, crs=UTM31N):
    """Depth rising linearly towards the west: h = slope * (x - x_land), land for x < x_land."""
    x = 400_000.0 + dx * np.arange(nx)
    y = 1_000_000.0 + dx * np.arange(ny)
    X, Y = np.meshgrid(x, y)
    h = slope * (X - (x[0] + x_land))
    if island is not None:
        xc, yc, r = island
        h = np.where(np.hypot(X - xc, Y - yc) < r, -5.0, h)
    return make_grid(h, x, y, crs)


def test_straight_shelf_contour_is_analytic_line():
    # Linear depth field: marching squares interpolates linearly, so the 20 m contour must sit
    # exactly on x = x0 + x_land + 20 / slope (analytic solution of h(x) = 20).
    d = shelf_grid()
    lines = coastline_from_grid(d, 20.0)
    assert len(lines) == 1
    xy = np.asarray(lines[0].coords)
    expected_x = 400_000.0 + 10_000.0 + 20.0 / 0.01
    np.testing.assert_allclose(xy[:, 0], expected_x, atol=1e-6)
    # spans the whole grid in y: length = (ny - 1) * dx
    assert line_length_m(lines[0], GridInfo.from_dataarray(d)) == pytest.approx(60_000.0, rel=1e-9)


def test_island_is_closed_ring_with_circle_length():
    # A round island of radius 8 km in deep water: its contour is a closed ring whose length is
    # the circumference 2 pi r (analytic) within the grid resolution (inscribed polygon error,
    # plus up to one cell of radius from the step-shaped edge).
    r = 8000.0
    d = shelf_grid(island=(440_000.0, 1_030_000.0, r))
    lines = coastline_from_grid(d, 20.0)
    rings = [ln for ln in lines if ln.is_closed]
    assert len(rings) == 1
    L = line_length_m(rings[0], GridInfo.from_dataarray(d))
    assert abs(L - 2 * math.pi * r) < 2 * math.pi * 1000.0  # within one cell of radius
    c = rings[0].centroid
    assert abs(c.x - 440_000.0) < 1000.0 and abs(c.y - 1_030_000.0) < 1000.0


def test_fragments_below_threshold_are_dropped():
    # a one-node islet (-3 m among ~500 m depths): the 20 m contour is a diamond with
    # half-diagonals ~23/500 of a cell (linear interpolation), perimeter ~ 260 m: dropped by the
    # default threshold (5 cells = 5 km), kept by a 100 m one.
    d = shelf_grid()
    v = d.values.copy()
    v[30, 60] = -3.0
    d = d.copy(data=v)
    assert len(coastline_from_grid(d, 20.0)) == 1
    lines = coastline_from_grid(d, 20.0, min_length_m=100.0)
    assert len(lines) == 2
    # vertices on the 4 edges by linear interpolation between -3 m and 490/500/510 m
    an, ae, aw = 23.0 / 503.0, 23.0 / 513.0, 23.0 / 493.0
    expected = 2000.0 * (math.hypot(ae, an) + math.hypot(aw, an))
    assert lines[1].length == pytest.approx(expected, rel=1e-6)


def test_no_contour_errors():
    d = shelf_grid()
    with pytest.raises(CoastError, match="isobath"):
        coastline_from_grid(d, 5000.0)  # deeper than the grid
    with pytest.raises(CoastError, match="> 0"):
        coastline_from_grid(d, -1.0)


def test_segments_cover_line_exactly_once():
    # Partition property (definition of a segmentation): lengths add up to the line length,
    # the union equals the line, neighbours touch only at a point.
    d = shelf_grid()
    line = coastline_from_grid(d, 20.0)[0]
    seg = segment_coastline([line], 7000.0, d)
    assert list(seg.columns) == SEGMENT_COLUMNS
    info = GridInfo.from_dataarray(d)
    L = line_length_m(line, info)
    n = round(L / 7000.0)
    assert len(seg) == n
    assert seg["length_m"].sum() == pytest.approx(L, rel=1e-12)
    np.testing.assert_allclose(seg["length_m"], L / n, rtol=1e-9)
    union = shapely.union_all(list(seg["geometry"]))
    assert line.difference(union.buffer(1e-6)).length < 1e-6
    assert union.difference(line.buffer(1e-6)).length < 1e-6
    geoms = list(seg["geometry"])
    for a, b in zip(geoms[:-1], geoms[1:], strict=True):
        assert a.intersection(b).length == 0.0
        assert a.touches(b)
    assert seg["segment_id"].tolist()[:3] == ["S0001", "S0002", "S0003"]
    assert seg["segment_id"].is_unique
    # the sea lies to the east (+x): seaward normal azimuth 90 deg (grid north)
    np.testing.assert_allclose(seg["normal_azimuth_deg"], 90.0, atol=1e-6)
    # centre points lie on the line half-way: x on the contour, y at the middle of each piece
    np.testing.assert_allclose(seg["x_mid"], 412_000.0, atol=1e-6)


def test_segment_ids_are_stable_and_island_normals_point_outward():
    d = shelf_grid(island=(440_000.0, 1_030_000.0, 8000.0))
    lines = coastline_from_grid(d, 20.0)
    a = segment_coastline(lines, 5000.0, d, names=["main", "isle"])
    b = segment_coastline(lines, 5000.0, d, names=["main", "isle"])
    assert a["segment_id"].tolist() == b["segment_id"].tolist()
    assert set(a["name"]) == {"main", "isle"}
    isle = a[a["name"] == "isle"]
    # outward normal of an island ring points away from the island centre (geometry)
    for _, r in isle.iterrows():
        away = math.degrees(math.atan2(r.x_mid - 440_000.0, r.y_mid - 1_030_000.0)) % 360
        diff = abs((r.normal_azimuth_deg - away + 180) % 360 - 180)
        assert diff < 30.0


def test_geographic_lengths_are_geodesic():
    # A line along a meridian on a lon/lat grid: geodesic length on the sphere is R * dlat
    # (analytic), and pyproj.Geod on the same sphere gives the same (reference library).
    lon = np.linspace(10.0, 12.0, 41)
    lat = np.linspace(-1.0, 3.0, 81)
    LON, _ = np.meshgrid(lon, lat)
    h = 2000.0 * (LON - 10.5)  # sea to the east
    d = make_grid(h, lon, lat, "EPSG:4326")
    line = LineString([(11.0, 0.0), (11.0, 0.5), (11.0, 2.0)])
    seg = segment_coastline([line], 50_000.0, d)
    expected = EARTH_RADIUS_M * math.radians(2.0)
    assert seg["length_m"].sum() == pytest.approx(expected, rel=1e-9)
    g = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)
    assert g.line_length([11.0, 11.0], [0.0, 2.0]) == pytest.approx(expected, rel=1e-9)
    np.testing.assert_allclose(seg["normal_azimuth_deg"], 90.0, atol=1e-6)
    np.testing.assert_allclose(seg["lon_mid"], 11.0)
    # lon/lat mids: midpoints half-way (by geodesic length) along a meridian
    n = len(seg)
    np.testing.assert_allclose(seg["lat_mid"], (np.arange(n) + 0.5) * 2.0 / n, atol=1e-9)


def test_segment_length_errors_and_warnings():
    d = shelf_grid()
    line = coastline_from_grid(d, 20.0)[0]
    with pytest.raises(CoastError, match="longer than the whole coastline"):
        segment_coastline([line], 1e6, d)
    with pytest.warns(ResolutionWarning, match="shorter than the grid spacing"):
        seg = segment_coastline([line], 400.0, d)
    assert len(seg) == 150
    with pytest.raises(CoastError, match="no coastline"):
        segment_coastline([], 1000.0, d)
    with pytest.raises(CoastError):
        segment_coastline([line], -5.0, d)
    assert issubclass(CoastError, InputError)


def _write(path, geoms, crs, names=None, geometry_type="LineString"):
    wkb = shapely.to_wkb(np.asarray(geoms, dtype=object))
    if names is None:
        field_data, fields = [], []
    else:
        field_data, fields = [np.asarray(names, dtype=object)], ["label"]
    pyogrio.raw.write(path, wkb, field_data, fields, crs=crs, geometry_type=geometry_type, driver="GeoJSON")


def test_read_coastline_reprojects(tmp_path):
    # A file in geographic WGS84, grid in UTM zone 31N. Reference facts of the UTM projection:
    # a point on the central meridian (3 deg E) at the equator maps to (500000, 0) (false
    # easting 500 km; common practice, no source needed beyond the UTM definition).
    p = tmp_path / "coast.geojson"
    _write(p, [LineString([(3.0, 0.0), (3.0, 0.5)]), LineString([(3.1, 0.0), (3.2, 0.1)])], "EPSG:4326",
           names=["north bay", "east cape"])
    lines, names = read_coastline(p, UTM31N, name_field="label")
    assert names == ["north bay", "east cape"]
    x0, y0 = lines[0].coords[0]
    assert x0 == pytest.approx(500_000.0, abs=1e-3) and y0 == pytest.approx(0.0, abs=1e-3)
    # 0.5 deg of latitude along the central meridian ~ 55.3 km on the ellipsoid (scale 0.9996)
    assert 0.9996 * 55_200 < lines[0].length < 0.9996 * 55_400
    # onto a 0..360 lon/lat grid: longitudes wrapped into the grid range
    lon = np.arange(0.0, 360.0, 1.0)
    lat = np.linspace(-10, 10, 21)
    g = make_grid(np.full((21, 360), 100.0), lon, lat, "EPSG:4326")
    p2 = tmp_path / "west.geojson"
    _write(p2, [LineString([(-20.0, 0.0), (-19.0, 1.0)])], "EPSG:4326")
    lines2, names2 = read_coastline(p2, g)
    assert names2 == [""]
    np.testing.assert_allclose(np.asarray(lines2[0].coords)[:, 0], [340.0, 341.0])


def test_read_coastline_polygons_give_boundaries(tmp_path):
    p = tmp_path / "land.geojson"
    poly = shapely.Polygon([(3.0, 0.0), (3.1, 0.0), (3.1, 0.1), (3.0, 0.1)])
    _write(p, [poly], "EPSG:4326", geometry_type="Polygon")
    lines, _ = read_coastline(p, "EPSG:4326")
    assert len(lines) == 1 and lines[0].is_closed


def test_read_coastline_bad_files(tmp_path):
    pts = tmp_path / "points.geojson"
    _write(pts, [Point(3.0, 0.0), Point(3.1, 0.0)], "EPSG:4326", geometry_type="Point")
    with pytest.raises(CoastError, match="no usable line"):
        read_coastline(pts, UTM31N)
    with pytest.raises(CoastError, match="does not exist"):
        read_coastline(tmp_path / "missing.geojson", UTM31N)
    nocrs = tmp_path / "nocrs.gpkg"
    wkb = shapely.to_wkb(np.asarray([LineString([(0, 0), (1, 1)])], dtype=object))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pyogrio.raw.write(nocrs, wkb, [], [], geometry_type="LineString", driver="GPKG")
    with pytest.raises(CoastError, match="no CRS"):
        read_coastline(nocrs, UTM31N)
    ok = tmp_path / "ok.geojson"
    _write(ok, [LineString([(3.0, 0.0), (3.0, 0.5)])], "EPSG:4326", names=["a"])
    with pytest.raises(CoastError, match="name_field 'nom'"):
        read_coastline(ok, UTM31N, name_field="nom")
    empty = tmp_path / "empty.geojson"
    _write(empty, [LineString()], "EPSG:4326")
    with pytest.raises(CoastError):
        read_coastline(empty, UTM31N)


def test_island_across_the_seam_of_a_global_grid_is_one_ring():
    # Longitude invariance of the sphere: an island straddling the 0/360 seam of a periodic
    # grid must give one closed ring of the same geodesic length as the same island at 180 E.
    lon = np.arange(0.0, 360.0, 1.0)
    lat = np.arange(-60.0, 60.1, 1.0)
    LON, LAT = np.meshgrid(lon, lat)
    dlon = (LON + 180.0) % 360.0 - 180.0
    h = np.where(np.hypot(dlon, LAT) < 10, -100.0, 4000.0)
    h = np.where(np.hypot(LON - 180.0, LAT) < 10, -100.0, h)
    d = make_grid(h, lon, lat, "EPSG:4326")
    assert d.attrs["lon_periodic"] == 1
    lines = coastline_from_grid(d, 20.0)
    info = GridInfo.from_dataarray(d)
    assert len(lines) == 2 and all(ln.is_closed for ln in lines)
    la, lb = (line_length_m(ln, info) for ln in lines)
    assert la == pytest.approx(lb, rel=1e-9)
    seg = segment_coastline(lines, 200e3, d)
    assert seg["length_m"].sum() == pytest.approx(la + lb, rel=1e-12)
    assert seg["x_mid"].between(-0.5, 359.5).all()  # centres inside the grid's longitude range
    assert seg["lon_mid"].between(-180.0, 180.0).all()
