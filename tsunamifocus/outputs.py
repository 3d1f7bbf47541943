"""Atomic output folders and the run manifest.

:class:`OutputFolder` makes a run's output folder appear all at once or not at all::

    with OutputFolder("results/bay_a", overwrite=False) as out:
        write_cog(tt, out.path("travel_time_min.tif"), ...)
        ...
        write_manifest(out, scenario=sc, timings=timer.as_dict())
    # only now does results/bay_a exist (or get replaced)

Everything is written into a temporary sibling folder ``.<name>.tsunamifocus-tmp-<pid>-<random>``
which is renamed onto the final name when the ``with`` block ends without an exception. On an
exception, ``KeyboardInterrupt`` (SIGINT) or SIGTERM, the temporary folder is deleted and the
final folder is left exactly as it was. If the process is killed outright (SIGKILL, power
loss) the final folder is still untouched; the orphaned temporary folder is removed by the next
:class:`OutputFolder` on the same target (its writer pid is dead).

The manifest (``manifest.json``) records the tool version, inputs with sha256, every parameter
after defaults, seeds, timings, software versions and every output file with its sha256, so a
run can be re-made from it and checked (:func:`verify_outputs`).
"""

from __future__ import annotations

import contextlib
import fnmatch
import hashlib
import json
import math
import os
import platform
import re
import secrets
import shutil
import signal
import sys
import threading
import time
from collections.abc import Iterator, Mapping
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path
from typing import Any

from .errors import DataFileError, InputError, OutputExistsError

__all__ = [
    "OutputFolder",
    "StageTimer",
    "MANIFEST_NAME",
    "sha256_file",
    "build_manifest",
    "write_manifest",
    "read_manifest",
    "verify_outputs",
    "verify_inputs",
    "scenario_from_manifest",
    "software_versions",
    "show_versions",
    "deferred_interrupts",
]

MANIFEST_NAME = "manifest.json"
MANIFEST_FORMAT = "tsunamifocus-manifest"
MANIFEST_VERSION = 1

_TMP_TAG = "tsunamifocus-tmp"
_OLD_TAG = "tsunamifocus-old"


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, owned by someone else
        return True
    return True


