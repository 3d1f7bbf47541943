"""Initial potential energy of the sea-surface displacement and its directional spectrum."""

from __future__ import annotations

import math

import numpy as np
from scipy import fft as sfft
import xarray as xr

from ..constants import GRAVITY, RHO_SEAWATER
from ..errors import SourceError
from ..grid import GridInfo
from ..ocean.smooth import sea_mask

__all__ = ['potential_energy', 'land_share', 'directional_spectrum', 'period_bands', 'LAND_SHARE_WARNING']

#: Share of a source's displacement (by ``integral eta^2 dA``) on land or no data above which it is
#: reported as misplaced (common practice, no source: a quarter left out changes E, the
#: dominant period and the fan enough to check the fault trace).
LAND_SHARE_WARNING = 0.25


def _sig_window(gi: GridInfo, sig: np.ndarray, margin: float = 0.5, extra: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Row and column index arrays of the box around ``sig`` plus ``margin`` x its size + ``extra`` cells.

    Columns are contiguous across the seam of periodic grids (index arrays wrap).
    """
    jj, ii = np.nonzero(sig)
    j0, j1 = jj.min(), jj.max()
    mj = int(math.ceil(margin * (j1 - j0 + 1))) + 2 + extra
    rows = np.arange(max(j0 - mj, 0), min(j1 + mj, gi.ny - 1) + 1)
    if gi.periodic_x:
        # centre the columns on the circular mean position
        colsig = np.unique(ii)
        ang = 2 * np.pi * colsig / gi.nx
        c = int(np.rint(np.angle(np.mean(np.exp(1j * ang))) / (2 * np.pi) * gi.nx)) % gi.nx
        rel = ((colsig - c + gi.nx // 2) % gi.nx) - gi.nx // 2
        i0, i1 = rel.min(), rel.max()
        mi = int(math.ceil(margin * (i1 - i0 + 1))) + 2 + extra
        lo, hi = i0 - mi, i1 + mi
        if hi - lo + 1 >= gi.nx:
            cols = np.arange(gi.nx)
        else:
            cols = (c + np.arange(lo, hi + 1)) % gi.nx
    else:
        i0, i1 = ii.min(), ii.max()
        mi = int(math.ceil(margin * (i1 - i0 + 1))) + 2 + extra
        cols = np.arange(max(i0 - mi, 0), min(i1 + mi, gi.nx - 1) + 1)
    return rows, cols


# --------------------------------------------------------------------------- energy


def _eta2_area(eta: xr.DataArray, depth: xr.DataArray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``eta``, ``eta^2 dA`` per cell [m^4] and the sea mask, on the grid of ``depth`` (shapes checked)."""
    gi = GridInfo.from_dataarray(depth)
    e = np.asarray(eta.values, dtype=float)
    if e.shape != (gi.ny, gi.nx):
        raise SourceError(f"eta shape {e.shape} does not match the depth grid {(gi.ny, gi.nx)}")
    sea = sea_mask(np.asarray(depth.values, dtype=float))
    return e, e * e * np.broadcast_to(gi.cell_area_m2(), e.shape), sea


def potential_energy(eta: xr.DataArray, depth: xr.DataArray, *, rho: float = RHO_SEAWATER,
                     gravity: float = GRAVITY) -> float:
    """Initial potential energy ``E = 1/2 rho g integral(eta^2 dA)`` over the sea [J].

    Only sea cells (finite depth > 0) count; cell areas from
    :meth:`~tsunamifocus.grid.GridInfo.cell_area_m2`.

    Parameters
    ----------
    eta : xarray.DataArray
        Sea-surface displacement [m].
    depth : xarray.DataArray
        Depth [m] on the same grid.
    rho : float
        Sea-water density [kg m-3].
    gravity : float
        [m s-2].

    Returns
    -------
    float
        Energy [J].
    """
    e, w, sea = _eta2_area(eta, depth)
    if np.any(sea & ~np.isfinite(e)):
        raise SourceError(f"eta '{eta.name}' has NaN/inf values over {int(np.sum(sea & ~np.isfinite(e)))} sea cells")
    return float(0.5 * rho * gravity * np.sum(np.where(sea, w, 0.0)))


def land_share(eta: xr.DataArray, depth: xr.DataArray) -> float:
    """Share of the displacement ``integral eta^2 dA`` that lies on land or no-data cells [0-1].

    The tsunami is made by the displacement of the sea only (:func:`potential_energy`); a fault
    trace placed under the coast instead of along its trench puts much of its uplift on land,
    which then silently lowers the energy and moves the dominant period.

    Parameters
    ----------
    eta : xarray.DataArray
        Displacement [m] on the grid of ``depth`` (also over land).
    depth : xarray.DataArray
        Depth [m], positive down.

    Returns
    -------
    float
        0 when all of it is at sea; NaN when there is no displacement at all.
    """
    _, w, sea = _eta2_area(eta, depth)
    w = np.where(np.isfinite(w), w, 0.0)
    total = float(w.sum())
    return float(w[~sea].sum() / total) if total > 0 else float("nan")


# --------------------------------------------------------------------------- directivity & ray fan


def directional_spectrum(
    block: np.ndarray, dx_m: float, dy_m: float, azimuth_deg: np.ndarray, *, pad: int = 4, n_k: int = 400,
    max_cells: int = 384,
) -> np.ndarray:
    """Far-field directional energy ``P(theta) = integral |F(k sin t, k cos t)|^2 k dk``.

    ``F`` is the 2-D Fourier transform of the sea-surface block (rows northward, columns
    eastward, spacing ``dx_m`` x ``dy_m``), computed by FFT with ``pad``-fold zero padding and
    interpolated bilinearly onto polar samples ``k = 0 .. min(pi/dx, pi/dy)`` (``n_k`` steps).
    Blocks larger than ``max_cells`` on a side are block-averaged first (the far-field pattern
    is a low-wavenumber property).

    Parameters
    ----------
    block : numpy.ndarray
        ``eta`` [m] on a regular metric grid (land set to 0 by the caller).
    dx_m, dy_m : float
        Spacing [m].
    azimuth_deg : numpy.ndarray
        Directions [degrees clockwise from north].

    Returns
    -------
    numpy.ndarray
        ``P`` at each azimuth [m^6 per radian, arbitrary overall scale for the caller].
    """
    from scipy.interpolate import RegularGridInterpolator

    b = np.nan_to_num(np.asarray(block, dtype=float))
    fy = max(1, int(math.ceil(b.shape[0] / max_cells)))
    fx = max(1, int(math.ceil(b.shape[1] / max_cells)))
    if fy > 1 or fx > 1:
        ny, nx = (b.shape[0] // fy + (b.shape[0] % fy > 0)) * fy, (b.shape[1] // fx + (b.shape[1] % fx > 0)) * fx
        bb = np.zeros((ny, nx))
        bb[: b.shape[0], : b.shape[1]] = b
        b = bb.reshape(ny // fy, fy, nx // fx, fx).mean(axis=(1, 3))
        dx_m, dy_m = dx_m * fx, dy_m * fy
    ny, nx = b.shape
    py, px = pad * ny, pad * nx
    F = np.fft.fftshift(np.fft.fft2(b, s=(py, px))) * dx_m * dy_m
    P2 = np.abs(F) ** 2
    kx = np.fft.fftshift(2 * np.pi * np.fft.fftfreq(px, d=dx_m))
    ky = np.fft.fftshift(2 * np.pi * np.fft.fftfreq(py, d=dy_m))
    interp = RegularGridInterpolator((ky, kx), P2, method="linear", bounds_error=False, fill_value=0.0)
    kmax = min(np.pi / dx_m, np.pi / dy_m)
    k = np.linspace(0.0, kmax, n_k + 1)
    az = np.radians(np.asarray(azimuth_deg, dtype=float))
    KX = k[None, :] * np.sin(az)[:, None]
    KY = k[None, :] * np.cos(az)[:, None]
    vals = interp(np.stack([KY.ravel(), KX.ravel()], axis=1)).reshape(KX.shape)
    return np.trapezoid(vals * k[None, :], k, axis=1)


def period_bands(
    eta: xr.DataArray,
    depth: xr.DataArray,
    period_s: float,
    *,
    threshold: float = 0.1,
    pad: int = 8,
) -> list[tuple[float, float]]:
    """Octave period bands of the source and the share of its energy in each.

    The initial sea surface's wavenumber power spectrum ``|F(k)|^2`` (FFT of the uplift window,
    zero-padded ``pad``-fold) is mapped to periods with the long-wave relation
    ``T = 2 pi / (k c_s)``, ``c_s = sqrt(g h_s)`` at the mean depth ``h_s`` of the cells where
    ``|eta| >= threshold max|eta|`` (linear long-wave theory: each Fourier component of the
    initial surface travels as a wave of that period). Three octave bands centred on
    ``T0 / 2``, ``T0`` and ``2 T0`` (``T0 = period_s``; edges ``T0 / sqrt(2)``,
    ``sqrt(2) T0``) receive the energy below, within and above the central octave.

    Parameters
    ----------
    eta : xarray.DataArray
        Initial sea surface [m].
    depth : xarray.DataArray
        Depth [m], positive down.
    period_s : float
        Dominant period ``T0`` [s] (e.g. ``SourceSummary.period_s``).
    threshold : float
        Fraction of the peak ``|eta|`` defining the source area for ``h_s``.
    pad : int
        Zero-padding factor of the FFT.

    Returns
    -------
    list of (float, float)
        ``(period_s, weight)`` for the three bands, shortest first; weights sum to 1.

    Raises
    ------
    SourceError
        Non-positive period, or no displacement over sea cells.
    """
    if not (np.isfinite(period_s) and period_s > 0):
        raise SourceError(f"period_s = {period_s!r}: expected the source's dominant period in seconds (> 0)")
    gi = GridInfo.from_dataarray(depth)
    dep = np.asarray(depth.values, dtype=float)
    sea = sea_mask(dep)
    e = np.where(sea, np.nan_to_num(np.asarray(eta.values, dtype=float)), 0.0)
    amax = float(np.max(np.abs(e))) if e.size else 0.0
    if amax == 0.0:
        raise SourceError("the source has no sea-surface displacement over sea cells of the grid")
    c_s = math.sqrt(GRAVITY * float(np.mean(dep[sea & (np.abs(e) >= threshold * amax)])))
    rows, cols = _sig_window(gi, np.abs(e) >= 1e-3 * amax, margin=0.5)
    block = e[np.ix_(rows, cols)]
    lat = float(gi.y[rows].mean()) if gi.geographic else 0.0
    if gi.geographic:
        k_deg = math.pi / 180.0 * gi.radius_m
        dx, dy = gi.dx * k_deg * math.cos(math.radians(lat)), gi.dy * k_deg
    else:
        dx, dy = gi.dx, gi.dy
    py, px = min(pad * block.shape[0], 4096), min(pad * block.shape[1], 4096)
    # real input: the half plane kx >= 0 of the power spectrum, the columns that stand for
    # their mirror image (-kx) counted twice
    # (the rows first, then the columns: the padding rows are zero and need no transform - the
    # same values as one 2-D transform of the padded block)
    spec = sfft.fft(sfft.rfft(block, n=px, axis=1, workers=-1), n=py, axis=0, workers=-1)
    power = np.abs(spec) ** 2
    wcol = np.full(power.shape[1], 2.0)
    wcol[0] = 1.0
    if px % 2 == 0:
        wcol[-1] = 1.0
    kx = 2 * np.pi * np.fft.rfftfreq(px, d=dx)
    ky = 2 * np.pi * np.fft.fftfreq(py, d=dy)
    k = np.hypot(ky[:, None], kx[None, :])
    # period T = 2 pi / (k c_s): band edges T0 / sqrt(2) and sqrt(2) T0 as wavenumbers
    k_short, k_long = 2 * np.pi / (period_s * 2**-0.5 * c_s), 2 * np.pi / (period_s * 2**0.5 * c_s)
    band = np.where(k > k_short, 0, np.where(k > k_long, 1, 2))
    share = np.bincount(band.ravel(), weights=(power * wcol).ravel(), minlength=3)[:3]
    share = share / share.sum()
    return [(float(t), float(s)) for t, s in zip(period_s * np.array([0.5, 1.0, 2.0]), share)]
