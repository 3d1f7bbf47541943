"""Tests of tsunamifocus.studies.settings: the settings a run chooses when the scenario leaves them out.

References: a segment shorter than about two grid cells cannot be told apart by the bathymetry
(common practice, no source); spherical cell sizes from pyproj.Geod (reference library).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from pyproj import Geod

from tsunamifocus.errors import ResolutionWarning
from tsunamifocus.grid import make_grid
from tsunamifocus.io.scenario import parse_scenario
from tsunamifocus.studies.run import _segments_for
from tsunamifocus.studies.settings import DEFAULT_RAY_COUNT, Choice, choose_ray_count, choose_segment_km


def _tenth_degree_grid():
    """A 0.1-degree lon/lat grid (0..360 numbers), ocean with a straight coast at 235.5 E."""
    lon = np.arange(225.0, 240.0 + 1e-9, 0.1)
    lat = np.arange(30.0, 50.0 + 1e-9, 0.1)
    h = np.where(lon[None, :] < 235.5, 3000.0, -100.0) * np.ones((lat.size, 1))
    return make_grid(h, lon, lat, "EPSG:4326")


def test_default_segment_length_is_two_cells_and_does_not_warn(tmp_path):
    d = _tenth_degree_grid()
    c = choose_segment_km(d)
    cell_km = Geod(a=6371008.8, b=6371008.8).inv(0.0, 40.0, 0.0, 40.1)[2] / 1000.0  # 0.1 deg of latitude
    assert c.origin == "default" and c.value >= 2 * cell_km * 0.999 and c.value < 2 * cell_km + 0.2
    assert "2 grid cells of 11.1 km" in c.describe("km")
    # the scenario without segment_km: the run's segmentation raises no ResolutionWarning on an 11 km
    # grid (a fixed 10 km default used to)
    p = tmp_path / "s.toml"
    p.write_text('[bathymetry]\npath = "g.nc"\n[[source]]\nname = "p"\nkind = "point"\nlon = 230\nlat = 40\n')
    sc = parse_scenario(p)
    assert sc.coast.segment_km is None
    with warnings.catch_warnings():
        warnings.simplefilter("error", ResolutionWarning)
        seg = _segments_for(d, sc)
    assert seg["length_m"].min() > 2 * cell_km * 1000.0 * 0.66  # pieces within a factor 1.5 of the target


def test_fine_grid_keeps_the_10_km_floor_and_ray_choice_text():
    x = np.arange(0.0, 200e3, 1000.0)
    d = make_grid(np.full((x.size, x.size), 100.0), x, x, "EPSG:32633")
    assert choose_segment_km(d).value == 10.0
    c = choose_ray_count(None, d, None)
    assert c.value == DEFAULT_RAY_COUNT and c.describe("rays") == f"{DEFAULT_RAY_COUNT} rays (default)"
    assert Choice(2000, "override").describe("rays") == "2000 rays (command-line override)"
    assert Choice(5000, "scenario").to_dict() == {"value": 5000, "origin": "scenario", "why": ""}
    with pytest.raises(AttributeError):
        Choice(1, "default").value = 2  # frozen: a choice is recorded once
