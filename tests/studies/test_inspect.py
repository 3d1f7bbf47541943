"""Tests of tsunamifocus.studies.inspect (what ``tsunamifocus inspect`` reports).

Outside references: long-wave speed c = sqrt(g h) (Lamb 1932, Hydrodynamics, section 170);
the analytic gradient of c on a linear depth ramp; cell sizes from pyproj.Geod on the sphere.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from pyproj import Geod

from tsunamifocus.constants import EARTH_RADIUS_M, GRAVITY
from tsunamifocus.grid import make_grid
from tsunamifocus.studies.inspect import RAY_GRADIENT_LIMIT, RESOLVED_CELLS_PER_WAVELENGTH, summarize_grid


def _ramp(nx=200, ny=50, dx=2000.0, h0=1000.0, slope=0.01):
    x = dx * np.arange(nx)
    y = dx * np.arange(ny)
    h = np.broadcast_to(h0 + slope * x, (ny, nx)).copy()
    h[:, :5] = -20.0  # a strip of land
    return make_grid(h, x, y, "EPSG:32633"), x, h


def test_speeds_and_period_limits_on_a_linear_ramp():
    """Speeds are sqrt(g h); the ray-validity period uses |grad c| / c = slope / (2 h) analytically."""
    depth, x, h = _ramp()
    s = summarize_grid(depth)
    sea = h[h > 0]
    assert s["speed_median_ms"] == pytest.approx(math.sqrt(GRAVITY * np.median(sea)), rel=1e-12)
    assert s["speed_max_ms"] == pytest.approx(math.sqrt(GRAVITY * sea.max()), rel=1e-12)
    assert s["land_fraction"] == pytest.approx(5 / 200)
    c_med = math.sqrt(GRAVITY * np.median(sea))
    assert s["shortest_period_s"] == pytest.approx(RESOLVED_CELLS_PER_WAVELENGTH * 2000.0 / c_med, rel=1e-12)
    # d ln c / dx = slope / (2 h); the column beside the land has no centred gradient, so the median
    # runs over the columns from the 7th on
    g50 = float(np.median(0.01 / (2.0 * h[:, 6:])))
    assert s["longest_ray_period_s"] == pytest.approx(RAY_GRADIENT_LIMIT / (c_med * g50), rel=2e-3)


def test_geographic_spacing_in_metres_matches_pyproj():
    """On lon/lat the reported spacing in metres is the parallel arc at mid latitude and the meridian arc."""
    lon = 150.0 + 0.2 * np.arange(40)
    lat = -40.0 + 0.2 * np.arange(30)
    depth = make_grid(np.full((30, 40), 4000.0), lon, lat, "EPSG:4326")
    s = summarize_grid(depth)
    sphere = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)
    lat_mid = lat.mean()
    _, _, dx = sphere.inv(150.0, lat_mid, 150.2, lat_mid)
    _, _, dy = sphere.inv(150.0, lat_mid, 150.0, lat_mid + 0.2)
    assert s["spacing_m"][0] == pytest.approx(dx, rel=1e-6)
    assert s["spacing_m"][1] == pytest.approx(dy, rel=1e-9)
    assert s["geographic"] is True and s["shape"] == [30, 40]
    # constant depth: no speed gradient, so no upper period limit
    assert s["longest_ray_period_s"] == math.inf
