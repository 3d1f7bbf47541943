"""Coastline files (GeoJSON, GeoPackage ...) read as lines in the grid CRS."""

from __future__ import annotations

import pathlib
from typing import Any
from collections.abc import Sequence

import numpy as np
import shapely
import xarray as xr
from pyproj import CRS, Transformer
from shapely.geometry import LineString

from ..errors import CoastError
from ..grid import GridInfo

__all__ = ['read_coastline', 'read_region_polygons']


def _read_vector(p: pathlib.Path, layer: Any, what: str) -> tuple[dict, Any, Any, Any]:
    """Read a vector file with pyogrio: (meta, WKB geometries, field data, CRS); one-line errors."""
    import pyogrio  # deferred on purpose: GDAL vector drivers load only when a file is read

    if not p.exists():
        raise CoastError(f"{what} {p} does not exist")
    try:
        meta, _fids, wkb, field_data = pyogrio.raw.read(p, layer=layer)
    except Exception as exc:  # pyogrio raises several kinds
        raise CoastError(f"{what} {p}: cannot be read as a vector file ({exc})") from exc
    src_crs = meta.get("crs")
    if not src_crs:
        raise CoastError(f"{what} {p}: has no CRS; expected a file with a defined CRS (e.g. EPSG:4326)")
    return meta, wkb, field_data, src_crs


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
    p = pathlib.Path(path)
    meta, wkb, field_data, src_crs = _read_vector(p, layer, "coastline file")
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


def read_region_polygons(path: str | pathlib.Path, layer: str | int | None = None):
    """Read the polygons of a region file (GeoJSON / GeoPackage) as one geometry in lon/lat degrees.

    Parameters
    ----------
    path : str or pathlib.Path
        Vector file with Polygon / MultiPolygon features and a defined CRS.
    layer : str or int, optional
        Layer of a multi-layer file.

    Returns
    -------
    shapely geometry
        The union of the polygons, in WGS84 longitude/latitude [degrees].

    Raises
    ------
    CoastError
        If the file is missing, unreadable, has no CRS or no polygon.
    """
    p = pathlib.Path(path)
    meta, wkb, _fields, src_crs = _read_vector(p, layer, "coast region file")
    geoms = shapely.from_wkb(wkb, on_invalid="ignore") if wkb is not None else np.array([])
    polys = []
    for g in geoms:
        if g is None or g.is_empty:
            continue
        if g.geom_type in ("Polygon", "MultiPolygon"):
            polys.append(g)
        elif g.geom_type == "GeometryCollection":
            polys.extend(h for h in g.geoms if h.geom_type in ("Polygon", "MultiPolygon"))
    if not polys:
        raise CoastError(f"coast region file {p}: no Polygon or MultiPolygon features; expected the area of the "
                         "coast of interest as polygons")
    tr = Transformer.from_crs(CRS.from_user_input(src_crs), CRS.from_epsg(4326), always_xy=True)
    out = shapely.transform(shapely.union_all(polys),
                            lambda c: np.column_stack(tr.transform(c[:, 0], c[:, 1])))
    if not out.is_valid:
        out = shapely.make_valid(out)
    return out
