"""GIS and data exports: Cloud-Optimized GeoTIFF, CF NetCDF, GeoPackage/GeoJSON/CSV vectors.

Every writer puts the caution text (:mod:`tsunamifocus.cautions`) into its output, writes to a
temporary name in the target folder and renames into place only when the file is complete, so
a failed write never leaves a truncated file under the final name.

Grids follow the tsunamifocus grid convention (:mod:`tsunamifocus.grid`): ascending coordinates
that are the positions of the data values (cell centres). Rasters are written north-up with the
pixel-is-area geotransform whose outer edge is half a cell beyond the first/last centre.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import re
import tempfile
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape, quoteattr

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Transformer

from ..cautions import caution_lines, caution_summary, caution_text
from ..constants import __version__
from ..errors import CRSError, DataFileError, InputError
from ..grid import GridInfo, get_crs
from .runfolder import WRITING_NOTE, deferred_interrupts
from .styles import ColourScale, lensing_scale, raster_qml, scale_for_layer, segments_qml, segments_sld

__all__ = ['LAYER_INFO', 'POINT_COLUMNS', 'LON180_SUFFIX', 'LonLayout', 'lon_layout', 'longitude_note',
           'write_cog', 'write_netcdf', 'write_layers', 'write_segments', 'write_points_csv']

#: Long names and units (UDUNITS spelling) of the standard raster layers of a run.
LAYER_INFO: dict[str, tuple[str, str]] = {
    "travel_time_min": ("first-arrival travel time of the long wave (eikonal, fast marching)", "min"),
    "energy": ("ray energy per unit wavefront width (accumulated over rays)", "J m-1"),
    "lensing_factor": ("lensing factor: energy relative to the smoothed reference bathymetry", "1"),
    "focusing_factor": ("focusing factor: energy relative to spreading on a constant-depth ocean", "1"),
    "depth": ("water depth below sea level (positive down)", "m"),
}

#: Columns of the points-of-interest CSV, in order.
POINT_COLUMNS = ("name", "lon", "lat", "first_arrival_min", "lensing_factor", "amp_1m_m", "nearest_segment")


@contextlib.contextmanager
def _atomic_file(path: Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path`` (same suffix); rename it onto ``path`` on success."""
    path = Path(path)
    if path.is_dir():
        raise DataFileError(f"{path}: is a folder, expected a file name to write")
    parent = path.parent
    if not parent.is_dir():
        raise DataFileError(f"{path}: output folder {parent} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=".part" + path.suffix, dir=parent)
    os.close(fd)
    os.unlink(tmp)  # writers (GDAL, netCDF) create the file themselves
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, path)
    except (OSError, RuntimeError) as exc:  # a library's write failure: remember which file it was
        exc.add_note(f"{WRITING_NOTE}{path}")
        raise
    finally:
        for p in (tmp_path, *parent.glob(tmp_path.name + "-*")):  # also sqlite -journal/-wal leftovers
            with contextlib.suppress(FileNotFoundError):
                p.unlink()


# ---------------------------------------------------------------------------------------------
# Rasters
# ---------------------------------------------------------------------------------------------


#: Suffixes of derived layers (ensemble statistics, envelopes): suffix -> long-name prefix.
_STAT_SUFFIX = {
    "mean": "ensemble mean of",
    "median": "ensemble median of",
    "std": "ensemble standard deviation of",
    "spread": "ensemble spread of",
    "p05": "ensemble 5th percentile of",
    "p95": "ensemble 95th percentile of",
    "min": "minimum over scenarios of",
    "max": "maximum over scenarios of",
    "diff": "difference between scenarios of",
}


def _default_meta(name: str) -> tuple[str, str]:
    """Long name and units of a standard layer or of a statistic of one (``lensing_factor_p95``)."""
    if name in LAYER_INFO:
        return LAYER_INFO[name]
    base, _, suffix = name.rpartition("_")
    if base in LAYER_INFO and suffix in _STAT_SUFFIX:
        long_name, unit = LAYER_INFO[base]
        return f"{_STAT_SUFFIX[suffix]} {long_name}", unit
    return name or "layer", ""


def _layer_meta(da: xr.DataArray, description: str | None, units: str | None) -> tuple[str, str]:
    name = str(da.name) if da.name is not None else ""
    d_long, d_units = _default_meta(name)
    long_name = description or da.attrs.get("long_name") or d_long
    unit = units if units is not None else da.attrs.get("units", d_units)
    return str(long_name), str(unit)


#: Suffix of the -180..180 alternative (GDAL VRT) written beside a raster that crosses the antimeridian.
LON180_SUFFIX = "_lon180.vrt"


@dataclass(frozen=True)
class LonLayout:
    """Where a geographic grid's columns go in a GeoTIFF (see :func:`lon_layout`).

    Attributes
    ----------
    roll : int
        Columns rolled from the front to the back (global grids: start at -180).
    x0 : float
        Longitude of the first written column centre.
    crosses : bool
        The grid crosses the antimeridian and keeps 0..360 longitudes (``x0`` in -180..180, the
        east edge beyond 180).
    split : int
        Crossing grids: number of columns with centres at or west of 180.
    """

    roll: int
    x0: float
    crosses: bool
    split: int


