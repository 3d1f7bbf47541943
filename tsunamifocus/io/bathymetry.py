"""Bathymetry loading, cropping, resampling and low-pass smoothing.

:func:`load_bathymetry` is the one entry point that takes file names: GeoTIFF (and any
other single-band raster GDAL reads, e.g. ESRI ASCII grids) and NetCDF (CF lon/lat, or
projected x/y with a grid mapping). It returns **depth in metres, positive down**, NaN
where there is no data, following the grid convention of :mod:`tsunamifocus.grid`.
Everything else here is pure computation on DataArrays.
"""

from __future__ import annotations

import logging
import os
import pathlib
import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr
from pyproj import CRS

from ..constants import DEFAULTS
from ..errors import DataWarning, CRSError, DataFileError, InputError, ResourceLimitError, SignConventionError
from ..grid import GridInfo, check_bbox, crop_bathymetry, make_grid, resample_bathymetry

__all__ = ['load_bathymetry', 'estimate_grid_memory', 'DEFAULT_MAX_MEMORY_GB', 'PROCESS_BASE_BYTES']

log = logging.getLogger(__name__)

#: Default refusal limit for loading a grid [GB] (configurable per call or by the
#: environment variable ``TSUNAMIFOCUS_MAX_MEMORY_GB``).
DEFAULT_MAX_MEMORY_GB: float = float(DEFAULTS["bathymetry"]["max_memory_gb"])

_FEET = {"ft", "feet", "foot", "us_survey_foot", "international_foot", "ft_us"}
_METRES = {"m", "meter", "meters", "metre", "metres"}
_NETCDF_EXT = {".nc", ".nc4", ".cdf", ".netcdf", ".grd"}
_ELEV_WORDS = ("elevation", "height", "altitude", "topograph", "relief", "orography")
_DEPTH_WORDS = ("depth",)
#: Physical bound [m] used to tell elevation from depth by the values alone: higher than the
#: highest land (Mount Everest, 8,849 m) and shallower than the deepest sea floor (Challenger
#: Deep, about 10,935 m). A value below -PHYSICAL_SIGN_BOUND_M cannot be a land height, so the
#: grid stores elevation (positive up); a value above +PHYSICAL_SIGN_BOUND_M cannot be a land
#: height either, so the grid stores depth (positive down).
PHYSICAL_SIGN_BOUND_M: float = 8900.0
#: Physical bounds of a depth grid [m]: no sea floor is deeper than the Challenger Deep (about
#: 10,935 m, rounded up) and no land higher than Mount Everest (8,849 m, rounded up).
DEEPEST_SEA_FLOOR_M: float = 11000.0
HIGHEST_LAND_M: float = 8900.0
#: Up to this fraction of the valid cells may lie outside the physical bounds (isolated spikes):
#: they become no data with a warning; beyond it the grid is refused (units or sign are wrong).
OUT_OF_BOUNDS_MAX_FRACTION: float = 0.001
#: Peak memory of loading and summarising a grid, per grid cell [bytes], and of the process that
#: has imported tsunamifocus and its libraries [bytes]: measured as the peak resident set size of
#: ``tsunamifocus inspect`` on float32 GeoTIFF and NetCDF grids of 0.04 to 36 million cells
#: (``benchmarks/bench_memory.py``, figures in docs/reliability.md), rounded up.
_BYTES_PER_CELL = 76
PROCESS_BASE_BYTES = 380_000_000


@dataclass
class _Raw:
    values: np.ndarray
    x: np.ndarray
    y: np.ndarray
    crs: CRS
    attrs: dict
    name: str
    fmt: str


