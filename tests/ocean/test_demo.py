"""Tests of the invented demo region generator (tsunamifocus.demo)."""

from __future__ import annotations

import pathlib

import numpy as np
import pytest

from tsunamifocus.io.bathymetry import load_bathymetry
from tsunamifocus.ocean.smooth import smooth_bathymetry
from tsunamifocus.ocean.demo import DEMO_PLACES, DemoRegion, demo_to_lonlat, make_demo_bathymetry
from tsunamifocus.io.scenario import parse_scenario

REPO = pathlib.Path(__file__).resolve().parents[2]


def test_deterministic_and_realistic():
    a = make_demo_bathymetry()
    b = make_demo_bathymetry()
    np.testing.assert_array_equal(a.values, b.values)
    c = make_demo_bathymetry(DemoRegion(seed=1))
    assert not np.array_equal(a.values, c.values)
    x = a.x.values / 1000
    # abyssal plain 4-5 km deep (common practice, no source: typical ocean-basin depths)
    plain = a.sel(x=slice(180e3, 230e3), y=slice(400e3, 460e3)).values
    assert 4000 < np.median(plain) < 5200
    # a trench deeper than 6 km, a shelf shallower than 200 m, land east of the coast
    assert a.values[:, x < 160].max() > 6000
    assert 0 < np.median(a.sel(x=slice(600e3, 620e3)).values) < 200
    assert (a.values[:, -1] < 0).all()


def test_fluctuations_are_a_few_percent():
    d = make_demo_bathymetry()
    deep = d.where(d > 3500)
    rel = (deep - smooth_bathymetry(d, 40.0)) / smooth_bathymetry(d, 40.0)
    rms = float(np.sqrt(np.nanmean(rel.sel(x=slice(150e3, 450e3)).values ** 2)))
    assert 0.01 < rms < 0.08  # "a few percent" of depth


def test_sample_data_match_generator(tmp_path):
    # the committed sample grids are exactly what the generator writes
    from tsunamifocus.products.demo import write_demo_data

    fresh = write_demo_data(tmp_path)
    for kind, name in (("geotiff", "meridane_elevation.tif"), ("netcdf", "meridane_depth_lonlat.nc")):
        committed = load_bathymetry(REPO / "sample_scenarios" / "data" / name)
        new = load_bathymetry(fresh[kind])
        np.testing.assert_array_equal(committed.values, new.values)


def test_sample_scenario_matches_package_copy_and_parses():
    pkg = (REPO / "tsunamifocus" / "data" / "demo_scenario.toml").read_text()
    sample = (REPO / "sample_scenarios" / "meridane.toml").read_text()
    assert sample == pkg.replace('path = "meridane_elevation.tif"', 'path = "data/meridane_elevation.tif"')
    sc = parse_scenario(REPO / "sample_scenarios" / "meridane.toml")
    assert sc.bathymetry.path.is_file()
    # the points of interest are the invented places of demo.DEMO_PLACES
    for p in sc.points:
        x, y = DEMO_PLACES[p.name]
        lon, lat = demo_to_lonlat(x * 1000, y * 1000)
        assert p.lon == pytest.approx(lon, abs=1e-3) and p.lat == pytest.approx(lat, abs=1e-3)
