"""Ranking of coastline segments by lensing factor and indicative amplitude."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from ..cautions import caution_summary
from ..constants import ROTATIONS_PAST_PREDICTABILITY
from ..errors import CoastError, InputError, ResolutionWarning

__all__ = ['rank_segments', 'ranked_mask', 'ranked_values', 'capped_share', 'CAPPED_SHARE_NOTE',
           'ROTATIONS_PAST_PREDICTABILITY']


def ranked_mask(seg: pd.DataFrame, by: str = "lensing") -> np.ndarray:
    """bool per row: the segments a table ranks by ``by`` ("lensing" or "amplitude").

    The lensing ranking takes the ``reliable`` flag (enough ray tubes in the real and in the
    reference run); the amplitude ranking needs the real run only and takes ``amp_reliable``
    where the table has it (tables without it: ``reliable``). Every row when neither column is
    present. Missing flags count as not ranked; flags read back from a CSV file as text ("True",
    "False", "") are understood.
    """
    if by not in ("lensing", "amplitude"):
        raise InputError(f"ranked_mask: by={by!r}; expected 'lensing' or 'amplitude'")
    name = "amp_reliable" if by == "amplitude" and "amp_reliable" in seg.columns else "reliable"
    if name not in seg.columns:
        return np.ones(len(seg), dtype=bool)
    col = seg[name]
    if col.dtype == object or pd.api.types.is_string_dtype(col.dtype):
        return col.astype(str).str.strip().str.lower().isin(("true", "1", "1.0")).to_numpy()
    return col.fillna(False).to_numpy(dtype=bool)


def ranked_values(seg: pd.DataFrame, column: str) -> np.ndarray:
    """``column`` as floats, NaN where the table does not rank the segment by that quantity: lensing
    columns (``lensing_factor``, ``lensing_<band>``) by the lensing ranking's segments, every other
    one (amplitudes, energies) by the amplitude ranking's (:func:`ranked_mask`)."""
    v = pd.to_numeric(seg[column], errors="coerce").to_numpy(dtype=float)
    return np.where(ranked_mask(seg, "lensing" if column.startswith("lensing") else "amplitude"), v, np.nan)


#: From this share of the ranked segments' energy carried by Fresnel-capped ray tubes (rays past
#: their predictability) one fan's segment values depend on its rotation: the run traces
#: :data:`ROTATIONS_PAST_PREDICTABILITY` rotated fans instead of one (``[rays] rotations`` auto)
#: and the summary says so. Project choice from measurements (docs/focusing.md): the demo 0.3 %,
#: four trans-ocean cases 34-65 % (spectrum-weighted; 15-91 % per period band), where two seeds'
#: segment energies differ by 30-40 % (rms of the log ratio) with one fan.
CAPPED_SHARE_NOTE: float = 0.25

# ROTATIONS_PAST_PREDICTABILITY (constants): the fan rotations traced when the rays are past their
# predictability. Measured on four trans-ocean cases (docs/focusing.md): 4 rotations bring the
# amplitude rankings of two ray seeds to Spearman 0.96-0.99 on average (one fan: 0.80-0.98), their
# agreement with the wave within the one-fan draws' range or above it; 8 add little but on the
# weakest case.


def capped_share(seg: pd.DataFrame) -> float | None:
    """Energy-weighted share of the amplitude-ranked segments' energy that came in Fresnel-capped
    tubes (the ``capped_share`` column), or None when the table has no such column or energy."""
    if "capped_share" not in seg or "energy_J" not in seg:
        return None
    e, c = ranked_values(seg, "energy_J"), ranked_values(seg, "capped_share")  # the amplitude ranking's segments
    good = np.isfinite(e) & np.isfinite(c) & (e > 0)
    if not good.any():
        return None
    return float(np.sum(e[good] * c[good]) / np.sum(e[good]))


def _rank_desc(values: np.ndarray, eligible: np.ndarray) -> pd.arrays.IntegerArray:
    r = np.zeros(len(values), dtype=np.int64)
    ok = eligible & np.isfinite(values)
    order = np.argsort(-values[ok], kind="stable")
    pos = np.flatnonzero(ok)[order]
    r[pos] = np.arange(1, pos.size + 1)
    return pd.arrays.IntegerArray(r, ~ok)


