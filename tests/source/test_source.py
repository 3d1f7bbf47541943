"""Tests of tsunamifocus.source: segments, scaling, uplift on grids, energy, ray fan, summary."""

from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np
import pytest
from pyproj import Geod
from scipy import integrate
from scipy.special import erf

from tsunamifocus.constants import GRAVITY, RHO_SEAWATER
from tsunamifocus.errors import ScalingWarning, SourceError, SourceWarning
from tsunamifocus.grid import make_grid
from tsunamifocus.source.okada import okada85
from tsunamifocus.source.faults import FaultSegment, PointSource, Rupture, magnitude_from_moment, moment_from_magnitude, strasser2010_interface
from tsunamifocus.source.rayfan import make_ray_fan
from tsunamifocus.source.energy import LAND_SHARE_WARNING, land_share, potential_energy
from tsunamifocus.source.summary import summarize_source
from tsunamifocus.source.uplift import uplift_on_grid

UTM = "EPSG:32610"


def flat_grid(half_km=400.0, cell_km=4.0, depth_m=4000.0, crs=UTM, x0=500e3, y0=4000e3):
    """Projected grid centred on (x0, y0) with constant depth."""
    h = half_km * 1e3
    x = x0 + np.arange(-h, h + 1.0, cell_km * 1e3)
    y = y0 + np.arange(-h, h + 1.0, cell_km * 1e3)
    return make_grid(np.full((y.size, x.size), depth_m), x, y, crs)


def utm_segment(x0=500e3, y0=4000e3, half_len_km=100.0, **kw):
    """A north-striking segment (dips east) whose top edge is centred at (x0, y0)."""
    args = dict(top_depth_km=5.0, dip_deg=15.0, width_km=80.0, rake_deg=90.0, slip_m=5.0, trace_crs=UTM)
    args.update(kw)
    return FaultSegment(trace=((x0, y0 - half_len_km * 1e3), (x0, y0 + half_len_km * 1e3)), **args)


# --------------------------------------------------------------------------- moment & scaling


def test_hanks_kanamori_round_trip():
    # Hanks & Kanamori (1979): Mw = (2/3)(log10 M0 - 9.1), M0 in N m.
    mw = np.array([6.5, 7.3, 8.0, 8.8, 9.5])
    np.testing.assert_allclose(magnitude_from_moment(moment_from_magnitude(mw)), mw, atol=1e-12)
    assert magnitude_from_moment(1.0e21) == pytest.approx((2.0 / 3.0) * (21.0 - 9.1), abs=1e-12)


def test_mw9_moment():
    # A Mw 9.0 earthquake has M0 ~ 4e22 N m (common practice, no source).
    assert moment_from_magnitude(9.0) == pytest.approx(4.0e22, rel=0.01)


def test_strasser_interface_mw9():
    # Strasser et al. (2010) interface relation at Mw 9.0: L ~ 614 km, W ~ 189 km
    # (values from memory, also listed in public rupture-scaling test suites).
    L, W = strasser2010_interface(9.0)
    assert L == pytest.approx(614.0, rel=0.005)
    assert W == pytest.approx(189.0, rel=0.005)


def test_slip_from_magnitude_gives_moment_back():
    # M0 = mu A D (definition of seismic moment) with the segment's own geometry.
    seg = FaultSegment(trace=((140.0, 35.0), (141.0, 37.0)), top_depth_km=5.0, dip_deg=15.0, magnitude=8.4)
    assert seg.width_km == pytest.approx(strasser2010_interface(8.4)[1])
    m0 = seg.rigidity_pa * seg.length_km * 1e3 * seg.width_km * 1e3 * seg.slip_m
    assert magnitude_from_moment(m0) == pytest.approx(8.4, abs=1e-9)
    # geodesic length from pyproj (reference library)
    assert seg.length_km == pytest.approx(Geod(ellps="WGS84").inv(140.0, 35.0, 141.0, 37.0)[2] / 1e3)


def test_scaling_warning():
    # Strasser et al. (2010): a Mw 9 rupture 60 km long is far (> x2) from the interface relation.
    with pytest.warns(ScalingWarning, match="Strasser") as record:
        FaultSegment(trace=((140.0, 35.0), (140.0, 35.54)), top_depth_km=5, dip_deg=12, width_km=150, magnitude=9.0)
    assert any(issubclass(w.category, ScalingWarning) for w in record)
    with warnings.catch_warnings():
        warnings.simplefilter("error", ScalingWarning)
        FaultSegment.from_magnitude(140.0, 35.0, 20.0, 9.0, top_depth_km=5.0, dip_deg=12.0)


def test_rupture_shares_moment_among_segments():
    # Hanks & Kanamori (1979) total moment; segments with a given slip keep it.
    a = utm_segment(y0=4000e3 - 100e3, slip_m=4.0)
    b = utm_segment(y0=4000e3 + 100e3, slip_m=None)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        r = Rupture([a, b], magnitude=8.6)
    assert r.mw == pytest.approx(8.6, abs=1e-9)
    assert r.slips_m[0] == 4.0
    assert r.slips_m[1] == pytest.approx((moment_from_magnitude(8.6) - a.moment_nm()) / (a.rigidity_pa * b.area_m2))


# --------------------------------------------------------------------------- uplift


