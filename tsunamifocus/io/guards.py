"""Guards every command runs on its output folder before any work.

:func:`check_output_folder` is the one place that decides whether a command may write to an
output folder. It is called by ``run``, ``demo``, ``compare`` and ``check`` (through their
product functions) *before* anything is computed, so a refusal costs no computing time:

* a folder that already holds files is refused unless ``overwrite`` is given;
* ``overwrite`` replaces only an earlier output **of the same kind** (a run folder with its
  ``manifest.json``, a comparison folder with its ``comparison.json``, a wave-check folder with
  its ``manifest.json`` and ``agreement.json``), never a folder of the user's own files;
* an output folder that holds, or lies inside, an input of the command is refused, with or
  without ``overwrite`` (the inputs would be destroyed or the output mixed into them);
* an output path that is a symbolic link is refused (replacing it would replace the link, not
  the folder it points to, and leave a hidden link behind);
* the output folder must be creatable: the nearest existing parent must be a writable folder
  (checked by creating and removing a probe folder there).
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path

from ..errors import DataFileError, InputError, OutputExistsError

__all__ = ["OUTPUT_KINDS", "output_kind", "check_output_folder"]

#: Output kinds and the file that marks a folder of that kind.
OUTPUT_KINDS = {"run": "manifest.json", "comparison": "comparison.json", "wave_check": "agreement.json"}

_MANIFEST = "manifest.json"
_MANIFEST_FORMAT = "tsunamifocus-manifest"


def _manifest(folder: Path) -> dict | None:
    p = folder / _MANIFEST
    if not p.is_file():
        return None
    try:
        m = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return m if isinstance(m, dict) and m.get("format") == _MANIFEST_FORMAT else None


def output_kind(folder: str | os.PathLike) -> str | None:
    """The kind of tsunamifocus output a folder holds: ``"run"``, ``"comparison"``, ``"wave_check"`` or None.

    A run folder has a tsunamifocus ``manifest.json`` recording scenario parameters (a run of
    several sources: every sub-folder but ``comparison`` is such a run folder); a wave-check
    folder has a manifest and ``agreement.json``; a comparison folder has ``comparison.json``.
    """
    d = Path(folder)
    if not d.is_dir():
        return None
    m = _manifest(d)
    if m is not None:
        if (d / OUTPUT_KINDS["wave_check"]).is_file():
            return "wave_check"
        return "run" if m.get("parameters") else None
    if (d / OUTPUT_KINDS["comparison"]).is_file():
        return "comparison"
    subs = [p for p in d.iterdir() if not p.name.startswith(".")]
    runs = [p for p in subs if p.is_dir() and p.name != "comparison"]
    if runs and all(output_kind(p) == "run" for p in runs) and all(p.is_dir() for p in subs):
        return "run"
    return None


def _inside(child: Path, parent: Path) -> bool:
    return child == parent or parent in child.parents


def _real(p: str | os.PathLike) -> Path:
    return Path(os.path.realpath(os.path.abspath(os.fspath(p))))


def check_output_folder(out: str | os.PathLike, *, overwrite: bool, kind: str,
                        inputs: Mapping[str, str | os.PathLike] | Iterable[tuple[str, str | os.PathLike]] = (),
                        option: str = "--out") -> Path:
    """Refuse, before any work, an output folder the command must not write to.

    Parameters
    ----------
    out : path
        The output folder the command will create or replace.
    overwrite : bool
        The user allowed replacing an earlier output.
    kind : {"run", "comparison", "wave_check"}
        The kind of output the command writes (see :data:`OUTPUT_KINDS`).
    inputs : mapping or pairs of (role, path)
        The command's input files and folders; the output may neither hold nor lie inside one.
    option : str
        How the user gave ``out`` (named in the messages).

    Returns
    -------
    pathlib.Path
        ``out`` as an absolute path.

    Raises
    ------
    OutputExistsError
        ``out`` is a symbolic link, a file, or a non-empty folder that is not an earlier output of
        this kind (or any non-empty folder without ``overwrite``).
    InputError
        ``out`` holds or lies inside an input of the command.
    DataFileError
        ``out`` cannot be created (its nearest existing parent is not a writable folder).
    """
    if kind not in OUTPUT_KINDS:
        raise InputError(f"kind={kind!r}: expected one of {', '.join(OUTPUT_KINDS)}")
    p = Path(out)
    a = Path(os.path.abspath(os.fspath(p)))
    if p.is_symlink():
        raise OutputExistsError(f"{p}: {option} is a symbolic link (to {os.readlink(p)}); give the real folder "
                                "instead of the link")
    if p.exists() and not p.is_dir():
        raise OutputExistsError(f"{p}: {option} exists and is not a folder; choose another folder")
    real_out = _real(a)
    pairs = inputs.items() if isinstance(inputs, Mapping) else inputs
    for role, q in pairs:
        if q is None:
            continue
        rq = _real(q)
        if _inside(rq, real_out):
            raise InputError(f"{p}: {option} holds the input {role} {q}; writing there would destroy it; "
                             "expected an output folder apart from the inputs")
        if _inside(real_out, rq):
            raise InputError(f"{p}: {option} lies inside the input {role} {q}; expected an output folder "
                             "apart from the inputs")
    if p.is_dir() and any(p.iterdir()):
        if not overwrite:
            raise OutputExistsError(f"{p}: folder is not empty; pass --overwrite or choose another {option}")
        found = output_kind(p)
        if found != kind:
            what = f"an earlier {found.replace('_', '-')} output" if found else "files that are not tsunamifocus output"
            raise OutputExistsError(
                f"{p}: --overwrite replaces only an earlier {kind.replace('_', '-')} output folder (with its "
                f"{OUTPUT_KINDS[kind]}); this folder holds {what}; choose another {option}")
    _check_creatable(a, p, option)
    return a


def _check_creatable(a: Path, p: Path, option: str) -> None:
    """The nearest existing ancestor of ``a`` must be a folder we can create a folder in."""
    anc = a if a.exists() else a.parent
    while not anc.exists() and anc != anc.parent:
        anc = anc.parent
    if not anc.is_dir():
        raise DataFileError(f"{p}: {option} cannot be created: {anc} is not a folder")
    probe_parent = anc.parent if anc == a else anc
    try:
        probe = tempfile.mkdtemp(prefix=".tsunamifocus-probe-", dir=probe_parent)
    except OSError as exc:
        raise DataFileError(f"{p}: {option} cannot be created: {probe_parent} is not writable "
                            f"({exc.strerror or exc})") from None
    with contextlib.suppress(OSError):
        os.rmdir(probe)
