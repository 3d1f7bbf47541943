"""A small deterministic ensemble member for exercising the executor (tests and benchmarks)."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from ..constants import GRAVITY
from ..errors import InputError
from ..grid import GridInfo
from ..ocean.perturb import perturb_bathymetry
from .ensemble import MemberResult

__all__ = ['example_member', 'example_segments']


# ---------------------------------------------------------------------------------------------
# A cheap example member (tests, benchmarks, documentation) - not a screening result
# ---------------------------------------------------------------------------------------------


def example_segments(depth: xr.DataArray, n_segments: int = 8) -> list[tuple[str, int, int]]:
    """Split the rows of a depth grid into ``n_segments`` bands for :func:`example_member`.

    Returns
    -------
    list of (segment_id, row_start, row_stop)
    """
    ny = depth.shape[0]
    if not 1 <= n_segments <= ny:
        raise InputError(f"example_segments: n_segments = {n_segments}; expected 1..{ny} (rows of the grid)")
    edges = np.linspace(0, ny, n_segments + 1).round().astype(int)
    return [(f"S{k + 1:04d}", int(edges[k]), int(edges[k + 1])) for k in range(n_segments)]


def example_member(
    params: Mapping[str, Any],
    depth: xr.DataArray,
    segments: Sequence[tuple[str, int, int]] | None = None,
) -> MemberResult:
    """A cheap stand-in member (numpy only) for tests, benchmarks and examples; NOT a screening result.

    It perturbs ``depth`` with :func:`tsunamifocus.perturb.perturb_bathymetry` (``bathy_rms``,
    ``bathy_corr_km``, ``bathy_seed`` of ``params``), computes the travel time ``T`` of a plane
    long wave crossing the grid west to east at ``c = sqrt(g h)`` (cumulative ``dx / c``), takes
    the wavefront-curvature proxy ``K = -d2T/dy2`` and turns it into a lensing-like field
    ``L = exp(clip(K * x * c_mean, -3, 3))``; ``energy = 10**(1.5 * magnitude_delta) *
    cos(launch_jitter)**2 * L`` [arbitrary J m-1]. Per row band (segment) the value at the last
    sea cell of each row is averaged. Deterministic for given params.

    Parameters
    ----------
    params : dict
        A member's parameters (:func:`tsunamifocus.perturb.draw_member_parameters`).
    depth : xarray.DataArray
        Projected depth grid [m] (land <= 0 to the east of the sea in each row).
    segments : list of (segment_id, row_start, row_stop), optional
        Row bands; default :func:`example_segments` with 8 bands.

    Returns
    -------
    MemberResult
        Segments with ``lensing_factor``, ``amp_1m_m``, ``energy_per_m``, ``first_arrival_s``;
        grids ``energy`` and ``lensing_factor`` (DataArrays on the depth grid).
    """
    info = GridInfo.from_dataarray(depth)
    dx, dy = info.spacing_m()
    if params.get("bathy_seed") is not None and params.get("bathy_rms", 0.0) > 0:
        depth = perturb_bathymetry(depth, float(params["bathy_rms"]), float(params["bathy_corr_km"]), int(params["bathy_seed"]))
    h = np.asarray(depth.values, dtype=float)
    sea = np.isfinite(h) & (h > 0)
    c = np.sqrt(GRAVITY * np.where(sea, h, np.nan))
    T = np.nancumsum(np.where(sea, dx / np.where(sea, c, 1.0), 0.0), axis=1)
    T = np.where(sea, T, np.nan)
    K = np.full_like(T, np.nan)
    K[1:-1] = -(T[2:] - 2.0 * T[1:-1] + T[:-2]) / dy**2
    x = (np.arange(h.shape[1]) + 1) * dx
    cm = float(np.nanmean(c))
    with np.errstate(invalid="ignore"):
        L = np.exp(np.clip(K * x[None, :] * cm, -3.0, 3.0))
    jit = math.radians(float(params.get("launch_jitter_deg", 0.0)))
    scale = 10.0 ** (1.5 * float(params.get("magnitude_delta", 0.0))) * math.cos(jit) ** 2
    E = scale * L
    segs = segments if segments is not None else example_segments(depth)
    last = np.where(sea.any(axis=1), h.shape[1] - 1 - np.argmax(sea[:, ::-1], axis=1), -1)
    rows = []
    for sid, r0, r1 in segs:
        js = [j for j in range(r0, r1) if last[j] >= 0 and np.isfinite(L[j, last[j]])]
        lf = float(np.mean([L[j, last[j]] for j in js])) if js else float("nan")
        ta = float(np.min([T[j, last[j]] for j in js])) if js else float("nan")
        rows.append(
            {
                "segment_id": sid,
                "lensing_factor": lf,
                "energy_per_m": scale * lf,
                "amp_1m_m": 0.5 * math.sqrt(scale * lf) if np.isfinite(lf) else float("nan"),
                "first_arrival_s": ta,
            }
        )
    table = pd.DataFrame(rows).set_index("segment_id")
    grids = {
        "energy": depth.copy(data=E).rename("energy"),
        "lensing_factor": depth.copy(data=L).rename("lensing_factor"),
    }
    for g, (ln, u) in zip(grids.values(), (("example energy proxy", "J m-1"), ("example lensing proxy", "1"))):
        g.attrs = {"long_name": ln, "units": u, "grid_mapping": "spatial_ref"}
    return MemberResult(segments=table, grids=grids, info={"example": True})