def lon_layout(info: GridInfo) -> LonLayout | None:
    """Return the longitude layout of a grid's raster outputs; None for projected grids.

    * a global (longitude-periodic) grid is rolled to start at -180 (lossless: same cells);
    * a regional grid is shifted by a multiple of 360 so its west edge lies in [-180, 180);
      if its last column centre is then still east of 180 it crosses the antimeridian and
      keeps longitudes beyond 180 (e.g. 120..250): ``crosses`` is True, and the writer adds a
      -180..180 alternative (:data:`LON180_SUFFIX`).
    """
    if not info.geographic:
        return None
    x = info.x0 + info.dx * np.arange(info.nx)
    if info.periodic_x:
        w = np.mod(x + 180.0, 360.0) - 180.0
        k = int(np.argmin(w))
        return LonLayout(roll=k, x0=float(w[k]), crosses=False, split=0)
    west = info.x0 - 0.5 * info.dx
    shift = -360.0 * math.floor((west + 180.0) / 360.0)
    xs = x + shift
    tol = 1e-9 * max(1.0, info.dx)
    crosses = bool(xs[-1] > 180.0 + tol)
    split = int(np.count_nonzero(xs <= 180.0 + tol)) if crosses else 0
    return LonLayout(roll=0, x0=float(xs[0]), crosses=crosses, split=split)


def antimeridian_note(name: str, layout: LonLayout, info: GridInfo, alt_name: str) -> str:
    """One-paragraph note on a raster that crosses the antimeridian (tag, manifest, appendix)."""
    west = layout.x0 - 0.5 * info.dx
    east = west + info.nx * info.dx
    return (f"{name} crosses the antimeridian and keeps longitudes {west:.6g}..{east:.6g} (EPSG:4326 numbers "
            f"beyond 180 E, one contiguous raster); on a -180..180 basemap use {alt_name}, the same cells "
            f"split at 180 (east part at {west + layout.split * info.dx - 360.0:.6g}..{east - 360.0:.6g})")


def longitude_note(info: GridInfo) -> str | None:
    """How a run's GIS files place the longitudes of this grid (manifest, appendix); None if projected."""
    layout = lon_layout(info)
    if layout is None:
        return None
    vec = "Vectors (GeoPackage, GeoJSON) and CSV longitude columns are in -180..180, cut at the antimeridian."
    if not layout.crosses:
        return f"{vec} GeoTIFF rasters are in -180..180 longitudes."
    west = layout.x0 - 0.5 * info.dx
    east = west + info.nx * info.dx
    return (f"{vec} The grid crosses the antimeridian: each GeoTIFF keeps longitudes {west:.6g}..{east:.6g} "
            "(EPSG:4326, one contiguous raster), so on a -180..180 basemap its part east of 180 lies "
            f"beyond the map's edge; use '<layer>{LON180_SUFFIX}' beside it (a GDAL VRT over the same file, "
            "split at 180 into -180..180 longitudes) on a standard basemap. The NetCDF keeps the grid's own "
            "longitudes.")


def _write_lon180_vrt(vrt: Path, src_name: str, layout: LonLayout, info: GridInfo, transform: Any,
                      dtype: np.dtype, nodata: float | None, long_name: str, unit: str,
                      meta: Mapping[str, str]) -> Path:
    """GDAL VRT showing a raster that crosses the antimeridian in -180..180 longitudes.

    Two simple sources: the columns east of 180 placed first (longitudes minus 360), then the
    columns west of 180 at their own longitudes, on one 360-degree-wide grid with the source's
    cell size (GDAL VRT format, gdal.org/drivers/raster/vrt.html). No data is copied.
    """
    crs = CRS.from_wkt(info.crs_wkt)
    j, nx, ny = layout.split, info.nx, info.ny
    ncol_f = 360.0 / info.dx
    ncol = int(round(ncol_f)) if abs(ncol_f - round(ncol_f)) < 1e-6 else int(math.ceil(ncol_f))
    a = transform.c + j * info.dx - 360.0
    off_west = ncol_f - j
    mapping = "2,1" if crs.axis_info and crs.axis_info[0].direction.lower() == "north" else "1,2"
    gdal_type = {"float32": "Float32", "float64": "Float64", "uint8": "Byte", "int16": "Int16",
                 "uint16": "UInt16", "int32": "Int32", "uint32": "UInt32"}.get(np.dtype(dtype).name,
                                                                             "Float32")
    nod = ""
    if nodata is not None:
        nod = f"    <NoDataValue>{'nan' if math.isnan(nodata) else repr(float(nodata))}</NoDataValue>\n"

    def source(sx: float, sw: int, dx_off: float) -> str:
        return ("    <SimpleSource>\n"
                f"      <SourceFilename relativeToVRT=\"1\">{escape(src_name)}</SourceFilename>\n"
                f"      <SourceBand>1</SourceBand>\n"
                f"      <SrcRect xOff=\"{sx}\" yOff=\"0\" xSize=\"{sw}\" ySize=\"{ny}\" />\n"
                f"      <DstRect xOff=\"{dx_off:.12g}\" yOff=\"0\" xSize=\"{sw}\" ySize=\"{ny}\" />\n"
                f"    </SimpleSource>\n")

    mdi = "".join(f"    <MDI key={quoteattr(k)}>{escape(v)}</MDI>\n" for k, v in meta.items())
    text = (
        f"<VRTDataset rasterXSize=\"{ncol}\" rasterYSize=\"{ny}\">\n"
        f"  <SRS dataAxisToSRSAxisMapping=\"{mapping}\">{escape(crs.to_wkt())}</SRS>\n"
        f"  <GeoTransform>{a!r}, {info.dx!r}, 0.0, {transform.f!r}, 0.0, {transform.e!r}</GeoTransform>\n"
        f"  <Metadata>\n{mdi}  </Metadata>\n"
        f"  <VRTRasterBand dataType=\"{gdal_type}\" band=\"1\">\n"
        f"{nod}"
        f"    <Description>{escape(long_name)}</Description>\n"
        f"    <UnitType>{escape(unit)}</UnitType>\n"
        + source(j, nx - j, 0.0) + source(0, j, off_west) +
        "  </VRTRasterBand>\n</VRTDataset>\n"
    )
    with _atomic_file(vrt) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return vrt


