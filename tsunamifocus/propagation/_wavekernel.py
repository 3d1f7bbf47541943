"""numba kernels of the linear long-wave solver (private; see :mod:`tsunamifocus.wave`).

Arakawa C grid: ``eta[j, i]`` at cell centres, ``qx[j, i]`` the volume flux per unit width
[m2 s-1] through the x-face between cells ``i - 1`` and ``i`` (shape ``(ny, nx + 1)``),
``qy[j, i]`` the flux through the y-face between rows ``j - 1`` and ``j`` (shape ``(ny + 1, nx)``).

One forward-backward step is three calls:

1. :func:`update_q` — every interior face ``q -= a * (eta_plus - eta_minus)`` with
   ``a = g h_face dt / dn``; ``a = 0`` on closed and radiating faces, so the loop has no branches;
2. :func:`radiate` — the (few) radiating faces, listed sparsely, get ``q = s c eta_src`` with
   ``c = sqrt(g h)`` of the wet cell and ``s = +1`` (outflow towards +x / +y) or ``-1``; returns the
   volume [m3] that left, summed in list order;
3. :func:`update_eta` — ``eta -= wet * dt / A * (flux divergence)`` and the running maximum, its time,
   the first exceedance of the arrival threshold and the running integral ``sum eta^2 dt``.

The row-parallel loops (``prange``) write only the row they own and read only the previous state,
so results do not depend on the number of threads.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from ..io._numbacache import ensure_cache_folder

ensure_cache_folder()  # before the cached kernels below are defined

__all__ = ['update_q', 'update_eta', 'radiate', 'update_q_serial', 'update_eta_serial']


def _update_q(eta, qx, ax, qy, ay, periodic):  # pragma: no cover - compiled
    """Interior x- and y-faces from the old surface (face rows 0..ny-1 of qx, 1..ny-1 of qy)."""
    ny, nx = eta.shape
    for j in prange(ny):
        for i in range(1, nx):
            qx[j, i] -= ax[j, i] * (eta[j, i] - eta[j, i - 1])
        if periodic:
            qx[j, 0] -= ax[j, 0] * (eta[j, 0] - eta[j, nx - 1])
            qx[j, nx] = qx[j, 0]
        if j > 0:
            for i in range(nx):
                qy[j, i] -= ay[j, i] * (eta[j, i] - eta[j - 1, i])


def _update_eta(eta, qx, qy, wet, bx, byn, bys, t_new, dt, threshold, max_eta, max_time, arrival,
                sq_int):  # pragma: no cover
    """Surface from the flux divergence, then running maximum / its time / first arrival / ``sum eta^2 dt``.

    ``bx[j] = dt * L_x / A_j``, ``byn[j] = dt * L_y(j + 1/2) / A_j``, ``bys[j] = dt * L_y(j - 1/2) / A_j``.
    """
    ny, nx = eta.shape
    for j in prange(ny):
        cx = bx[j]
        cn = byn[j]
        cs = bys[j]
        for i in range(nx):
            eta[j, i] -= wet[j, i] * (cx * (qx[j, i + 1] - qx[j, i]) + cn * qy[j + 1, i] - cs * qy[j, i])
        for i in range(nx):
            e = eta[j, i]
            if abs(e) > 1e-100:  # the scheme's precursors decay through 1e-160: squares would be subnormal,
                sq_int[j, i] += e * e * dt  # whose arithmetic is many times slower (and adds nothing)
            if e > max_eta[j, i]:
                max_eta[j, i] = e
                max_time[j, i] = t_new
        for i in range(nx):
            if abs(eta[j, i]) > threshold:
                if np.isnan(arrival[j, i]):
                    arrival[j, i] = t_new


@njit(cache=True)
def radiate(eta, qx, qy, periodic, rxj, rxi, rxsrc, rxc, rxl, ryj, ryi, rysrc, ryc, ryl):  # pragma: no cover
    """Set the radiating faces; return the volume that left the wet domain this step [m3 per dt].

    ``rx*``: x-faces at row ``rxj``, face ``rxi``, source cell column ``rxsrc``, signed speed ``rxc``
    [m s-1] and ``rxl`` = face length x dt [m s]; ``ry*`` likewise with source row ``rysrc``.
    """
    out = 0.0
    nx = eta.shape[1]
    for n in range(rxj.size):
        j = rxj[n]
        i = rxi[n]
        e = eta[j, rxsrc[n]]
        q = rxc[n] * e
        qx[j, i] = q
        if periodic and i == 0:
            qx[j, nx] = q
        out += abs(rxc[n]) * e * rxl[n]
    for n in range(ryj.size):
        e = eta[rysrc[n], ryi[n]]
        q = ryc[n] * e
        qy[ryj[n], ryi[n]] = q
        out += abs(ryc[n]) * e * ryl[n]
    return out


#: Row-parallel builds.
update_q = njit(parallel=True, cache=True)(_update_q)
update_eta = njit(parallel=True, cache=True)(_update_eta)
#: Serial builds of the same functions (prange runs as range) for small grids or one thread, where
#: starting the thread pool costs more than the arithmetic. Same operations, same results.
update_q_serial = njit(cache=True)(_update_q)
update_eta_serial = njit(cache=True)(_update_eta)
