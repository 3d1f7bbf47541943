"""numba kernels of the separable Gaussian of :mod:`tsunamifocus.ocean.smooth` (private).

One pass along y (one width for the whole grid) and one along x (a width per row: on lon/lat
grids a degree of longitude shrinks with the cosine of latitude), each parallel over rows. The
weights are those of :func:`scipy.ndimage.gaussian_filter1d` (a sampled Gaussian truncated at
``truncate`` standard deviations, radius ``int(truncate sigma + 0.5)``, normalised to sum 1);
outside the grid the field is zero, or wraps around in x on a global longitude grid.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from ..io._numbacache import ensure_cache_folder

ensure_cache_folder()  # before the cached kernels below are defined

__all__: list[str] = []


@njit(cache=True)
def _weights(sigma: float, truncate: float) -> np.ndarray:
    """Normalised Gaussian weights of radius ``int(truncate sigma + 0.5)``."""
    r = int(truncate * sigma + 0.5)
    w = np.empty(2 * r + 1)
    s = 0.0
    for k in range(-r, r + 1):
        v = math.exp(-0.5 * k * k / (sigma * sigma))
        w[k + r] = v
        s += v
    for k in range(2 * r + 1):
        w[k] /= s
    return w


@njit(cache=True, inline="always", nogil=True)
def _gauss_y_row(f: np.ndarray, out: np.ndarray, i: int, w: np.ndarray) -> None:
    """Row ``i`` of the Gaussian along axis 0 with the weights ``w`` (zero outside the grid)."""
    ny, nx = f.shape
    r = (w.size - 1) // 2
    for k in range(-r, r + 1):
        ii = i + k
        if ii < 0 or ii >= ny:
            continue
        wk = w[k + r]
        for j in range(nx):
            out[i, j] += wk * f[ii, j]


@njit(cache=True, parallel=True, nogil=True)
def gauss_y(f: np.ndarray, sigma: float, truncate: float) -> np.ndarray:
    """Gaussian of std ``sigma`` cells along axis 0 (zero outside the grid)."""
    ny, nx = f.shape
    w = _weights(sigma, truncate)
    out = np.zeros((ny, nx))
    for i in prange(ny):
        _gauss_y_row(f, out, i, w)
    return out


@njit(cache=True, nogil=True)
def gauss_y_serial(f: np.ndarray, sigma: float, truncate: float) -> np.ndarray:
    """:func:`gauss_y` on one thread (small grids: no thread start-up; the same values)."""
    ny, nx = f.shape
    w = _weights(sigma, truncate)
    out = np.zeros((ny, nx))
    for i in range(ny):
        _gauss_y_row(f, out, i, w)
    return out


@njit(cache=True, inline="always", nogil=True)
def _gauss_x_row(f: np.ndarray, out: np.ndarray, i: int, s: float, truncate: float, periodic: bool,
                 min_cells: float) -> None:
    """Row ``i`` of the Gaussian along axis 1 with std ``s`` cells (copied below ``min_cells``)."""
    nx = f.shape[1]
    if not s >= min_cells:
        for j in range(nx):
            out[i, j] = f[i, j]
        return
    w = _weights(s, truncate)
    r = (w.size - 1) // 2
    buf = np.zeros(nx + 2 * r)  # the row with r cells either side: wrapped or zero
    for m in range(nx + 2 * r):
        jj = m - r
        if periodic:
            buf[m] = f[i, jj % nx]
        elif 0 <= jj < nx:
            buf[m] = f[i, jj]
    # tap by tap over the whole row: each output still sums its taps in order (the same values as
    # one sum per output), and the inner loop runs over independent outputs
    for j in range(nx):
        out[i, j] = 0.0
    for k in range(2 * r + 1):
        wk = w[k]
        for j in range(nx):
            out[i, j] += wk * buf[j + k]


@njit(cache=True, parallel=True, nogil=True)
def gauss_x(f: np.ndarray, sigma_rows: np.ndarray, truncate: float, periodic: bool,
            min_cells: float) -> np.ndarray:
    """Gaussian along axis 1 with std ``sigma_rows[i]`` cells in row ``i``; rows below ``min_cells`` copied."""
    ny, nx = f.shape
    out = np.empty((ny, nx))
    for i in prange(ny):
        _gauss_x_row(f, out, i, sigma_rows[i], truncate, periodic, min_cells)
    return out


@njit(cache=True, nogil=True)
def gauss_x_serial(f: np.ndarray, sigma_rows: np.ndarray, truncate: float, periodic: bool,
                   min_cells: float) -> np.ndarray:
    """:func:`gauss_x` on one thread (small grids: no thread start-up; the same values)."""
    ny, nx = f.shape
    out = np.empty((ny, nx))
    for i in range(ny):
        _gauss_x_row(f, out, i, sigma_rows[i], truncate, periodic, min_cells)
    return out


@njit(cache=True, inline="always", nogil=True)
def _level_share(lower, frac, n, lev) -> float:
    """Share of width level ``lev`` in node ``n``: ``1 - frac`` of its lower level, ``frac`` of its upper
    one, -1 for a level that does not bracket it."""
    k = lower[n]
    if k == lev:
        return 1.0 - frac[n]
    if k == lev - 1:
        return frac[n]
    return -1.0


@njit(cache=True, inline="always", nogil=True)
def _window_node(acc, n, idx, lower, frac, num, wgt, lev, nx, row0, col0) -> None:
    w = _level_share(lower, frac, n, lev)
    if w < 0.0:
        return
    j = idx[n] // nx
    i = idx[n] - j * nx
    b = wgt[j - row0, i - col0]
    if b > 1e-12:
        acc[n] += w * (num[j - row0, i - col0] / b)


@njit(cache=True, parallel=True, nogil=True)
def add_level_window(acc: np.ndarray, idx: np.ndarray, lower: np.ndarray, frac: np.ndarray, num: np.ndarray,
                     wgt: np.ndarray, lev: int, nx: int, row0: int, col0: int) -> None:
    """Add width level ``lev`` (normalised mean ``num / wgt``, 0 where no weight) to the nodes it brackets.

    Node ``idx[n]`` (flat on a grid ``nx`` wide) lies between levels ``lower[n]`` and ``lower[n] + 1``,
    at ``frac[n]`` of the way (linear in log width): it takes ``1 - frac`` of its lower level and
    ``frac`` of its upper one. ``num`` and ``wgt`` (2-D) hold the level on the part of the grid
    from row ``row0`` and column ``col0``.
    """
    for n in prange(idx.size):
        _window_node(acc, n, idx, lower, frac, num, wgt, lev, nx, row0, col0)


@njit(cache=True, nogil=True)
def add_level_window_serial(acc: np.ndarray, idx: np.ndarray, lower: np.ndarray, frac: np.ndarray,
                            num: np.ndarray, wgt: np.ndarray, lev: int, nx: int, row0: int, col0: int) -> None:
    """:func:`add_level_window` on one thread (few nodes)."""
    for n in range(idx.size):
        _window_node(acc, n, idx, lower, frac, num, wgt, lev, nx, row0, col0)


@njit(cache=True, inline="always", nogil=True)
def _coarse_node(acc, n, idx, lower, frac, num, wgt, lev, nx, y0, y1, ty, x0, x1, tx) -> None:
    w = _level_share(lower, frac, n, lev)
    if w < 0.0:
        return
    j = idx[n] // nx
    i = idx[n] - j * nx
    a0, a1, t = y0[j], y1[j], ty[j]
    b0, b1, u = x0[i], x1[i], tx[i]
    bw = (wgt[a0, b0] * (1.0 - t) + wgt[a1, b0] * t) * (1.0 - u) + (wgt[a0, b1] * (1.0 - t) + wgt[a1, b1] * t) * u
    if bw > 1e-12:
        bn = (num[a0, b0] * (1.0 - t) + num[a1, b0] * t) * (1.0 - u) + (num[a0, b1] * (1.0 - t) + num[a1, b1] * t) * u
        acc[n] += w * (bn / bw)


@njit(cache=True, parallel=True, nogil=True)
def add_level_coarse(acc: np.ndarray, idx: np.ndarray, lower: np.ndarray, frac: np.ndarray, num: np.ndarray,
                     wgt: np.ndarray, lev: int, nx: int, y0: np.ndarray, y1: np.ndarray, ty: np.ndarray,
                     x0: np.ndarray, x1: np.ndarray, tx: np.ndarray) -> None:
    """:func:`add_level_window` of a level given on a block grid (``num``, ``wgt`` 2-D), bilinear at each node.

    Node ``idx[n]`` (row ``j``, column ``i``) takes the blocks ``y0[j], y1[j]`` (weight ``ty[j]`` of the
    second) and ``x0[i], x1[i]`` (``tx[i]``), interpolated first along y, then along x, with the
    operations of ``smooth._lin_axis`` - the values of the whole interpolated grid at that node.
    """
    for n in prange(idx.size):
        _coarse_node(acc, n, idx, lower, frac, num, wgt, lev, nx, y0, y1, ty, x0, x1, tx)


@njit(cache=True, nogil=True)
def add_level_coarse_serial(acc: np.ndarray, idx: np.ndarray, lower: np.ndarray, frac: np.ndarray,
                            num: np.ndarray, wgt: np.ndarray, lev: int, nx: int, y0: np.ndarray, y1: np.ndarray,
                            ty: np.ndarray, x0: np.ndarray, x1: np.ndarray, tx: np.ndarray) -> None:
    """:func:`add_level_coarse` on one thread (few nodes)."""
    for n in range(idx.size):
        _coarse_node(acc, n, idx, lower, frac, num, wgt, lev, nx, y0, y1, ty, x0, x1, tx)
