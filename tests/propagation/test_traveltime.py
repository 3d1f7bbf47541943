"""Validation tests of the first-arrival (eikonal) solver, tsunamifocus.propagation.traveltime.

Each check names its outside reference beside it. The synthetic grids are small; the real-grid
checks coarsen the shared 0.1-degree relief grid once per module (module-scoped fixtures).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from pyproj import Geod

from tsunamifocus.constants import EARTH_RADIUS_M, GRAVITY
from tsunamifocus.errors import InputError, SourceError
from tsunamifocus.grid import make_grid
from tsunamifocus.propagation.traveltime import (
    first_arrival_times,
    isochrone_levels,
    isochrone_lines,
    sample_at_sea,
)

GEOD = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)
H0 = 4000.0
C0 = math.sqrt(GRAVITY * H0)


def _at(tt, lon, lat):
    v, d, _, _ = sample_at_sea(tt, np.array([lon]), np.array([lat]), 1.0e5)
    return float(v[0])


# ------------------------------------------------------------------------------ the sphere
@pytest.fixture(scope="module")
def sphere_times():
    """Constant 4,000 m ocean on a global 0.25-degree node grid (rows on both poles)."""
    lon = np.arange(0.0, 360.0, 0.25)
    lat = np.arange(-90.0, 90.001, 0.25)
    d = make_grid(np.full((lat.size, lon.size), H0), lon, lat, "EPSG:4326")
    assert d.attrs["lon_periodic"] == 1
    return first_arrival_times(d, point=(359.5, 30.0)).travel_time_s


@pytest.mark.parametrize("lon,lat", [
    (3.0, 30.0),      # 340 km east, across the 0/360 seam (beyond the exact start disc)
    (40.0, 30.0),     # along a parallel
    (359.5, 75.0),    # due north
    (100.0, -20.0),   # far, south-east
    (179.5, 70.0),    # across the north pole (the great circle runs over it)
    (200.0, -50.0),   # near the antipode side
])
def test_constant_depth_sphere_equals_great_circle_time(sphere_times, lon, lat):
    # reference: great-circle distance on the sphere (pyproj.Geod) / c, c = sqrt(g h)
    dist = GEOD.inv(359.5, 30.0, lon, lat)[2]
    t = _at(sphere_times, lon, lat)
    assert t == pytest.approx(dist / C0, rel=0.005), (lon, lat, t, dist / C0)


def test_cross_pole_neighbour_on_cell_centred_rows():
    # rows at +-89.75 (no row on the pole): the front crosses the pole through the row's opposite cell.
    # reference: pyproj.Geod great circle over the pole / c
    lon = np.arange(0.0, 360.0, 0.5)
    lat = np.arange(-89.75, 90.0, 0.5)
    d = make_grid(np.full((lat.size, lon.size), H0), lon, lat, "EPSG:4326")
    tt = first_arrival_times(d, point=(10.0, 80.25)).travel_time_s
    for lo, la in [(190.0, 80.25), (190.0, 60.25), (100.0, 85.25)]:
        dist = GEOD.inv(10.0, 80.25, lo, la)[2]
        assert _at(tt, lo, la) == pytest.approx(dist / C0, rel=0.005), (lo, la)


# ------------------------------------------------------------------------------ the plane
def _plane(h, dx):
    ny, nx = h.shape
    return make_grid(h, (np.arange(nx) - nx // 2) * dx, (np.arange(ny) - ny // 2) * dx, "EPSG:3857")


def test_constant_depth_plane_equals_straight_line_time():
    # reference: analytic, t = |x - x0| / c on a constant-depth plane
    dx = 2000.0
    d = _plane(np.full((201, 301), H0), dx)
    tt = first_arrival_times(d, point=(-100e3, 10e3), point_crs=None).travel_time_s
    X, Y = np.meshgrid(d.x.values, d.y.values)
    exact = np.hypot(X + 100e3, Y - 10e3) / C0
    far = exact > 40 * dx / C0  # beyond 40 cells of the point
    rel = np.abs(tt.values[far] - exact[far]) / exact[far]
    assert rel.max() < 0.005


def test_circular_island_shadow_is_filled_with_the_path_around_it():
    """A round island in a constant ocean; the first arrival behind it wraps around the shore."""
    dx = 1000.0
    n = 401
    d = _plane(np.full((n, n), H0), dx)
    X, Y = np.meshgrid(d.x.values, d.y.values)
    a = 40e3
    depth = np.where(np.hypot(X, Y) <= a, -10.0, H0)
    d = d.copy(data=depth)
    xs, xt = -120e3, 150e3
    tt = first_arrival_times(d, point=(xs, 0.0), point_crs=None).travel_time_s
    sea = depth > 20.0
    # Huygens: every sea cell is reached, the shadow behind the island included
    assert np.isfinite(tt.values[sea]).all()
    # reference (analytic geometry): the shortest path from S to T around a disc of radius a, S and T
    # on opposite sides (angle pi): two tangents plus the arc between the tangent points,
    # L = sqrt(d1^2 - a^2) + sqrt(d2^2 - a^2) + a (pi - acos(a/d1) - acos(a/d2))
    d1, d2 = abs(xs), xt
    L = math.sqrt(d1**2 - a**2) + math.sqrt(d2**2 - a**2) + a * (math.pi - math.acos(a / d1) - math.acos(a / d2))
    t = float(tt.sel(x=xt, y=0.0, method="nearest"))
    assert t == pytest.approx(L / C0, rel=0.01)
    assert t > (d1 + d2) / C0 * 1.01  # later than the straight line through the island


def test_uplift_front_starts_at_zero_and_grows_outward():
    # reference: analytic, from a disc-shaped front of radius r0 the time is (r - r0) / c
    dx = 2000.0
    d = _plane(np.full((151, 151), H0), dx)
    X, Y = np.meshgrid(d.x.values, d.y.values)
    r = np.hypot(X, Y)
    eta = d.copy(data=np.where(r <= 30e3, 1.0, 0.0))
    tt = first_arrival_times(d, uplift=eta).travel_time_s.values
    assert (tt[r <= 30e3] == 0).all()
    far = r > 60e3
    exact = (r[far] - 30e3) / C0
    assert np.abs(tt[far] - exact).max() < 1.5 * dx / C0  # within the front's staircase (one cell)


def test_shallow_water_is_a_barrier_and_bad_input_is_refused():
    # common practice, no source: water shallower than the stop isobath is not crossed
    d = _plane(np.full((41, 81), H0), 1000.0)
    v = d.values.copy()
    v[:, 40] = 10.0  # a shallow wall across the grid
    d = d.copy(data=v)
    tt = first_arrival_times(d, point=(-20e3, 0.0), point_crs=None, stop_depth_m=20.0).travel_time_s.values
    assert np.isfinite(tt[:, :40]).all() and np.isnan(tt[:, 40:]).all()
    with pytest.raises(SourceError, match="exactly one"):
        first_arrival_times(d)
    with pytest.raises(SourceError, match="outside the grid"):
        first_arrival_times(d, point=(1e9, 0.0), point_crs=None)
    with pytest.raises(InputError, match="front_fraction"):
        first_arrival_times(d, uplift=d, front_fraction=2.0)


def test_isochrones_are_labelled_hourly_and_finer():
    # reference: analytic, on a constant-depth plane the isochrone of time t is a circle of radius c t
    dx = 5000.0
    d = _plane(np.full((401, 401), H0), dx)
    tt = first_arrival_times(d, point=(0.0, 0.0), point_crs=None).travel_time_s
    lv = isochrone_levels(tt, 30.0)
    # the farthest corner is reached after ~119 min: one hourly line and the half hours around it
    assert lv == [(30.0, False), (60.0, True), (90.0, False)]
    iso = isochrone_lines(tt, 30.0)
    row = iso.set_index("minutes").loc[60.0]
    assert row["label"] == "1 h" and bool(row["hourly"])
    assert iso.set_index("minutes").loc[90.0, "label"] == "1 h 30 min"
    xy = np.vstack([np.asarray(g.coords) for g in row["geometry"].geoms])
    assert np.hypot(xy[:, 0], xy[:, 1]) == pytest.approx(C0 * 3600.0, rel=0.005)
    with pytest.raises(InputError, match="isochrone step"):
        isochrone_levels(tt, -5.0)


# ------------------------------------------------------------------------------ the real grid
def _mercator_reference(d, src_lon, src_lat, stop=20.0):
    """Independent first arrivals: scikit-fmm (general-purpose fast marching) on a Mercator grid.

    Mercator is conformal, ds = R cos(lat) sqrt(dX^2 + dY^2) in projected radians, so the eikonal on
    the sphere becomes a plane eikonal with speed c / (R cos lat) - exact for the sphere.
    Returns a function (lon, lat) -> time [s], bilinear in the Mercator grid.
    """
    import skfmm
    from scipy.interpolate import RegularGridInterpolator

    lon = d.lon.values
    lat = d.lat.values
    ymerc = np.log(np.tan(np.pi / 4 + np.radians(lat) / 2))
    yy = np.linspace(ymerc[0], ymerc[-1], 2 * len(lat))
    lat_of_yy = np.clip(np.degrees(2 * np.arctan(np.exp(yy)) - np.pi / 2), lat[0], lat[-1])
    v = np.where(np.isfinite(d.values), d.values, -1.0)
    f = RegularGridInterpolator((lat, lon), v, method="nearest")
    LAT, LON = np.meshgrid(lat_of_yy, lon, indexing="ij")
    h = f(np.stack([LAT.ravel(), LON.ravel()], -1)).reshape(LAT.shape)
    sea = h > stop
    speed = np.sqrt(GRAVITY * np.where(sea, h, 1.0)) / (EARTH_RADIUS_M * np.cos(np.radians(LAT)))
    dx = math.radians(lon[1] - lon[0])
    dy = yy[1] - yy[0]
    j0 = int(np.argmin(abs(lat_of_yy - src_lat)))
    i0 = int(np.argmin(abs(lon - src_lon)))
    phi = np.ones_like(h)
    phi[j0, i0] = -1.0
    phi = np.ma.MaskedArray(phi, mask=~sea)
    T = np.ma.filled(skfmm.travel_time(phi, np.where(sea, speed, 1e-9), dx=[dy, dx], order=2), np.nan)
    def at(lo, la):
        # bilinear over the finite corners (a coastal cell may touch a barrier corner)
        fy = np.interp(la, lat_of_yy, np.arange(lat_of_yy.size))
        fx = np.interp(lo, lon, np.arange(lon.size))
        j, i = min(int(fy), lat_of_yy.size - 2), min(int(fx), lon.size - 2)
        ty, tx = fy - j, fx - i
        w = np.array([(1 - ty) * (1 - tx), (1 - ty) * tx, ty * (1 - tx), ty * tx])
        v = np.array([T[j, i], T[j, i + 1], T[j + 1, i], T[j + 1, i + 1]])
        ok = np.isfinite(v)
        return float((w[ok] * v[ok]).sum() / w[ok].sum()) if ok.any() else math.nan

    return at


@pytest.fixture(scope="module")
def pacific(etopo_path):
    from tsunamifocus.grid import crop_bathymetry, resample_bathymetry
    from tsunamifocus.io.bathymetry import load_bathymetry

    d = load_bathymetry(etopo_path, values="elevation")
    d = crop_bathymetry(resample_bathymetry(d, 25.0), (120.0, -60.0, 290.0, 62.0))
    return d


@pytest.mark.realdata
def test_real_pacific_matches_scikit_fmm_mercator_reference(pacific):
    d = pacific
    src = (205.0, -5.0)  # open central Pacific
    tt = first_arrival_times(d, point=src).travel_time_s
    ref = _mercator_reference(d, *src)
    # open ocean and coastal places (the coastal ones read at their nearest sea cell deeper than 20 m)
    places = [(200.0, 10.0), (180.0, -20.0), (160.0, 30.0), (215.0, -45.0), (250.0, -30.0),
              (204.93, 19.73),   # island harbour (Hawaii), coastal
              (210.43, -17.53),  # island harbour (Tahiti), coastal
              (235.8, 41.75),    # west coast of North America, coastal
              (142.0, 38.3)]     # north-east Japan, coastal
    for lo, la in places:
        v, dist, ci, cj = sample_at_sea(tt, np.array([lo]), np.array([la]), 60e3)
        assert np.isfinite(v[0]), (lo, la)
        xo, yo = float(d.lon.values[ci[0]]), float(d.lat.values[cj[0]])
        te = ref(xo, yo)
        # reference: scikit-fmm on the Mercator grid (independent library and projection), within 2 %
        assert v[0] == pytest.approx(te, rel=0.02), (lo, la, v[0] / 3600, te / 3600)


# Historical trans-ocean crossings: observed first arrivals at tide gauges. Values from memory
# (event catalogues and post-event reports); long-wave times run slightly early (about 1-2 %)
# beyond 10,000 km (Watada et al. 2014, JGR Oceans 119), hence the 5 % band.
_EVENTS = {
    # Tohoku 2011 (Mw 9.0, 05:46 UTC): main rupture along the Japan Trench (points north to south:
    # the interface dips west, to the right of the trace; the Chilean traces run south to north)
    "tohoku-2011": dict(trace=((144.4, 39.6), (142.6, 36.0)), dip=12.0, width=175.0, mw=9.0, top=5.0),
    # Chile 1960 (Mw 9.5, 19:11 UTC): about 900 km along the trench off south-central Chile
    "chile-1960": dict(trace=((-75.0, -45.5), (-73.6, -37.5)), dip=20.0, width=200.0, mw=9.5, top=5.0),
    # Maule 2010 (Mw 8.8, 06:34 UTC): about 450 km off central Chile
    "maule-2010": dict(trace=((-74.3, -38.3), (-72.4, -34.0)), dip=18.0, width=150.0, mw=8.8, top=5.0),
}
_OBSERVED = [
    # event, place, lon, lat, observed first arrival [h] (from memory)
    ("tohoku-2011", "Hilo, Hawaii", -155.06, 19.73, 7.4),
    ("tohoku-2011", "Crescent City, California", -124.19, 41.74, 9.6),
    ("chile-1960", "Hilo, Hawaii", -155.06, 19.73, 14.9),
    ("chile-1960", "Hakodate, Japan", 140.72, 41.78, 22.5),
    ("maule-2010", "Hilo, Hawaii", -155.06, 19.73, 14.5),
]


@pytest.fixture(scope="module")
def world(etopo_path):
    from tsunamifocus.grid import resample_bathymetry
    from tsunamifocus.io.bathymetry import load_bathymetry

    return resample_bathymetry(load_bathymetry(etopo_path, values="elevation"), 20.0)


@pytest.fixture(scope="module")
def event_times(world):
    from tsunamifocus.source.faults import FaultSegment, Rupture
    from tsunamifocus.source.uplift import uplift_on_grid

    out = {}
    for name, e in _EVENTS.items():
        lo1, la1 = e["trace"][0]
        lo2, la2 = e["trace"][1]
        seg = FaultSegment(trace=((lo1 % 360, la1), (lo2 % 360, la2)), top_depth_km=e["top"], dip_deg=e["dip"],
                           width_km=e["width"], rake_deg=90.0, magnitude=e["mw"], name=name)
        eta = uplift_on_grid(Rupture([seg], name=name), world)
        out[name] = first_arrival_times(world, uplift=eta).travel_time_s
    return out


@pytest.mark.realdata
@pytest.mark.parametrize("event,place,lon,lat,observed_h", _OBSERVED)
def test_historical_trans_ocean_first_arrivals(event_times, event, place, lon, lat, observed_h):
    tt = event_times[event]
    v, dist, _, _ = sample_at_sea(tt, np.array([lon]), np.array([lat]), 60e3)
    assert np.isfinite(v[0]), place
    # reference: observed first arrival at the tide gauge (from memory), within 5 %
    assert v[0] / 3600.0 == pytest.approx(observed_h, rel=0.05), (event, place, v[0] / 3600.0)
