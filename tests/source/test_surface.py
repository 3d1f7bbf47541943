"""Tests of tsunamifocus.source.surface: a sea-surface raster in any CRS resampled onto the grid."""

from __future__ import annotations

import math

import numpy as np
import pytest
from pyproj import Transformer

from tsunamifocus.constants import GRAVITY, RHO_SEAWATER
from tsunamifocus.errors import SourceError
from tsunamifocus.grid import make_grid
from tsunamifocus.source.energy import potential_energy
from tsunamifocus.source.faults import PointSource
from tsunamifocus.source.surface import SurfaceSource, initial_surface, surface_on_grid, surface_width_km
from tsunamifocus.source.uplift import uplift_on_grid

UTM = "EPSG:32610"
X0, Y0 = 500e3, 4000e3


def utm_grid(half_km=300.0, cell_km=4.0, depth_m=4000.0):
    x = X0 + np.arange(-half_km * 1e3, half_km * 1e3 + 1.0, cell_km * 1e3)
    y = Y0 + np.arange(-half_km * 1e3, half_km * 1e3 + 1.0, cell_km * 1e3)
    return make_grid(np.full((y.size, x.size), depth_m), x, y, UTM)


def lonlat_gaussian(amp=2.0, sigma_km=40.0, cell_deg=0.01, lon_shift=0.0):
    """A Gaussian hump exp(-r^2/sigma^2) at the grid centre, on a lon/lat raster (local metres from pyproj)."""
    lon0, lat0 = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True).transform(X0, Y0)
    lon = lon0 + np.arange(-2.0, 2.0 + 1e-9, cell_deg)
    lat = lat0 + np.arange(-1.6, 1.6 + 1e-9, cell_deg)
    LON, LAT = np.meshgrid(lon, lat)
    E, N = Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(LON, LAT)
    r2 = (E - X0) ** 2 + (N - Y0) ** 2
    return make_grid(amp * np.exp(-r2 / (sigma_km * 1e3) ** 2), lon + lon_shift, lat, "EPSG:4326", name="eta")


def analytic_energy(amp, sigma_km):
    # E = 1/2 rho g integral(eta^2 dA), integral of A^2 exp(-2 r^2/s^2) over the plane = A^2 pi s^2 / 2
    return 0.5 * RHO_SEAWATER * GRAVITY * amp**2 * math.pi * (sigma_km * 1e3) ** 2 / 2.0


@pytest.fixture(scope="module")
def grid():
    return utm_grid()


def test_lonlat_raster_onto_projected_grid_keeps_the_energy(grid):
    eta = surface_on_grid(SurfaceSource(lonlat_gaussian(), name="hump"), grid)
    # analytic integral of a Gaussian (UTM scale factor 0.9996 near the central meridian: 0.1 % in area)
    assert potential_energy(eta, grid) == pytest.approx(analytic_energy(2.0, 40.0), rel=0.01)
    assert eta.attrs["source_kind"] == "surface" and eta.attrs["inside_fraction"] == pytest.approx(1.0)
    # the peak sits at the grid centre
    j, i = np.unravel_index(np.argmax(eta.values), eta.shape)
    assert abs(float(eta.x[i]) - X0) <= 4e3 and abs(float(eta.y[j]) - Y0) <= 4e3


def test_fine_raster_is_area_averaged(grid):
    # 0.005 deg (~0.5 km) raster onto a 4 km grid: block factor >= 2, energy of the smooth hump kept
    eta = surface_on_grid(SurfaceSource(lonlat_gaussian(cell_deg=0.005)), grid)
    assert eta.attrs["block_factor"] >= 2
    assert potential_energy(eta, grid) == pytest.approx(analytic_energy(2.0, 40.0), rel=0.01)