def test_uplift_matches_okada_in_its_frame():
    # Okada (1985) frame: x along strike from the lower-edge start, y = W cos(dip) at the top
    # edge, fault dipping toward -y. A north-striking trace dips east, so Okada x = N - N1 and
    # y = -(E - E1) + W cos(dip) (hand-derived change of frame).
    d = flat_grid()
    seg = utm_segment()
    eta = uplift_on_grid(seg, d)
    E, N = np.meshgrid(d.x.values, d.y.values)
    W = 80e3
    dip = 15.0
    xo = N - (4000e3 - 100e3)
    yo = -(E - 500e3) + W * math.cos(math.radians(dip))
    _, _, uz = okada85(xo, yo, 5e3 + W * math.sin(math.radians(dip)), dip, 200e3, W, 0.0, 5.0, 0.0)
    inside = np.hypot(E - 500e3, N - 4000e3) < 300e3
    np.testing.assert_allclose(eta.values[inside], uz[inside], atol=1e-9)
    assert eta.attrs["units"] == "m"


def test_thrust_uplifts_hanging_wall():
    # Elastic rebound of a thrust (common practice, no source): uplift above the hanging wall,
    # i.e. on the dip side (right of strike = east here) within the fault's surface projection.
    d = flat_grid(cell_km=2.0, half_km=250.0)
    eta = uplift_on_grid(utm_segment(), d)
    j, i = np.unravel_index(np.argmax(eta.values), eta.shape)
    xe = d.x.values[i] - 500e3
    assert 0.0 <= xe <= 80e3 * math.cos(math.radians(15.0))
    # subsidence lies further down-dip (east) than the uplift peak
    jm, im = np.unravel_index(np.argmin(eta.values), eta.shape)
    assert d.x.values[im] - 500e3 > xe


def test_rotation_invariance():
    # Rotating the fault rotates the uplift field (isotropic half-space, Okada 1985): the field
    # of a 50-degree-strike fault at P equals that of the north-striking fault at P rotated back,
    # evaluated directly in Okada's frame (see test_uplift_matches_okada_in_its_frame).
    d = flat_grid(cell_km=5.0)
    th = math.radians(50.0)
    c, s = 500e3, 4000e3
    p1 = (c + (-100e3) * math.sin(th), s + (-100e3) * math.cos(th))
    p2 = (c + 100e3 * math.sin(th), s + 100e3 * math.cos(th))
    rot = FaultSegment(trace=(p1, p2), top_depth_km=5.0, dip_deg=15.0, width_km=80.0, rake_deg=90.0, slip_m=5.0,
                       trace_crs=UTM)
    assert rot.strike_deg == pytest.approx(50.0)
    eta_r = uplift_on_grid(rot, d)
    E, N = np.meshgrid(d.x.values - c, d.y.values - s)
    Eb = E * math.cos(th) - N * math.sin(th)  # azimuth alpha -> alpha - 50 degrees
    Nb = E * math.sin(th) + N * math.cos(th)
    W, dip = 80e3, 15.0
    _, _, uz = okada85(Nb + 100e3, -Eb + W * math.cos(math.radians(dip)), 5e3 + W * math.sin(math.radians(dip)),
                       dip, 200e3, W, 0.0, 5.0, 0.0)
    m = np.hypot(E, N) < 250e3
    np.testing.assert_allclose(eta_r.values[m], uz[m], atol=1e-8)