def write_cog(
    da: xr.DataArray,
    path: str | os.PathLike,
    *,
    description: str | None = None,
    units: str | None = None,
    tags: Mapping[str, Any] | None = None,
    nodata: float | None = None,
    dtype: str | None = None,
    resampling: str = "average",
    style: ColourScale | bool | None = True,
) -> Path:
    """Write one grid as a Cloud-Optimized GeoTIFF (GDAL ``COG`` driver through rasterio).

    Parameters
    ----------
    da : xarray.DataArray
        Grid following the tsunamifocus convention (ascending coordinates at cell centres, CRS
        in ``spatial_ref``).
    path : str or path-like
        Target ``.tif`` file.
    description : str, optional
        Band description; defaults to ``da.attrs["long_name"]`` or the standard layer's name
        (:data:`LAYER_INFO`).
    units : str, optional
        Band units (e.g. ``"min"``, ``"J m-1"``, ``"1"``); defaults to ``da.attrs["units"]``.
    tags : mapping, optional
        Extra dataset metadata items (values are converted to strings).
    nodata : float, optional
        No-data value. Float grids default to NaN (NaN cells stay NaN); with a finite value,
        NaN cells are written as it. Integer grids need it given if they have gaps.
    dtype : str, optional
        Output data type; float grids default to ``float32``.
    resampling : str
        Overview resampling (GDAL name: ``"average"``, ``"nearest"``, ...).
    style : ColourScale, bool or None
        Colour scale written as a QGIS style ``<stem>.qml`` beside the file (QGIS loads it with
        the raster): a :class:`~tsunamifocus.io.styles.ColourScale`, or True for the figures'
        scale of a standard layer computed from the grid (:func:`~tsunamifocus.io.styles.scale_for_layer`;
        other layers get none), or None/False for no style file.

    Returns
    -------
    pathlib.Path
        The written file.

    Notes
    -----
    The geotransform is ``(x0 - dx/2, dx, 0, y_top + dy/2, 0, -dy)`` with ``y_top`` the last
    (northernmost) row coordinate: the grid convention's coordinates are cell centres and
    GeoTIFF's default raster space is pixel-is-area (GDAL raster data model), so the outer
    edge lies half a cell beyond them. Rows are flipped to north-up.
    """
    import rasterio
    from rasterio.crs import CRS as RioCRS
    from rasterio.transform import Affine

    info = GridInfo.from_dataarray(da)
    layout = lon_layout(info)
    arr = np.asarray(da.values)
    if layout is not None and layout.roll:
        arr = np.roll(arr, -layout.roll, axis=1)
    if arr.dtype == bool:
        arr = arr.astype(np.uint8)
    if not (np.issubdtype(arr.dtype, np.floating) or np.issubdtype(arr.dtype, np.integer)):
        raise InputError(f"write_cog: grid '{da.name}' has dtype {arr.dtype}; expected numbers")
    out_dtype = np.dtype(dtype) if dtype else (np.dtype("float32") if arr.dtype.kind == "f" else arr.dtype)
    if out_dtype.kind == "f":
        if nodata is None:
            nodata = float("nan")
        data = arr.astype(out_dtype)
        if not math.isnan(nodata):
            data = np.where(np.isnan(data), out_dtype.type(nodata), data)
    else:
        data = arr.astype(out_dtype)
    data = np.ascontiguousarray(data[::-1, :])  # ascending y -> north-up rows
    top = info.y0 + (info.ny - 1) * info.dy
    x0 = layout.x0 if layout is not None else info.x0
    transform = Affine(info.dx, 0.0, x0 - 0.5 * info.dx, 0.0, -info.dy, top + 0.5 * info.dy)
    long_name, unit = _layer_meta(da, description, units)
    all_tags = {
        "CAUTION": caution_text(),
        "TIFFTAG_SOFTWARE": f"tsunamifocus {__version__}",
        "TIFFTAG_IMAGEDESCRIPTION": f"{long_name}. {caution_summary()}",
        "LAYER": str(da.name) if da.name is not None else "",
    }
    if info.periodic_x:
        all_tags["LON_PERIODIC"] = "1"
    path = Path(path)
    vrt_path = path.with_name(path.stem + LON180_SUFFIX) if layout is not None and layout.crosses else None
    if vrt_path is not None:
        all_tags["LONGITUDES"] = antimeridian_note(path.name, layout, info, vrt_path.name)
    all_tags.update({str(k): str(v) for k, v in (tags or {}).items()})
    profile = dict(
        driver="COG",
        width=info.nx,
        height=info.ny,
        count=1,
        dtype=out_dtype.name,
        crs=RioCRS.from_wkt(info.crs_wkt),
        transform=transform,
        nodata=nodata,
        BLOCKSIZE=512,
        COMPRESS="DEFLATE",
        PREDICTOR="YES",
        OVERVIEWS="AUTO",
        RESAMPLING=resampling.upper(),
        BIGTIFF="IF_SAFER",
    )
    with _atomic_file(path) as tmp:
        with rasterio.open(tmp, "w", **profile) as dst:
            dst.write(data, 1)
            dst.update_tags(**all_tags)
            dst.update_tags(1, units=unit, long_name=long_name)
            dst.set_band_description(1, long_name)
            dst.set_band_unit(1, unit)
    if vrt_path is not None:
        _write_lon180_vrt(vrt_path, path.name, layout, info, transform, out_dtype, nodata, long_name, unit,
                          {k: all_tags[k] for k in ("CAUTION", "LAYER", "LONGITUDES")})
    if style is True:
        style = scale_for_layer(str(da.name) if da.name is not None else path.stem, arr)
    if isinstance(style, ColourScale):
        qml = raster_qml(style)
        for target in (path, vrt_path):
            if target is not None:
                with _atomic_file(target.with_suffix(".qml")) as tmp:
                    tmp.write_text(qml, encoding="utf-8")
    return path


