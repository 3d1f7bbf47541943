"""Coastline segmentation into pieces of about equal length with their seaward normals."""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Transformer
from shapely.geometry import LineString, MultiLineString

from ..constants import WORK_LIMITS
from ..errors import CoastError, ResolutionWarning, check_work
from ..grid import GridInfo
from .coastline import _edge_lengths_m, _geod

__all__ = ['segment_coastline', 'SEGMENT_COLUMNS', 'STATIC_SEGMENT_COLUMNS']

#: Columns of the segments table produced by :func:`segment_coastline` (shared data contract).
SEGMENT_COLUMNS = [
    "segment_id",
    "name",
    "length_m",
    "x_mid",
    "y_mid",
    "lon_mid",
    "lat_mid",
    "normal_azimuth_deg",
    "geometry",
]
#: The geometry/label columns of a segment (all of :data:`SEGMENT_COLUMNS` but the id), which
#: every run over the same segmentation shares.
STATIC_SEGMENT_COLUMNS = tuple(c for c in SEGMENT_COLUMNS if c != "segment_id")


# --------------------------------------------------------------------------------------
# segmentation
# --------------------------------------------------------------------------------------
def _cut_line(xy: np.ndarray, cum: np.ndarray, cuts: np.ndarray) -> list[np.ndarray]:
    """Cut a polyline at arc-length positions ``cuts`` (ascending, inside [0, cum[-1]])."""
    pts = []
    for s in cuts:
        k = int(np.clip(np.searchsorted(cum, s, side="right") - 1, 0, len(cum) - 2))
        seg = cum[k + 1] - cum[k]
        t = 0.0 if seg <= 0 else (s - cum[k]) / seg
        pts.append((k, xy[k] + t * (xy[k + 1] - xy[k])))
    out = []
    for a in range(len(pts) - 1):
        ka, pa = pts[a]
        kb, pb = pts[a + 1]
        inner = xy[ka + 1 : kb + 1]
        seg_xy = np.vstack([pa[None, :], inner, pb[None, :]])
        # drop consecutive duplicates (cut exactly on a vertex)
        keep = np.ones(len(seg_xy), dtype=bool)
        keep[1:] = np.any(np.abs(np.diff(seg_xy, axis=0)) > 0, axis=1)
        seg_xy = seg_xy[keep]
        if len(seg_xy) < 2:
            seg_xy = np.vstack([pa, pb])
        out.append(seg_xy)
    return out


def _point_at(xy: np.ndarray, cum: np.ndarray, s: float) -> np.ndarray:
    k = int(np.clip(np.searchsorted(cum, s, side="right") - 1, 0, len(cum) - 2))
    seg = cum[k + 1] - cum[k]
    t = 0.0 if seg <= 0 else (s - cum[k]) / seg
    return xy[k] + t * (xy[k + 1] - xy[k])


