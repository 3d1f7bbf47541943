"""Tests of the ray-tube segment energies (tsunamifocus.coast.tubes) against analytic fluxes."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tsunamifocus.coast.coastline import coastline_from_grid
from tsunamifocus.coast.segments import segment_coastline
from tsunamifocus.coast.tubes import tube_deposit, tube_steps
from tsunamifocus.errors import InputError
from tsunamifocus.grid import GridInfo, make_grid
from tsunamifocus.propagation.rays import trace_rays

CRS = "EPSG:32631"
E = 1.0e15  # J


def basin(D=100e3, h0=2000.0, dx=1000.0):
    """Constant depth h0 west of a straight north-south coast at x = D + 20 km (land east)."""
    x = np.arange(0.0, D + 40e3 + 1, dx)
    y = np.arange(-200e3, 200e3 + 1, dx)
    X, _ = np.meshgrid(x, y)
    h = np.where(X < D + 20e3, h0, -10.0)
    return make_grid(h, x, y, CRS)


def point_source_on_basin(n):
    """n rays evenly spaced in azimuth from (0, 0) over :func:`basin`, each carrying E / n, and the
    20 m contour cut into 10 km segments; returns (depth, end states, segments, tube deposit)."""
    d = basin()
    az = (np.arange(n) + 0.5) * 360.0 / n
    r = trace_rays(d, np.zeros(n), np.zeros(n), az, weights=np.full(n, E / n), stop_depth_m=20.0,
                   max_time_s=4 * 3600.0)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    steps = tube_steps(r.end, GridInfo.from_dataarray(d))
    dep = tube_deposit(seg, r.end, d, steps=steps, period_s=300.0, max_distance_m=3000.0)
    return r, seg, steps, dep


def geometric_flux(seg):
    """E cos^2(theta) / (2 pi D) at the segment centres, D the distance of the (straight) coast."""
    xc = float(np.median(seg["x_mid"]))  # the 20 m contour, about half a cell west of the land
    theta = np.arctan2(seg["y_mid"].to_numpy(float), xc)
    return theta, E * np.cos(theta) ** 2 / (2 * np.pi * xc)


def test_point_source_on_a_straight_coast_matches_the_geometric_flux():
    # Isotropic point source at distance D from a straight coast, constant depth: straight rays,
    # so the energy crossing the coast per metre is E cos^2(theta) / (2 pi D), theta the angle
    # from the normal, s = D tan(theta) (geometry of a fan of rays; exact for ray theory).
    n = 720
    r, seg, steps, dep = point_source_on_basin(n)
    np.testing.assert_allclose(steps, 2 * math.pi / n, rtol=1e-9)
    theta, expected = geometric_flux(seg)
    got = dep.energy_J / seg["length_m"].to_numpy(float)
    inner = np.abs(theta) < math.radians(50.0)
    np.testing.assert_allclose(got[inner], expected[inner], rtol=0.03)
    assert not dep.shadow[inner].any()
    # every coast ray deposits exactly its weight (rows of the matrix sum to the weights)
    rows = np.asarray(dep.matrix.sum(axis=1)).ravel()
    hit = dep.assigned
    np.testing.assert_allclose(rows[hit], E / n, rtol=1e-12)


def test_few_rays_still_give_a_smooth_answer():
    # With 72 rays (5 degrees apart, ~9 km apart at the coast) the tube estimate stays within
    # 5 % of the geometric flux where counting hits on 10 km segments would be off by +-100 %.
    _, seg, _, dep = point_source_on_basin(72)
    theta, expected = geometric_flux(seg)
    inner = np.abs(theta) < math.radians(40.0)
    got = dep.energy_J / seg["length_m"].to_numpy(float)
    np.testing.assert_allclose(got[inner], expected[inner], rtol=0.05)


def test_line_source_step_is_the_launch_spacing():
    # plane-wave rays (q0 = 1) launched 250 m apart: the tube step is that spacing
    d = basin()
    y0 = np.arange(-50e3, 50e3, 250.0)
    r = trace_rays(d, np.full(y0.size, 1000.0), y0, 90.0, q0=1.0, p0=0.0, stop_depth_m=20.0, max_time_s=3600.0)
    np.testing.assert_allclose(tube_steps(r.end, GridInfo.from_dataarray(d)), 250.0, rtol=1e-9)


def test_footprints_stay_on_their_line_even_when_wider_than_the_ocean():
    # Two separate straight coastlines. A Gaussian footprint's share of a segment is the normal
    # probability of its arc interval (analytic: normal CDF, Abramowitz & Stegun 26.2.2),
    # renormalised over the ray's own line; a footprint far wider than the line (a tube that
    # spread over 10,000 km: here 1e26 m) is uniform along its own line and never reaches the
    # other one. The lines are placed one after the other on one axis internally: the width
    # must not spill over (common practice, no source).
    from shapely.geometry import LineString

    from tsunamifocus.coast.tubes import _Arcs, _arc_rows
    from scipy.special import ndtr

    d = basin()
    lines = [LineString([(120e3, -100e3), (120e3, 0.0)]), LineString([(60e3, 150e3), (60e3, 190e3)])]
    seg = segment_coastline(lines, 10e3, d)
    arcs = _Arcs.build(seg)
    on0 = arcs.line == arcs.line[0]
    assert on0.sum() == 10 and (~on0).sum() == 4
    reach = np.ones(len(seg), bool)
    r, c, v = _arc_rows(arcs, np.array([arcs.line[0], arcs.line[0]]), np.array([35e3, 35e3]),
                        np.array([1e26, 12e3]), reach, len(seg))
    huge = np.bincount(c[r == 0], weights=v[r == 0], minlength=len(seg))
    np.testing.assert_allclose(huge[on0], 0.1, rtol=1e-9)
    assert not huge[~on0].any()
    mid = np.bincount(c[r == 1], weights=v[r == 1], minlength=len(seg))
    a, b = arcs.a[on0], arcs.b[on0]
    exact = ndtr((b - 35e3) / 12e3) - ndtr((a - 35e3) / 12e3)
    exact[(a >= 35e3 + 4 * 12e3) | (b <= 35e3 - 4 * 12e3)] = 0.0  # footprints end at 4 std (tail 6e-5)
    np.testing.assert_allclose(mid[on0], exact / exact.sum(), rtol=1e-9)
    assert not mid[~on0].any()


def test_prepared_coast_geometry_gives_the_same_deposit():
    # Building the segments' samples once for many traces (CoastGeometry) must not change a
    # deposit (same analytic-flux case as above; common practice, no source)
    from tsunamifocus.coast.tubes import CoastGeometry

    r, seg, steps, dep = point_source_on_basin(720)
    d = basin()
    geo = CoastGeometry.build(seg, d)
    dep2 = tube_deposit(seg, r.end, d, steps=steps, period_s=300.0, max_distance_m=3000.0, coast=geo)
    np.testing.assert_array_equal(dep.energy_J, dep2.energy_J)
    np.testing.assert_array_equal(dep.shadow, dep2.shadow)


def test_a_tube_spread_wider_than_its_fresnel_zone_stays_near_its_end():
    # A tube whose linearised spreading has grown beyond its first Fresnel zone (on long paths
    # across many lenses |q| grows exponentially, to tubes wider than the ocean) is not spread
    # uniformly over its whole coastline line: its footprint is the Fresnel width, a Gaussian of
    # std sqrt(lambda L) / 2 (lambda = c_end T, L its path length) around its end point. On 10 km
    # segments the binned Gaussian's variance is std^2 + (10 km)^2 / 12 (Sheppard's correction,
    # Sheppard 1898, Proc. Lond. Math. Soc. 29, 353).
    from tsunamifocus.coast.tubes import fresnel_sigma

    r, seg, steps, _ = point_source_on_basin(720)
    d = basin()
    end = r.end.copy(deep=True)
    coast = np.flatnonzero((end["reason"].values == 1) & (np.abs(end["y"].values) < 5e3))
    k = int(coast[0])
    q = end["q"].values.copy()
    q[k] = 1e20
    end["q"] = ("ray", q)
    dep = tube_deposit(seg, end, d, steps=steps, period_s=300.0, max_distance_m=3000.0)
    row = dep.matrix.getrow(k).toarray().ravel()
    np.testing.assert_allclose(row.sum(), E / 720, rtol=1e-12)  # still deposits its weight
    lam = float(end["c_end"].values[k]) * 300.0
    sig = float(fresnel_sigma(lam, float(end["path_length_m"].values[k])))
    y = seg["y_mid"].to_numpy(float)
    mean = float(np.sum(row * y) / row.sum())
    std = math.sqrt(float(np.sum(row * (y - mean) ** 2) / row.sum()))
    assert abs(mean - float(end["y"].values[k])) < 1e3
    np.testing.assert_allclose(std, math.sqrt(sig**2 + 10e3**2 / 12.0), rtol=0.05)
    # the coast beyond 5 Fresnel widths gets nothing (uniform spreading would give it E / n / 40 each)
    assert not row[np.abs(y - mean) > 5 * sig].any()


def test_tubes_past_their_fresnel_zone_are_counted_as_capped():
    # A tube is "capped" when its width where it meets the coast, W = |q| dtheta / cos(theta) (q
    # the paraxial spreading per radian of launch angle, theta the incidence), reaches sqrt(2 pi)
    # times the first-Fresnel-zone std sqrt(lambda L) / 2 (lambda = c T at the ray's end, L its
    # path; the Fresnel zone's definition, Born & Wolf, Principles of Optics, cited from memory):
    # its energy then counts in capped_energy_J. A coarse fan (56 rays, 6.4 degrees apart) on a
    # straight coast 120 km away has both kinds of tube (the oblique ones are the wide ones:
    # W grows as 1 / cos^2 theta, the Fresnel width as 1 / sqrt(cos theta)); a fine fan none.
    from tsunamifocus.coast.tubes import fresnel_sigma

    n = 56
    az = (np.arange(n) + 0.5) * 360.0 / n  # the fan of point_source_on_basin
    r, _, steps, dep = point_source_on_basin(n)
    e = r.end
    theta = np.radians(np.abs(az - 90.0))  # the coast's normal points west: incidence = |az - 90|
    with np.errstate(invalid="ignore", divide="ignore"):
        width = np.abs(e["q"].values) * steps / np.cos(theta)
        ratio = width / (math.sqrt(2 * math.pi) * fresnel_sigma(e["c_end"].values * 300.0, e["path_length_m"].values))
    on_coast = dep.assigned
    # (the incidence here is taken from the azimuth; the deposit takes it from the coast's own
    # segment normals: tubes within 10 % of the limit may fall either way)
    surely, maybe = on_coast & (ratio >= 1.1), on_coast & (ratio >= 0.9)
    assert surely.sum() >= 2 and (on_coast & ~maybe).sum() >= 2
    assert np.degrees(theta[surely]).min() > np.degrees(theta[on_coast & ~maybe]).max()
    rows = np.asarray(dep.matrix.sum(axis=1)).ravel()
    assert rows[surely].sum() * (1 - 1e-9) <= dep.capped_energy_J.sum() <= rows[maybe].sum() * (1 + 1e-9)
    assert np.all(dep.capped_energy_J <= dep.energy_J * (1 + 1e-12))
    # a fine fan (720 rays) on the same coast: no tube reaches its Fresnel width
    _, _, _, fine = point_source_on_basin(720)
    assert fine.energy_J.sum() > 0 and not fine.capped_energy_J.any()


def island_basin(dx=1000.0):
    """Constant 2000 m depth with a square island 40 km across centred at (140 km, 0)."""
    x = np.arange(0.0, 220e3 + 1, dx)
    y = np.arange(-100e3, 100e3 + 1, dx)
    X, Y = np.meshgrid(x, y)
    h = np.where((np.abs(X - 140e3) <= 20e3) & (np.abs(Y) <= 20e3), -10.0, 2000.0)
    return make_grid(h, x, y, CRS)


def test_a_footprint_stops_where_the_coast_turns_its_back_to_the_ray():
    # A tube's cross-section meets the coast in front of it: a footprint wider than the island
    # (here 1e26 m, and a caustic-regularised width of one 280 km wavelength) covers the sides
    # of the island that face the ray or run along it, not the side that turns its back to it
    # (seaward normal more than 120 degrees from the direction the ray comes from). Along the
    # sides it covers, a footprint far wider than the island is uniform per metre (common
    # practice, no source).
    from tsunamifocus.coast.tubes import BACK_FACING_COS, _Arcs, _arc_rows

    d = island_basin()
    seg = segment_coastline(coastline_from_grid(d, 20.0), 5e3, d)
    arcs = _Arcs.build(seg)
    assert arcs.ring.all() and arcs.start.size == 1
    normal = seg["normal_azimuth_deg"].to_numpy(float)
    # the ray ends in the middle of the island's west side travelling east (azimuth 90)
    west = np.flatnonzero(np.abs(((normal - 270.0) + 180.0) % 360.0 - 180.0) < 30.0)
    k = int(west[np.argmin(np.abs(seg["y_mid"].to_numpy(float)[west]))])
    s0 = np.array([0.5 * (arcs.a[k] + arcs.b[k])])
    reach = np.ones(len(seg), bool)
    r, c, v = _arc_rows(arcs, np.array([0]), s0, np.array([1e26]), reach, len(seg),
                        facing=(np.array([90.0]), normal))
    share = np.bincount(c, weights=v, minlength=len(seg))
    back = np.cos(np.radians(normal - 270.0)) < BACK_FACING_COS
    assert back.sum() >= 6 and not share[back].any()
    front = ~back
    np.testing.assert_allclose(share.sum(), 1.0, rtol=1e-12)
    length = seg["length_m"].to_numpy(float)
    np.testing.assert_allclose(share[front], length[front] / length[front].sum(), rtol=1e-9)
    # without the ray's direction the same footprint wraps the whole ring
    _, c0, v0 = _arc_rows(arcs, np.array([0]), s0, np.array([1e26]), reach, len(seg))
    assert np.bincount(c0, weights=v0, minlength=len(seg))[back].sum() > 0.2
    # through tube_deposit: rays from a point 120 km west of the island, a period long enough
    # that every footprint is wider than the island; the far side gets no energy, and every
    # ray that reached the island deposits all of its weight
    n = 360
    az = (np.arange(n) + 0.5) * 360.0 / n
    rr = trace_rays(d, np.full(n, 20e3), np.zeros(n), az, weights=np.full(n, E / n), stop_depth_m=20.0,
                    max_time_s=3 * 3600.0)
    dep = tube_deposit(seg, rr.end, d, steps=tube_steps(rr.end, GridInfo.from_dataarray(d)), period_s=20000.0,
                       max_distance_m=3000.0)
    assert dep.energy_J[front].sum() > 0 and not dep.energy_J[back].any()
    np.testing.assert_allclose(dep.energy_J.sum(), E / n * dep.assigned.sum(), rtol=1e-12)


@pytest.mark.parametrize("bad", [-1.0, float("nan"), float("inf")])
def test_a_negative_or_non_finite_caustic_width_is_refused(bad):
    # bad input gets a clear error naming the parameter (common practice, no source)
    r, seg, steps, _ = point_source_on_basin(36)
    with pytest.raises(InputError, match="min_width_factor"):
        tube_deposit(seg, r.end, basin(), steps=steps, period_s=300.0, max_distance_m=3000.0, min_width_factor=bad)


def test_peak_energy_per_metre_is_the_footprints_profile_at_its_most_exposed_point():
    # A caustic's footprint is a Gaussian of std sigma = min_width lambda / sqrt(2 pi) along the
    # coast (lambda = c_end T); the energy per metre at its centre is w / (sigma sqrt(2 pi)), the
    # peak of a normal density (standard result), while the segment's mean is its share of w over
    # its length. The wave check takes its maxima over a segment's cells, so the rays' segment
    # value for amplitude and lensing is this peak. Where the tubes are wide and the flux smooth,
    # the peak is the geometric flux E cos^2(theta) / (2 pi D) at the segment's point nearest the
    # coast's normal through the source (the 720-ray fan of the test above: within 5 %, measured
    # at most 3.5 % where the footprints, at least two local wavelengths wide, smooth the flux's
    # steepening far from the normal).
    r, seg, steps, dep = point_source_on_basin(720)
    d = basin()
    length = seg["length_m"].to_numpy(float)
    mean = dep.energy_J / length
    ok = mean > 0
    assert np.all(dep.peak_per_m[ok] >= mean[ok] * (1 - 1e-9))
    theta, _ = geometric_flux(seg)
    xc = float(np.median(seg["x_mid"]))
    y = seg["y_mid"].to_numpy(float)
    y_near = np.maximum(np.abs(y) - 0.5 * length, 0.0)
    expected = E * np.cos(np.arctan2(y_near, xc)) ** 2 / (2 * np.pi * xc)
    inner = np.abs(theta) < math.radians(50.0)
    np.testing.assert_allclose(dep.peak_per_m[inner], expected[inner], rtol=0.05)
    assert np.all(dep.peak_per_m[inner] > mean[inner])  # the flux falls along every segment off the normal
    end = r.end.copy(deep=True)
    coast = np.flatnonzero((end["reason"].values == 1) & (np.abs(end["y"].values) < 5e3))
    k = int(coast[0])
    q = end["q"].values.copy()
    q[k] = 0.0  # a caustic at the coast: the footprint is the minimum width
    end["q"] = ("ray", q)
    w = np.zeros(end.sizes["ray"])
    w[k] = E
    end["weight"] = ("ray", w)
    one = tube_deposit(seg, end, d, steps=steps, period_s=300.0, max_distance_m=3000.0, min_width_factor=2.0)
    sigma = 2.0 * float(end["c_end"].values[k]) * 300.0 / math.sqrt(2.0 * math.pi)
    top = int(np.argmax(one.peak_per_m))
    # the nearest sample lies within a quarter cell (250 m) of the ray's end: exp(-(0.25/3.3)^2 / 2)
    np.testing.assert_allclose(one.peak_per_m[top], E / (sigma * math.sqrt(2.0 * math.pi)), rtol=0.01)
    assert one.peak_per_m[top] > 1.2 * one.energy_J[top] / length[top]  # the mean hides the focus
