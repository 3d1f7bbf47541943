"""Subfault tables: a CSV of rectangular subfaults with variable slip, validated row by row.

A finite-fault slip model is a list of small planar rectangles, each with its own position,
orientation and slip. The table has one header line naming the columns (any order) and one
subfault per line; blank lines and lines starting with ``#`` are skipped. Columns:

========================  ====================================================================
``lon``, ``lat``          the subfault's reference point [degrees]: the middle of its top edge
                          (``depth_at = "top"``) or its centroid (``depth_at = "centroid"``)
``depth_km``              depth of that reference point below the sea floor [km]
``strike_deg``            strike [degrees clockwise from north]; the subfault dips to the right
``dip_deg``               dip [degrees], in (0, 90]
``rake_deg``              rake [degrees] (90 = pure thrust)
``length_km``             along-strike length [km]
``width_km``              down-dip width [km]
``slip_m``                slip [m], >= 0 (subfaults with zero slip are kept in the table and
                          contribute nothing)
``rigidity_pa``           optional: rigidity of this subfault [Pa] (default: the source's)
========================  ====================================================================

Every problem is one line naming the file, the line, the column, the value and what was
expected (``model.csv:14: column 'dip_deg' = '95': expected a number > 0 and <= 90 degrees``).
"""

from __future__ import annotations

import csv
import difflib
import io
import math
import os
import pathlib

import numpy as np
import pandas as pd

from ..errors import DataFileError, InputError
from .textfile import read_utf8_text

__all__ = ["SUBFAULT_COLUMNS", "DEPTH_AT", "read_subfault_table", "subfault_table_from_text"]

#: Column -> (unit, lower bound, lower bound open, upper bound, meaning). Required unless optional.
SUBFAULT_COLUMNS: dict[str, tuple[str, float, bool, float, str]] = {
    "lon": ("degrees", -180.0, False, 360.0, "longitude of the reference point"),
    "lat": ("degrees", -90.0, False, 90.0, "latitude of the reference point"),
    "depth_km": ("km", 0.0, False, 700.0, "depth of the reference point below the sea floor"),
    "strike_deg": ("degrees", -360.0, False, 360.0, "strike, clockwise from north"),
    "dip_deg": ("degrees", 0.0, True, 90.0, "dip"),
    "rake_deg": ("degrees", -360.0, False, 360.0, "rake (90 = pure thrust)"),
    "length_km": ("km", 0.0, True, 2000.0, "along-strike length"),
    "width_km": ("km", 0.0, True, 1000.0, "down-dip width"),
    "slip_m": ("m", 0.0, False, 100.0, "slip"),
    "rigidity_pa": ("Pa", 1.0e9, False, 2.0e11, "rigidity of the subfault"),
}
_OPTIONAL = ("rigidity_pa",)
#: Where the reference point of each row sits on its subfault.
DEPTH_AT = ("top", "centroid")
#: Most rows read (a guard against feeding the wrong, huge file).
MAX_ROWS = 100_000


def _num_txt(v: float) -> str:
    return str(int(v)) if float(v).is_integer() else f"{v:g}"


def _expected(col: str) -> str:
    unit, lo, lo_open, hi, doc = SUBFAULT_COLUMNS[col]
    return f"a number {'>' if lo_open else '>='} {_num_txt(lo)} and <= {_num_txt(hi)} {unit} ({doc})"


def read_subfault_table(path: str | os.PathLike, *, depth_at: str) -> pd.DataFrame:
    """Read and validate a subfault CSV file.

    Parameters
    ----------
    path : str or path-like
        The CSV file (UTF-8, comma separated, one header line).
    depth_at : {"top", "centroid"}
        Whether ``lon``, ``lat`` and ``depth_km`` give the middle of each subfault's top edge or
        its centroid.

    Returns
    -------
    pandas.DataFrame
        One row per subfault with the columns of :data:`SUBFAULT_COLUMNS` (``rigidity_pa`` NaN
        where not given), ``top_depth_km`` [km] and ``line`` (the file line of the row);
        ``attrs`` hold ``path`` and ``depth_at``.

    Raises
    ------
    DataFileError
        Missing or unreadable file, not UTF-8.
    InputError
        Bad header, bad value, a subfault reaching above the sea floor, no slip at all
        (one line: ``file:line: column 'name' = 'value': expected ...``).
    """
    p = pathlib.Path(path)
    text = read_utf8_text(p, "subfault table", DataFileError, "save the table as UTF-8 CSV",
                          "a subfault table (.csv)", where=lambda line: f":{line}")
    return subfault_table_from_text(text, depth_at=depth_at, origin=str(p))


