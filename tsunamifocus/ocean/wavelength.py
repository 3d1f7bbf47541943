"""The sea floor as a long wave of a given period sees it: speed averaged over a wavelength.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Ray theory assumes the medium varies slowly over a wavelength; a wave of period ``T`` does not
react to depth features much shorter than its wavelength ``lambda = c T`` (about 200 km in deep
water for a 15-minute wave, tens of km on a shelf), but rays do, and make caustics the wave
does not have. Following the wavelength-smoothing method (Lomax 1994, Geophys. J. Int. 117,
313-334: the velocity at each point is replaced by its average over a neighbourhood whose size
is proportional to the local wavelength), the long-wave speed ``c = sqrt(g h)`` is averaged with
a masked Gaussian of standard deviation ``fraction x lambda(x)``, where ``lambda`` is computed
from the averaged speed itself (two fixed-point passes). Deep water is smoothed over tens of
km, the shelf and the coast only over a few km, so the coastline and the stop isobath stay where
they are. Land, no-data cells and cells at or shallower than the stop depth keep their depth;
sea cells deeper than the stop depth never become shallower than it.

The value of ``fraction`` (0.25: Gaussian full width at half maximum ~0.6 wavelength) was chosen
by holding ray rankings against the linear long-wave solver on the demo and on a real ocean
(docs/focusing.md); it is a screening choice, not a constant of nature.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..constants import GRAVITY
from ..errors import InputError
from .smooth import smooth_field

__all__ = ["WAVELENGTH_FRACTION", "wavelength_smoothed_depth"]

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
    if not (np.isfinite(period_s) and period_s > 0):
        raise InputError(f"period_s = {period_s!r}: expected a wave period in seconds (> 0)")
    if not (0.0 < fraction <= 2.0):
        raise InputError(f"wavelength fraction = {fraction!r}: expected 0 < fraction <= 2")
    if int(iterations) < 1:
        raise InputError(f"iterations = {iterations!r}: expected >= 1")
    h = np.asarray(depth.values, dtype=float)
    sea = np.isfinite(h) & (h > 0)
    c = np.sqrt(gravity * np.where(sea, h, 1.0))
    c_grid = depth.copy(data=np.where(sea, c, np.nan))
    cs = c
    for _ in range(int(iterations)):
        sigma = depth.copy(data=np.where(sea, fraction * cs * period_s, np.nan))
        cs = np.where(sea, smooth_field(c_grid, sigma, mask=sea).values, c)
    smoothed = cs**2 / gravity
    keep = ~sea | (h <= stop_depth_m)
    out = np.where(keep, h, np.maximum(smoothed, np.minimum(h, 1.05 * stop_depth_m)))
    res = depth.copy(data=out)
    res.attrs = {**depth.attrs, "wavelength_period_s": float(period_s), "wavelength_fraction": float(fraction),
                 "smoothing": "long-wave speed averaged over a Gaussian of std fraction x local wavelength "
                              "(wavelength smoothing, Lomax 1994)"}
    return res