def _add_ranks(table: pd.DataFrame, have_lensing: bool) -> pd.DataFrame:
    if have_lensing:
        table["rank_lensing"] = _rank_desc(table["lensing_factor"].to_numpy(float), ranked_mask(table, "lensing"))
    else:
        table["rank_lensing"] = pd.array([pd.NA] * len(table), dtype="Int64")
    table["rank_amplitude"] = _rank_desc(table["amp_1m_m"].to_numpy(float), ranked_mask(table, "amplitude"))
    return table


def _pct(a: np.ndarray, q: float) -> np.ndarray:
    """Column-wise nan-percentile (linear interpolation, as numpy's default); NaN for all-NaN columns.

    Vectorised over columns: the columns are sorted once (NaN last) and each is read at
    ``q / 100 * (n - 1)`` of its own ``n`` finite-or-infinite values.
    """
    a = np.asarray(a, dtype=float)
    out = np.full(a.shape[1], np.nan)
    n = np.sum(~np.isnan(a), axis=0)
    ok = n > 0
    if not ok.any():
        return out
    s = np.sort(a[:, ok], axis=0)
    pos = q / 100.0 * (n[ok] - 1)
    lo = np.floor(pos).astype(np.int64)
    hi = np.minimum(lo + 1, n[ok] - 1)
    t = pos - lo
    cols = np.arange(s.shape[1])
    v0, v1 = s[lo, cols], s[hi, cols]
    with np.errstate(invalid="ignore"):
        out[ok] = np.where((t == 0) | (v0 == v1), v0, v0 + (v1 - v0) * t)
    return out


_BY = {
    "lensing_factor": ("lensing_factor", "rank_lensing", "lensing"),
    "lensing": ("lensing_factor", "rank_lensing", "lensing"),
    "amp_1m_m": ("amp_1m_m", "rank_amplitude", "amplitude"),
    "amplitude": ("amp_1m_m", "rank_amplitude", "amplitude"),
}


def rank_segments(table: pd.DataFrame, top_k: int = 20, by: str = "lensing_factor") -> pd.DataFrame:
    """Top-``k`` hotspot segments, reliable ones first, unreliable ones flagged after them.

    Parameters
    ----------
    table : pandas.DataFrame
        Output of :func:`segment_arrivals`.
    top_k : int
        Number of reliable segments to list.
    by : {"lensing_factor", "amp_1m_m"} (aliases "lensing", "amplitude")
        Ranking quantity (descending).

    Returns
    -------
    pandas.DataFrame
        The ``top_k`` reliable segments in rank order, followed (no rank) by the unreliable
        segments whose value would have placed them among them (:func:`ranked_mask`: for the
        lensing factor ``reliable``, for the amplitude ``amp_reliable``). ``attrs``
        keep the cautions and method notes.

    Raises
    ------
    CoastError
        If no segment received any ray (nothing to rank), or ``by`` is unknown / unavailable.
    """
    if by not in _BY:
        raise InputError(f"rank_segments: by='{by}' unknown; expected one of {sorted(_BY)}")
    col, rcol, kind = _BY[by]
    if col not in table.columns or "reliable" not in table.columns:
        raise InputError("rank_segments: table lacks arrival columns; build it with segment_arrivals")
    if int(top_k) < 1:
        raise InputError(f"top_k={top_k}: expected >= 1")
    vals = table[col].to_numpy(float)
    if not np.isfinite(vals).any():
        raise CoastError(
            f"rank_segments: no segment has a finite {col} (no rays reached the segments"
            + (" or no reference run was given" if col == "lensing_factor" else "")
            + "); nothing to rank"
        )
    rel = ranked_mask(table, kind)
    ranked = table[rel & np.isfinite(vals)].sort_values(rcol).head(int(top_k))
    if len(ranked):
        floor = float(ranked[col].min()) if len(ranked) == int(top_k) else -np.inf
    else:
        floor = -np.inf
        warnings.warn(
            f"rank_segments: no reliable segment (>= {table.attrs.get('min_rays', '?')} rays); "
            "listing unreliable segments only, flagged reliable=False",
            ResolutionWarning,
            stacklevel=2,
        )
    unrel = table[(~rel) & np.isfinite(vals) & (vals >= floor)].sort_values(col, ascending=False)
    if len(ranked) == 0:
        unrel = unrel.head(int(top_k))
    out = pd.concat([ranked, unrel])
    out.attrs = dict(table.attrs)
    out.attrs["ranked_by"] = col
    out.attrs["cautions"] = caution_summary()
    return out
