"""Coastlines and coastline segments.

A coastline is a list of :class:`shapely.LineString` in the CRS of the depth grid. It comes
either from the grid itself (the contour at a chosen isobath, usually the ray stop depth, with
islands as closed rings) or from a user file (GeoJSON / GeoPackage read with pyogrio and
reprojected with pyproj). :func:`segment_coastline` cuts it into segments of a chosen length
measured in metres (geodesic on the sphere for lon/lat grids) and returns the segments table of
the shared data contract (one row per segment, stable ids ``S0001``...).

Segments cover every line exactly once: consecutive segments of one line share their end
points, nothing is dropped and nothing overlaps. Each line of length ``L`` is cut into
``n = max(1, round(L / segment_length_m))`` equal pieces, so actual lengths differ from the
requested one by at most a factor 1.5 (and lines shorter than the requested length, such as
small islands, become a single segment).
"""

from __future__ import annotations

import math
import pathlib
import warnings
from collections.abc import Sequence

import numpy as np
import pandas as pd
import shapely
import xarray as xr
from pyproj import CRS, Geod, Transformer
from shapely.geometry import LineString, MultiLineString

from .errors import CoastError, ResolutionWarning
from .grid import GridInfo

__all__ = [
    "coastline_from_grid",
    "read_coastline",
    "segment_coastline",
    "line_length_m",
    "SEGMENT_COLUMNS",
    "STATIC_SEGMENT_COLUMNS",
]

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


def _geod(info: GridInfo) -> Geod:
    """Spherical geodesic calculator with the grid's sphere radius."""
    return Geod(a=info.radius_m, b=info.radius_m)


def _edge_lengths_m(xy: np.ndarray, info: GridInfo) -> np.ndarray:
    """Length in metres of each edge of a vertex array ``(n, 2)`` in the grid CRS."""
    if xy.shape[0] < 2:
        return np.zeros(0)
    if info.geographic:
        _, _, d = _geod(info).inv(xy[:-1, 0], xy[:-1, 1], xy[1:, 0], xy[1:, 1])
        return np.abs(np.asarray(d, dtype=float))
    return np.hypot(np.diff(xy[:, 0]), np.diff(xy[:, 1]))


def line_length_m(line: LineString, info: GridInfo) -> float:
    """Length of a line in metres: geodesic on the grid's sphere for lon/lat, planar otherwise.

    Parameters
    ----------
    line : shapely.LineString
        Line in the grid CRS.
    info : GridInfo
        Geometry of the grid the line belongs to.

    Returns
    -------
    float
        Length [m].
    """
    return float(_edge_lengths_m(np.asarray(line.coords)[:, :2], info).sum())


def _info_of(grid: xr.DataArray | GridInfo) -> GridInfo:
    return grid if isinstance(grid, GridInfo) else GridInfo.from_dataarray(grid)


# --------------------------------------------------------------------------------------
# coastline from the grid
# --------------------------------------------------------------------------------------
def coastline_from_grid(
    depth: xr.DataArray,
    isobath_m: float,
    *,
    min_length_m: float | None = None,
) -> list[LineString]:
    """Trace the contour of a depth grid at an isobath as shapely lines (islands included).

    Land cells keep their (negative) depth and NaN (no data) cells count as land 1 m above sea
    level, so the contour separates water deeper than ``isobath_m`` from everything else and
    closes around islands and shoals that rise above it. Contouring uses contourpy (marching squares, shipped with
    matplotlib) on the grid nodes.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth grid [m], positive down, tsunamifocus grid convention.
    isobath_m : float
        Depth of the contour [m], > 0 (for instance the ray stop depth).
    min_length_m : float, optional
        Fragments shorter than this [m] are dropped (isolated pixels, noise). Default: five
        times the grid's smallest cell side.

    Returns
    -------
    list of shapely.LineString
        Lines in the grid CRS, longest first. Closed rings for islands and enclosed basins.

    Raises
    ------
    CoastError
        If ``isobath_m`` is not positive or the grid has no contour at that depth.
    """
    import contourpy

    info = GridInfo.from_dataarray(depth)
    if not (np.isfinite(isobath_m) and isobath_m > 0):
        raise CoastError(f"isobath_m={isobath_m}: expected a depth > 0 m (depths are positive down)")
    v = np.asarray(depth.values, dtype=float)
    vmax = float(np.nanmax(v)) if np.isfinite(v).any() else float("nan")
    if not (np.isfinite(vmax) and vmax > isobath_m):
        raise CoastError(
            f"grid '{depth.name}' has no water deeper than the isobath {isobath_m} m "
            f"(deepest {vmax} m): choose a shallower isobath"
        )
    # NaN (no data) -> just above sea level (-1 m depth); land keeps its (negative) value
    z = np.where(np.isfinite(v), v, -1.0)
    x = info.x
    y = info.y
    periodic = info.periodic_x
    if periodic:  # close the seam so contours cross it continuously
        x = np.append(x, x[-1] + info.dx)
        z = np.concatenate([z, z[:, :1]], axis=1)
    gen = contourpy.contour_generator(x, y, z, line_type=contourpy.LineType.Separate)
    pieces = gen.lines(float(isobath_m))
    if periodic:
        pieces = _join_across_seam(pieces, info.x0, info.x0 + info.nx * info.dx)
    if min_length_m is None:
        min_length_m = 5.0 * info.min_spacing_m()
    out: list[tuple[float, LineString]] = []
    for xy in pieces:
        xy = np.asarray(xy, dtype=float)
        if xy.shape[0] < 2:
            continue
        line = LineString(xy)
        length = line_length_m(line, info)
        if length >= min_length_m and length > 0:
            out.append((length, line))
    if not out:
        raise CoastError(
            f"no contour at {isobath_m} m longer than min_length_m={min_length_m:.0f} m in grid "
            f"'{depth.name}': lower min_length_m or choose another isobath"
        )
    out.sort(key=lambda t: -t[0])
    return [ln for _, ln in out]


