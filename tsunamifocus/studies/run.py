"""The end-to-end screening pipeline: scenario -> bathymetry -> source -> rays -> focusing -> outputs.

Each stage is a function on in-memory objects, so a notebook can call any of them;
:func:`run_scenario` chains them and writes one output folder atomically.

Screening estimates only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).
"""

from __future__ import annotations

import dataclasses
import logging
import math
from concurrent.futures import ThreadPoolExecutor
import pathlib
import sys
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Geod, Transformer

from ..coast.coastline import coastline_from_grid
from ..coast.region import CoastRegion, region_from_config
from ..coast.segments import STATIC_SEGMENT_COLUMNS as _STATIC_COLUMNS
from ..coast.segments import segment_coastline
from ..constants import STOP_DEPTH_M
from ..errors import CoastError, HealthCheckError, InputError, PointWarning, ResolutionWarning, ResourceLimitError
from ..focusing.analysis import ReferenceOcean, analyse_focusing
from ..focusing.ranking import (CAPPED_SHARE_NOTE, ROTATIONS_PAST_PREDICTABILITY, _add_ranks, capped_share,
                                rank_segments, ranked_values)
from ..grid import GridInfo
from ..io.bathymetry import load_bathymetry
from ..io.coastline import read_coastline, read_region_polygons
from ..io.subfaults import read_subfault_table
from ..io.surface import read_sea_surface
from ..ocean.perturb import draw_member_parameters, perturb_bathymetry
from ..ocean.smooth import smooth_bathymetry
from ..ocean.wavelength import WAVELENGTH_FRACTION
from ..coast.tubes import TUBE_MIN_WIDTH
from ..coast.waves import segment_first_arrivals
from ..propagation.traveltime import TravelTimes, first_arrival_times, sample_at_sea
from ..source.faults import FaultSegment, PointSource, Rupture
from ..source.energy import period_bands
from .check import compare_with_waves
from ..source.rayfan import make_ray_fan
from ..source.summary import summarize_source
from ..source.subfaults import rupture_from_subfaults
from ..source.surface import SurfaceSource, initial_surface
from ..source.uplift import uplift_on_grid
from .ensemble import MemberResult, run_ensemble
from .points import point_max_distance_km, points_table
from .progress import StageProgress
from .settings import Choice, choose_ray_count, choose_segment_km, with_choices

__all__ = [
    'analyse_scenario','SourceAnalysis', 'RunResult', 'load_scenario_bathymetry', 'build_source', 'analyse_source', 'points_table', 'health_checks', 'arrival_times', 'ensemble_member']

log = logging.getLogger(__name__)
#: Allowed relative error of the energy bookkeeping before a run fails.
BUDGET_TOLERANCE = 0.01
_GEOD = Geod(ellps="WGS84")




# ------------------------------------------------------------------------------------ stages
def load_scenario_bathymetry(scenario: Any) -> xr.DataArray:
    """Load, crop, resample and optionally pre-smooth the scenario's bathymetry.

    Parameters
    ----------
    scenario : tsunamifocus.scenario.Scenario
        Parsed scenario.

    Returns
    -------
    xarray.DataArray
        Depth [m], positive down.
    """
    b = scenario.bathymetry
    depth = load_bathymetry(
        b.path, values=b.values, variable=b.variable, bbox=b.crop, margin_km=b.crop_margin_km,
        resample_km=b.resample_km, max_memory_gb=b.max_memory_gb,
    )
    if b.smooth_km:
        depth = smooth_bathymetry(depth, b.smooth_km)
    return depth


def _shift_trace(trace, d_strike: float, d_along_km: float, d_across_km: float):
    (lo1, la1), (lo2, la2) = trace
    az, _, length = _GEOD.inv(lo1, la1, lo2, la2)
    mlon, mlat, _ = _GEOD.fwd(lo1, la1, az, length / 2)
    if d_along_km:
        mlon, mlat, _ = _GEOD.fwd(mlon, mlat, az, d_along_km * 1000.0)
    if d_across_km:
        mlon, mlat, _ = _GEOD.fwd(mlon, mlat, az + 90.0, d_across_km * 1000.0)
    az2 = az + d_strike
    a = _GEOD.fwd(mlon, mlat, az2 + 180.0, length / 2)
    b = _GEOD.fwd(mlon, mlat, az2, length / 2)
    return ((float(a[0]), float(a[1])), (float(b[0]), float(b[1])))


