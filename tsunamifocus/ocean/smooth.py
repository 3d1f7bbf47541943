"""The one masked Gaussian low-pass of depth grids (cos-latitude aware) and the sea mask."""

from __future__ import annotations

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
        for j in range(info.ny):
            sx = min(sigma_m / (info.dx * k * coslat[j]), 4.0 * info.nx)
            if sx >= min_cells:
                out[j] = ndimage.gaussian_filter1d(out[j], sx, mode=mode, truncate=3.0)
    else:
        sx = sigma_m / dxm
        if sx >= min_cells:
            out = ndimage.gaussian_filter1d(out, sx, axis=1, mode="constant", truncate=3.0)
    return out


def _normalised_gauss(f: np.ndarray, mask: np.ndarray, info: GridInfo, sigma_m: float,
                      min_cells: float = 0.2) -> np.ndarray:
    """Gaussian-weighted mean of ``f`` over the ``mask`` nodes (normalised convolution); NaN where no weight."""
    a = _gauss_pass(np.where(mask, f, 0.0), info, sigma_m, min_cells)
    b = _gauss_pass(mask.astype(float), info, sigma_m, min_cells)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(b > 1e-12, a / b, np.nan)


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
            smin, smax = float(sig[ok].min()), float(sig[ok].max())
            ratio = 2.0 ** (1.0 / max(1, int(levels_per_octave)))
            nlev = max(1, int(math.ceil(math.log(smax / smin) / math.log(ratio))) + 1) if smax > smin else 1
            levels = smin * ratio ** np.arange(nlev)
            maps = [level(float(s)) for s in levels]
            if nlev == 1:
                out = np.where(ok, maps[0], out)
            else:
                t = np.log(np.where(ok, sig, smin) / smin) / math.log(ratio)
                k = np.clip(np.floor(t).astype(int), 0, nlev - 2)
                frac = np.clip(t - k, 0.0, 1.0)
                stack = np.stack(maps)
                jj, ii = np.indices(f.shape)
                lo = stack[k, jj, ii]
                hi = stack[k + 1, jj, ii]
                out = np.where(ok, lo * (1 - frac) + hi * frac, out)
    res = field.copy(data=np.where(m, out, np.nan))
    return res
