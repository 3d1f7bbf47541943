"""Tests of tsunamifocus.okada against Okada (1985) and against independent routes."""

from __future__ import annotations

import numpy as np
import pytest

from tsunamifocus.errors import InputError
from tsunamifocus.source.okada import _okada85, okada85, okada85_point

# Okada, Y. (1985), Bull. Seismol. Soc. Am. 75, 1135-1154, Table 2 ("check list"), finite
# rectangular source, L = 3, W = 2, lambda = mu (nu = 0.25), unit dislocation; columns ux, uy, uz.
# Values from memory; they agree with the copies of the table in several public geodesy test
# suites, and are cross-checked below by integrating Okada's point-source formulas.
TABLE2 = [
    # case 2: x=2, y=3, d=4, dip=70
    ((2.0, 3.0, 4.0, 70.0), (1, 0, 0), (-8.689e-3, -4.298e-3, -2.747e-3)),
    ((2.0, 3.0, 4.0, 70.0), (0, 1, 0), (-4.682e-3, -3.527e-2, -3.564e-2)),
    ((2.0, 3.0, 4.0, 70.0), (0, 0, 1), (-2.660e-4, +1.056e-2, +3.214e-3)),
    # case 3: x=0, y=0, d=4, dip=90 (cos(dip) = 0 special forms of I1..I5)
    ((0.0, 0.0, 4.0, 90.0), (1, 0, 0), (0.0, +5.253e-3, 0.0)),
    ((0.0, 0.0, 4.0, 90.0), (0, 1, 0), (0.0, 0.0, 0.0)),
    ((0.0, 0.0, 4.0, 90.0), (0, 0, 1), (+1.223e-2, 0.0, -1.606e-2)),
    # case 4: x=0, y=0, d=4, dip=-90
    ((0.0, 0.0, 4.0, -90.0), (1, 0, 0), (0.0, -1.303e-3, 0.0)),
    ((0.0, 0.0, 4.0, -90.0), (0, 0, 1), (+3.507e-3, 0.0, -7.740e-3)),
]


@pytest.mark.parametrize("geom,disl,expected", TABLE2)
def test_okada1985_table2(geom, disl, expected):
    # Okada (1985) Table 2: the table gives 4 significant digits -> half a unit of the last digit.
    x, y, d, dip = geom
    got = okada85(x, y, d, dip, 3.0, 2.0, *disl)
    for g, e in zip(got, expected):
        tol = 0.5e-3 * 10 ** np.floor(np.log10(abs(e))) if e != 0 else 1e-12
        assert abs(float(g) - e) <= tol * 1.0001, (geom, disl, float(g), e)


@pytest.mark.parametrize("geom,disl,expected", TABLE2)
def test_okada1985_table2_uz_only_path(geom, disl, expected):
    # The vertical-only fast path used for sea-floor uplift, against the same Table 2 uz values.
    x, y, d, dip = geom
    ux, uy, uz = _okada85(x, y, d, dip, 3.0, 2.0, *disl, horizontal=False)
    e = expected[2]
    tol = 0.5e-3 * 10 ** np.floor(np.log10(abs(e))) if e != 0 else 1e-12
    assert abs(float(uz) - e) <= tol * 1.0001
    assert float(uz) == float(okada85(x, y, d, dip, 3.0, 2.0, *disl)[2])
    assert float(ux) == 0.0 and float(uy) == 0.0


def _integrate_points(x, y, d, dip, L, W, disl, n=48):
    """Gauss-Legendre integral of Okada's (1985) point-source formulas over the fault plane."""
    g, w = np.polynomial.legendre.leggauss(n)
    xs, wx = (g + 1) / 2 * L, w * L / 2
    es, we = (g + 1) / 2 * W, w * W / 2
    sd, cd = np.sin(np.radians(dip)), np.cos(np.radians(dip))
    XS, ES = np.meshgrid(xs, es, indexing="ij")
    WW = np.outer(wx, we)
    u = okada85_point(x - XS, y - ES * cd, d - ES * sd, dip, *disl)
    return tuple(float(np.sum(c * WW)) for c in u)


@pytest.mark.parametrize(
    "x,y,d,dip",
    [(2.0, 3.0, 4.0, 70.0), (5.0, -4.0, 4.0, 30.0), (1.0, -10.0, 4.0, 90.0), (-3.0, 2.0, 7.0, 10.0),
     (0.0, 0.0, 4.0, -90.0), (2.0, 1.0, 4.0, -90.0)],
)
@pytest.mark.parametrize("disl", [(1, 0, 0), (0, 1, 0), (0, 0, 1)])
def test_finite_equals_integrated_point_sources(x, y, d, dip, disl):
    # Independent route: the finite-fault formulas (Okada 1985 eqs. 25-30) must equal the
    # integral of the point-source formulas (Okada 1985 eqs. 6-8) over the fault plane.
    got = okada85(x, y, d, dip, 3.0, 2.0, *disl)
    ref = _integrate_points(x, y, d, dip, 3.0, 2.0, disl)
    scale = max(abs(v) for v in ref)
    for g, r in zip(got, ref):
        assert abs(float(g) - r) <= 1e-6 * scale + 1e-14


