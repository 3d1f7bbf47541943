"""The sea floor as a long wave of a given period sees it: speed averaged over a wavelength.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Ray theory assumes the medium varies slowly over a wavelength; a wave of period ``T`` does not
react to depth features much shorter than its wavelength ``lambda = c T`` (about 200 km in deep
water for a 15-minute wave, tens of km on a shelf), but rays do, and make caustics the wave
does not have. Following the wavelength-smoothing method (Lomax 1994, Geophys. J. Int. 117,
313-334: the velocity at each point is replaced by its average over a neighbourhood whose size
is proportional to the local wavelength), the long-wave speed ``c = sqrt(g h)`` is averaged with
a masked Gaussian of standard deviation ``fraction x lambda(x)``, where ``lambda`` is computed
from the averaged speed itself (two fixed-point passes), or - as the focusing traces do - from the
speed of one given large-scale ocean (the lensing reference), so that several oceans are averaged
with the same kernels. Deep water is smoothed over tens of
km, the shelf and the coast only over a few km, so the coastline and the stop isobath stay where
they are. Land, no-data cells and cells at or shallower than the stop depth keep their depth;
sea cells deeper than the stop depth never become shallower than it.

The value of ``fraction`` (0.25: Gaussian full width at half maximum ~0.6 wavelength) was chosen
by holding ray rankings against the linear long-wave solver on the demo and on a real ocean
(docs/focusing.md); it is a screening choice, not a constant of nature.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from ..constants import GRAVITY
from ..errors import InputError
from .smooth import smooth_fields

__all__ = ["WAVELENGTH_FRACTION", "wavelength_smoothed_depth", "wavelength_smoothed_depths"]

#: Gaussian standard deviation of the wavelength smoothing, in local wavelengths (see module notes).
WAVELENGTH_FRACTION: float = 0.25


def wavelength_smoothed_depth(
    depth: xr.DataArray,
    period_s: float,
    *,
    fraction: float = WAVELENGTH_FRACTION,
    stop_depth_m: float = 20.0,
    iterations: int = 2,
    gravity: float = GRAVITY,
) -> xr.DataArray:
    """Depth whose long-wave speed is averaged over a fraction of the local wavelength.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    period_s : float
        Wave period [s].
    fraction : float
        Gaussian standard deviation in local wavelengths (0 < fraction <= 2).
    stop_depth_m : float
        Stop isobath [m]: cells at or shallower than it keep their depth.
    iterations : int
        Fixed-point passes for the wavelength of the averaged speed (>= 1).
    gravity : float
        [m s-2].

    Returns
    -------
    xarray.DataArray
        Depth [m] ``= c_avg**2 / g`` on sea cells deeper than the stop depth, the input elsewhere;
        ``attrs`` record the period and the fraction.

    Raises
    ------
    InputError
        Non-positive period, fraction outside (0, 2] or fewer than one iteration.
    """
    return wavelength_smoothed_depths([depth], [period_s], fraction=fraction, stop_depth_m=stop_depth_m,
                                      iterations=iterations, gravity=gravity)[0][0]


def wavelength_smoothed_depths(
    depths: Sequence[xr.DataArray],
    periods_s: Sequence[float],
    *,
    fraction: float = WAVELENGTH_FRACTION,
    stop_depth_m: float = 20.0,
    iterations: int = 2,
    gravity: float = GRAVITY,
    wavelength_depth: xr.DataArray | None = None,
) -> list[list[xr.DataArray]]:
    """:func:`wavelength_smoothed_depth` of several oceans of one grid for several periods at once.

    Every pass smooths all oceans for all periods over one ladder of Gaussian widths, each
    width computed once (:func:`tsunamifocus.ocean.smooth.smooth_fields`): a run's real and
    reference oceans in three period bands cost about as much as one ocean in one band did.

    Parameters
    ----------
    depths : sequence of xarray.DataArray
        Depth grids [m] of one shape, positive down.
    periods_s : sequence of float
        Wave periods [s].
    fraction, stop_depth_m, iterations, gravity
        As in :func:`wavelength_smoothed_depth`.
    wavelength_depth : xarray.DataArray, optional
        A depth grid whose long-wave speed gives the local wavelength ``sqrt(g h) T`` of every
        ocean (one pass, ``iterations`` unused), e.g. the lensing reference - the large-scale
        mean depth with the shelf and coast kept -, so that all oceans are averaged with the
        same kernels. Default: each ocean's own averaged speed (fixed-point passes).

    Returns
    -------
    list of list of xarray.DataArray
        ``out[i][b]``: ocean ``i`` as a wave of period ``periods_s[b]`` sees it.
    """
    periods = [float(t) for t in periods_s]
    for t in periods:
        if not (np.isfinite(t) and t > 0):
            raise InputError(f"period_s = {t!r}: expected a wave period in seconds (> 0)")
    if not (0.0 < fraction <= 2.0):
        raise InputError(f"wavelength fraction = {fraction!r}: expected 0 < fraction <= 2")
    if int(iterations) < 1:
        raise InputError(f"iterations = {iterations!r}: expected >= 1")
    hs = [np.asarray(d.values, dtype=float) for d in depths]
    seas = [np.isfinite(h) & (h > 0) for h in hs]
    cs0 = [np.sqrt(gravity * np.where(sea, h, 1.0)) for h, sea in zip(hs, seas)]
    grids = [d.copy(data=np.where(sea, c, np.nan)) for d, sea, c in zip(depths, seas, cs0)]
    pairs = [(i, b) for i in range(len(depths)) for b in range(len(periods))]
    cs = {(i, b): cs0[i] for i, b in pairs}
    if wavelength_depth is not None:
        hw = np.asarray(wavelength_depth.values, dtype=float)
        if hw.shape != hs[0].shape:
            raise InputError(f"wavelength_depth has shape {hw.shape}, the oceans {hs[0].shape}")
        cw = np.sqrt(gravity * np.where(np.isfinite(hw) & (hw > 0), hw, np.nan))
        cs = {(i, b): np.where(np.isfinite(cw), cw, cs0[i]) for i, b in pairs}
    for _ in range(1 if wavelength_depth is not None else int(iterations)):
        reqs = [(i, np.where(seas[i], fraction * cs[i, b] * periods[b], np.nan)) for i, b in pairs]
        sm = smooth_fields(grids, reqs, mask=np.logical_or.reduce(seas))
        cs = {(i, b): np.where(seas[i], s.values, cs0[i]) for (i, b), s in zip(pairs, sm)}
    out: list[list[xr.DataArray]] = [[] for _ in depths]
    for i, b in pairs:
        h, sea = hs[i], seas[i]
        smoothed = cs[i, b] ** 2 / gravity
        keep = ~sea | (h <= stop_depth_m)
        res = depths[i].copy(data=np.where(keep, h, np.maximum(smoothed, np.minimum(h, 1.05 * stop_depth_m))))
        res.attrs = {**depths[i].attrs, "wavelength_period_s": periods[b], "wavelength_fraction": float(fraction),
                     "smoothing": "long-wave speed averaged over a Gaussian of std fraction x local wavelength "
                                  "(wavelength smoothing, Lomax 1994)"}
        out[i].append(res)
    return out
