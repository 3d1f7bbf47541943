"""Readable summary of a bathymetry grid (what ``tsunamifocus inspect`` prints)."""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ..constants import GRAVITY
from ..grid import GridInfo
from ..io.bathymetry import estimate_grid_memory

__all__ = ['summarize_grid', 'RESOLVED_CELLS_PER_WAVELENGTH', 'RAY_GRADIENT_LIMIT']

#: A wavelength must span at least this many grid cells for the grid to represent the
#: bathymetry features that could scatter it (shorter waves "see" unresolved detail).
RESOLVED_CELLS_PER_WAVELENGTH: int = 4

#: Ray theory needs the speed to change little over a wavelength: lambda * |grad c| / c below
#: this value (a geometrical-optics slowly-varying-medium criterion; common practice, no source).
RAY_GRADIENT_LIMIT: float = 0.5

#: Bytes per grid cell the ray engine needs: depth, speed, interpolation coefficients
#: (about 4 fields) and two accumulation grids per thread for 2 threads (float64).
_TRACE_BYTES_PER_CELL = 8 * (1 + 1 + 4 + 2 * 2 + 2)


def summarize_grid(depth: xr.DataArray, *, gravity: float = GRAVITY) -> dict:
    """Summarise a depth grid: geometry, depth statistics, speeds and ray-theory validity.

    The period limits are judged as follows (stated in the output):

    * ``shortest_period_s`` — the wavelength ``c T`` must span at least
      :data:`RESOLVED_CELLS_PER_WAVELENGTH` cells at the median sea depth, otherwise
      bathymetric detail at the wave's own scale is missing from the grid;
    * ``longest_ray_period_s`` — on the median sea cell ``c T |grad c| / c`` stays below
      :data:`RAY_GRADIENT_LIMIT` (speed changes slowly over a wavelength), the
      slowly-varying-medium condition of ray theory; steeper places (shelf breaks,
      seamount flanks) break it first, so longer periods are screening-grade only.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth grid [m], positive down.
    gravity : float
        Gravitational acceleration [m s-2].

    Returns
    -------
    dict
        JSON-serialisable summary.
    """
    info = GridInfo.from_dataarray(depth)
    v = depth.values
    finite = np.isfinite(v)
    sea = finite & (v > 0)
    dxm, dym = info.spacing_m()
    n = v.size
    seav = v[sea]
    out: dict = {
        "format": depth.attrs.get("source_format", "in memory"),
        "file": depth.attrs.get("source_file"),
        "sign_decided_by": depth.attrs.get("sign_decided_by"),
        "crs": info.crs.name,
        "crs_epsg": info.crs.to_epsg(),
        "geographic": info.geographic,
        "shape": [info.ny, info.nx],
        "extent": list(info.bounds),
        "extent_units": "degrees" if info.geographic else "m",
        "lon_periodic": bool(info.periodic_x),
        "spacing": [info.dx, info.dy],
        "spacing_m": [dxm, dym],
        "nodata_fraction": float(1 - finite.mean()),
        "land_fraction": float(((v <= 0) & finite).sum() / n),
        "sea_fraction": float(sea.mean()),
    }
    if seav.size:
        c = np.sqrt(gravity * seav)
        med_c = float(np.sqrt(gravity * np.median(seav)))
        cell = max(dxm, dym)
        t_min = RESOLVED_CELLS_PER_WAVELENGTH * cell / med_c
        # gradient criterion on the speed field (metres on the sphere)
        cfield = np.where(sea, np.sqrt(gravity * np.where(sea, v, 1.0)), np.nan)
        gy, gx = np.gradient(cfield)
        if info.geographic:
            k = math.pi / 180.0 * info.radius_m
            coslat = np.cos(np.radians(np.clip(info.y, -89.9, 89.9)))[:, None]
            gx = gx / (info.dx * k * coslat)
            gy = gy / (info.dy * k)
        else:
            gx, gy = gx / info.dx, gy / info.dy
        rel = np.hypot(gx, gy) / cfield  # |grad c| / c  [1/m]
        relv = rel[np.isfinite(rel)]
        g50 = float(np.median(relv)) if relv.size else 0.0
        # lambda = c T  ->  T_max = limit / (c * g50) at the median speed
        t_max = RAY_GRADIENT_LIMIT / (med_c * g50) if g50 > 0 else math.inf
        out.update(
            depth_min_m=float(seav.min()),
            depth_max_m=float(seav.max()),
            depth_mean_m=float(seav.mean()),
            depth_median_m=float(np.median(seav)),
            speed_min_ms=float(c.min()),
            speed_max_ms=float(c.max()),
            speed_median_ms=med_c,
            gravity=gravity,
            shortest_period_s=float(t_min),
            longest_ray_period_s=float(t_max),
            period_rule=(
                f"shortest: wavelength >= {RESOLVED_CELLS_PER_WAVELENGTH} cells at the median depth; "
                f"longest: wavelength x |grad c|/c < {RAY_GRADIENT_LIMIT} on the median sea cell"
            ),
        )
    out["memory_grid_bytes"] = estimate_grid_memory((info.ny, info.nx), 8)
    out["memory_load_bytes"] = estimate_grid_memory((info.ny, info.nx))
    out["memory_trace_bytes"] = estimate_grid_memory((info.ny, info.nx), _TRACE_BYTES_PER_CELL)
    return out
