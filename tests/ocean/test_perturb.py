"""Tests of tsunamifocus.perturb: seeded bathymetry perturbations and member parameters."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from pyproj import Geod
from scipy import stats

from tsunamifocus.errors import InputError
from tsunamifocus.grid import GridInfo, make_grid
from tsunamifocus.ocean.perturb import MIN_DEPTH_FACTOR, draw_member_parameters, perturb_bathymetry


def _flat_grid(ny: int, nx: int, dx_m: float, depth: float = 1000.0):
    x = dx_m * np.arange(nx)
    y = dx_m * np.arange(ny)
    return make_grid(np.full((ny, nx), depth), x, y, "EPSG:32633")


def _autocorr(f: np.ndarray, lag: int, axis: int) -> float:
    """Sample autocorrelation of a zero-mean field at an integer lag along one axis."""
    a = np.take(f, np.arange(f.shape[axis] - lag), axis=axis)
    b = np.take(f, np.arange(lag, f.shape[axis]), axis=axis)
    return float(np.mean(a * b) / np.mean(f * f))


def _corr_length_from_acf(c: float, r: float) -> float:
    # invert the Gaussian correlation C(r) = exp(-r^2 / (2 l^2)) (randomfield.py docstring)
    return r / math.sqrt(-2.0 * math.log(c))


def test_rms_and_correlation_length_match_request():
    """Relative rms and correlation length of the perturbation agree with the requested ones."""
    dx = 1000.0
    rel_rms, corr_km = 0.04, 6.0
    depth = _flat_grid(200, 200, dx)
    est_l, rms = [], []
    for seed in range(4):
        out = perturb_bathymetry(depth, rel_rms, corr_km, seed)
        f = out.values / depth.values - 1.0
        rms.append(f.std())
        lag = int(corr_km * 1000 / dx)  # r = l: C = exp(-1/2) = 0.607
        for axis in (0, 1):
            est_l.append(_corr_length_from_acf(_autocorr(f - f.mean(), lag, axis), lag * dx))
    # all-sea grid: the generator rescales to the exact sample rms (randomfield.py), so exact
    assert np.allclose(rms, rel_rms, rtol=1e-9)
    # definition of the Gaussian correlation length (randomfield.py); 10 % sampling tolerance on
    # ~1000 correlation areas (common practice, no source)
    assert np.mean(est_l) == pytest.approx(corr_km * 1000.0, rel=0.10)


def test_lonlat_grid_uses_mid_latitude_metric_spacing():
    """On lon/lat the generator gets the east-west spacing at mid latitude (metres via pyproj)."""
    lon = np.arange(0.0, 8.0, 0.05)
    lat = np.arange(40.0, 46.0, 0.05)
    depth = make_grid(np.full((lat.size, lon.size), 3000.0), lon, lat, "EPSG:4326")
    out = perturb_bathymetry(depth, 0.03, 20.0, 3)
    dx_m, dy_m = out.attrs["perturbation_spacing_m"]
    geod = Geod(a=GridInfo.from_dataarray(depth).radius_m, b=GridInfo.from_dataarray(depth).radius_m)
    lat_mid = 0.5 * (lat[0] + lat[-1])
    # reference: spherical geodesic distances from pyproj.Geod; one degree step along a parallel is
    # not a geodesic, so compare with a tiny step scaled up (error << 1e-6)
    _, _, d_ew = geod.inv(0.0, lat_mid, 0.05e-3, lat_mid)
    _, _, d_ns = geod.inv(0.0, lat_mid, 0.0, lat_mid + 0.05)
    assert dx_m == pytest.approx(d_ew * 1000.0, rel=1e-6)
    assert dy_m == pytest.approx(d_ns, rel=1e-6)
    # north-south correlation length in metres matches the request (same estimator as above)
    f = out.values / depth.values - 1.0
    lag = 8
    l_est = _corr_length_from_acf(_autocorr(f - f.mean(), lag, 0), lag * d_ns)
    assert l_est == pytest.approx(20_000.0, rel=0.2)


def test_land_and_nodata_untouched_and_sea_stays_sea():
    rng = np.random.default_rng(0)
    vals = rng.uniform(10.0, 4000.0, size=(60, 70))
    vals[:, 50:] = -rng.uniform(1.0, 500.0, size=(60, 20))  # land to the east
    vals[5:9, 10:14] = np.nan
    vals[30, 30] = 0.0  # depth 0 is land by convention (grid.py)
    depth = make_grid(vals, 2000.0 * np.arange(70), 2000.0 * np.arange(60), "EPSG:32633")
    out = perturb_bathymetry(depth, 0.5, 10.0, 11)
    land = ~(vals > 0)
    # land, zero-depth and NaN cells exactly unchanged (grid convention, grid.py)
    assert np.array_equal(out.values[land], vals[land], equal_nan=True)
    sea = vals > 0
    assert np.all(out.values[sea] >= MIN_DEPTH_FACTOR * vals[sea])
    assert np.all(out.values[sea] > 0)
    assert not np.array_equal(out.values[sea], vals[sea])
    # coordinates and CRS are kept
    assert out.coords["spatial_ref"].attrs["crs_wkt"] == depth.coords["spatial_ref"].attrs["crs_wkt"]


def test_seeds_reproducible_and_distinct():
    depth = _flat_grid(40, 50, 1000.0)
    a = perturb_bathymetry(depth, 0.05, 5.0, 42)
    b = perturb_bathymetry(depth, 0.05, 5.0, 42)
    c = perturb_bathymetry(depth, 0.05, 5.0, 43)
    assert np.array_equal(a.values, b.values)
    assert not np.allclose(a.values, c.values)
    # numpy input gives the same numbers as the DataArray path
    n = perturb_bathymetry(depth.values, 0.05, 5.0, 42, spacing_m=(1000.0, 1000.0))
    assert np.array_equal(n, a.values)
    # zero rms is the identity
    assert np.array_equal(perturb_bathymetry(depth, 0.0, 5.0, 1).values, depth.values)


@pytest.mark.parametrize(
    "kwargs",
    [dict(rel_rms=0.6, corr_length_km=5.0), dict(rel_rms=-0.1, corr_length_km=5.0), dict(rel_rms=0.1, corr_length_km=0.0)],
)
def test_bad_perturbation_settings(kwargs):
    with pytest.raises(InputError, match="perturb_bathymetry"):
        perturb_bathymetry(_flat_grid(10, 10, 1000.0), seed=0, **kwargs)


def test_numpy_input_needs_spacing():
    with pytest.raises(InputError, match="spacing_m"):
        perturb_bathymetry(np.ones((5, 5)), 0.1, 1.0, 0)


SETTINGS = dict(
    bathy_rms=0.03, bathy_corr_km=25.0, strike_deg=5.0, dip_deg=2.0, along_km=30.0, across_km=10.0,
    magnitude=0.2, launch_jitter_deg=1.5,
)


def test_member_parameters_reproducible_and_order_independent():
    a = draw_member_parameters(SETTINGS, 10, 2026)
    b = draw_member_parameters(SETTINGS, 10, 2026)
    c = draw_member_parameters(SETTINGS, 4, 2026)
    assert a == b
    # member i does not depend on how many members are drawn (SeedSequence spawn keys)
    assert a[:4] == c
    assert draw_member_parameters(SETTINGS, 10, 2027) != a
    seeds = [m["seed"] for m in a] + [m["bathy_seed"] for m in a[1:]] + [m["ray_seed"] for m in a]
    assert len(set(seeds)) == len(seeds)
    json.dumps(a, allow_nan=False)  # plain, JSON-safe types for the manifest
    # the seed is numpy's SeedSequence child i (numpy.random.SeedSequence.spawn documentation)
    child = np.random.SeedSequence(2026).spawn(10)[3]
    assert a[3]["seed"] == int(child.generate_state(1, dtype=np.uint64)[0] >> np.uint64(1))


def test_base_member_and_ranges():
    ms = draw_member_parameters(SETTINGS, 2000, 7)
    m0 = ms[0]
    assert m0["base"] and m0["bathy_seed"] is None and m0["bathy_rms"] == 0.0
    for k in ("strike_delta_deg", "dip_delta_deg", "along_shift_km", "across_shift_km", "magnitude_delta",
              "launch_jitter_deg"):
        assert m0[k] == 0.0
    rest = ms[1:]
    pairs = {
        "strike_delta_deg": 5.0, "dip_delta_deg": 2.0, "along_shift_km": 30.0, "across_shift_km": 10.0,
        "magnitude_delta": 0.2, "launch_jitter_deg": 1.5,
    }
    for k, h in pairs.items():
        v = np.array([m[k] for m in rest])
        assert np.all(np.abs(v) <= h)
        # uniform on [-h, h]: Kolmogorov-Smirnov test against scipy.stats.uniform
        assert stats.kstest(v, stats.uniform(loc=-h, scale=2 * h).cdf).pvalue > 1e-3
    # draws of different quantities are independent (Pearson r of 2000 iid pairs ~ N(0, 1/sqrt(n)))
    r = np.corrcoef([m["strike_delta_deg"] for m in rest], [m["dip_delta_deg"] for m in rest])[0, 1]
    assert abs(r) < 4 / math.sqrt(len(rest))
    no_base = draw_member_parameters(SETTINGS, 3, 5, include_base=False)
    assert not no_base[0]["base"] and no_base[0]["strike_delta_deg"] != 0.0


def test_switching_one_range_on_keeps_the_others():
    a = draw_member_parameters({"strike_deg": 5.0}, 5, 9)
    b = draw_member_parameters({"strike_deg": 5.0, "dip_deg": 3.0}, 5, 9)
    assert [m["strike_delta_deg"] for m in a] == [m["strike_delta_deg"] for m in b]


def test_accepts_scenario_ensemble_config():
    from tsunamifocus.io.scenario import EnsembleConfig

    cfg = EnsembleConfig(members=3, seed=4, bathy_rms=0.02, strike_deg=3.0)
    ms = draw_member_parameters(cfg, cfg.members, cfg.seed)
    assert len(ms) == 3 and ms[1]["bathy_rms"] == 0.02


def test_bad_member_settings():
    with pytest.raises(InputError, match="did you mean 'strike_deg'"):
        draw_member_parameters({"strike_dg": 1.0}, 3, 0)
    with pytest.raises(InputError, match="half-range"):
        draw_member_parameters({"dip_deg": -1.0}, 3, 0)
    with pytest.raises(InputError, match="n_members"):
        draw_member_parameters({}, 0, 0)
    with pytest.raises(InputError, match="seed"):
        draw_member_parameters({}, 2, -1)