def _join_across_seam(pieces: list, x_first: float, x_seam: float) -> list:
    """Join contour pieces cut by the longitude seam of a periodic grid.

    Pieces with an end on the first column are shifted by +360 deg so they meet the pieces
    ending on the (appended) seam column, then merged (shapely ``line_merge``). The joined
    lines run continuously across the seam (longitudes may exceed the grid's last column).
    """
    tol = 1e-9 * max(1.0, abs(x_seam))
    shifted = []
    touched = False
    for xy in pieces:
        xy = np.asarray(xy, dtype=float)
        if xy.shape[0] >= 2 and (abs(xy[0, 0] - x_first) < tol or abs(xy[-1, 0] - x_first) < tol):
            xy = xy + np.array([360.0, 0.0])
            touched = True
        shifted.append(xy)
    if not touched:
        return shifted
    seam = [xy for xy in shifted if xy.shape[0] >= 2 and np.any(np.abs(xy[[0, -1], 0] - x_seam) < tol)]
    rest = [xy for xy in shifted if not (xy.shape[0] >= 2 and np.any(np.abs(xy[[0, -1], 0] - x_seam) < tol))]
    if not seam:
        return shifted
    merged = shapely.line_merge(MultiLineString([LineString(xy) for xy in seam]))
    parts = list(merged.geoms) if hasattr(merged, "geoms") else [merged]
    return rest + [np.asarray(g.coords) for g in parts]


# --------------------------------------------------------------------------------------
# coastline from a file
# --------------------------------------------------------------------------------------
def _explode_lines(geom) -> list[LineString]:
    """Split any geometry into its linear parts (polygon boundaries included)."""
    if geom is None or geom.is_empty:
        return []
    gt = geom.geom_type
    if gt == "LineString":
        return [geom]
    if gt == "LinearRing":
        return [LineString(geom.coords)]
    if gt == "MultiLineString":
        return list(geom.geoms)
    if gt == "Polygon":
        rings = [geom.exterior, *geom.interiors]
        return [LineString(r.coords) for r in rings]
    if gt in ("MultiPolygon", "GeometryCollection"):
        res: list[LineString] = []
        for g in geom.geoms:
            res.extend(_explode_lines(g))
        return res
    return []


