"""Reading a finished run folder (layers, segments, manifest)."""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path

import pandas as pd
import xarray as xr

from ..errors import DataFileError

#: One run as compared: (name, segments table, layers by name).
RunTuple = tuple[str, pd.DataFrame, Mapping[str, xr.DataArray]]

__all__ = ['read_run', 'LAYERS_FILE', 'SEGMENTS_FILE', 'MANIFEST_FILE', 'WKT_COLUMNS']

#: File names inside a finished run folder (set by the pipeline; change them here only).
LAYERS_FILE = "layers.nc"
SEGMENTS_FILE = "segments.csv"
MANIFEST_FILE = "manifest.json"
#: Columns of the segments CSV that may hold the segment geometry as WKT (first found wins).
WKT_COLUMNS = ("wkt", "geometry_wkt")


# ---------------------------------------------------------------------------------------------
# Reading runs and writing a comparison folder
# ---------------------------------------------------------------------------------------------


def read_run(run_dir: str | Path) -> RunTuple:
    """Read a finished run folder: ``(name, segments, layers)`` for :func:`compare_runs`.

    Parameters
    ----------
    run_dir : str or path-like
        Folder holding :data:`LAYERS_FILE` (CF NetCDF of the run layers), :data:`SEGMENTS_FILE`
        (segments table, ``#`` comment lines allowed, geometry as WKT in one of
        :data:`WKT_COLUMNS`) and optionally :data:`MANIFEST_FILE` (its ``name``,
        ``scenario.name``, ``parameters.name`` or ``parameters.scenario.name`` names the run;
        else the folder name).

    Returns
    -------
    (str, pandas.DataFrame, dict of str -> xarray.DataArray)
        Segments indexed by ``segment_id`` with shapely geometries in ``geometry``; layers loaded
        into memory with their CRS attached.

    Raises
    ------
    DataFileError
        Folder or file missing or unreadable.
    """
    d = Path(run_dir)
    if not d.is_dir():
        raise DataFileError(f"{d}: run folder not found")
    name = d.name
    mpath = d / MANIFEST_FILE
    if mpath.is_file():
        try:
            man = json.loads(mpath.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise DataFileError(f"{mpath}: unreadable manifest ({exc})") from None
        if isinstance(man, dict):
            params = man.get("parameters") if isinstance(man.get("parameters"), dict) else {}
            for holder in (man, man.get("scenario"), params, params.get("scenario")):
                cand = holder.get("name") if isinstance(holder, dict) else None
                if isinstance(cand, str) and cand.strip():
                    name = cand
                    break
    spath = d / SEGMENTS_FILE
    if not spath.is_file():
        raise DataFileError(f"{spath}: segments table not found (expected {SEGMENTS_FILE} in the run folder)")
    try:
        seg = pd.read_csv(spath, comment="#", dtype={"segment_id": str})
    except Exception as exc:  # noqa: BLE001
        raise DataFileError(f"{spath}: unreadable segments table ({exc})") from None
    if "segment_id" not in seg.columns:
        raise DataFileError(f"{spath}: no 'segment_id' column")
    wkt_col = next((c for c in WKT_COLUMNS if c in seg.columns), None)
    if wkt_col is not None:
        import shapely

        try:
            geoms = shapely.from_wkt(seg[wkt_col].where(seg[wkt_col].notna(), None).to_numpy(dtype=object))
        except Exception as exc:  # noqa: BLE001
            raise DataFileError(f"{spath}: column '{wkt_col}' does not hold valid WKT ({exc})") from None
        seg = seg.drop(columns=[wkt_col])
        seg["geometry"] = list(geoms)
    seg = seg.set_index("segment_id")
    lpath = d / LAYERS_FILE
    if not lpath.is_file():
        raise DataFileError(f"{lpath}: layers file not found (expected {LAYERS_FILE} in the run folder)")
    try:
        with xr.open_dataset(lpath, decode_coords="all") as ds:
            ds = ds.load()
    except Exception as exc:  # noqa: BLE001
        raise DataFileError(f"{lpath}: unreadable NetCDF ({exc})") from None
    layers: dict[str, xr.DataArray] = {}
    for v in ds.data_vars:
        da = ds[v]
        if da.ndim != 2:
            continue
        if "spatial_ref" in ds.coords and "spatial_ref" not in da.coords:
            da = da.assign_coords(spatial_ref=ds.coords["spatial_ref"])
        da.attrs["grid_mapping"] = "spatial_ref"
        layers[str(v)] = da
    if not layers:
        raise DataFileError(f"{lpath}: no 2-D layers in the file")
    return name, seg, layers