def build_source(cfg: Any, perturbation: dict | None = None):
    """Turn a scenario ``[[source]]`` into a :class:`~tsunamifocus.source.Rupture` or ``PointSource``.

    Parameters
    ----------
    cfg : tsunamifocus.scenario.SourceConfig
        The source description.
    perturbation : dict, optional
        Ensemble deltas: ``strike_deg``, ``dip_deg``, ``along_km``, ``across_km``
        (shift of each segment's trace), ``magnitude`` (added to every magnitude).

    Returns
    -------
    Rupture, SubfaultRupture, SurfaceSource or PointSource
        Subfault tables and sea-surface rasters are read here (``cfg.path``); the scenario
        parser refuses source perturbations for them.
    """
    p = perturbation or {}
    if cfg.kind == "subfaults":
        table = read_subfault_table(cfg.path, depth_at=cfg.depth_at)
        return rupture_from_subfaults(table, name=cfg.name, force=cfg.force)
    if cfg.kind == "surface":
        return SurfaceSource(read_sea_surface(cfg.path, variable=cfg.variable), name=cfg.name)
    if cfg.kind == "point":
        lon, lat = cfg.lon, cfg.lat
        if p.get("along_km") or p.get("across_km"):
            lon, lat, _ = _GEOD.fwd(lon, lat, 0.0, 1000.0 * p.get("along_km", 0.0))
            lon, lat, _ = _GEOD.fwd(lon, lat, 90.0, 1000.0 * p.get("across_km", 0.0))
        return PointSource(x=float(lon), y=float(lat), radius_km=cfg.radius_km, amplitude_m=cfg.amplitude_m,
                             name=cfg.name)
    dmag = float(p.get("magnitude", 0.0))
    segs = []
    for i, sg in enumerate(cfg.segments):
        trace = _shift_trace(sg.trace, float(p.get("strike_deg", 0.0)), float(p.get("along_km", 0.0)),
                             float(p.get("across_km", 0.0))) if p else sg.trace
        dip = min(90.0, max(1.0, sg.dip_deg + float(p.get("dip_deg", 0.0))))
        segs.append(FaultSegment(
            trace=trace, top_depth_km=sg.top_depth_km, dip_deg=dip, width_km=sg.width_km, rake_deg=sg.rake_deg,
            slip_m=sg.slip_m, magnitude=None if sg.magnitude is None else sg.magnitude + dmag,
            rigidity_pa=sg.rigidity_pa, name=f"{cfg.name}-{i + 1}", force=cfg.force,
        ))
    mag = None if cfg.magnitude is None else cfg.magnitude + dmag
    return Rupture(segs, magnitude=mag, name=cfg.name, force=cfg.force)


def _source_outline(source: Any, depth: xr.DataArray) -> list[np.ndarray]:
    """Surface projection of each fault segment as a closed polyline in grid coordinates."""
    if not isinstance(source, Rupture):
        return []
    info = GridInfo.from_dataarray(depth)
    out = []
    to_grid = Transformer.from_crs("EPSG:4326", info.crs, always_xy=True)
    for seg in source.segments:
        (lo1, la1), (lo2, la2) = seg.trace
        az, _, _ = _GEOD.inv(lo1, la1, lo2, la2)
        wh = seg.width_km * 1000.0 * math.cos(math.radians(seg.dip_deg))
        c = _GEOD.fwd(lo2, la2, az + 90.0, wh)
        d = _GEOD.fwd(lo1, la1, az + 90.0, wh)
        lons = np.array([lo1, lo2, c[0], d[0], lo1])
        lats = np.array([la1, la2, c[1], d[1], la1])
        x, y = to_grid.transform(lons, lats)
        if info.geographic:  # a trace given in -180..180 on a grid in 0..360 (or the reverse)
            x = info.wrap_lon(np.asarray(x, float))
        out.append(np.column_stack([x, y]))
    return out


@dataclass
class SourceAnalysis:
    """One source traced and analysed on one bathymetry."""

    name: str
    source: Any
    eta: xr.DataArray
    fan: Any
    summary: Any
    focusing: Any
    period_s: float
    outline: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)
    check: Any = None
    #: First-arrival travel times of the eikonal solver (the run's travel-time layer).
    travel_times: TravelTimes | None = None


def coast_region(scenario: Any) -> CoastRegion:
    """The scenario's coast of interest (``[coast] region`` box and ``region_file`` polygons)."""
    c = scenario.coast
    polys = read_region_polygons(c.region_file) if getattr(c, "region_file", None) is not None else None
    return region_from_config(getattr(c, "region", None), polys)


def _segments_for(depth: xr.DataArray, scenario: Any) -> pd.DataFrame:
    """Segments of the whole coastline, with a boolean ``in_region`` column (the coast of interest).

    Every coast of the grid (or of the coastline file) is segmented so that rays ending on a
    coast next to the region are assigned to their own segments rather than to the region's
    edge segments; only the segments inside the region are ranked and reported.
    ``attrs["coast_area"]`` holds the box (lon/lat) whose coast-reaching energy the coverage
    warnings compare with (None: the whole grid).
    """
    c = scenario.coast
    info = GridInfo.from_dataarray(depth)
    names = None
    if str(c.source) == "grid":
        lines = coastline_from_grid(depth, c.isobath_m)
    else:
        got = read_coastline(c.source, depth, layer=c.layer, name_field=c.name_field)
        if isinstance(got, tuple):
            lines, names = got
        else:
            lines = got
    km = c.segment_km if c.segment_km is not None else choose_segment_km(depth).value
    seg = segment_coastline(lines, km * 1000.0, depth, names=names)
    region = coast_region(scenario)
    inside = region.contains_grid_xy(info, seg["x_mid"].to_numpy(float), seg["y_mid"].to_numpy(float))
    if not inside.any():
        raise CoastError(
            f"[coast] region ({region.describe()}) holds none of the {len(seg)} coastline segments; expected a "
            "box [lon_min, lat_min, lon_max, lat_max] around the coast of interest (lon_min > lon_max crosses "
            "the antimeridian; -180..180 and 0..360 numbers both work)"
        )
    seg["in_region"] = inside
    area = None
    if not region.is_everything:
        area = region
    elif str(c.source) != "grid":
        area = _lines_box(lines, info)
    seg.attrs["coast_area"] = area
    return seg


