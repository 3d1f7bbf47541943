"""Reading a finished run folder (layers, segments, manifest)."""

from __future__ import annotations

import json
from collections.abc import Mapping
from pathlib import Path

import pandas as pd
import xarray as xr

from ..errors import DataFileError
from .manifest import read_manifest, verify_outputs

#: One run as compared: (name, segments table, layers by name).
RunTuple = tuple[str, pd.DataFrame, Mapping[str, xr.DataArray]]

__all__ = ['read_run', 'verify_run', 'LAYERS_FILE', 'SEGMENTS_FILE', 'MANIFEST_FILE', 'WKT_COLUMNS']

#: File names inside a finished run folder (set by the pipeline; change them here only).
LAYERS_FILE = "layers.nc"
SEGMENTS_FILE = "segments.csv"
MANIFEST_FILE = "manifest.json"
#: Columns of the segments CSV that may hold the segment geometry as WKT (first found wins).
WKT_COLUMNS = ("wkt", "geometry_wkt")


# ---------------------------------------------------------------------------------------------
# Reading runs and writing a comparison folder
# ---------------------------------------------------------------------------------------------


def verify_run(run_dir: str | Path) -> dict:
    """Check a finished run folder against its manifest before anything of it is used.

    Every file the manifest lists must be present with the recorded sha256 (FIPS 180-4); files
    added later (notes, a ``wave_check`` sub-folder) are allowed. Every command that reads a run
    (``compare``, ``check``) goes through here.

    Returns
    -------
    dict
        The manifest (:func:`~tsunamifocus.io.manifest.read_manifest`).

    Raises
    ------
    DataFileError
        No folder, no tsunamifocus manifest, or a listed file missing or changed since the run.
    """
    d = Path(run_dir)
    if not d.is_dir():
        raise DataFileError(f"{d}: run folder not found")
    mpath = d / MANIFEST_FILE
    if not mpath.is_file():
        raise DataFileError(f"{mpath}: not found; expected a finished run folder with its manifest "
                            "(a run is checked against it before use)")
    m = read_manifest(mpath)
    problems = [p for p in verify_outputs(m, d) if not p.startswith("not in manifest")]
    if problems:
        more = f" (+{len(problems) - 3} more)" if len(problems) > 3 else ""
        raise DataFileError(f"{d}: run folder does not match its manifest: {'; '.join(problems[:3])}{more} "
                            "(sha256 differs from manifest.json); its results were edited or damaged: "
                            "expected the files as the run wrote them, re-run it")
    return m


def read_run(run_dir: str | Path, *, verify: bool = True) -> RunTuple:
    """Read a finished run folder: ``(name, segments, layers)`` for :func:`compare_runs`.

    Parameters
    ----------
    run_dir : str or path-like
        Folder holding :data:`LAYERS_FILE` (CF NetCDF of the run layers), :data:`SEGMENTS_FILE`
        (segments table, ``#`` comment lines allowed, geometry as WKT in one of
        :data:`WKT_COLUMNS`) and optionally :data:`MANIFEST_FILE` (its ``name``,
        ``scenario.name``, ``parameters.name`` or ``parameters.scenario.name`` names the run;
        else the folder name).
    verify : bool
        Check the folder against its manifest first (:func:`verify_run`); False only for folders
        assembled by hand (tests, other tools).

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
    if verify:
        verify_run(d)
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
