"""Regularised ray energy, Fresnel widths, lensing and focusing ratio maps."""

from __future__ import annotations

import numpy as np
import xarray as xr
from scipy.spatial import cKDTree

from ..cautions import caution_summary
from ..constants import GRAVITY, MIN_DEPTH_M
from ..errors import InputError
from ..grid import GridInfo
from ..ocean.smooth import _to_xyz, smooth_fields
from . import _nearestkernel as _nk

#: Up to this many distinct launch points the distance map is a direct minimum over them.
_DIRECT_MAX_POINTS: int = 64

__all__ = ['fresnel_sigma_m', 'wavelength_sigma_m', 'regularised_energy', 'regularised_energies', 'ratio_map', 'point_source_energy_width', 'distance_to_launch_m']


def distance_to_launch_m(
    grid: xr.DataArray, launch_x: np.ndarray, launch_y: np.ndarray
) -> xr.DataArray:
    """Distance [m] from every grid node to the nearest launch point.

    For a point source this is the epicentral distance; for a plane wave launched along a
    line it is the distance from that line; for an extended source it is the distance from
    the source area. Great-circle distance on lon/lat grids (from the chord), planar otherwise.

    Parameters
    ----------
    grid : xarray.DataArray
        Any grid of the tsunamifocus convention (its nodes are used).
    launch_x, launch_y : numpy.ndarray
        Launch points in the grid CRS.

    Returns
    -------
    xarray.DataArray
        Distance [m] on the grid.
    """
    info = GridInfo.from_dataarray(grid)
    pts = np.unique(np.round(_to_xyz(info, launch_x, launch_y), 3), axis=0)
    if pts.shape[0] <= _DIRECT_MAX_POINTS:
        # a few launch points (a rupture's blocks): the least distance to each directly; the node
        # coordinates and distances are those _to_xyz and the search tree give
        if info.geographic:
            r, lo, la = info.radius_m, np.radians(info.x), np.radians(info.y)
            d = _nk.nearest_on_sphere(r * np.cos(la), r * np.sin(la), np.cos(lo), np.sin(lo), pts)
        else:
            d = _nk.nearest_on_plane(np.asarray(info.y, float), np.asarray(info.x, float), pts)
    else:
        X, Y = np.meshgrid(info.x, info.y)
        d, _ = cKDTree(pts).query(_to_xyz(info, X, Y), workers=-1)
        d = d.reshape(X.shape)
    if info.geographic:
        d = 2 * info.radius_m * np.arcsin(np.clip(d / (2 * info.radius_m), 0, 1))
    out = grid.copy(data=d)
    out.name = "distance_m"
    out.attrs = {"units": "m", "long_name": "distance to the nearest launch point"}
    return out


def _sea_and_speed(depth: xr.DataArray, period_s: float, gravity: float,
                   min_depth: float) -> tuple[np.ndarray, np.ndarray]:
    """Check the period; return the sea mask and the long-wave speed ``sqrt(g max(h, min_depth))``."""
    if not (np.isfinite(period_s) and period_s > 0):
        raise InputError(f"period_s={period_s}: expected the source's dominant period in seconds (> 0)")
    h = np.asarray(depth.values, dtype=float)
    sea = np.isfinite(h) & (h > 0)
    return sea, np.sqrt(gravity * np.maximum(np.where(sea, h, min_depth), min_depth))


def wavelength_sigma_m(
    depth: xr.DataArray,
    period_s: float,
    fraction: float,
    *,
    gravity: float = GRAVITY,
    min_depth: float = MIN_DEPTH_M,
) -> xr.DataArray:
    """Regularisation width of the focusing maps: a fraction of the local wavelength [m].

    ``sigma = fraction x sqrt(g h) T``: the same averaging length, relative to the wavelength,
    as the oceans the rays are traced over (:mod:`tsunamifocus.ocean.wavelength`). Held against
    the wave's lensing map, ray lensing maps regularised so agree with it better than over the
    first Fresnel zone (:func:`fresnel_sigma_m`), whose width grows to hundreds of km on
    trans-ocean paths and blurs away the beams the wave has (docs/focusing.md).

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down (the lensing reference: the large-scale depth, shelf kept).
    period_s : float
        Dominant period of the source [s].
    fraction : float
        Gaussian std in local wavelengths (> 0).
    gravity, min_depth : float
        [m s-2], depth clamp [m].

    Returns
    -------
    xarray.DataArray
        ``sigma`` [m], NaN on land.
    """
    if not (np.isfinite(fraction) and fraction > 0):
        raise InputError(f"fraction={fraction}: expected a positive number of wavelengths")
    sea, c = _sea_and_speed(depth, period_s, gravity, min_depth)
    out = depth.copy(data=np.where(sea, fraction * c * period_s, np.nan))
    out.name = "kernel_sigma_m"
    out.attrs = {"units": "m", "long_name": f"Gaussian regularisation std = {fraction:g} local wavelength sqrt(g h) T",
                 "period_s": float(period_s)}
    return out