def subfault_table_from_text(text: str, *, depth_at: str, origin: str = "subfault table") -> pd.DataFrame:
    """Validate the text of a subfault table (as :func:`read_subfault_table`, ``origin`` names it)."""
    if depth_at not in DEPTH_AT:
        raise InputError(f"{origin}: depth_at = {depth_at!r}: expected \"top\" (lon, lat, depth_km give the "
                         "middle of the top edge) or \"centroid\"")
    reader = csv.reader(io.StringIO(text))
    header: list[str] | None = None
    header_line = 0
    rows: list[dict[str, float]] = []
    for fields in reader:
        n = reader.line_num
        if not fields or all(not f.strip() for f in fields) or fields[0].lstrip().startswith("#"):
            continue
        if header is None:
            header = [f.strip().lower() for f in fields]
            header_line = n
            _check_header(header, origin, n)
            continue
        if len(fields) != len(header):
            raise InputError(f"{origin}:{n}: {len(fields)} values, but the header (line {header_line}) has "
                             f"{len(header)} columns ({', '.join(header)})")
        if len(rows) >= MAX_ROWS:
            raise InputError(f"{origin}:{n}: more than {MAX_ROWS} subfaults; expected a slip model of at most "
                             f"{MAX_ROWS} rows")
        rows.append(_row(fields, header, origin, n, depth_at))
    if header is None:
        raise InputError(f"{origin}: empty subfault table; expected a header line "
                         f"({', '.join(c for c in SUBFAULT_COLUMNS if c not in _OPTIONAL)}) and one line "
                         "per subfault")
    if not rows:
        raise InputError(f"{origin}: the table has a header (line {header_line}) but no subfault rows")
    df = pd.DataFrame(rows)
    if "rigidity_pa" not in df:
        df["rigidity_pa"] = np.nan
    if not (df["slip_m"] > 0).any():
        raise InputError(f"{origin}: every subfault has slip_m = 0; expected at least one subfault with slip > 0 m")
    cols = [*SUBFAULT_COLUMNS, "top_depth_km", "line"]
    df = df[cols]
    df["line"] = df["line"].astype(int)
    df.attrs.update(path=origin, depth_at=depth_at)
    return df


def _check_header(header: list[str], origin: str, n: int) -> None:
    valid = list(SUBFAULT_COLUMNS)
    seen: set[str] = set()
    for h in header:
        if h in seen:
            raise InputError(f"{origin}:{n}: column {h!r} appears twice in the header")
        seen.add(h)
        if h not in SUBFAULT_COLUMNS:
            m = difflib.get_close_matches(h, valid, n=1, cutoff=0.6)
            hint = f"did you mean {m[0]!r}?" if m else "valid columns: " + ", ".join(valid)
            raise InputError(f"{origin}:{n}: unknown column {h!r} in the header; {hint}")
    missing = [c for c in SUBFAULT_COLUMNS if c not in seen and c not in _OPTIONAL]
    if missing:
        raise InputError(f"{origin}:{n}: header lacks column(s) {', '.join(missing)}; expected "
                         f"{', '.join(c for c in SUBFAULT_COLUMNS if c not in _OPTIONAL)} "
                         "(rigidity_pa optional)")


def _row(fields: list[str], header: list[str], origin: str, n: int, depth_at: str) -> dict[str, float]:
    out: dict[str, float] = {"line": n}
    for col, txt in zip(header, fields):
        t = txt.strip()
        if t == "" and col in _OPTIONAL:
            out[col] = float("nan")
            continue
        try:
            v = float(t)
        except ValueError:
            v = float("nan")
        unit, lo, lo_open, hi, _ = SUBFAULT_COLUMNS[col]
        if not (math.isfinite(v) and (v > lo if lo_open else v >= lo) and v <= hi):
            raise InputError(f"{origin}:{n}: column {col!r} = {t!r}: expected {_expected(col)}")
        out[col] = v
    half_dz = 0.5 * out["width_km"] * math.sin(math.radians(out["dip_deg"]))
    top = out["depth_km"] - half_dz if depth_at == "centroid" else out["depth_km"]
    if top < -1e-9:
        raise InputError(
            f"{origin}:{n}: column 'depth_km' = {fields[header.index('depth_km')].strip()!r}: expected a "
            f"centroid depth >= {half_dz:.3g} km (half the width x sin(dip)); the subfault would reach "
            f"{-top:.3g} km above the sea floor")
    out["top_depth_km"] = max(top, 0.0)
    return out
