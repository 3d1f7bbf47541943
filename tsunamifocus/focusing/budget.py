"""The energy bookkeeping of a ray trace (launched = arrived + stopped + in flight)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..errors import HealthCheckError
from ..propagation.rays import REASON_MEANINGS

__all__ = ['energy_budget']


# --------------------------------------------------------------------------------------
# energy bookkeeping
# --------------------------------------------------------------------------------------
def energy_budget(
    result: Any,
    arrivals: pd.DataFrame | None = None,
    *,
    source_energy_J: float | None = None,
    shallow_J: float = 0.0,
    tol: float = 0.01,
    check: bool = False,
) -> dict[str, float]:
    """Where the source energy went: segments, unassigned coast, grid edge, land/NaN, time limit.

    Parameters
    ----------
    result : RayResult or sequence of (RayResult, float)
        The run, or the runs of the period bands with their energy shares (summing to 1): each
        term is then the share-weighted sum over the bands.
    arrivals : pandas.DataFrame, optional
        :func:`segment_arrivals` table of this run: splits the coast energy into the part on
        segments (sum of ``energy_J``) and the rest.
    source_energy_J : float, optional
        Source energy [J] (``RayFan.energy_J``); default the sum of the ray weights plus ``shallow_J``.
    shallow_J : float
        Source energy on cells at or shallower than the stop isobath, not launched
        (``RayFan.energy_shallow_J``) [J].
    tol : float
        Allowed relative imbalance.
    check : bool
        Raise :class:`HealthCheckError` when the imbalance exceeds ``tol``.

    Returns
    -------
    dict
        Energies [J] ``source_J, shallow_J, segments_J, coast_unassigned_J, left_grid_J,
        land_or_nodata_J, time_limit_J, polar_limit_J, other_J, total_J``, and
        ``relative_error``, ``ok``.
    """
    runs = [(result, 1.0)] if hasattr(result, "end") else [(r, float(wb)) for r, wb in result]
    by = dict.fromkeys(REASON_MEANINGS.values(), 0.0)
    other = launched = 0.0
    for run, wb in runs:
        w = np.asarray(run.end["weight"].values, dtype=float)
        reason = np.asarray(run.end["reason"].values)
        for code, name in REASON_MEANINGS.items():
            by[name] += wb * float(w[reason == code].sum())
        other += wb * float(w[~np.isin(reason, list(REASON_MEANINGS))].sum())
        launched += wb * float(w.sum())
    src = launched + shallow_J if source_energy_J is None else float(source_energy_J)
    seg = float(arrivals["energy_J"].sum()) if arrivals is not None else by["coast"]
    unassigned = by["coast"] - seg
    if arrivals is not None and "energy_coast_unassigned_J" in arrivals.attrs:
        unassigned = float(arrivals.attrs["energy_coast_unassigned_J"])
    out = {
        "source_J": src,
        "shallow_J": float(shallow_J),
        "segments_J": seg,
        "coast_unassigned_J": unassigned,
        "left_grid_J": by["left_grid"],
        "land_or_nodata_J": by["land_or_nodata"],
        "time_limit_J": by["time_limit"],
        "polar_limit_J": by["polar_limit"],
        "other_J": other,
    }
    total = float(shallow_J) + seg + out["coast_unassigned_J"] + by["left_grid"] + by["land_or_nodata"] + by["time_limit"] \
        + by["polar_limit"] + other
    out["total_J"] = total
    out["relative_error"] = abs(total - src) / src if src > 0 else float("nan")
    out["ok"] = bool(out["relative_error"] <= tol)
    if check and not out["ok"]:
        raise HealthCheckError(
            f"energy bookkeeping off by {100 * out['relative_error']:.2f} % (> {100 * tol:g} %): "
            f"source {src:.4g} J, accounted {total:.4g} J"
        )
    return out