def fresnel_sigma_m(
    depth: xr.DataArray,
    period_s: float,
    distance_m: xr.DataArray,
    *,
    gravity: float = GRAVITY,
    min_depth: float = MIN_DEPTH_M,
) -> xr.DataArray:
    """Regularisation width: first-Fresnel-zone radius half-way along the path [m].

    ``sigma = sqrt(lambda L) / 2`` with ``lambda = sqrt(g h) T`` (local long-wave wavelength)
    and ``L`` the distance from the source (:func:`distance_to_launch_m`). The first Fresnel
    zone radius ``sqrt(lambda d1 d2 / (d1 + d2))`` (Born & Wolf, Principles of Optics, ch. 8)
    is largest half-way along a path (``d1 = d2 = L / 2``), giving ``sqrt(lambda L) / 2``.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    period_s : float
        Dominant period of the source [s] (e.g. ``SourceSummary.period_s``).
    distance_m : xarray.DataArray
        Propagation distance [m] on the same grid.
    gravity, min_depth : float
        [m s-2], depth clamp [m].

    Returns
    -------
    xarray.DataArray
        ``sigma`` [m], NaN on land.
    """
    sea, c = _sea_and_speed(depth, period_s, gravity, min_depth)
    lam = c * period_s
    L = np.asarray(distance_m.values, dtype=float)
    sig = np.where(sea, 0.5 * np.sqrt(lam * np.maximum(L, 0.0)), np.nan)
    out = depth.copy(data=sig)
    out.name = "kernel_sigma_m"
    out.attrs = {
        "units": "m",
        "long_name": "Gaussian regularisation std = first Fresnel zone radius sqrt(lambda L)/2",
        "period_s": float(period_s),
    }
    return out


def regularised_energy(
    energy: xr.DataArray,
    sigma_m: xr.DataArray | float,
    mask: np.ndarray | None = None,
) -> xr.DataArray:
    """Energy per unit wavefront width [J m-1] smoothed by the regularisation kernel.

    Parameters
    ----------
    energy : xarray.DataArray
        ``RayResult.energy`` [J m-1].
    sigma_m : xarray.DataArray or float
        Kernel std [m], e.g. :func:`fresnel_sigma_m`.
    mask : array of bool, optional
        Sea nodes (default: all finite nodes).

    Returns
    -------
    xarray.DataArray
        Regularised energy map [J m-1], name ``energy``.
    """
    return regularised_energies([energy], sigma_m, mask)[0]


def regularised_energies(
    energies: list[xr.DataArray],
    sigma_m: xr.DataArray | float,
    mask: np.ndarray | None = None,
) -> list[xr.DataArray]:
    """:func:`regularised_energy` of several energy maps with one kernel (each width level computed once)."""
    outs = smooth_fields(energies, [(i, sigma_m) for i in range(len(energies))], mask=mask)
    for energy, out in zip(energies, outs):
        out.name = "energy"
        out.attrs = {
            **{k: v for k, v in energy.attrs.items() if k in ("grid_mapping", "lon_periodic")},
            "units": "J m-1",
            "long_name": "ray energy per unit wavefront width, Fresnel-zone regularised",
            "regularisation": "Gaussian, std = sqrt(lambda L)/2 (first Fresnel zone radius at mid-path)",
            "caution": caution_summary(),
        }
    return outs


def ratio_map(num: xr.DataArray, den: xr.DataArray, name: str, long_name: str) -> xr.DataArray:
    """``num / den`` where ``den > 0`` (NaN elsewhere): lensing or focusing factor [-]."""
    a = np.asarray(num.values, dtype=float)
    b = np.asarray(den.values, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(np.isfinite(a) & np.isfinite(b) & (b > 0), a / b, np.nan)
    out = num.copy(data=r)
    out.name = name
    out.attrs = {
        **{k: v for k, v in num.attrs.items() if k in ("grid_mapping", "lon_periodic")},
        "units": "1",
        "long_name": long_name,
        "caution": caution_summary(),
    }
    return out


def point_source_energy_width(
    energy_J: float, distance_m: np.ndarray | float, radius_m: float | None = None
) -> np.ndarray:
    """Analytic energy per unit wavefront width of an isotropic point source, constant depth.

    Rays of total energy ``E`` spread over a circle: ``E / (2 pi r)`` on a plane,
    ``E / (2 pi R sin(r / R))`` on a sphere of radius ``R`` (circumference of the small circle at
    great-circle distance ``r``). Units: J m-1.
    """
    r = np.asarray(distance_m, dtype=float)
    with np.errstate(divide="ignore"):
        if radius_m is None:
            return energy_J / (2 * np.pi * r)
        return energy_J / (2 * np.pi * radius_m * np.sin(r / radius_m))