def test_vertical_strike_slip_uz_antisymmetric():
    # Symmetry of a vertical strike-slip fault (elasticity, common practice, no source):
    # uz(x, y) = -uz(x, -y) about the fault plane and about the fault centre along strike.
    x = np.linspace(-10, 13, 47)
    y = np.linspace(0.1, 8, 20)
    X, Y = np.meshgrid(x, y)
    _, _, up = okada85(X, Y, 5.0, 90.0, 3.0, 2.0, 1.0, 0.0, 0.0)
    _, _, um = okada85(X, -Y, 5.0, 90.0, 3.0, 2.0, 1.0, 0.0, 0.0)
    assert np.max(np.abs(up)) > 1e-4
    np.testing.assert_allclose(up, -um, atol=1e-12 * np.max(np.abs(up)) + 1e-15)


def test_uplift_decays_with_distance():
    # Okada (1985) point-source limit: beyond the source the surface uz of a buried shear
    # dislocation falls off like R^-2 (the half-space I-terms, e.g. I5 ~ 1/(R(R+d))) or faster.
    r = np.array([50.0, 100.0, 200.0, 400.0, 800.0])
    for ax, ay in ((0.0, 1.0), (1.0, 0.0), (0.7, 0.7), (-0.6, -0.8)):
        _, _, uz = okada85(1.5 + ax * r, 1.0 + ay * r, 5.0, 30.0, 3.0, 2.0, 0.0, 1.0, 0.0)
        a = np.abs(uz)
        assert np.all(np.diff(a) < 0), (ax, ay, a)
        slope = np.polyfit(np.log(r), np.log(a), 1)[0]
        assert slope < -1.5, (ax, ay, slope)


def test_deeper_fault_smaller_broader_uplift():
    # Common practice, no source: burying the same dislocation deeper lowers and widens the bulge.
    y = np.linspace(-60, 60, 2401)
    x = np.full_like(y, 10.0)
    peaks, widths = [], []
    for d in (5.0, 15.0):
        _, _, uz = okada85(x, y, d, 30.0, 20.0, 8.0, 0.0, 1.0, 0.0)
        peaks.append(uz.max())
        widths.append(np.ptp(y[uz > 0.5 * uz.max()]))
    assert peaks[1] < peaks[0]
    assert widths[1] > widths[0]


def test_linear_in_slip():
    # Okada's solution is linear in the dislocation (Okada 1985, eq. 1).
    x, y = np.meshgrid(np.linspace(-5, 8, 9), np.linspace(-5, 8, 9))
    a = np.array(okada85(x, y, 4.0, 45.0, 3.0, 2.0, 0.3, 0.7, 0.1))
    b = np.array(okada85(x, y, 4.0, 45.0, 3.0, 2.0, 0.9, 2.1, 0.3))
    np.testing.assert_allclose(b, 3.0 * a, rtol=1e-12, atol=1e-15)


def test_near_vertical_converges_to_vertical():
    # The cos(dip) = 0 special forms of I1, I3, I4, I5 (Okada 1985, eq. 29) are the limit of
    # the general forms: the difference shrinks linearly as dip -> 90 degrees.
    x, y = np.meshgrid(np.linspace(-4, 7, 6), np.linspace(-5, 5, 7))
    for disl in ((1, 0, 0), (0, 1, 0), (0, 0, 1)):
        v = np.array(okada85(x, y, 4.0, 90.0, 3.0, 2.0, *disl))
        errs = [np.abs(np.array(okada85(x, y, 4.0, 90.0 - dd, 3.0, 2.0, *disl)) - v).max()
                for dd in (0.1, 0.01, 0.001)]
        assert errs[2] < 1e-5
        assert 5.0 < errs[0] / errs[1] < 20.0 and 5.0 < errs[1] / errs[2] < 20.0


def test_bad_geometry():
    with pytest.raises(InputError, match="length and width"):
        okada85(0.0, 0.0, 4.0, 70.0, 0.0, 2.0, 1.0, 0.0, 0.0)
    with pytest.raises(InputError, match="poisson"):
        okada85(0.0, 0.0, 4.0, 70.0, 3.0, 2.0, 1.0, 0.0, 0.0, poisson=0.5)


@pytest.mark.parametrize("dip", [30.0, 90.0])
def test_surface_breaking_fault_is_finite(dip):
    # A fault reaching the surface (upper edge at depth 0) has a singular trace (Okada 1985:
    # R + d~ = 0, R = 0 at the corners); points exactly on it must give finite numbers and no
    # floating-point warnings, and values just off the trace stay bounded by the slip.
    W = 2.0
    d = W * np.sin(np.radians(dip))
    yt = W * np.cos(np.radians(dip))
    x = np.array([0.0, 1.5, 3.0, -1.0, 4.0, 0.0, 3.0])
    y = np.array([yt, yt, yt, yt, yt, yt + 1e-7, yt - 1e-7])
    with np.errstate(all="raise"):
        u = np.array(okada85(x, y, d, dip, 3.0, W, 1.0, 1.0, 1.0))
    assert np.all(np.isfinite(u))
    assert np.max(np.abs(u)) < 3.0
