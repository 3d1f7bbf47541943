"""First-arrival travel times of the long wave: the eikonal equation ``|grad T| = 1 / c`` by fast marching.

The first arrival at a place is the earliest time any path through connected water brings the
front there (Huygens' principle), so it exists wherever water connects the place to the source,
behind islands and ridges included (the front diffracts around them). It is computed on the grid
itself, independently of the rays, by second-order fast marching (Sethian 1999) with the long-wave
speed ``c = sqrt(g h)``:

* **projected grids**: cells ``dx`` by ``dy`` metres on the plane of the CRS;
* **lon/lat grids**: on the sphere of the grid (radius ``GridInfo.radius_m``), with the metric
  factors of the sphere (a cell is ``R cos(lat) dlon`` wide and ``R dlat`` tall), longitude
  wrapping across the 0/360 seam when the grid spans the globe (``lon_periodic``), a row at a
  pole treated as the one point it is, and a row within a cell of a pole joined to the row half a
  turn away across the pole.

Barriers: land, no data, and water not deeper than the stop isobath (the cells rays stop at). The
initial front is the source's uplift area (sea cells with ``|eta| >= FRONT_FRACTION max|eta|``,
time 0) or, for a point source, the exact times ``distance / c`` in a disc of
``POINT_INIT_CELLS`` cells around the point.

Screening estimates only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
import xarray as xr
from pyproj import CRS, Transformer

from ..cautions import caution_summary
from ..constants import GRAVITY, STOP_DEPTH_M
from ..errors import InputError, SourceError
from ..grid import GridInfo
from . import _fmmkernel as K

__all__ = ["FRONT_FRACTION", "POINT_INIT_CELLS", "TravelTimes", "first_arrival_times", "sea_mask",
           "isochrone_levels", "isochrone_lines", "sample_at_sea"]

#: Fraction of the peak |uplift| bounding the initial front (the uplift area starts at time 0).
#: A small fraction: the front is where the sea surface has measurably moved (common practice, no source).
FRONT_FRACTION: float = 0.05

#: Radius [cells] of the disc around a point source whose times are set exactly (distance / c)
#: before marching; removes the first-order error of a point-like start (common practice, no source).
POINT_INIT_CELLS: float = 5.0


@dataclass
class TravelTimes:
    """A first-arrival travel-time grid and how it was made.

    Attributes
    ----------
    travel_time_s : xarray.DataArray
        First-arrival time [s], dims like the depth; NaN on barriers and unreached water.
    stats : dict
        ``elapsed_s`` (solver wall time [s]), ``n_reached`` (cells with a time), ``n_front``
        (cells of the initial front), ``stop_depth_m``, ``method``.
    """

    travel_time_s: xr.DataArray
    stats: dict = field(default_factory=dict)


def sea_mask(depth: xr.DataArray, stop_depth_m: float = STOP_DEPTH_M) -> np.ndarray:
    """Cells the front may cross: finite depth deeper than the stop isobath [m]."""
    v = np.asarray(depth.values, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.isfinite(v) & (v > float(stop_depth_m))


def _metric(info: GridInfo) -> tuple[np.ndarray, float, bool, bool, float, float]:
    """Per-row x spacing [m], y spacing [m], pole flags and cross-pole distances [m]."""
    if not info.geographic:
        return np.full(info.ny, abs(info.dx)), abs(info.dy), False, False, 1.0, 1.0
    r = info.radius_m
    dlon = math.radians(abs(info.dx))
    dlat = math.radians(abs(info.dy))
    lat = np.radians(np.asarray(info.y, dtype=float))
    # a row on a pole is one point: its cells are (almost) no distance apart
    coslat = np.maximum(np.cos(lat), math.sin(dlat / 4.0))
    hx = r * dlon * coslat
    hy = r * dlat
    pole_s = pole_n = False
    hps = hpn = 1.0
    if info.periodic_x and info.nx % 2 == 0:
        gap_s = math.pi / 2 + lat[0]  # angular distance of the first row from the south pole
        gap_n = math.pi / 2 - lat[-1]
        if 1e-9 < gap_s < dlat * 1.0000001:
            pole_s, hps = True, 2.0 * r * gap_s
        if 1e-9 < gap_n < dlat * 1.0000001:
            pole_n, hpn = True, 2.0 * r * gap_n
    return hx, hy, pole_s, pole_n, hps, hpn


def _distance_m(info: GridInfo, x0: float, y0: float, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Great-circle (sphere of the grid) or planar distance [m] from (x0, y0) to cells."""
    if info.geographic:
        la0, lo0 = math.radians(y0), math.radians(x0)
        la, lo = np.radians(y), np.radians(x)
        h = np.sin((la - la0) / 2) ** 2 + math.cos(la0) * np.cos(la) * np.sin((lo - lo0) / 2) ** 2
        return 2.0 * info.radius_m * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))
    return np.hypot(x - x0, y - y0)


