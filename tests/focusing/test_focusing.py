"""Tests of tsunamifocus.focusing: energy maps, lensing, arrivals, rankings, bookkeeping.

The ray runs are small (<= 150 x 300 cells of 1 km, a few thousand rays) so the whole module
runs in well under a minute once the ray kernel is compiled.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import integrate

from tsunamifocus.focusing.analysis import analyse_focusing
from tsunamifocus.focusing.arrivals import REASON_COAST, segment_arrivals
from tsunamifocus.focusing.branches import branch_diagnostics
from tsunamifocus.focusing.budget import energy_budget
from tsunamifocus.focusing.energy import distance_to_launch_m, fresnel_sigma_m, point_source_energy_width, ratio_map, regularised_energy
from tsunamifocus.focusing.randommedium import fluctuation_statistics, predicted_focusing_distance, riccati_caustic_constant, riccati_caustic_quantile
from tsunamifocus.focusing.ranking import rank_segments
from tsunamifocus.ocean.reference import flat_depth, reference_depth
from tsunamifocus.ocean.smooth import smooth_field
from tsunamifocus.coast.coastline import coastline_from_grid
from tsunamifocus.coast.segments import segment_coastline
from tsunamifocus.constants import GRAVITY, RHO_SEAWATER
from tsunamifocus.errors import CoastError, HealthCheckError, InputError, ResolutionWarning
from tsunamifocus.grid import make_grid
from tsunamifocus.ocean.randomfield import gaussian_random_field
from tsunamifocus.propagation.rays import trace_rays

CRS = "EPSG:32631"
DX = 1000.0
E_SRC = 1.0e15  # J
T = 600.0  # s, dominant period used for amplitudes


def shelf(ny_km=100.0, nx_km=150.0, h0=1000.0, x_toe=100e3, x_land=140e3, extra=None):
    """Flat deep ocean h0, then a straight linear slope from x_toe to the shoreline x_land."""
    x = np.arange(0.0, nx_km * 1e3 + 1, DX)
    y = np.arange(0.0, ny_km * 1e3 + 1, DX)
    X, Y = np.meshgrid(x, y)
    h = np.full(X.shape, h0)
    if extra is not None:
        h = extra(X, Y, h)
    h = np.where(X < x_toe, h, h0 * (x_land - X) / (x_land - x_toe))
    return make_grid(h, x, y, CRS)


def plane_wave(depth, n, y_lo, y_hi, az=90.0, x0=5000.0, energy=E_SRC, **kw):
    """n rays evenly spaced on x = x0 between y_lo and y_hi (mid-point rule), equal weights."""
    y0 = y_lo + (np.arange(n) + 0.5) * (y_hi - y_lo) / n
    return trace_rays(depth, np.full(n, x0), y0, az, weights=np.full(n, energy / n), q0=1.0, p0=0.0, **kw)


# --------------------------------------------------------------------------------------
# smoothing operator
# --------------------------------------------------------------------------------------
def test_smooth_field_keeps_constants_and_has_the_stated_width():
    # Normalised convolution of a constant is that constant (definition); a point value
    # spreads into a Gaussian whose second moment is sigma^2 (Gaussian kernel definition).
    x = np.arange(0.0, 100e3 + 1, DX)
    g = make_grid(np.zeros((x.size, x.size)), x, x, CRS)
    mask = np.ones(g.shape, bool)
    mask[:, :10] = False  # "land" strip
    const = g.copy(data=np.full(g.shape, 3.0))
    out = smooth_field(const, 7000.0, mask=mask)
    np.testing.assert_allclose(out.values[mask], 3.0, rtol=1e-12)
    assert np.all(np.isnan(out.values[~mask]))
    delta = np.zeros(g.shape)
    delta[50, 50] = 1.0
    s = smooth_field(g.copy(data=delta), 6000.0).values
    X, Y = np.meshgrid(x, x)
    var_x = np.sum(s * (X - 50e3) ** 2) / s.sum()
    assert math.sqrt(var_x) == pytest.approx(6000.0, rel=0.02)


def test_smooth_field_on_lonlat_uses_metres():
    # On a lon/lat grid at 60 deg N a degree of longitude is cos(60) = 1/2 of a degree of
    # latitude (spherical geometry): a 50 km kernel must have the same width in metres both ways.
    lon = np.arange(0.0, 20.0 + 1e-9, 0.05)
    lat = np.arange(55.0, 65.0 + 1e-9, 0.05)
    g = make_grid(np.zeros((lat.size, lon.size)), lon, lat, "EPSG:4326")
    delta = np.zeros(g.shape)
    j, i = 100, 200  # 60 N, 10 E
    delta[j, i] = 1.0
    s = smooth_field(g.copy(data=delta), 50_000.0).values
    k = math.pi / 180 * 6371008.8
    sx = math.sqrt(np.sum(s[j] * ((lon - 10.0) * k * math.cos(math.radians(60.0))) ** 2) / s[j].sum())
    sy = math.sqrt(np.sum(s[:, i] * ((lat - 60.0) * k) ** 2) / s[:, i].sum())
    assert sx == pytest.approx(50_000.0, rel=0.03)
    assert sy == pytest.approx(50_000.0, rel=0.03)


def test_fresnel_width_formula():
    # sigma = sqrt(lambda L)/2, lambda = sqrt(g h) T: first Fresnel zone radius at mid-path
    # (Born & Wolf, Principles of Optics, ch. 8: r1 = sqrt(lambda d1 d2 / (d1 + d2))).
    d = shelf()
    dist = distance_to_launch_m(d, np.array([0.0]), np.array([50e3]))
    sig = fresnel_sigma_m(d, 600.0, dist)
    lam = math.sqrt(GRAVITY * 1000.0) * 600.0
    L = math.hypot(50e3, 0.0)
    assert float(sig.sel(x=50e3, y=50e3)) == pytest.approx(0.5 * math.sqrt(lam * L), rel=1e-12)
    with pytest.raises(InputError, match="period_s"):
        fresnel_sigma_m(d, 0.0, dist)


# --------------------------------------------------------------------------------------
# plane waves on straight coasts (analytic)
# --------------------------------------------------------------------------------------
def test_flat_shelf_normal_incidence_uniform_and_lensing_one():
    # Normal incidence on straight parallel contours: rays stay straight (symmetry), so every
    # metre of coast receives E / W (analytic). Sampling: 1000 rays over W = 100 km are 100 m
    # apart, a 10 km segment gets 100 +- 1 rays -> energy per m within 1 %.
    d = shelf()
    W = 100e3
    real = plane_wave(d, 1000, 0.0, W)
    ref_d = reference_depth(d, 20.0)
    ref = plane_wave(ref_d, 1000, 0.0, W)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    tab = segment_arrivals(seg, real, d, period_s=T, ref_result=ref)
    assert len(tab) == 10
    # the default caustic regularisation (two coastal wavelengths, 2 x 8.4 km here) renormalises
    # footprints cut by the ends of the 100 km line (docs/focusing.md, "Bookkeeping"): the two
    # segments at each end are off by up to 5 %, the interior is exact
    np.testing.assert_allclose(tab["energy_per_m"].iloc[2:-2], E_SRC / W, rtol=0.01)
    exact = segment_arrivals(seg, real, d, period_s=T, ref_result=ref, min_width_factor=0.0)
    np.testing.assert_allclose(exact["energy_per_m"], E_SRC / W, rtol=0.01)
    # lensing factor 1 (same straight rays over the y-invariant reference), inside its interval
    np.testing.assert_allclose(tab["lensing_factor"], 1.0, rtol=0.02)
    assert np.all(tab["lensing_lo"] < 1.0) and np.all(tab["lensing_hi"] > 1.0)
    # incidence: head-on; arrival direction = travel direction east (90 deg)
    np.testing.assert_allclose(tab["incidence_deg"], 0.0, atol=1e-6)
    np.testing.assert_allclose(tab["arrival_azimuth_deg"], 90.0, atol=1e-6)
    # amplitude: a plane wave of amplitude a0 in depth h0 carries E_w = rho g a0^2 / 2 * c0 T
    # per unit crest width; Green's law (Green 1838) then predicts a = a0 (h0 / h)^(1/4).
    c0 = math.sqrt(GRAVITY * 1000.0)
    a0 = math.sqrt(2 * (E_SRC / W) / (RHO_SEAWATER * GRAVITY * c0 * T))
    np.testing.assert_allclose(exact["amp_stop_m"], a0 * (1000.0 / 20.0) ** 0.25, rtol=0.01)
    np.testing.assert_allclose(exact["amp_1m_m"], a0 * 1000.0**0.25, rtol=0.01)
    np.testing.assert_allclose(tab["amp_stop_m"].iloc[2:-2], a0 * (1000.0 / 20.0) ** 0.25, rtol=0.01)
    assert np.all(tab["amp_lo"] <= tab["amp_1m_m"]) and np.all(tab["amp_hi"] >= tab["amp_1m_m"])
    assert tab["reliable"].all()
    assert "SCREENING" in tab.attrs["cautions"].upper()
    # first arrival: straight path of 134.2 km, 95 km at c0 then the slope with c = sqrt(g h(x))
    # -> t = 95e3 / c0 + int dx / sqrt(g h0 (140e3 - x)/40e3)  (analytic integral)
    xs = float(tab["x_mid"].iloc[0])
    t_slope = 2 * math.sqrt(40e3 / (GRAVITY * 1000.0)) * (math.sqrt(40e3) - math.sqrt(140e3 - xs))
    assert tab["first_arrival_s"].iloc[0] == pytest.approx(95e3 / c0 + t_slope, rel=0.01)


def test_oblique_plane_wave_follows_snell():
    # Straight parallel contours, wave launched at theta0 = 30 deg from the coast normal.
    # Translation invariance along the coast keeps the along-coast ray spacing dy: the energy per
    # metre of coast is w / dy = E_w0 cos(theta0), E_w0 = energy per unit crest width at launch.
    # The crest width of a ray tube grows as cos(theta) (Snell: sin(theta)/c = const), so the
    # energy per crest width at the coast is E_w0 cos(theta0)/cos(theta_c) - the refraction
    # coefficient K_r = sqrt(cos theta0 / cos theta) of coastal engineering (e.g. Dean &
    # Dalrymple 1991, Water Wave Mechanics for Engineers and Scientists, ch. 4; value from memory).
    th0 = 30.0
    d = shelf(ny_km=250.0)
    W = 150e3
    n = 3000
    real = plane_wave(d, n, 0.0, W, az=90.0 - th0)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    tab = segment_arrivals(seg, real, d, period_s=T)
    mid = tab[(tab["y_mid"] > 90e3) & (tab["y_mid"] < 200e3)]
    assert len(mid) >= 10
    ew0 = E_SRC / (W * math.cos(math.radians(th0)))
    np.testing.assert_allclose(mid["energy_per_m"], ew0 * math.cos(math.radians(th0)), rtol=0.01)
    # Snell with the speeds the rays actually see at launch and end (ray parameter conserved)
    end = real.end
    coast = end["reason"].values == REASON_COAST
    c_launch = math.sqrt(GRAVITY * 1000.0)
    c_end = float(np.median(end["c_end"].values[coast]))
    th_c = math.degrees(math.asin(math.sin(math.radians(th0)) * c_end / c_launch))
    np.testing.assert_allclose(mid["incidence_deg"], th_c, atol=0.05)
    # amplitude: Green's law x refraction coefficient
    c0 = c_launch
    a0 = math.sqrt(2 * ew0 / (RHO_SEAWATER * GRAVITY * c0 * T))
    k_r = math.sqrt(math.cos(math.radians(th0)) / math.cos(math.radians(th_c)))
    np.testing.assert_allclose(mid["amp_stop_m"], a0 * (1000.0 / 20.0) ** 0.25 * k_r, rtol=0.01)
    # segments the fan does not reach carry no rays and are not ranked
    empty = tab[tab["n_rays"] == 0]
    assert len(empty) > 0 and not empty["reliable"].any() and empty["rank_amplitude"].isna().all()


# --------------------------------------------------------------------------------------
# circular shoal: a lens
# --------------------------------------------------------------------------------------
A_SHOAL, S_SHOAL, XC, YC, H0 = 0.2, 10e3, 40e3, 100e3, 1000.0


def _shoal_depth():
    def bump(X, Y, h):
        return H0 * (1 - A_SHOAL * np.exp(-((X - XC) ** 2 + (Y - YC) ** 2) / (2 * S_SHOAL**2)))

    return shelf(ny_km=200.0, nx_km=130.0, x_toe=100e3, x_land=125e3, extra=bump)


def _focus_solve_ivp(b=50.0, x_start=2000.0):
    """Independent reference: integrate the ray ODE in the analytic field with scipy.

    dx/dt = c cos(th), dy/dt = c sin(th), dth/dt = sin(th) c_x - cos(th) c_y (ray equations for
    the heading th of an isotropic medium, e.g. Cerveny 2001, Seismic Ray Theory, ch. 3), with
    c = sqrt(g h) and h the analytic Gaussian shoal. A ray launched parallel to the axis at
    offset b -> 0 crosses the axis at the paraxial focus.
    """
    g = GRAVITY

    def rhs(_t, s):
        x, y, th = s
        e = math.exp(-((x - XC) ** 2 + (y - YC) ** 2) / (2 * S_SHOAL**2))
        h = H0 * (1 - A_SHOAL * e)
        c = math.sqrt(g * h)
        hx = H0 * A_SHOAL * e * (x - XC) / S_SHOAL**2
        hy = H0 * A_SHOAL * e * (y - YC) / S_SHOAL**2
        cx, cy = g * hx / (2 * c), g * hy / (2 * c)
        return [c * math.cos(th), c * math.sin(th), math.sin(th) * cx - math.cos(th) * cy]

    def cross(_t, s):
        return s[1] - YC

    cross.terminal = True
    cross.direction = -1
    sol = integrate.solve_ivp(rhs, [0, 5000], [x_start, YC + b, 0.0], events=cross, rtol=1e-10, atol=1e-8)
    return float(sol.y_events[0][0][0])


def _focus_thin_lens():
    """Paraxial thin-lens estimate: deflection angle alpha(b) = -int du/dy dx for n = 1 - u
    (paraxial ray equation y'' = -u_y), so f = 1 / int u_yy(x, 0) dx with u = c/c0 - 1."""
    def u(x, y):
        return math.sqrt(1 - A_SHOAL * math.exp(-(x * x + y * y) / (2 * S_SHOAL**2))) - 1

    def uyy(x, e=1.0):
        return (u(x, e) - 2 * u(x, 0.0) + u(x, -e)) / e**2

    val, _ = integrate.quad(uyy, -8 * S_SHOAL, 8 * S_SHOAL, limit=200)
    return XC + 1.0 / val


@pytest.fixture(scope="module")
def shoal_runs():
    d = _shoal_depth()
    real = plane_wave(d, 4000, 0.0, 200e3, x0=2000.0)
    ref = plane_wave(reference_depth(d, 30.0), 4000, 0.0, 200e3, x0=2000.0)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 5e3, d)
    tab = segment_arrivals(seg, real, d, period_s=T, ref_result=ref)
    return d, real, ref, tab


def test_shoal_focuses_on_the_coast_behind_it(shoal_runs):
    d, real, ref, tab = shoal_runs
    top = tab.sort_values("energy_per_m", ascending=False).iloc[0]
    assert abs(top["y_mid"] - YC) <= 5e3  # the segment containing / touching the axis
    best = tab[tab["rank_lensing"] == 1].iloc[0]
    assert abs(best["y_mid"] - YC) <= 5e3
    # significant focusing, not sampling noise: with exact tubes the bootstrap interval of the
    # axis segments is 1.91-2.73; the default caustic footprint (two coastal wavelengths, 17 km,
    # over 5 km segments) spreads the focus onto its neighbours and the interval is 1.47-1.79
    assert best["lensing_lo"] > 1.3
    seg = segment_coastline(coastline_from_grid(d, 20.0), 5e3, d)
    exact = segment_arrivals(seg, real, d, period_s=T, ref_result=ref, min_width_factor=0.0)
    best0 = exact.sort_values("lensing_factor", ascending=False).iloc[0]
    assert abs(best0["y_mid"] - YC) <= 5e3 and best0["lensing_lo"] > 1.5
    assert best["caustics_mean"] > 0  # rays arrive after passing the cusp
    ranking = rank_segments(tab, top_k=3)
    assert abs(ranking["y_mid"].iloc[0] - YC) <= 5e3
    assert ranking["reliable"].iloc[:3].all()


def test_shoal_caustic_at_ray_optics_focus(shoal_runs):
    # The cusp of the caustic is the paraxial focus: rays launched close to the axis reach
    # q = 0 (first caustic) there. Compare with the scipy ray-ODE reference within one cell.
    _, real, _, _ = shoal_runs
    end = real.end
    near = np.abs(end["launch_y"].values - YC) < 300.0
    x_caustic = 2000.0 + end["first_caustic_m"].values[near]
    x_ref = _focus_solve_ivp()
    assert np.all(np.isfinite(x_caustic))
    assert abs(float(np.min(x_caustic)) - x_ref) < DX
    # the thin-lens approximation (lens thickness neglected) agrees within two cells here
    assert abs(_focus_thin_lens() - x_ref) < 2 * DX


def test_regularised_maps_on_the_shoal(shoal_runs):
    # Period 20 s: lambda = sqrt(g h) T ~ 2 km, well below the 10 km shoal (ray regime; the
    # Fresnel kernel at the focus is ~6 km). A 600 s wave (lambda ~ 59 km > shoal) cannot be
    # focused by it: the regularisation must then wipe the ray-theory focus out.
    d, real, ref, _ = shoal_runs
    dist = distance_to_launch_m(d, real.end["launch_x"].values, real.end["launch_y"].values)
    sig = fresnel_sigma_m(d, 20.0, dist)
    sea = np.isfinite(d.values) & (d.values > 0)
    e = regularised_energy(real.energy, sig, sea)
    er = regularised_energy(ref.energy, sig, sea)
    lens = ratio_map(e, er, "lensing_factor", "test")
    sig_long = fresnel_sigma_m(d, 600.0, dist)
    lens_long = ratio_map(regularised_energy(real.energy, sig_long, sea),
                            regularised_energy(ref.energy, sig_long, sea), "lensing_factor", "test")
    assert float(lens_long.sel(x=80e3, y=YC)) < 1.1
    # the raw ray density at the cusp is larger than after regularisation (caustic kept finite)
    j = int(np.argmin(np.abs(d.y.values - YC)))
    assert float(np.nanmax(real.energy.values[j])) > float(np.nanmax(e.values[j]))
    # upstream of the shoal nothing is focused: lensing factor 1 (same straight rays)
    np.testing.assert_allclose(lens.sel(x=slice(5e3, 15e3)).values, 1.0, rtol=0.03)
    # behind the lens on the axis energy is concentrated: lensing factor > 1
    assert float(lens.sel(x=80e3, y=YC)) > 1.5
    assert e.attrs["units"] == "J m-1" and "caution" in e.attrs


# --------------------------------------------------------------------------------------
# constant-depth baseline (focusing factor reference)
# --------------------------------------------------------------------------------------
def test_flat_run_matches_point_source_spreading():
    # Isotropic point source on a constant-depth ocean: energy per unit wavefront width
    # E / (2 pi r) (energy conservation on circles; analytic). Ring averages at r = 20-40 km.
    d = flat_depth(shelf())
    n = 7200
    az = (np.arange(n) + 0.5) * 360.0 / n
    r = trace_rays(d, np.full(n, 75e3), np.full(n, 50e3), az, weights=np.full(n, E_SRC / n))
    X, Y = np.meshgrid(d.x.values, d.y.values)
    R = np.hypot(X - 75e3, Y - 50e3)
    for r0 in (20e3, 30e3, 40e3):
        ring = np.abs(R - r0) < 1500.0
        got = float(np.mean(r.energy.values[ring]))
        assert got == pytest.approx(float(point_source_energy_width(E_SRC, r0)), rel=0.03)
    # spherical version: circumference 2 pi R sin(r/R) (spherical geometry)
    Re = 6371008.8
    assert point_source_energy_width(1.0, Re * math.pi / 2, Re) == pytest.approx(1 / (2 * math.pi * Re))


# --------------------------------------------------------------------------------------
# energy bookkeeping
# --------------------------------------------------------------------------------------
def test_energy_bookkeeping_within_one_percent():
    # Rays end on the coast, at the grid edge, in a no-data hole and on the time limit; every
    # joule of the source is accounted for (conservation; the engine carries weights unchanged).
    def hole(X, Y, h):
        return np.where((np.abs(X - 60e3) < 5e3) & (np.abs(Y - 80e3) < 5e3), np.nan, h)

    d = shelf(extra=hole)
    n = 1440
    az = (np.arange(n) + 0.5) * 360.0 / n
    r = trace_rays(d, np.full(n, 40e3), np.full(n, 50e3), az, weights=np.full(n, E_SRC / n), max_time_s=1350.0)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    tab = segment_arrivals(seg, r, d, period_s=T)
    b = energy_budget(r, tab, source_energy_J=E_SRC)
    for k in ("segments_J", "left_grid_J", "land_or_nodata_J", "time_limit_J"):
        assert b[k] > 0, k
    assert b["relative_error"] < 0.01 and b["ok"]
    assert b["segments_J"] == pytest.approx(tab["energy_J"].sum())
    coast = r.end["reason"].values == REASON_COAST
    assert b["segments_J"] + b["coast_unassigned_J"] == pytest.approx(r.end["weight"].values[coast].sum())
    # a wrong source energy (5 % more than was traced) is caught
    with pytest.raises(HealthCheckError, match="bookkeeping"):
        energy_budget(r, tab, source_energy_J=1.05 * E_SRC, check=True)


# --------------------------------------------------------------------------------------
# random focusing (Kaplan 2002; Degueldre et al. 2016)
# --------------------------------------------------------------------------------------
def test_random_focusing_distance_matches_kaplan_scaling():
    # Seeded random bathymetry h = h0 (1 + 0.06 g), g unit-rms Gaussian-correlated (l = 5 km).
    # Prediction: L = tau (3 sqrt(2 pi))^(-1/3) l eps_c^(-2/3) (derivation in
    # predicted_focusing_distance; scaling of Kaplan 2002 PRL 89 184103 and Degueldre et al.
    # 2016 Nature Physics 12, 259), with eps_c, l MEASURED from the grid.
    eps, ell, h0 = 0.06, 5000.0, 3000.0
    x = np.arange(0.0, 300e3 + 1, DX)
    y = np.arange(0.0, 150e3 + 1, DX)
    n = 3000
    profiles, fcs, stats = [], [], []
    for seed in range(4):
        g = gaussian_random_field((y.size, x.size), DX, ell, rms=1.0, seed=seed)
        d = make_grid(h0 * (1 + eps * g), x, y, CRS)
        st = fluctuation_statistics(d, 5 * ell / 1e3)
        stats.append(st)
        r = plane_wave(d, n, 0.0, 150e3, x0=1000.0)
        diag = branch_diagnostics(r, d, fluctuations=st, bin_m=10e3)
        profiles.append(diag["scintillation_profile"]["scintillation"].to_numpy())
        fcs.append(np.where(np.isfinite(r.end["first_caustic_m"].values), r.end["first_caustic_m"].values, np.inf))
    # measured statistics agree with the generator: eps_speed ~ eps/2 (c ~ sqrt(h)), l ~ 5 km
    eps_c = np.mean([s["eps_speed"] for s in stats])
    ell_m = np.mean([s["corr_length_m"] for s in stats])
    assert eps_c == pytest.approx(eps / 2, rel=0.1)
    assert ell_m == pytest.approx(ell, rel=0.15)
    pred = predicted_focusing_distance(eps_c, ell_m)
    # 1) median distance to the first caustic of the traced rays (censored rays count as beyond)
    med = float(np.median(np.concatenate(fcs)))
    assert med == pytest.approx(pred, rel=0.25)
    # 2) strongest focusing: peak of the ensemble-mean scintillation index vs distance
    m = min(len(p) for p in profiles)
    prof = np.mean([p[:m] for p in profiles], axis=0)
    dist = diag["scintillation_profile"]["distance_m"].to_numpy()[:m]
    peak = float(dist[int(np.argmax(prof))])
    assert pred / 2 <= peak <= 2 * pred
    assert diag["scintillation_index"] > 0.1  # branched flow: strong intensity fluctuations


def test_riccati_constants_against_simulation():
    # tau0 from quadrature vs the mean of a direct Euler-Maruyama simulation of
    # r' = -r^2 + xi (independent numerical route; Kulkarny & White 1982 set-up).
    tau0 = riccati_caustic_constant()
    rng = np.random.default_rng(7)
    n, dt = 4000, 2e-3
    r = np.zeros(n)
    t_hit = np.full(n, np.nan)
    alive = np.ones(n, bool)
    t = 0.0
    while alive.any() and t < 60.0:
        ra = r[alive]
        ra += -ra * ra * dt + math.sqrt(dt) * rng.standard_normal(ra.size)
        t += dt
        gone = ra < -1 / math.sqrt(dt)
        idx = np.flatnonzero(alive)
        t_hit[idx[gone]] = t
        r[alive] = ra
        alive[idx[gone]] = False
    done = np.isfinite(t_hit)
    assert done.mean() > 0.97
    # survivors at t = 60 add a small tail; compare medians robustly and means loosely
    assert float(np.median(np.where(done, t_hit, np.inf))) == pytest.approx(riccati_caustic_quantile(0.5), rel=0.05)
    assert float(np.mean(t_hit[done])) == pytest.approx(tau0, rel=0.15)


# --------------------------------------------------------------------------------------
# rankings and bad input
# --------------------------------------------------------------------------------------
def test_three_ray_hotspot_is_not_ranked_first():
    # Dense fan on the southern 40 km plus three heavy rays further north: the northern segment
    # has the largest amplitude but only 3 rays, so it is flagged and listed after the ranked ones.
    # (The fan stops 34 km short of the heavy rays: more than four of its caustic-regularised
    # footprints' standard deviations, 2 x 8.4 km / sqrt(2 pi) at the 20 m coast.)
    d = shelf()
    n = 1000
    y0 = np.concatenate([(np.arange(n) + 0.5) * 40e3 / n, [74e3, 75e3, 76e3]])
    w = np.concatenate([np.full(n, E_SRC / n), np.full(3, 0.2 * E_SRC)])
    r = trace_rays(d, np.full(y0.size, 5000.0), y0, 90.0, weights=w, q0=1.0, p0=0.0)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    tab = segment_arrivals(seg, r, d, period_s=T)
    hot = tab.loc[tab["amp_1m_m"].idxmax()]
    assert hot["n_rays"] == 3 and not hot["reliable"] and hot["rank_amplitude"] is pd_na()
    ranking = rank_segments(tab, top_k=3, by="amplitude")
    assert ranking["reliable"].iloc[:3].all()
    assert list(ranking["rank_amplitude"].iloc[:3]) == [1, 2, 3]
    assert ranking.iloc[-1]["segment_id"] == hot["segment_id"] and not ranking.iloc[-1]["reliable"]


def test_amplitude_is_ranked_where_only_the_reference_run_is_sparse():
    # The amplitude depends on the real run alone, the lensing factor on the reference run too
    # (definitions of the two columns): a coast covered by many real tubes but by fewer than
    # min_rays reference tubes is ranked by amplitude and not by lensing factor. 400 real rays
    # over 100 km against 6 reference rays 17 km apart (each 10 km segment then lies within the
    # footprints of at most 3 reference tubes: fewer than the 10 a ranking needs).
    d = shelf()
    real = plane_wave(d, 400, 0.0, 100e3)
    ref = plane_wave(d, 6, 0.0, 100e3)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResolutionWarning)  # "no segment covered in both runs": the point
        tab = segment_arrivals(seg, real, d, period_s=T, ref_result=ref)
    inner = (tab["y_mid"] > 15e3) & (tab["y_mid"] < 85e3)  # away from the fan's ends
    assert inner.sum() >= 5
    assert tab.loc[inner, "amp_reliable"].all() and not tab["reliable"].any()
    assert tab.loc[inner, "rank_amplitude"].notna().all() and tab["rank_lensing"].isna().all()
    assert np.isfinite(tab.loc[inner, "lensing_factor"]).all()  # kept as a value, not ranked
    with warnings.catch_warnings():
        warnings.simplefilter("error", ResolutionWarning)  # ranked segments exist: no warning
        by_amp = rank_segments(tab, top_k=3, by="amplitude")
    assert list(by_amp["rank_amplitude"].iloc[:3]) == [1, 2, 3] and by_amp["amp_reliable"].iloc[:3].all()
    with pytest.warns(ResolutionWarning, match="no reliable segment"):
        by_lens = rank_segments(tab, top_k=3, by="lensing")
    assert by_lens["rank_lensing"].isna().all()


def pd_na():
    import pandas as pd

    return pd.NA


def test_bootstrap_is_seeded_and_deterministic(shoal_runs):
    d, real, ref, tab = shoal_runs
    seg = tab[["segment_id", "name", "length_m", "x_mid", "y_mid", "lon_mid", "lat_mid",
               "normal_azimuth_deg", "geometry"]]
    again = segment_arrivals(seg, real, d, period_s=T, ref_result=ref)
    np.testing.assert_array_equal(again["lensing_lo"], tab["lensing_lo"])
    other = segment_arrivals(seg, real, d, period_s=T, ref_result=ref, seed=99)
    assert not np.array_equal(other["lensing_lo"].to_numpy(), tab["lensing_lo"].to_numpy())


def test_no_ray_reaches_the_stop_isobath():
    # all rays launched westward leave the grid: a clear error, never an empty ranking
    d = shelf()
    r = plane_wave(d, 200, 10e3, 90e3, az=270.0, x0=50e3)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    with pytest.raises(CoastError, match="no ray reached the stop isobath"):
        segment_arrivals(seg, r, d, period_s=T)


def test_too_few_rays_warns_and_rank_needs_data():
    d = shelf()
    # 4 rays 25 km apart: each 10 km segment lies within the footprint of at most 3 ray tubes,
    # fewer than the 10 that make a segment reliable (common practice, no source)
    r = plane_wave(d, 4, 0.0, 100e3)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    with pytest.warns(ResolutionWarning, match="unreliable"):
        tab = segment_arrivals(seg, r, d, period_s=T)
    assert not tab["reliable"].any()
    with pytest.warns(ResolutionWarning, match="no reliable segment"):
        ranking = rank_segments(tab, top_k=5, by="amplitude")
    assert len(ranking) == 5 and not ranking["reliable"].any() and ranking["rank_amplitude"].isna().all()
    # lensing ranking without a reference run: nothing to rank
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResolutionWarning)
        with pytest.raises(CoastError, match="no segment has a finite lensing_factor"):
            rank_segments(tab, by="lensing")
    with pytest.raises(InputError, match="by='height'"):
        rank_segments(tab, by="height")


def test_rays_far_from_a_partial_coastline_are_not_assigned():
    # a coastline file covering only the southern 30 km: rays ending further north stay
    # unassigned (counted in the budget) instead of piling onto the last segment
    from shapely.geometry import LineString

    d = shelf()
    r = plane_wave(d, 1000, 0.0, 100e3)
    line = LineString([(139.2e3, 0.0), (139.2e3, 30e3)])
    seg = segment_coastline([line], 10e3, d)
    # min_width_factor=0: exact ray tubes, no wavelength-wide regularisation (which would smear
    # energy over a wavelength, 8 km here, around the end of the partial line)
    with pytest.warns(ResolutionWarning, match="max_distance_m"):
        tab = segment_arrivals(seg, r, d, period_s=T, min_width_factor=0.0)
    # the last segment gets the rays within max_distance_m (3 cells) beyond its end: 13 km worth
    np.testing.assert_allclose(tab["energy_per_m"].iloc[:2], E_SRC / 100e3, rtol=0.01)
    assert tab["energy_per_m"].iloc[2] == pytest.approx(1.3 * E_SRC / 100e3, rel=0.01)
    b = energy_budget(r, tab)
    assert b["coast_unassigned_J"] == pytest.approx(0.67 * E_SRC, rel=0.01)


def test_coverage_warnings_fire_only_when_true():
    # The same partial coastline file. (1) Energy reaching the coast north of the file's stretch is
    # another coast, not energy missing from this one: with coast_area = the file's stretch no
    # warning. (2) A reference run identical to the real run (the low-pass moved nothing) must not
    # be blamed on the low-pass, whatever the coastline covers. (3) True case: the coastline lies
    # 14 km seaward of where the rays end (north of y = 6 km), beyond max_distance_m = 5 km: only rays
    # with y < 11 km are assigned, 25 of the 36 km of coast in the area are off: the warning fires.
    from shapely.geometry import LineString

    d = shelf()
    r = plane_wave(d, 1000, 0.0, 100e3)
    line = LineString([(139.2e3, 0.0), (139.2e3, 30e3)])
    seg = segment_coastline([line], 10e3, d)
    with warnings.catch_warnings(record=True) as got:
        warnings.simplefilter("always")
        # exact ray tubes (min_width_factor=0): no smearing around the end of the partial line
        tab = segment_arrivals(seg, r, d, period_s=T, ref_result=r, coast_area=lambda x, y: y <= 36e3,
                               min_width_factor=0.0)
    assert not [w for w in got if issubclass(w.category, ResolutionWarning)], [str(w.message) for w in got]
    assert tab["energy_per_m"].iloc[0] == pytest.approx(E_SRC / 100e3, rel=0.01)
    assert tab.attrs["energy_area_coast_J"] == pytest.approx(0.36 * E_SRC, rel=0.02)
    with warnings.catch_warnings(record=True) as got:
        warnings.simplefilter("always")
        segment_arrivals(seg, r, d, period_s=T, ref_result=r)
    msgs = [str(w.message) for w in got if issubclass(w.category, ResolutionWarning)]
    assert not any("low-pass" in m for m in msgs), msgs  # (2)
    assert any("max_distance_m" in m for m in msgs)  # whole grid as the coast of interest: 64 % off
    off = segment_coastline([LineString([(139.2e3, 0.0), (139.2e3, 6e3)]),
                             LineString([(125.2e3, 6e3), (125.2e3, 30e3)])], 6e3, d)
    with pytest.warns(ResolutionWarning, match=r"69 % of the energy reaching the stop isobath on the coast of"):
        segment_arrivals(off, r, d, period_s=T, max_distance_m=5e3, coast_area=lambda x, y: y <= 36e3)


# --------------------------------------------------------------------------------------
# one-call analysis
# --------------------------------------------------------------------------------------
def test_analyse_focusing_end_to_end():
    d = _shoal_depth()
    n = 3000
    y0 = (np.arange(n) + 0.5) * 200e3 / n
    fan = (np.full(n, 2000.0), y0, np.full(n, 90.0), np.full(n, E_SRC / n))
    res = analyse_focusing(d, fan, period_s=20.0, reference_smooth_km=30.0, segment_length_m=5e3,
                             trace_kwargs={"q0": 1.0, "p0": 0.0})
    assert res.energy.attrs["units"] == "J m-1"
    assert res.lensing_factor.name == "lensing_factor" and res.focusing_factor.name == "focusing_factor"
    assert abs(res.ranking["y_mid"].iloc[0] - YC) <= 5e3
    assert res.budget["ok"]
    assert isinstance(res.diagnostics["message"], str) and "km" in res.diagnostics["message"]
    assert np.nanmax(res.travel_time_min.values) > 0
    # behind the shoal the focusing factor vs the constant-depth ocean exceeds 1
    assert float(res.focusing_factor.sel(x=80e3, y=YC)) > 1.5


def test_rotated_fans_traced_together_give_the_mean_of_the_fans():
    # K rotated copies of a point-source fan traced together, each tube as wide as its own copy's
    # launch step (K pooled steps) and each ray carrying 1/K of its energy, deposit on the coast
    # exactly the mean of the K fans traced one by one (the deposit is linear in the rays:
    # definition of the averaged estimator, tsunamifocus.source.rayfan.make_ray_fan).
    from types import SimpleNamespace

    d = shelf()
    n, k = 720, 4
    width = 360.0 / n
    fans = [(np.full(n, 30e3), np.full(n, 50e3), (np.arange(n) + 0.5) * width + j * width / k,
             np.full(n, E_SRC / n)) for j in range(k)]
    kw = dict(period_s=T, reference_smooth_km=30.0, segment_length_m=5e3, n_boot=0, min_rays=35)
    singles = [analyse_focusing(d, f, **kw).segments for f in fans]
    pooled_fan = SimpleNamespace(x0=np.concatenate([f[0] for f in fans]), y0=np.concatenate([f[1] for f in fans]),
                                 azimuth_deg=np.concatenate([f[2] for f in fans]),
                                 weights=np.concatenate([f[3] / k for f in fans]), energy_J=E_SRC, rotations=k)
    pooled = analyse_focusing(d, pooled_fan, **kw).segments
    assert pooled.attrs["rotations"] == k
    for col in ("energy_per_m", "ref_energy_per_m", "energy_J"):
        mean = sum(s[col].to_numpy(float) for s in singles) / k
        assert np.nanmax(mean) > 0
        np.testing.assert_allclose(pooled[col].to_numpy(float), mean, rtol=1e-9, atol=1e-12 * np.nanmax(mean))
    # a segment counts as reliable with min_rays tubes per rotation, not per pooled fan (here 23-48
    # tubes per fan: some segments on either side of min_rays = 35)
    n_tubes = sum(s["n_rays"].to_numpy(float) for s in singles)
    np.testing.assert_array_equal(pooled["n_rays"].to_numpy(float), n_tubes)
    enough = n_tubes >= 35 * k
    assert enough.any() and not enough.all()
    np.testing.assert_array_equal(pooled["amp_reliable"].to_numpy(bool), enough & ~pooled["shadow"].to_numpy(bool))


def test_lonlat_grid_arrivals_use_geodesic_lengths():
    # The flat-shelf case on a lon/lat grid at the equator: rays launched due east from a
    # meridian follow great circles, which stay within 1e-4 deg of their parallel over 1.3 deg
    # near the equator (spherical geometry), so each metre of coast (geodesic) gets E / W with
    # W the geodesic length of the launch line (R * dlat on the sphere).
    R = 6371008.8
    lon = np.arange(0.0, 1.5 + 1e-9, 0.01)
    lat = np.arange(-0.6, 0.6 + 1e-9, 0.01)
    LON, _ = np.meshgrid(lon, lat)
    h = np.where(LON < 1.0, 1000.0, 1000.0 * (1.4 - LON) / 0.4)
    d = make_grid(h, lon, lat, "EPSG:4326")
    n = 1000
    y0 = -0.5 + (np.arange(n) + 0.5) * 1.0 / n
    r = trace_rays(d, np.full(n, 0.05), y0, 90.0, weights=np.full(n, E_SRC / n), q0=1.0, p0=0.0)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    tab = segment_arrivals(seg, r, d, period_s=T)
    inner = tab[np.abs(tab["lat_mid"]) < 0.4]
    W = R * math.radians(1.0)
    assert len(inner) >= 8
    np.testing.assert_allclose(inner["energy_per_m"], E_SRC / W, rtol=0.02)
    np.testing.assert_allclose(inner["normal_azimuth_deg"], 270.0, atol=0.5)
    b = energy_budget(r, tab, source_energy_J=E_SRC)
    assert b["ok"]


@pytest.mark.realdata
def test_real_relief_arrivals_and_budget(etopo_path):
    # Real open relief (ETOPO1 at 0.1 deg, see shared/data/README.md), a lon/lat box of the
    # western Pacific with a point source in deep water. Checks against outside references:
    # segment lengths sum to the pyproj geodesic length of the contour lines (reference
    # library), and the energy bookkeeping closes within 1 % (conservation).
    from pyproj import Geod

    from tsunamifocus.io.bathymetry import load_bathymetry

    d = load_bathymetry(etopo_path, values="elevation", bbox=(138.0, 30.0, 150.0, 42.0))
    lines = coastline_from_grid(d, 20.0)
    seg = segment_coastline(lines, 20e3, d)
    geod = Geod(a=6371008.8, b=6371008.8)
    total = sum(geod.line_length(*np.asarray(ln.coords).T) for ln in lines)
    assert seg["length_m"].sum() == pytest.approx(total, rel=1e-9)
    n = 1440
    az = (np.arange(n) + 0.5) * 360.0 / n
    r = trace_rays(d, np.full(n, 147.0), np.full(n, 35.0), az, weights=np.full(n, E_SRC / n))
    tab = segment_arrivals(seg, r, d, period_s=900.0)
    b = energy_budget(r, tab, source_energy_J=E_SRC, check=True)
    assert b["segments_J"] > 0.1 * E_SRC
    ranking = rank_segments(tab, top_k=5, by="amplitude")
    assert ranking["reliable"].iloc[0] and ranking["rank_amplitude"].iloc[0] == 1
    # c ~ sqrt(h): the relative speed fluctuation is smaller than the relative depth one
    st = fluctuation_statistics(d, 50.0)
    assert 0 < st["eps_speed"] < st["eps_depth"]


def test_shoreline_inshore_of_the_stop_isobath_is_reached():
    # A shoreline file at the 0 m line (x = 140 km) with a 200 m stop isobath 8 km offshore
    # (h = 1000 (140 km - x) / 40 km): the default assignment distance follows the offset, so
    # all energy lands on the segments and each metre of coast gets E / W (normal incidence).
    from shapely.geometry import LineString

    d = shelf()
    r = plane_wave(d, 1000, 0.0, 100e3, stop_depth_m=200.0)
    seg = segment_coastline([LineString([(140e3, 0.0), (140e3, 100e3)])], 10e3, d)
    # exact ray tubes (no regularisation over the 26 km wavelength at 200 m, which would bias the
    # segments within a wavelength of the coast's two ends, see docs/focusing.md)
    tab = segment_arrivals(seg, r, d, period_s=T, min_width_factor=0.0)
    assert tab.attrs["max_distance_m"] == pytest.approx(3 * DX + 1.5 * 8000.0, rel=0.01)
    np.testing.assert_allclose(tab["energy_per_m"], E_SRC / 100e3, rtol=0.01)
    np.testing.assert_allclose(tab["h_stop_m"], 200.0, rtol=1e-6)


def test_segment_fresnel_width():
    # sqrt(c_stop T L)/2 with c_stop = sqrt(g 20 m) and L = distance from the launch line
    # (plane wave launched on x = 5 km, coast contour at x = 139.2 km): Fresnel zone definition.
    d = shelf()
    r = plane_wave(d, 500, 0.0, 100e3)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    tab = segment_arrivals(seg, r, d, period_s=T)
    expected = 0.5 * math.sqrt(math.sqrt(GRAVITY * 20.0) * T * (139.2e3 - 5e3))
    np.testing.assert_allclose(tab["fresnel_sigma_m"], expected, rtol=1e-3)
    assert energy_budget(r, tab)["coast_unassigned_J"] == 0.0


def test_distance_to_launch_points_is_the_great_circle_distance_to_the_nearest():
    # On a lon/lat grid the distance map is the great-circle distance to the nearest launch point,
    # as pyproj's geodesic on the same sphere gives it (pyproj.Geod, a = b = the grid's radius),
    # both for a few launch points (a direct minimum over them) and for many (a search tree).
    from pyproj import Geod

    from tsunamifocus.grid import GridInfo

    lon = np.arange(140.0, 160.0 + 1e-9, 0.5)
    lat = np.arange(20.0, 45.0 + 1e-9, 0.5)
    d = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326")
    geod = Geod(a=GridInfo.from_dataarray(d).radius_m, b=GridInfo.from_dataarray(d).radius_m)
    rng = np.random.default_rng(5)
    for n in (3, 200):
        lx, ly = rng.uniform(145.0, 150.0, n), rng.uniform(30.0, 35.0, n)
        dist = distance_to_launch_m(d, lx, ly)
        for j, i in ((0, 0), (10, 31), (50, 40), (25, 12)):
            _, _, g = geod.inv(np.full(n, lon[i]), np.full(n, lat[j]), lx, ly)
            assert float(dist.values[j, i]) == pytest.approx(float(np.min(g)), rel=1e-6)


def test_correlation_length_found_beyond_the_first_lags_equals_the_short_search(monkeypatch):
    # A Gaussian-correlated field C(r) = exp(-r^2 / (2 l^2)) (l = 6 cells) falls to exp(-1/2) at
    # r = l (definition of l; tsunamifocus.ocean.randomfield convention). The correlation length is
    # first sought among the first lags; when the search is made to start too short (2 cells), the
    # search over all lags must find the same l.
    import tsunamifocus.focusing.randommedium as rm

    x = np.arange(0.0, 200e3 + 1, DX)
    g = gaussian_random_field((x.size, x.size), DX, 6 * DX, rms=1.0, seed=3)
    d = make_grid(3000.0 * (1 + 0.05 * g), x, x, CRS)
    short = fluctuation_statistics(d, 40.0)["corr_length_m"]
    monkeypatch.setattr(rm, "_FIRST_LAG_CELLS", 2)
    full = fluctuation_statistics(d, 40.0)["corr_length_m"]
    assert short == pytest.approx(6 * DX, rel=0.2)
    assert full == pytest.approx(short, rel=1e-9)
