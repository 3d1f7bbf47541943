"""Tests of one-way nesting of the linear long-wave solver (tsunamifocus.propagation.nest).

Checks against Green's law (Green 1838) inside a refined box, against the same sea floor solved
refined everywhere (a nested solve must give what the whole refined grid gives where the coarse
grid already resolves the incoming wave: common practice of nested long-wave models, no source),
and the refusals of bad boxes.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import shapely

from tsunamifocus.coast.waves import _coastal_cells
from tsunamifocus.errors import InputError
from tsunamifocus.grid import make_grid, refine_grid
from tsunamifocus.propagation.nest import NestBox, nest_box, simulate_nested
from tsunamifocus.propagation.wave import simulate_linear_long_wave
from tsunamifocus.studies import check as check_module
from tsunamifocus.studies.check import compare_with_waves


def _shelf_basin():
    """A 800 x 640 km basin: 4000 m deep, a shelf rising to the east coast, a bump on its flank."""
    dx = 4000.0
    nx, ny = 200, 160
    x = np.arange(nx) * dx
    y = np.arange(ny) * dx
    xx, yy = np.meshgrid(x, y)
    h = np.interp(xx, [0, 500e3, 720e3, 800e3], [4000, 4000, 30, 0])
    h = h * (1 + 0.3 * np.exp(-((xx - 450e3) ** 2 + (yy - 300e3) ** 2) / (2 * 40e3**2)))
    h[h < 5] = -10.0
    depth = make_grid(h, x, y, "EPSG:3857")
    eta0 = depth.copy(data=np.exp(-((xx - 150e3) ** 2 + (yy - 320e3) ** 2) / (2 * 30e3**2)))
    return depth, eta0


def _coastal_departure(nw, full, depth, box, r):
    """The box's maxima, and their relative departure from the whole grid refined ``r`` times on
    every stop-isobath cell farther than 4 coarse cells from the ring (the box's sea floor is
    first checked to be the whole refined grid's, cell for cell)."""
    fm = full.max_amplitude.values[box.j0 * r:box.j1 * r, box.i0 * r:box.i1 * r]
    nm = nw.fine.max_amplitude.values
    assert nm.shape == fm.shape == nw.depth.shape
    np.testing.assert_allclose(nw.depth.values, refine_grid(depth, r).values[box.j0 * r:box.j1 * r,
                                                                             box.i0 * r:box.i1 * r])
    band = _coastal_cells(nw.depth.values > 20.0, False)
    inner = np.zeros_like(band)
    inner[4 * r:-4 * r, 4 * r:] = True
    b = band & inner
    assert b.sum() > 150
    return nm, np.abs(nm[b] - fm[b]) / fm[b]


def test_nested_box_gives_the_whole_refined_grid_at_the_coast():
    # One-way nesting imposes the coarse solution on a ring around the box; where the coarse grid
    # resolves the incoming wave, the box's coastal maxima must be those of the whole grid refined
    # alike (common practice of nested long-wave models, no source). Measured: within 1 % on every
    # stop-isobath cell farther than 4 coarse cells from the ring.
    depth, eta0 = _shelf_basin()
    r = 3
    kw = dict(duration_s=9000.0, stop_depth_m=20.0, coast="absorb", boundary="absorb", threads=1)
    full = simulate_linear_long_wave(refine_grid(depth, r), refine_grid(eta0, r), **kw)
    box = NestBox(40, 120, 130, 200)  # the east side lies on the grid's edge: not forced
    nw = simulate_nested(depth, eta0, box, r, **kw)
    assert nw.fine.stats["nested"]["forced_sides"] == ["south", "north", "west"]
    nm, rel = _coastal_departure(nw, full, depth, box, r)
    assert rel.max() < 0.02
    assert np.median(rel) < 0.01
    # the forced ring carries no maxima
    assert np.isnan(nm[:r]).all() and np.isnan(nm[:, :r]).all()
    # the coarse pass is the plain run of the whole grid
    plain = simulate_linear_long_wave(depth, eta0, **kw)
    np.testing.assert_array_equal(nw.coarse.max_amplitude.values, plain.max_amplitude.values)


def test_greens_law_holds_inside_a_nested_box():
    # Green (1838): a long wave on a gently varying depth keeps its energy flux, so its amplitude
    # varies as h**(-1/4). Plane wave incident normally up a 1:150 slope; the box covers the slope
    # and only its west side is forced by the coarse grid (the same set-up as the plain solver's
    # test in test_wave.py).
    dx = 1000.0
    x = np.arange(0.0, 900e3, dx)
    h = np.interp(x, [0, 200e3, 800e3, 900e3], [4000, 4000, 40, 40])
    ny = 8
    depth = make_grid(np.tile(h, (ny, 1)), x, np.arange(ny) * dx, "EPSG:3857")
    eta0 = depth.copy(data=np.tile(np.exp(-((x - 100e3) ** 2) / (2 * 15e3**2)), (ny, 1)))
    box = NestBox(0, ny, 150, x.size)
    r = 2
    nw = simulate_nested(depth, eta0, box, r, duration_s=9000.0, stop_depth_m=30.0, coast="absorb",
                         boundary={"west": "absorb", "east": "absorb", "south": "reflect", "north": "reflect"},
                         threads=1)
    assert nw.fine.stats["nested"]["forced_sides"] == ["west"]
    xf = np.asarray(nw.depth["x"].values)
    hf = np.interp(xf, x, h)
    amp = nw.fine.max_amplitude.values[ny]  # a middle row of the box
    i1 = int(np.argmin(np.abs(hf - 2000.0)))
    i2 = int(np.argmin(np.abs(hf - 250.0)))
    assert xf[i1] > x[box.i0] + 20e3  # well inside the box
    assert amp[i2] / amp[i1] == pytest.approx((hf[i1] / hf[i2]) ** 0.25, rel=0.02)


def test_nest_box_holds_the_points_and_margin():
    depth, _ = _shelf_basin()
    box = nest_box(depth, np.array([600e3, 700e3]), np.array([200e3, 400e3]), 100e3)
    xs, ys = depth["x"].values, depth["y"].values
    assert xs[box.i0] <= 500e3 and xs[box.i1 - 1] >= 790e3  # clipped at the east edge
    assert ys[box.j0] <= 100e3 and ys[box.j1 - 1] >= 500e3
    assert box.i1 == depth.shape[1]
    with pytest.raises(InputError, match="margin"):
        nest_box(depth, np.array([1.0]), np.array([1.0]), -5.0)
    with pytest.raises(InputError, match="no finite point"):
        nest_box(depth, np.array([np.nan]), np.array([np.nan]), 5.0)


def test_nested_solve_refuses_bad_factor_and_box():
    depth, eta0 = _shelf_basin()
    kw = dict(duration_s=100.0, stop_depth_m=20.0)
    with pytest.raises(InputError, match="refine 1"):
        simulate_nested(depth, eta0, NestBox(10, 50, 10, 50), 1, **kw)
    with pytest.raises(InputError, match="does not lie within"):
        simulate_nested(depth, eta0, NestBox(10, 500, 10, 50), 2, **kw)
    with pytest.raises(InputError, match="at least 4 x 4"):
        simulate_nested(depth, eta0, NestBox(10, 12, 10, 50), 2, **kw)


def test_nested_solve_of_a_flat_sea_stays_flat():
    # A sea at rest stays at rest (no source, no forcing): every maximum is 0 and nothing arrives;
    # the arrival threshold is then infinite, which the box pass must accept.
    depth, eta0 = _shelf_basin()
    flat = eta0.copy(data=np.zeros(eta0.shape))
    nw = simulate_nested(depth, flat, NestBox(40, 120, 130, 200), 2, duration_s=600.0, stop_depth_m=20.0)
    amp = nw.fine.max_amplitude.values
    assert np.nanmax(np.abs(amp)) == 0.0
    assert np.isnan(nw.fine.arrival_time_s.values).all()


def test_nested_solve_refuses_a_box_on_the_seam_of_a_periodic_grid():
    lon = np.arange(0.0, 360.0, 2.0)
    lat = np.arange(-30.0, 31.0, 2.0)
    depth = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326", lon_periodic=True)
    eta0 = depth.copy(data=np.zeros(depth.shape))
    with pytest.raises(InputError, match="seam"):
        simulate_nested(depth, eta0, NestBox(5, 20, 0, 30), 2, duration_s=100.0, stop_depth_m=20.0)


def _coast_segments(depth, ys: np.ndarray) -> pd.DataFrame:
    """Straight segments along the 20 m isobath of the shelf basin's east coast, 40 km long."""
    x20 = 800e3 - 80e3 * 20.0 / 30.0  # h falls linearly from 30 m at 720 km to 0 at 800 km
    geoms = [shapely.LineString([(x20, a), (x20, b)]) for a, b in zip(ys[:-1], ys[1:])]
    return pd.DataFrame({"segment_id": [f"S{i:04d}" for i in range(len(geoms))], "geometry": geoms,
                         "amp_stop_m": np.linspace(1.0, 2.0, len(geoms))})


def test_check_nests_around_the_segments_and_falls_back_when_the_box_is_large(monkeypatch):
    # The nested check ranks the segments as the check refined everywhere does (same sea floor,
    # same factor); a coast spanning most of the grid is refined whole (agreement["nest"] None).
    monkeypatch.setattr(check_module, "NEST_MARGIN_KM", 100.0)  # the basin is only 800 km across
    depth, eta0 = _shelf_basin()
    seg = _coast_segments(depth, np.arange(200e3, 440e3 + 1, 40e3))
    kw = dict(duration_s=9000.0, stop_depth_m=20.0, refine=2, threads=1)
    whole = compare_with_waves(depth, eta0, seg, nest=False, **kw)
    nested = compare_with_waves(depth, eta0, seg, nest=True, **kw)
    assert whole.agreement["nest"] is None
    assert nested.agreement["nest"]["share"] < 0.5
    assert nested.depth.shape[0] < 2 * depth.shape[0]
    w = whole.table["wave_amp_stop_m"].to_numpy(float)
    n = nested.table["wave_amp_stop_m"].to_numpy(float)
    assert np.isfinite(n).all()
    np.testing.assert_allclose(n, w, rtol=0.02)
    # the box does not hold the source: its arrivals are timed against the whole run's threshold
    np.testing.assert_allclose(nested.table["wave_first_arrival_s"].to_numpy(float),
                               whole.table["wave_first_arrival_s"].to_numpy(float), rtol=0.02)
    # the volume budget reported is the whole grid's (conserved to round-off), not the forced box's
    assert abs(nested.wave.stats["mass_error"]) < 1e-9
    assert nested.wave.stats["elapsed_s"] >= nested.wave.stats["nested"]["box_elapsed_s"]
    monkeypatch.setattr(check_module, "NEST_MARGIN_KM", 400.0)  # a box of more than half the basin
    assert compare_with_waves(depth, eta0, seg, nest=True, **kw).agreement["nest"] is None


def test_a_factor_no_ocean_can_take_within_the_step_refines_the_whole_grid(monkeypatch):
    # 3 has no divisor that leaves a box at most NEST_MAX_STEP = 2 times finer than its ocean: a
    # 3x box would sit in the run's own ocean, a step of 3 (measured less accurate than the whole
    # grid refined 3x; docs/wave_check.md), so the check refines the whole grid; 2 and 4 nest.
    monkeypatch.setattr(check_module, "NEST_MARGIN_KM", 100.0)
    depth, _ = _shelf_basin()
    seg = _coast_segments(depth, np.arange(200e3, 440e3 + 1, 40e3))
    assert check_module._nest_box(depth, seg, 2) is not None
    assert check_module._nest_box(depth, seg, 4) is not None
    assert check_module._nest_box(depth, seg, 3) is None
    assert check_module._nest_box(depth, seg, 5) is None


def test_a_box_nested_in_a_refined_ocean_gives_the_whole_refined_grid():
    # The same comparison with the ocean itself solved 2x finer around a 4x box (ocean_refine):
    # the ring is then one cell of the 2x grid, and the box's sea floor is still the whole 4x
    # grid's, cell for cell (common practice of nested long-wave models, no source).
    from tsunamifocus.propagation.nest import ocean_factor

    assert [ocean_factor(r) for r in (2, 3, 4, 6, 8)] == [1, 1, 2, 3, 4]
    depth, eta0 = _shelf_basin()
    r = 4
    kw = dict(duration_s=7000.0, stop_depth_m=20.0, coast="absorb", boundary="absorb", threads=1)
    full = simulate_linear_long_wave(refine_grid(depth, r), refine_grid(eta0, r), **kw)
    box = NestBox(40, 120, 130, 200)
    nw = simulate_nested(depth, eta0, box, r, ocean_refine=2, **kw)
    assert nw.fine.stats["nested"]["ocean_refine"] == 2
    assert nw.coarse.max_amplitude.shape == (2 * depth.shape[0], 2 * depth.shape[1])
    nm, rel = _coastal_departure(nw, full, depth, box, r)
    assert rel.max() < 0.02
    assert np.isnan(nm[:2]).all()  # the ring: one cell of the 2x ocean, two of the box
    with pytest.raises(InputError, match="ocean_refine"):
        simulate_nested(depth, eta0, box, r, ocean_refine=3, **kw)
    with pytest.raises(InputError, match="ocean_refine"):
        simulate_nested(depth, eta0, box, r, ocean_refine=4, **kw)
