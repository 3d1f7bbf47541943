"""A folder of finished set members, addressed by content, so an interrupted set can resume.

Each member is one ``<key>.npz`` file (NumPy's zip format, no pickled objects): its segment
table (``segment_id`` and numeric columns), its grids (float64 arrays on the set's grid) and a
small JSON record. Files are written under a temporary name and renamed into place, so a file
under its final name is always complete. The key is the SHA-256 of everything that decides the
member's result (:func:`tsunamifocus.studies.sourceset.member_key`).
"""

from __future__ import annotations

import json
import os
import re
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..cautions import caution_summary
from ..errors import DataFileError

__all__ = ["MemberStore"]

_KEY = re.compile(r"^[0-9a-f]{64}$")


class MemberStore:
    """Finished members of a source set in ``folder`` (created on first write).

    Parameters
    ----------
    folder : str or path-like
        Where the member files live.
    """

    def __init__(self, folder: str | os.PathLike) -> None:
        self.folder = Path(folder)

    def _path(self, key: str) -> Path:
        if not _KEY.match(key):
            raise DataFileError(f"member key {key!r}: expected 64 hexadecimal characters (SHA-256)")
        return self.folder / f"{key}.npz"

    def has(self, key: str) -> bool:
        """True when a complete member file exists for ``key``."""
        return self._path(key).is_file()

    def save(self, key: str, segments: pd.DataFrame, grids: dict[str, Any], info: dict[str, Any]) -> Path:
        """Write one member (atomically).

        Parameters
        ----------
        key : str
            The member's content address.
        segments : pandas.DataFrame
            Index ``segment_id``; numeric columns are kept.
        grids : dict of str -> array-like
            2-D grids (DataArrays or arrays).
        info : dict
            JSON-safe record (Mw, energy, source name ...).
        """
        p = self._path(key)
        self.folder.mkdir(parents=True, exist_ok=True)
        arrays: dict[str, np.ndarray] = {"segment_id": np.asarray(segments.index.astype(str), dtype="U")}
        for c in segments.columns:
            if pd.api.types.is_numeric_dtype(segments[c]) and not pd.api.types.is_bool_dtype(segments[c]):
                arrays[f"seg__{c}"] = segments[c].to_numpy(dtype=float)
        for n, g in grids.items():
            arrays[f"grid__{n}"] = np.asarray(getattr(g, "values", g), dtype=np.float64)
        arrays["info"] = np.asarray(json.dumps({**info, "cautions": caution_summary()}))
        tmp = p.with_name(f".{p.stem}.part.npz")
        try:
            np.savez_compressed(tmp, **arrays)
            os.replace(tmp, p)
        finally:
            if tmp.exists():
                tmp.unlink()
        return p

    def load(self, key: str) -> tuple[pd.DataFrame, dict[str, np.ndarray], dict[str, Any]]:
        """Read one member: ``(segments, grids, info)``.

        Raises
        ------
        DataFileError
            Missing or unreadable member file.
        """
        p = self._path(key)
        try:
            with np.load(p, allow_pickle=False) as z:
                seg = pd.DataFrame({k[5:]: z[k] for k in z.files if k.startswith("seg__")},
                                   index=pd.Index(z["segment_id"].astype(str), name="segment_id"))
                grids = {k[6:]: z[k] for k in z.files if k.startswith("grid__")}
                info = json.loads(str(z["info"]))
        except FileNotFoundError:
            raise DataFileError(f"{p}: member file not found") from None
        except (OSError, ValueError, KeyError) as exc:
            raise DataFileError(f"{p}: unreadable member file ({type(exc).__name__}: {exc}); delete it to "
                                "recompute the member") from None
        info.pop("cautions", None)
        return seg, grids, info