def _nc_attrs(attrs: Mapping[str, Any]) -> dict[str, Any]:
    """Attributes netCDF can store: text, numbers, numeric lists; bools as 0/1; None dropped."""
    out: dict[str, Any] = {}
    for k, v in attrs.items():
        if v is None:
            continue
        if isinstance(v, (bool, np.bool_)):
            out[str(k)] = int(v)
        elif isinstance(v, (str, int, float, np.integer, np.floating)):
            out[str(k)] = v
        elif isinstance(v, (list, tuple, np.ndarray)) and len(v) and all(
            isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool) for x in v
        ):
            out[str(k)] = np.asarray(v)
        else:
            out[str(k)] = json.dumps(v, default=str) if isinstance(v, (dict, list, tuple)) else str(v)
    return out


#: netCDF's default fill values (netcdf.h NC_FILL_FLOAT / NC_FILL_DOUBLE).
_NC_FILL = {"float32": 9.9692099683868690e36, "float64": 9.9692099683868690e36}


def _coordinate_attrs(crs: CRS, geographic: bool) -> tuple[dict[str, str], dict[str, str]]:
    """CF attributes of the x and y coordinate variables (CF-1.8 sections 4.1, 4.2, 5.6)."""
    if geographic:
        return (
            {"standard_name": "longitude", "long_name": "longitude", "units": "degrees_east", "axis": "X"},
            {"standard_name": "latitude", "long_name": "latitude", "units": "degrees_north", "axis": "Y"},
        )
    unit = "m"
    try:
        ax = crs.axis_info[0]
        if ax.unit_name not in ("metre", "meter") and ax.unit_conversion_factor:
            unit = f"{ax.unit_conversion_factor:.12g} m"  # UDUNITS: a scaled metre (e.g. US survey foot)
    except (IndexError, AttributeError):  # pragma: no cover - every projected CRS has axes
        pass
    return (
        {"standard_name": "projection_x_coordinate", "long_name": "x coordinate of projection",
         "units": unit, "axis": "X"},
        {"standard_name": "projection_y_coordinate", "long_name": "y coordinate of projection",
         "units": unit, "axis": "Y"},
    )


