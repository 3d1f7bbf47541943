"""Screening one coast against a set of sources: shared preparation, the member run, set statistics.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

* :func:`prepare_set` loads the base scenario's grid once, builds the coastline segments once,
  fixes the settings the scenario leaves open (segment length, ray count) once and builds the
  lensing reference ocean once, so every member runs with the same grid, coast, settings and
  reference: one reference for the whole set (low-pass at ``[focusing] reference_smooth_km``,
  default the deep-water wavelength at the dominant period of the base scenario's own first
  source), so the members' lensing factors are measured against the same ocean.
* :func:`set_member` runs one source like an ensemble member (one ray thread, the three period
  bands of a scenario run, its energy bookkeeping checked) and returns a small
  :class:`~tsunamifocus.studies.ensemble.MemberResult`; members run on Dask through
  :func:`~tsunamifocus.studies.ensemble.run_ensemble` (fixed-order reduction, one retry, failures
  reported with their parameters).
* :func:`set_statistics` gives, per coastline segment, how often it is among the top-k hotspots
  (unweighted and weighted by the members' relative weights), the median / 90th percentile /
  maximum of the lensing factor and the indicative amplitude, and which sources make it a
  hotspot. A weighted frequency is a count over the sources chosen, **not** a probability of
  occurrence: it is not a probabilistic hazard assessment.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from ..coast.segments import STATIC_SEGMENT_COLUMNS
from ..constants import __version__
from ..errors import InputError
from ..grid import GridInfo
from ..io.scenario import _source_to_dict
from ..io.sourceset import SetMember, SourceSet
from ..source.sweep import sweep_sources
from .ensemble import MemberResult, _topk_mask
from ..focusing.analysis import ReferenceOcean, default_reference_smooth_km, reference_ocean
from ..focusing.ranking import ranked_values
from ..source.summary import summarize_source
from ..source.surface import initial_surface
from .run import _segments_for, analyse_source, build_source, health_checks, load_scenario_bathymetry
from .settings import Choice, choose_ray_count, choose_segment_km, with_choices

__all__ = ["PreparedSet", "prepare_set", "set_members", "member_key", "set_member", "set_statistics",
           "SET_GRIDS"]

#: Member grids kept for the envelope (maximum over the set).
SET_GRIDS = ("energy", "lensing_factor")
_MEMBER_COLUMNS = ["lensing_factor", "amp_1m_m", "energy_per_m", "first_arrival_s"]


@dataclass
class PreparedSet:
    """What every member of a set shares: grid, segments, effective scenario, member list."""

    sset: SourceSet
    scenario: Any
    depth: xr.DataArray
    segments: pd.DataFrame
    members: list[SetMember]
    choices: dict = field(default_factory=dict)
    grid_sha256: str = ""
    reference: ReferenceOcean | None = None


def set_members(sset: SourceSet) -> list[SetMember]:
    """Every member of a set in a fixed order: explicit sources first, then each sweep's ruptures."""
    out = list(sset.members)
    for sw in sset.sweeps:
        out += sweep_sources(sw)
    names = [m.source.name for m in out]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"source set {sset.name!r}: source name(s) {dup} appear more than once; names must be unique")
    return out


def prepare_set(sset: SourceSet, *, rays: int | None = None) -> PreparedSet:
    """Load the grid, segment the coast and fix the open settings once for the whole set."""
    sc = sset.scenario
    depth = load_scenario_bathymetry(sc)
    choices: dict[str, Choice] = {}
    choices["segment_km"] = (Choice(sc.coast.segment_km, "scenario") if sc.coast.segment_km is not None
                             else choose_segment_km(depth))
    sc = with_choices(sc, choices)
    segments = _segments_for(depth, sc)
    if rays is not None:
        choices["rays"] = Choice(int(rays), "override")
    elif sc.rays.count is not None:
        choices["rays"] = Choice(int(sc.rays.count), "scenario")
    else:
        choices["rays"] = choose_ray_count(sc, depth, segments[segments["in_region"].to_numpy(bool)])
    sc = with_choices(sc, choices)
    sc, reference = _set_reference(sc, depth)
    sha = hashlib.sha256(np.ascontiguousarray(depth.values, dtype=np.float64).tobytes()).hexdigest()
    return PreparedSet(sset=sset, scenario=sc, depth=depth, segments=segments, members=set_members(sset),
                       choices=choices, grid_sha256=sha, reference=reference)


