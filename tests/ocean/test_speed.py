"""Tests of tsunamifocus.speed: long-wave speed, linear dispersion and the C2 speed interpolant."""

from __future__ import annotations

import math

import numpy as np
import pytest
from pyproj import Geod
from scipy import ndimage

from tsunamifocus.constants import EARTH_RADIUS_M, GRAVITY
from tsunamifocus.errors import InputError
from tsunamifocus.grid import make_grid
from tsunamifocus.ocean.randomfield import gaussian_random_field
from tsunamifocus.propagation.speedfield import SpeedField
from tsunamifocus.ocean.speed import group_speed, phase_speed, wave_speed, wavenumber


def _plane_grid(h):
    ny, nx = h.shape
    return make_grid(h, np.arange(nx) * 1000.0, np.arange(ny) * 1000.0, "EPSG:3857")


def test_wave_speed_4km_ocean():
    # Berry (2007), Proc. R. Soc. A 463: long-wave speed "approx. 700 km/h for H = 4 km";
    # c = sqrt(g h) = sqrt(9.81 * 4000) = 198.1 m/s = 713 km/h.
    d = _plane_grid(np.full((3, 4), 4000.0))
    c = wave_speed(d)
    assert float(c[1, 1]) == pytest.approx(math.sqrt(9.81 * 4000.0), rel=1e-12)
    assert float(c[1, 1]) == pytest.approx(198.1, abs=0.05)
    assert 680.0 < float(c[1, 1]) * 3.6 < 730.0


def test_wave_speed_land_nan_and_clamp():
    h = np.array([[4000.0, 0.0, -5.0], [np.nan, 0.5, 100.0]])
    c = wave_speed(_plane_grid(h), min_depth=1.0).values
    # land (<= 0) and no-data -> NaN (grid convention in grid.py); 0 < h < min_depth clamped
    assert np.isnan(c[0, 1]) and np.isnan(c[0, 2]) and np.isnan(c[1, 0])
    assert c[1, 1] == pytest.approx(math.sqrt(GRAVITY * 1.0))
    assert c[1, 2] == pytest.approx(math.sqrt(GRAVITY * 100.0))
    with pytest.raises(InputError, match="min_depth"):
        wave_speed(_plane_grid(h), min_depth=0.0)


def test_dispersion_limits():
    # Linear (Airy) wave theory: omega^2 = g k tanh(k h); phase speed -> sqrt(g h) for kh -> 0,
    # -> g / omega for kh -> inf; group speed -> sqrt(g h) and -> g / (2 omega) respectively.
    g = GRAVITY
    T = 3600.0  # tsunami-like period, 4 km depth: kh ~ 0.035
    h = 4000.0
    assert phase_speed(h, T) == pytest.approx(math.sqrt(g * h), rel=5e-4)
    hs = 1.0  # kh ~ 1e-3
    assert phase_speed(hs, T) == pytest.approx(math.sqrt(g * hs), rel=1e-6)
    assert group_speed(hs, T) == pytest.approx(math.sqrt(g * hs), rel=1e-6)
    Td = 4.0  # deep water: kh ~ 1260
    w = 2 * math.pi / Td
    assert phase_speed(5000.0, Td) == pytest.approx(g / w, rel=1e-12)
    assert group_speed(5000.0, Td) == pytest.approx(g / (2 * w), rel=1e-12)
    # dispersion makes waves slower than the long-wave speed at every finite kh
    hh = np.geomspace(1.0, 8000.0, 50)
    assert np.all(phase_speed(hh, 300.0) < np.sqrt(g * hh))


def test_dispersion_residual_and_table_value():
    # residual of the dispersion relation itself over kh from 1e-5 to 1e3 (linear wave theory)
    h = np.geomspace(0.01, 1e4, 200)
    for T in (2.0, 10.0, 600.0, 7200.0):
        k = wavenumber(h, T)
        w = 2 * math.pi / T
        res = (GRAVITY * k * np.tanh(k * h) - w * w) / (w * w)
        assert np.max(np.abs(res)) < 1e-12
    # T = 10 s, h = 10 m: wavelength ~ 92.3 m (tables of linear wave theory; value from memory)
    L = 2 * math.pi / wavenumber(10.0, 10.0)
    assert L == pytest.approx(92.3, abs=0.3)
    assert np.isnan(wavenumber(np.array([-1.0, np.nan]), 10.0)).all()
    with pytest.raises(InputError, match="period_s"):
        wavenumber(10.0, -1.0)


def test_interpolant_matches_scipy_bspline():
    # Reference library: scipy.ndimage.map_coordinates(order=3, mode="mirror") is the same
    # interpolating cubic B-spline (prefiltered) on the same boundary condition.
    rng = np.random.default_rng(3)
    h = 3000.0 * (1 + gaussian_random_field((40, 50), 1000.0, 4000.0, 0.2, seed=5))
    d = _plane_grid(h)
    fld = SpeedField(d)
    u = rng.uniform(-0.4, 49.4, 500)
    v = rng.uniform(-0.4, 39.4, 500)
    ours = fld.evaluate(u * 1000.0, v * 1000.0)["c"]
    ref = ndimage.map_coordinates(fld.c_nodes, [v, u], order=3, mode="mirror")
    np.testing.assert_allclose(ours, ref, rtol=1e-12)
    # interpolation property: node values are reproduced
    xx, yy = np.meshgrid(d.x.values, d.y.values)
    np.testing.assert_allclose(fld.evaluate(xx, yy)["c"], np.sqrt(GRAVITY * h), rtol=1e-11)


