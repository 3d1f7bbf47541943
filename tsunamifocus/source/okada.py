"""Surface displacement of a finite rectangular dislocation in an elastic half-space (Okada 1985).

Okada, Y. (1985). Surface deformation due to shear and tensile faults in a half-space.
Bull. Seismol. Soc. Am. 75(4), 1135-1154. This module implements his closed-form surface
displacements for a finite rectangular source (his eqs. 25-30, Chinnery's notation), in his
own coordinate convention, so that his Table 2 check values read straight across:

* right-handed Cartesian system with ``z`` up and the free surface at ``z = 0``;
* ``x`` along strike; the fault occupies ``0 <= x <= L`` (along strike) and
  ``0 <= eta' <= W`` up-dip from the **lower edge**, which passes through ``(x, 0, -d)``;
  the upper edge therefore sits at ``y = W cos(dip)``, depth ``d - W sin(dip)``;
* the fault dips toward ``-y`` (to the right when looking along ``+x``), the hanging wall is
  on the ``-y`` side;
* ``U1`` strike slip (positive: left-lateral, hanging wall moves toward ``+x``), ``U2`` dip slip
  (positive: reverse/thrust, hanging wall moves up-dip), ``U3`` tensile opening;
* displacements are in the units of the dislocation, lengths in any one consistent unit.

Observation points exactly on the trace of a fault that reaches the surface (where the field is
discontinuous) are evaluated a hair (1e-9 of the fault size) on the footwall (+y) side.
The singular cases follow Okada's notes: when ``q = 0`` the term ``atan(xi eta / (q R))`` is
set to zero, when ``xi = 0`` the term ``I5`` is zero, when ``R + eta = 0`` terms containing
``1 / (R + eta)`` are set to zero and ``ln(R + eta)`` is replaced by ``-ln(R - eta)``, and
for ``cos(dip) = 0`` (vertical fault) the special forms of ``I1, I3, I4, I5`` are used.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ['okada85', 'okada85_point']

_COS_EPS = 1e-5  # below this (dip within ~6e-4 deg of 90) use the vertical-fault forms


def _chinnery_terms(xi, eta, q, sd, cd, alpha, horizontal=True):
    """Integrand values of Okada's (1985) eqs. 25-27 at one corner (xi, eta).

    ``alpha`` is mu / (lambda + mu) = 1 - 2 nu. Returns nine arrays:
    strike-slip (ux, uy, uz), dip-slip (ux, uy, uz), tensile (ux, uy, uz), each without the
    leading factor -U/(2 pi) (shear) or +U/(2 pi) (tensile). With ``horizontal=False`` only
    the three uz terms are computed (the others are returned as 0.0).
    """
    ytil = eta * cd + q * sd
    dtil = eta * sd - q * cd
    R = np.sqrt(xi * xi + eta * eta + q * q)
    X = np.sqrt(xi * xi + q * q)

    # R + eta -> 0 (only for eta < 0 with xi = q = 0): Okada's prescription.
    Re = R + eta
    bad_e = Re <= 1e-14 * np.maximum(R, 1.0)
    Re_safe = np.where(bad_e, 1.0, Re)
    inv_Re = np.where(bad_e, 0.0, 1.0 / Re_safe)
    ln_Re = np.where(bad_e, -np.log(np.where(bad_e, R - eta, 1.0)), np.log(Re_safe))

    Rx = R + xi
    bad_x = Rx <= 1e-14 * np.maximum(R, 1.0)
    inv_Rx = np.where(bad_x, 0.0, 1.0 / np.where(bad_x, 1.0, Rx))

    Rsafe = np.where(R == 0.0, 1.0, R)
    qR = q * Rsafe
    q0 = q == 0.0
    theta = np.where(q0, 0.0, np.arctan(xi * eta / np.where(q0, 1.0, qR)))

    Rd = R + dtil
    Rd_safe = np.where(Rd <= 0.0, 1e-300, Rd)

    if abs(cd) > _COS_EPS:
        xi0 = xi == 0.0
        num = eta * (X + q * cd) + X * (R + X) * sd
        den = xi * (R + X) * cd
        I5 = np.where(xi0, 0.0, alpha * 2.0 / cd * np.arctan(num / np.where(xi0, 1.0, den)))
        I4 = alpha / cd * (np.log(Rd_safe) - sd * ln_Re)
    else:
        I4 = -alpha * q / Rd_safe
        I5 = -alpha * xi * sd / Rd_safe

    inv_R = 1.0 / Rsafe
    a = q * inv_R * inv_Re  # q / (R (R + eta))
    b = q * inv_R * inv_Rx  # q / (R (R + xi))
    ss_z = dtil * a + q * sd * inv_Re + I4 * sd
    ds_z = dtil * b + sd * theta - I5 * sd * cd
    t = xi * a - theta
    tf_z = ytil * b + cd * t - I5 * sd * sd
    if not horizontal:
        return 0.0, 0.0, ss_z, 0.0, 0.0, ds_z, 0.0, 0.0, tf_z

    if abs(cd) > _COS_EPS:
        I3 = alpha * (ytil / (cd * Rd_safe) - ln_Re) + sd / cd * I4
        I1 = alpha * (-xi / (cd * Rd_safe)) - sd / cd * I5
    else:
        Rd2 = Rd_safe * Rd_safe
        I1 = -0.5 * alpha * xi * q / Rd2
        I3 = 0.5 * alpha * (eta / Rd_safe + ytil * q / Rd2 - ln_Re)
    I2 = alpha * (-ln_Re) - I3

    ss_x = xi * a + theta + I1 * sd
    ss_y = ytil * a + q * cd * inv_Re + I2 * sd
    ds_x = q * inv_R - I3 * sd * cd
    ds_y = ytil * b + cd * theta - I1 * sd * cd
    tf_x = q * a - I3 * sd * sd
    tf_y = -dtil * b - sd * t - I1 * sd * sd
    return ss_x, ss_y, ss_z, ds_x, ds_y, ds_z, tf_x, tf_y, tf_z


def okada85(
    x: np.ndarray | float,
    y: np.ndarray | float,
    depth: float,
    dip: float,
    length: float,
    width: float,
    strike_slip: float,
    dip_slip: float,
    opening: float,
    poisson: float = 0.25,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Surface displacement of a finite rectangular fault (Okada 1985, eqs. 25-30).

    Coordinates and signs exactly as in Okada (1985), see the module docstring.

    Parameters
    ----------
    x, y : array_like
        Observation points on the free surface in Okada's frame: ``x`` along strike, origin
        vertically above the start ``(0, 0, -d)`` of the fault's lower edge [length].
    depth : float
        Depth ``d`` of the fault's **lower** edge (positive) [length].
    dip : float
        Dip angle ``delta`` [degrees]; Okada's formulas hold for any angle, the geographic
        layer restricts it to (0, 90].
    length, width : float
        Fault length ``L`` along strike and width ``W`` along dip (> 0) [length].
    strike_slip, dip_slip, opening : float
        Dislocations ``U1, U2, U3`` [any displacement unit; the output has the same unit].
    poisson : float
        Poisson's ratio ``nu`` of the half-space; ``mu / (lambda + mu) = 1 - 2 nu``.
        Okada's Table 2 uses ``lambda = mu``, i.e. ``nu = 0.25``.

    Returns
    -------
    ux, uy, uz : numpy.ndarray
        Displacements along Okada's ``x`` (strike), ``y`` and ``z`` (up) axes, broadcast to the
        shape of ``x`` and ``y`` [unit of the dislocation].

    Examples
    --------
    Okada (1985) Table 2, case 2, dip slip:

    >>> ux, uy, uz = okada85(2.0, 3.0, 4.0, 70.0, 3.0, 2.0, 0.0, 1.0, 0.0)
    >>> f"{float(uz):.3e}"
    '-3.564e-02'
    """
    return _okada85(x, y, depth, dip, length, width, strike_slip, dip_slip, opening, poisson)


