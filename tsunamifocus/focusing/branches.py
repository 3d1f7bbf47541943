"""Branch diagnostics of the ray field (caustics, multipathing)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from ..grid import GridInfo
from ..ocean.smooth import _sea
from .energy import distance_to_launch_m
from .randommedium import (
    fluctuation_statistics,
    predicted_focusing_distance,
    scintillation_index,
    scintillation_profile,
)

__all__ = ['branch_diagnostics']


def branch_diagnostics(
    result: Any,
    depth: xr.DataArray,
    *,
    reference_smooth_km: float | None = None,
    bin_m: float | None = None,
    coast_distance_m: float | None = None,
    fluctuations: dict | None = None,
    launch_distance_m: xr.DataArray | None = None,
) -> dict[str, Any]:
    """Caustics, scintillation and the expected distance to strong focusing of one ray run.

    Parameters
    ----------
    result : RayResult
        Run over ``depth`` (its ``energy`` map is used unregularised: the scintillation of the
        ray density at grid resolution).
    depth : xarray.DataArray
        Depth [m] the run was traced over.
    reference_smooth_km : float, optional
        Scale separating "small" variations (for :func:`fluctuation_statistics`); without it
        (and without ``fluctuations``) no prediction is made.
    bin_m : float, optional
        Distance bin [m]; default 2 % of the longest ray path, at least one grid cell.
    launch_distance_m : xarray.DataArray, optional
        :func:`distance_to_launch_m` of the run's launch points when already computed.
    coast_distance_m : float, optional
        Distance of the coast from the source [m], compared with the predicted distance.
    fluctuations : dict, optional
        Precomputed :func:`fluctuation_statistics`.

    Returns
    -------
    dict
        ``profile`` (DataFrame over distance: ``fraction_past_first_caustic``, ``n_rays_alive``,
        ``scintillation``), ``mean_first_caustic_m`` / ``median_first_caustic_m`` (over rays with
        a caustic), ``fraction_with_caustic``, ``mean_caustics_per_ray``, ``scintillation_index``
        (whole map), ``peak_scintillation_distance_m``, the fluctuation statistics,
        ``predicted_focusing_distance_m``, ``coast_distance_m``, ``coast_beyond_focusing``
        (bool or None) and ``message``.
    """
    info = GridInfo.from_dataarray(depth)
    end = result.end
    fc = np.asarray(end["first_caustic_m"].values, dtype=float)
    plen = np.asarray(end["path_length_m"].values, dtype=float)
    ncau = np.asarray(end["caustics"].values, dtype=float)
    if bin_m is None:
        bin_m = max(0.02 * float(np.nanmax(plen)) if plen.size else 0.0, max(info.spacing_m()))
    edges = np.arange(0.0, float(np.nanmax(plen)) + bin_m, bin_m) if plen.size else np.array([0.0, bin_m])
    alive = np.array([(plen >= d).sum() for d in edges])
    past = np.array([((plen >= d) & np.isfinite(fc) & (fc <= d)).sum() for d in edges])
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(alive > 0, past / np.maximum(alive, 1), np.nan)
    out: dict[str, Any] = {}
    has = np.isfinite(fc)
    out["fraction_with_caustic"] = float(has.mean()) if has.size else float("nan")
    out["mean_first_caustic_m"] = float(fc[has].mean()) if has.any() else float("nan")
    out["median_first_caustic_m"] = float(np.median(fc[has])) if has.any() else float("nan")
    out["mean_caustics_per_ray"] = float(ncau.mean()) if ncau.size else float("nan")
    prof = _scintillation(out, result, depth, bin_m, launch_distance_m)
    centres = edges
    si_interp = np.interp(centres, prof["distance_m"].to_numpy(float), prof["scintillation"].to_numpy(float),
                          left=np.nan, right=np.nan) if len(prof) else np.full(centres.shape, np.nan)
    out["profile"] = pd.DataFrame(
        {
            "distance_m": centres,
            "n_rays_alive": alive,
            "fraction_past_first_caustic": frac,
            "scintillation": si_interp,
        }
    )
    out["scintillation_profile"] = prof
    stats = fluctuations
    if stats is None and reference_smooth_km is not None:
        stats = fluctuation_statistics(depth, reference_smooth_km)
    _focusing_prediction(out, stats, coast_distance_m)
    return out


def _scintillation(out: dict, result: Any, depth: xr.DataArray, bin_m: float,
                   dist: xr.DataArray | None = None) -> pd.DataFrame:
    """Scintillation of the ray energy over the reached sea (whole map and against distance; in ``out``)."""
    end = result.end
    sea = _sea(depth)
    if dist is None:
        dist = distance_to_launch_m(depth, end["launch_x"].values, end["launch_y"].values)
    reached = sea & np.isfinite(np.asarray(result.first_arrival_s.values, dtype=float)) \
        if result.first_arrival_s is not None else sea
    prof = scintillation_profile(result.energy, dist, bin_m=bin_m, where=reached) \
        if result.energy is not None else pd.DataFrame(columns=["distance_m", "scintillation"])
    out["scintillation_index"] = scintillation_index(result.energy, reached) if result.energy is not None \
        else float("nan")
    if len(prof):
        k = int(np.nanargmax(prof["scintillation"].to_numpy()))
        out["peak_scintillation_distance_m"] = float(prof["distance_m"].iloc[k])
        out["peak_scintillation"] = float(prof["scintillation"].iloc[k])
    else:
        out["peak_scintillation_distance_m"] = float("nan")
        out["peak_scintillation"] = float("nan")
    return prof


def _focusing_prediction(out: dict, stats: dict | None, coast_distance_m: float | None) -> None:
    """The expected distance to strong random focusing and whether the coast lies beyond it (in ``out``)."""
    pred = float("nan")
    if stats is not None:
        out.update({k: v for k, v in stats.items()})
        pred = predicted_focusing_distance(stats["eps_speed"], stats["corr_length_m"])
        out["predicted_mean_first_caustic_m"] = predicted_focusing_distance(
            stats["eps_speed"], stats["corr_length_m"], statistic="mean")
    out["predicted_focusing_distance_m"] = pred
    out["coast_distance_m"] = float(coast_distance_m) if coast_distance_m is not None else float("nan")
    if coast_distance_m is not None and np.isfinite(pred):
        beyond = bool(coast_distance_m > pred)
        out["coast_beyond_focusing"] = beyond
        out["message"] = (
            f"coast at ~{coast_distance_m / 1e3:.0f} km from the source lies "
            f"{'beyond' if beyond else 'within'} the expected distance to strong random focusing "
            f"~{pred / 1e3:.0f} km (eps_speed={stats['eps_speed']:.3f}, l={stats['corr_length_m'] / 1e3:.1f} km): "
            + ("focusing by the small depth variations is expected to matter"
               if beyond else "random focusing by the small depth variations is not yet fully developed")
        )
        if stats["eps_speed"] > 0.1:
            out["message"] += (
                "; caution: eps_speed > 0.1 is outside the weak-fluctuation theory (large features such "
                "as trenches or shelf breaks dominate) - read the maps, not the scaling"
            )
    else:
        out["coast_beyond_focusing"] = None
        out["message"] = "no prediction of the random-focusing distance (no low-pass scale or no coast distance)"
