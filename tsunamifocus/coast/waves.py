"""Per-segment values along the stop isobath: the linear long-wave solver's maximum amplitude and
arrival, and the first-arrival travel time of the eikonal solver."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import xarray as xr

from ..cautions import caution_text
from ..constants import STOP_DEPTH_M
from ..errors import CoastError, InputError
from ..propagation.wave import WaveResult, _check_depth, _wet_mask

__all__ = ['segment_max_amplitude', 'segment_first_arrivals']


# --------------------------------------------------------------------------------------------------
# segments and agreement
# --------------------------------------------------------------------------------------------------


def _coastal_cells(wet: np.ndarray, periodic: bool) -> np.ndarray:
    """Wet cells with at least one dry 4-neighbour (the stop isobath band); grid edges are not coast."""
    dry = ~wet
    nb = np.zeros_like(wet)
    nb[1:, :] |= dry[:-1, :]
    nb[:-1, :] |= dry[1:, :]
    nb[:, 1:] |= dry[:, :-1]
    nb[:, :-1] |= dry[:, 1:]
    if periodic:
        nb[:, 0] |= dry[:, -1]
        nb[:, -1] |= dry[:, 0]
    return wet & nb


#: Maps of a wave result :func:`segment_max_amplitude` can sample, with their units.
_FIELD_UNITS = {"max_amplitude": "m", "arrival_time_s": "s", "max_time_s": "s", "eta_sq_integral": "m2 s"}


def segment_max_amplitude(
    wave_result: WaveResult,
    segments: Any,
    depth: xr.DataArray,
    stop_depth_m: float = STOP_DEPTH_M,
    *,
    search_radius_cells: float = 2.0,
    statistic: str = "max",
    field: str = "max_amplitude",
) -> Any:
    """Maximum wave amplitude per coastline segment, sampled along the stop isobath.

    The stop-isobath band is the set of wet cells (depth ``> stop_depth_m``) with a dry 4-neighbour.
    Each band cell is given to the segment nearest to its centre if that lies within
    ``search_radius_cells`` cell sizes (so neighbouring segments never share a cell); the
    ``wave_result.max_amplitude`` of a segment's cells is reduced by ``statistic``.

    Parameters
    ----------
    wave_result : WaveResult
        Output of :func:`simulate_linear_long_wave` on ``depth``.
    segments : pandas.DataFrame
        Coastline segments table with columns ``segment_id`` and ``geometry`` (shapely geometries in
        the grid CRS).
    depth : xarray.DataArray
        Depth grid [m] the wave was computed on.
    stop_depth_m : float
        Stop isobath [m] (use the value of the run).
    search_radius_cells : float
        Search distance around each segment, in cell sizes (the larger of dx, dy; degrees on lon/lat
        grids).
    statistic : {"max", "mean", "p90", "min"}
        Reduction over the gathered cells (NaN cells ignored).
    field : {"max_amplitude", "arrival_time_s", "max_time_s", "eta_sq_integral"}
        Which map of the result to sample (e.g. ``"arrival_time_s"`` with ``statistic="min"`` gives the
        wave's first arrival per segment [s]).

    Returns
    -------
    pandas.Series
        Amplitude [m] indexed by ``segment_id`` (name ``wave_amp_stop_m``; ``wave_<field>`` for the other
        fields); NaN where no band cell lies near the segment.

    Raises
    ------
    CoastError
        If the table lacks the required columns or holds non-geometries.
    InputError
        If the grids do not match or a parameter is out of range.
    """
    import pandas as pd
    import shapely

    if not hasattr(segments, "columns") or not {"segment_id", "geometry"} <= set(segments.columns):
        raise CoastError("segments table must be a DataFrame with columns 'segment_id' and 'geometry'")
    if statistic not in ("max", "mean", "p90", "min"):
        raise InputError(f"statistic={statistic!r}: expected 'max', 'mean', 'p90' or 'min'")
    if field not in _FIELD_UNITS:
        raise InputError(f"field={field!r}: expected 'max_amplitude', 'arrival_time_s', 'max_time_s' or "
                         "'eta_sq_integral'")
    if not (math.isfinite(search_radius_cells) and search_radius_cells > 0):
        raise InputError(f"search_radius_cells={search_radius_cells!r}: expected a positive number of cells")
    info = _check_depth(depth)
    amp = wave_result.max_amplitude
    if amp.shape != depth.shape:
        raise InputError(f"wave result grid {amp.shape} does not match depth grid {depth.shape}")
    wet = _wet_mask(np.asarray(depth.values, float), stop_depth_m) & np.isfinite(amp.values)
    ids = segments["segment_id"].astype(str).values
    values = getattr(wave_result, field)
    if values is None:
        raise InputError(f"field={field!r}: the wave result has no such map (a result made without it)")
    out = _reduce_per_segment(np.asarray(values.values, float), wet, segments, info,
                              search_radius_cells, statistic)
    name = "wave_amp_stop_m" if field == "max_amplitude" else f"wave_{field}"
    ser = pd.Series(out, index=pd.Index(ids, name="segment_id"), name=name)
    ser.attrs.update(units=_FIELD_UNITS[field], statistic=statistic, field=field,
                     search_radius_cells=search_radius_cells, cautions=caution_text())
    return ser


def segment_first_arrivals(travel_time_s: xr.DataArray, segments: Any, *,
                           search_radius_cells: float = 2.0) -> np.ndarray:
    """Earliest first-arrival time [s] per coastline segment along the stop isobath.

    The band cells are the cells with a travel time (water deeper than the stop isobath, reached)
    next to a cell without one; each goes to its nearest segment within ``search_radius_cells``
    cell sizes, and a segment's time is the earliest of its cells (the same assignment as the
    wave check's :func:`segment_max_amplitude`).

    Parameters
    ----------
    travel_time_s : xarray.DataArray
        First-arrival times [s] (:func:`tsunamifocus.propagation.traveltime.first_arrival_times`).
    segments : pandas.DataFrame
        Segments with a ``geometry`` column (shapely, grid CRS).
    search_radius_cells : float
        Search distance around each segment in cell sizes.

    Returns
    -------
    numpy.ndarray
        Seconds per row of ``segments``; NaN where no band cell lies near.
    """
    if not hasattr(segments, "columns") or "geometry" not in segments.columns:
        raise CoastError("segments table must be a DataFrame with a 'geometry' column")
    if not (math.isfinite(search_radius_cells) and search_radius_cells > 0):
        raise InputError(f"search_radius_cells={search_radius_cells!r}: expected a positive number of cells")
    info = _check_depth(travel_time_s)
    t = np.asarray(travel_time_s.values, float)
    return _reduce_per_segment(t, np.isfinite(t), segments, info, search_radius_cells, "min")


def _reduce_per_segment(values: np.ndarray, wet: np.ndarray, segments: Any, info: Any, search_radius_cells: float,
                        statistic: str) -> np.ndarray:
    """Reduce ``values`` over the stop-isobath band cells nearest to each segment (NaN: none near)."""
    import shapely

    band = _coastal_cells(wet, info.periodic_x)
    jj, ii = np.nonzero(band)
    vals = values[jj, ii]
    px = info.x[ii]
    py = info.y[jj]
    geoms = np.asarray(segments["geometry"].values, dtype=object)
    ok = np.array([g is not None and isinstance(g, shapely.Geometry) for g in geoms])
    if not ok.all():
        raise CoastError(f"segments table: {int((~ok).sum())} rows have no shapely geometry in column 'geometry'")
    radius = search_radius_cells * max(info.dx, info.dy)
    out = np.full(len(geoms), np.nan)
    if len(vals) and len(geoms):
        # each band cell goes to its nearest segment within the radius (ties: lowest row of the table)
        tree = shapely.STRtree(geoms)
        pt_idx, seg_idx = tree.query_nearest(shapely.points(px, py), max_distance=radius, all_matches=True)
        if pt_idx.size:
            order = np.lexsort((seg_idx, pt_idx))
            pt_idx, seg_idx = pt_idx[order], seg_idx[order]
            first = np.r_[True, pt_idx[1:] != pt_idx[:-1]]
            pt_idx, seg_idx = pt_idx[first], seg_idx[first]
        order = np.argsort(seg_idx, kind="stable")
        seg_idx, pt_idx = seg_idx[order], pt_idx[order]
        starts = np.searchsorted(seg_idx, np.arange(len(geoms)))
        ends = np.searchsorted(seg_idx, np.arange(len(geoms)), side="right")
        for s in range(len(geoms)):
            v = vals[pt_idx[starts[s] : ends[s]]]
            v = v[np.isfinite(v)]
            if v.size == 0:
                continue
            if statistic == "max":
                out[s] = v.max()
            elif statistic == "min":
                out[s] = v.min()
            elif statistic == "mean":
                out[s] = v.mean()
            else:
                out[s] = np.percentile(v, 90)
    return out
