"""Validation tests of the ray engine (tsunamifocus.rays) against outside references.

Each check names its source. Grids are small so the whole file runs in well under two minutes
(numba kernels are compiled once and cached).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from pyproj import Geod
from scipy import stats
from scipy.integrate import solve_ivp

from tsunamifocus.constants import EARTH_RADIUS_M, GRAVITY
from tsunamifocus.errors import RayError
from tsunamifocus.grid import make_grid
from tsunamifocus.ocean.randomfield import gaussian_random_field
from tsunamifocus.propagation.rays import REASON_CODES, trace_rays
from tsunamifocus.propagation.speedfield import SpeedField
from tsunamifocus.ocean.speed import wave_speed

GEOD = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)


def plane(h, dx=1000.0):
    ny, nx = h.shape
    return make_grid(h, np.arange(nx) * dx, np.arange(ny) * dx, "EPSG:3857")


def global_grid(h0=4000.0, dlon=1.0, lon0=0.0):
    lon = lon0 + np.arange(0.0, 360.0, dlon)
    lat = np.arange(-89.5, 90.0, dlon)
    return make_grid(np.full((lat.size, lon.size), h0), lon, lat, "EPSG:4326")


# ---------------------------------------------------------------------------------------------
# kinematics on analytic media
# ---------------------------------------------------------------------------------------------


def test_constant_depth_plane_straight_rays_and_q_ct():
    d = plane(np.full((120, 200), 4000.0))
    az = np.array([90.0, 60.0, 120.0, 75.0])
    r = trace_rays(d, np.full(4, 20e3), np.full(4, 60e3), az, max_time_s=600.0)
    e = r.end
    c = math.sqrt(GRAVITY * 4000.0)
    dist = np.hypot(e.x - e.launch_x, e.y - e.launch_y)
    # straight rays; travel time = distance / sqrt(g h) (uniform medium: rays are straight lines)
    np.testing.assert_allclose(e.time_s, dist / c, rtol=1e-6)
    np.testing.assert_allclose(e.azimuth_deg, az, atol=1e-9)
    bearing = np.degrees(np.arctan2(e.x - e.launch_x, e.y - e.launch_y)) % 360
    np.testing.assert_allclose(bearing, az, atol=1e-9)
    assert (e.reason == REASON_CODES["time_limit"]).all()
    # dynamic ray tracing, point source in a constant medium: q = c t, p = 1/c (Cerveny 2001, 4.8)
    np.testing.assert_allclose(e.q, c * e.time_s, rtol=1e-9)
    np.testing.assert_allclose(e.p, 1.0 / c, rtol=1e-9)
    assert (e.caustics == 0).all() and np.isnan(e.first_caustic_m).all()
    np.testing.assert_allclose(e.path_length_m, dist, rtol=1e-9)
    assert r.stats["geometry"] == "plane"


@pytest.mark.parametrize("lon0", [0.0, -180.0])
def test_constant_depth_sphere_great_circles_across_seam(lon0):
    # Rays on a constant-depth sphere are great circles: compare end point and end azimuth with
    # pyproj.Geod on a sphere of the same radius (reference library), over 5,000 km, launched
    # so that they cross the grid's longitude seam (0/360 or +-180).
    d = global_grid(lon0=lon0)
    c = math.sqrt(GRAVITY * 4000.0)
    dist = 5.0e6
    lons = np.array([150.0, 170.0, -20.0, 350.0, 160.0])
    lats = np.array([10.0, -35.0, 40.0, 0.0, 50.0])
    azs = np.array([80.0, 100.0, 70.0, 95.0, 45.0])
    r = trace_rays(d, lons, lats, azs, max_time_s=dist / c, stop_depth_m=20.0)
    e = r.end
    assert (e.reason == REASON_CODES["time_limit"]).all()
    lo_ref, la_ref, baz = GEOD.fwd(lons, lats, azs, np.full(lons.size, dist))
    _, _, err = GEOD.inv(e.x.values, e.y.values, lo_ref, la_ref)
    assert np.max(err) < 100.0  # m
    az_ref = (np.asarray(baz) + 180.0) % 360.0
    daz = (e.azimuth_deg.values - az_ref + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(daz)) < 1e-3
    np.testing.assert_allclose(e.path_length_m, dist, rtol=1e-9)
    # geodesic spreading of a point source on a sphere: q = R sin(s / R) (Jacobi equation with
    # Gaussian curvature 1/R^2; Cerveny 2001 dynamic ray tracing with the curvature term)
    R = EARTH_RADIUS_M
    np.testing.assert_allclose(e.q, R * np.sin(dist / R), rtol=1e-6)
    # the rays crossed the seam and the end longitudes are reported inside the grid's range
    lo, hi = lon0 - 0.5, lon0 + 359.5
    assert ((e.x >= lo) & (e.x < hi)).all()
    assert r.stats["geometry"] == "sphere"


def test_seam_crossing_is_smooth_on_paths():
    # a ray launched eastward across the seam continues on the same great circle: the decimated
    # path matches pyproj.Geod points at the same distances (reference library)
    d = global_grid(dlon=0.5)
    c = math.sqrt(GRAVITY * 4000.0)
    r = trace_rays(d, [175.0], [-20.0], [85.0], max_time_s=3e6 / c, keep_paths=1, path_points=60)
    p = r.paths.isel(path=0)
    ok = np.isfinite(p.x.values)
    s = p.time_s.values[ok] * c
    lo, la, _ = GEOD.fwd(np.full(s.size, 175.0), np.full(s.size, -20.0), np.full(s.size, 85.0), s)
    _, _, err = GEOD.inv(p.x.values[ok] % 360.0, p.y.values[ok], np.asarray(lo) % 360.0, la)
    assert np.max(err) < 100.0
    assert p.x.values[ok].max() > 180.0  # the unwrapped path longitude passed 180 deg


def test_snell_invariant_linear_slope():
    # Straight parallel depth contours (h depends on x only): Snell's law, the along-contour
    # slowness cos(azimuth)/c (= sin(angle to the depth gradient)/c) is constant along a ray.
    nx, ny = 200, 80
    h = np.broadcast_to(500.0 + 20.0 * np.arange(nx)[None, :], (ny, nx)).copy()  # 500 .. 4480 m
    d = plane(h)
    az = np.array([30.0, 60.0, 100.0, 130.0, 250.0, 300.0])
    x0 = np.full(az.size, 120e3)
    r = trace_rays(d, x0, np.full(az.size, 40e3), az, max_time_s=120.0, stop_depth_m=50.0)
    e = r.end
    fld = SpeedField(d)
    c0 = fld.evaluate(x0, np.full(az.size, 40e3))["c"]
    inv0 = np.cos(np.radians(az)) / c0
    inv1 = np.cos(np.radians(e.azimuth_deg.values)) / e.c_end.values
    np.testing.assert_allclose(inv1, inv0, rtol=1e-6)
    assert np.ptp(e.azimuth_deg.values - az) > 1.0  # rays really turned


def test_bouguer_invariant_seamount():
    # Axisymmetric medium (circular seamount): Bouguer's formula r sin(psi) / c = const along a
    # ray (classical ray optics for axially symmetric media).
    n = 161
    xc = yc = 80e3
    xx, yy = np.meshgrid(np.arange(n) * 1000.0, np.arange(n) * 1000.0)
    rr2 = (xx - xc) ** 2 + (yy - yc) ** 2
    h = 4000.0 - 2500.0 * np.exp(-rr2 / (2 * 18e3**2))
    d = plane(h)
    y0 = np.array([60e3, 70e3, 75e3, 85e3, 95e3])
    x0 = np.full(y0.size, 15e3)
    r = trace_rays(d, x0, y0, np.full(y0.size, 90.0), max_time_s=500.0)
    e = r.end
    fld = SpeedField(d)
    c0 = fld.evaluate(x0, y0)["c"]
    se0, sn0 = 1.0, 0.0
    b0 = ((x0 - xc) * sn0 - (y0 - yc) * se0) / c0
    a1 = np.radians(e.azimuth_deg.values)
    b1 = ((e.x.values - xc) * np.cos(a1) - (e.y.values - yc) * np.sin(a1)) / e.c_end.values
    # the sampled bump is axisymmetric only to interpolation accuracy (~(dx/L)^4); measured 2e-6
    np.testing.assert_allclose(b1, b0, rtol=1e-5)
    assert np.ptp(e.azimuth_deg.values) > 5.0  # strong refraction


# ---------------------------------------------------------------------------------------------
# dynamic ray tracing / energy
# ---------------------------------------------------------------------------------------------


def test_greens_law_normal_incidence_on_slope():
    # Plane wave at normal incidence on a plane slope: the ray tube keeps its width (q = 1), the
    # energy per unit wavefront width is conserved, so the amplitude of a pulse A ~ sqrt(E / c)
    # follows Green's law A ~ h^(-1/4) (Green 1838).
    nx, ny = 160, 40
    h = np.broadcast_to(4000.0 - 24.0 * np.arange(nx)[None, :], (ny, nx)).copy()  # 4000 -> 184 m
    d = plane(h)
    per_cell = 8
    y0 = (np.arange(ny * per_cell) + 0.5) / per_cell * 1000.0 - 500.0
    r = trace_rays(
        d, np.full(y0.size, 2000.0), y0, 90.0, weights=1.0, q0=1.0, p0=0.0, stop_depth_m=250.0, max_time_s=5e4
    )
    e = r.end
    assert (e.reason == REASON_CODES["coast"]).all()
    np.testing.assert_allclose(e.q, 1.0, atol=1e-9)
    E = r.energy.isel(y=slice(5, -5)).mean("y")
    c = wave_speed(d).isel(y=slice(5, -5)).mean("y")
    cols = np.arange(10, 140)
    amp = np.sqrt(E.values[cols] / c.values[cols])
    green = h[0, cols] ** -0.25
    np.testing.assert_allclose(amp / amp[0], green / green[0], rtol=1e-3)
    # energy per unit width: per_cell rays of 1 J per 1000 m of front (sum w / b)
    np.testing.assert_allclose(E.values[cols], per_cell / 1000.0, rtol=1e-9)


def test_integrator_vs_tight_reference():
    # RK4 at the default step vs scipy.integrate.solve_ivp (DOP853, rtol 1e-13) on the same ray
    # equations and the same interpolant (reference library) over a random field.
    h = 3000.0 * (1 + gaussian_random_field((80, 120), 1000.0, 6000.0, 0.15, seed=21))
    d = plane(h)
    fld = SpeedField(d)
    x0, y0, az0, T = 10e3, 40e3, 80.0, 400.0

    def rhs(t, s):
        x, y, se, sn, q, p = s
        f = fld.evaluate(x, y)
        c = float(f["c"])
        om = -(float(f["c_x"]) * sn - float(f["c_y"]) * se)
        cnn = sn * sn * float(f["c_xx"]) - 2 * sn * se * float(f["c_xy"]) + se * se * float(f["c_yy"])
        return [c * se, c * sn, sn * om, -se * om, c * c * p, -cnn / c * q]

    s0 = [x0, y0, math.sin(math.radians(az0)), math.cos(math.radians(az0)), 1.0, 0.0]
    ref = solve_ivp(rhs, (0, T), s0, method="DOP853", rtol=1e-13, atol=1e-10).y[:, -1]
    errs = []
    for step in (None, 10.0, 5.0):
        r = trace_rays(fld, x0, y0, az0, max_time_s=T, step_s=step, q0=1.0, p0=0.0, accumulate=False)
        e = r.end
        errs.append(math.hypot(float(e.x[0]) - ref[0], float(e.y[0]) - ref[1]))
        if step is None:
            assert errs[0] < 0.05  # m, after ~75 km: default step is accurate on the grid scale
            assert float(e.q[0]) == pytest.approx(ref[4], rel=1e-4, abs=1e-4)
    # ~fourth-order convergence at coarse steps: halving the step divides the error by ~16
    # (measured ~10 for 10 s -> 5 s; below ~2.5 s the error sits at a ~1 mm floor)
    assert errs[1] / errs[2] > 6.0
    assert errs[2] < 0.05


def test_first_arrivals_match_fast_marching():
    # First-arrival times vs an eikonal solution from scikit-fmm (reference library), plane wave
    # launched from a line, 2nd-order fast marching on the same node speeds, within 1% away from
    # shadow zones.
    skfmm = pytest.importorskip("skfmm")
    ny, nx = 220, 200
    h = 3000.0 * (1 + gaussian_random_field((ny, nx), 1000.0, 10000.0, 0.1, seed=8))
    d = plane(h)
    xs = 5000.0
    y0 = np.arange(0, (ny - 1) * 1000.0, 10.0)  # 100 rays per km of initial front, 1 J each
    r = trace_rays(d, np.full(y0.size, xs), y0, 90.0, q0=1.0, p0=0.0, max_time_s=2000.0)
    X, _ = np.meshgrid(d.x.values, d.y.values)
    phi = X - xs
    c = np.sqrt(GRAVITY * h)
    tt = skfmm.travel_time(phi, c, dx=1000.0, order=2)
    ta = r.first_arrival_s.values
    # keep 50 km from the side edges (rays that leave the grid cannot carry edge-hugging paths)
    core = (slice(50, ny - 50), slice(20, nx - 2))
    dens = r.energy.values[core]
    e0 = 1.0 / 10.0  # J m-1, initial energy per unit front width
    ok = np.isfinite(ta[core]) & (dens > 0.3 * e0)  # away from shadow zones
    assert ok.mean() > 0.7
    rel = np.abs(ta[core][ok] - tt[core][ok]) / tt[core][ok]
    assert np.max(rel) < 0.01
    assert np.median(rel) < 0.001


def test_kaplan_first_caustic_scaling():
    # Branched flow: over Gaussian-correlated random media of relative strength eps, the mean
    # distance to the first caustic scales as eps^(-2/3) (Kaplan 2002, Phys. Rev. Lett. 89, 184103).
    ny, nx, dx, ell = 200, 1500, 1000.0, 5000.0
    x = np.arange(nx) * dx
    y = np.arange(ny) * dx
    epss = np.array([0.01, 0.02, 0.04, 0.08])
    means = np.zeros((2, epss.size))
    for k, seed in enumerate((11, 12)):
        f = gaussian_random_field((ny, nx), dx, ell, 1.0, seed=seed)
        for m, eps in enumerate(epss):
            d = make_grid(4000.0 * (1 + 2 * eps * f), x, y, "EPSG:3857")  # dc/c ~ eps
            y0 = np.linspace(20e3, 180e3, 300)
            r = trace_rays(
                d, np.full(y0.size, 2000.0), y0, 90.0, q0=1.0, p0=0.0, accumulate=False, max_time_s=1e5
            )
            fc = r.end.first_caustic_m.values
            assert np.isfinite(fc).mean() > 0.9
            means[k, m] = np.nanmean(fc)
    slope = np.polyfit(np.log(epss), np.log(means.mean(axis=0)), 1)[0]
    assert abs(slope - (-2.0 / 3.0)) < 0.1, slope


def test_caustic_count_after_focus():
    # a converging circular lens in a constant medium: parallel rays through a circular shoal
    # focus behind it, so q of rays near the axis changes sign once (Cerveny 2001: caustic where
    # q = 0).
    n = 161
    xx, yy = np.meshgrid(np.arange(n) * 1000.0, np.arange(n) * 1000.0)
    h = 4000.0 - 3000.0 * np.exp(-((xx - 40e3) ** 2 + (yy - 80e3) ** 2) / (2 * 10e3**2))
    r = trace_rays(plane(h), np.full(3, 5e3), [78e3, 80e3, 82e3], 90.0, q0=1.0, p0=0.0, max_time_s=700.0)
    e = r.end
    assert (e.caustics >= 1).all()
    assert np.all(e.first_caustic_m > 35e3) and np.all(e.first_caustic_m < e.path_length_m)


# ---------------------------------------------------------------------------------------------
# determinism, convergence, termination and bad input
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def bench_like():
    # a reduced copy of the benchmark field: 4 km mean depth, 5 % rms, 20 km correlation length,
    # coast along the east edge (shoaling over the last 40 km)
    n = 400
    h = 4000.0 * (1 + gaussian_random_field((n, n), 1000.0, 20e3, 0.05, seed=1))
    ramp = np.clip((n - 1 - np.arange(n)) / 40.0, 0, 1)
    h = h * ramp[None, :] - 50.0 * (ramp[None, :] == 0)
    return SpeedField(plane(h))


def test_determinism_and_thread_agreement(bench_like):
    y0 = np.linspace(10e3, 390e3, 3000)
    kw = dict(step_s=20.0, q0=1.0, p0=0.0)
    a = trace_rays(bench_like, np.full(y0.size, 3e3), y0, 90.0, threads=2, **kw)
    b = trace_rays(bench_like, np.full(y0.size, 3e3), y0, 90.0, threads=2, **kw)
    c = trace_rays(bench_like, np.full(y0.size, 3e3), y0, 90.0, threads=1, **kw)
    xr.testing.assert_identical(a.end, b.end)  # bit-identical run to run
    assert np.array_equal(a.energy.values, b.energy.values)
    assert np.array_equal(a.first_arrival_s.values, b.first_arrival_s.values, equal_nan=True)
    xr.testing.assert_identical(a.end, c.end)  # rays are independent of the thread count
    np.testing.assert_allclose(c.energy.values, a.energy.values, rtol=1e-12, atol=0)
    assert np.array_equal(a.first_arrival_s.values, c.first_arrival_s.values, equal_nan=True)
    assert a.stats["threads"] == 2 and c.stats["threads"] == 1


def test_tracing_in_pieces_is_bit_identical(bench_like, monkeypatch):
    """The kernel runs in pieces so a signal is answered between them (io.interrupts); a piece is a
    whole number of rounds over the threads, so every ray keeps its accumulation chunk and order:
    the result must equal one call bit for bit (IEEE 754 sums in the same order, common practice)."""
    import tsunamifocus.propagation.rays as R

    y0 = np.linspace(10e3, 390e3, 1001)  # not a multiple of the piece: the last piece is short
    kw = dict(step_s=20.0, q0=1.0, p0=0.0, threads=2, keep_paths=7)
    one = trace_rays(bench_like, np.full(y0.size, 3e3), y0, 90.0, **kw)
    monkeypatch.setattr(R, "_piece_rays", lambda n, nchunk, max_steps: 6 * nchunk)
    many = trace_rays(bench_like, np.full(y0.size, 3e3), y0, 90.0, **kw)
    xr.testing.assert_identical(one.end, many.end)
    assert np.array_equal(one.energy.values, many.energy.values)
    assert np.array_equal(one.first_arrival_s.values, many.first_arrival_s.values, equal_nan=True)
    xr.testing.assert_identical(one.paths, many.paths)


def test_piece_sizes_are_whole_rounds():
    from tsunamifocus.propagation.rays import _piece_rays

    for n, nchunk, steps in ((10, 4, 100), (10**7, 2, 300), (3, 4, 10), (10**6, 3, 10**7)):
        k = _piece_rays(n, nchunk, steps)
        assert k >= 1 and (k % nchunk == 0 or k >= n)
        assert k * steps <= max(nchunk * steps, 2 * 750_000 * nchunk)  # about a quarter second per thread


def _coast_bins(res, nbins=40):
    e = res.end
    ok = e.reason.values == REASON_CODES["coast"]
    hist, _ = np.histogram(e.y.values[ok], bins=nbins, range=(0, 400e3), weights=e.weight.values[ok])
    return hist


def test_statistical_convergence_of_coastal_energy_ranking(bench_like):
    # Individual rays over random bathymetry are chaotic; the binned energy along the receiving
    # coast (and its ranking) converges as the step shrinks and the ray count grows
    # (Spearman >= 0.95; common practice, no source).
    def run(nrays, step):
        y0 = np.linspace(0.5e3, 399.5e3, nrays)
        w = np.full(nrays, 1.0 / nrays)
        return trace_rays(
            bench_like,
            np.full(nrays, 3e3),
            y0,
            90.0,
            weights=w,
            step_s=step,
            q0=1.0,
            p0=0.0,
            accumulate=False,
        )

    base = _coast_bins(run(20000, 20.0))
    half = _coast_bins(run(20000, 10.0))
    double = _coast_bins(run(40000, 20.0))
    assert stats.spearmanr(base, half)[0] >= 0.95
    assert stats.spearmanr(base, double)[0] >= 0.95
    assert base.max() > 1.5 * np.median(base)  # there is focusing to rank


def test_coast_stop_and_interpolated_end(bench_like):
    y0 = np.linspace(50e3, 350e3, 50)
    r = trace_rays(bench_like, np.full(y0.size, 3e3), y0, 90.0, stop_depth_m=30.0, step_s=20.0)
    e = r.end
    coast = e.reason.values == REASON_CODES["coast"]
    assert coast.mean() > 0.8
    np.testing.assert_allclose(e.depth_end.values[coast], 30.0)
    # bilinear depth at the interpolated end point is close to the stop isobath
    dd = bench_like.bilinear_depth(e.x.values[coast], e.y.values[coast])
    assert np.max(np.abs(dd - 30.0)) < 30.0
    assert e.reason.attrs["flag_meanings"].split()[:4] == [
        "coast",
        "left_grid",
        "land_or_nodata",
        "time_limit",
    ]


@pytest.mark.parametrize("step_s", [1.0, 7.0, 40.0])
def test_energy_is_path_length_in_each_cell(step_s):
    # The energy grid is sum(weight x path length in cell) / cell area. For a straight ray
    # (constant depth) the length inside each cell is the length of the intersection of the ray
    # segment with the cell square, computed here by shapely (reference geometry library). Steps
    # of 0.2, 1.4 and 8 cells cover the single-cell and the cell-walk branches of the kernel.
    from shapely.geometry import LineString, box

    dx = 1000.0
    d = plane(np.full((40, 60), 4000.0), dx)
    x0, y0, az, t = 5300.0, 7100.0, 63.0, 160.0
    r = trace_rays(d, [x0], [y0], [az], weights=[2.5], max_time_s=t, step_s=step_s)
    e = r.end
    assert int(e.reason[0]) == REASON_CODES["time_limit"]
    seg = LineString([(x0, y0), (float(e.x[0]), float(e.y[0]))])
    ref = np.zeros((40, 60))
    for j in range(40):
        for i in range(60):
            ref[j, i] = seg.intersection(
                box(i * dx - dx / 2, j * dx - dx / 2, i * dx + dx / 2, j * dx + dx / 2)
            ).length
    got = r.energy.values * dx * dx / 2.5
    assert ref.sum() == pytest.approx(float(e.path_length_m[0]), rel=1e-12)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9 * ref.sum())
    # first arrival at a crossed node: the wavefront time there is (distance along the ray of
    # the foot of the node's perpendicular) / c (straight rays, plane wavefront normal). The kernel
    # extrapolates at most one step beyond a chord, so it is exact when a step spans the cell
    # (40 s = 8 cells) and within half a cell diagonal of travel (+ one step) otherwise.
    crossed = ref > 0
    jj, ii = np.nonzero(crossed)
    se, sn = math.sin(math.radians(az)), math.cos(math.radians(az))
    along = (ii * dx - x0) * se + (jj * dx - y0) * sn
    c = math.sqrt(GRAVITY * 4000.0)
    inside = (along > c * step_s) & (along < float(e.path_length_m[0]) - c * step_s)
    got_t = r.first_arrival_s.values[crossed][inside]
    exact_t = along[inside] / c
    assert inside.sum() > 10
    if step_s >= 40.0:
        np.testing.assert_allclose(got_t, exact_t, rtol=1e-9)
    else:
        assert np.max(np.abs(got_t - exact_t)) <= dx / math.sqrt(2.0) / c + step_s


def test_nan_hole_stops_ray_without_poisoning():
    h = np.full((60, 100), 4000.0)
    h[25:35, 50:55] = np.nan
    d = plane(h)
    r = trace_rays(d, [5e3, 5e3], [30e3, 10e3], [90.0, 90.0], max_time_s=1000.0)
    assert list(r.end.reason.values) == [REASON_CODES["land_or_nodata"], REASON_CODES["left_grid"]]
    assert float(r.end.x[0]) < 50e3
    assert np.isfinite(r.energy.values).all()
    assert r.energy.values.sum() > 0


def test_polar_rows_stop_with_reason():
    d = global_grid(dlon=2.0)
    r = trace_rays(d, [10.0], [80.0], [0.0], max_time_s=86400.0)
    assert int(r.end.reason[0]) == REASON_CODES["polar_limit"]
    # end state is the last point before the polar limit (default step here: 1 degree)
    assert 87.99 < float(r.end.y[0]) <= 89.0


def test_keep_paths_end_at_end_state():
    d = plane(np.full((60, 100), 4000.0))
    r = trace_rays(d, np.full(5, 5e3), np.linspace(10e3, 50e3, 5), 90.0, max_time_s=300.0, keep_paths=2)
    p = r.paths
    assert p.sizes["path"] == 2
    for k in range(2):
        n = int(p.n_points[k])
        i = int(p.ray[k])
        assert float(p.x[k, n - 1]) == pytest.approx(float(r.end.x[i]))
        assert float(p.time_s[k, n - 1]) == pytest.approx(float(r.end.time_s[i]))


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(x0=[-5e3]), "outside the grid"),
        (dict(x0=[95e3]), "on land"),
        (dict(x0=[]), "no rays"),
        (dict(weights=[np.nan]), "weights"),
        (dict(weights=[-1.0]), "weights"),
        (dict(stop_depth_m=5000.0), "stop_depth_m"),
        (dict(stop_depth_m=0.0), "stop_depth_m"),
        (dict(step_s=0.0), "step_s"),
        (dict(step_s=1e6), "step_s"),
        (dict(step_s=1e-6), "steps per ray"),
        (dict(max_time_s=-1.0), "max_time_s"),
        (dict(threads=0), "threads"),
        (dict(y0=[np.nan]), "not finite"),
        (dict(azimuth_deg=[1.0, 2.0]), "azimuth_deg"),
    ],
)
def test_bad_input_raises_ray_error(kwargs, match):
    h = np.full((40, 100), 4000.0)
    h[:, 90:] = -10.0
    d = plane(h)
    args = dict(x0=[5e3], y0=[20e3], azimuth_deg=[90.0])
    args.update({k: kwargs.pop(k) for k in list(kwargs) if k in args})
    with pytest.raises(RayError, match=match):
        trace_rays(d, args["x0"], args["y0"], args["azimuth_deg"], **kwargs)


def test_nan_launch_cell_raises():
    h = np.full((40, 100), 4000.0)
    h[18:23, 3:8] = np.nan
    with pytest.raises(RayError, match="no-data"):
        trace_rays(plane(h), [5e3], [20e3], [90.0])


@pytest.mark.realdata
def test_real_global_grid_point_source(etopo_path):
    # the 0.1-degree global relief (ETOPO1 resampled, ../shared/data/README.md), loaded with the
    # package loader: a point source in the open ocean; rays run to coasts within 24 h, cross the
    # longitude seam, and the maps stay finite. Long-wave speed over 4-5 km depth is ~700 km/h
    # (Berry 2007), so 24 h allows ~15,000-17,000 km of path.
    from tsunamifocus.io.bathymetry import load_bathymetry

    depth = load_bathymetry(etopo_path, values="elevation")
    n = 2000
    # source in the open South Atlantic, west of the 0/360 seam of the 0..360 grid
    r = trace_rays(
        depth,
        np.full(n, 350.0),
        np.full(n, -45.0),
        np.linspace(0, 360, n, endpoint=False),
        step_s=60.0,
        max_time_s=86400.0,
        keep_paths=50,
    )
    e = r.end
    assert r.stats["geometry"] == "sphere"
    assert (e.reason == REASON_CODES["coast"]).mean() > 0.8
    assert np.all(e.path_length_m < 86400.0 * 240.0)
    assert np.all(np.isfinite(r.energy.values))
    # at least one kept path passes the 0/360 seam (unwrapped longitude beyond 360 or below 0)
    px = r.paths.x.values
    assert np.nanmax(px) > 360.0 or np.nanmin(px) < 0.0
    ta = r.first_arrival_s.values
    assert np.nanmax(ta) <= 86400.0 and np.isfinite(ta).mean() > 0.05


def test_local_steps_keep_constant_depth_travel_times_and_refuse_bad_settings():
    # Local steps (max_step_s): in water of constant depth a ray is a straight line at c = sqrt(g h)
    # whatever its steps (analytic). A deep strip far from the ray sets the grid's fastest speed, so
    # the default step is half what the ray's own (4x shallower) water allows: it takes about half
    # as many steps. A fixed step together with local steps, or a non-positive cap, is a one-line
    # RayError (common practice, no source).
    x = np.arange(0.0, 200e3 + 1, 1e3)
    h = np.full((x.size, x.size), 2000.0)
    h[x > 180e3, :] = 8000.0
    d = make_grid(h, x, x, "EPSG:32631")
    r = trace_rays(d, [10e3], [100e3], [90.0], max_step_s=300.0, cells_per_step=3.0, max_time_s=600.0)
    c = math.sqrt(GRAVITY * 2000.0)
    assert float(r.end["x"].values[0]) == pytest.approx(10e3 + c * 600.0, rel=1e-6)
    assert r.stats["max_step_s"] == 300.0
    assert r.stats["n_steps"] <= 0.55 * 600.0 / r.stats["step_s"]
    with pytest.raises(RayError, match="give a fixed step or local steps"):
        trace_rays(d, [10e3], [100e3], [90.0], step_s=5.0, max_step_s=10.0)
    with pytest.raises(RayError, match="max_step_s = -1"):
        trace_rays(d, [10e3], [100e3], [90.0], max_step_s=-1)