def _lines_box(lines: Sequence[Any], info: GridInfo, cells: float = 5.0) -> CoastRegion:
    """Lon/lat box around coastline lines, grown by a few grid cells (the coast a file describes)."""
    xy = np.vstack([np.asarray(ln.coords, dtype=float)[:, :2] for ln in lines])
    if info.geographic:
        lon, lat = xy[:, 0], xy[:, 1]
    else:
        tr = Transformer.from_crs(info.crs, "EPSG:4326", always_xy=True)
        lon, lat = (np.asarray(a, dtype=float) for a in tr.transform(xy[:, 0], xy[:, 1]))
        lon = np.degrees(np.unwrap(np.radians(lon)))
    grow_m = cells * max(info.spacing_m())
    dlat = math.degrees(grow_m / info.radius_m)
    lat0, lat1 = max(-90.0, float(lat.min()) - dlat), min(90.0, float(lat.max()) + dlat)
    coslat = max(math.cos(math.radians(max(abs(lat0), abs(lat1)))), 0.05)
    dlon = dlat / coslat
    lon0, lon1 = float(lon.min()) - dlon, float(lon.max()) + dlon
    if lon1 - lon0 >= 360.0:
        lon0, lon1 = -180.0, 180.0
    return CoastRegion(box=(lon0, lat0, lon1, lat1))


def restrict_to_region(foc: Any, top_k: int) -> None:
    """Keep only the segments of the coast of interest in ``foc`` (segments, ranks, ranking), in place."""
    seg = foc.segments
    if "in_region" not in seg:
        return
    attrs = dict(seg.attrs)
    keep = seg["in_region"].to_numpy(bool)
    out = seg[keep].drop(columns="in_region").reset_index(drop=True)
    out.attrs = attrs
    out.attrs["n_segments_all"] = int(len(seg))
    out.attrs["energy_region_J"] = float(out["energy_J"].sum()) if "energy_J" in out else float("nan")
    out = _add_ranks(out, bool(np.isfinite(out["lensing_factor"].to_numpy(float)).any()
                               or "ref_n_rays" in out))
    foc.segments = out
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ResolutionWarning)  # said once, in the summary
            foc.ranking = rank_segments(out, top_k=top_k, by="lensing_factor")
    except CoastError:  # no ray reached the region's segments: nothing to rank, the summary says so
        foc.ranking = out.head(0).copy()


