"""Reference oceans: the same-mean smoothed depth and the constant-depth ocean."""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import (
    InputError,
)
from .smooth import _sea, smooth_bathymetry

__all__ = ['reference_bathymetry', 'reference_depth', 'flat_depth']


def reference_bathymetry(
    depth: xr.DataArray,
    reference_smooth_km: float,
    *,
    keep_shallower_m: float = 200.0,
    smooth_deeper_m: float = 1000.0,
    lowpass: xr.DataArray | None = None,
) -> xr.DataArray:
    """Reference ocean for the lensing factor: offshore variations low-passed, the shelf kept.

    Where the real depth exceeds ``smooth_deeper_m`` the reference is
    :func:`smooth_bathymetry` of ``reference_smooth_km``; where it is shallower than
    ``keep_shallower_m`` the reference is the real depth; in between the two are blended
    linearly in log-depth. A plain low-pass of tens of km would also flatten the narrow
    continental shelf and move the coastal stop isobath, so rays over the reference would end
    somewhere else than over the real bathymetry; keeping the shelf makes both runs share the
    same coast, shelf shoaling and stop isobath, and their ratio isolates the focusing caused
    by the offshore variations.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    reference_smooth_km : float
        Gaussian standard deviation of the low-pass [km] (``[focusing] reference_smooth_km``).
    keep_shallower_m, smooth_deeper_m : float
        Depths [m] bounding the blend (``0 < keep_shallower_m < smooth_deeper_m``).
    lowpass : xarray.DataArray, optional
        ``smooth_bathymetry(depth, reference_smooth_km)`` when the caller has it already.

    Returns
    -------
    xarray.DataArray
        Reference depth [m].
    """
    if not 0 < keep_shallower_m < smooth_deeper_m:
        raise InputError(
            f"reference blend depths: expected 0 < keep_shallower_m ({keep_shallower_m}) < "
            f"smooth_deeper_m ({smooth_deeper_m}) m"
        )
    sm = lowpass if lowpass is not None else smooth_bathymetry(depth, reference_smooth_km)
    v = depth.values.astype(float)
    s = sm.values
    sea = np.isfinite(v) & (v > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = (np.log(smooth_deeper_m) - np.log(np.where(sea, v, 1.0))) / (
            np.log(smooth_deeper_m) - np.log(keep_shallower_m))
    w = np.clip(w, 0.0, 1.0)
    out_v = np.where(sea, w * v + (1.0 - w) * s, v)
    out = depth.copy(data=out_v)
    out.attrs.update(smoothing_km=float(reference_smooth_km), reference_keep_shallower_m=float(keep_shallower_m),
                     reference_smooth_deeper_m=float(smooth_deeper_m))
    return out


# --------------------------------------------------------------------------------------
# reference bathymetries
# --------------------------------------------------------------------------------------
def reference_depth(depth: xr.DataArray, reference_smooth_km: float, *,
                    lowpass: xr.DataArray | None = None) -> xr.DataArray:
    """Same-mean reference bathymetry without variations shorter than ``reference_smooth_km``.

    The sea depths are low-passed with :func:`tsunamifocus.ocean.smooth.smooth_bathymetry`
    (normalised Gaussian of std ``reference_smooth_km``, land and coastline unchanged) and rescaled so
    the mean sea depth equals that of ``depth`` exactly.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    reference_smooth_km, lowpass
        As :func:`reference_bathymetry`: variations much shorter than ``reference_smooth_km`` are
        the ones whose focusing the lensing factor measures.

    Returns
    -------
    xarray.DataArray
        Reference depth [m], same mean sea depth as ``depth``.
    """
    # offshore variations low-passed; the shelf (< 200 m, blended up to 1000 m) kept, so the
    # coast and stop isobath are the same in both runs (see reference_bathymetry)
    ref = reference_bathymetry(depth, reference_smooth_km, lowpass=lowpass)
    sea = _sea(depth)
    v = np.asarray(depth.values, dtype=float)
    r = np.asarray(ref.values, dtype=float).copy()
    ok = sea & np.isfinite(r) & (r > 0)
    if ok.any():
        scale = v[sea].mean() / r[ok].mean()
        r[ok] *= scale
    out = ref.copy(data=r)
    out.attrs["reference_lowpass_km"] = float(reference_smooth_km)
    return out


def flat_depth(depth: xr.DataArray) -> xr.DataArray:
    """Constant-depth ocean: the mean sea depth of ``depth`` on every node (no land) [m]."""
    sea = _sea(depth)
    if not sea.any():
        raise InputError(f"depth grid '{depth.name}' has no sea node")
    mean = float(np.asarray(depth.values, dtype=float)[sea].mean())
    out = depth.copy(data=np.full(depth.shape, mean))
    out.attrs["flat_depth_m"] = mean
    return out
