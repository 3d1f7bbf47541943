"""numba kernels of the linear long-wave solver (private; see :mod:`tsunamifocus.wave`).

Arakawa C grid: ``eta[j, i]`` at cell centres, ``qx[j, i]`` the volume flux per unit width
[m2 s-1] through the x-face between cells ``i - 1`` and ``i`` (shape ``(ny, nx + 1)``),
``qy[j, i]`` the flux through the y-face between rows ``j - 1`` and ``j`` (shape ``(ny + 1, nx)``).

Face kinds (int8):

* ``0`` closed (wall or between two dry cells): flux 0;
* ``1`` interior: ``q -= a * (eta_plus - eta_minus)`` with ``a = g h_face dt / dn`` [m2 s-1 per m];
* ``2`` radiating towards +x / +y: ``q = a * eta_minus`` with ``a = sqrt(g h)`` of the wet cell;
* ``3`` radiating towards -x / -y: ``q = -a * eta_plus``.

Each kernel loops over rows with ``prange``; every row writes only its own cells, so results do not
depend on the number of threads. Per-row outflow volumes are returned in arrays and summed by the
caller in a fixed order (deterministic).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

__all__ = [
    "update_qx",
    "update_qy",
    "update_eta",
    "update_qx_serial",
    "update_qy_serial",
    "update_eta_serial",
]


@njit(parallel=True, cache=True, fastmath=False)
def update_qx(eta, qx, kind, coef, periodic, out_row, lx_dt):  # pragma: no cover - compiled
    """Advance the x-face fluxes one step; add outflow volume [m3] of radiating faces to ``out_row``."""
    ny, nx = eta.shape
    for j in prange(ny):
        acc = 0.0
        for i in range(nx + 1):
            k = kind[j, i]
            # west neighbour of face i (wraps on periodic grids; face nx is then a copy of face 0)
            iw = i - 1 if i > 0 else nx - 1
            ie = i if i < nx else 0
            if k == 1:
                qx[j, i] -= coef[j, i] * (eta[j, ie] - eta[j, iw])
            elif k == 2:
                q = coef[j, i] * eta[j, iw]
                qx[j, i] = q
                acc += q
            elif k == 3:
                q = -coef[j, i] * eta[j, ie]
                qx[j, i] = q
                acc -= q
            else:
                qx[j, i] = 0.0
        if periodic:
            qx[j, nx] = qx[j, 0]
        out_row[j] += acc * lx_dt[j]


@njit(parallel=True, cache=True, fastmath=False)
def update_qy(eta, qy, kind, coef, out_row, ly_dt):  # pragma: no cover - compiled
    """Advance the y-face fluxes one step; add outflow volume [m3] of radiating faces to ``out_row``."""
    ny, nx = eta.shape
    for j in prange(ny + 1):
        acc = 0.0
        for i in range(nx):
            k = kind[j, i]
            if k == 1:
                qy[j, i] -= coef[j, i] * (eta[j, i] - eta[j - 1, i])
            elif k == 2:
                q = coef[j, i] * eta[j - 1, i]
                qy[j, i] = q
                acc += q
            elif k == 3:
                q = -coef[j, i] * eta[j, i]
                qy[j, i] = q
                acc -= q
            else:
                qy[j, i] = 0.0
        out_row[j] += acc * ly_dt[j]


@njit(parallel=True, cache=True, fastmath=False)
def update_eta(
    eta, qx, qy, wet, bx, byn, bys, t_new, threshold, max_eta, max_time, arrival
):  # pragma: no cover - compiled
    """Advance the surface one step from the flux divergence and update the running statistics.

    ``bx[j] = dt * L_x / A_j``, ``byn[j] = dt * L_y(j + 1/2) / A_j``, ``bys[j] = dt * L_y(j - 1/2) / A_j``.
    """
    ny, nx = eta.shape
    for j in prange(ny):
        cx = bx[j]
        cn = byn[j]
        cs = bys[j]
        for i in range(nx):
            if not wet[j, i]:
                continue
            e = eta[j, i] - (cx * (qx[j, i + 1] - qx[j, i]) + cn * qy[j + 1, i] - cs * qy[j, i])
            eta[j, i] = e
            if e > max_eta[j, i]:
                max_eta[j, i] = e
                max_time[j, i] = t_new
            if np.isnan(arrival[j, i]) and abs(e) > threshold:
                arrival[j, i] = t_new


# Serial builds of the same functions (prange runs as range) for small grids, where starting the
# thread pool three times per step costs more than the arithmetic. Same operations, same results.
update_qx_serial = njit(cache=True)(update_qx.py_func)
update_qy_serial = njit(cache=True)(update_qy.py_func)
update_eta_serial = njit(cache=True)(update_eta.py_func)