def analyse_source(
    depth: xr.DataArray,
    scenario: Any,
    src_cfg: Any,
    *,
    perturbation: dict | None = None,
    segments: pd.DataFrame | None = None,
    keep_paths: int = 600,
    n_rays: int | None = None,
    threads: int | None = None,
    progress: StageProgress | None = None,
    all_bands: bool = True,
    reference: ReferenceOcean | None = None,
    wavelength_fraction: float = WAVELENGTH_FRACTION,
    min_width_factor: float = TUBE_MIN_WIDTH,
) -> SourceAnalysis:
    """Build one source, its ray fan, and trace/analyse it on ``depth``.

    With ``[rays] rotations`` unset (auto) one fan is traced; when a quarter or more of the ranked
    segments' energy on the coast of interest came in Fresnel-capped tubes (rays past their
    predictability, :data:`~tsunamifocus.focusing.ranking.CAPPED_SHARE_NOTE`), the fan is traced
    again as :data:`~tsunamifocus.constants.ROTATIONS_PAST_PREDICTABILITY` rotated copies
    and that result is kept (if it fits in ``[bathymetry] max_memory_gb``; else one fan is kept
    with a :class:`~tsunamifocus.errors.ResolutionWarning`).

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    scenario : Scenario
        Ray, focusing and coast settings.
    src_cfg : SourceConfig
        The source.
    perturbation : dict, optional
        Ensemble deltas (see :func:`build_source`) and ``launch_jitter_deg`` (fan rotation).
    segments : pandas.DataFrame, optional
        Coastline segments (built from the scenario when None).
    keep_paths : int
        Decimated ray paths kept for figures.
    n_rays : int, optional
        Override of ``scenario.rays.count``.
    threads : int, optional
        Ray-engine threads (results are bit-identical for a given value); default all cores.
    progress : optional
        Stage reporter.
    all_bands : bool
        Trace the three period bands of the source's spectrum (default), or the dominant period only.
    reference : ReferenceOcean, optional
        The lensing reference prepared once for many sources (default: built for this source).
    wavelength_fraction : float
        Gaussian std of the oceans' wavelength smoothing (and of the maps' regularisation) in
        local wavelengths, for sensitivity studies (:func:`tsunamifocus.focusing.analysis.analyse_focusing`).
    min_width_factor : float
        Smallest tube footprint along the coast in local wavelengths, for sensitivity studies
        (:data:`tsunamifocus.coast.tubes.TUBE_MIN_WIDTH`).

    Returns
    -------
    SourceAnalysis
    """
    pr = progress or StageProgress(False)
    p = perturbation or {}
    pr.start("source", f"source '{src_cfg.name}': initial sea surface and ray fan")
    src = build_source(src_cfg, p)
    eta = initial_surface(src, depth)
    # the first arrivals (fast marching), then their earliest times along the segments, are
    # computed in a second thread meanwhile
    with ThreadPoolExecutor(max_workers=1) as pool:
        tt_later = pool.submit(source_travel_times, src, eta, depth, scenario.rays.stop_depth_m)
        if segments is None:
            segments = _segments_for(depth, scenario)
        seg_in = segments
        first_later = pool.submit(lambda: segment_first_arrivals(tt_later.result().travel_time_s, seg_in)
                                  if seg_in is not None and len(seg_in) else None)
        count = int(n_rays or scenario.rays.count or choose_ray_count(scenario, depth, segments).value)

        def fan_of(rotations: int) -> Any:
            return make_ray_fan(eta, depth, count, seed=scenario.rays.seed, rotations=rotations,
                                azimuth_offset_deg=float(p.get("launch_jitter_deg", 0.0)),
                                stop_depth_m=scenario.rays.stop_depth_m)

        fan = fan_of(scenario.rays.rotations or 1)
        summary = summarize_source(src, eta, depth, fan)
        period = float(scenario.focusing.period_s or summary.period_s)
        bands = period_bands(eta, depth, period) if all_bands else [(period, 1.0)]
        tt = tt_later.result()
        first = first_later.result()
    pr.done(f"{summary.headline}, period {period / 60:.1f} min, {fan.n_rays} rays")
    kw = {"max_time_s": scenario.rays.max_time_h * 3600.0, "keep_paths": keep_paths}
    if threads is not None:
        kw["threads"] = int(threads)
    if scenario.rays.step_s:
        kw["step_s"] = scenario.rays.step_s
    segments = reachable_segments(segments, tt, first_arrival_s=first)

    def focusing(fan: Any) -> Any:
        rot = f" ({fan.rotations} rotations of a {fan.n_rays // fan.rotations}-ray fan)" if fan.rotations > 1 else ""
        pr.start("trace", f"tracing {fan.n_rays} rays{rot} in {len(bands)} period bands over the real and "
                 "reference oceans as the wave sees them, and over a constant-depth ocean")
        foc = analyse_focusing(
            depth, fan, period_s=period, reference_smooth_km=scenario.focusing.reference_smooth_km, bands=bands,
            stop_depth_m=scenario.rays.stop_depth_m, segments=segments, trace_kwargs=kw,
            min_rays=scenario.coast.min_rays, seed=scenario.rays.seed, top_k=scenario.output.top_k,
            max_distance_m=getattr(scenario.coast, "max_distance_m", None),
            coast_area=_area_mask(segments.attrs.get("coast_area"), depth), reference=reference,
            wavelength_fraction=wavelength_fraction, min_width_factor=min_width_factor,
        )
        use_travel_times(foc, tt, first_arrival_s=first)  # the segments' rows are still those of seg_in
        restrict_to_region(foc, scenario.output.top_k)
        return foc

    foc = focusing(fan)
    # on the coast of interest
    cs = capped_share(foc.segments) if scenario.rays.rotations is None else None
    if cs is not None and cs >= CAPPED_SHARE_NOTE and not _rotations_fit(depth, scenario, fan.n_rays):
        msg = (f"{100 * cs:.0f} % of the ranked segments' energy came in ray tubes wider than their first Fresnel "
               f"zone (rays past their predictability), but {ROTATIONS_PAST_PREDICTABILITY} rotated fans would "
               "exceed [bathymetry] max_memory_gb: one fan kept, its segment values scatter between ray seeds")
        warnings.warn(msg, ResolutionWarning, stacklevel=2)
        cs = None
    if cs is not None and cs >= CAPPED_SHARE_NOTE:
        # past their predictability one fan's segment values depend on its rotation: the mean of
        # several rotated fans does much less (ROTATIONS_PAST_PREDICTABILITY, docs/focusing.md)
        pr.done(f"{100 * cs:.0f} % of the ranked segments' energy came in ray tubes wider than their first "
                f"Fresnel zone (rays past their predictability): {ROTATIONS_PAST_PREDICTABILITY} rotated fans "
                "are averaged instead of one")
        fan = fan_of(ROTATIONS_PAST_PREDICTABILITY)
        summary = dataclasses.replace(summary, rays=fan.by_side())
        foc = focusing(fan)
    foc.segments["edge_distance_km"] = _edge_distance_km(foc.segments, depth)
    if "segment_id" in foc.ranking:
        edge = dict(zip(foc.segments["segment_id"], foc.segments["edge_distance_km"]))
        foc.ranking["edge_distance_km"] = foc.ranking["segment_id"].map(edge).to_numpy(dtype=float)
    st = foc.runs["real"].stats
    pr.done(f"{st['n_steps'] / max(st['elapsed_s'], 1e-9) / 1e6:.1f} M ray-steps/s; reasons {st['reasons']}; "
            f"first arrivals by fast marching in {tt.stats['elapsed_s']:.1f} s")
    return SourceAnalysis(name=src_cfg.name, source=src, eta=eta, fan=fan, summary=summary, focusing=foc,
                          period_s=period, outline=_source_outline(src, depth), travel_times=tt)