def _point_xy(info: GridInfo, point: tuple[float, float], point_crs: str | None) -> tuple[float, float]:
    x, y = float(point[0]), float(point[1])
    if point_crs is not None:
        src = CRS.from_user_input(point_crs)
        if not src.equals(info.crs):
            x, y = (float(v) for v in Transformer.from_crs(src, info.crs, always_xy=True).transform(x, y))
    if info.geographic:
        x = float(info.wrap_lon(x))
    if not (math.isfinite(x) and math.isfinite(y) and bool(np.all(info.contains(x, y)))):
        raise SourceError(f"source point ({point[0]:g}, {point[1]:g}) lies outside the grid: expected a point "
                          f"inside the bounds {tuple(round(b, 4) for b in info.bounds)}")
    return x, y


def first_arrival_times(
    depth: xr.DataArray,
    *,
    uplift: xr.DataArray | None = None,
    point: tuple[float, float] | None = None,
    point_crs: str | None = "EPSG:4326",
    stop_depth_m: float = STOP_DEPTH_M,
    front_fraction: float = FRONT_FRACTION,
    gravity: float = GRAVITY,
    max_time_s: float | None = None,
) -> TravelTimes:
    """First-arrival travel times [s] of the long wave from an uplift area or a point.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down (grid convention of :mod:`tsunamifocus.grid`).
    uplift : xarray.DataArray, optional
        Initial sea-surface displacement [m] on the depth grid; the front starts (time 0) on the
        sea cells with ``|uplift| >= front_fraction * max|uplift|``.
    point : (float, float), optional
        Point source in ``point_crs`` (lon/lat degrees by default; None: grid CRS). Exactly one of
        ``uplift`` and ``point`` is given.
    point_crs : str or None
        CRS of ``point``.
    stop_depth_m : float
        Stop isobath [m]: water not deeper than this is a barrier, like land.
    front_fraction : float
        See ``uplift`` (0 < f < 1).
    gravity : float
        g [m s-2] of ``c = sqrt(g h)``.
    max_time_s : float, optional
        Stop marching beyond this time [s] (NaN there); default: march everywhere.

    Returns
    -------
    TravelTimes

    Raises
    ------
    SourceError
        No sea cell under the uplift / near the point, a point outside the grid, or both / neither
        source given.
    InputError
        Bad ``stop_depth_m``, ``front_fraction`` or ``max_time_s``.
    """
    if (uplift is None) == (point is None):
        raise SourceError("first_arrival_times: give exactly one of uplift= (a grid) and point= (x, y)")
    if not (math.isfinite(stop_depth_m) and stop_depth_m >= 0):
        raise InputError(f"stop_depth_m={stop_depth_m!r}: expected a depth >= 0 m")
    if not (0.0 < front_fraction < 1.0):
        raise InputError(f"front_fraction={front_fraction!r}: expected a fraction in (0, 1)")
    if max_time_s is not None and not (max_time_s > 0):
        raise InputError(f"max_time_s={max_time_s!r}: expected a positive time [s]")
    info = GridInfo.from_dataarray(depth)
    sea = sea_mask(depth, stop_depth_m)
    h = np.where(sea, np.asarray(depth.values, dtype=float), np.nan)
    c = np.sqrt(gravity * h)
    T = np.full(sea.shape, np.inf)
    state = np.where(sea, K.FAR, K.BARRIER).astype(np.int8)
    if uplift is not None:
        e = np.abs(np.asarray(uplift.values, dtype=float))
        if e.shape != sea.shape:
            raise SourceError(f"uplift grid {e.shape} differs from the depth grid {sea.shape}")
        e = np.where(sea & np.isfinite(e), e, 0.0)
        emax = float(e.max()) if e.size else 0.0
        if not emax > 0:
            raise SourceError(f"no sea cell deeper than the stop isobath ({stop_depth_m:g} m) under the source's "
                              "uplift: expected a source over water")
        front = e >= front_fraction * emax
        T[front] = 0.0
        state[front] = K.KNOWN
        how = f"uplift area (|eta| >= {front_fraction:g} max)"
    else:
        x0, y0 = _point_xy(info, point, point_crs)
        fi, fj = info.index_of(x0, y0)
        rad = int(math.ceil(POINT_INIT_CELLS)) + 1
        i0, j0 = int(round(float(fi))), int(round(float(fj)))
        jj = np.arange(max(0, j0 - rad), min(info.ny, j0 + rad + 1))
        ii = np.arange(i0 - rad, i0 + rad + 1)
        ii = ii % info.nx if info.periodic_x else ii[(ii >= 0) & (ii < info.nx)]
        J, I = np.meshgrid(jj, ii, indexing="ij")
        d = _distance_m(info, x0, y0, np.asarray(info.x)[I], np.asarray(info.y)[J])
        ok = sea[J, I]
        if not ok.any():
            raise SourceError(f"source point ({point[0]:g}, {point[1]:g}) has no sea cell deeper than the stop "
                              f"isobath ({stop_depth_m:g} m) within {rad} cells: expected a point at sea")
        c0 = float(c[J[ok], I[ok]][np.argmin(d[ok])])  # speed at the nearest sea cell
        hx, hy = _metric(info)[:2]
        r_init = POINT_INIT_CELLS * min(float(np.median(hx[jj])), hy)
        disc = ok & (d <= max(r_init, float(d[ok].min()) * 1.0000001))
        T[J[disc], I[disc]] = d[disc] / c0
        state[J[disc], I[disc]] = K.KNOWN
        how = f"point ({point[0]:g}, {point[1]:g}), exact times within {int(disc.sum())} cells"
    hx, hy, pole_s, pole_n, hps, hpn = _metric(info)
    slow = np.where(sea, 1.0 / np.where(sea, c, 1.0), 0.0)
    t0 = time.perf_counter()
    Tf = T.ravel()
    n_acc = K.fast_march(Tf, state.ravel(), slow.ravel(), hx, float(hy), info.nx, info.ny, info.periodic_x,
                         pole_s, pole_n, float(hps), float(hpn),
                         float(max_time_s) if max_time_s is not None else np.inf)
    elapsed = time.perf_counter() - t0
    out = np.where(np.isfinite(T), T, np.nan)
    da = xr.DataArray(out, coords=depth.coords, dims=depth.dims, name="travel_time_s",
                      attrs={"units": "s", "long_name": "first-arrival travel time (eikonal, fast marching)",
                             "method": "second-order fast marching of |grad T| = 1/sqrt(g h) "
                                       + ("on the sphere" if info.geographic else "on the plane"),
                             "initial_front": how, "stop_depth_m": float(stop_depth_m),
                             "caution": caution_summary()})
    for k in ("grid_mapping", "lon_periodic"):
        if k in depth.attrs:
            da.attrs[k] = depth.attrs[k]
    stats = {"elapsed_s": elapsed, "n_reached": int(np.isfinite(out).sum()), "n_front": int((T == 0).sum()),
             "n_accepted": int(n_acc), "stop_depth_m": float(stop_depth_m), "method": da.attrs["method"],
             "initial_front": how}
    return TravelTimes(travel_time_s=da, stats=stats)