def test_uplift_linear_in_slip_and_superposition():
    # Okada (1985) is linear in slip; segments superpose (linear elasticity).
    d = flat_grid(cell_km=8.0)
    e1 = uplift_on_grid(utm_segment(slip_m=2.0), d).values
    e2 = uplift_on_grid(utm_segment(slip_m=6.0), d).values
    np.testing.assert_allclose(e2, 3.0 * e1, rtol=1e-10, atol=1e-12)
    a = utm_segment(y0=3950e3, half_len_km=50.0, slip_m=3.0)
    b = utm_segment(y0=4050e3, half_len_km=50.0, slip_m=7.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        both = uplift_on_grid(Rupture([a, b]), d).values
        sep = uplift_on_grid(Rupture([a]), d).values + uplift_on_grid(Rupture([b]), d).values
    np.testing.assert_allclose(both, sep, atol=1e-12)


def test_geographic_grid_agrees_with_projected():
    # The same fault on a lon/lat grid (local azimuthal equidistant frame, pyproj) and on a
    # UTM grid (pyproj) must give the same peak uplift and energy (to grid-sampling accuracy).
    lon = np.arange(-125.0, -119.0 + 1e-9, 0.02)
    lat = np.arange(33.0, 39.0 + 1e-9, 0.02)
    geo = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326")
    seg_g = FaultSegment(trace=((-122.0, 35.0), (-122.0, 36.5)), top_depth_km=5.0, dip_deg=20.0, width_km=60.0,
                         slip_m=4.0)
    eg = uplift_on_grid(seg_g, geo)
    from pyproj import Transformer

    t = Transformer.from_crs("EPSG:4326", UTM, always_xy=True)
    (x1, x2), (y1, y2) = t.transform([-122.0, -122.0], [35.0, 36.5])
    seg_p = FaultSegment(trace=((x1, y1), (x2, y2)), top_depth_km=5.0, dip_deg=20.0, width_km=60.0, slip_m=4.0,
                         trace_crs=UTM)
    d = flat_grid(cell_km=2.0, half_km=350.0, x0=float(x1), y0=float(0.5 * (y1 + y2)))
    ep = uplift_on_grid(seg_p, d)
    assert float(eg.max()) == pytest.approx(float(ep.max()), rel=0.02)
    assert float(eg.min()) == pytest.approx(float(ep.min()), rel=0.03)
    assert potential_energy(eg, geo) == pytest.approx(potential_energy(ep, d), rel=0.02)
    # the same trace given in lon/lat on the UTM grid (converted with pyproj, always_xy)
    el = uplift_on_grid(FaultSegment(trace=((-122.0, 35.0), (-122.0, 36.5)), top_depth_km=5.0, dip_deg=20.0,
                                     width_km=60.0, slip_m=4.0), d)
    # (identical inside; the window radius uses the geodesic length, so the far taper differs a hair)
    np.testing.assert_allclose(el.values, ep.values, atol=1e-5 * float(ep.max()))


def test_window_taper_has_no_step():
    # Beyond window_km the field is zero, and it reaches zero smoothly (cos^2 taper): next to
    # the edge it is a small fraction of the untapered Okada value there.
    d = flat_grid(cell_km=4.0)
    full = uplift_on_grid(utm_segment(), d, window_km=1000.0).values
    cut = uplift_on_grid(utm_segment(), d, window_km=200.0).values
    E, N = np.meshgrid(d.x.values - 500e3, d.y.values - 4000e3)
    r = np.hypot(E, N)
    assert np.all(cut[r >= 200e3] == 0.0)
    np.testing.assert_array_equal(cut[r < 150e3], full[r < 150e3])
    ring = (r >= 150e3) & (r < 200e3)
    w = np.sin(0.5 * np.pi * (200e3 - r[ring]) / 50e3) ** 2  # the stated cos^2 taper
    np.testing.assert_allclose(cut[ring], w * full[ring], atol=1e-12)
    edge = (r > 195e3) & (r < 200e3)
    assert np.max(np.abs(cut[edge])) < 0.025 * np.max(np.abs(full[edge]))


def _hump_energy(amp, radius_m):
    # E = 1/2 rho g int eta^2 dA for eta = A cos^2(pi r / 2R), r < R; closed form of
    # int_0^1 cos^4(pi u / 2) u du = 3/16 - 1/pi^2 (hand integration).
    return 0.5 * RHO_SEAWATER * GRAVITY * amp**2 * 2 * math.pi * radius_m**2 * (3.0 / 16.0 - 1.0 / math.pi**2)


def test_point_source_energy_projected_and_geographic():
    d = flat_grid(cell_km=2.0, half_km=200.0)
    ps = PointSource(500e3, 4000e3, radius_km=60.0, amplitude_m=2.0, crs=UTM)
    eta = uplift_on_grid(ps, d)
    assert float(eta.max()) == pytest.approx(2.0, rel=1e-3)
    assert potential_energy(eta, d) == pytest.approx(_hump_energy(2.0, 60e3), rel=0.005)
    lon = np.arange(10.0, 14.0, 0.01)
    lat = np.arange(48.0, 52.0, 0.01)
    g = make_grid(np.full((lat.size, lon.size), 3000.0), lon, lat, "EPSG:4326")
    eg = uplift_on_grid(PointSource(12.0, 50.0, radius_km=60.0, amplitude_m=2.0), g)
    # areas from GridInfo.cell_area_m2 (sphere) vs local metric distance on the ellipsoid: 1 %
    assert potential_energy(eg, g) == pytest.approx(_hump_energy(2.0, 60e3), rel=0.01)


def test_energy_only_over_sea():
    # E integrates over the sea only (land cells carry no water).
    d = flat_grid(cell_km=2.0, half_km=200.0)
    vals = d.values.copy()
    vals[:, d.x.values > 500e3] = -50.0  # land east of the centre line
    dl = d.copy(data=vals)
    ps = PointSource(500e3, 4000e3, radius_km=60.0, amplitude_m=1.0, crs=UTM)
    e_full = potential_energy(uplift_on_grid(ps, d), d)
    e_half = potential_energy(uplift_on_grid(ps, dl), dl)
    # exactly the western half plus the centre column
    assert 0.45 * e_full < e_half < 0.55 * e_full


def test_land_share_of_a_hump_on_the_coastline():
    # A cos^2 hump centred on a straight coastline (land east of its centre column): by symmetry
    # the land holds half of integral eta^2 dA less half of the centre column's share. Column
    # share from the closed forms: int cos^4(pi |y| / 2R) dy over (-R, R) = 3R/4 (hand
    # integration), times the 2 km column width, over the hump's 2 pi R^2 (3/16 - 1/pi^2).
    d = flat_grid(cell_km=2.0, half_km=200.0)
    vals = d.values.copy()
    vals[:, d.x.values > 500e3] = -50.0
    dl = d.copy(data=vals)
    R = 60e3
    ps = PointSource(500e3, 4000e3, radius_km=R / 1e3, amplitude_m=1.0, crs=UTM)
    column = 2e3 * 0.75 * R / (2 * math.pi * R**2 * (3.0 / 16.0 - 1.0 / math.pi**2))
    eta = uplift_on_grid(ps, dl)
    share = land_share(eta, dl)
    assert share == pytest.approx(0.5 * (1.0 - column), abs=0.005)
    # the complement is exactly the sea's share of the potential energy
    assert share == pytest.approx(1.0 - potential_energy(eta, dl) / potential_energy(eta, d), rel=1e-12)
    assert land_share(uplift_on_grid(ps, d), d) == 0.0


def test_fault_under_the_coast_warns():
    # A thrust whose trace lies on the coastline and dips under land puts most of its uplift on
    # land (the hanging wall): the summary says how much and warns once; the same fault with
    # sea all around does not.
    d = flat_grid(cell_km=4.0)
    vals = d.values.copy()
    vals[:, d.x.values > 502e3] = -100.0
    dl = d.copy(data=vals)
    seg = utm_segment(x0=500e3, name="under the coast")
    eta = uplift_on_grid(seg, dl)
    with pytest.warns(SourceWarning, match="on land or no-data cells"):
        s = summarize_source(seg, eta, dl)
    assert s.land_share > 0.5
    assert s.land_share == pytest.approx(land_share(eta, dl))
    assert s.land_note is not None and "trench" in s.land_note
    assert "on land, left out" in str(s)
    assert s.to_dict()["land_share"] == pytest.approx(s.land_share)
    with warnings.catch_warnings():
        warnings.simplefilter("error", SourceWarning)
        s0 = summarize_source(seg, uplift_on_grid(seg, d), d)
    assert s0.land_share == 0.0 and s0.land_note is None
    # a share just above the threshold is reported, one just below is not
    for share, reported in ((LAND_SHARE_WARNING + 0.01, True), (LAND_SHARE_WARNING - 0.01, False)):
        assert (dataclasses.replace(s, land_share=share).land_note is not None) is reported


def test_thrust_dipping_toward_deeper_water_warns():
    # A subduction interface dips under the over-riding plate, whose sea floor is shallower than
    # the incoming plate's (common practice, no source). On a sea floor deepening eastward
    # (1000 m at the trace line x = 500 km, +10 m per km), a north-striking thrust dips east (to
    # the right of south -> north), toward deeper water: warned, naming the trace. The same
    # points in the other order dip west, toward shallower water: silent; so is a strike-slip
    # fault and a steep one.
    d = flat_grid(cell_km=4.0)
    X = np.broadcast_to(d.x.values[None, :], d.shape)
    dl = d.copy(data=1000.0 + 0.01 * (X - 500e3))
    with pytest.warns(SourceWarning, match="dips toward deeper water"):
        eta = uplift_on_grid(utm_segment(), dl)
    # the finding stays with the initial surface, for the run summary and the appendix
    s = summarize_source(utm_segment(), eta, dl)
    assert len(s.notes) == 1 and "dips toward deeper water" in s.notes[0] and "(500000.0, 3900000.0)" in s.notes[0]
    reverse = FaultSegment(trace=((500e3, 4100e3), (500e3, 3900e3)), top_depth_km=5.0, dip_deg=15.0, width_km=80.0,
                           rake_deg=90.0, slip_m=5.0, trace_crs=UTM)
    with warnings.catch_warnings():
        warnings.simplefilter("error", SourceWarning)
        uplift_on_grid(reverse, dl)
        uplift_on_grid(utm_segment(rake_deg=0.0), dl)
        uplift_on_grid(utm_segment(dip_deg=75.0), dl)
        uplift_on_grid(utm_segment(), d)  # flat sea floor


def test_kajiura_filter_volume_and_peak():
    # Kajiura (1963): 1/cosh(k h) is 1 at k = 0 (volume kept) and damps short waves; the peak of
    # a hump of radius comparable to the depth drops, computed independently by the Hankel
    # transform (scipy quad): eta_s(0) = int_0^inf F(k) / cosh(k h) k dk / (2 pi),
    # F(k) = 2 pi int_0^R eta(r) J0(k r) r dr.
    from scipy.special import j0

    h, R, A = 4000.0, 10e3, 1.0
    d = flat_grid(cell_km=0.5, half_km=40.0, depth_m=h)
    ps = PointSource(500e3, 4000e3, radius_km=R / 1e3, amplitude_m=A, crs=UTM)
    raw = uplift_on_grid(ps, d).values
    filt = uplift_on_grid(ps, d, kajiura=True).values
    assert filt.sum() == pytest.approx(raw.sum(), rel=1e-6)

    def F(k):
        return 2 * math.pi * integrate.quad(lambda r: A * math.cos(0.5 * math.pi * r / R) ** 2 * j0(k * r) * r,
                                            0.0, R, limit=200)[0]

    peak = integrate.quad(lambda k: F(k) / math.cosh(k * h) * k, 0.0, 40.0 / h, limit=200)[0] / (2 * math.pi)
    assert 0.5 < peak < 0.95  # the filter matters at this size
    assert float(filt.max()) == pytest.approx(peak, rel=0.01)
    # land keeps its ground displacement; only the sea surface is filtered
    vals = d.values.copy()
    land = d.x.values[None, :] + 0 * d.y.values[:, None] > 505e3
    vals[land] = -10.0
    dl = d.copy(data=vals)
    raw_l = uplift_on_grid(ps, dl).values
    filt_l = uplift_on_grid(ps, dl, kajiura=True).values
    np.testing.assert_array_equal(filt_l[land], raw_l[land])
    assert np.max(np.abs(filt_l[~land] - raw_l[~land])) > 0.05


def test_tanioka_satake_horizontal_term():
    # Tanioka & Satake (1996): eta_h = u_E dh/dE + u_N dh/dN. On flat bathymetry it vanishes;
    # on a uniform eastward slope s it adds s * u_E, u_E from okada85 in Okada's frame.
    d = flat_grid(cell_km=4.0, half_km=200.0)
    seg = utm_segment()
    np.testing.assert_allclose(uplift_on_grid(seg, d, horizontal=True).values, uplift_on_grid(seg, d).values,
                               atol=1e-12)
    slope = 0.02
    E, N = np.meshgrid(d.x.values, d.y.values)
    ds = d.copy(data=2000.0 + slope * (E - E.min()))
    diff = uplift_on_grid(seg, ds, horizontal=True).values - uplift_on_grid(seg, ds).values
    W = 80e3
    xo = N - (4000e3 - 100e3)
    yo = -(E - 500e3) + W * math.cos(math.radians(15.0))
    _, uy, _ = okada85(xo, yo, 5e3 + W * math.sin(math.radians(15.0)), 15.0, 200e3, W, 0.0, 5.0, 0.0)
    uE = -uy  # strike north: Okada y points west
    inner = (slice(2, -2), slice(2, -2))
    np.testing.assert_allclose(diff[inner], slope * uE[inner], atol=1e-9)


# --------------------------------------------------------------------------- bad input


def test_bad_segments():
    tr = ((140.0, 35.0), (141.0, 36.0))
    base = dict(top_depth_km=5.0, dip_deg=15.0, width_km=50.0, slip_m=3.0)
    with pytest.raises(SourceError, match="zero length"):
        FaultSegment(trace=((140.0, 35.0), (140.0, 35.0)), **base)
    for dip in (0.0, -10.0, 95.0):
        with pytest.raises(SourceError, match="dip_deg"):
            FaultSegment(trace=tr, **{**base, "dip_deg": dip})
    with pytest.raises(SourceError, match="width_km"):
        FaultSegment(trace=tr, **{**base, "width_km": -5.0})
    with pytest.raises(SourceError, match="slip_m"):
        FaultSegment(trace=tr, **{**base, "slip_m": -1.0})
    with pytest.raises(SourceError, match="top_depth_km"):
        FaultSegment(trace=tr, **{**base, "top_depth_km": -1.0})
    with pytest.raises(SourceError, match="dip_deg must be a number"):
        FaultSegment(trace=tr, **{**base, "dip_deg": "steep"})
    with pytest.raises(SourceError, match="trace must be"):
        FaultSegment(trace=(140.0, 35.0), **base)
    with pytest.raises(SourceError, match="radius_km"):
        PointSource(140.0, 35.0, radius_km=0.0)
    for mw in (5.9, 9.8):
        with pytest.raises(SourceError, match="force=True"):
            FaultSegment(trace=tr, top_depth_km=5.0, dip_deg=15.0, magnitude=mw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        seg = FaultSegment(trace=tr, top_depth_km=5.0, dip_deg=15.0, magnitude=6.0, force=True)
    assert seg.slip_m > 0
    with pytest.raises(SourceError, match="force=True"):
        # slip on a small fault: computed Mw below the sane range
        Rupture([FaultSegment(trace=((140.0, 35.0), (140.05, 35.0)), top_depth_km=5.0, dip_deg=30.0,
                              width_km=3.0, slip_m=0.1)])


def test_bad_placement():
    d = flat_grid()
    with pytest.raises(SourceError, match="outside the grid"):
        uplift_on_grid(utm_segment(x0=2000e3), d)
    vals = d.values.copy()
    vals[:, d.x.values < 560e3] = -100.0  # land under the whole trace at x = 500 km
    with pytest.raises(SourceError, match="on land"):
        uplift_on_grid(utm_segment(), d.copy(data=vals))
    with pytest.raises(SourceError, match="on land"):
        uplift_on_grid(PointSource(500e3, 4000e3, radius_km=20.0, crs=UTM), d.copy(data=vals))
    with pytest.raises(SourceError, match="FaultSegment, Rupture or PointSource"):
        uplift_on_grid("Mw 9", d)  # type: ignore[arg-type]


# --------------------------------------------------------------------------- ray fan


def _erf_rectangle(d, L, W, s, strike_deg, amp=1.0):
    """Uniform L x W rectangle convolved with a Gaussian of std s, long axis along strike."""
    E, N = np.meshgrid(d.x.values - 500e3, d.y.values - 4000e3)
    th = math.radians(strike_deg)
    u = E * math.sin(th) + N * math.cos(th)
    v = E * math.cos(th) - N * math.sin(th)
    r2 = math.sqrt(2.0) * s
    return d.copy(data=amp / 4 * (erf((u + L / 2) / r2) - erf((u - L / 2) / r2))
                  * (erf((v + W / 2) / r2) - erf((v - W / 2) / r2)))


def _expected_ratio(L, W, s):
    # Far-field angular spectrum (linear long waves): P(theta) = int |F(k, theta)|^2 k dk with
    # |F|^2 ~ sinc^2(k_u L / 2) sinc^2(k_v W / 2) exp(-k^2 s^2) for the smoothed rectangle.
    def P(theta):
        cu, cv = math.cos(theta), math.sin(theta)

        def f(k):
            a = k * cu * L / 2
            b = k * cv * W / 2
            sa = math.sin(a) / a if a != 0 else 1.0
            sb = math.sin(b) / b if b != 0 else 1.0
            return sa * sa * sb * sb * math.exp(-k * k * s * s) * k

        return integrate.quad(f, 0.0, 8.0 / s, limit=2000)[0]

    return P(math.pi / 2) / P(0.0)


@pytest.mark.parametrize("strike", [0.0, 60.0])
def test_beaming_matches_angular_spectrum(strike):
    d = flat_grid(cell_km=5.0, half_km=500.0)
    L, W, s = 300e3, 60e3, 15e3
    eta = _erf_rectangle(d, L, W, s, strike)
    # one launch point per side: the fan's 360 rays then sample 360 azimuths, 1 degree apart
    fan = make_ray_fan(eta, d, 360, seed=None, threshold=0.3, blocks=1)
    az, w = fan.azimuth_deg, fan.weights
    # maximum perpendicular to strike (either way)
    amax = az[np.argmax(w)]
    assert min(abs(((amax - strike - 90.0) + 180.0) % 360.0 - 180.0),
               abs(((amax - strike + 90.0) + 180.0) % 360.0 - 180.0)) <= 1.0
    perp = w[np.argmin(np.abs(((az - (strike + 90.0)) + 180.0) % 360.0 - 180.0))]
    along = w[np.argmin(np.abs(((az - strike) + 180.0) % 360.0 - 180.0))]
    assert perp / along == pytest.approx(_expected_ratio(L, W, s), rel=0.05)
    # fine pattern sums to one and is symmetric under theta -> theta + 180 (real eta)
    assert fan.pattern.sum() == pytest.approx(1.0)
    h = fan.pattern.size // 2
    np.testing.assert_allclose(fan.pattern[:h], fan.pattern[h:], rtol=1e-6, atol=1e-12)
    # strike recovered from the eta^2 distribution (principal axis), modulo 180
    assert abs(((fan.strike_deg - strike) + 90.0) % 180.0 - 90.0) < 0.5


def test_gaussian_beaming_closed_form():
    # Elliptic Gaussian hump: |F|^2 ~ exp(-k^2 (a^2 cos^2 + b^2 sin^2)), so
    # P(theta) ~ 1 / (a^2 cos^2 theta + b^2 sin^2 theta) and P(perp)/P(along) = (a/b)^2
    # (hand integration of the angular-spectrum integral).
    d = flat_grid(cell_km=4.0, half_km=400.0)
    E, N = np.meshgrid(d.x.values - 500e3, d.y.values - 4000e3)
    a, b = 60e3, 20e3  # along north, across
    eta = d.copy(data=np.exp(-(N**2) / (2 * a * a) - E**2 / (2 * b * b)))
    fan = make_ray_fan(eta, d, 180, seed=None, blocks=1)  # 180 azimuths, 2 degrees apart
    az, w = fan.azimuth_deg, fan.weights
    along = w[np.argmin(np.abs(((az - 0.0) + 180) % 360 - 180))]
    perp = w[np.argmin(np.abs(((az - 90.0) + 180) % 360 - 180))]
    # bins are 2 degrees wide: compare bin averages of the closed form
    def P(t):
        return 1.0 / (a * a * math.cos(t) ** 2 + b * b * math.sin(t) ** 2)

    half = math.radians(1.0)
    exp = integrate.quad(P, math.pi / 2 - half, math.pi / 2 + half)[0] / integrate.quad(P, -half, half)[0]
    assert perp / along == pytest.approx(exp, rel=0.02)


def test_fan_weights_sum_to_energy_and_launch_on_sea():
    d = flat_grid(cell_km=4.0)
    vals = d.values.copy()
    vals[:, d.x.values > 560e3] = -20.0  # coast east of the rupture
    dl = d.copy(data=vals)
    seg = utm_segment(half_len_km=150.0)
    eta = uplift_on_grid(seg, dl)
    fan = make_ray_fan(eta, dl, 240, seed=11)  # strike from eta.attrs, set by uplift_on_grid
    assert fan.strike_deg == pytest.approx(0.0, abs=1e-9)
    E = potential_energy(eta, dl)
    assert fan.energy_J == E
    assert fan.weights.sum() == pytest.approx(E, rel=1e-12)
    assert np.all(fan.weights >= 0)
    # launch points on sea cells inside the significant region
    ii = np.rint((fan.x0 - d.x.values[0]) / 4e3).astype(int)
    jj = np.rint((fan.y0 - d.y.values[0]) / 4e3).astype(int)
    assert np.all(vals[jj, ii] > 0)
    assert np.all(np.abs(eta.values[jj, ii]) >= 0.1 * np.abs(np.where(vals > 0, eta.values, 0)).max() * 0.5)
    # both sides present; launch points deterministic (8 equal-energy blocks per side), the seed
    # only rotates the azimuth set by a fraction of its spacing
    assert set(np.unique(fan.side)) == {-1, 1}
    assert len(set(zip(fan.x0, fan.y0))) == 16
    again = make_ray_fan(eta, dl, 240, seed=11, strike_deg=0.0)
    np.testing.assert_array_equal(again.x0, fan.x0)
    np.testing.assert_array_equal(again.azimuth_deg, fan.azimuth_deg)
    other = make_ray_fan(eta, dl, 240, seed=12)
    np.testing.assert_array_equal(other.x0, fan.x0)
    assert not np.array_equal(other.azimuth_deg, fan.azimuth_deg)
    spacing = np.diff(np.unique(fan.azimuth_deg))
    np.testing.assert_allclose(spacing, fan.dtheta_deg, rtol=1e-9)
    # rays heading right of the strike (east) start east of those heading west, on average
    assert fan.x0[fan.side == 1].mean() > fan.x0[fan.side == -1].mean()
    ds = fan.to_dataset()
    assert ds.sizes["ray"] == 240 and float(ds.weight.sum()) == pytest.approx(E)


def test_fan_rotations_are_stratified_copies_carrying_the_energy_once():
    # K rotations of a fan: copy j is the fan rotated by j dtheta / K, each copy carrying 1/K of the
    # energy (definition, tsunamifocus.source.rayfan.make_ray_fan); the pooled azimuths are then
    # evenly spaced dtheta / K apart (stratified sampling of the launch angle; common practice, no
    # source) and the weights still sum to the source's potential energy (energy conservation).
    d = flat_grid(cell_km=4.0)
    seg = utm_segment(half_len_km=150.0)
    eta = uplift_on_grid(seg, d)
    one = make_ray_fan(eta, d, 240, seed=5)
    four = make_ray_fan(eta, d, 240, seed=5, rotations=4)
    assert four.rotations == 4 and one.rotations == 1
    assert four.n_rays == 4 * one.n_rays and four.dtheta_deg == one.dtheta_deg
    assert four.weights.sum() == pytest.approx(potential_energy(eta, d), rel=1e-12)
    # the first copy is the fan itself, with a quarter of each ray's energy
    n = one.n_rays
    np.testing.assert_allclose(four.azimuth_deg[:n], one.azimuth_deg, rtol=0, atol=1e-9)
    np.testing.assert_allclose(4.0 * four.weights[:n], one.weights, rtol=1e-12)
    # copy j: the fan rotated by j dtheta / 4, from the same launch points
    for j in range(1, 4):
        rot = make_ray_fan(eta, d, 240, seed=5, azimuth_offset_deg=j * one.dtheta_deg / 4)
        np.testing.assert_allclose(four.azimuth_deg[j * n:(j + 1) * n], rot.azimuth_deg, rtol=0, atol=1e-9)
        np.testing.assert_array_equal(four.x0[j * n:(j + 1) * n], one.x0)
    spacing = np.diff(np.unique(np.round(four.azimuth_deg, 9)))
    np.testing.assert_allclose(spacing, one.dtheta_deg / 4, rtol=1e-6)
    for bad in (0, 17, 2.5):
        with pytest.raises(SourceError, match="rotations"):
            make_ray_fan(eta, d, 240, rotations=bad)


def test_fan_geographic_beams_perpendicular_to_strike():
    lon = np.arange(140.0, 150.0, 0.05)
    lat = np.arange(30.0, 40.0, 0.05)
    g = make_grid(np.full((lat.size, lon.size), 5000.0), lon, lat, "EPSG:4326")
    seg = FaultSegment.from_magnitude(145.0, 35.0, 20.0, 8.6, top_depth_km=5.0, dip_deg=12.0)
    eta = uplift_on_grid(seg, g)
    fan = make_ray_fan(eta, g, 360, seed=0)
    amax = fan.azimuth_deg[np.argmax(fan.weights)]
    off = min(abs(((amax - 110.0) + 180) % 360 - 180), abs(((amax - 290.0) + 180) % 360 - 180))
    assert off <= 6.0
    assert fan.weights.sum() == pytest.approx(potential_energy(eta, g), rel=1e-12)
    assert np.all((fan.x0 > 140) & (fan.x0 < 150) & (fan.y0 > 30) & (fan.y0 < 40))


def test_fan_bad_input():
    d = flat_grid(cell_km=8.0)
    with pytest.raises(SourceError, match="no sea-surface displacement"):
        make_ray_fan(d.copy(data=np.zeros(d.shape)), d, 36)
    with pytest.raises(SourceError, match="n_rays"):
        make_ray_fan(d.copy(data=np.ones(d.shape)), d, 3)


# --------------------------------------------------------------------------- summary


def test_summary():
    d = flat_grid(cell_km=4.0)
    seg = utm_segment(name="test segment")
    eta = uplift_on_grid(seg, d)
    fan = make_ray_fan(eta, d, 120, seed=0)
    s = summarize_source(seg, eta, d, fan)
    assert s.mw == pytest.approx(magnitude_from_moment(4e10 * 200e3 * 80e3 * 5.0))
    assert s.max_uplift_m == pytest.approx(float(eta.max()))
    assert s.max_subsidence_m == pytest.approx(float(eta.min()))
    assert s.energy_J == pytest.approx(potential_energy(eta, d))
    # wavelength ~ 2 x horizontal source width, period = wavelength / sqrt(g h) (rule of thumb)
    wh = 80.0 * math.cos(math.radians(15.0))
    assert s.source_width_km == pytest.approx(wh)
    assert s.period_s == pytest.approx(2 * wh * 1e3 / math.sqrt(GRAVITY * 4000.0))
    assert s.rays["right_of_strike"]["n_rays"] + s.rays["left_of_strike"]["n_rays"] == 120
    txt = str(s)
    assert "Mw 8.27" in txt and "SCREENING" in txt and "test segment" in txt
    dd = s.to_dict()
    assert dd["energy_J"] == s.energy_J and "cautions" in dd
    import json

    json.dumps(dd, allow_nan=False)
    # a point source has no magnitude: NaN in the object, None in the dict
    ps = PointSource(500e3, 4000e3, radius_km=40.0, amplitude_m=1.5, crs=UTM, name="hump")
    sp = summarize_source(ps, uplift_on_grid(ps, d), d)
    assert math.isnan(sp.mw) and sp.to_dict()["mw"] is None
    assert sp.wavelength_km == pytest.approx(160.0) and "hump" in str(sp)
    json.dumps(sp.to_dict(), allow_nan=False)
    bad = eta.copy(data=np.where(np.abs(eta.values) > 1.0, np.nan, eta.values))
    with pytest.raises(SourceError, match="NaN"):
        potential_energy(bad, d)


# --------------------------------------------------------------------------- seam & real data


def test_periodic_seam_matches_shifted_copy():
    # Longitude periodicity (grid convention): a fault straddling the 0/360 seam of a global
    # grid gives the same uplift, energy and fan weights as the same fault shifted by 180 deg.
    lon = np.arange(0.0, 360.0, 0.2)
    lat = np.arange(-30.0, 30.0 + 1e-9, 0.2)
    g = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326")
    assert g.attrs["lon_periodic"] == 1

    def run(lon0):
        seg = FaultSegment(trace=((lon0, -1.5), (lon0 + 0.3, 1.5)), top_depth_km=5.0, dip_deg=15.0, width_km=70.0,
                           slip_m=5.0)
        eta = uplift_on_grid(seg, g)
        return eta, make_ray_fan(eta, g, 72, seed=0)

    e_seam, f_seam = run(359.85)
    e_mid, f_mid = run(179.85)
    shifted = np.roll(e_mid.values, -900, axis=1)  # 180 degrees = 900 columns
    np.testing.assert_allclose(e_seam.values, shifted, atol=1e-6 * float(e_mid.max()))
    assert potential_energy(e_seam, g) == pytest.approx(potential_energy(e_mid, g), rel=1e-6)
    np.testing.assert_allclose(f_seam.weights, f_mid.weights, rtol=1e-4)
    assert np.all((f_seam.x0 >= -0.1) & (f_seam.x0 < 360.0))


@pytest.mark.realdata
def test_real_relief_trench_source(etopo_path):
    # ETOPO1 0.1-degree relief (Amante & Eakins 2009): a thrust along a deep-sea trench
    # (trace in > 6 km of water) uplifts the sea, launches every ray from sea cells, and a trace
    # drawn across land raises SourceError.
    from tsunamifocus.io.bathymetry import load_bathymetry

    d = load_bathymetry(etopo_path, bbox=(135.0, 30.0, 155.0, 45.0), values="elevation")
    seg = FaultSegment(trace=((144.3, 40.0), (143.8, 36.5)), top_depth_km=5.0, dip_deg=14.0, magnitude=8.8)
    eta = uplift_on_grid(seg, d)
    assert 180.0 < seg.strike_deg < 200.0  # heading south-southwest, dipping west
    E = potential_energy(eta, d)
    assert E > 1e14
    fan = make_ray_fan(eta, d, 360, seed=0)
    # energy bookkeeping: launched + uplift on cells at or above the 20 m stop isobath = E
    assert fan.weights.sum() + fan.energy_shallow_J == pytest.approx(E, rel=1e-12)
    assert 0.0 <= fan.energy_shallow_J < 0.01 * E
    dep_at = d.sel(lon=xr_points(fan.x0), lat=xr_points(fan.y0), method="nearest").values
    assert np.all(dep_at > 40.0)  # twice the stop isobath
    with pytest.raises(SourceError, match="on land"):
        uplift_on_grid(FaultSegment(trace=((138.5, 36.0), (140.0, 38.0)), top_depth_km=5.0, dip_deg=30.0,
                                    magnitude=7.5), d)


def xr_points(v):
    import xarray as xr

    return xr.DataArray(np.asarray(v), dims="ray")


def test_period_bands_of_a_gaussian_hump_match_the_closed_form():
    # eta = exp(-r^2 / (2 s^2)) has |F(k)|^2 ~ exp(-k^2 s^2), so the energy between wavenumbers
    # k1 < k2 is proportional to exp(-k1^2 s^2) - exp(-k2^2 s^2) (radial integral of k exp(-k^2 s^2));
    # a band of periods [T1, T2] is k in [2 pi / (c T2), 2 pi / (c T1)] (long waves, c = sqrt(g h)).
    from tsunamifocus.source.energy import period_bands

    d = flat_grid(cell_km=4.0, half_km=600.0)
    E, N = np.meshgrid(d.x.values - 500e3, d.y.values - 4000e3)
    s = 40e3
    eta = d.copy(data=np.exp(-(E**2 + N**2) / (2 * s * s)))
    c = math.sqrt(9.81 * 4000.0)
    T0 = 2 * math.pi * s / c * 2.0  # any period; the shares follow from the spectrum
    bands = period_bands(eta, d, T0)
    assert [t for t, _ in bands] == pytest.approx([T0 / 2, T0, 2 * T0])
    assert sum(w for _, w in bands) == pytest.approx(1.0)

    def share(t_lo, t_hi):
        k_hi = 2 * math.pi / (c * t_lo) if t_lo > 0 else math.inf
        k_lo = 2 * math.pi / (c * t_hi) if math.isfinite(t_hi) else 0.0
        return math.exp(-(k_lo * s) ** 2) - (math.exp(-(k_hi * s) ** 2) if math.isfinite(k_hi) else 0.0)

    edges = [0.0, T0 / math.sqrt(2), T0 * math.sqrt(2), math.inf]
    expected = [share(edges[i], edges[i + 1]) for i in range(3)]
    np.testing.assert_allclose([w for _, w in bands], expected, atol=0.01)


@pytest.mark.realdata
def test_fan_launches_only_deeper_than_the_stop_isobath_near_a_coast(etopo_path):
    # A Mw 9.0 thrust whose rupture reaches the coast of a real island arc (ETOPO1, Amante and
    # Eakins 2009): the fan launches only from cells deeper than twice the stop isobath, and the
    # uplift energy on the shallow cells is booked (common practice, no source: nothing is lost).
    from tsunamifocus.io.bathymetry import load_bathymetry

    d = load_bathymetry(etopo_path, bbox=(135.0, 30.0, 150.0, 45.0), values="elevation")
    seg = FaultSegment(trace=((141.2, 36.0), (142.2, 39.6)), top_depth_km=5.0, dip_deg=12.0, width_km=175.0,
                       magnitude=9.0)
    eta = uplift_on_grid(seg, d)
    fan = make_ray_fan(eta, d, 2000, seed=1, stop_depth_m=20.0)
    dep_at = d.sel(lon=xr_points(fan.x0), lat=xr_points(fan.y0), method="nearest").values
    assert np.all(dep_at > 40.0)
    E = potential_energy(eta, d)
    assert fan.weights.sum() + fan.energy_shallow_J == pytest.approx(E, rel=1e-12)
    assert fan.energy_shallow_J > 0.0  # this rupture does lift water over the shelf
