"""Initial sea-surface rasters: a displacement field made elsewhere (GeoTIFF or NetCDF, any CRS).

For sources the package does not model itself (a landslide, a volcanic flank collapse, the
surface of another model) the initial sea-surface displacement is read from a single-band
raster: GeoTIFF (or any single-band raster GDAL reads) with its CRS, or NetCDF with CF
lon/lat coordinates or projected x/y and a grid mapping. Values are metres, positive up;
``units`` of ``m``, ``cm`` or ``mm`` are converted, no units means metres. No-data cells are
read as NaN and later taken as no displacement.
"""

from __future__ import annotations

import logging
import os
import pathlib

import numpy as np
import xarray as xr

from ..errors import DataFileError, InputError
from ..grid import GridInfo, make_grid
from .bathymetry import _is_netcdf, _memory_limit, _read_netcdf, _read_raster

__all__ = ["read_sea_surface", "MAX_SURFACE_M"]

log = logging.getLogger(__name__)

#: Largest |displacement| accepted [m]; beyond it the units are most likely not metres.
MAX_SURFACE_M: float = 100.0
_UNITS = {"m": 1.0, "meter": 1.0, "meters": 1.0, "metre": 1.0, "metres": 1.0, "": 1.0,
          "cm": 0.01, "centimeter": 0.01, "centimeters": 0.01, "centimetre": 0.01, "centimetres": 0.01,
          "mm": 0.001, "millimeter": 0.001, "millimeters": 0.001, "millimetre": 0.001, "millimetres": 0.001}


def read_sea_surface(path: str | os.PathLike, *, variable: str | None = None,
                     max_memory_gb: float | None = None) -> xr.DataArray:
    """Read an initial sea-surface displacement raster in its own CRS.

    Parameters
    ----------
    path : str or path-like
        GeoTIFF / single-band GDAL raster, or NetCDF file.
    variable : str, optional
        NetCDF variable (needed only when the file holds several 2-D variables).
    max_memory_gb : float, optional
        Refuse files that would need more memory [GB] (default as for bathymetry).

    Returns
    -------
    xarray.DataArray
        ``eta`` [m, positive up] on the raster's own grid and CRS (tsunamifocus grid convention),
        NaN where the file has no data; ``attrs["source_file"]`` names the file.

    Raises
    ------
    DataFileError
        Missing, empty or unreadable file.
    InputError
        Several bands or variables, unknown units, no finite value, no displacement, or values
        beyond +/- :data:`MAX_SURFACE_M` m.
    """
    p = pathlib.Path(path)
    if not p.exists():
        raise DataFileError(f"{p}: sea-surface raster not found")
    if not p.is_file():
        raise DataFileError(f"{p}: not a regular file, expected a sea-surface raster (GeoTIFF or NetCDF)")
    if p.stat().st_size == 0:
        raise DataFileError(f"{p}: file is empty, expected a sea-surface raster (GeoTIFF or NetCDF)")
    limit = _memory_limit(max_memory_gb)
    if _is_netcdf(p):
        raw = _read_netcdf(p, variable, None, 0.0, limit)
    else:
        if variable is not None:
            raise InputError(f"{p}: variable = {variable!r} applies to NetCDF files only")
        raw = _read_raster(p, None, None, 0.0, limit)
    if raw.x.size < 2 or raw.y.size < 2:
        raise InputError(f"{p}: raster is {raw.y.size} x {raw.x.size} cells; expected at least 2 x 2")
    units = str(raw.attrs.get("units", "")).strip().lower()
    if units not in _UNITS:
        raise InputError(f"{p}: units {units!r} of the sea-surface values not understood; expected metres "
                         "(m), centimetres (cm) or millimetres (mm)")
    if units == "":
        log.info("%s: no units declared; reading the sea-surface values as metres", p)
    vals = np.asarray(raw.values, dtype=float) * _UNITS[units]
    fin = np.isfinite(vals)
    if not fin.any():
        raise InputError(f"{p}: every cell is no data; expected a sea-surface displacement in metres")
    peak = float(np.max(np.abs(vals[fin])))
    if peak == 0.0:
        raise InputError(f"{p}: the displacement is zero everywhere; expected a non-zero sea surface")
    if peak > MAX_SURFACE_M:
        raise InputError(f"{p}: |displacement| reaches {peak:.4g} m; expected at most {MAX_SURFACE_M:g} m "
                         "(values in metres, positive up; set the units attribute for cm or mm)")
    eta = make_grid(vals, raw.x, raw.y, raw.crs, name="eta",
                    attrs={"units": "m", "long_name": "initial sea-surface displacement (positive up)",
                           "source_file": str(p), "source_format": raw.fmt})
    try:
        GridInfo.from_dataarray(eta)
    except InputError as exc:
        raise InputError(f"{p}: {exc}") from None
    return eta