def test_longitudes_0_360_meet_a_grid_in_minus_180_180():
    # the same meridians written 0..360 (a raster convention) and -180..180 (the grid's)
    lon = np.arange(-130.0, -110.0, 0.05)
    lat = np.arange(30.0, 45.0, 0.05)
    depth = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326")
    ras = lonlat_gaussian(lon_shift=360.0)
    a = surface_on_grid(SurfaceSource(ras), depth)
    b = surface_on_grid(SurfaceSource(lonlat_gaussian()), depth)
    np.testing.assert_allclose(a.values, b.values, atol=1e-12)
    assert potential_energy(a, depth) == pytest.approx(analytic_energy(2.0, 40.0), rel=0.01)


def test_nodata_cells_are_no_displacement(grid):
    ras = lonlat_gaussian()
    v = ras.values.copy()
    v[:5, :5] = np.nan  # a corner of no data far from the hump
    ras = ras.copy(data=v)
    eta = surface_on_grid(SurfaceSource(ras), grid)
    assert np.isfinite(eta.values).all()


def test_raster_outside_or_cut_by_the_grid_is_refused():
    # cell edges at +/-32 km hold erf(32 sqrt(2) / 40)^2 = 79.3 % of the hump's eta^2 (sigma 40 km;
    # scipy.special.erf), counted here over the raster's cells
    small = utm_grid(half_km=30.0)
    with pytest.raises(SourceError, match=r"only 7[89]\.\d % of the raster's displacement .* lies inside the grid"):
        surface_on_grid(SurfaceSource(lonlat_gaussian(), name="cut"), small)
    far = make_grid(np.full((20, 20), 4000.0), 10.0 + 0.1 * np.arange(20), 0.1 * np.arange(20), "EPSG:4326")
    with pytest.raises(SourceError, match="wholly outside the grid"):
        surface_on_grid(SurfaceSource(lonlat_gaussian()), far)


def test_raster_on_land_only_is_refused(grid):
    land = grid.copy(data=np.full(grid.shape, -100.0))
    with pytest.raises(SourceError, match="falls on land or no-data cells"):
        surface_on_grid(SurfaceSource(lonlat_gaussian()), land)


def test_raster_of_a_point_source_reproduces_it(grid):
    # the package's own point-source hump, written on a lon/lat raster and read back as a surface
    ps = PointSource(x=X0, y=Y0, radius_km=60.0, amplitude_m=1.5, crs=UTM)
    direct = uplift_on_grid(ps, grid)
    lon0, lat0 = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True).transform(X0, Y0)
    lon = lon0 + np.arange(-1.5, 1.5 + 1e-9, 0.01)
    lat = lat0 + np.arange(-1.2, 1.2 + 1e-9, 0.01)
    LON, LAT = np.meshgrid(lon, lat)
    E, N = Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(LON, LAT)
    r = np.hypot(E - X0, N - Y0)
    # eta = A cos^2(pi r / 2R) inside R (the definition of the point source)
    hump = np.where(r < 60e3, 1.5 * np.cos(0.5 * np.pi * r / 60e3) ** 2, 0.0)
    eta = initial_surface(SurfaceSource(make_grid(hump, lon, lat, "EPSG:4326")), grid)
    assert np.abs(eta.values - direct.values).max() < 0.03 * 1.5
    assert potential_energy(eta, grid) == pytest.approx(potential_energy(direct, grid), rel=0.01)


def test_width_is_half_the_median_wavelength(grid):
    # for a Gaussian exp(-r^2/s^2) the power spectrum is exp(-k^2 s^2 / 2) (2-D Fourier transform of a
    # Gaussian); half its energy lies below k50 with exp(-k50^2 s^2 / 2) = 1/2, k50 = sqrt(2 ln 2) / s
    eta = surface_on_grid(SurfaceSource(lonlat_gaussian()), grid)
    k50 = math.sqrt(2.0 * math.log(2.0)) / 40e3
    assert surface_width_km(eta, grid) == pytest.approx(0.5 * 2 * math.pi / k50 / 1e3, rel=0.05)


def test_surface_source_needs_a_grid():
    with pytest.raises(SourceError, match="eta must be an xarray.DataArray"):
        SurfaceSource(np.zeros((3, 3)))
    with pytest.raises(SourceError, match="SurfaceSource"):
        initial_surface("not a source", utm_grid(half_km=20.0))