def _bilinear(v: np.ndarray, info: GridInfo, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Bilinear interpolation of grid values (NaN outside), periodic in x when the grid is."""
    fi, fj = info.index_of(x, y)
    i0 = np.floor(fi).astype(int)
    j0 = np.floor(fj).astype(int)
    tx = fi - i0
    ty = fj - j0
    out = np.full(np.shape(fi), np.nan)
    ok = (j0 >= 0) & (j0 + 1 < info.ny)
    if info.periodic_x:
        i0 = np.mod(i0, info.nx)
        i1 = np.mod(i0 + 1, info.nx)
    else:
        ok &= (i0 >= 0) & (i0 + 1 < info.nx)
        i1 = i0 + 1
    i0c, i1c = np.clip(i0, 0, info.nx - 1), np.clip(i1, 0, info.nx - 1)
    j0c, j1c = np.clip(j0, 0, info.ny - 1), np.clip(j0 + 1, 0, info.ny - 1)
    val = (
        v[j0c, i0c] * (1 - tx) * (1 - ty)
        + v[j0c, i1c] * tx * (1 - ty)
        + v[j1c, i0c] * (1 - tx) * ty
        + v[j1c, i1c] * tx * ty
    )
    out[ok] = val[ok]
    return out


def _azimuth(info: GridInfo, p0: np.ndarray, p1: np.ndarray) -> float:
    """Azimuth [deg clockwise from north; grid north on projected grids] from p0 to p1."""
    if info.geographic:
        az, _, _ = _geod(info).inv(p0[0], p0[1], p1[0], p1[1])
        return float(az) % 360.0
    return math.degrees(math.atan2(p1[0] - p0[0], p1[1] - p0[1])) % 360.0


def _offset(info: GridInfo, p: np.ndarray, az_deg: np.ndarray, dist_m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Points at distance ``dist_m`` from ``p`` along azimuth ``az_deg``."""
    az = np.asarray(az_deg, dtype=float)
    d = np.asarray(dist_m, dtype=float)
    if info.geographic:
        lon, lat, _ = _geod(info).fwd(np.full(d.shape, p[0]), np.full(d.shape, p[1]), az, d)
        return np.asarray(lon), np.asarray(lat)
    a = np.radians(az)
    return p[0] + d * np.sin(a), p[1] + d * np.cos(a)


def _seaward_normal(info: GridInfo, v: np.ndarray, mid: np.ndarray, tangent_az: float) -> float:
    """Normal azimuth pointing to the deeper side, probed at 1-4 cells either side."""
    step = max(min(info.spacing_m()), 1.0)
    dist = step * np.array([1.0, 2.0, 3.0, 4.0])
    score = []
    for sign in (+1.0, -1.0):
        az = (tangent_az + sign * 90.0) % 360.0
        xs, ys = _offset(info, mid, np.full(dist.shape, az), dist)
        d = _bilinear(v, info, xs, ys)
        score.append(np.nansum(np.where(np.isfinite(d), d, -1e3)))
    sign = +1.0 if score[0] >= score[1] else -1.0
    return (tangent_az + sign * 90.0) % 360.0


def segment_coastline(
    lines: Sequence[LineString] | LineString | MultiLineString,
    segment_length_m: float,
    depth: xr.DataArray,
    names: Sequence[str] | None = None,
) -> pd.DataFrame:
    """Cut coastline lines into segments of about ``segment_length_m`` metres.

    Parameters
    ----------
    lines : sequence of shapely.LineString (or one line / multi-line)
        Coastline in the CRS of ``depth`` (see :func:`coastline_from_grid`, :func:`read_coastline`).
    segment_length_m : float
        Target segment length [m] along the line, geodesic on the grid's sphere for lon/lat
        grids. Each line is cut into ``max(1, round(L / segment_length_m))`` equal pieces.
    depth : xarray.DataArray
        Depth grid [m] (positive down). Gives the CRS, the metric and decides which side of
        each segment is the sea: the normal points to the side whose depths, probed 1-4 cells
        from the segment centre, are larger.
    names : sequence of str, optional
        One name per line, copied to its segments (default "").

    Returns
    -------
    pandas.DataFrame
        One row per segment with the columns of :data:`SEGMENT_COLUMNS`: ``segment_id``
        (``S0001``... in line order, then along each line), ``name``, ``length_m`` [m],
        ``x_mid``, ``y_mid`` (grid CRS, the point half-way along the segment), ``lon_mid``,
        ``lat_mid`` [deg, WGS84 / the sphere], ``normal_azimuth_deg`` [deg clockwise from
        north, grid north on projected grids; pointing seaward], ``geometry`` (LineString).
        ``attrs["segment_length_m"]`` holds the requested length.

    Raises
    ------
    CoastError
        If there are no lines, ``segment_length_m`` is not positive, or it exceeds the total
        coastline length (nothing to rank: use a length <= the coastline length).

    Warns
    -----
    ResolutionWarning
        If ``segment_length_m`` is shorter than the grid spacing (segments cannot be resolved
        by the bathymetry; use at least the grid spacing).
    """
    info = GridInfo.from_dataarray(depth)
    if isinstance(lines, LineString):
        lines = [lines]
    elif isinstance(lines, MultiLineString):
        lines = list(lines.geoms)
    lines = [ln for ln in lines if ln is not None and not ln.is_empty]
    if not lines:
        raise CoastError("segment_coastline: no coastline lines given (empty list)")
    if names is not None and len(names) != len(lines):
        raise CoastError(f"segment_coastline: {len(names)} names for {len(lines)} lines")
    if not (np.isfinite(segment_length_m) and segment_length_m > 0):
        raise CoastError(f"segment_length_m={segment_length_m}: expected a length > 0 m")
    xys = [np.asarray(ln.coords, dtype=float)[:, :2] for ln in lines]
    cums = [np.concatenate([[0.0], np.cumsum(_edge_lengths_m(xy, info))]) for xy in xys]
    total = float(sum(c[-1] for c in cums))
    if segment_length_m > total * (1.0 + 1e-12):  # the whole line, summed in another order, may differ by rounding
        raise CoastError(
            f"segment_length_m={segment_length_m:.0f} m is longer than the whole coastline "
            f"({total:.0f} m): use segment_length_m <= {total:.0f} m"
        )
    n_est = sum(max(1, round(c[-1] / segment_length_m)) for c in cums)
    check_work(n_est, WORK_LIMITS["segments"],
               f"segment_length_m={segment_length_m:g} m cuts {total / 1000:.0f} km of coastline into about {n_est:.3g} "
               "segments",
               f"use segments of at least {total / WORK_LIMITS['segments'] / 1000:.3g} km ([coast] segment_km)")
    spacing = max(info.spacing_m())
    if segment_length_m < spacing:
        warnings.warn(
            f"segment_length_m={segment_length_m:.0f} m is shorter than the grid spacing "
            f"({spacing:.0f} m): the bathymetry cannot distinguish such segments; use at least "
            f"{spacing:.0f} m",
            ResolutionWarning,
            stacklevel=2,
        )
    v = np.asarray(depth.values, dtype=float)
    rows = []
    for li, (xy, cum) in enumerate(zip(xys, cums, strict=True)):
        name = "" if names is None else str(names[li])
        rows += _line_segments(xy, cum, segment_length_m, spacing, info, v, name)
    width = max(4, len(str(len(rows))))
    df = pd.DataFrame(rows)
    df.insert(0, "segment_id", [f"S{i + 1:0{width}d}" for i in range(len(rows))])
    df["x_mid"], df["lon_mid"], df["lat_mid"] = _lonlat_of(df["x_mid"].to_numpy(float), df["y_mid"].to_numpy(float),
                                                           info)
    df = df[SEGMENT_COLUMNS]
    df.attrs["segment_length_m"] = float(segment_length_m)
    df.attrs["crs_wkt"] = info.crs_wkt
    return df


def _line_segments(xy: np.ndarray, cum: np.ndarray, segment_length_m: float, spacing: float, info: GridInfo,
                   v: np.ndarray, name: str) -> list[dict]:
    """One line cut into ``max(1, round(L / segment_length_m))`` equal pieces with mid points and seaward normals."""
    rows: list[dict] = []
    L = cum[-1]
    if L <= 0:
        return rows
    n = max(1, int(round(L / segment_length_m)))
    cuts = np.linspace(0.0, L, n + 1)
    pieces = _cut_line(xy, cum, cuts)
    for k, pxy in enumerate(pieces):
        s0, s1 = cuts[k], cuts[k + 1]
        smid = 0.5 * (s0 + s1)
        mid = _point_at(xy, cum, smid)
        h = min(0.25 * (s1 - s0), spacing)
        pa = _point_at(xy, cum, max(smid - h, 0.0))
        pb = _point_at(xy, cum, min(smid + h, L))
        tangent = _azimuth(info, pa, pb)
        normal = _seaward_normal(info, v, mid, tangent)
        rows.append(
            {
                "name": name,
                "length_m": float(s1 - s0),
                "x_mid": float(mid[0]),
                "y_mid": float(mid[1]),
                "normal_azimuth_deg": float(normal),
                "geometry": LineString(pxy),
            }
        )
    return rows


def _lonlat_of(x: np.ndarray, y: np.ndarray, info: GridInfo) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mid points: x (longitudes wrapped onto a lon/lat grid), longitude in -180..180 and latitude."""
    if info.geographic:
        x = np.asarray(info.wrap_lon(x), dtype=float)
        lon = ((x + 180.0) % 360.0) - 180.0
        lat = y
    else:
        tr = Transformer.from_crs(info.crs, CRS.from_epsg(4326), always_xy=True)
        lon, lat = tr.transform(x, y)
    return x, np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)