def write_netcdf(
    layers: Mapping[str, xr.DataArray] | xr.Dataset,
    path: str | os.PathLike,
    *,
    title: str,
    history: str | None = None,
    source: str | None = None,
    references: str | None = None,
    institution: str | None = None,
    attrs: Mapping[str, Any] | None = None,
    dtype: str = "float32",
) -> Path:
    """Write layers on one grid into a CF-1.8 NetCDF-4 file.

    Parameters
    ----------
    layers : mapping of name -> DataArray, or Dataset
        Grids on the same coordinates and CRS (tsunamifocus convention).
    path : str or path-like
        Target ``.nc`` file.
    title, history, source, references, institution : str
        CF global attributes (CF-1.8 section 2.6.2). ``history`` gets a time-stamped line of the
        tool prepended; ``source`` defaults to the tool name and version.
    attrs : mapping, optional
        Extra global attributes.
    dtype : {"float32", "float64"}
        Storage type of floating-point layers (coordinates stay float64). float32 keeps about
        7 significant digits, far beyond the accuracy of a screening estimate, at half the size.

    Returns
    -------
    pathlib.Path

    Notes
    -----
    Each variable has ``long_name``, ``units`` (UDUNITS) and ``grid_mapping = "spatial_ref"``;
    missing values are stored as ``_FillValue`` (netCDF's default fill value of the type,
    9.96921e+36 for float32; NaN again when read with xarray or netCDF4's masking). The
    ``spatial_ref`` variable holds the CF grid-mapping attributes from pyproj plus ``crs_wkt``.
    Coordinates carry ``standard_name``, ``long_name``, ``units`` and ``axis`` (CF-1.8 sections
    4.1, 4.2 and 5.6). The caution text is in the global ``comment`` and ``caution`` attributes.
    """
    if dtype not in ("float32", "float64"):
        raise InputError(f"write_netcdf: dtype={dtype!r}; expected 'float32' or 'float64'")
    items = dict(layers.data_vars) if isinstance(layers, xr.Dataset) else dict(layers)
    if not items:
        raise InputError("write_netcdf: no layers to write")
    first_name, first = next(iter(items.items()))
    info0 = GridInfo.from_dataarray(first)
    crs0 = get_crs(first)
    ref = first.coords["spatial_ref"]
    data_vars = {}
    for name, da in items.items():
        info = GridInfo.from_dataarray(da)
        if get_crs(da) != crs0:
            raise CRSError(f"write_netcdf: layer '{name}' has another CRS than layer '{first_name}'")
        if (info.nx, info.ny) != (info0.nx, info0.ny) or not (
            np.allclose(info.x, info0.x, rtol=0, atol=1e-9 * max(1.0, abs(info0.dx)))
            and np.allclose(info.y, info0.y, rtol=0, atol=1e-9 * max(1.0, abs(info0.dy)))
        ):
            raise InputError(f"write_netcdf: layer '{name}' is not on the grid of layer '{first_name}'")
        long_name, unit = _layer_meta(da.rename(name), None, None)
        v = da.drop_vars("spatial_ref", errors="ignore")
        v = v.assign_coords({d: first[d].values for d in first.dims})
        v.attrs = _nc_attrs({k: val for k, val in da.attrs.items()
                             if k not in ("grid_mapping", "_FillValue", "missing_value")})
        v.attrs.update(long_name=long_name, units=unit, grid_mapping="spatial_ref")
        data_vars[name] = v
    ds = xr.Dataset(data_vars)
    # the grid-mapping variable is a plain variable (CF-1.8 section 5.6), not an auxiliary coordinate
    ds["spatial_ref"] = xr.DataArray(ref.values, attrs=dict(ref.attrs))
    ydim, xdim = info0.dims
    cx, cy = _coordinate_attrs(crs0, info0.geographic)
    ds[xdim].attrs = {**_nc_attrs(first[xdim].attrs), **cx}
    ds[ydim].attrs = {**_nc_attrs(first[ydim].attrs), **cy}
    line = f"written by tsunamifocus {__version__}"
    caution = caution_text()
    ds.attrs = {
        "Conventions": "CF-1.8",
        "title": title,
        "institution": institution or "",
        "source": source or f"tsunamifocus {__version__} (long-wave ray tracing, screening estimates)",
        "history": line + ("\n" + history if history else ""),
        "references": references or "",
        "comment": caution,
        "caution": caution,
    }
    ds.attrs.update(_nc_attrs(attrs or {}))
    encoding: dict[str, dict] = {}
    for name, v in ds.data_vars.items():
        enc: dict[str, Any] = {"zlib": True, "complevel": 4}
        if v.dtype.kind == "f":
            enc["dtype"] = dtype
            enc["_FillValue"] = np.dtype(dtype).type(_NC_FILL[dtype])
        encoding[name] = enc
    for c in (xdim, ydim):
        encoding[c] = {"_FillValue": None}
    path = Path(path)

    with _atomic_file(path) as tmp, deferred_interrupts():  # an interrupt inside xarray's HDF5 lock hangs
        ds.to_netcdf(tmp, format="NETCDF4", engine="netcdf4", encoding=encoding)
    return path


def write_layers(
    layers: Mapping[str, xr.DataArray],
    folder: str | os.PathLike,
    *,
    title: str,
    netcdf_name: str = "layers.nc",
    **netcdf_kwargs: Any,
) -> dict[str, Path]:
    """Write each layer as ``<name>.tif`` (COG) and all of them into one CF NetCDF file.

    Parameters
    ----------
    layers : mapping of name -> DataArray
        Layers on one grid, e.g. ``travel_time_min``, ``energy``, ``lensing_factor``,
        ``focusing_factor`` (names and units in :data:`LAYER_INFO`).
    folder : path
        Output folder (e.g. ``OutputFolder.root``).
    title : str
        NetCDF global title.
    netcdf_name : str
        File name of the NetCDF file.
    **netcdf_kwargs
        Passed to :func:`write_netcdf` (``history``, ``source``, ``references``...).

    Returns
    -------
    dict
        Layer name (and ``"netcdf"``) -> written path.
    """
    folder = Path(folder)
    out: dict[str, Path] = {}
    for name, da in layers.items():
        if not re.fullmatch(r"[A-Za-z0-9_.-]+", name):
            raise InputError(f"write_layers: layer name {name!r} is not usable as a file name")
        out[name] = write_cog(da.rename(name), folder / f"{name}.tif")
    out["netcdf"] = write_netcdf(layers, folder / netcdf_name, title=title, **netcdf_kwargs)
    return out


# ---------------------------------------------------------------------------------------------
# Vectors and tables
# ---------------------------------------------------------------------------------------------


def _field_arrays(df: Any, columns: list[str]) -> tuple[list[np.ndarray], list[np.ndarray | None]]:
    """Columns as arrays pyogrio writes with their proper OGR types, plus null masks.

    bool -> Boolean, integers -> Integer64, floats -> Real (NaN -> null), anything else -> String.
    Nullable pandas columns (``Int64``, ``boolean``, or object columns of bools/ints with gaps)
    keep their type and get a null mask instead of being turned into text.
    """
    import pandas as pd

    data: list[np.ndarray] = []
    masks: list[np.ndarray | None] = []
    for c in columns:
        s = df[c]
        na = s.isna().to_numpy(dtype=bool)
        vals = [v for v, m in zip(s.tolist(), na) if not m]
        mask = na if na.any() else None
        is_bool = [isinstance(v, (bool, np.bool_)) for v in vals]
        if pd.api.types.is_bool_dtype(s.dtype) or (vals and all(is_bool)):
            data.append(np.array([bool(v) if not m else False for v, m in zip(s.tolist(), na)], dtype=bool))
            masks.append(mask)
        elif pd.api.types.is_integer_dtype(s.dtype) or (
            vals and not any(is_bool) and all(isinstance(v, (int, np.integer)) for v in vals)
        ):
            data.append(np.array([int(v) if not m else 0 for v, m in zip(s.tolist(), na)], dtype=np.int64))
            masks.append(mask)
        elif pd.api.types.is_float_dtype(s.dtype) or (
            vals and all(isinstance(v, (int, float, np.integer, np.floating)) for v in vals)
        ):
            data.append(np.array([np.nan if m else float(v) for v, m in zip(s.tolist(), na)], dtype=float))
            masks.append(None)
        else:
            data.append(np.array([None if m else str(v) for v, m in zip(s.tolist(), na)], dtype=object))
            masks.append(None)
    return data, masks