class OutputFolder:
    """Context manager writing a run's outputs into a folder atomically.

    Parameters
    ----------
    final_dir : str or path-like
        The output folder to create (or replace).
    overwrite : bool
        Replace an existing non-empty folder. Without it such a folder is refused with
        :class:`OutputExistsError` before anything is written. An existing empty folder is
        always accepted.
    handle_sigterm : bool
        While the block runs in the main thread, turn SIGTERM into ``SystemExit(143)`` so the
        temporary folder is cleaned up (only if no other SIGTERM handler is installed).

    Attributes
    ----------
    final_dir : pathlib.Path
        Absolute final folder.
    tmp_dir : pathlib.Path
        Temporary folder being written (valid inside the ``with`` block).
    committed : bool
        True once the outputs have been renamed into place.

    Notes
    -----
    POSIX ``rename(2)`` of a directory within one file system is atomic, so a new folder
    appears complete. Replacing an existing folder takes two renames (old aside, new in) and
    then deletes the old one; should the process die between the two renames, the next
    :class:`OutputFolder` on the same target renames the old folder back.
    """

    def __init__(self, final_dir: str | os.PathLike, overwrite: bool = False, *,
                 handle_sigterm: bool = True) -> None:
        self.final_dir = Path(os.path.abspath(os.fspath(final_dir)))
        self.overwrite = bool(overwrite)
        self.handle_sigterm = handle_sigterm
        self.tmp_dir: Path | None = None
        self.committed = False
        self._old_handler: Any = None
        self._installed = False

    # -- helpers ---------------------------------------------------------------------------

    def _sibling(self, tag: str) -> Path:
        return self.final_dir.parent / f".{self.final_dir.name}.{tag}-{os.getpid()}-{secrets.token_hex(4)}"

    def _stale(self, tag: str) -> list[Path]:
        pat = re.compile(rf"^\.{re.escape(self.final_dir.name)}\.{tag}-(\d+)-[0-9a-f]+$")
        out = []
        with contextlib.suppress(FileNotFoundError):
            for p in self.final_dir.parent.iterdir():
                m = pat.match(p.name)
                if m and int(m.group(1)) != os.getpid() and not _pid_alive(int(m.group(1))):
                    out.append(p)
        return sorted(out)

    def _recover(self) -> None:
        """Clean up after a writer that died: restore an old folder left aside, drop temp folders."""
        old = self._stale(_OLD_TAG)
        if old and not self.final_dir.exists():
            newest = max(old, key=lambda p: p.stat().st_mtime)
            os.rename(newest, self.final_dir)
            old.remove(newest)
        for p in old + self._stale(_TMP_TAG):
            shutil.rmtree(p, ignore_errors=True)

    def path(self, name: str | os.PathLike) -> Path:
        """Return the path to write output ``name`` to (inside the temporary folder).

        Sub-folders in ``name`` (``"figures/rays.png"``) are created. Absolute names and names
        leaving the folder (``..``) are refused.
        """
        if self.tmp_dir is None:
            raise InputError("OutputFolder.path() is only valid inside the 'with' block")
        rel = Path(name)
        if rel.is_absolute() or ".." in rel.parts or not rel.parts:
            raise InputError(f"output name {str(name)!r}: expected a relative file name inside the "
                             "output folder")
        p = self.tmp_dir / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def files(self) -> list[str]:
        """Relative POSIX paths of the files written so far, sorted."""
        base = self.tmp_dir if self.tmp_dir is not None and not self.committed else self.final_dir
        return sorted(p.relative_to(base).as_posix() for p in base.rglob("*") if p.is_file())

    @property
    def root(self) -> Path:
        """The folder currently holding the outputs (temporary inside the block, final after)."""
        return self.tmp_dir if self.tmp_dir is not None and not self.committed else self.final_dir

    # -- context protocol ------------------------------------------------------------------

    def __enter__(self) -> OutputFolder:
        final = self.final_dir
        parent = final.parent
        try:
            parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise DataFileError(
                f"{parent}: cannot create the output's parent folder ({exc.strerror})"
            ) from None
        self._recover()
        if final.exists() or final.is_symlink():
            if not final.is_dir():
                raise OutputExistsError(f"{final}: exists and is not a folder; choose another output folder")
            if any(final.iterdir()) and not self.overwrite:
                raise OutputExistsError(
                    f"{final}: output folder already holds results; use overwrite (--overwrite) to replace "
                    "them, or choose another folder"
                )
        if not os.access(parent, os.W_OK):
            raise DataFileError(f"{parent}: output location is not writable")
        self.tmp_dir = self._sibling(_TMP_TAG)
        self.tmp_dir.mkdir()
        self._install_handler()
        return self

    def __exit__(self, exc_type, exc, tb) -> bool:
        try:
            if exc_type is None:
                self.commit()
            else:
                self.abort()
        finally:
            self._restore_handler()
        return False

    def _install_handler(self) -> None:
        if not self.handle_sigterm or threading.current_thread() is not threading.main_thread():
            return
        try:
            current = signal.getsignal(signal.SIGTERM)
        except (ValueError, AttributeError):  # pragma: no cover - platform without SIGTERM
            return
        if current not in (signal.SIG_DFL, None):
            return

        def _on_sigterm(signum, frame):  # noqa: ARG001
            raise SystemExit(128 + signum)

        self._old_handler = current
        signal.signal(signal.SIGTERM, _on_sigterm)
        self._installed = True

    def _restore_handler(self) -> None:
        if self._installed:
            signal.signal(signal.SIGTERM, self._old_handler)
            self._installed = False

    def abort(self) -> None:
        """Delete the temporary folder; the final folder is not touched."""
        if self.tmp_dir is not None and not self.committed:
            shutil.rmtree(self.tmp_dir, ignore_errors=True)
            self.tmp_dir = None

    def commit(self) -> None:
        """Rename the temporary folder onto the final folder (replacing it if allowed)."""
        if self.committed:
            return
        if self.tmp_dir is None:
            raise InputError("OutputFolder.commit() outside the 'with' block")
        final, tmp = self.final_dir, self.tmp_dir
        # hold SIGINT/SIGTERM back during the renames so an interruption cannot split them
        old_mask = None
        if hasattr(signal, "pthread_sigmask") and threading.current_thread() is threading.main_thread():
            old_mask = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})
        try:
            # the mask covers the main thread only; a signal caught by another thread still runs its
            # Python handler here, so the handlers just record it until both renames are done
            with deferred_interrupts():
                self._swap(final, tmp)
        finally:
            if old_mask is not None:
                signal.pthread_sigmask(signal.SIG_SETMASK, old_mask)

    def _swap(self, final: Path, tmp: Path) -> None:
        old: Path | None = None
        if final.exists():
            if any(final.iterdir()) and not self.overwrite:  # appeared while we were writing
                self.abort()
                raise OutputExistsError(f"{final}: output folder was filled by someone else during the run; "
                                        "nothing was overwritten")
            old = self._sibling(_OLD_TAG)
            os.rename(final, old)
        try:
            os.rename(tmp, final)
        except OSError as exc:
            if old is not None:
                os.rename(old, final)
            self.abort()
            raise DataFileError(f"{final}: could not move the outputs into place ({exc.strerror})") from None
        self.committed = True
        self.tmp_dir = None
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)