def _set_reference(sc: Any, depth: xr.DataArray) -> tuple[Any, ReferenceOcean | None]:
    """The set's one lensing reference, its scale written into the scenario (so member keys carry it).

    Scale: ``[focusing] reference_smooth_km``, else the deep-water wavelength at ``[focusing]
    period_s`` or at the dominant period of the base scenario's first source. Without either, each
    member builds its own reference (None).
    """
    km = sc.focusing.reference_smooth_km
    if km is None:
        period = sc.focusing.period_s
        if period is None and sc.sources:
            src = build_source(sc.sources[0])
            period = summarize_source(src, initial_surface(src, depth), depth, None).period_s
        if period is None or not np.isfinite(period):
            return sc, None
        km = default_reference_smooth_km(depth, float(period))
        sc = dataclasses.replace(sc, focusing=dataclasses.replace(sc.focusing, reference_smooth_km=float(km)))
    return sc, reference_ocean(depth, float(km))


def member_key(prep: PreparedSet, member: SetMember) -> str:
    """Content address of a member: SHA-256 of its source, the run settings, the grid and the version.

    A member with the same key computes the same result, so a rerun may reuse it.
    """
    d = prep.scenario.to_dict()
    settings = {k: d[k] for k in ("rays", "focusing", "coast")}
    doc = {"source": _source_to_dict(member.source), "settings": settings, "grid": prep.grid_sha256,
           "top_k": prep.sset.top_k, "version": __version__}
    if member.source.path is not None:
        doc["source_file_sha256"] = hashlib.sha256(member.source.path.read_bytes()).hexdigest()
    return hashlib.sha256(json.dumps(doc, sort_keys=True, default=str).encode()).hexdigest()


def set_member(params: dict, *, depth: xr.DataArray, scenario: Any, segments: pd.DataFrame,
               reference: ReferenceOcean | None = None) -> MemberResult:
    """Run one source of a set and return its per-segment values and grids.

    Parameters
    ----------
    params : dict
        ``source`` (a :class:`~tsunamifocus.io.scenario.SourceConfig`), ``index``, ``name``,
        ``weight``.
    depth, scenario, segments, reference
        Shared by every member (see :func:`prepare_set`).

    Returns
    -------
    MemberResult
        Segment table (lensing factor, indicative amplitude, energy per metre, first arrival;
        NaN on segments reached by too few rays), grids :data:`SET_GRIDS`, and the source's
        Mw, energy and period.
    """
    a = analyse_source(depth, scenario, params["source"], segments=segments, keep_paths=0, threads=1,
                       reference=reference)
    health_checks(a)
    seg = a.focusing.segments
    table = seg[["segment_id", *[c for c in STATIC_SEGMENT_COLUMNS if c in seg],
                 *[c for c in _MEMBER_COLUMNS if c in seg]]].set_index("segment_id")
    # too few rays in this member: no value (the amplitude needs the real run only, the lensing
    # factor the reference run too)
    for col in ("lensing_factor", "amp_1m_m"):
        if col in table:
            table[col] = ranked_values(seg, col)
    grids = {"energy": a.focusing.energy, "lensing_factor": a.focusing.lensing_factor}
    info = {"mw": float(a.summary.mw), "energy_J": float(a.summary.energy_J), "period_s": float(a.period_s),
            "n_rays": int(a.fan.n_rays)}
    return MemberResult(segments=table, grids=grids, info=info)