def test_derivatives_consistent_with_interpolant_plane():
    # analytic B-spline derivatives vs central finite differences of the interpolant itself
    # (consistency of c, c_x, c_y, c_xx, c_xy, c_yy; common practice, no source)
    h = 3000.0 * (1 + gaussian_random_field((40, 50), 1000.0, 5000.0, 0.2, seed=7))
    fld = SpeedField(_plane_grid(h))
    rng = np.random.default_rng(1)
    x = rng.uniform(2e3, 46e3, 200)
    y = rng.uniform(2e3, 36e3, 200)
    e = 1.0  # m
    ev = fld.evaluate
    f0 = ev(x, y)
    cx = (ev(x + e, y)["c"] - ev(x - e, y)["c"]) / (2 * e)
    cy = (ev(x, y + e)["c"] - ev(x, y - e)["c"]) / (2 * e)
    cxx = (ev(x + e, y)["c_x"] - ev(x - e, y)["c_x"]) / (2 * e)
    cxy = (ev(x, y + e)["c_x"] - ev(x, y - e)["c_x"]) / (2 * e)
    cyy = (ev(x, y + e)["c_y"] - ev(x, y - e)["c_y"]) / (2 * e)
    scale1 = np.abs(f0["c_x"]).max()
    scale2 = np.abs(f0["c_xx"]).max()
    assert np.max(np.abs(cx - f0["c_x"])) < 1e-6 * scale1
    assert np.max(np.abs(cy - f0["c_y"])) < 1e-6 * scale1
    assert np.max(np.abs(cxx - f0["c_xx"])) < 1e-4 * scale2
    assert np.max(np.abs(cxy - f0["c_xy"])) < 1e-4 * scale2
    assert np.max(np.abs(cyy - f0["c_yy"])) < 1e-4 * scale2
    ds = fld.derivatives_on_grid()
    assert set(ds.data_vars) == {"c", "c_x", "c_y", "c_xx", "c_xy", "c_yy"}


def test_derivatives_on_sphere_along_geodesics():
    # On the sphere the Hessian must be the covariant one: d2c/ds2 along a great circle through
    # a point in unit direction t equals t.H.t, and dc/ds = t.grad c. Great-circle points from
    # pyproj.Geod on a sphere of the same radius (reference library).
    lon = np.arange(100.0, 140.0, 0.5)
    lat = np.arange(20.0, 60.0, 0.5)
    h = 3000.0 * (1 + gaussian_random_field((lat.size, lon.size), 50e3, 300e3, 0.3, seed=2))
    d = make_grid(h, lon, lat, "EPSG:4326")
    fld = SpeedField(d)
    geod = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)
    rng = np.random.default_rng(4)
    p_lon = rng.uniform(105, 134, 40)
    p_lat = rng.uniform(25, 55, 40)
    f0 = fld.evaluate(p_lon, p_lat)
    ds = 200.0  # m
    for az in (0.0, 90.0, 45.0, 130.0):
        lo1, la1, _ = geod.fwd(p_lon, p_lat, np.full(40, az), np.full(40, ds))
        lo2, la2, _ = geod.fwd(p_lon, p_lat, np.full(40, az + 180.0), np.full(40, ds))
        c1 = fld.evaluate(lo1, la1)["c"]
        c2 = fld.evaluate(lo2, la2)["c"]
        te, tn = math.sin(math.radians(az)), math.cos(math.radians(az))
        d1 = (c1 - c2) / (2 * ds)
        d2 = (c1 - 2 * f0["c"] + c2) / ds**2
        g_ref = te * f0["c_x"] + tn * f0["c_y"]
        h_ref = te * te * f0["c_xx"] + 2 * te * tn * f0["c_xy"] + tn * tn * f0["c_yy"]
        np.testing.assert_allclose(d1, g_ref, rtol=0, atol=1e-6 * np.abs(f0["c_x"]).max())
        np.testing.assert_allclose(d2, h_ref, rtol=0, atol=2e-3 * np.abs(f0["c_xx"]).max())


def test_periodic_interpolant_across_seam():
    # a global grid wraps: the interpolant is smooth across the seam and 360-periodic
    # (grid convention in grid.py: lon_periodic = 1, no duplicated seam column)
    lon = np.arange(0.0, 360.0, 2.0)
    lat = np.arange(-60.0, 61.0, 2.0)
    base = gaussian_random_field((lat.size, lon.size), 100e3, 600e3, 0.2, seed=9)
    d = make_grid(4000.0 * (1 + base), lon, lat, "EPSG:4326")
    assert d.attrs["lon_periodic"] == 1
    fld = SpeedField(d)
    la = np.linspace(-40, 40, 9)
    a = fld.evaluate(np.full(9, 359.0 - 1e-9), la)
    b = fld.evaluate(np.full(9, -1.0 - 1e-9), la)
    for k in a:
        np.testing.assert_allclose(a[k], b[k], rtol=1e-9, atol=1e-18)
    # continuity of value and slope through the seam column (lon = 359 -> 360 = 0 -> 1)
    eps = 1e-10
    left = fld.evaluate(np.full(9, 360.0 - eps), la)
    right = fld.evaluate(np.full(9, 0.0 + eps), la)
    np.testing.assert_allclose(left["c"], right["c"], rtol=1e-8)
    np.testing.assert_allclose(left["c_x"], right["c_x"], rtol=1e-5, atol=1e-12)
    # reproduces node values on the seam column (interpolation property)
    np.testing.assert_allclose(fld.evaluate(np.zeros(lat.size), lat)["c"], fld.c_nodes[:, 0], rtol=1e-11)