@contextlib.contextmanager
def deferred_interrupts(signums: tuple[int, ...] = (signal.SIGINT, signal.SIGTERM)) -> Iterator[None]:
    """Hold SIGINT/SIGTERM back while a library call that must not be interrupted runs.

    xarray's NetCDF writer holds a non-reentrant HDF5 lock; a ``KeyboardInterrupt`` (or the
    ``SystemExit`` of :class:`OutputFolder`'s SIGTERM handler) raised inside it makes the clean-up
    wait for that lock forever, so the interrupted run hangs instead of exiting. Inside this block
    the signals are only recorded; on leaving it the original handlers are restored and the first
    recorded signal is delivered to them. Outside the main thread it does nothing.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    got: list[int] = []
    old = {s: signal.getsignal(s) for s in signums}

    def _record(signum, frame):  # noqa: ARG001
        got.append(signum)

    for s in signums:
        signal.signal(s, _record)
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if got:
            s, h = got[0], old[got[0]]
            if callable(h):
                h(s, None)
            elif h == signal.SIG_DFL:
                signal.raise_signal(s)


# ---------------------------------------------------------------------------------------------
# Timings
# ---------------------------------------------------------------------------------------------


class StageTimer:
    """Wall-clock timings of named stages [s] for the manifest and run summary.

    Examples
    --------
    >>> t = StageTimer()
    >>> with t("tracing"):
    ...     pass
    >>> sorted(t.as_dict())
    ['tracing', 'total']
    """

    def __init__(self) -> None:
        self._t0 = time.perf_counter()
        self._stages: dict[str, float] = {}

    @contextlib.contextmanager
    def __call__(self, name: str) -> Iterator[None]:
        t = time.perf_counter()
        try:
            yield
        finally:
            self._stages[name] = self._stages.get(name, 0.0) + time.perf_counter() - t

    def as_dict(self) -> dict[str, float]:
        """Stage name -> seconds, plus ``total`` since creation."""
        d = {k: round(v, 6) for k, v in self._stages.items()}
        d["total"] = round(time.perf_counter() - self._t0, 6)
        return d


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
    from . import __version__

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


def _jsonable(obj: Any) -> Any:
    """Convert to strict JSON data: paths -> str, tuples -> lists, non-finite floats -> None."""
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set, frozenset)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, int):
        return int(obj)
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    try:  # numpy scalars
        import numpy as np

        if isinstance(obj, np.generic):
            return _jsonable(obj.item())
        if isinstance(obj, np.ndarray):
            return _jsonable(obj.tolist())
    except ImportError:  # pragma: no cover
        pass
    if hasattr(obj, "to_dict") and hasattr(obj, "columns"):  # a pandas DataFrame: column -> list
        return _jsonable(obj.to_dict(orient="list"))
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
    from .cautions import caution_text

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
    from . import __version__

    m = {
        "format": MANIFEST_FORMAT,
        "format_version": MANIFEST_VERSION,
        "tool": {"name": "tsunamifocus", "version": __version__},
        "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "caution": caution_text(),
        "command": command if command is not None else None,
        "inputs": in_records,
        "parameters": scenario.to_dict() if scenario is not None else None,
        "seeds": dict(seeds or {}),
        "timings_s": dict(timings or {}),
        "software": software_versions(),
        "outputs": out_records,
        "extra": dict(extra or {}),
    }
    return _jsonable(m)


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
    from .scenario import scenario_from_dict

    m = manifest if isinstance(manifest, Mapping) else read_manifest(manifest)
    if not m.get("parameters"):
        raise DataFileError(f"{m.get('_path', 'manifest')}: manifest records no scenario parameters")
    base = Path(m["_path"]).parent if "_path" in m else Path.cwd()
    return scenario_from_dict(m["parameters"], base, origin=f"{m.get('_path', 'manifest')} parameters")