# --------------------------------------------------------------------------------------
# public entry point
# --------------------------------------------------------------------------------------
def load_bathymetry(
    path: str | os.PathLike,
    *,
    values: str = "auto",
    variable: str | None = None,
    bbox: tuple[float, float, float, float] | None = None,
    margin_km: float = 0.0,
    resample_km: float | None = None,
    units: str | None = None,
    crs: CRS | str | int | None = None,
    max_memory_gb: float | None = None,
) -> xr.DataArray:
    """Load a bathymetry grid as depth in metres, positive down.

    Parameters
    ----------
    path : str or path-like
        GeoTIFF / GDAL raster (``.tif``, ``.asc`` ...) or NetCDF (``.nc``, ``.grd``) file.
    values : {"auto", "elevation", "depth"}
        What the stored numbers are. ``"elevation"``: height above sea level (negative
        below it); ``"depth"``: positive down. ``"auto"`` decides from metadata only
        (``positive`` attribute, ``standard_name``, names) and refuses when it cannot.
    variable : str, optional
        NetCDF variable to read; needed only when the file holds several 2-D variables.
    bbox : (xmin, ymin, xmax, ymax), optional
        Crop box in the grid's CRS units (degrees lon/lat on geographic grids).
    margin_km : float
        Margin added around ``bbox`` [km].
    resample_km : float, optional
        Target spacing [km] for area-average downsampling (integer block factor).
    units : str, optional
        Override the vertical unit (``"m"`` or ``"ft"``) when the file does not declare it.
    crs : CRS-like, optional
        CRS to assume for a file that carries none (e.g. an ESRI ASCII grid without .prj).
    max_memory_gb : float, optional
        Refuse to load when the estimated memory exceeds this [GB]. Defaults to
        ``TSUNAMIFOCUS_MAX_MEMORY_GB`` or :data:`DEFAULT_MAX_MEMORY_GB`.

    Returns
    -------
    xarray.DataArray
        Depth [m], positive down, NaN where no data; land is depth <= 0.

    Raises
    ------
    DataFileError
        Missing, unreadable or corrupt file; unsupported layout.
    SignConventionError
        ``values="auto"`` cannot decide between elevation and depth.
    CRSError
        No CRS in the file and none given.
    ResourceLimitError
        The grid would need more memory than allowed.
    InputError
        Any other bad value (3-D variable, rotated transform, all land, ...).

    Examples
    --------
    >>> depth = load_bathymetry("grid.nc", values="elevation")  # doctest: +SKIP
    >>> float(depth.max())  # doctest: +SKIP
    10714.0
    """
    if values not in ("auto", "elevation", "depth"):
        raise InputError(f"values={values!r}: expected 'auto', 'elevation' or 'depth'")
    p = pathlib.Path(path)
    if not p.exists():
        raise DataFileError(f"{p}: file not found")
    if not p.is_file():
        raise DataFileError(f"{p}: not a regular file")
    if p.stat().st_size == 0:
        raise DataFileError(f"{p}: file is empty")
    limit = _memory_limit(max_memory_gb)
    if _is_netcdf(p):
        raw = _read_netcdf(p, variable, bbox, margin_km, limit)
    else:
        if variable is not None:
            raise InputError(f"{p}: 'variable' applies to NetCDF files only")
        raw = _read_raster(p, crs, bbox, margin_km, limit)
    if crs is not None and raw.crs is None:  # pragma: no cover - handled in readers
        raw.crs = CRS.from_user_input(crs)
    depth = _to_depth(raw, values, units, p)
    da = _assemble(raw, depth, p)
    _physical_bounds(da, p)
    da.attrs["sign_decided_by"] = raw.attrs.get("sign_decided_by") or f"given: values={values!r}"
    if bbox is not None:
        da = crop_bathymetry(da, bbox, margin_km=margin_km)
    if resample_km is not None:
        da = resample_bathymetry(da, resample_km)
    _check_usable(da, p)
    return da


def estimate_grid_memory(shape: tuple[int, int], bytes_per_cell: int | None = None) -> int:
    """Estimated bytes needed to hold and process a grid of ``shape`` (rows, columns).

    Parameters
    ----------
    shape : (int, int)
        Rows and columns.
    bytes_per_cell : int, optional
        Bytes per cell of some other computation (the grid alone: 8). None: the peak resident
        memory of loading and summarising the grid in a fresh process, the process itself
        included (:data:`PROCESS_BASE_BYTES` + ``_BYTES_PER_CELL`` per cell, measured).

    Returns
    -------
    int
        Bytes.
    """
    cells = int(shape[0]) * int(shape[1])
    if bytes_per_cell is None:
        return PROCESS_BASE_BYTES + cells * _BYTES_PER_CELL
    return cells * int(bytes_per_cell)


