"""The run manifest: software versions, file hashes, inputs; writing, reading and verifying it."""

from __future__ import annotations

import contextlib
import fnmatch
import hashlib
import json
import math
import os
import platform
import secrets
import sys
from collections.abc import Mapping
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np

from ..cautions import caution_text
from ..constants import __version__
from ..errors import DataFileError, InputError, cut
from .runfolder import OutputFolder
from .scenario import parse_scenario, scenario_from_dict

__all__ = ['jsonable', 'MANIFEST_NAME', 'sha256_file', 'build_manifest', 'write_manifest', 'read_manifest', 'verify_outputs', 'verify_inputs', 'scenario_from_manifest', 'software_versions', 'show_versions', 'parameters_sha256', 'parameter_differences', 'scenario_for_rerun']

MANIFEST_NAME = "manifest.json"
MANIFEST_FORMAT = "tsunamifocus-manifest"
MANIFEST_VERSION = 1


# ---------------------------------------------------------------------------------------------
# Manifest
# ---------------------------------------------------------------------------------------------


def sha256_file(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """Return the hex SHA-256 (FIPS 180-4) of a file's bytes, read in chunks."""
    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            while block := fh.read(chunk):
                h.update(block)
    except OSError as exc:
        raise DataFileError(f"{path}: cannot read file to hash it ({exc.strerror or exc})") from None
    return h.hexdigest()


def _file_record(path: Path, **extra: Any) -> dict[str, Any]:
    rec: dict[str, Any] = dict(extra)
    rec["path"] = str(path)
    if path.is_dir():
        h = hashlib.sha256()
        size = 0
        for p in sorted(q for q in path.rglob("*") if q.is_file()):
            h.update(p.relative_to(path).as_posix().encode() + b"\0" + sha256_file(p).encode())
            size += p.stat().st_size
        rec.update(sha256=h.hexdigest(), bytes=size, kind="folder")
    else:
        rec.update(sha256=sha256_file(path), bytes=path.stat().st_size)
    return rec


def _version_of(dist: str) -> str | None:
    try:
        return metadata.version(dist)
    except metadata.PackageNotFoundError:
        return None


def software_versions() -> dict[str, str | None]:
    """Versions of Python, the platform and the libraries a run depends on (None if absent)."""
    v: dict[str, str | None] = {
        "tsunamifocus": __version__,
        "python": sys.version.split()[0],
        "python_implementation": platform.python_implementation(),
        "platform": platform.platform(),
        "machine": platform.machine(),
    }
    for dist in ("numpy", "scipy", "xarray", "pandas", "netCDF4", "rasterio", "pyogrio", "pyproj",
                 "shapely", "numba", "dask", "distributed", "matplotlib", "fpdf2", "tqdm"):
        v[dist] = _version_of(dist)
    with contextlib.suppress(Exception):
        import rasterio

        v["GDAL (rasterio)"] = rasterio.__gdal_version__
    with contextlib.suppress(Exception):
        import pyogrio

        v["GDAL (pyogrio)"] = pyogrio.__gdal_version_string__
    with contextlib.suppress(Exception):
        import pyproj

        v["PROJ"] = pyproj.proj_version_str
    with contextlib.suppress(Exception):
        import shapely

        v["GEOS"] = shapely.geos_version_string
    with contextlib.suppress(Exception):
        import netCDF4

        v["netCDF-C"] = netCDF4.__netcdf4libversion__
        v["HDF5"] = netCDF4.__hdf5libversion__
    with contextlib.suppress(Exception):
        import numba

        v["llvmlite"] = _version_of("llvmlite")
        v["numba_threading_layer"] = numba.config.THREADING_LAYER
    v["cpu_count"] = str(os.cpu_count())
    return v


def show_versions() -> str:
    """Return the software versions as aligned ``name: version`` lines (paste into a bug report)."""
    v = software_versions()
    w = max(len(k) for k in v)
    return "\n".join(f"{k:<{w}} : {val if val is not None else '(not installed)'}" for k, val in v.items())


def jsonable(obj: Any) -> Any:
    """Convert to strict JSON data: paths -> str, tuples -> lists, non-finite floats -> None."""
    if isinstance(obj, Mapping):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set, frozenset)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, int):
        return int(obj)
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, np.generic):  # numpy scalars
        return jsonable(obj.item())
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if hasattr(obj, "to_dict") and hasattr(obj, "columns"):  # a pandas DataFrame: column -> list
        return jsonable(obj.to_dict(orient="list"))
    return str(obj)


