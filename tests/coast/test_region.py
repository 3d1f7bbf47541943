"""Tests of tsunamifocus.coast.region: the coast of interest (lon/lat box, polygons).

References: longitudes that differ by whole turns of 360 degrees name the same meridian, and an
arc from lon_min eastward to lon_max crosses the antimeridian when lon_min > lon_max (common
practice, no source); projected coordinates are converted with pyproj (reference library).
"""

from __future__ import annotations

import numpy as np
import pytest
from pyproj import Transformer
from shapely.geometry import box as shapely_box

from tsunamifocus.coast.region import CoastRegion, lon_in_range, region_from_config
from tsunamifocus.errors import CoastError
from tsunamifocus.grid import GridInfo, make_grid


def test_lon_range_any_numbering_and_antimeridian():
    # the US west coast written in -180..180 numbers contains the same meridians written 0..360
    assert lon_in_range(236.0, -125.0, -117.0) and lon_in_range(-124.0, -125.0, -117.0)
    assert lon_in_range(-124.0, 235.0, 243.0) and lon_in_range(596.0, 235.0, 243.0)  # 596 = 236 + 360
    assert not lon_in_range(140.0, -125.0, -117.0)
    # 20 degrees across the antimeridian
    inside = lon_in_range(np.array([170.0, 175.0, 180.0, -175.0, 185.0, -170.0]), 170.0, -170.0)
    assert inside.all()
    assert not lon_in_range(np.array([0.0, 160.0, -160.0, 200.0]), 170.0, -170.0).any()
    # a full turn contains everything
    assert lon_in_range(np.array([-180.0, 0.0, 359.0]), -180.0, 180.0).all()


def test_region_box_and_polygon():
    r = region_from_config([-125.0, 32.0, -117.0, 49.0])
    assert r.contains_lonlat(235.8, 41.75) and r.contains_lonlat(-124.2, 41.75)
    assert not r.contains_lonlat(235.8, 50.0) and not r.contains_lonlat(140.0, 40.0)
    assert "lon -125..-117" in r.describe()
    # a polygon in -180..180 numbers restricts a point given in 0..360 numbers
    poly = shapely_box(-125.0, 40.0, -123.0, 43.0)
    rp = CoastRegion(box=r.box, polygons=poly)
    assert rp.contains_lonlat(235.8, 41.75) and not rp.contains_lonlat(237.5, 41.75)
    assert CoastRegion().is_everything and CoastRegion().contains_lonlat(10.0, 10.0)
    with pytest.raises(CoastError, match="lat_min < lat_max"):
        region_from_config([-125.0, 49.0, -117.0, 32.0])


def test_region_on_projected_grid_uses_pyproj():
    # UTM zone 10N around the Oregon coast; the region test must agree with pyproj's lon/lat of the points
    x = np.arange(300e3, 500e3, 10e3)
    y = np.arange(4.6e6, 4.9e6, 10e3)
    info = GridInfo.from_dataarray(make_grid(np.ones((y.size, x.size)), x, y, "EPSG:32610"))
    r = region_from_config([-124.5, 42.0, -123.0, 43.0])
    X, Y = np.meshgrid(x, y)
    lon, lat = Transformer.from_crs("EPSG:32610", "EPSG:4326", always_xy=True).transform(X, Y)
    expect = (lon >= -124.5) & (lon <= -123.0) & (lat >= 42.0) & (lat <= 43.0)
    got = r.contains_grid_xy(info, X, Y)
    assert expect.any() and (~expect).any()
    np.testing.assert_array_equal(got, expect)


def test_region_polygon_file_across_the_antimeridian(tmp_path):
    # RFC 7946 GeoJSON (WGS84 lon/lat): a polygon written in 0..360 numbers around 180 E, read with
    # pyogrio; points given in -180..180 numbers are tested against it modulo 360
    import json

    from tsunamifocus.io.coastline import read_region_polygons

    p = tmp_path / "region.geojson"
    ring = [[170.0, -50.0], [190.0, -50.0], [190.0, -30.0], [170.0, -30.0], [170.0, -50.0]]
    p.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    r = CoastRegion(polygons=read_region_polygons(p))
    assert r.contains_lonlat(-175.0, -40.0) and r.contains_lonlat(175.0, -40.0)
    assert not r.contains_lonlat(-165.0, -40.0) and not r.contains_lonlat(175.0, -20.0)
    lines = tmp_path / "lines.geojson"
    lines.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "LineString", "coordinates": ring}}]}))
    with pytest.raises(CoastError, match=r"lines\.geojson: no Polygon or MultiPolygon features") as ei:
        read_region_polygons(lines)
    assert "\n" not in str(ei.value)
    with pytest.raises(CoastError, match="does not exist"):
        read_region_polygons(tmp_path / "missing.geojson")
