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
    tol: float = 0.01,
    check: bool = False,
) -> dict[str, float]:
    """Where the source energy went: segments, unassigned coast, grid edge, land/NaN, time limit.

    Parameters
    ----------
    result : RayResult
        The run.
    arrivals : pandas.DataFrame, optional
        :func:`segment_arrivals` table of this run: splits the coast energy into the part on
        segments (sum of ``energy_J``) and the rest.
    source_energy_J : float, optional
        Source energy [J] (``RayFan.energy_J``); default the sum of the ray weights.
    tol : float
        Allowed relative imbalance.
    check : bool
        Raise :class:`HealthCheckError` when the imbalance exceeds ``tol``.

    Returns
    -------
    dict
        Energies [J] ``source_J, segments_J, coast_unassigned_J, left_grid_J, land_or_nodata_J,
        time_limit_J, polar_limit_J, other_J, total_J``, and ``relative_error``, ``ok``.
    """
    end = result.end
    w = np.asarray(end["weight"].values, dtype=float)
    reason = np.asarray(end["reason"].values)
    by = {name: float(w[reason == code].sum()) for code, name in REASON_MEANINGS.items()}
    known = np.isin(reason, list(REASON_MEANINGS))
    other = float(w[~known].sum())
    src = float(w.sum()) if source_energy_J is None else float(source_energy_J)
    seg = float(arrivals["energy_J"].sum()) if arrivals is not None else by["coast"]
    unassigned = by["coast"] - seg
    if arrivals is not None and "energy_coast_unassigned_J" in arrivals.attrs:
        unassigned = float(arrivals.attrs["energy_coast_unassigned_J"])
    out = {
        "source_J": src,
        "segments_J": seg,
        "coast_unassigned_J": unassigned,
        "left_grid_J": by["left_grid"],
        "land_or_nodata_J": by["land_or_nodata"],
        "time_limit_J": by["time_limit"],
        "polar_limit_J": by["polar_limit"],
        "other_J": other,
    }
    total = seg + out["coast_unassigned_J"] + by["left_grid"] + by["land_or_nodata"] + by["time_limit"] \
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