def source_travel_times(source: Any, eta: xr.DataArray | None, depth: xr.DataArray,
                        stop_depth_m: float = STOP_DEPTH_M) -> TravelTimes:
    """First-arrival times of a source: from its point for a point source, else its uplift area.

    Parameters
    ----------
    source : PointSource, FaultSegment, Rupture or (lon, lat)
        The source; a ``(lon, lat)`` pair or a :class:`PointSource` starts from a point.
    eta : xarray.DataArray or None
        Uplift [m] on ``depth`` (computed when None and needed).
    depth : xarray.DataArray
        Depth [m], positive down.
    stop_depth_m : float
        Stop isobath [m] (shallower water is a barrier).

    Returns
    -------
    TravelTimes
    """
    if isinstance(source, (tuple, list)) and len(source) == 2 and all(np.isscalar(v) for v in source):
        return first_arrival_times(depth, point=(float(source[0]), float(source[1])), stop_depth_m=stop_depth_m)
    if isinstance(source, PointSource):
        return first_arrival_times(depth, point=(source.x, source.y), point_crs=source.crs, stop_depth_m=stop_depth_m)
    if eta is None:
        eta = uplift_on_grid(source, depth)
    return first_arrival_times(depth, uplift=eta, stop_depth_m=stop_depth_m)


def reachable_segments(segments: pd.DataFrame | None, tt: TravelTimes, *,
                       first_arrival_s: np.ndarray | None = None) -> pd.DataFrame | None:
    """The segments with a ``reachable`` column: True where the eikonal front reaches the segment.

    Water the front cannot reach from the source (lakes and depressions below sea level, bays cut
    off at the grid's resolution) gets no tube energy and is not ranked
    (:func:`tsunamifocus.coast.tubes.tube_deposit`). When no segment is reached the column is
    left out (the focusing stage then says plainly that no ray reached the coast).

    Parameters
    ----------
    segments : pandas.DataFrame or None
        Coastline segments.
    tt : TravelTimes
        First arrivals of the source.
    first_arrival_s : numpy.ndarray, optional
        ``segment_first_arrivals(tt.travel_time_s, segments)`` [s] when already computed.

    Returns
    -------
    pandas.DataFrame or None
    """
    if segments is None or len(segments) == 0:
        return segments
    first = _first_arrivals(tt, segments, first_arrival_s)
    reach = np.isfinite(first)
    if not reach.any():
        return segments
    out = segments.copy()
    out.attrs = dict(segments.attrs)
    out["reachable"] = reach
    return out


def _first_arrivals(tt: TravelTimes, segments: pd.DataFrame, first_arrival_s: np.ndarray | None) -> np.ndarray:
    """The segments' earliest eikonal times [s]: ``first_arrival_s`` when given (checked), else computed."""
    if first_arrival_s is None:
        return segment_first_arrivals(tt.travel_time_s, segments)
    first = np.asarray(first_arrival_s, dtype=float)
    if first.shape != (len(segments),):
        raise InputError(f"first_arrival_s has shape {first.shape}, expected one time per segment ({len(segments)})")
    return first


def use_travel_times(foc: Any, tt: TravelTimes, *, first_arrival_s: np.ndarray | None = None) -> None:
    """Make the eikonal first arrivals the run's travel-time layer and segment first arrivals, in place.

    ``foc.travel_time_min`` becomes the eikonal layer [min]; the segments' ``first_arrival_s`` [s] the
    earliest eikonal time along each segment's stretch of the stop isobath; the rays' own arrival
    (earliest ray ending nearest to the segment) is kept as the diagnostic column ``ray_arrival_s``.
    ``first_arrival_s`` [s]: ``segment_first_arrivals(tt.travel_time_s, foc.segments)`` when already
    computed (for the same segments in the same order).
    """
    seg = foc.segments
    cols = list(seg.columns)
    if "first_arrival_s" in seg:
        seg["ray_arrival_s"] = seg["first_arrival_s"].to_numpy(dtype=float)
        cols.insert(cols.index("first_arrival_s") + 1, "ray_arrival_s")
    else:
        cols.append("first_arrival_s")
    seg["first_arrival_s"] = _first_arrivals(tt, seg, first_arrival_s)
    attrs = dict(seg.attrs)
    foc.segments = seg[cols]
    foc.segments.attrs = attrs
    tmin = tt.travel_time_s / 60.0
    tmin.name = "travel_time_min"
    tmin.attrs = {**tt.travel_time_s.attrs, "units": "min"}
    foc.travel_time_min = tmin


def _area_mask(area: CoastRegion | None, depth: xr.DataArray):
    """Mask function (grid x, y) -> bool of the coast of interest, or None for the whole grid."""
    if area is None:
        return None
    info = GridInfo.from_dataarray(depth)
    return lambda x, y: area.contains_grid_xy(info, x, y)


def _edge_distance_km(seg: pd.DataFrame, depth: xr.DataArray) -> np.ndarray:
    """Distance [km] from each segment's centre to the nearest edge of the grid (not wrapping edges).

    Rays that would reach a segment from beyond the grid are missing, so values of segments
    close to an edge (within a few Fresnel widths) are biased; the summary flags them.
    """
    info = GridInfo.from_dataarray(depth)
    x0, y0, x1, y1 = info.bounds
    x = seg["x_mid"].to_numpy(dtype=float)
    y = seg["y_mid"].to_numpy(dtype=float)
    if info.geographic:
        k = math.pi / 180.0 * info.radius_m / 1000.0
        dy = np.minimum(y - y0, y1 - y) * k
        dx = np.minimum(x - x0, x1 - x) * k * np.cos(np.radians(y))
        return dy if info.periodic_x else np.minimum(dx, dy)
    return np.minimum(np.minimum(x - x0, x1 - x), np.minimum(y - y0, y1 - y)) / 1000.0