def _geometry_type(geoms: np.ndarray) -> str:
    import shapely

    kinds = {shapely.get_type_id(g) for g in geoms if g is not None}
    names = {0: "Point", 1: "LineString", 3: "Polygon", 4: "MultiPoint", 5: "MultiLineString",
             6: "MultiPolygon"}
    if len(kinds) == 1 and next(iter(kinds)) in names:
        return names[next(iter(kinds))]
    return "Unknown"


def _to_lonlat(geoms: np.ndarray, crs: CRS) -> np.ndarray:
    """Reproject geometries to WGS 84 lon/lat and cut lines crossing the antimeridian (RFC 7946 3.1.9)."""
    import shapely

    tr = Transformer.from_crs(crs, CRS.from_epsg(4326), always_xy=True)

    def fn(xy: np.ndarray) -> np.ndarray:
        lon, lat = tr.transform(xy[:, 0], xy[:, 1])
        return np.column_stack([lon, lat])

    return _wrap_split(shapely.transform(geoms, fn))


def _wrap_split(geoms: np.ndarray) -> np.ndarray:
    """Lon/lat geometries moved by whole turns into -180..180 and cut at the antimeridian.

    Each geometry is shifted by a multiple of 360 degrees so its centre lies in -180..180; a
    part still beyond +/-180 is cut there and moved by 360 degrees (RFC 7946 section 3.1.9),
    so a line across the antimeridian becomes a MultiLineString with a piece on each side.
    """
    import shapely
    from shapely import affinity

    result = []
    for g in geoms:
        if g is None or g.is_empty:
            result.append(g)
            continue
        lo, _, hi, _ = g.bounds
        shift = -360.0 * math.floor((0.5 * (lo + hi) + 180.0) / 360.0)
        if shift:
            g = affinity.translate(g, xoff=shift)
        lo, _, hi, _ = g.bounds
        if lo < -180.0 or hi > 180.0:
            parts = []
            for off in (-360.0, 0.0, 360.0):
                piece = g.intersection(shapely.box(-180.0 - off, -90.0, 180.0 - off, 90.0))
                if not piece.is_empty:
                    parts.append(affinity.translate(piece, xoff=off))
            g = shapely.line_merge(shapely.union_all(parts)) if parts else g
        result.append(g)
    return np.array(result, dtype=object)


def _comment_header() -> str:
    return "".join(f"# {line}\n" if line else "#\n" for line in ["CAUTION:", *caution_lines(width=100)])


def _check_table(table: Any, what: str, *, allow_empty: bool = False) -> Any:
    import pandas as pd

    if not isinstance(table, pd.DataFrame):
        try:
            table = pd.DataFrame(table)
        except Exception as exc:  # noqa: BLE001
            raise InputError(f"{what}: expected a pandas DataFrame or a list of records ({exc})") from None
    if len(table) == 0 and not allow_empty:
        raise InputError(f"{what}: the table has no rows; nothing to export")
    return table


