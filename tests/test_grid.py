"""Tests of tsunamifocus.grid: cell sizes in metres and cell areas on the sphere.

Outside references: pyproj.Geod on a sphere of the package's Earth radius (geodesic lengths
and polygon areas), and the spherical-zone area formula A = R^2 dlon (sin phi2 - sin phi1)
(Snyder 1987, Map Projections - A Working Manual, USGS PP 1395, eq. for the area of a
spherical quadrangle).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from pyproj import Geod

from tsunamifocus.constants import EARTH_RADIUS_M
from tsunamifocus.grid import GridInfo, crop_bathymetry, make_grid, resample_bathymetry

SPHERE = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)


def _lonlat_grid(lon0, lat0, d, nx, ny):
    x = lon0 + d * np.arange(nx)
    y = lat0 + d * np.arange(ny)
    return make_grid(np.full((ny, nx), 3000.0), x, y, "EPSG:4326")


@pytest.mark.parametrize("lat0", [-70.0, -10.0, 0.0, 35.0, 60.0])
def test_spacing_in_metres_matches_pyproj_geod(lat0):
    """dy is a meridian arc and dx the parallel arc at the mid latitude; pyproj.Geod on the same sphere
    gives the meridian arc exactly and the short chord along the parallel to within (dlon^2 sin^2 phi)/24."""
    d = 0.1
    info = GridInfo.from_dataarray(_lonlat_grid(140.0, lat0, d, 30, 21))
    dxm, dym = info.spacing_m()
    lat_mid = lat0 + 10 * d
    _, _, meridian = SPHERE.inv(140.0, lat_mid - d / 2, 140.0, lat_mid + d / 2)
    assert dym == pytest.approx(meridian, rel=1e-9)
    _, _, chord = SPHERE.inv(140.0, lat_mid, 140.0 + d, lat_mid)
    assert dxm == pytest.approx(chord, rel=1e-6)


def test_projected_spacing_is_the_coordinate_step():
    """On a projected grid the spacing is the coordinate step in metres (grid convention)."""
    g = make_grid(np.ones((4, 5)), 1000.0 + 250.0 * np.arange(5), 2.0e6 + 500.0 * np.arange(4), "EPSG:32633")
    assert GridInfo.from_dataarray(g).spacing_m() == (250.0, 500.0)


@pytest.mark.parametrize("lat", [-60.0, 0.05, 45.0, 80.0])
def test_cell_area_matches_pyproj_polygon_area(lat):
    """Cell areas against pyproj.Geod.polygon_area_perimeter on the sphere and the zone formula.

    Geod joins the corners by great circles, not parallels; on 0.05-degree cells that shifts the
    area by ~1e-7 relative (it grows as the cell size squared), hence rel=1e-6.
    """
    d = 0.05
    info = GridInfo.from_dataarray(_lonlat_grid(10.0, lat, d, 4, 3))
    area = info.cell_area_m2()[1, 0]
    y = info.y[1]
    lons = [10.0, 10.0 + d, 10.0 + d, 10.0]
    lats = [y - d / 2, y - d / 2, y + d / 2, y + d / 2]
    geod_area, _ = SPHERE.polygon_area_perimeter(lons, lats)
    assert area == pytest.approx(abs(geod_area), rel=1e-6)
    zone = EARTH_RADIUS_M**2 * math.radians(d) * (math.sin(math.radians(y + d / 2)) - math.sin(math.radians(y - d / 2)))
    assert area == pytest.approx(zone, rel=1e-12)


def test_crop_and_resample_keep_the_grid_convention():
    """Crop keeps the coordinates inside the box; block-averaging by 2 gives the mean of each block
    (area-average resampling, common practice, no source) at the block centres."""
    x = 1000.0 * np.arange(8)
    y = 1000.0 * np.arange(6)
    v = np.arange(48, dtype=float).reshape(6, 8) + 100.0
    g = make_grid(v, x, y, "EPSG:3857")
    c = crop_bathymetry(g, (1500.0, 1500.0, 5500.0, 3500.0))
    assert c.x.min() >= 1500.0 and c.x.max() <= 5500.0 and c.y.min() >= 1500.0 and c.y.max() <= 3500.0
    r = resample_bathymetry(g, 2.0)
    np.testing.assert_allclose(r.values[0, 0], v[:2, :2].mean())
    np.testing.assert_allclose(r.x.values[:2], [500.0, 2500.0])


def test_refine_grid_reproduces_linear_fields_and_subdivides_cells():
    # bilinear interpolation is exact for a linear field (any interpolation textbook; common practice,
    # no source); the fine centres subdivide each coarse cell evenly, so block means of the fine
    # coordinates are the coarse ones and the outer edges do not move.
    from tsunamifocus.errors import InputError
    from tsunamifocus.grid import GridInfo, make_grid, refine_grid

    x = 1000.0 + 500.0 * np.arange(7)
    y = -300.0 + 250.0 * np.arange(5)
    X, Y = np.meshgrid(x, y)
    g = make_grid(3.0 * X - 2.0 * Y + 7.0, x, y, "EPSG:3857", attrs={"units": "m"})
    f = refine_grid(g, 3)
    fi, gi = GridInfo.from_dataarray(f), GridInfo.from_dataarray(g)
    assert f.shape == (15, 21) and f.attrs["units"] == "m"
    assert fi.bounds == pytest.approx(gi.bounds)
    np.testing.assert_allclose(fi.x.reshape(-1, 3).mean(axis=1), x)
    Xf, Yf = np.meshgrid(fi.x, fi.y)
    inner = (Xf >= x[0]) & (Xf <= x[-1]) & (Yf >= y[0]) & (Yf <= y[-1])
    np.testing.assert_allclose(f.values[inner], (3.0 * Xf - 2.0 * Yf + 7.0)[inner], rtol=1e-12)
    # within half a coarse cell of the outer edges: the edge centre's value (no extrapolation)
    assert f.values[0, 0] == pytest.approx(g.values[0, 0])
    assert refine_grid(g, 1) is g
    for bad in (0, 9, 2.5, True):
        with pytest.raises(InputError, match="refine factor"):
            refine_grid(g, bad)


def test_refine_grid_keeps_a_periodic_longitude_grid_periodic():
    # a global lon/lat grid wraps: fine cells beside the seam interpolate across it (a field
    # periodic in longitude stays continuous there) and the finer grid is still periodic.
    from tsunamifocus.grid import GridInfo, make_grid, refine_grid

    lon = np.arange(0.0, 360.0, 30.0) + 15.0
    lat = np.array([-30.0, 0.0, 30.0])
    v = np.tile(np.cos(np.radians(lon)), (3, 1))
    f = refine_grid(make_grid(v, lon, lat, "EPSG:4326"), 2)
    info = GridInfo.from_dataarray(f)
    assert info.periodic_x and f.shape == (6, 24)
    # the first fine column (lon 7.5) lies between lon 345 and lon 15 across the seam
    expected = 0.25 * np.cos(np.radians(345.0)) + 0.75 * np.cos(np.radians(15.0))
    assert f.values[2, 0] == pytest.approx(expected)