def health_checks(analysis: SourceAnalysis, tolerance: float = BUDGET_TOLERANCE) -> dict:
    """Numerical health of a traced source: termination fractions, bookkeeping, steps, NaN holes.

    Raises
    ------
    HealthCheckError
        When the energy bookkeeping error exceeds ``tolerance``.
    """
    foc = analysis.focusing
    real = foc.runs["real"]
    st = real.stats
    n = max(1, int(st["n_rays"]))
    fr = {k: v / n for k, v in st["reasons"].items()}
    steps = np.asarray(real.end["n_steps"].values, dtype=float)
    b = foc.budget
    out = {
        "n_rays": int(st["n_rays"]),
        "fan_rotations": int(getattr(analysis.fan, "rotations", 1)),
        "termination_fraction": fr,
        "energy_budget": {k: (float(v) if isinstance(v, (int, float, np.floating)) else v) for k, v in b.items()},
        "energy_error_relative": float(b["relative_error"]),
        "energy_tolerance": tolerance,
        "step_s": float(st["step_s"]),
        "max_step_s": float(st["max_step_s"]) if st.get("max_step_s") else None,
        "steps_per_ray_mean": float(steps.mean()),
        "steps_per_ray_max": float(steps.max()),
        "nan_or_land_fraction": float(fr.get("land_or_nodata", 0.0)),
        "ray_steps_per_s": float(st["n_steps"] / max(st["elapsed_s"], 1e-9)),
        "threads": st.get("threads"),
    }
    if not b["relative_error"] <= tolerance:
        raise HealthCheckError(
            f"source '{analysis.name}': energy bookkeeping error {100 * b['relative_error']:.2f} % exceeds "
            f"{100 * tolerance:g} %; the run is not trustworthy"
        )
    return out


# ------------------------------------------------------------------------------------ arrival times
def arrival_times(
    depth: xr.DataArray,
    source: Any,
    points: Sequence[tuple[float, float]],
    *,
    stop_depth_m: float = STOP_DEPTH_M,
    points_crs: str | None = "EPSG:4326",
    max_distance_km: float | None = None,
) -> np.ndarray:
    """First-arrival times [s] at points, for a point ``(lon, lat)``, a point source, a fault or a rupture.

    The times come from the eikonal solver (:func:`tsunamifocus.propagation.traveltime.first_arrival_times`),
    the same as the run's travel-time layer: the front starts at the point, or on the source's uplift
    area. Each point is read at the nearest sea cell deeper than the stop isobath within the search
    radius.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    source : (lon, lat) tuple, PointSource, FaultSegment or Rupture
        The source.
    points : sequence of (x, y)
        Where to report, in ``points_crs`` (lon/lat by default; None: the grid CRS).
    stop_depth_m : float
        Stop isobath [m]: shallower water is a barrier.
    points_crs : str or None
        CRS of ``points``.
    max_distance_km : float, optional
        Search radius [km]; default ``DEFAULTS["coast"]["point_max_distance_km"]``.

    Returns
    -------
    numpy.ndarray
        Seconds; NaN where no sea cell with a time lies within the radius (a
        :class:`~tsunamifocus.errors.PointWarning` names the points).
    """
    info = GridInfo.from_dataarray(depth)
    tt = source_travel_times(source, None, depth, stop_depth_m)
    pts = np.asarray(points, dtype=float).reshape(-1, 2)
    if points_crs is not None:
        t = Transformer.from_crs(CRS.from_user_input(points_crs), info.crs, always_xy=True)
        px, py = (np.atleast_1d(np.asarray(v, dtype=float)) for v in t.transform(pts[:, 0], pts[:, 1]))
    else:
        px, py = pts[:, 0], pts[:, 1]
    km, _ = point_max_distance_km(depth, max_distance_km)
    out, _, _, _ = sample_at_sea(tt.travel_time_s, px, py, km * 1000.0)
    missing = np.flatnonzero(~np.isfinite(out))
    if missing.size:
        warnings.warn(f"arrival_times: no sea cell deeper than {stop_depth_m:g} m reached by the front within "
                      f"{km:g} km of point(s) {', '.join(str(int(k)) for k in missing)}: NaN there",
                      PointWarning, stacklevel=2)
    return out


# ------------------------------------------------------------------------------------ outputs
@dataclass
class RunResult:
    """Everything a run produced, in memory (plus where it was written)."""

    scenario: Any
    depth: xr.DataArray
    analyses: list[SourceAnalysis]
    points: dict[str, pd.DataFrame]
    health: dict[str, dict]
    ensemble: Any = None
    timings: dict = field(default_factory=dict)
    out_dir: pathlib.Path | None = None
    #: How the settings the scenario left open were chosen (name -> :class:`~.settings.Choice`).
    choices: dict = field(default_factory=dict)

    @property
    def analysis(self) -> SourceAnalysis:
        """The first (often only) source analysis."""
        return self.analyses[0]


#: Peak memory model of a run [bytes] (fitted to the peak RSS of ``tsunamifocus run`` on the demo at
#: 33,200 and 133,200 cells with 20,000 and 500,000 rays; the fourth case came out 12 % below it).
_RUN_BASE_BYTES = 610_000_000
_RUN_BYTES_PER_CELL = 700
_RUN_BYTES_PER_RAY = 1540


