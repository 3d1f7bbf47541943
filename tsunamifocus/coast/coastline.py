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

import numpy as np
import shapely
import xarray as xr
from pyproj import Geod
from shapely.geometry import LineString, MultiLineString

from ..errors import CoastError
from ..grid import GridInfo

__all__ = ['coastline_from_grid', 'line_length_m']


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