def set_statistics(tables: dict[int, pd.DataFrame], names: dict[int, str], weights: dict[int, float], *,
                   top_k: int, static: pd.DataFrame | None = None, max_names: int = 6) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per-segment statistics over the members of a set.

    Parameters
    ----------
    tables : dict member index -> DataFrame
        Successful members' segment tables (same index ``segment_id``); folded in index order.
    names, weights : dict member index -> str / float
        Source names and relative weights (> 0).
    top_k : int
        k of the top-k hotspots of each member, counted twice: by lensing factor and by indicative
        amplitude (ties to the earlier segment, NaN never counts).
    static : pandas.DataFrame, optional
        Columns copied in front (name, position, geometry), same index.
    max_names : int
        Source names listed per segment in ``hotspot_sources`` / ``amp_hotspot_sources`` (the rest
        counted).

    Returns
    -------
    (pandas.DataFrame, pandas.DataFrame)
        Per segment: ``n_valid``, ``topk_frequency`` (share of members with the segment in their
        top k by lensing factor), ``topk_frequency_weighted`` (the same with the members' weights),
        ``amp_topk_frequency`` / ``amp_topk_frequency_weighted`` (the same for the top k by
        indicative amplitude at 1 m depth),
        ``lensing_median`` / ``lensing_p90`` / ``lensing_max``, ``amp_median_m`` / ``amp_p90_m``
        / ``amp_max_m`` (``numpy.nanpercentile``, linear), ``hotspot_sources`` /
        ``amp_hotspot_sources``, ``rank_frequency`` (1 = most often a lensing hotspot, weighted;
        ties by median lensing) and ``amp_rank_frequency`` (1 = most often an amplitude hotspot,
        weighted; ties by median amplitude); and the long table ``(member, source, weight,
        segment_id, ranking)`` of every member-segment hotspot pair, ``ranking`` being
        ``"lensing"`` or ``"amplitude"``.
    """
    if not tables:
        raise InputError("set_statistics: no successful member")
    keys = sorted(tables)
    ref = tables[keys[0]].index
    for k in keys:
        if not tables[k].index.equals(ref):
            raise InputError(f"set_statistics: member {k} has other segment ids than member {keys[0]}")
    w = np.array([float(weights[k]) for k in keys])
    if not (np.all(np.isfinite(w)) and np.all(w > 0)):
        raise InputError("set_statistics: weights must be positive numbers")
    out = static.reindex(ref).copy() if static is not None else pd.DataFrame(index=ref)
    out.index.name = "segment_id"

    def stack(col: str) -> np.ndarray:
        return np.vstack([tables[k][col].to_numpy(dtype=float) if col in tables[k] else
                          np.full(len(ref), np.nan) for k in keys])

    lens = stack("lensing_factor")
    amp = stack("amp_1m_m")
    out["n_valid"] = np.isfinite(lens).sum(axis=0)
    k_top = int(min(top_k, len(ref)))
    masks = {"lensing": _topk_mask(lens, k_top), "amplitude": _topk_mask(amp, k_top)}
    for prefix, mask in (("", masks["lensing"]), ("amp_", masks["amplitude"])):
        out[f"{prefix}topk_frequency"] = mask.sum(axis=0) / float(len(keys))
        out[f"{prefix}topk_frequency_weighted"] = (w @ mask) / w.sum()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN segments give NaN
        for v, stem, unit in ((lens, "lensing", ""), (amp, "amp", "_m")):
            med, p90 = np.nanpercentile(v, [50.0, 90.0], axis=0)
            out[f"{stem}_median{unit}"] = med
            out[f"{stem}_p90{unit}"] = p90
            out[f"{stem}_max{unit}"] = np.nanmax(v, axis=0)
    pair_tables = []
    for prefix, by, median in (("", "lensing", "lensing_median"), ("amp_", "amplitude", "amp_median_m")):
        mask = masks[by]
        listed = []
        for j in range(len(ref)):
            who = [names[keys[i]] for i in np.flatnonzero(mask[:, j])]
            txt = "; ".join(who[:max_names]) + (f" (+{len(who) - max_names} more)" if len(who) > max_names else "")
            listed.append(txt)
        out[f"{prefix}hotspot_sources"] = listed
        order = np.lexsort((-np.nan_to_num(out[median].to_numpy(float), nan=-np.inf),
                            -out[f"{prefix}topk_frequency_weighted"].to_numpy(float)))
        rank = np.empty(len(ref), dtype=np.int64)
        rank[order] = np.arange(1, len(ref) + 1)
        out[f"{prefix}rank_frequency"] = rank
        mi, sj = np.nonzero(mask)
        pair_tables.append(pd.DataFrame({"member": [keys[i] for i in mi], "source": [names[keys[i]] for i in mi],
                                         "weight": w[mi], "segment_id": ref.to_numpy()[sj], "ranking": by}))
    return out, pd.concat(pair_tables, ignore_index=True)


def envelope_grids(grids: dict[str, xr.DataArray], new: dict[str, Any]) -> dict[str, xr.DataArray]:
    """Fold one member's grids into the running maximum (NaN ignored; order does not matter)."""
    out = dict(grids)
    for n in SET_GRIDS:
        g = new[n]
        arr = np.asarray(g.values if isinstance(g, xr.DataArray) else g, dtype=np.float64)
        if n not in out:
            tpl = g if isinstance(g, xr.DataArray) else None
            out[n] = (tpl.copy(data=arr.copy()) if tpl is not None else xr.DataArray(arr.copy()))
        else:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                out[n] = out[n].copy(data=np.fmax(out[n].values, arr))
    return out


def grid_template(depth: xr.DataArray, values: np.ndarray, name: str) -> xr.DataArray:
    """A grid of ``values`` on the coordinates and CRS of ``depth``."""
    GridInfo.from_dataarray(depth)
    da = depth.copy(data=np.asarray(values, dtype=np.float64)).rename(name)
    da.attrs = {k: v for k, v in depth.attrs.items() if k in ("grid_mapping", "lon_periodic")}
    return da