def _rotations_fit(depth: xr.DataArray, scenario: Any, n_rays: int) -> bool:
    """Whether one run tracing ROTATIONS_PAST_PREDICTABILITY rotated copies of an ``n_rays`` fan fits
    in the scenario's memory limit (the guard's model below)."""
    info = GridInfo.from_dataarray(depth)
    need = (_RUN_BASE_BYTES + info.nx * info.ny * _RUN_BYTES_PER_CELL
            + ROTATIONS_PAST_PREDICTABILITY * n_rays * _RUN_BYTES_PER_RAY)
    return need <= scenario.bathymetry.max_memory_gb * 1e9


def _guard_resources(depth: xr.DataArray, scenario: Any, rays: int | None) -> None:
    """Refuse runs whose tracing memory would exceed the scenario's limit; log a time estimate."""
    info = GridInfo.from_dataarray(depth)
    n = int(rays or scenario.rays.count)
    cells = info.nx * info.ny
    # peak resident memory of a run, measured (benchmarks/bench_memory.py --run, docs/reliability.md):
    # the process with its libraries, then per grid cell (depth, band oceans, speed splines, the
    # three runs' accumulation grids, figures) and per ray (fan, end states, tubes, bootstrap)
    grid_bytes = cells * _RUN_BYTES_PER_CELL
    ray_bytes = n * _RUN_BYTES_PER_RAY
    need = _RUN_BASE_BYTES + grid_bytes + ray_bytes
    e = scenario.ensemble
    # local ensemble: up to 4 members alive at once (ensemble.run_ensemble window), each its own working set
    alive = min(e.members, 4) if e.members > 0 and str(e.scheduler or "local") == "local" else 0
    need += alive * (grid_bytes + ray_bytes)
    with_ens = f" with {alive} ensemble members in memory" if alive else ""
    limit = scenario.bathymetry.max_memory_gb * 1e9
    if need > limit:
        raise ResourceLimitError(
            f"tracing {n} rays on a {info.ny} x {info.nx} grid{with_ens} needs about {need / 1e9:.1f} GB, above the limit "
            f"of {limit / 1e9:.1f} GB ([bathymetry] max_memory_gb); resample the grid or use fewer rays"
        )
    dxm, dym = info.spacing_m()
    steps = scenario.rays.max_time_h * 3600.0 * 250.0 / min(dxm, dym)  # upper bound, c ~ 250 m/s
    est = 3 * n * steps / 8e6 * (1 + scenario.ensemble.members)
    log.info("time estimate: up to %.0f s of ray tracing (3 runs x %d rays, ~8 M ray-steps/s)", est, n)
    if est > 600:
        print(f"note: this run may take up to {est / 60:.0f} min of ray tracing", file=sys.stderr)


# ------------------------------------------------------------------------------------ ensemble
_MEMBER_COLUMNS = ["lensing_factor", "amp_1m_m", "energy_per_m", "first_arrival_s"]


def ensemble_member(params: dict, *, depth: xr.DataArray, scenario: Any, segments: pd.DataFrame,
                    source_index: int = 0, n_rays: int | None = None):
    """Run one ensemble member: perturb bathymetry and source, trace, analyse; return small results.

    Parameters
    ----------
    params : dict
        One member of :func:`tsunamifocus.perturb.draw_member_parameters`.
    depth : xarray.DataArray
        Unperturbed depth [m].
    scenario : Scenario
        Settings.
    segments : pandas.DataFrame
        The run's coastline segments (identical for every member).
    source_index : int
        Which ``[[source]]`` of the scenario.
    n_rays : int, optional
        Ray-count override.

    Returns
    -------
    tsunamifocus.ensemble.MemberResult
    """
    d = depth
    if params.get("bathy_seed") is not None and params.get("bathy_rms", 0.0) > 0:
        d = perturb_bathymetry(depth, params["bathy_rms"], params["bathy_corr_km"], params["bathy_seed"])
    pert = {
        "strike_deg": params.get("strike_delta_deg", 0.0),
        "dip_deg": params.get("dip_delta_deg", 0.0),
        "along_km": params.get("along_shift_km", 0.0),
        "across_km": params.get("across_shift_km", 0.0),
        "magnitude": params.get("magnitude_delta", 0.0),
        "launch_jitter_deg": params.get("launch_jitter_deg", 0.0),
    }
    # one ray thread per member: members run in parallel, and a fixed thread count makes every
    # member bit-identical whichever scheduler runs it
    # members are traced as the main run is (three period bands; rotated fans where the rays are
    # past their predictability): with the dominant band alone their rankings followed the wave
    # far less on the trans-ocean cases, for half to two thirds of the time (docs/ensembles.md)
    a = analyse_source(d, scenario, scenario.sources[source_index], perturbation=pert, segments=segments,
                       keep_paths=0, n_rays=n_rays, threads=1)
    health_checks(a)  # a member whose energy bookkeeping fails is a failed member, not averaged in
    seg = a.focusing.segments
    table = seg[["segment_id", *[c for c in _STATIC_COLUMNS if c in seg], *[c for c in _MEMBER_COLUMNS if c in seg]]]
    table = table.set_index("segment_id")
    # a segment reached by too few rays in this member gives no value (not ranked on noise;
    # the amplitude needs the real run only, the lensing factor the reference run too)
    for col in ("lensing_factor", "amp_1m_m"):
        if col in table:
            table[col] = ranked_values(seg, col)
    grids = {"energy": a.focusing.energy, "lensing_factor": a.focusing.lensing_factor}
    info = {"mw": float(a.summary.mw), "energy_J": float(a.summary.energy_J),
            "budget_error": float(a.focusing.budget["relative_error"])}
    return MemberResult(segments=table, grids=grids, info=info)


