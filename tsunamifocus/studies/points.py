"""Points of interest: values at named places, with the distances they were read at.

A point (harbour entrance, gauge) usually lies inshore of the stop isobath, so its values are read
at two nearby places, and the table says how far away both are:

* the **nearest sea cell deeper than the stop isobath** that the front reaches (first-arrival
  time of the eikonal solver, lensing-factor map), at ``snap_distance_km``;
* the **nearest coastline segment** of the coast of interest (segment lensing factor, indicative
  amplitude), at ``segment_distance_km``.

Both searches use one radius, ``[coast] point_max_distance_km`` (default in
``constants.DEFAULTS``). Distances are great-circle on the grid's sphere for lon/lat grids and
planar in the grid CRS for projected grids. Beyond the radius a value is not given (NaN), the
``note`` column says why and the run summary repeats the notes. Points outside the grid get no
value. Longitudes may be given in -180..180 or 0..360 numbers whatever the grid uses.
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

from ..constants import DEFAULTS
from ..grid import GridInfo
from ..propagation.traveltime import sample_at_sea

__all__ = ["point_max_distance_km", "points_table", "nearest_segment"]

POINT_COLUMNS = ["name", "lon", "lat", "first_arrival_min", "lensing_factor", "amp_1m_m", "nearest_segment",
                 "segment_distance_km", "lensing_factor_map", "snap_distance_km", "note"]


def point_max_distance_km(depth: xr.DataArray | None = None, given: float | None = None) -> tuple[float, str]:
    """The search radius [km] of points of interest and where it comes from."""
    if given is not None:
        return float(given), "[coast] point_max_distance_km"
    return float(DEFAULTS["coast"]["point_max_distance_km"]), "default"  # type: ignore[arg-type]


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
        The traced source (travel-time and focusing maps, the segments of the coast of interest).
    points : sequence of PointOfInterest
        Points with ``name``, ``lon``, ``lat`` [degrees; -180..180 or 0..360].
    depth : xarray.DataArray
        The run's depth grid.
    max_distance_km : float, optional
        Search radius [km] for the sea cell and the segment; default :func:`point_max_distance_km`.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`POINT_COLUMNS`: ``first_arrival_min`` [min] (eikonal first arrival at the
        nearest sea cell deeper than the stop isobath), ``lensing_factor`` (segment), ``amp_1m_m``
        [m], ``nearest_segment``, ``segment_distance_km``, ``lensing_factor_map`` (map value at the
        same cell), ``snap_distance_km`` (distance to that cell), ``note`` (empty when every value
        was given). ``attrs["warnings"]`` lists the notes as sentences (the run summary prints them
        as warnings); ``attrs["max_distance_km"]`` the radius.
    """
    info = GridInfo.from_dataarray(depth)
    limit_km, limit_src = point_max_distance_km(depth, max_distance_km)
    foc = analysis.focusing
    seg = foc.segments
    tt = foc.travel_time_min
    lens = foc.lensing_factor
    to_grid = None if info.geographic else Transformer.from_crs("EPSG:4326", info.crs, always_xy=True)
    rows, notes = [], []
    for p in points:
        if info.geographic:
            x, y = float(info.wrap_lon(p.lon)), float(p.lat)
        else:
            x, y = (float(v) for v in to_grid.transform(p.lon, p.lat))
        row = {"name": p.name, "lon": p.lon, "lat": p.lat, "first_arrival_min": math.nan,
               "lensing_factor": math.nan, "amp_1m_m": math.nan, "nearest_segment": "",
               "segment_distance_km": math.nan, "lensing_factor_map": math.nan, "snap_distance_km": math.nan,
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
        t, dcell, ci, cj = (a[0] for a in sample_at_sea(tt, np.array([x]), np.array([y]), limit_km * 1000.0))
        cell_ok = ci >= 0
        seg_ok = near is not None and dseg_m / 1000.0 <= limit_km
        if cell_ok:
            row["first_arrival_min"] = float(t)
            row["snap_distance_km"] = float(dcell) / 1000.0
            row["lensing_factor_map"] = float(lens.values[cj, ci])
        if seg_ok:
            row["lensing_factor"] = float(near["lensing_factor"])
            row["amp_1m_m"] = float(near["amp_1m_m"])
        far = []
        if not seg_ok:
            far.append("nearest coastline segment " + (f"{row['nearest_segment']} {dseg_m / 1000.0:.0f} km away"
                                                       if near is not None else "none"))
        if not cell_ok:
            far.append(f"no sea cell deeper than the stop isobath reached by the front within {limit_km:g} km")
        if far:
            lost = ("no value" if not (seg_ok or cell_ok) else
                    "no segment values" if not seg_ok else "no first arrival or map value")
            row["note"] = f"{lost}: {'; '.join(far)} (search radius {limit_km:g} km)"
            notes.append(f"point '{p.name}' ({p.lon:g}, {p.lat:g}): {row['note']}")
        rows.append(row)
    out = pd.DataFrame(rows, columns=POINT_COLUMNS)
    out.attrs["warnings"] = notes
    out.attrs["max_distance_km"] = limit_km
    out.attrs["max_distance_source"] = limit_src
    return out