# --------------------------------------------------------------------------------------
# readers
# --------------------------------------------------------------------------------------
def _memory_limit(max_memory_gb: float | None) -> float:
    if max_memory_gb is None:
        env = os.environ.get("TSUNAMIFOCUS_MAX_MEMORY_GB")
        if env:
            try:
                max_memory_gb = float(env)
            except ValueError as exc:
                raise InputError(f"TSUNAMIFOCUS_MAX_MEMORY_GB={env!r}: expected a number of GB") from exc
        else:
            max_memory_gb = DEFAULT_MAX_MEMORY_GB
    if not max_memory_gb > 0:
        raise InputError(f"max_memory_gb={max_memory_gb}: expected a positive number of GB")
    return float(max_memory_gb) * 1e9


def _check_memory(p: pathlib.Path, shape: tuple[int, int], limit: float) -> None:
    need = estimate_grid_memory(shape)
    if need > limit:
        raise ResourceLimitError(
            f"{p}: loading a {shape[0]} x {shape[1]} grid needs about {need / 1e9:.1f} GB, above the "
            f"limit of {limit / 1e9:.1f} GB; crop it (bbox), resample it (resample_km) or raise max_memory_gb"
        )


def _is_netcdf(p: pathlib.Path) -> bool:
    try:
        with open(p, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:  # no permission, an I/O error: a data-file error, not a crash
        raise DataFileError(f"{p}: cannot read the grid file ({exc.strerror or exc}); expected a readable file") from None
    if head[:3] == b"CDF" or head[:8] == b"\x89HDF\r\n\x1a\n":
        return True
    return p.suffix.lower() in _NETCDF_EXT and not head.lower().startswith(b"ncols")


def _read_raster(p, crs, bbox, margin_km, limit) -> _Raw:
    import rasterio
    from rasterio.errors import RasterioIOError

    try:
        src = rasterio.open(p)
    except RasterioIOError as exc:
        raise DataFileError(f"{p}: not a readable raster ({str(exc).splitlines()[0]})") from exc
    with src:
        if src.count != 1:
            raise InputError(f"{p}: has {src.count} bands; expected a single-band bathymetry raster")
        t = src.transform
        if abs(t.b) > 1e-12 * abs(t.a) or abs(t.d) > 1e-12 * abs(t.e):
            raise InputError(f"{p}: rotated or sheared geotransform {tuple(t)[:6]}; expected a north-up grid")
        file_crs = src.crs
        if file_crs is None:
            if crs is None:
                raise CRSError(f"{p}: raster has no CRS; pass crs=... (e.g. 'EPSG:4326')")
            the_crs = CRS.from_user_input(crs)
        else:
            the_crs = CRS.from_user_input(file_crs.to_wkt())
        _check_memory(p, (src.height, src.width), limit)
        try:
            arr = src.read(1, masked=True)
        except Exception as exc:  # GDAL raises various errors on truncated files
            raise DataFileError(f"{p}: cannot read raster data ({exc})") from exc
        scale = src.scales[0] if src.scales else 1.0
        offset = src.offsets[0] if src.offsets else 0.0
        vals = np.ma.filled(arr.astype("float64"), np.nan)
        nod = src.nodata
        if nod is not None and not np.isnan(nod):
            vals[np.isclose(vals, nod, rtol=0, atol=abs(nod) * 1e-9 + 1e-12)] = np.nan
        vals = vals * scale + offset
        # pixel-is-area transform: cell centres; GDAL already normalises pixel-is-point files
        cols = np.arange(src.width) + 0.5
        rows = np.arange(src.height) + 0.5
        x = t.c + t.a * cols
        y = t.f + t.e * rows
        attrs = {k.lower(): v for k, v in src.tags().items()}
        try:
            attrs.update({k.lower(): v for k, v in src.tags(1).items()})
        except Exception:  # pragma: no cover
            pass
        if src.units and src.units[0]:
            attrs["units"] = src.units[0]
        if src.descriptions and src.descriptions[0]:
            attrs["long_name"] = src.descriptions[0]
        fmt = src.driver
    if t.a < 0:
        x = x[::-1]
        vals = vals[:, ::-1]
    if t.e < 0:
        y = y[::-1]
        vals = vals[::-1, :]
    return _Raw(np.ascontiguousarray(vals), x, y, the_crs, attrs, p.stem, fmt)


def _find_coord(ds: xr.Dataset, da: xr.DataArray, axis: str) -> str:
    names_x = ("lon", "longitude", "x", "easting", "nav_lon", "xc")
    names_y = ("lat", "latitude", "y", "northing", "nav_lat", "yc")
    for d in da.dims:
        c = ds[d] if d in ds.variables else None
        attrs = c.attrs if c is not None else {}
        units = str(attrs.get("units", "")).lower()
        std = str(attrs.get("standard_name", "")).lower()
        ax = str(attrs.get("axis", "")).upper()
        if axis == "x" and (
            ax == "X" or std in ("longitude", "projection_x_coordinate") or units.startswith("degrees_e")
            or d.lower() in names_x
        ):
            return d
        if axis == "y" and (
            ax == "Y" or std in ("latitude", "projection_y_coordinate") or units.startswith("degrees_n")
            or d.lower() in names_y
        ):
            return d
    raise DataFileError(
        f"variable '{da.name}' has dims {da.dims}; cannot tell which is the {axis} axis "
        "(expected CF axis/standard_name/units attributes or names like lon/lat or x/y)"
    )


def _read_netcdf(p, variable, bbox, margin_km, limit) -> _Raw:
    try:
        ds = xr.open_dataset(p, mask_and_scale=True, decode_times=False, cache=False)
    except Exception as exc:
        raise DataFileError(f"{p}: not a readable NetCDF file ({type(exc).__name__}: {exc})") from exc
    with ds:
        variable = _nc_variable(ds, variable, p)
        da = ds[variable]
        extra = [d for d in da.dims if da.sizes[d] == 1]
        if da.ndim != 2:
            if da.ndim - len(extra) == 2:
                da = da.squeeze(extra, drop=True)
            else:
                raise InputError(
                    f"{p}: variable '{variable}' has dims {da.dims}; expected a 2-D (y, x) grid "
                    "(select a time/level first)"
                )
        xd = _find_coord(ds, da, "x")
        yd = _find_coord(ds, da, "y")
        the_crs = _nc_crs(ds, da, xd, variable, p)
        x = np.asarray(ds[xd].values, dtype=float)
        y = np.asarray(ds[yd].values, dtype=float)
        if the_crs.is_geographic:
            if np.nanmax(np.abs(y)) > 90.0 + 1e-9:
                raise InputError(
                    f"{p}: '{yd}' values reach {np.nanmax(np.abs(y)):.1f}, beyond +/-90 degrees; "
                    "are longitude and latitude swapped?"
                )
        da = da.transpose(yd, xd)
        sel, x, y = _nc_window(x, y, xd, yd, bbox, margin_km, the_crs.is_geographic, p)
        _check_memory(p, (y.size, x.size), limit)
        try:
            vals = np.asarray(da.isel(sel).values, dtype="float64")
        except Exception as exc:
            raise DataFileError(f"{p}: cannot read variable '{variable}' ({exc})") from exc
        attrs = dict(da.attrs)
        attrs["_varname"] = variable
        if "node_offset" in ds.attrs:
            attrs["node_offset"] = ds.attrs["node_offset"]
    x, y, vals = _ascending(x, y, vals, the_crs.is_geographic)
    return _Raw(vals, x, y, the_crs, attrs, str(variable), "netCDF")


def _nc_variable(ds: xr.Dataset, variable: str | None, p: pathlib.Path) -> str:
    """The variable to read: the one given, or the only 2-D numeric one."""
    if variable is None:
        cands = [
            n for n, v in ds.data_vars.items()
            if v.ndim >= 2 and np.issubdtype(v.dtype, np.number) and "grid_mapping_name" not in v.attrs
        ]
        if not cands:
            raise DataFileError(f"{p}: no 2-D numeric variable found")
        two_d = [n for n in cands if ds[n].squeeze().ndim == 2]
        if len(two_d) == 1:
            variable = two_d[0]
        elif len(two_d) > 1:
            raise InputError(f"{p}: several 2-D variables {two_d}; choose one with variable=...")
        elif ds[cands[0]].ndim == 2:  # 2-D but a single row or column
            raise InputError(f"{p}: variable '{cands[0]}' is {ds[cands[0]].shape[0]} x "
                             f"{ds[cands[0]].shape[1]} cells; expected at least 2 x 2 cells")
        else:
            raise InputError(
                f"{p}: variable '{cands[0]}' has dims {ds[cands[0]].dims}; expected a 2-D (y, x) grid"
            )
    if variable not in ds.data_vars:
        raise InputError(f"{p}: no variable '{variable}' (has {list(ds.data_vars)})")
    return variable


def _nc_crs(ds: xr.Dataset, da: xr.DataArray, xd: str, variable: str, p: pathlib.Path) -> CRS:
    """The CRS of the grid mapping, else lon/lat for degree coordinates; refuses projected x/y without one."""
    gm_name = da.attrs.get("grid_mapping") or da.encoding.get("grid_mapping")
    the_crs = None
    if gm_name and gm_name in ds.variables:
        gattrs = ds[gm_name].attrs
        wkt = gattrs.get("crs_wkt") or gattrs.get("spatial_ref")
        try:
            the_crs = CRS.from_wkt(wkt) if wkt else CRS.from_cf(gattrs)
        except Exception as exc:
            raise CRSError(f"{p}: grid mapping '{gm_name}' is not a usable CRS ({exc})") from exc
    xunits = str(ds[xd].attrs.get("units", "")).lower() if xd in ds.variables else ""
    geog_names = xd.lower() in ("lon", "longitude") or xunits.startswith("degree")
    if the_crs is None:
        if geog_names:
            the_crs = CRS.from_epsg(4326)
        else:
            raise CRSError(
                f"{p}: variable '{variable}' is on projected x/y coordinates but has no grid_mapping "
                "with crs_wkt; add one or convert the file to GeoTIFF with a CRS"
            )
    return the_crs


def _nc_window(x: np.ndarray, y: np.ndarray, xd: str, yd: str, bbox, margin_km: float, geographic: bool,
               p: pathlib.Path) -> tuple[dict, np.ndarray, np.ndarray]:
    """Index slices of the crop box (plus margin and one cell; latitudes only on lon/lat grids)."""
    sel = {}
    if bbox is not None:
        bbox = check_bbox(bbox, geographic)
    if bbox is not None and not geographic:
        m = margin_km * 1000.0
        xs = np.nonzero((x >= bbox[0] - m - abs(x[1] - x[0])) & (x <= bbox[2] + m + abs(x[1] - x[0])))[0]
        ys = np.nonzero((y >= bbox[1] - m - abs(y[1] - y[0])) & (y <= bbox[3] + m + abs(y[1] - y[0])))[0]
        if xs.size == 0 or ys.size == 0:
            raise InputError(f"{p}: bbox {bbox} does not overlap the grid")
        sel = {xd: slice(xs[0], xs[-1] + 1), yd: slice(ys[0], ys[-1] + 1)}
        x, y = x[sel[xd]], y[sel[yd]]
    elif bbox is not None:
        m_lat = margin_km / 111.19
        ys = np.nonzero((y >= bbox[1] - m_lat - abs(y[1] - y[0])) & (y <= bbox[3] + m_lat + abs(y[1] - y[0])))[0]
        if ys.size == 0:
            raise InputError(f"{p}: bbox {bbox} latitudes do not overlap the grid")
        sel = {yd: slice(ys[0], ys[-1] + 1)}
        y = y[sel[yd]]
    return sel, x, y


def _ascending(x: np.ndarray, y: np.ndarray, vals: np.ndarray, geographic: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Coordinates ascending (values flipped to match); longitudes continued past 180 across the antimeridian."""
    if x.size > 1 and x[1] < x[0]:
        x = x[::-1]
        vals = vals[:, ::-1]
    if y.size > 1 and y[1] < y[0]:
        y = y[::-1]
        vals = vals[::-1, :]
    if geographic and x.size > 2:
        # a regional grid across the antimeridian in -180..180 numbers (170 ... 180, -175 ...):
        # continue the longitudes past 180 (same meridians, now ascending)
        jump = np.flatnonzero(np.diff(x) < -180.0)
        if jump.size == 1:
            x = np.concatenate([x[: jump[0] + 1], x[jump[0] + 1 :] + 360.0])
    return x, y, vals


# --------------------------------------------------------------------------------------
# sign, units, assembly
# --------------------------------------------------------------------------------------
def _to_depth(raw: _Raw, values: str, units: str | None, p: pathlib.Path) -> np.ndarray:
    attrs = raw.attrs
    u = (units or str(attrs.get("units", ""))).strip().lower()
    if u in _FEET or u.startswith("feet") or u == "us survey foot":
        factor = 0.3048 if "us" not in u else 1200.0 / 3937.0
    elif u in _METRES or u == "":
        factor = 1.0
    elif u in ("km", "kilometre", "kilometer", "kilometres", "kilometers"):
        factor = 1000.0
    else:
        raise InputError(f"{p}: vertical units {u!r} not understood; expected metres or feet (pass units=...)")
    if u == "":
        log.info("%s: no vertical units declared; assuming metres", p)
    mode = values
    if mode == "auto":
        mode, raw.attrs["sign_decided_by"] = _decide_sign(attrs, raw.name, p, raw.values * factor)
    else:  # an explicit choice must not contradict the file's CF 'positive' attribute
        pos = str(attrs.get("positive", "")).strip().lower()
        declared = {"up": "elevation", "down": "depth"}.get(pos)
        if declared is not None and declared != mode:
            raise SignConventionError(
                f"{p}: values={values!r} contradicts the file's attribute positive={pos!r} (which means "
                f"{declared}); pass values={declared!r} (or 'auto'), or correct the file's metadata"
            )
    vals = raw.values * factor
    return -vals if mode == "elevation" else vals


def _decide_sign(attrs: dict, name: str, p: pathlib.Path, vals: np.ndarray) -> tuple[str, str]:
    """``("elevation" | "depth", reason)`` from metadata, else from physical bounds on the values [m]."""
    pos = str(attrs.get("positive", "")).strip().lower()
    if pos == "up":
        return "elevation", "attribute positive='up'"
    if pos == "down":
        return "depth", "attribute positive='down'"
    std = str(attrs.get("standard_name", "")).lower()
    if std in ("height_above_mean_sea_level", "altitude", "height", "surface_altitude",
               "height_above_reference_ellipsoid"):
        return "elevation", f"standard_name={std!r}"
    if std in ("sea_floor_depth_below_sea_level", "sea_floor_depth_below_geoid", "depth", "sea_floor_depth"):
        return "depth", f"standard_name={std!r}"
    words = " ".join([str(attrs.get("long_name", "")), str(attrs.get("description", "")), name]).lower()
    is_e = any(w in words for w in _ELEV_WORDS)
    is_d = any(w in words for w in _DEPTH_WORDS)
    if is_e != is_d:
        kind = "elevation" if is_e else "depth"
        return kind, f"name or long_name mentions {kind}"
    finite = vals[np.isfinite(vals)]
    hint = ""
    if finite.size:
        lo, hi = float(finite.min()), float(finite.max())
        b = PHYSICAL_SIGN_BOUND_M
        # No land is higher than b, so a value beyond b on either side can only be sea floor:
        # below -b it is sea floor stored as negative elevation, above +b as positive depth.
        deep_neg, deep_pos = lo < -b, hi > b
        if deep_neg and not deep_pos:
            return "elevation", (f"values: minimum {lo:,.0f} m lies below -{b:,.0f} m, which no land height "
                                 "reaches, so it is sea floor stored as negative elevation")
        if deep_pos and not deep_neg:
            return "depth", (f"values: maximum {hi:,.0f} m lies above {b:,.0f} m, which no land height "
                             "reaches, so it is sea floor stored as positive depth")
        neg = float(np.mean(finite < 0))
        if deep_neg and deep_pos:
            hint = (f" (values span {lo:,.0f} to {hi:,.0f} m, beyond +/-{b:,.0f} m on both sides, which no "
                    "real relief grid does; check units and nodata)")
        else:
            hint = (f" ({neg:.0%} of values are negative; all within +/-{b:,.0f} m, so the values alone "
                    "cannot tell)")
    raise SignConventionError(
        f"{p}: cannot tell whether '{name}' holds elevation or depth{hint}; pass values='elevation' "
        "(negative below sea level) or values='depth' (positive down)"
    )


def _assemble(raw: _Raw, depth: np.ndarray, p: pathlib.Path) -> xr.DataArray:
    x, y = raw.x, raw.y
    if x.size < 2 or y.size < 2:
        raise InputError(f"{p}: grid is {y.size} x {x.size}; expected at least 2 x 2 cells")
    lon_periodic = False
    if raw.crs.is_geographic:
        dx = (x[-1] - x[0]) / (x.size - 1)
        span = x[-1] - x[0]
        if abs(span - 360.0) < 1e-6 * 360:
            # duplicated seam column (e.g. 0 and 360): drop the last, it is the same meridian
            a, b = depth[:, 0], depth[:, -1]
            both = np.isfinite(a) & np.isfinite(b)
            if both.any() and np.nanmax(np.abs(a[both] - b[both])) > 1e-3 * (np.nanmax(np.abs(a)) + 1):
                warnings.warn(f"{p}: seam columns at {x[0]} and {x[-1]} differ; keeping the first", stacklevel=3)
            x = x[:-1]
            depth = depth[:, :-1]
            lon_periodic = True
        elif abs(span + dx - 360.0) < 1e-6 * 360:
            lon_periodic = True
        if np.nanmax(np.abs(y)) > 90.0 + 1e-9:
            raise InputError(f"{p}: latitudes reach {np.nanmax(np.abs(y)):.1f}; beyond +/-90 degrees")
    attrs = {
        "units": "m",
        "long_name": "depth below mean sea level",
        "standard_name": "sea_floor_depth_below_sea_level",
        "positive": "down",
        "source_file": str(p),
        "source_format": raw.fmt,
    }
    da = make_grid(depth, x, y, raw.crs, name="depth", attrs=attrs, lon_periodic=lon_periodic)
    try:
        GridInfo.from_dataarray(da)
    except InputError as exc:
        raise InputError(f"{p}: {exc}") from exc
    return da


def _check_usable(da: xr.DataArray, p: pathlib.Path) -> None:
    v = da.values
    fin = np.isfinite(v)
    if not fin.any():
        raise InputError(f"{p}: every cell is nodata (NaN); nothing to use")
    if not (v[fin] > 0).any():
        raise InputError(
            f"{p}: no sea cells (all depths <= 0 after sign conversion); check values='elevation'/'depth'"
        )


def _physical_bounds(da: xr.DataArray, p: pathlib.Path) -> None:
    """Refuse a grid with many impossible values; turn a few isolated ones into no data with a warning.

    A depth beyond :data:`DEEPEST_SEA_FLOOR_M` or a height above :data:`HIGHEST_LAND_M` exists
    nowhere on Earth: such values are spikes, nodata markers without a declaration, or a wrong
    unit or sign, and would give impossible wave speeds (c = sqrt(g h)).
    """
    v = da.values
    with np.errstate(invalid="ignore"):
        bad = (v > DEEPEST_SEA_FLOOR_M) | (v < -HIGHEST_LAND_M)
    n_bad = int(bad.sum())
    if not n_bad:
        return
    n_fin = int(np.isfinite(v).sum())
    worst = float(v[bad][np.argmax(np.abs(v[bad]))])
    what = (f"{n_bad} of {n_fin} cells lie outside the physical range (depth at most "
            f"{DEEPEST_SEA_FLOOR_M:,.0f} m, land at most {HIGHEST_LAND_M:,.0f} m high; the most extreme is "
            f"{'depth' if worst > 0 else 'height'} {abs(worst):,.6g} m)")
    if n_bad > OUT_OF_BOUNDS_MAX_FRACTION * n_fin:
        raise InputError(f"{p}: {what}; expected depths in metres: check the units, the sign (values=) and "
                         "the nodata value of the file")
    warnings.warn(f"{p}: {what}; these cells are treated as no data", DataWarning, stacklevel=3)
    v[bad] = np.nan
