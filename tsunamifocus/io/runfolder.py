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
import errno
import os
import re
import secrets
import shutil
import signal
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from ..errors import DataFileError, InputError, OutputExistsError, TsunamiFocusError, cut

__all__ = ['safe_name', 'refuse_filled_folder', 'RUN_FILES', 'OutputFolder', 'StageTimer', 'deferred_interrupts', 'WRITING_NOTE']

#: File names inside a run folder (one place to change them).
RUN_FILES = {
    "layers": "layers.nc",
    "segments": "segments",  # stem: .gpkg, .geojson, .csv
    "points": "points.csv",
    "isochrones": "isochrones",  # stem: .gpkg, .geojson
    "manifest": "manifest.json",
    "scenario": "scenario.toml",
    "html": "appendix.html",
    "pdf": "appendix.pdf",
    "figures": "figures",
}

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
        if final.is_symlink():  # renaming it aside would replace the link, not its folder
            raise OutputExistsError(f"{final}: output folder is a symbolic link (to {os.readlink(final)}); "
                                    "give the real folder instead of the link")
        if final.exists():
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
                failure = self._write_failure(exc)
                self.abort()
                if failure is not None:
                    raise failure from exc
        finally:
            self._restore_handler()
        return False

    def _write_failure(self, exc: BaseException | None) -> DataFileError | None:
        """A one-line error for a library's write failure (a full disk above all), naming the file.

        Library writers report a full disk in their own words (``NetCDF: HDF error``, ``No space
        left on device``, GDAL write errors) and without the file; this names the file being
        written, the folder, and says whether the disk is full. Errors of tsunamifocus itself and
        interruptions pass unchanged.
        """
        if exc is None or isinstance(exc, TsunamiFocusError) or not isinstance(exc, (OSError, RuntimeError)):
            return None
        if isinstance(exc, RuntimeError) and not _looks_like_io(exc):
            return None
        noted = [n[len(WRITING_NOTE):] for n in getattr(exc, "__notes__", []) if n.startswith(WRITING_NOTE)]
        where = self._final_name(Path(noted[0])) if noted else (self._newest_file() or self.final_dir)
        free = _free_bytes(self.tmp_dir or self.final_dir.parent)
        full = getattr(exc, "errno", None) in (errno.ENOSPC, errno.EDQUOT) or (free is not None and free < _FULL_BELOW)
        what = " ".join(str(getattr(exc, "strerror", None) or exc).split())
        if full:
            return DataFileError(
                f"{where}: the disk is full ({(free or 0) / 1e6:.1f} MB free on {self.final_dir.parent}) while "
                f"writing the outputs ({cut(what)}); nothing was written to {self.final_dir}; free some space or "
                "choose another output folder")
        return DataFileError(f"{where}: writing the outputs failed ({cut(what)}); nothing was written to "
                             f"{self.final_dir}")

    def _final_name(self, p: Path) -> Path:
        """``p`` inside the temporary folder, named as it will be in the final folder."""
        if self.tmp_dir is not None:
            with contextlib.suppress(ValueError):
                return self.final_dir / p.relative_to(self.tmp_dir)
        return p

    def _newest_file(self) -> Path | None:
        """The file most recently written in the temporary folder, named as it would be in the final one."""
        if self.tmp_dir is None:
            return None
        try:
            files = [p for p in self.tmp_dir.rglob("*") if p.is_file()]
            newest = max(files, key=lambda p: p.stat().st_mtime_ns) if files else None
        except OSError:
            return None
        return self.final_dir / newest.relative_to(self.tmp_dir) if newest is not None else None

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


#: Prefix of the note a file writer adds to a library's write error (the file it was writing).
WRITING_NOTE = "tsunamifocus writing: "
#: Free space [bytes] below which a failed write is reported as a full disk.
_FULL_BELOW = 1 << 20


def _free_bytes(folder: Path) -> int | None:
    try:
        return shutil.disk_usage(folder).free
    except OSError:
        return None


def _looks_like_io(exc: BaseException) -> bool:
    """A RuntimeError of a file library (netCDF4/HDF5, GDAL) rather than a computation."""
    t = str(exc).lower()
    return any(w in t for w in ("netcdf", "hdf", "gdal", "write", "disk", "space", "i/o"))


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


def refuse_filled_folder(folder: str | os.PathLike, overwrite: bool) -> None:
    """Refuse, before any work, an output folder that already holds files (unless ``overwrite``).

    Raises
    ------
    OutputExistsError
        ``folder`` is a non-empty folder and ``overwrite`` is false.
    """
    folder = Path(folder)
    if folder.is_dir() and any(folder.iterdir()) and not overwrite:
        raise OutputExistsError(f"{folder}: folder is not empty; pass --overwrite or choose another --out")


def safe_name(name: str, fallback: str = "output") -> str:
    """A file-name-safe form of ``name``: runs of characters other than ASCII letters, digits,
    ``.``, ``_`` and ``-`` become one ``_``; leading/trailing ``.``/``_`` are dropped; at most 100
    characters; ``fallback`` when nothing is left."""
    s = re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or fallback
    return s[:100]