def _fixed_timestamp() -> str:
    """Timestamp written where a format demands one: ``SOURCE_DATE_EPOCH`` if set, else 1970-01-01.

    Files carry no wall-clock time so that re-running a manifest reproduces them byte for byte
    (reproducible-builds.org convention); the run time is recorded in the manifest.
    """
    try:
        epoch = int(os.environ.get("SOURCE_DATE_EPOCH", "0"))
    except ValueError:
        epoch = 0
    return datetime.fromtimestamp(epoch, timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.000Z")


@contextlib.contextmanager
def _gdal_config(**options: str) -> Iterator[None]:
    import pyogrio

    old = {k: pyogrio.get_gdal_config_option(k) for k in options}
    pyogrio.set_gdal_config_options(options)
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options(old)


def write_segments(
    table: Any,
    path_stem: str | os.PathLike,
    crs: CRS | str | int,
    *,
    layer: str = "segments",
    formats: tuple[str, ...] = ("gpkg", "geojson", "csv"),
    csv_wkt: bool = False,
    style: ColourScale | bool | None = True,
) -> dict[str, Path]:
    """Write the coastline-segment table as GeoPackage, GeoJSON and CSV.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per segment with a ``geometry`` column of shapely geometries in ``crs`` (the
        segments-table contract of :mod:`tsunamifocus.coast`); other columns become fields.
    path_stem : str or path-like
        Output path without extension (``out/segments`` gives ``segments.gpkg`` ...).
    crs : pyproj.CRS, str or int
        CRS of the geometries (the grid CRS).
    layer : str
        Layer name in the GeoPackage / GeoJSON ``name``.
    formats : tuple of {"gpkg", "geojson", "csv"}
        Formats to write.
    csv_wkt : bool
        Add a ``geometry_wkt`` column (grid CRS) to the CSV.
    style : ColourScale, bool or None
        Default style of the GeoPackage layer (table ``layer_styles``, QML and SLD), colouring
        the segments by ``style.layer`` (``lensing_factor``) as the lensing map does. True: the
        lensing map's scale from the table's ``lensing_factor`` column alone (pass the run's
        shared scale to match a figure drawn with a raster); None/False: no style.

    Returns
    -------
    dict
        Format -> written path.

    Notes
    -----
    * GeoPackage: geometries in the grid CRS; the caution text is in the layer description
      (``gpkg_contents``, short form) and in the layer and dataset metadata item ``CAUTION``.
    * GeoJSON (RFC 7946): reprojected to WGS 84 longitude/latitude (that order), no ``crs``
      member, lines crossing the antimeridian cut; the caution is the top-level foreign member
      ``"caution"`` (RFC 7946 section 6.1).
    * CSV: no geometry (unless ``csv_wkt``); leading ``#`` comment lines carry the caution
      (read with ``pandas.read_csv(path, comment="#")``).
    """
    import shapely

    table = _check_table(table, "write_segments")
    if "geometry" not in table.columns:
        raise InputError("write_segments: the table has no 'geometry' column "
                         "(shapely geometries in the grid CRS)")
    bad = [f for f in formats if f not in ("gpkg", "geojson", "csv")]
    if bad:
        raise InputError(f"write_segments: unknown format(s) {bad}; expected 'gpkg', 'geojson', 'csv'")
    try:
        crs = CRS.from_user_input(crs)
    except Exception as exc:  # noqa: BLE001
        raise CRSError(f"write_segments: unusable CRS {crs!r} ({exc})") from None
    geoms = np.array(list(table["geometry"]), dtype=object)
    if not all(g is None or isinstance(g, shapely.Geometry) for g in geoms):
        raise InputError("write_segments: the 'geometry' column must hold shapely geometries")
    fields = [c for c in table.columns if c != "geometry"]
    field_data, field_mask = _field_arrays(table, fields)
    stem = Path(path_stem)
    written: dict[str, Path] = {}
    caution = caution_text()
    if "gpkg" in formats:
        p = stem.with_name(stem.name + ".gpkg")
        gpkg_geoms = _wrap_split(geoms) if crs.is_geographic else geoms
        with _atomic_file(p) as tmp, _gdal_config(OGR_CURRENT_DATE=_fixed_timestamp()):
            _write_vector(tmp, gpkg_geoms, field_data, fields, field_mask, crs.to_wkt(), "GPKG", layer,
                          layer_metadata={"CAUTION": caution}, dataset_metadata={"CAUTION": caution},
                          layer_options={"DESCRIPTION": caution_summary(), "IDENTIFIER": layer})
            if style is True and "lensing_factor" in table.columns:
                sv = pd.to_numeric(table["lensing_factor"], errors="coerce").to_numpy(dtype=float)
                style = lensing_scale(sv, sv)
            if isinstance(style, ColourScale) and style.layer in table.columns:
                _add_layer_style(tmp, layer, style)
        written["gpkg"] = p
    if "geojson" in formats:
        p = stem.with_name(stem.name + ".geojson")
        _write_geojson(p, _to_lonlat(geoms, crs), field_data, fields, _json_mask(field_data, field_mask), layer,
                       caution)
        written["geojson"] = p
    if "csv" in formats:
        p = stem.with_name(stem.name + ".csv")
        df = table.drop(columns=["geometry"])
        if csv_wkt:
            df = df.assign(geometry_wkt=shapely.to_wkt(geoms, rounding_precision=-1))
        _write_csv(df, p)
        written["csv"] = p
    return written


def _write_vector(path: Path, geoms: np.ndarray, field_data: list, fields: list[str], mask: Any, crs_wkt: str,
                  driver: str, layer: str, **options: Any) -> None:
    """One vector layer through pyogrio (WKB geometries, UTF-8 attributes)."""
    import pyogrio.raw
    import shapely

    pyogrio.raw.write(path, shapely.to_wkb(geoms), field_data, fields, field_mask=mask,
                      geometry_type=_geometry_type(geoms), crs=crs_wkt, driver=driver, layer=layer,
                      encoding="UTF-8", **options)


def _json_mask(field_data: list, field_mask: list | None) -> list | None:
    """JSON has no NaN: non-finite numbers become null (masked) instead of being dropped."""
    gj_mask = []
    for i, arr in enumerate(field_data):
        m = None if field_mask is None else field_mask[i]
        if np.asarray(arr).dtype.kind == "f":
            bad = ~np.isfinite(np.asarray(arr, dtype=float))
            if bad.any():
                m = bad if m is None else (np.asarray(m, dtype=bool) | bad)
        gj_mask.append(m)
    return None if all(m is None for m in gj_mask) else gj_mask


def _write_geojson(p: Path, ll: np.ndarray, field_data: list, fields: list[str], mask: list | None, layer: str,
                   caution: str) -> None:
    """RFC 7946 GeoJSON in lon/lat with the caution as the top-level foreign member ``caution``."""
    with _atomic_file(p) as tmp:
        _write_vector(tmp, ll, field_data, fields, mask, "EPSG:4326", "GeoJSON", layer,
                      layer_options={"RFC7946": "YES", "WRITE_NAME": "YES"})
        doc = json.loads(tmp.read_text(encoding="utf-8"))
        doc.pop("crs", None)
        out = {"type": doc.pop("type"), "name": doc.pop("name", layer), "caution": caution}
        out.update(doc)
        tmp.write_text(json.dumps(out, ensure_ascii=False, allow_nan=False) + "\n", encoding="utf-8")


def _is_lon_column(name: Any) -> bool:
    """Longitude columns of a table: ``lon``, ``lon_*`` or ``*_lon`` (e.g. ``lon_mid``)."""
    n = str(name).lower()
    return n == "lon" or n.startswith("lon_") or n.endswith("_lon")


def _lon180(v: np.ndarray) -> np.ndarray:
    """Longitudes in [-180, 180) (NaN stays NaN).

    Values already in range are kept as they are; shifted ones are rounded to 1e-9 degree (0.1
    mm), so 235.78 is written -124.22, not -124.22000000000003.
    """
    v = np.asarray(v, dtype=float)
    w = np.mod(v + 180.0, 360.0) - 180.0
    return np.where(w == v, v, np.round(w, 9))


#: The ``layer_styles`` table as QGIS creates it in a GeoPackage (its default-style store).
_LAYER_STYLES_DDL = (
    "CREATE TABLE IF NOT EXISTS layer_styles (id INTEGER PRIMARY KEY AUTOINCREMENT, "
    "f_table_catalog TEXT(256), f_table_schema TEXT(256), f_table_name TEXT(256), f_geometry_column TEXT(256), styleName TEXT(30), "
    "styleQML TEXT, styleSLD TEXT, useAsDefault BOOLEAN, description TEXT, owner TEXT(30), ui TEXT(30), "
    "update_time DATETIME DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')))"
)


def _add_layer_style(gpkg: Path, layer: str, scale: ColourScale) -> None:
    """Store ``scale`` as the default style of ``layer`` (QML and SLD) in the GeoPackage's ``layer_styles``.

    The table is registered in ``gpkg_contents`` as an attributes table (GeoPackage 1.2,
    requirement 13 for non-spatial tables), as QGIS does; timestamps follow
    :func:`_fixed_timestamp` so the file stays reproducible.
    """
    import sqlite3

    stamp = _fixed_timestamp()
    con = sqlite3.connect(gpkg)
    try:
        with con:
            row = con.execute("SELECT column_name FROM gpkg_geometry_columns WHERE table_name = ?",
                              (layer,)).fetchone()
            geom_col = row[0] if row else "geom"
            con.execute(_LAYER_STYLES_DDL)
            con.execute(
                "INSERT INTO layer_styles (f_table_catalog, f_table_schema, f_table_name, f_geometry_column, "
                "styleName, styleQML, styleSLD, useAsDefault, description, owner, ui, update_time) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                ("", "", layer, geom_col, f"{layer} by {scale.layer}", segments_qml(scale, scale.layer),
                 segments_sld(scale, layer, scale.layer), 1,
                 f"{scale.title}; colours and classes of the tsunamifocus lensing map", "", None, stamp),
            )
            con.execute(
                "INSERT OR REPLACE INTO gpkg_contents "
                "(table_name, data_type, identifier, description, last_change) VALUES ('layer_styles', 'attributes', 'layer_styles', 'default styles of the layers', ?)",
                (stamp,),
            )
    finally:
        con.close()


