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
    # (measured where no feature rises: between the trench and the fracture zone, 4907 m)
    plain = a.sel(x=slice(200e3, 260e3), y=slice(600e3, 700e3)).values
    assert 3800 < np.median(plain) < 5200
    # a trench deeper than 6 km, a shelf shallower than 200 m, land east of the coast
    assert a.values[:, x < 200].max() > 6000
    assert 0 < np.median(a.sel(x=slice(790e3, 800e3), y=slice(450e3, 800e3)).values) < 200
    assert (a.values[200:300, -1] < 0).all()


def test_features_are_at_the_scales_a_tsunami_sees():
    # The focusing features are 100-400 km across: the relief's power is dominated by scales
    # >= 50 km (a red spectrum from 80 to 500 km), not by one short correlation length. Fraction of
    # the variance of the offshore relief left after a Gaussian low-pass, measured on 2026-12-03:
    # 0.87 at 25 km, 0.65 at 50 km (the previous design, with a steep plateau rim and a 12 km
    # fracture-zone trough: 0.72 at 25 km). Asserted > 0.8 and > 0.55 (common practice, no
    # source: the wavelength of a 15-minute wave in 4 km of water is ~180 km, and ray theory wants
    # the sea floor smooth over a wavelength).
    d = make_demo_bathymetry()
    box = d.sel(x=slice(250e3, 650e3), y=slice(150e3, 1100e3))
    v = box.values - box.values.mean()
    lp25 = smooth_bathymetry(box, 25.0).values - box.values.mean()
    lp50 = smooth_bathymetry(box, 50.0).values - box.values.mean()
    assert np.var(lp25) / np.var(v) > 0.8
    assert np.var(lp50) / np.var(v) > 0.55
    # the coast of interest lies far from the north and south grid edges: the shoreline reaches
    # the east edge only where it has turned away, > 60 km from the corners
    land_on_east_edge = np.flatnonzero(d.values[:, -1] < 0)
    assert land_on_east_edge.min() * 3 > 60 and (d.shape[0] - land_on_east_edge.max()) * 3 > 60


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