def read_coastline(
    path: str | pathlib.Path,
    crs_of_grid: CRS | str | int | xr.DataArray | GridInfo,
    layer: str | int | None = None,
    name_field: str | None = None,
) -> tuple[list[LineString], list[str]]:
    """Read coastline lines from a GeoJSON or GeoPackage file and reproject them to the grid CRS.

    Lines, multi-lines and polygon boundaries (land polygons) are accepted; every part becomes
    one line. Reprojection uses :class:`pyproj.Transformer` with ``always_xy=True``. When a grid
    (DataArray or GridInfo) is given, longitudes are brought into the grid's longitude range
    (e.g. 0-360).

    Parameters
    ----------
    path : str or pathlib.Path
        Vector file readable by pyogrio (GeoJSON, GeoPackage, ...).
    crs_of_grid : pyproj.CRS, str, int, xarray.DataArray or GridInfo
        Target CRS, or the depth grid whose CRS (and longitude range) to use.
    layer : str or int, optional
        Layer of a multi-layer file (GeoPackage).
    name_field : str, optional
        Attribute giving each line's name, passed on to the segments.

    Returns
    -------
    lines : list of shapely.LineString
        Lines in the grid CRS.
    names : list of str
        One name per line ("" when ``name_field`` is None).

    Raises
    ------
    CoastError
        If the file is missing or unreadable, has no CRS, no linear features, or only
        empty/invalid geometries, or ``name_field`` is not one of its fields.
    """
    import pyogrio

    p = pathlib.Path(path)
    if not p.exists():
        raise CoastError(f"coastline file {p} does not exist")
    try:
        meta, _fids, wkb, field_data = pyogrio.raw.read(p, layer=layer)
    except Exception as exc:  # pyogrio raises several kinds
        raise CoastError(f"coastline file {p}: cannot be read as a vector file ({exc})") from exc
    src_crs = meta.get("crs")
    if not src_crs:
        raise CoastError(
            f"coastline file {p}: has no CRS; expected a file with a defined CRS (e.g. EPSG:4326)"
        )
    fields = list(meta.get("fields", []))
    names_raw: Sequence | None = None
    if name_field is not None:
        if name_field not in fields:
            raise CoastError(f"coastline file {p}: name_field '{name_field}' not found; fields are {fields}")
        names_raw = field_data[fields.index(name_field)]
    if isinstance(crs_of_grid, xr.DataArray):
        info: GridInfo | None = GridInfo.from_dataarray(crs_of_grid)
        dst = info.crs
    elif isinstance(crs_of_grid, GridInfo):
        info = crs_of_grid
        dst = info.crs
    else:
        info = None
        dst = CRS.from_user_input(crs_of_grid)
    # invalid WKB (e.g. a one-point LineString) becomes None and is counted as invalid below
    geoms = shapely.from_wkb(wkb, on_invalid="ignore") if wkb is not None else np.array([])
    tr = Transformer.from_crs(CRS.from_user_input(src_crs), dst, always_xy=True)
    lines: list[LineString] = []
    names: list[str] = []
    n_invalid = 0
    for i, g in enumerate(geoms):
        if g is None and wkb[i] is not None:
            n_invalid += 1
            continue
        parts = _explode_lines(g)
        if g is not None and not g.is_empty and not parts:
            continue  # points etc.: not a coastline
        for part in parts:
            xy = np.asarray(part.coords, dtype=float)[:, :2]
            ok = np.all(np.isfinite(xy), axis=1)
            xy = xy[ok]
            if xy.shape[0] < 2:
                n_invalid += 1
                continue
            xx, yy = tr.transform(xy[:, 0], xy[:, 1])
            xx = np.asarray(xx, dtype=float)
            yy = np.asarray(yy, dtype=float)
            if not (np.all(np.isfinite(xx)) and np.all(np.isfinite(yy))):
                n_invalid += 1
                continue
            if info is not None and info.geographic:
                xx = info.wrap_lon(xx)
                # keep the line continuous across the wrap
                xx = np.concatenate([[xx[0]], xx[0] + np.cumsum((np.diff(xx) + 180.0) % 360.0 - 180.0)])
            line = LineString(np.column_stack([xx, yy]))
            if line.length == 0:
                n_invalid += 1
                continue
            lines.append(line)
            names.append("" if names_raw is None or names_raw[i] is None else str(names_raw[i]))
    if not lines:
        what = f" ({n_invalid} empty or invalid)" if n_invalid else ""
        raise CoastError(
            f"coastline file {p}: no usable line or polygon features{what}; expected LineString, "
            f"MultiLineString or Polygon geometries"
        )
    return lines, names


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
    if segment_length_m > total:
        raise CoastError(
            f"segment_length_m={segment_length_m:.0f} m is longer than the whole coastline "
            f"({total:.0f} m): use segment_length_m <= {total:.0f} m"
        )
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
        L = cum[-1]
        if L <= 0:
            continue
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
                    "name": "" if names is None else str(names[li]),
                    "length_m": float(s1 - s0),
                    "x_mid": float(mid[0]),
                    "y_mid": float(mid[1]),
                    "normal_azimuth_deg": float(normal),
                    "geometry": LineString(pxy),
                }
            )
    width = max(4, len(str(len(rows))))
    df = pd.DataFrame(rows)
    df.insert(0, "segment_id", [f"S{i + 1:0{width}d}" for i in range(len(rows))])
    if info.geographic:
        df["x_mid"] = np.asarray(info.wrap_lon(df["x_mid"].to_numpy(float)), dtype=float)
        lon = ((df["x_mid"].to_numpy() + 180.0) % 360.0) - 180.0
        lat = df["y_mid"].to_numpy()
    else:
        tr = Transformer.from_crs(info.crs, CRS.from_epsg(4326), always_xy=True)
        lon, lat = tr.transform(df["x_mid"].to_numpy(), df["y_mid"].to_numpy())
    df["lon_mid"] = np.asarray(lon, dtype=float)
    df["lat_mid"] = np.asarray(lat, dtype=float)
    df = df[SEGMENT_COLUMNS]
    df.attrs["segment_length_m"] = float(segment_length_m)
    df.attrs["crs_wkt"] = info.crs_wkt
    return df