def _write_csv(df: Any, path: Path) -> None:
    cols = [c for c in df.columns if _is_lon_column(c) and pd.api.types.is_numeric_dtype(df[c].dtype)]
    if cols:
        df = df.copy()
        for c in cols:
            df[c] = _lon180(df[c].to_numpy(dtype=float))
    with _atomic_file(path) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(_comment_header())
            df.to_csv(fh, index=False, lineterminator="\n")


def write_points_csv(table: Any, path: str | os.PathLike) -> Path:
    """Write the points-of-interest table as CSV with the caution as leading ``#`` comment lines.

    Parameters
    ----------
    table : pandas.DataFrame or list of dict
        Columns ``name, lon, lat`` [degrees], ``first_arrival_min`` [min], ``lensing_factor`` [1],
        ``amp_1m_m`` (indicative amplitude at 1 m depth by Green's law) [m] and
        ``nearest_segment`` (segment id); further columns are written after these. An empty
        table (no points of interest) gives the caution and the header line only.
    path : str or path-like
        Target ``.csv`` file.

    Returns
    -------
    pathlib.Path
    """
    table = _check_table(table, "write_points_csv", allow_empty=True)
    if len(table) == 0:  # a scenario without [[point]]: the header alone says so
        table = table.reindex(columns=list(dict.fromkeys([*POINT_COLUMNS, *table.columns])))
    missing = [c for c in POINT_COLUMNS if c not in table.columns]
    if missing:
        raise InputError(f"write_points_csv: missing column(s) {missing}; expected {list(POINT_COLUMNS)}")
    cols = list(POINT_COLUMNS) + [c for c in table.columns if c not in POINT_COLUMNS]
    path = Path(path)
    _write_csv(table[cols], path)
    return path

def _plain_dtypes(df: pd.DataFrame) -> pd.DataFrame:
    """Nullable integer/boolean columns (ranks with gaps) as float/object for the vector writers."""
    out = df.copy()
    for c in out.columns:
        dt = out[c].dtype
        if isinstance(dt, pd.api.extensions.ExtensionDtype) and dt.kind in "iu":
            out[c] = out[c].astype("float64")
        elif isinstance(dt, pd.BooleanDtype):
            out[c] = out[c].astype(object).where(out[c].notna(), None)
    return out