def build_manifest(
    *,
    scenario: Any = None,
    inputs: Mapping[str, str | os.PathLike] | None = None,
    seeds: Mapping[str, int] | None = None,
    timings: Mapping[str, float] | None = None,
    output_dir: str | os.PathLike | None = None,
    command: list[str] | str | None = None,
    extra: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Assemble the manifest as a dict (see :func:`write_manifest` for the fields).

    Parameters
    ----------
    scenario : Scenario, optional
        Gives ``parameters`` (``Scenario.to_dict()``), default inputs and seeds.
    inputs : mapping role -> path, optional
        Input files to hash; default: the scenario's data files and the scenario file itself.
    seeds : mapping, optional
        Random seeds; default: the scenario's.
    timings : mapping, optional
        Stage -> seconds.
    output_dir : path, optional
        Folder whose files (except the manifest itself) are listed with sha256.
    command : list of str or str, optional
        Command line of the run.
    extra : mapping, optional
        Anything else (health checks, run summary), stored under ``extra``.
    """
    if inputs is None:
        inputs = {}
        if scenario is not None:
            inputs = dict(scenario.input_files)
            if getattr(scenario, "file", None) is not None:
                inputs = {"scenario_file": scenario.file, **inputs}
    in_records = []
    for role, p in inputs.items():
        p = Path(os.path.abspath(os.fspath(p)))
        if not p.exists():
            raise DataFileError(f"{p}: input file '{role}' not found while writing the manifest")
        in_records.append(_file_record(p, role=role))
    if seeds is None and scenario is not None:
        seeds = scenario.seeds
    out_records = []
    if output_dir is not None:
        base = Path(output_dir)
        for p in sorted(q for q in base.rglob("*") if q.is_file()):
            rel = p.relative_to(base).as_posix()
            if rel == MANIFEST_NAME:
                continue
            rec = _file_record(p)
            rec["path"] = rel
            out_records.append(rec)

    m = {
        "format": MANIFEST_FORMAT,
        "format_version": MANIFEST_VERSION,
        "tool": {"name": "tsunamifocus", "version": __version__},
        "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "caution": caution_text(),
        "command": command if command is not None else None,
        "inputs": in_records,
        "parameters": scenario.to_dict() if scenario is not None else None,
        "parameters_sha256": parameters_sha256(scenario.to_dict()) if scenario is not None else None,
        "seeds": dict(seeds or {}),
        "timings_s": dict(timings or {}),
        "software": software_versions(),
        "outputs": out_records,
        "extra": dict(extra or {}),
    }
    return jsonable(m)


def write_manifest(target: OutputFolder | str | os.PathLike, **kwargs: Any) -> Path:
    """Write ``manifest.json`` and return its path.

    Parameters
    ----------
    target : OutputFolder, folder or ``.json`` path
        An :class:`OutputFolder` (inside its ``with`` block: written into the temporary folder,
        and every other file there is listed with its sha256), a folder (same), or a file path
        (then outputs are listed only if ``output_dir`` is given).
    **kwargs
        Passed to :func:`build_manifest` (``scenario``, ``inputs``, ``seeds``, ``timings``,
        ``command``, ``extra``, ``output_dir``).

    Notes
    -----
    Call it last, after every other output is written, so the output list is complete. The
    manifest fields are: ``format``, ``format_version``, ``tool`` (name, version),
    ``created_utc``, ``caution``, ``command``, ``inputs`` (role, path, sha256, bytes),
    ``parameters`` (every scenario parameter after defaults), ``seeds``, ``timings_s``,
    ``software`` (:func:`software_versions`), ``outputs`` (path relative to the folder, sha256,
    bytes) and ``extra``.
    """
    if isinstance(target, OutputFolder):
        folder = target.root
        path = folder / MANIFEST_NAME
    else:
        t = Path(target)
        if t.is_dir():
            folder, path = t, t / MANIFEST_NAME
        else:
            folder, path = None, t
    if folder is not None:
        kwargs.setdefault("output_dir", folder)
    m = build_manifest(**kwargs)
    text = json.dumps(m, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    tmp = path.with_name(f".{path.name}.part-{secrets.token_hex(4)}")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    return path


def read_manifest(path: str | os.PathLike) -> dict[str, Any]:
    """Read and check a manifest (a ``manifest.json`` file or a run folder holding one).

    Raises
    ------
    DataFileError
        Missing file, invalid JSON, or not a tsunamifocus manifest of a known version.
    """
    p = Path(path)
    if p.is_dir():
        p = p / MANIFEST_NAME
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise DataFileError(f"{p}: manifest not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise DataFileError(f"{p}: cannot read manifest ({exc})") from None
    try:
        m = json.loads(text)
    except RecursionError:
        raise DataFileError(f"{p}: manifest nested too deeply to read; expected a tsunamifocus manifest") from None
    except json.JSONDecodeError as exc:
        raise DataFileError(f"{p}: line {exc.lineno}: manifest is not valid JSON ({exc.msg})") from None
    if not isinstance(m, dict) or m.get("format") != MANIFEST_FORMAT:
        raise DataFileError(f"{p}: not a tsunamifocus manifest (expected \"format\": \"{MANIFEST_FORMAT}\")")
    if m.get("format_version") != MANIFEST_VERSION:
        raise DataFileError(f"{p}: manifest format_version {m.get('format_version')!r} is not supported "
                            f"(expected {MANIFEST_VERSION})")
    for key in ("inputs", "outputs", "seeds", "software"):
        if key not in m:
            raise DataFileError(f"{p}: manifest has no {key!r} field")
    m["_path"] = str(p.resolve())
    return m


def verify_outputs(manifest: Mapping[str, Any] | str | os.PathLike,
                   folder: str | os.PathLike | None = None, *, ignore: tuple[str, ...] = ()) -> list[str]:
    """Compare a folder's files with a manifest's output list.

    Parameters
    ----------
    manifest : mapping or path
        A manifest (from :func:`read_manifest`) or its path / run folder.
    folder : path, optional
        Folder to check; default: the manifest's own folder.
    ignore : tuple of str
        Relative paths (:func:`fnmatch.fnmatch` patterns) not compared, e.g. files that name the
        output folder itself (``"scenario.toml"``) when a re-run went to another folder.

    Returns
    -------
    list of str
        One line per problem (missing, changed or unlisted file); empty when all match.
    """
    m = manifest if isinstance(manifest, Mapping) else read_manifest(manifest)
    if folder is None:
        if "_path" not in m:
            raise InputError("verify_outputs: give the folder to check")
        folder = Path(m["_path"]).parent
    folder = Path(folder)
    problems = []
    listed = set()
    def skipped(rel: str) -> bool:
        return any(fnmatch.fnmatch(rel, pat) for pat in ignore)

    for rec in m["outputs"]:
        listed.add(rec["path"])
        if skipped(rec["path"]):
            continue
        p = folder / rec["path"]
        if not p.is_file():
            problems.append(f"missing: {rec['path']}")
        elif sha256_file(p) != rec["sha256"]:
            problems.append(f"changed: {rec['path']}")
    for p in sorted(q for q in folder.rglob("*") if q.is_file()):
        rel = p.relative_to(folder).as_posix()
        if rel != MANIFEST_NAME and rel not in listed and not skipped(rel):
            problems.append(f"not in manifest: {rel}")
    return problems


def verify_inputs(manifest: Mapping[str, Any] | str | os.PathLike) -> list[str]:
    """Check that a manifest's input files still exist with the same sha256 (one line per problem)."""
    m = manifest if isinstance(manifest, Mapping) else read_manifest(manifest)
    problems = []
    for rec in m["inputs"]:
        p = Path(rec["path"])
        if not p.exists():
            problems.append(f"missing input {rec.get('role', '')}: {p}")
            continue
        if _file_record(p)["sha256"] != rec["sha256"]:
            problems.append(f"changed input {rec.get('role', '')}: {p} (sha256 differs from the manifest)")
    return problems


def scenario_from_manifest(manifest: Mapping[str, Any] | str | os.PathLike):
    """Rebuild the :class:`~tsunamifocus.scenario.Scenario` recorded in a manifest."""
    m = manifest if isinstance(manifest, Mapping) else read_manifest(manifest)
    if not m.get("parameters"):
        raise DataFileError(f"{m.get('_path', 'manifest')}: manifest records no scenario parameters")
    base = Path(m["_path"]).parent if "_path" in m else Path.cwd()
    return scenario_from_dict(m["parameters"], base, origin=f"{m.get('_path', 'manifest')} parameters")


def parameters_sha256(parameters: Mapping[str, Any] | None) -> str:
    """SHA-256 of the parameters as canonical JSON (sorted keys), recorded to detect later edits."""
    text = json.dumps(jsonable(parameters), sort_keys=True, ensure_ascii=False, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _flat(obj: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(obj, Mapping):
        out: dict[str, Any] = {}
        for k, v in obj.items():
            out.update(_flat(v, f"{prefix}{k}."))
        return out
    if isinstance(obj, list) and any(isinstance(v, (Mapping, list)) for v in obj):
        out = {}
        for i, v in enumerate(obj):
            out.update(_flat(v, f"{prefix[:-1]}[{i}]."))
        return out
    return {prefix[:-1]: obj}


def _short(v: Any) -> str:
    return cut(json.dumps(v, ensure_ascii=False) if v is not None else "unset")


def parameter_differences(manifest: Mapping[str, Any] | str | os.PathLike) -> list[str]:
    """Parameters of a manifest that differ from the run it records (one line each; empty if none).

    The run folder's ``scenario.toml`` is the effective scenario of the run, and the manifest lists
    it with its sha256. When that copy is intact its parameters are the recorded ones and every
    differing key is named (``rays.count: recorded 800, manifest 5``). Without it, the manifest's
    ``parameters_sha256`` still tells whether the parameters were edited.
    """
    m = manifest if isinstance(manifest, Mapping) else read_manifest(manifest)
    params = m.get("parameters")
    if not params:
        return []
    folder = Path(m["_path"]).parent if "_path" in m else None
    rec = next((r for r in m.get("outputs", []) if r.get("path") == "scenario.toml"), None)
    toml = folder / "scenario.toml" if folder is not None else None
    if rec is not None and toml is not None and toml.is_file() and sha256_file(toml) == rec.get("sha256"):
        recorded = _flat(jsonable(parse_scenario(toml).to_dict()))
        now = _flat(jsonable(scenario_from_dict(params, folder, origin=f"{m['_path']} parameters").to_dict()))
        return [f"{k}: recorded {_short(recorded.get(k))}, manifest {_short(now.get(k))}"
                for k in sorted(set(recorded) | set(now)) if recorded.get(k) != now.get(k)]
    want = m.get("parameters_sha256")
    if want and parameters_sha256(params) != want:
        return ["parameters: edited after the run (their sha256 differs from parameters_sha256)"]
    return []


def scenario_for_rerun(manifest_path: str | os.PathLike):
    """The scenario of a recorded run, refused when its inputs or parameters changed since.

    Raises
    ------
    InputError
        An input file is missing or changed (sha256), or the manifest's parameters differ from the
        recorded run (each differing parameter named).
    """
    m = read_manifest(manifest_path)
    diffs = parameter_differences(m)
    if diffs:
        more = f" (+{len(diffs) - 6} more)" if len(diffs) > 6 else ""
        raise InputError(f"{manifest_path}: cannot reproduce the run: parameters differ from the recorded run: "
                         f"{'; '.join(diffs[:6])}{more}; to run other parameters, edit a scenario file and run it")
    bad = [b for b in verify_inputs(m) if "scenario_file" not in b]
    if bad:
        raise InputError(f"{manifest_path}: cannot reproduce the run: {'; '.join(bad)}")
    return scenario_from_manifest(m)
