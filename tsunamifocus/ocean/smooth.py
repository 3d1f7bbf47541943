"""The one masked Gaussian low-pass of depth grids (cos-latitude aware) and the sea mask."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import xarray as xr
from scipy import ndimage

from ..errors import (
    InputError,
)
from ..grid import GridInfo

__all__ = ['smooth_bathymetry', 'sea_mask', 'smooth_field']


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
#: Rows of a lon/lat grid are grouped by their x width in steps of this much in log width.
_ROW_WIDTH_STEP: float = 0.01


def _gauss_pass(f: np.ndarray, info: GridInfo, sigma_m: float, min_cells: float = 0.2) -> np.ndarray:
    """Separable Gaussian [std sigma_m metres]; on lon/lat the x width follows cos(lat).

    Axes (rows on lon/lat) whose width is below ``min_cells`` cells are left as they are.
    """
    if sigma_m <= 0:
        return f.copy()
    dxm, dym = info.spacing_m()
    sy = sigma_m / dym
    out = ndimage.gaussian_filter1d(f, sy, axis=0, mode="constant", truncate=3.0) if sy >= min_cells else f.copy()
    if info.geographic:
        k = math.pi / 180.0 * info.radius_m
        coslat = np.cos(np.radians(np.clip(info.y, -89.5, 89.5)))
        mode = "wrap" if info.periodic_x else "constant"
        sx = np.minimum(sigma_m / (info.dx * k * coslat), 4.0 * info.nx)
        # rows whose widths agree within 0.5 % are filtered together at their common width
        key = np.round(np.log(np.maximum(sx, 1e-12)) / _ROW_WIDTH_STEP).astype(np.int64)
        for kk in np.unique(key[sx >= min_cells]):
            rows = np.flatnonzero((key == kk) & (sx >= min_cells))
            out[rows] = ndimage.gaussian_filter1d(out[rows], math.exp(kk * _ROW_WIDTH_STEP), axis=1,
                                                  mode=mode, truncate=3.0)
    else:
        sx = sigma_m / dxm
        if sx >= min_cells:
            out = ndimage.gaussian_filter1d(out, sx, axis=1, mode="constant", truncate=3.0)
    return out


def _normalised_gauss(f: np.ndarray, mask: np.ndarray, info: GridInfo, sigma_m: float,
                      min_cells: float = 0.2) -> np.ndarray:
    """Gaussian-weighted mean of ``f`` over the ``mask`` nodes (normalised convolution); NaN where no weight.

    Widths of many cells are applied on a block-averaged grid (:func:`_decimation`) and
    interpolated back (bilinear): the cost per level then stays that of a few-cell kernel.
    """
    a0 = np.where(mask, f, 0.0)
    b0 = mask.astype(float)
    d = _decimation(info, sigma_m)
    if d > 1:
        a, b = _coarse_gauss(a0, b0, info, sigma_m, d)
    else:
        a = _gauss_pass(a0, info, sigma_m, min_cells)
        b = _gauss_pass(b0, info, sigma_m, min_cells)
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


def _coarse_gauss(a0: np.ndarray, b0: np.ndarray, info: GridInfo, sigma_m: float,
                  d: int) -> tuple[np.ndarray, np.ndarray]:
    """Gaussian of ``a0`` and ``b0`` through ``d x d`` block means, bilinear back to the grid.

    Block averaging and bilinear interpolation widen the kernel by a variance of about
    ``(d h)^2 / 4`` (``h`` the cell side: ``1/12`` for the box, ``1/6`` for the hat); the
    coarse Gaussian is narrowed by as much.
    """
    ny, nx = a0.shape
    nyc, nxc = -(-ny // d), -(-nx // d)
    cinfo = dataclasses.replace(info, x0=info.x0 + 0.5 * (d - 1) * info.dx, y0=info.y0 + 0.5 * (d - 1) * info.dy,
                                dx=info.dx * d, dy=info.dy * d, nx=nxc, ny=nyc)
    h = info.spacing_m()[1] if info.geographic else max(info.spacing_m())
    s_c = math.sqrt(max(sigma_m**2 - (d * h) ** 2 / 4.0, (0.5 * d * h) ** 2))
    outs = []
    for arr in (a0, b0):
        pad = np.zeros((nyc * d, nxc * d))
        pad[:ny, :nx] = arr
        coarse = pad.reshape(nyc, d, nxc, d).mean(axis=(1, 3))
        sm = _gauss_pass(coarse, cinfo, s_c, 0.2)
        sm = _lin_axis(sm, 0, ny, d, False)
        outs.append(_lin_axis(sm, 1, nx, d, info.periodic_x))
    return outs[0], outs[1]


def _lin_axis(arr: np.ndarray, axis: int, n_out: int, d: int, periodic: bool) -> np.ndarray:
    """Linear interpolation along ``axis`` from block centres (``d`` fine cells each) to ``n_out`` fine cells."""
    nc = arr.shape[axis]
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
    info = GridInfo.from_dataarray(field)
    f = np.asarray(field.values, dtype=float)
    m = np.isfinite(f) if mask is None else (np.asarray(mask, dtype=bool) & np.isfinite(f))
    sig = np.asarray(sigma_m.values if isinstance(sigma_m, xr.DataArray) else sigma_m, dtype=float)

    def level(s: float) -> np.ndarray:
        return _normalised_gauss(f, m, info, s)

    if sig.ndim == 0:
        if not (np.isfinite(sig) and sig >= 0):
            raise InputError(f"smoothing width {float(sig)} m: expected a finite width >= 0 m")
        out = level(float(sig))
    else:
        if sig.shape != f.shape:
            raise InputError(f"sigma_m grid has shape {sig.shape}, field has {f.shape}")
        ok = np.isfinite(sig) & (sig > 0) & m
        out = np.where(m, f, np.nan)
        if ok.any():
            # widths below a fifth of a cell change nothing (_gauss_pass leaves them out)
            smin = max(float(sig[ok].min()), 0.15 * info.min_spacing_m())
            smax = max(float(sig[ok].max()), smin)
            ratio = 2.0 ** (1.0 / max(1, int(levels_per_octave)))
            nlev = max(1, int(math.ceil(math.log(smax / smin) / math.log(ratio))) + 1) if smax > smin else 1
            levels = smin * ratio ** np.arange(nlev)
            if nlev == 1:
                out = np.where(ok, level(float(levels[0])), out)
            else:
                t = np.log(np.where(ok, np.maximum(sig, smin), smin) / smin) / math.log(ratio)
                k = np.clip(np.floor(t).astype(int), 0, nlev - 2)
                frac = np.clip(t - k, 0.0, 1.0)
                acc = np.zeros(f.shape)
                for i, s_i in enumerate(levels):
                    wt = np.where(k == i, 1.0 - frac, 0.0) + np.where(k == i - 1, frac, 0.0)
                    if wt.any():
                        acc += wt * np.nan_to_num(level(float(s_i)))
                out = np.where(ok, acc, out)
    res = field.copy(data=np.where(m, out, np.nan))
    return res