def run_scenario_ensemble(scenario: Any, depth: xr.DataArray, segments: pd.DataFrame, *, rays: int | None = None,
                          scheduler: Any = None, progress: bool = True, source_index: int = 0):
    """Run the scenario's ``[ensemble]`` for one source (Dask; local by default).

    Returns
    -------
    tsunamifocus.ensemble.EnsembleResult
    """
    from functools import partial


    e = scenario.ensemble
    members = draw_member_parameters(e, e.members, e.seed)
    sched = scheduler if scheduler is not None else (e.scheduler or "local")
    fn = partial(ensemble_member, source_index=source_index, n_rays=rays)
    return run_ensemble(fn, members, scheduler=sched, progress=progress,
                        shared={"depth": depth, "scenario": scenario, "segments": segments},
                        top_k=scenario.output.top_k)


def analyse_scenario(scenario: Any, *, rays: int | None = None, scheduler: Any = None, progress: bool = True,
                     stages: StageProgress | None = None, check: bool = False) -> RunResult:
    """Compute a parsed scenario end to end in memory: bathymetry, segments, every source, the ensemble.

    Parameters
    ----------
    scenario : Scenario
        Parsed scenario.
    rays : int, optional
        Override the ray count.
    scheduler : str or distributed.Client, optional
        Ensemble scheduler: None/"local" (in-process, both cores) or a scheduler address.
    progress : bool
        Stage messages on stderr.
    stages : StageProgress, optional
        Stage timer to continue (a new one by default).
    check : bool
        Also solve the linear long-wave equations for every source over the real and the reference
        oceans and compare the amplitude and lensing rankings (:func:`compare_with_waves`); the
        result is kept in ``SourceAnalysis.check``.

    Returns
    -------
    RunResult
        With ``out_dir`` None (nothing is written here).
    """
    pr = stages if stages is not None else StageProgress(progress)
    pr.start("load", f"loading bathymetry {scenario.bathymetry.path.name}")
    depth = load_scenario_bathymetry(scenario)
    info = GridInfo.from_dataarray(depth)
    pr.done(f"{info.ny} x {info.nx} cells, {'lon/lat sphere' if info.geographic else 'projected plane'}")
    choices: dict[str, Choice] = {}
    if scenario.coast.segment_km is None:
        choices["segment_km"] = choose_segment_km(depth)
    else:
        choices["segment_km"] = Choice(scenario.coast.segment_km, "scenario")
    scenario = with_choices(scenario, choices)
    pr.start("coast", "coastline segments")
    segments = _segments_for(depth, scenario)
    n_in = int(segments["in_region"].sum())
    pr.done(f"{len(segments)} segments of ~{scenario.coast.segment_km:g} km"
            + (f", {n_in} in the coast of interest" if n_in < len(segments) else ""))
    if rays is not None:
        choices["rays"] = Choice(int(rays), "override")
    elif scenario.rays.count is not None:
        choices["rays"] = Choice(int(scenario.rays.count), "scenario")
    else:
        region_segments = segments[segments["in_region"].to_numpy(bool)]
        choices["rays"] = choose_ray_count(scenario, depth, region_segments)
    # the effective scenario: what the manifest, scenario.toml and the appendix record
    scenario = with_choices(scenario, choices)
    _guard_resources(depth, scenario, None)
    limit_km = getattr(scenario.coast, "point_max_distance_km", None)
    analyses, points, health = [], {}, {}
    for src_cfg in scenario.sources:
        a = analyse_source(depth, scenario, src_cfg, segments=segments, progress=pr)
        analyses.append(a)
        points[a.name] = points_table(a, scenario.points, depth, max_distance_km=limit_km)
        health[a.name] = health_checks(a)
        if check:
            pr.start("check", f"linear long-wave check of '{a.name}' over the real and reference oceans")
            a.check = compare_with_waves(depth, a.eta, a.focusing.segments,
                                         reference_depth=a.focusing.reference_depth,
                                         stop_depth_m=scenario.rays.stop_depth_m, k=scenario.output.top_k,
                                         period_s=a.period_s, progress=pr.enabled)
            lens = a.check.agreement.get("lensing", {})
            pr.done(f"amplitude Spearman {a.check.agreement['spearman']:.2f}, lensing Spearman "
                    f"{lens.get('spearman', float('nan')):.2f}")
    ens = None
    if scenario.ensemble.members > 0:
        pr.start("ensemble", f"ensemble of {scenario.ensemble.members} members")
        ens = run_scenario_ensemble(scenario, depth, segments, scheduler=scheduler, progress=progress)
        pr.done(f"{ens.n_members} members done, {len(ens.failures)} failed")
    return RunResult(scenario=scenario, depth=depth, analyses=analyses, points=points, health=health,
                     ensemble=ens, timings=pr.timings, choices=choices)