# ------------------------------------------------------------------------------------ sampling
def sample_at_sea(travel_time_s: xr.DataArray, x: np.ndarray, y: np.ndarray, radius_m: float
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Time at the nearest cell with a time (sea deeper than the stop isobath) within ``radius_m``.

    Parameters
    ----------
    travel_time_s : xarray.DataArray
        First-arrival times [s] (NaN on barriers).
    x, y : array_like
        Places in the grid CRS (longitudes in any turn on lon/lat grids).
    radius_m : float
        Search radius [m] (great-circle on the sphere of the grid, planar otherwise).

    Returns
    -------
    value, distance_m, column, row : numpy.ndarray
        NaN / -1 where no such cell lies within the radius.
    """
    info = GridInfo.from_dataarray(travel_time_s)
    v = np.asarray(travel_time_s.values, dtype=float)
    x = np.atleast_1d(np.asarray(x, dtype=float))
    y = np.atleast_1d(np.asarray(y, dtype=float))
    n = x.size
    val, dist = np.full(n, np.nan), np.full(n, np.nan)
    col, row = np.full(n, -1, dtype=np.int64), np.full(n, -1, dtype=np.int64)
    hx, hy = _metric(info)[:2]
    for k in range(n):
        xk = float(info.wrap_lon(x[k])) if info.geographic else float(x[k])
        if not (math.isfinite(xk) and math.isfinite(y[k])):
            continue
        fi, fj = info.index_of(xk, y[k])
        fi, fj = float(fi), float(fj)
        nj = int(math.ceil(radius_m / hy)) + 1
        j_lo, j_hi = max(0, int(math.floor(fj)) - nj), min(info.ny - 1, int(math.ceil(fj)) + nj)
        if j_lo > j_hi:
            continue
        hmin = float(hx[j_lo:j_hi + 1].min())
        ni = min(info.nx, int(math.ceil(radius_m / max(hmin, 1e-6))) + 1)
        ii = np.arange(int(math.floor(fi)) - ni, int(math.ceil(fi)) + ni + 1)
        ii = np.unique(ii % info.nx) if info.periodic_x else ii[(ii >= 0) & (ii < info.nx)]
        jj = np.arange(j_lo, j_hi + 1)
        if ii.size == 0:
            continue
        J, I = np.meshgrid(jj, ii, indexing="ij")
        fin = np.isfinite(v[J, I])
        if not fin.any():
            continue
        Jf, If = J[fin], I[fin]
        d = _distance_m(info, xk, float(y[k]), np.asarray(info.x)[If], np.asarray(info.y)[Jf])
        m = int(np.argmin(d))
        if d[m] <= radius_m:
            val[k], dist[k], col[k], row[k] = v[Jf[m], If[m]], d[m], If[m], Jf[m]
    return val, dist, col, row


# ------------------------------------------------------------------------------------ isochrones
def isochrone_levels(travel_time_s: xr.DataArray, step_min: float | None) -> list[tuple[float, bool]]:
    """Isochrone times [min] up to the latest arrival: every hour, and every ``step_min`` between.

    Returns
    -------
    list of (float, bool)
        ``(minutes, hourly)`` in increasing order.
    """
    if step_min is not None and not (math.isfinite(step_min) and step_min > 0):
        raise InputError(f"isochrone step {step_min!r} min: expected a positive number of minutes")
    t = np.asarray(travel_time_s.values, dtype=float)
    tmax = float(np.nanmax(t)) / 60.0 if np.isfinite(t).any() else 0.0
    step = float(step_min) if step_min else 60.0
    lv = set(np.round(np.arange(60.0, tmax + 1e-9, 60.0), 6))
    lv |= set(np.round(np.arange(step, tmax + 1e-9, step), 6))
    return [(float(m), abs(m / 60.0 - round(m / 60.0)) < 1e-9) for m in sorted(lv) if m > 0]


def _label(minutes: float) -> str:
    h, m = divmod(int(round(minutes)), 60)
    return f"{h} h" if m == 0 else (f"{m} min" if h == 0 else f"{h} h {m:02d} min")


def isochrone_lines(travel_time_s: xr.DataArray, step_min: float | None = None):
    """Isochrones (lines of equal first-arrival time) as a table of shapely lines in the grid CRS.

    Parameters
    ----------
    travel_time_s : xarray.DataArray
        First-arrival times [s].
    step_min : float, optional
        Finer interval [min] between the hourly lines (e.g. 15); None: hourly only.

    Returns
    -------
    pandas.DataFrame
        One row per time: ``minutes`` [min], ``hours`` [h], ``label`` ("2 h", "2 h 30 min"),
        ``hourly`` (bool), ``geometry`` (shapely MultiLineString, grid CRS; lines of a global grid
        run continuously across the seam). Times no line exists for are left out.
    """
    import contourpy
    import pandas as pd
    import shapely

    info = GridInfo.from_dataarray(travel_time_s)
    t = np.asarray(travel_time_s.values, dtype=float) / 60.0
    x = np.asarray(info.x, dtype=float)
    z = t
    if info.periodic_x:
        x = np.append(x, x[-1] + info.dx)
        z = np.concatenate([z, z[:, :1]], axis=1)
    gen = contourpy.contour_generator(x, np.asarray(info.y, dtype=float), np.ma.masked_invalid(z),
                                      line_type=contourpy.LineType.Separate)
    rows = []
    for minutes, hourly in isochrone_levels(travel_time_s, step_min):
        pieces = [np.asarray(p, dtype=float) for p in gen.lines(minutes)]
        pieces = [p for p in pieces if p.shape[0] >= 2]
        if not pieces:
            continue
        geom = shapely.MultiLineString([p for p in pieces])
        rows.append({"minutes": minutes, "hours": minutes / 60.0, "label": _label(minutes), "hourly": hourly,
                     "geometry": geom})
    return pd.DataFrame(rows, columns=["minutes", "hours", "label", "hourly", "geometry"])
