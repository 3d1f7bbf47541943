"""Points of interest: values at named places, with the distances they were read at.

A point (harbour entrance, gauge) usually lies inshore of the stop isobath where no ray goes, so
its values are read at two nearby places, and the table says how far away both are:

* the **nearest sea cell reached by rays** (first arrival time, lensing-factor map), at
  ``cell_distance_km``;
* the **nearest coastline segment** of the coast of interest (segment lensing factor, indicative
  amplitude, and the first arrival when no cell is near enough), at ``segment_distance_km``.

Distances are geodesic on the grid's sphere for lon/lat grids (pyproj ``Geod``) and planar in
the grid CRS for projected grids. Beyond ``max_distance_km`` a value is not given (NaN) and the
``note`` column says why; the run summary repeats the notes. Points outside the grid get no value.
Longitudes may be given in -180..180 or 0..360 numbers whatever the grid uses.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import shapely
import xarray as xr
from pyproj import CRS, Geod, Transformer

from ..grid import GridInfo

__all__ = ["DEFAULT_POINT_MAX_KM", "POINT_MAX_CELLS", "point_max_distance_km", "points_table",
           "nearest_segment"]

#: Default largest distance [km] of a point from the segment / sea cell it is read at: 3 grid cells,
#: at least 25 km (a harbour on the shore is typically one to three cells of a coarse grid from the
#: stop isobath; common practice, no source).
DEFAULT_POINT_MAX_KM = 25.0
POINT_MAX_CELLS = 3.0

POINT_COLUMNS = ["name", "lon", "lat", "first_arrival_min", "lensing_factor", "amp_1m_m", "nearest_segment",
                 "segment_distance_km", "lensing_factor_map", "cell_distance_km", "note"]


def point_max_distance_km(depth: xr.DataArray, given: float | None = None) -> tuple[float, str]:
    """The distance limit [km] for points of interest and where it comes from."""
    if given is not None:
        return float(given), "[coast] point_max_distance_km"
    info = GridInfo.from_dataarray(depth)
    cells = POINT_MAX_CELLS * max(info.spacing_m()) / 1000.0
    km = max(DEFAULT_POINT_MAX_KM, cells)
    return km, (f"default: {POINT_MAX_CELLS:g} grid cells" if cells > DEFAULT_POINT_MAX_KM
                else f"default: at least {DEFAULT_POINT_MAX_KM:g} km")


def _sample_nearest_finite(da: xr.DataArray, x: float, y: float, max_cells: int = 6) -> tuple[float, float]:
    """Value of the nearest finite cell to (x, y) within ``max_cells``, and its distance in cells."""
    v, _i, _j, d = _nearest_finite_cell(da, x, y, max_cells)
    return v, d


def _nearest_finite_cell(da: xr.DataArray, x: float, y: float, max_cells: int) -> tuple[float, int, int, float]:
    """(value, column, row, distance in cells) of the nearest finite cell within ``max_cells``."""
    info = GridInfo.from_dataarray(da)
    fi, fj = info.index_of(x, y)
    i0, j0 = int(round(float(fi))), int(round(float(fj)))
    v = da.values
    best, bi, bj, bd = math.nan, -1, -1, math.inf
    for dj in range(-max_cells, max_cells + 1):
        j = j0 + dj
        if not 0 <= j < info.ny:
            continue
        for di in range(-max_cells, max_cells + 1):
            i = i0 + di
            if info.periodic_x:
                i %= info.nx
            if 0 <= i < info.nx and np.isfinite(v[j, i]):
                d = math.hypot(di, dj)
                if d < bd:
                    best, bi, bj, bd = float(v[j, i]), i, j, d
    return best, bi, bj, bd


def _distance_m(info: GridInfo, x0: float, y0: float, x1: float, y1: float) -> float:
    if info.geographic:
        _, _, d = Geod(a=info.radius_m, b=info.radius_m).inv(x0, y0, x1, y1)
        return abs(float(d))
    return math.hypot(x1 - x0, y1 - y0)


def nearest_segment(segments: pd.DataFrame, info: GridInfo, x: float, y: float) -> tuple[int, float]:
    """Row position of the segment nearest to a point (grid CRS) and the distance to it [m].

    On lon/lat grids the segments are projected onto an azimuthal equidistant plane centred on
    the point (distances from the centre are exact great-circle distances on the grid's sphere),
    the nearest point of the nearest segment is found there and its distance measured with
    :class:`pyproj.Geod`. Longitudes of the point and the segments may differ by whole turns.
    """
    if len(segments) == 0:
        return -1, math.inf
    geoms = np.asarray(list(segments["geometry"]), dtype=object)
    if info.geographic:
        aeqd = CRS.from_proj4(f"+proj=aeqd +lat_0={y} +lon_0={x} +R={info.radius_m} +units=m +no_defs")
        to_p = Transformer.from_crs(CRS.from_proj4(f"+proj=longlat +R={info.radius_m} +no_defs"), aeqd,
                                    always_xy=True)
        proj = shapely.transform(geoms, lambda c: np.column_stack(to_p.transform(c[:, 0], c[:, 1])))
        origin = shapely.Point(0.0, 0.0)
        d = shapely.distance(proj, origin)
        d = np.where(np.isfinite(d), d, np.inf)
        k = int(np.argmin(d))
        # nearest point on that segment, back to lon/lat, geodesic distance
        near = shapely.shortest_line(origin, proj[k])
        px, py = np.asarray(near.coords)[1]
        lon, lat = to_p.transform(px, py, direction="INVERSE")
        return k, _distance_m(info, x, y, float(lon), float(lat))
    pt = shapely.Point(x, y)
    d = shapely.distance(geoms, pt)
    k = int(np.argmin(d))
    return k, float(d[k])


def points_table(analysis: Any, points: Sequence[Any], depth: xr.DataArray, *,
                 max_distance_km: float | None = None) -> pd.DataFrame:
    """Per point of interest: first arrival, lensing factor, indicative amplitude, and their distances.

    Parameters
    ----------
    analysis : SourceAnalysis
        The traced source (focusing maps and the segments of the coast of interest).
    points : sequence of PointOfInterest
        Points with ``name``, ``lon``, ``lat`` [degrees; -180..180 or 0..360].
    depth : xarray.DataArray
        The run's depth grid.
    max_distance_km : float, optional
        Farthest a point may be from the segment / sea cell its values come from; default
        :func:`point_max_distance_km`.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`POINT_COLUMNS`: ``first_arrival_min`` [min], ``lensing_factor`` (segment),
        ``amp_1m_m`` [m], ``nearest_segment``, ``segment_distance_km``, ``lensing_factor_map`` (map
        value at the cell), ``cell_distance_km``, ``note`` (empty when every value was given).
        ``attrs["warnings"]`` lists the notes as sentences; ``attrs["max_distance_km"]`` the limit.
    """
    info = GridInfo.from_dataarray(depth)
    limit_km, limit_src = point_max_distance_km(depth, max_distance_km)
    foc = analysis.focusing
    seg = foc.segments
    tt = foc.travel_time_min
    lens = foc.lensing_factor
    to_grid = None if info.geographic else Transformer.from_crs("EPSG:4326", info.crs, always_xy=True)
    dmin_m = max(info.min_spacing_m(), 1.0)
    search = int(min(60, max(1, math.ceil(limit_km * 1000.0 / dmin_m) + 1)))
    rows, notes = [], []
    for p in points:
        if info.geographic:
            x, y = float(info.wrap_lon(p.lon)), float(p.lat)
        else:
            x, y = (float(v) for v in to_grid.transform(p.lon, p.lat))
        row = {"name": p.name, "lon": p.lon, "lat": p.lat, "first_arrival_min": math.nan,
               "lensing_factor": math.nan, "amp_1m_m": math.nan, "nearest_segment": "",
               "segment_distance_km": math.nan, "lensing_factor_map": math.nan, "cell_distance_km": math.nan,
               "note": ""}
        k, dseg_m = nearest_segment(seg, info, x, y)
        near = seg.iloc[k] if k >= 0 else None
        if near is not None:
            row["nearest_segment"] = str(near["segment_id"])
            row["segment_distance_km"] = dseg_m / 1000.0
        inside = bool(np.all(info.contains(x, y))) and np.isfinite(x) and np.isfinite(y)
        if not inside:
            row["note"] = "outside the grid: no value"
            notes.append(f"point '{p.name}' ({p.lon:g}, {p.lat:g}) lies outside the grid: no value")
            rows.append(row)
            continue
        t, ci, cj, _ = _nearest_finite_cell(tt, x, y, search)
        dcell_km = math.nan
        if ci >= 0:
            dcell_km = _distance_m(info, x, y, float(info.x[ci]), float(info.y[cj])) / 1000.0
            row["cell_distance_km"] = dcell_km
        cell_ok = ci >= 0 and dcell_km <= limit_km
        seg_ok = near is not None and dseg_m / 1000.0 <= limit_km
        if cell_ok:
            row["first_arrival_min"] = t
            row["lensing_factor_map"] = float(lens.values[cj, ci])
        if seg_ok:
            row["lensing_factor"] = float(near["lensing_factor"])
            row["amp_1m_m"] = float(near["amp_1m_m"])
            if not cell_ok and np.isfinite(near.get("first_arrival_s", np.nan)):
                row["first_arrival_min"] = float(near["first_arrival_s"]) / 60.0
        far = []
        if not seg_ok:
            far.append("nearest coastline segment " + (f"{row['nearest_segment']} {dseg_m / 1000.0:.0f} km away"
                                                       if near is not None else "none"))
        if not cell_ok:
            far.append("no sea cell reached by rays" + (f" nearer than {dcell_km:.0f} km" if ci >= 0 else
                                                         f" within {limit_km:.0f} km"))
        if far:
            lost = ("no value" if not (seg_ok or cell_ok) else
                    "no segment values" if not seg_ok else "no map value")
            row["note"] = f"{lost}: {'; '.join(far)} (limit {limit_km:.0f} km)"
            notes.append(f"point '{p.name}' ({p.lon:g}, {p.lat:g}): {row['note']}")
        rows.append(row)
    out = pd.DataFrame(rows, columns=POINT_COLUMNS)
    out.attrs["warnings"] = notes
    out.attrs["max_distance_km"] = limit_km
    out.attrs["max_distance_source"] = limit_src
    return out