def _okada85(
    x: np.ndarray | float,
    y: np.ndarray | float,
    depth: float,
    dip: float,
    length: float,
    width: float,
    strike_slip: float,
    dip_slip: float,
    opening: float,
    poisson: float = 0.25,
    horizontal: bool = True,
    _nudged: bool = False,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`okada85`; with ``horizontal=False`` ux and uy are returned as zeros (faster)."""
    if not (length > 0 and width > 0):
        raise InputError(f"okada85: length and width must be > 0, got length={length}, width={width}")
    if not (-0.5 < poisson < 0.5):
        raise InputError(f"okada85: poisson must lie in (-0.5, 0.5), got {poisson}")
    if not np.isfinite(depth):
        raise InputError(f"okada85: depth must be finite, got {depth}")
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    x, y = np.broadcast_arrays(x, y)
    d = np.radians(float(dip))
    sd, cd = np.sin(d), np.cos(d)
    if abs(cd) <= _COS_EPS:
        cd = 0.0
        sd = 1.0 if sd > 0 else -1.0
    alpha = 1.0 - 2.0 * poisson
    p = y * cd + depth * sd
    q = y * sd - depth * cd

    out = [np.zeros(x.shape) for _ in range(9)]  # corner sums (0.0 terms broadcast in)
    # Chinnery: f(x, p) - f(x, p - W) - f(x - L, p) + f(x - L, p - W)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for xi, eta, sign in ((x, p, 1.0), (x, p - width, -1.0), (x - length, p, -1.0),
                              (x - length, p - width, 1.0)):
            terms = _chinnery_terms(xi, eta, q, sd, cd, alpha, horizontal)
            for acc, t in zip(out, terms):
                acc += sign * t
        f = 1.0 / (2.0 * np.pi)
        ux = -strike_slip * f * out[0] - dip_slip * f * out[3] + opening * f * out[6]
        uy = -strike_slip * f * out[1] - dip_slip * f * out[4] + opening * f * out[7]
        uz = -strike_slip * f * out[2] - dip_slip * f * out[5] + opening * f * out[8]
    bad = ~(np.isfinite(ux) & np.isfinite(uy) & np.isfinite(uz))
    if np.any(bad):
        # Only on the singular line of a fault that breaks the surface (its trace, where the
        # displacement is discontinuous): evaluate just off the trace, on the +y (footwall) side.
        if _nudged:
            raise InputError("okada85: displacement is singular at an observation point")
        eps = 1e-9 * max(float(width), float(length), 1.0)
        bx, by, bz = _okada85(x[bad], y[bad] + eps, depth, dip, length, width, strike_slip, dip_slip, opening,
                              poisson, horizontal, _nudged=True)
        ux, uy, uz = (np.array(a, dtype=float, copy=True) for a in (ux, uy, uz))
        ux[bad], uy[bad], uz[bad] = bx, by, bz
    return ux, uy, uz


def okada85_point(
    x: np.ndarray | float,
    y: np.ndarray | float,
    depth: float,
    dip: float,
    potency_ss: float,
    potency_ds: float,
    potency_tf: float,
    poisson: float = 0.25,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Surface displacement of a point source (Okada 1985, eqs. 6-8 with 9).

    The source sits at ``(0, 0, -depth)``; each potency is slip times area (``U ds``)
    [displacement unit x length^2]. Used to cross-check :func:`okada85` by integration
    over the fault plane.

    Parameters
    ----------
    x, y : array_like
        Observation points on the surface [length].
    depth : float
        Source depth (> 0) [length].
    dip : float
        Dip [degrees].
    potency_ss, potency_ds, potency_tf : float
        Strike-slip, dip-slip and tensile potencies.
    poisson : float
        Poisson's ratio.

    Returns
    -------
    ux, uy, uz : numpy.ndarray
        Displacements in Okada's frame.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    d = np.asarray(depth, dtype=float)
    dl = np.radians(float(dip))
    sd, cd = np.sin(dl), np.cos(dl)
    alpha = 1.0 - 2.0 * poisson
    p = y * cd + d * sd
    q = y * sd - d * cd
    R2 = x * x + y * y + d * d
    R = np.sqrt(R2)
    R3, R5 = R2 * R, R2 * R2 * R
    Rd = R + d
    I1 = alpha * y * (1.0 / (R * Rd**2) - x * x * (3 * R + d) / (R3 * Rd**3))
    I2 = alpha * x * (1.0 / (R * Rd**2) - y * y * (3 * R + d) / (R3 * Rd**3))
    I3 = alpha * x / R3 - I2
    I4 = alpha * (-x * y * (2 * R + d) / (R3 * Rd**2))
    I5 = alpha * (1.0 / (R * Rd) - x * x * (2 * R + d) / (R3 * Rd**2))
    f = 1.0 / (2.0 * np.pi)
    ux = (
        -potency_ss * f * (3 * x * x * q / R5 + I1 * sd)
        - potency_ds * f * (3 * x * p * q / R5 - I3 * sd * cd)
        + potency_tf * f * (3 * x * q * q / R5 - I3 * sd * sd)
    )
    uy = (
        -potency_ss * f * (3 * x * y * q / R5 + I2 * sd)
        - potency_ds * f * (3 * y * p * q / R5 - I1 * sd * cd)
        + potency_tf * f * (3 * y * q * q / R5 - I1 * sd * sd)
    )
    uz = (
        -potency_ss * f * (3 * d * x * q / R5 + I4 * sd)
        - potency_ds * f * (3 * d * p * q / R5 - I5 * sd * cd)
        + potency_tf * f * (3 * d * q * q / R5 - I5 * sd * sd)
    )
    return ux, uy, uz
