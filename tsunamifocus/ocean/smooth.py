"""The one masked Gaussian low-pass of depth grids (cos-latitude aware) and the sea mask."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence

import numpy as np
import xarray as xr

from ..errors import (
    InputError,
)
from ..grid import GridInfo
from . import _smoothkernel as _sk

__all__ = ['smooth_bathymetry', 'sea_mask', 'smooth_field', 'smooth_fields']


def sea_mask(depth: xr.DataArray) -> xr.DataArray:
    """True where a cell is sea (finite depth > 0)."""
    return np.isfinite(depth) & (depth > 0)


def smooth_bathymetry(depth: xr.DataArray, length_km: float) -> xr.DataArray:
    """Low-pass the sea depths with a Gaussian kernel of standard deviation ``length_km``.

    This builds the "same mean, no small variations" reference bathymetry: a normalised
    convolution over sea cells only (land and NaN cells neither contribute nor change), so
    the local mean depth is kept and the coastline stays where it was. On lon/lat grids the
    kernel width in longitude follows the shrinking of a degree with latitude (cos lat),
    row by row, and wraps around a global grid.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth grid [m], positive down.
    length_km : float
        Standard deviation of the Gaussian kernel [km]. Features much shorter than this
        are removed; its half-power wavelength is about ``2 * pi * length_km / 1.18``.

    Returns
    -------
    xarray.DataArray
        Smoothed depth with the same coordinates and attributes.
    """
    if not length_km > 0:
        raise InputError(f"smoothing length {length_km} km: expected > 0 km")
    info = GridInfo.from_dataarray(depth)
    v = depth.values.astype(float)
    sea = np.isfinite(v) & (v > 0)
    sm = _normalised_gauss(v, sea, info, length_km * 1000.0, min_cells=0.0)
    out_v = np.where(sea, sm, v)
    out = depth.copy(data=out_v)
    out.attrs["smoothing_km"] = float(length_km)
    return out


# --------------------------------------------------------------------------------------
# geometry helpers
# --------------------------------------------------------------------------------------
def _sea(depth: xr.DataArray) -> np.ndarray:
    v = np.asarray(depth.values, dtype=float)
    return np.isfinite(v) & (v > 0)


def _to_xyz(info: GridInfo, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Points as Cartesian coordinates [m] (3-D on the sphere) for nearest-neighbour search."""
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if info.geographic:
        lo, la = np.radians(x), np.radians(y)
        r = info.radius_m
        return np.column_stack([r * np.cos(la) * np.cos(lo), r * np.cos(la) * np.sin(lo), r * np.sin(la)])
    return np.column_stack([x, y])


# --------------------------------------------------------------------------------------
# smoothing
# --------------------------------------------------------------------------------------
def _gauss_pass(f: np.ndarray, info: GridInfo, sigma_m: float, min_cells: float = 0.2,
                window: tuple[slice, slice] | None = None) -> np.ndarray:
    """Separable Gaussian [std sigma_m metres]; on lon/lat the x width follows cos(lat), row by row.

    Axes (rows on lon/lat) whose width is below ``min_cells`` cells are left as they are. The
    weights are :func:`scipy.ndimage.gaussian_filter1d`'s (truncated at 3 std, zero outside the
    grid, wrapping around a global longitude grid), applied by the parallel kernels of
    :mod:`tsunamifocus.ocean._smoothkernel`. With ``window`` (rows, columns of ``f``) only that
    part is smoothed: its values equal the whole grid's where the kernel stays inside it (at
    least one radius from its edges that are not grid edges).
    """
    if sigma_m <= 0:
        return f.copy() if window is None else f[window].copy()
    dxm, dym = info.spacing_m()
    rows, cols = window if window is not None else (slice(None), slice(None))
    f = np.ascontiguousarray(f[rows, cols], dtype=float)
    small = f.size < _PARALLEL_FROM_CELLS
    gauss_y, gauss_x = (_sk.gauss_y_serial, _sk.gauss_x_serial) if small else (_sk.gauss_y, _sk.gauss_x)
    sy = sigma_m / dym
    out = gauss_y(f, sy, 3.0) if sy >= min_cells else f.copy()
    if info.geographic:
        sx = _x_widths(info, sigma_m)[rows]
        periodic = bool(info.periodic_x) and f.shape[1] == info.nx
        return gauss_x(out, np.ascontiguousarray(sx, dtype=float), 3.0, periodic, float(min_cells))
    sx = sigma_m / dxm
    if sx < min_cells:
        return out
    return gauss_x(out, np.full(f.shape[0], sx), 3.0, False, float(min_cells))


