"""numba kernel of the distance from every grid node to the nearest of a few points (private).

Used by :func:`tsunamifocus.focusing.energy.distance_to_launch_m` when a fan starts from a handful
of launch points: a direct minimum over them, node by node, instead of a search tree.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from ..io._numbacache import ensure_cache_folder

ensure_cache_folder()  # before the cached kernels below are defined

__all__: list[str] = []


@njit(cache=True, parallel=True, nogil=True)
def nearest_on_sphere(rcos: np.ndarray, rsin: np.ndarray, coslon: np.ndarray, sinlon: np.ndarray,
                      pts: np.ndarray) -> np.ndarray:
    """Chord distance [m] from every node to the nearest row of ``pts`` (x, y, z) [m].

    Node ``(j, i)`` is ``(rcos[j] coslon[i], rcos[j] sinlon[i], rsin[j])``; the squared differences
    are summed x, y, z in that order and the root is taken of the least sum.
    """
    ny, nx, m = rcos.size, coslon.size, pts.shape[0]
    out = np.empty((ny, nx))
    for j in prange(ny):
        for i in range(nx):
            x = rcos[j] * coslon[i]
            y = rcos[j] * sinlon[i]
            z = rsin[j]
            best = np.inf
            for k in range(m):
                dx = x - pts[k, 0]
                dy = y - pts[k, 1]
                dz = z - pts[k, 2]
                s = dx * dx
                s += dy * dy
                s += dz * dz
                if s < best:
                    best = s
            out[j, i] = math.sqrt(best)
    return out


@njit(cache=True, parallel=True, nogil=True)
def nearest_on_plane(ys: np.ndarray, xs: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Distance [m] from every node ``(xs[i], ys[j])`` to the nearest row of ``pts`` (x, y) [m]."""
    ny, nx, m = ys.size, xs.size, pts.shape[0]
    out = np.empty((ny, nx))
    for j in prange(ny):
        for i in range(nx):
            best = np.inf
            for k in range(m):
                dx = xs[i] - pts[k, 0]
                dy = ys[j] - pts[k, 1]
                s = dx * dx
                s += dy * dy
                if s < best:
                    best = s
            out[j, i] = math.sqrt(best)
    return out