#: Grids (and parts of grids) of fewer cells are smoothed on one thread: starting the kernel's
#: threads costs more than they save there, and much more when other work shares the cores.
_PARALLEL_FROM_CELLS: int = 100_000


def _x_widths(info: GridInfo, sigma_m: float) -> np.ndarray:
    """Std in cells along x of each row of a lon/lat grid (a degree of longitude shrinks with cos lat)."""
    k = math.pi / 180.0 * info.radius_m
    coslat = np.cos(np.radians(np.clip(info.y, -89.5, 89.5)))
    return np.minimum(sigma_m / (info.dx * k * coslat), 4.0 * info.nx)


def _window(info: GridInfo, sigma_m: float, nodes: np.ndarray, max_share: float = 0.7) -> tuple[slice, slice] | None:
    """Rows and columns around the flat ``nodes`` wide enough for their Gaussian of ``sigma_m`` (None: the whole grid).

    The margin is the kernel radius ``int(3 std + 0.5)`` plus one cell on each axis (x: the widest
    row of the window); on a global longitude grid the columns are not cut. None when the window
    would cover more than ``max_share`` of the grid.
    """
    if nodes.size == 0:
        return None
    ny, nx = info.ny, info.nx
    dxm, dym = info.spacing_m()
    ry = int(3.0 * sigma_m / dym + 0.5) + 1
    r0, r1 = max(int(nodes.min()) // nx - ry, 0), min(int(nodes.max()) // nx + ry + 1, ny)
    if (r1 - r0) > max_share * ny:
        return None
    c = nodes % nx
    if info.geographic:
        rx = int(3.0 * float(_x_widths(info, sigma_m)[r0:r1].max()) + 0.5) + 1
    else:
        rx = int(3.0 * sigma_m / dxm + 0.5) + 1
    if info.geographic and info.periodic_x:
        c0, c1 = 0, nx
    else:
        c0, c1 = max(int(c.min()) - rx, 0), min(int(c.max()) + rx + 1, nx)
    if (r1 - r0) * (c1 - c0) > max_share * ny * nx:
        return None
    return slice(r0, r1), slice(c0, c1)


def _gauss_any(arr: np.ndarray, info: GridInfo, sigma_m: float, min_cells: float = 0.2) -> np.ndarray:
    """Gaussian of ``arr`` [std sigma_m metres]: directly, or through block means for widths of many cells.

    Widths of many cells are applied on a block-averaged grid (:func:`_decimation`) and
    interpolated back (bilinear): the cost per width then stays that of a few-cell kernel.
    """
    d = _decimation(info, sigma_m)
    if d > 1:
        return _coarse_gauss(arr, info, sigma_m, d)
    return _gauss_pass(arr, info, sigma_m, min_cells)


def _normalised_gauss(f: np.ndarray, mask: np.ndarray, info: GridInfo, sigma_m: float,
                      min_cells: float = 0.2) -> np.ndarray:
    """Gaussian-weighted mean of ``f`` over the ``mask`` nodes (normalised convolution); NaN where no weight."""
    a = _gauss_any(np.where(mask, f, 0.0), info, sigma_m, min_cells)
    b = _gauss_any(mask.astype(float), info, sigma_m, min_cells)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(b > 1e-12, a / b, np.nan)


#: Widths of at least this many cells are applied on a block-averaged grid.
_DECIMATE_FROM_CELLS: float = 8.0


def _decimation(info: GridInfo, sigma_m: float) -> int:
    """Block size (a power of 2) for a Gaussian of ``sigma_m``: 1, or keeping >= 4 coarse cells per std."""
    dxm, dym = info.spacing_m()
    cells = sigma_m / (dym if info.geographic else max(dxm, dym))
    if not (np.isfinite(cells) and cells >= _DECIMATE_FROM_CELLS):
        return 1
    d = 2 ** int(math.floor(math.log2(cells / 4.0)))
    d = min(d, max(1, min(info.ny, info.nx) // 16))
    while d > 1 and info.periodic_x and info.nx % d:
        d //= 2
    return max(1, d)


def _coarse_gauss(arr: np.ndarray, info: GridInfo, sigma_m: float, d: int) -> np.ndarray:
    """Gaussian of ``arr`` through ``d x d`` block means, bilinear back to the grid.

    Block averaging and bilinear interpolation widen the kernel by a variance of about
    ``(d h)^2 / 4`` (``h`` the cell side: ``1/12`` for the box, ``1/6`` for the hat); the
    coarse Gaussian is narrowed by as much.
    """
    ny, nx = arr.shape
    sm = _coarse_smoothed(arr, info, sigma_m, d)
    sm = _lin_axis(sm, 0, ny, d, False)
    return _lin_axis(sm, 1, nx, d, info.periodic_x)


def _coarse_smoothed(arr: np.ndarray, info: GridInfo, sigma_m: float, d: int,
                     coarse: np.ndarray | None = None) -> np.ndarray:
    """The block-mean grid of :func:`_coarse_gauss` smoothed, before the interpolation back.

    ``coarse``: the ``d x d`` block means of ``arr`` when already at hand (:func:`_block_mean`).
    """
    ny, nx = arr.shape
    nyc, nxc = -(-ny // d), -(-nx // d)
    cinfo = dataclasses.replace(info, x0=info.x0 + 0.5 * (d - 1) * info.dx, y0=info.y0 + 0.5 * (d - 1) * info.dy,
                                dx=info.dx * d, dy=info.dy * d, nx=nxc, ny=nyc)
    h = info.spacing_m()[1] if info.geographic else max(info.spacing_m())
    s_c = math.sqrt(max(sigma_m**2 - (d * h) ** 2 / 4.0, (0.5 * d * h) ** 2))
    return _gauss_pass(_block_mean(arr, d) if coarse is None else coarse, cinfo, s_c, 0.2)


def _block_mean(arr: np.ndarray, d: int) -> np.ndarray:
    """Means of ``d x d`` blocks from the first row and column (zeros beyond the grid's last ones)."""
    ny, nx = arr.shape
    nyc, nxc = -(-ny // d), -(-nx // d)
    pad = np.zeros((nyc * d, nxc * d))
    pad[:ny, :nx] = arr
    return pad.reshape(nyc, d, nxc, d).mean(axis=(1, 3))


def _lin_index(nc: int, n_out: int, d: int, periodic: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lower and upper block and the upper block's weight of each of ``n_out`` fine cells (see :func:`_lin_axis`)."""
    p = (np.arange(n_out) - 0.5 * (d - 1)) / d
    if periodic:
        i0 = np.floor(p).astype(np.int64)
        t = p - i0
        i0 %= nc
        i1 = (i0 + 1) % nc
    else:
        i0 = np.clip(np.floor(p).astype(np.int64), 0, max(nc - 2, 0))
        i1 = np.minimum(i0 + 1, nc - 1)
        t = np.clip(p - i0, 0.0, 1.0)
    return i0, i1, t


def _lin_axis(arr: np.ndarray, axis: int, n_out: int, d: int, periodic: bool) -> np.ndarray:
    """Linear interpolation along ``axis`` from block centres (``d`` fine cells each) to ``n_out`` fine cells."""
    i0, i1, t = _lin_index(arr.shape[axis], n_out, d, periodic)
    shape = [1, 1]
    shape[axis] = n_out
    t = t.reshape(shape)
    return np.take(arr, i0, axis=axis) * (1.0 - t) + np.take(arr, i1, axis=axis) * t


def smooth_field(
    field: xr.DataArray,
    sigma_m: float | xr.DataArray | np.ndarray,
    *,
    mask: np.ndarray | xr.DataArray | None = None,
    levels_per_octave: int = 2,
) -> xr.DataArray:
    """Masked (normalised) Gaussian smoothing with a constant or spatially varying width.

    The result at each node is the Gaussian-weighted mean of ``field`` over the nodes where
    ``mask`` is True (normalised convolution), so intensive quantities such as energy per unit
    width keep their level near coasts and grid edges. A spatially varying ``sigma_m`` is
    applied by smoothing at widths spaced ``2**(1/levels_per_octave)`` apart and interpolating
    each node between the two levels bracketing its own width (linear in log width).

    Parameters
    ----------
    field : xarray.DataArray
        Grid to smooth (NaN treated as outside the mask).
    sigma_m : float or array
        Standard deviation of the Gaussian [m]: a number or a grid (NaN -> no smoothing).
    mask : array of bool, optional
        Nodes that take part; default: finite values of ``field``.
    levels_per_octave : int
        Width levels per factor of 2 for a varying ``sigma_m``.

    Returns
    -------
    xarray.DataArray
        Smoothed grid, NaN outside the mask.
    """
    return smooth_fields([field], [(0, sigma_m)], mask=mask, levels_per_octave=levels_per_octave)[0]


def smooth_fields(
    fields: Sequence[xr.DataArray],
    requests: Sequence[tuple[int, float | xr.DataArray | np.ndarray]],
    *,
    mask: np.ndarray | xr.DataArray | None = None,
    levels_per_octave: int = 2,
) -> list[xr.DataArray]:
    """:func:`smooth_field` of several fields at several widths, each width level computed once.

    All requests share one ladder of widths (``2**(1/levels_per_octave)`` apart, from the
    smallest requested width to the largest); each level's Gaussian of the mask is computed once
    for all fields that take part in the same nodes, and each field's once for all its requests.
    Each result equals :func:`smooth_field` of its field at its width over that ladder.

    Parameters
    ----------
    fields : sequence of xarray.DataArray
        Grids of one shape and one grid.
    requests : sequence of (int, float or array)
        ``(index into fields, sigma_m)`` for each result (see :func:`smooth_field`).
    mask : array of bool, optional
        Nodes that take part (with each field's finite values); default: finite values.
    levels_per_octave : int
        Width levels per factor of 2.

    Returns
    -------
    list of xarray.DataArray
        One smoothed grid per request, NaN outside its field's mask.
    """
    if not fields:
        return []
    info = GridInfo.from_dataarray(fields[0])
    fs = [np.asarray(f.values, dtype=float) for f in fields]
    for f in fs:
        if f.shape != fs[0].shape:
            raise InputError(f"fields to smooth have shapes {fs[0].shape} and {f.shape}: expected one grid")
    base = np.ones(fs[0].shape, bool) if mask is None else np.asarray(mask, dtype=bool)
    ms = [base & np.isfinite(f) for f in fs]
    sigs = []
    for j, sg in requests:
        sig = np.asarray(sg.values if isinstance(sg, xr.DataArray) else sg, dtype=float)
        if sig.ndim == 0:
            if not (np.isfinite(sig) and sig >= 0):
                raise InputError(f"smoothing width {float(sig)} m: expected a finite width >= 0 m")
            sig = np.where(ms[j], float(sig), np.nan) if sig > 0 else np.full(fs[j].shape, np.nan)
        elif sig.shape != fs[j].shape:
            raise InputError(f"sigma_m grid has shape {sig.shape}, field has {fs[j].shape}")
        sigs.append(sig)
    outs = _smooth_many(fs, ms, [j for j, _ in requests], sigs, info, levels_per_octave)
    return [fields[j].copy(data=o) for (j, _), o in zip(requests, outs)]  # NaN outside the masks already


def _smooth_many(fs: list[np.ndarray], ms: list[np.ndarray], which: list[int], sigs: list[np.ndarray],
                 info: GridInfo, levels_per_octave: int) -> list[np.ndarray]:
    """Core of :func:`smooth_fields` on arrays: one width ladder, each level's Gaussians computed once.

    Each request's nodes are kept sorted by their lower level, so a level visits only the nodes
    it brackets; a level applied on a block-averaged grid is interpolated back at those nodes
    only (the same bilinear weights as :func:`_coarse_gauss`, so the values are the same).
    """
    outs = [np.where(ms[j], fs[j], np.nan) for j in which]
    oks = [np.isfinite(s) & (s > 0) & ms[j] for j, s in zip(which, sigs)]
    if not any(ok.any() for ok in oks):
        return outs
    # widths below a fifth of a cell change nothing (_gauss_pass leaves them out)
    smin = max(min(float(s[ok].min()) for s, ok in zip(sigs, oks) if ok.any()), 0.15 * info.min_spacing_m())
    smax = max(max(float(s[ok].max()) for s, ok in zip(sigs, oks) if ok.any()), smin)
    ratio = 2.0 ** (1.0 / max(1, int(levels_per_octave)))
    nlev = max(1, int(math.ceil(math.log(smax / smin) / math.log(ratio))) + 1) if smax > smin else 1
    plans = []  # per request: flat nodes, lower level, weight of the upper level, first node of each level, sums
    for s, ok in zip(sigs, oks):
        idx = np.flatnonzero(ok)
        t = np.log(np.maximum(s.ravel()[idx], smin) / smin) / math.log(ratio)
        k = np.clip(np.floor(t).astype(np.int64), 0, max(nlev - 2, 0))
        frac = np.clip(t - k, 0.0, 1.0) if nlev > 1 else np.zeros(idx.size)
        order = np.argsort(k.astype(np.uint8 if nlev <= 256 else np.int64), kind="stable")  # radix sort
        idx, k, frac = idx[order], k[order], frac[order]
        first = np.searchsorted(k, np.arange(nlev + 1))  # nodes of lower level l: first[l]:first[l + 1]
        plans.append((idx, k, frac, first, np.zeros(idx.size)))
    groups: dict[bytes, list[int]] = {}  # fields sharing one node mask share the mask's Gaussian
    for j in sorted(set(which)):
        groups.setdefault(np.packbits(ms[j]).tobytes(), []).append(j)
    zeroed = {j: np.where(ms[j], fs[j], 0.0) for j in set(which)}
    weights = {g: ms[js[0]].astype(float) for g, js in groups.items()}
    ny, nx = fs[0].shape
    blocks: dict[tuple, np.ndarray] = {}
    for lev in range(nlev):
        s_i = float(smin * ratio**lev)
        # the nodes whose lower level is lev - 1 or lev
        spans = [(p[3][max(lev - 1, 0)], p[3][lev + 1]) for p in plans]
        need = {which[r] for r, (a, b) in enumerate(spans) if b > a}
        d = _decimation(info, s_i)
        if d > 1:
            iy = _lin_index(-(-ny // d), ny, d, False)
            ix = _lin_index(-(-nx // d), nx, d, info.periodic_x)
        for g, js in groups.items():
            js = [j for j in js if j in need]
            if not js:
                continue
            if d > 1:
                # levels of one block size share the block means of the mask and of the fields
                bkey = ("w", g, d)
                if bkey not in blocks:
                    blocks[bkey] = _block_mean(weights[g], d)
                wgt = _coarse_smoothed(weights[g], info, s_i, d, blocks[bkey])
            else:
                # only the part of the grid around the nodes this level serves
                nodes = [plans[r][0][spans[r][0]:spans[r][1]] for r in range(len(plans)) if which[r] in js]
                win = _window(info, s_i, np.concatenate(nodes))
                rows, cols = win if win is not None else (slice(0, ny), slice(0, nx))
                wgt = _gauss_pass(weights[g], info, s_i, window=win)
            for j in js:
                if d > 1:
                    if ("f", j, d) not in blocks:
                        blocks["f", j, d] = _block_mean(zeroed[j], d)
                    num = _coarse_smoothed(zeroed[j], info, s_i, d, blocks["f", j, d])
                else:
                    num = _gauss_pass(zeroed[j], info, s_i, window=win)
                for r, p in enumerate(plans):
                    a, b = spans[r]
                    if which[r] != j or b <= a:
                        continue
                    small = b - a < _PARALLEL_FROM_CELLS
                    if d > 1:
                        add = _sk.add_level_coarse_serial if small else _sk.add_level_coarse
                        add(p[4][a:b], p[0][a:b], p[1][a:b], p[2][a:b], num, wgt, lev, nx,
                            iy[0], iy[1], iy[2], ix[0], ix[1], ix[2])
                    else:
                        add = _sk.add_level_window_serial if small else _sk.add_level_window
                        add(p[4][a:b], p[0][a:b], p[1][a:b], p[2][a:b], num, wgt, lev, nx, rows.start, cols.start)
    for o, p in zip(outs, plans):
        o.ravel()[p[0]] = p[4]
    return outs
