"""The end-to-end screening pipeline: scenario -> bathymetry -> source -> rays -> focusing -> outputs.

Each stage is a function on in-memory objects, so a notebook can call any of them;
:func:`run_scenario` chains them and writes one output folder atomically.

Screening estimates only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).
"""

from __future__ import annotations

import logging
import math
import os
import pathlib
import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import CRS, Geod, Transformer

from .bathymetry import load_bathymetry, smooth_bathymetry
from .coast import STATIC_SEGMENT_COLUMNS as _STATIC_COLUMNS
from .cautions import caution_summary
from .errors import HealthCheckError, InputError
from .grid import GridInfo
from .outputs import _jsonable

__all__ = [
    "SourceAnalysis",
    "RunResult",
    "load_scenario_bathymetry",
    "build_source",
    "analyse_source",
    "points_table",
    "health_checks",
    "arrival_times",
    "run_scenario",
    "run_demo",
    "demo_cache_dir",
    "demo_inputs",
    "ensemble_member",
    "RUN_FILES",
]

log = logging.getLogger(__name__)

#: File names inside a run folder (one place to change them).
RUN_FILES = {
    "layers": "layers.nc",
    "segments": "segments",  # stem: .gpkg, .geojson, .csv
    "points": "points.csv",
    "manifest": "manifest.json",
    "scenario": "scenario.toml",
    "html": "appendix.html",
    "pdf": "appendix.pdf",
    "figures": "figures",
}
#: Raster layers written as Cloud-Optimized GeoTIFF: name -> (description, units).
COG_LAYERS = {
    "travel_time_min": ("first ray arrival time", "min"),
    "energy": ("regularised ray energy per unit wavefront width", "J m-1"),
    "lensing_factor": ("lensing factor: energy over real / same-mean smoothed bathymetry", "1"),
    "focusing_factor": ("focusing factor: energy over real bathymetry / constant-depth ocean", "1"),
}
#: Allowed relative error of the energy bookkeeping before a run fails.
BUDGET_TOLERANCE = 0.01
_GEOD = Geod(ellps="WGS84")


# ------------------------------------------------------------------------------------ progress
class _Progress:
    """Stage messages on stderr (suppressed when quiet)."""

    def __init__(self, enabled: bool = True) -> None:
        self.enabled = enabled
        self.t0 = time.perf_counter()
        self.timings: dict[str, float] = {}
        self._stage: str | None = None
        self._ts = 0.0

    def start(self, stage: str, what: str) -> None:
        self._stage, self._ts = stage, time.perf_counter()
        if self.enabled:
            print(f"[{time.perf_counter() - self.t0:7.1f} s] {what} ...", file=sys.stderr, flush=True)

    def done(self, note: str = "") -> None:
        dt = time.perf_counter() - self._ts
        if self._stage:
            self.timings[self._stage] = self.timings.get(self._stage, 0.0) + dt
        if self.enabled and note:
            print(f"            {note} ({dt:.1f} s)", file=sys.stderr, flush=True)


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
    Rupture or PointSource
    """
    from . import source as S

    p = perturbation or {}
    if cfg.kind == "point":
        lon, lat = cfg.lon, cfg.lat
        if p.get("along_km") or p.get("across_km"):
            lon, lat, _ = _GEOD.fwd(lon, lat, 0.0, 1000.0 * p.get("along_km", 0.0))
            lon, lat, _ = _GEOD.fwd(lon, lat, 90.0, 1000.0 * p.get("across_km", 0.0))
        return S.PointSource(x=float(lon), y=float(lat), radius_km=cfg.radius_km, amplitude_m=cfg.amplitude_m,
                             name=cfg.name)
    dmag = float(p.get("magnitude", 0.0))
    segs = []
    for i, sg in enumerate(cfg.segments):
        trace = _shift_trace(sg.trace, float(p.get("strike_deg", 0.0)), float(p.get("along_km", 0.0)),
                             float(p.get("across_km", 0.0))) if p else sg.trace
        dip = min(90.0, max(1.0, sg.dip_deg + float(p.get("dip_deg", 0.0))))
        segs.append(S.FaultSegment(
            trace=trace, top_depth_km=sg.top_depth_km, dip_deg=dip, width_km=sg.width_km, rake_deg=sg.rake_deg,
            slip_m=sg.slip_m, magnitude=None if sg.magnitude is None else sg.magnitude + dmag,
            rigidity_pa=sg.rigidity_pa, name=f"{cfg.name}-{i + 1}", force=cfg.force,
        ))
    mag = None if cfg.magnitude is None else cfg.magnitude + dmag
    return S.Rupture(segs, magnitude=mag, name=cfg.name, force=cfg.force)


def _source_outline(source: Any, depth: xr.DataArray) -> list[np.ndarray]:
    """Surface projection of each fault segment as a closed polyline in grid coordinates."""
    from .source import Rupture

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


def _segments_for(depth: xr.DataArray, scenario: Any):
    from .coast import coastline_from_grid, read_coastline, segment_coastline

    c = scenario.coast
    names = None
    if str(c.source) == "grid":
        lines = coastline_from_grid(depth, c.isobath_m)
    else:
        got = read_coastline(c.source, depth, layer=c.layer, name_field=c.name_field)
        if isinstance(got, tuple):
            lines, names = got
        else:
            lines = got
    return segment_coastline(lines, c.segment_km * 1000.0, depth, names=names)


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
    progress: _Progress | None = None,
) -> SourceAnalysis:
    """Build one source, its ray fan, and trace/analyse it on ``depth``.

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

    Returns
    -------
    SourceAnalysis
    """
    from . import source as S
    from .focusing import analyse_focusing

    pr = progress or _Progress(False)
    p = perturbation or {}
    pr.start("source", f"source '{src_cfg.name}': Okada uplift and ray fan")
    src = build_source(src_cfg, p)
    eta = S.uplift_on_grid(src, depth)
    count = int(n_rays or scenario.rays.count)
    fan = S.make_ray_fan(eta, depth, count, seed=scenario.rays.seed,
                         azimuth_offset_deg=float(p.get("launch_jitter_deg", 0.0)))
    summary = S.summarize_source(src, eta, depth, fan)
    period = float(scenario.focusing.period_s or summary.period_s)
    pr.done(f"Mw {summary.mw:.2f}, E = {summary.energy_J:.3g} J, period {period / 60:.1f} min, {fan.n_rays} rays")
    if segments is None:
        pr.start("coast", "coastline segments")
        segments = _segments_for(depth, scenario)
        pr.done(f"{len(segments)} segments of ~{scenario.coast.segment_km:g} km")
    pr.start("trace", f"tracing {fan.n_rays} rays over real, reference and constant-depth oceans")
    kw = {"max_time_s": scenario.rays.max_time_h * 3600.0, "keep_paths": keep_paths}
    if threads is not None:
        kw["threads"] = int(threads)
    if scenario.rays.step_s:
        kw["step_s"] = scenario.rays.step_s
    foc = analyse_focusing(
        depth, fan, period_s=period, reference_km=scenario.focusing.reference_smooth_km,
        stop_depth=scenario.rays.stop_depth_m, segments=segments, trace_kwargs=kw,
        min_rays=scenario.coast.min_rays, seed=scenario.rays.seed, top_k=scenario.output.top_k,
    )
    foc.segments["edge_distance_km"] = _edge_distance_km(foc.segments, depth)
    if "segment_id" in foc.ranking:
        edge = dict(zip(foc.segments["segment_id"], foc.segments["edge_distance_km"]))
        foc.ranking["edge_distance_km"] = foc.ranking["segment_id"].map(edge).to_numpy(dtype=float)
    st = foc.runs["real"].stats
    pr.done(f"{st['n_steps'] / max(st['elapsed_s'], 1e-9) / 1e6:.1f} M ray-steps/s; reasons {st['reasons']}")
    return SourceAnalysis(name=src_cfg.name, source=src, eta=eta, fan=fan, summary=summary, focusing=foc,
                          period_s=period, outline=_source_outline(src, depth))


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


def _sample_nearest_finite(da: xr.DataArray, x: float, y: float, max_cells: int = 6) -> tuple[float, float]:
    """Value of the nearest finite cell to (x, y) within ``max_cells``, and its distance in cells."""
    info = GridInfo.from_dataarray(da)
    fi, fj = info.index_of(x, y)
    i0, j0 = int(round(float(fi))), int(round(float(fj)))
    v = da.values
    best, bd = math.nan, math.inf
    for dj in range(-max_cells, max_cells + 1):
        for di in range(-max_cells, max_cells + 1):
            j, i = j0 + dj, i0 + di
            if info.periodic_x:
                i %= info.nx
            if 0 <= j < info.ny and 0 <= i < info.nx and np.isfinite(v[j, i]):
                d = math.hypot(di, dj)
                if d < bd:
                    best, bd = float(v[j, i]), d
    return best, bd


def points_table(analysis: SourceAnalysis, points: Sequence[Any], depth: xr.DataArray) -> pd.DataFrame:
    """Per point of interest: first arrival, lensing factor, indicative amplitude, nearest segment.

    A point closer to shore than the stop isobath has no ray of its own; its values are those of
    the nearest cell that rays reached (within 6 cells) and of the nearest coastline segment.
    """
    info = GridInfo.from_dataarray(depth)
    foc = analysis.focusing
    seg = foc.segments
    to_grid = Transformer.from_crs("EPSG:4326", info.crs, always_xy=True)
    rows = []
    from shapely.geometry import Point

    for p in points:
        x, y = to_grid.transform(p.lon, p.lat)
        t_min, dcell = _sample_nearest_finite(foc.travel_time_min, x, y)
        lf, _ = _sample_nearest_finite(foc.lensing_factor, x, y)
        dists = np.array([g.distance(Point(x, y)) for g in seg["geometry"]]) if len(seg) else np.array([])
        k = int(np.argmin(dists)) if dists.size else -1
        near = seg.iloc[k] if k >= 0 else None
        first = t_min  # rays passed within 6 cells of the point: their earliest time
        if not np.isfinite(first) and near is not None and np.isfinite(near.get("first_arrival_s", np.nan)):
            first = near["first_arrival_s"] / 60.0  # inshore of the stop isobath: the nearest segment's
        rows.append({
            "name": p.name, "lon": p.lon, "lat": p.lat,
            "first_arrival_min": first,
            "lensing_factor": float(near["lensing_factor"]) if near is not None else lf,
            "lensing_factor_map": lf,
            "amp_1m_m": float(near["amp_1m_m"]) if near is not None else math.nan,
            "nearest_segment": str(near["segment_id"]) if near is not None else "",
            "segment_distance_km": float(dists[k] / 1000.0) if k >= 0 and not info.geographic else math.nan,
        })
    return pd.DataFrame(rows)


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
        "termination_fraction": fr,
        "energy_budget": {k: (float(v) if isinstance(v, (int, float, np.floating)) else v) for k, v in b.items()},
        "energy_error_relative": float(b["relative_error"]),
        "energy_tolerance": tolerance,
        "step_s": float(st["step_s"]),
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
    n_rays: int = 3600,
    stop_depth: float = 20.0,
    max_time_s: float = 86400.0,
    points_crs: str | None = "EPSG:4326",
    **ray_options: Any,
) -> np.ndarray:
    """First-arrival times [s] at points, for a point ``(lon, lat)`` or a fault/rupture source.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    source : (lon, lat) tuple, PointSource, FaultSegment or Rupture
        A bare ``(lon, lat)`` launches ``n_rays`` rays in all directions from that point.
        Fault sources launch their energy-weighted fan from the uplift area.
    points : sequence of (x, y)
        Where to report, in ``points_crs`` (lon/lat by default; None: the grid CRS).
    n_rays : int
        Rays to trace.
    stop_depth, max_time_s : float
        Ray settings [m], [s].
    **ray_options
        Passed to :func:`tsunamifocus.rays.trace_rays`.

    Returns
    -------
    numpy.ndarray
        Seconds, NaN where no ray came within 6 cells of a point.
    """
    from . import source as S
    from .rays import trace_rays

    info = GridInfo.from_dataarray(depth)
    if isinstance(source, (tuple, list)) and len(source) == 2 and all(np.isscalar(v) for v in source):
        to_grid = Transformer.from_crs("EPSG:4326", info.crs, always_xy=True)
        x0, y0 = to_grid.transform(float(source[0]), float(source[1]))
        az = (np.arange(n_rays) + 0.5) * 360.0 / n_rays
        x0 = np.full(n_rays, x0)
        y0 = np.full(n_rays, y0)
        res = trace_rays(depth, x0, y0, az, stop_depth=stop_depth, max_time_s=max_time_s, **ray_options)
    else:
        eta = S.uplift_on_grid(source, depth)
        fan = S.make_ray_fan(eta, depth, n_rays)
        res = trace_rays(depth, fan.x0, fan.y0, fan.azimuth_deg, weights=fan.weights, stop_depth=stop_depth,
                         max_time_s=max_time_s, **ray_options)
    pts = np.asarray(points, dtype=float).reshape(-1, 2)
    if points_crs is not None:
        t = Transformer.from_crs(CRS.from_user_input(points_crs), info.crs, always_xy=True)
        px, py = t.transform(pts[:, 0], pts[:, 1])
    else:
        px, py = pts[:, 0], pts[:, 1]
    out = np.empty(len(pts))
    for k, (x, y) in enumerate(zip(np.atleast_1d(px), np.atleast_1d(py))):
        out[k] = _sample_bilinear_finite(res.first_arrival_s, float(x), float(y))
    return out


def _sample_bilinear_finite(da: xr.DataArray, x: float, y: float) -> float:
    """Bilinear value at (x, y) from the finite corners; nearest finite within 6 cells otherwise."""
    info = GridInfo.from_dataarray(da)
    fi, fj = info.index_of(x, y)
    fi, fj = float(fi), float(fj)
    i0, j0 = int(math.floor(fi)), int(math.floor(fj))
    tx, ty = fi - i0, fj - j0
    v = da.values
    acc = wsum = 0.0
    for dj, wy in ((0, 1 - ty), (1, ty)):
        for di, wx in ((0, 1 - tx), (1, tx)):
            j, i = j0 + dj, i0 + di
            if info.periodic_x:
                i %= info.nx
            if 0 <= j < info.ny and 0 <= i < info.nx and np.isfinite(v[j, i]):
                acc += wx * wy * v[j, i]
                wsum += wx * wy
    if wsum > 0.5:
        return acc / wsum
    return _sample_nearest_finite(da, x, y)[0]


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

    @property
    def analysis(self) -> SourceAnalysis:
        """The first (often only) source analysis."""
        return self.analyses[0]


def _layers(a: SourceAnalysis, depth: xr.DataArray) -> dict[str, xr.DataArray]:
    f = a.focusing
    lay = {
        "travel_time_min": f.travel_time_min,
        "energy": f.energy,
        "lensing_factor": f.lensing_factor,
        "focusing_factor": f.focusing_factor,
        "depth": depth,
        "reference_depth": f.reference_depth,
        "initial_sea_surface": a.eta,
    }
    out = {}
    for k, v in lay.items():
        v = v.copy()
        v.name = k
        out[k] = v
    out["depth"].attrs.update(units="m", long_name="depth below mean sea level", positive="down")
    out["reference_depth"].attrs.update(units="m", long_name="same-mean low-passed reference depth",
                                        positive="down")
    out["initial_sea_surface"].attrs.update(units="m", long_name="initial sea-surface displacement")
    out["energy"].attrs.setdefault("units", "J m-1")
    out["lensing_factor"].attrs.setdefault("units", "1")
    out["focusing_factor"].attrs.setdefault("units", "1")
    return out


def _figures(a: SourceAnalysis, depth: xr.DataArray, scenario: Any, folder: pathlib.Path,
             ensemble: Any = None) -> dict[str, pathlib.Path]:
    from . import figures as F

    folder.mkdir(parents=True, exist_ok=True)
    f = a.focusing
    real = f.runs["real"]
    coast = list(f.segments["geometry"]) if len(f.segments) else None
    figs = {}
    figs["ray_field"] = F.plot_ray_field(
        depth, f.energy, paths=real.paths, coast_lines=coast, source_outline=a.outline or None,
        out_path=folder / "ray_field.png", title=f"Ray field over the bathymetry: {a.name}",
        coast_label="Coast segments (stop isobath)")
    figs["lensing_map"] = F.plot_lensing_map(
        depth, f.lensing_factor, _contour_ready(f.travel_time_min), _plain_dtypes(f.segments), scenario.output.top_k,
        out_path=folder / "lensing_map.png", source_outline=a.outline or None,
        title=f"Lensing factor, travel time and ranked segments: {a.name}")
    seg = _plain_dtypes(f.segments)
    if ensemble is not None and getattr(ensemble, "segments", None) is not None:
        seg = _with_ensemble_intervals(seg, ensemble.segments)
    title = f"Top {scenario.output.top_k} coastline segments by lensing factor"
    if ensemble is not None:
        title += f"\n(ensemble median and 5-95 % interval over {ensemble.n_members} members)"
    else:
        title += "\n(whiskers: 5-95 % bootstrap interval over rays)"
    prob = None
    if ensemble is not None and "p_topk" in ensemble.segments:
        seg = seg.copy()
        seg["p_topk"] = ensemble.segments["p_topk"].reindex(seg["segment_id"].to_numpy()).to_numpy(dtype=float)
        prob = "p_topk"
    figs["ranking"] = F.plot_ranking(seg, scenario.output.top_k, out_path=folder / "ranking.png", title=title,
                                     prob_col=prob)
    figs["uplift"] = F.plot_uplift(a.eta, out_path=folder / "uplift.png", depth=depth,
                                   source_outline=a.outline or None, coast_lines=coast,
                                   title=f"Initial sea-surface displacement (Okada 1985): {a.name}")
    return {k: pathlib.Path(v) if v is not None else folder / f"{k}.png" for k, v in figs.items()}


def _contour_ready(tt: xr.DataArray, sigma_cells: float = 1.5) -> xr.DataArray:
    """Travel time lightly smoothed (NaN-aware Gaussian, ~1.5 cells) for contour lines only.

    The per-cell first-arrival grid of a finite ray fan is ragged at the cell scale (a cell
    records the earliest ray that happened to cross it); contouring that raw field draws
    saw-tooth lines. The exported layer stays unsmoothed.
    """
    from scipy import ndimage

    v = tt.values.astype(float)
    ok = np.isfinite(v)
    num = ndimage.gaussian_filter(np.where(ok, v, 0.0), sigma_cells, mode="nearest")
    den = ndimage.gaussian_filter(ok.astype(float), sigma_cells, mode="nearest")
    with np.errstate(invalid="ignore", divide="ignore"):
        sm = np.where(ok & (den > 0.2), num / den, np.nan)
    return tt.copy(data=sm)


def _with_ensemble_intervals(seg: pd.DataFrame, ens: pd.DataFrame) -> pd.DataFrame:
    """Segments table carrying the ensemble's median, 5-95 % interval and rank of the lensing factor."""
    out = seg.copy()
    e = ens.reindex(out["segment_id"].to_numpy())
    for col in ("lensing_factor", "lensing_lo", "lensing_hi"):
        if col in e.columns:
            out[col] = e[col].to_numpy(dtype=float)
    if "n_valid" in e.columns:
        # reliable in the ensemble sense: enough rays in at least half of the members
        n = int(np.nanmax(e["n_valid"].to_numpy(dtype=float))) if len(e) else 0
        ok = e["n_valid"].to_numpy(dtype=float) >= max(1, math.ceil(n / 2))
        out["reliable"] = ok
        v = np.where(ok, out["lensing_factor"].to_numpy(dtype=float), np.nan)
        order = np.argsort(-np.nan_to_num(v, nan=-np.inf), kind="stable")
        rank = np.full(len(v), np.nan)
        good = order[np.isfinite(v[order])]
        rank[good] = np.arange(1, good.size + 1)
        out["rank_lensing"] = pd.array([int(r) if np.isfinite(r) else None for r in rank], dtype="Int64")
    return out


def write_run_folder(
    folder: pathlib.Path,
    a: SourceAnalysis,
    scenario: Any,
    depth: xr.DataArray,
    points: pd.DataFrame,
    health: dict,
    *,
    ensemble: Any = None,
    timings: dict | None = None,
    command: Sequence[str] | None = None,
    extra_sections: dict | None = None,
) -> dict[str, pathlib.Path]:
    """Write every output of one analysed source into ``folder`` (which must exist).

    Returns
    -------
    dict
        Output kind -> path.
    """
    from .export import write_cog, write_netcdf, write_points_csv, write_segments
    from .outputs import write_manifest

    info = GridInfo.from_dataarray(depth)
    files: dict[str, pathlib.Path] = {}
    layers = _layers(a, depth)
    if ensemble is not None:
        for k, v in _ensemble_layers(ensemble, depth).items():
            layers[k] = v
    for name, (desc, units) in COG_LAYERS.items():
        files[name] = pathlib.Path(write_cog(layers[name], folder / f"{name}.tif", description=desc, units=units))
    files["layers"] = pathlib.Path(write_netcdf(
        layers, folder / RUN_FILES["layers"],
        title=f"tsunamifocus screening layers: {scenario.name} / {a.name}",
        history=f"tsunamifocus {_version()} run of scenario '{scenario.name}' (time and inputs in manifest.json)",
        source=f"tsunamifocus {_version()} long-wave ray tracing",
        references="Okada (1985) BSSA 75:1135; Cerveny (2001) Seismic Ray Theory; Green (1838); "
                   "Kaplan (2002) PRL 89:184103; Degueldre et al. (2016) Nat. Phys. 12:259",
    ))
    seg_out = a.focusing.segments.copy()
    if ensemble is not None and getattr(ensemble, "segments", None) is not None:
        ens_cols = [c for c in ensemble.segments.columns if c not in _STATIC_COLUMNS]
        seg_out = seg_out.join(ensemble.segments[ens_cols].add_prefix("ens_"), on="segment_id")
    seg_files = write_segments(_plain_dtypes(seg_out), folder / RUN_FILES["segments"], info.crs, csv_wkt=True)
    if isinstance(seg_files, dict):
        files.update({f"segments_{k}": pathlib.Path(v) for k, v in seg_files.items()})
    files["points"] = pathlib.Path(write_points_csv(points, folder / RUN_FILES["points"]))
    (folder / RUN_FILES["scenario"]).write_text(_scenario_toml(scenario), encoding="utf-8")
    figs = {}
    if scenario.output.figures:
        figs = _figures(a, depth, scenario, folder / RUN_FILES["figures"], ensemble=ensemble)
        files.update({f"figure_{k}": v for k, v in figs.items()})
    if scenario.output.report:
        from .report import build_appendix

        ctx = _report_context(a, scenario, depth, points, health, figs, ensemble, extra_sections)
        html, pdf = folder / RUN_FILES["html"], folder / RUN_FILES["pdf"]
        build_appendix(ctx, html, pdf)
        files["html"], files["pdf"] = html, pdf
    write_manifest(
        folder / RUN_FILES["manifest"], scenario=scenario, timings=timings or {}, output_dir=folder,
        command=list(command) if command else None,
        seeds={"rays": scenario.rays.seed, "ensemble": scenario.ensemble.seed},
        extra={"source": a.name, "health": health, "source_summary": _jsonable(a.summary.to_dict()),
               "ensemble": _jsonable(ensemble.to_dict()) if ensemble is not None else None},
    )
    files["manifest"] = folder / RUN_FILES["manifest"]
    return files


def _plain_dtypes(df: pd.DataFrame) -> pd.DataFrame:
    """Nullable integer/boolean columns (ranks with gaps) as float/object for the vector writers."""
    out = df.copy()
    for c in out.columns:
        dt = out[c].dtype
        if isinstance(dt, pd.api.extensions.ExtensionDtype) and dt.kind in "iu":
            out[c] = out[c].astype("float64")
        elif isinstance(dt, pd.BooleanDtype):
            out[c] = out[c].astype(object).where(out[c].notna(), None)
    return out


def _scenario_toml(scenario: Any) -> str:
    try:
        return scenario.to_toml()
    except Exception:  # pragma: no cover - defensive
        import json

        return "# scenario as run (JSON)\n# " + json.dumps(_jsonable(scenario.to_dict()))


def _version() -> str:
    from . import __version__

    return __version__


def _ensemble_layers(ens: Any, depth: xr.DataArray) -> dict[str, xr.DataArray]:
    out = {}
    for attr, suffix, what in (("mean", "mean", "ensemble mean"), ("std", "std", "ensemble standard deviation")):
        grids = getattr(ens, attr, None) or {}
        for k, v in grids.items():
            da = v if isinstance(v, xr.DataArray) else depth.copy(data=np.asarray(v, dtype=float))
            da = da.copy()
            name = f"{k}_ensemble_{suffix}"
            da.name = name
            da.attrs = {"long_name": f"{what} of {k}", "units": "J m-1" if k == "energy" else "1"}
            out[name] = da
    return out


def _report_context(a: SourceAnalysis, scenario: Any, depth: xr.DataArray, points: pd.DataFrame,
                    health: dict, figs: dict, ensemble: Any, extra_sections: dict | None) -> dict:
    """The data the appendix needs (keys of tsunamifocus.report.CONTEXT_KEYS)."""
    from .gridsummary import summarize_grid

    f = a.focusing
    g = summarize_grid(depth)
    grid = {
        "file": str(scenario.bathymetry.path.name),
        "CRS": g["crs"],
        "geometry": "lon/lat on a sphere" if g["geographic"] else "projected plane",
        "size (rows x columns)": f"{g['shape'][0]} x {g['shape'][1]}",
        "spacing": f"{g['spacing_m'][0] / 1000:.3g} km x {g['spacing_m'][1] / 1000:.3g} km",
        "sea depth (median / max)": f"{g.get('depth_median_m', float('nan')):.0f} m / {g.get('depth_max_m', float('nan')):.0f} m",
        "long-wave speed (median)": f"{g.get('speed_median_ms', float('nan')):.0f} m/s",
    }
    sm = a.summary.to_dict()
    src = {
        "name": a.name,
        "Mw": f"{sm.get('mw', float('nan')):.2f}",
        "M0 (N m)": f"{sm.get('m0_nm', float('nan')):.3g}",
        "mean slip (m)": f"{sm.get('mean_slip_m', float('nan')):.2f}",
        "max uplift / subsidence (m)": f"{sm.get('max_uplift_m', float('nan')):.2f} / {sm.get('max_subsidence_m', float('nan')):.2f}",
        "initial potential energy (J)": f"{sm.get('energy_J', float('nan')):.3g}",
        "dominant wavelength (km)": f"{sm.get('wavelength_km', float('nan')):.0f}",
        "dominant period (min)": f"{a.period_s / 60:.1f}",
        "rays": str(a.fan.n_rays),
    }
    for i, seg in enumerate(sm.get("segments", []) or []):
        src[f"segment {i + 1}"] = (
            f"strike {seg.get('strike_deg', float('nan')):.1f} deg, dip {seg.get('dip_deg', float('nan')):.1f} deg, "
            f"rake {seg.get('rake_deg', float('nan')):.0f} deg, L {seg.get('length_km', float('nan')):.0f} km, "
            f"W {seg.get('width_km', float('nan')):.0f} km, top {seg.get('top_depth_km', float('nan')):.1f} km, "
            f"slip {seg.get('slip_m', float('nan')):.2f} m")
    settings = {
        "rays per source": scenario.rays.count,
        "stop isobath (m)": scenario.rays.stop_depth_m,
        "time limit (h)": scenario.rays.max_time_h,
        "integration step (s)": f"{health['step_s']:.2f}",
        "reference low-pass (km)": scenario.focusing.reference_smooth_km,
        "segment length (km)": scenario.coast.segment_km,
        "coastline from": str(scenario.coast.source),
        "min rays per reliable segment": scenario.coast.min_rays,
        "ray seed": scenario.rays.seed,
    }
    diag = f.diagnostics
    hl = {
        "rays traced": health["n_rays"],
        **{f"rays ending: {k}": f"{v:.1%}" for k, v in health["termination_fraction"].items()},
        "energy bookkeeping error": {"value": f"{health['energy_error_relative']:.2e}",
                                     "limit": f"{health['energy_tolerance']:.0e}",
                                     "ok": health["energy_error_relative"] <= health["energy_tolerance"]},
        "integration step (s)": f"{health['step_s']:.2f}",
        "steps per ray (mean / max)": f"{health['steps_per_ray_mean']:.0f} / {health['steps_per_ray_max']:.0f}",
        "rays stopped in NaN holes or on land": f"{health['nan_or_land_fraction']:.2%}",
        "ray-steps per second": f"{health['ray_steps_per_s'] / 1e6:.1f} M",
    }
    for k in ("fraction_with_caustic", "mean_caustics_per_ray", "scintillation_index"):
        if k in diag and isinstance(diag[k], (int, float, np.floating)):
            hl[k.replace("_", " ")] = f"{float(diag[k]):.3g}"
    for k in ("median_first_caustic_m", "predicted_focusing_distance_m", "coast_distance_m"):
        if k in diag and isinstance(diag[k], (int, float, np.floating)) and np.isfinite(diag[k]):
            hl[k.replace("_m", "").replace("_", " ") + " (km)"] = f"{float(diag[k]) / 1000:.0f}"
    if diag.get("verdict"):
        hl["focusing expected at the coast"] = str(diag["verdict"])
    ctx: dict[str, Any] = {
        "title": f"Tsunami-energy focusing screening: {scenario.name}",
        "subtitle": "Planning-study appendix (screening level)",
        "scenario": {"name": scenario.name, "description": scenario.description, "grid": grid,
                     "sources": [src], "settings": settings},
        "data_sources": [{"name": "Bathymetry", "path": str(scenario.bathymetry.path),
                          "description": f"{g['format']} grid, {g['crs']}"}],
        "ranking": _plain_dtypes(f.segments),  # this run, bootstrap intervals; the ensemble has its section
        "top_k": scenario.output.top_k,
        "ranking_columns": [("edge_distance_km", "Grid edge (km)")],
        "points": points,
        "health": hl,
        "figures": {k: str(v) for k, v in figs.items()},
        "validation": validation_summary(),
        "validation_notes": "Each check runs in the project's automated test suite against the named "
                            "outside reference; see the test files and docs/ for measured errors.",
    }
    if ensemble is not None:
        ctx["ensemble"] = _ensemble_section(ensemble, scenario)
    if extra_sections:
        ctx.update(extra_sections)
    return ctx


def _ensemble_section(ens: Any, scenario: Any) -> dict:
    e = scenario.ensemble
    seg = ens.segments.reset_index()
    cols = [c for c in ("segment_id", "lensing_factor", "lensing_lo", "lensing_hi", "amp_1m_m", "amp_lo", "amp_hi",
                        "p_topk", "robustness") if c in seg]
    top = seg.sort_values("p_topk", ascending=False).head(scenario.output.top_k)[cols].copy()
    for c in top.columns:
        if top[c].dtype.kind == "f":
            top[c] = top[c].map(lambda v: f"{v:.2f}" if np.isfinite(v) else "")
    top = top.rename(columns={"segment_id": "segment", "lensing_factor": "lensing (median)",
                              "lensing_lo": "lensing 5 %", "lensing_hi": "lensing 95 %",
                              "amp_1m_m": "amp. at 1 m (median, m)", "amp_lo": "amp. 5 %", "amp_hi": "amp. 95 %",
                              "p_topk": f"P(top {ens.top_k})"})
    return {
        "text": [
            f"{ens.n_members} members perturb the bathymetry by smooth Gaussian-correlated depth errors of "
            f"{100 * e.bathy_rms:g} % rms (correlation length {e.bathy_corr_km:g} km) and the source within "
            f"strike +/- {e.strike_deg:g} deg, dip +/- {e.dip_deg:g} deg, along-strike +/- {e.along_km:g} km, "
            f"across-strike +/- {e.across_km:g} km, magnitude +/- {e.magnitude:g}, and rotate the ray fan by "
            f"up to +/- {e.launch_jitter_deg:g} deg. Member 0 is the unperturbed case.",
            "Per segment: median and 5-95 % interval of the lensing factor and indicative amplitude over the "
            f"members, and the probability of ranking among the top {ens.top_k} (robust >= 0.8, likely >= 0.5, "
            "possible >= 0.2, else unlikely).",
        ],
        "metrics": {"members": ens.n_members, "failed": len(ens.failures),
                    "members per minute": f"{ens.timings.get('members_per_minute', float('nan')):.1f}",
                    "scheduler": str(ens.scheduler.get("kind", ""))},
        "table": top,
        "table_caption": f"Segments most often among the top {ens.top_k}",
    }


def validation_summary() -> list[dict]:
    """The checks the test suite makes against outside references (shown in the appendix)."""
    return [
        {"check": "Long-wave speed c = sqrt(g h) at 4 km depth", "reference": "Berry (2007) Proc. R. Soc. A 463",
         "criterion": "198 m/s (about 713 km/h)"},
        {"check": "Straight rays and travel time on constant depth", "reference": "analytic",
         "criterion": "1e-6 relative"},
        {"check": "Great-circle rays on a constant-depth sphere", "reference": "pyproj.Geod (sphere)",
         "criterion": "< 0.1 km over 5,000 km"},
        {"check": "Snell's and Bouguer's invariants", "reference": "classical ray optics", "criterion": "1e-6"},
        {"check": "Geometrical spreading q = c t; Green's law h^(-1/4)", "reference": "Cerveny (2001); Green (1838)",
         "criterion": "analytic"},
        {"check": "First-arrival times vs eikonal solution", "reference": "scikit-fmm fast marching",
         "criterion": "within 1 %"},
        {"check": "Distance to first caustic ~ eps^(-2/3)", "reference": "Kaplan (2002) PRL 89:184103",
         "criterion": "exponent within 0.1"},
        {"check": "Okada sea-floor displacement", "reference": "Okada (1985) BSSA 75, Table 2",
         "criterion": "digits of the table"},
        {"check": "Moment magnitude", "reference": "Hanks & Kanamori (1979)", "criterion": "round trip"},
        {"check": "Linear long-wave solver: spreading, shoaling, mass", "reference": "linear long-wave theory; "
         "Green (1838)", "criterion": "see docs/wave_check.md"},
    ]


def _resolve_out(scenario: Any, out: str | os.PathLike | None) -> pathlib.Path:
    if out is not None:
        return pathlib.Path(out)
    return pathlib.Path(scenario.output.folder)


def run_scenario(
    scenario: Any,
    *,
    out: str | os.PathLike | None = None,
    overwrite: bool = False,
    rays: int | None = None,
    scheduler: Any = None,
    progress: bool = True,
    command: Sequence[str] | None = None,
    write: bool = True,
) -> RunResult:
    """Run a parsed scenario end to end and write its output folder atomically.

    Parameters
    ----------
    scenario : Scenario or path
        Parsed scenario (or a TOML path, parsed here).
    out : path, optional
        Output folder; default the scenario's ``[output] folder``.
    overwrite : bool
        Replace an existing non-empty output folder.
    rays : int, optional
        Override the ray count.
    scheduler : str or distributed.Client, optional
        Ensemble scheduler: None/"local" (in-process, both cores) or a scheduler address.
    progress : bool
        Stage messages on stderr.
    command : list of str, optional
        Command line, recorded in the manifest.
    write : bool
        Write outputs (False: compute only).

    Returns
    -------
    RunResult
    """
    from .outputs import OutputFolder
    from .scenario import parse_scenario

    if isinstance(scenario, (str, os.PathLike)):
        scenario = parse_scenario(scenario)
    pr = _Progress(progress)
    out_dir = _resolve_out(scenario, out)
    if write:
        # refuse early, before any work, when results exist and overwrite is not given
        if out_dir.exists() and not out_dir.is_dir():
            raise InputError(f"{out_dir}: output path exists and is not a folder")
        if out_dir.is_dir() and any(out_dir.iterdir()) and not overwrite:
            from .errors import OutputExistsError

            raise OutputExistsError(f"{out_dir}: folder is not empty; pass --overwrite or choose another --out")
    pr.start("load", f"loading bathymetry {scenario.bathymetry.path.name}")
    depth = load_scenario_bathymetry(scenario)
    info = GridInfo.from_dataarray(depth)
    pr.done(f"{info.ny} x {info.nx} cells, {'lon/lat sphere' if info.geographic else 'projected plane'}")
    _guard_resources(depth, scenario, rays)
    pr.start("coast", "coastline segments")
    segments = _segments_for(depth, scenario)
    pr.done(f"{len(segments)} segments of ~{scenario.coast.segment_km:g} km")
    analyses, points, health = [], {}, {}
    for src_cfg in scenario.sources:
        a = analyse_source(depth, scenario, src_cfg, segments=segments, n_rays=rays, progress=pr)
        analyses.append(a)
        points[a.name] = points_table(a, scenario.points, depth)
        health[a.name] = health_checks(a)
    ens = None
    if scenario.ensemble.members > 0:
        pr.start("ensemble", f"ensemble of {scenario.ensemble.members} members")
        ens = run_scenario_ensemble(scenario, depth, segments, rays=rays, scheduler=scheduler,
                                    progress=progress)
        pr.done(f"{ens.n_members} members done, {len(ens.failures)} failed")
    result = RunResult(scenario=scenario, depth=depth, analyses=analyses, points=points, health=health,
                       ensemble=ens, timings=pr.timings, out_dir=out_dir if write else None)
    if write:
        pr.start("export", f"writing outputs to {out_dir}")
        with OutputFolder(out_dir, overwrite=overwrite) as of:
            root = pathlib.Path(of.tmp_dir)
            multi = len(analyses) > 1
            for a in analyses:
                folder = root / _safe_name(a.name) if multi else root
                folder.mkdir(parents=True, exist_ok=True)
                write_run_folder(folder, a, scenario, depth, points[a.name], health[a.name],
                                 ensemble=ens if a is analyses[0] else None, timings=pr.timings,
                                 command=command)
            if multi:
                _write_comparison(root, analyses, depth)
        pr.done("done")
    if progress:
        print(format_run_summary(result), file=sys.stderr)
    return result


def _safe_name(name: str) -> str:
    keep = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in name)
    return keep or "source"


def _write_comparison(root: pathlib.Path, analyses: list[SourceAnalysis], depth: xr.DataArray) -> None:
    from .compare import compare_to_folder

    runs = [(a.name, a.focusing.segments, _layers(a, depth)) for a in analyses]
    compare_to_folder(runs, root / "comparison")


def _guard_resources(depth: xr.DataArray, scenario: Any, rays: int | None) -> None:
    """Refuse runs whose tracing memory would exceed the scenario's limit; log a time estimate."""
    from .errors import ResourceLimitError

    info = GridInfo.from_dataarray(depth)
    n = int(rays or scenario.rays.count)
    cells = info.nx * info.ny
    grid_bytes = cells * 8 * 14  # depth, speed, spline coefficients, 3 runs of accumulation
    ray_bytes = n * 8 * 40  # launch + end state + bootstrap per ray
    need = grid_bytes + ray_bytes
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


def seg_sigma_km(seg: pd.DataFrame) -> np.ndarray:
    """Fresnel regularisation width at each segment [km] (or 2 segment lengths where unknown)."""
    if "fresnel_sigma_m" in seg:
        v = seg["fresnel_sigma_m"].to_numpy(dtype=float) / 1000.0
        if np.isfinite(v).any():
            return v
    return 2.0 * seg["length_m"].to_numpy(dtype=float) / 1000.0


def format_run_summary(result: RunResult) -> str:
    """Short end-of-run summary: top hotspots, timings, where outputs are, and the cautions."""
    lines = ["", "== tsunamifocus run summary: " + str(result.scenario.name)]
    for a in result.analyses:
        f = a.focusing
        lines.append(f"source {a.name}: Mw {a.summary.mw:.2f}, E = {a.summary.energy_J:.3g} J, "
                     f"dominant period {a.period_s / 60:.1f} min")
        h = result.health[a.name]
        tf = ", ".join(f"{k} {v:.1%}" for k, v in h["termination_fraction"].items() if v > 0)
        lines.append(f"  rays: {h['n_rays']} ({tf}); energy bookkeeping error {h['energy_error_relative']:.2e}"
                     f" (limit {h['energy_tolerance']:.0e})")
        lines.append(f"  integration step {h['step_s']:.2f} s, steps per ray {h['steps_per_ray_mean']:.0f} mean / "
                     f"{h['steps_per_ray_max']:.0f} max; rays stopped in NaN holes or on land "
                     f"{h['nan_or_land_fraction']:.2%}")
        rk = f.ranking
        rel = rk[rk["reliable"]] if "reliable" in rk else rk
        lines.append(f"  top hotspots by lensing factor (5-95 % interval), of {len(f.segments)} segments:")
        edge_km = 2.0 * float(np.nanmedian(seg_sigma_km(f.segments)))
        for _, r in rel.head(min(5, len(rel))).iterrows():
            near = r.get("edge_distance_km", np.inf) < edge_km
            lines.append(f"    #{int(r['rank_lensing']):>2} {r['segment_id']:>6}  lensing {r['lensing_factor']:.2f} "
                         f"[{r['lensing_lo']:.2f}-{r['lensing_hi']:.2f}]  indicative amplitude at 1 m "
                         f"{r['amp_1m_m']:.2f} m  first arrival {r['first_arrival_s'] / 60:.0f} min"
                         + (f"  (within {edge_km:.0f} km of the grid edge: rays from beyond it are missing)"
                            if near else ""))
        seg = f.segments
        if "rank_amplitude" in seg:
            by_amp = seg[seg["rank_amplitude"].notna()].sort_values("rank_amplitude").head(3)
            if len(by_amp):
                lines.append("  largest indicative amplitude at 1 m depth (Green's law, indicative only): " + ", ".join(
                    f"{r['segment_id']} {r['amp_1m_m']:.2f} m" for _, r in by_amp.iterrows()))
    if result.ensemble is not None:
        e = result.ensemble
        lines.append(f"ensemble: {e.n_members} members, {len(e.failures)} failed")
        es = e.segments
        if "p_topk" in es:
            top = es.sort_values("p_topk", ascending=False).head(5)
            lines.append(f"  most robust hotspots, P(top {e.top_k}): " + ", ".join(
                f"{sid} {r['p_topk']:.2f} ({r.get('robustness', '')})" for sid, r in top.iterrows()))
    if result.timings:
        lines.append("timings: " + ", ".join(f"{k} {v:.1f} s" for k, v in result.timings.items()))
    if result.out_dir is not None:
        lines.append(f"outputs: {result.out_dir}")
    lines.append("CAUTION: " + caution_summary())
    return "\n".join(lines)


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
    from .ensemble import MemberResult
    from .perturb import perturb_bathymetry

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
    a = analyse_source(d, scenario, scenario.sources[source_index], perturbation=pert, segments=segments,
                       keep_paths=0, n_rays=n_rays, threads=1)
    health_checks(a)  # a member whose energy bookkeeping fails is a failed member, not averaged in
    seg = a.focusing.segments
    table = seg[["segment_id", *[c for c in _STATIC_COLUMNS if c in seg], *[c for c in _MEMBER_COLUMNS if c in seg]]]
    table = table.set_index("segment_id")
    if "reliable" in seg:
        # a segment reached by too few rays in this member gives no value (not ranked on noise)
        bad = ~seg.set_index("segment_id")["reliable"].fillna(False).astype(bool)
        table.loc[bad.to_numpy(), [c for c in ("lensing_factor", "amp_1m_m") if c in table]] = np.nan
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

    from .ensemble import run_ensemble
    from .perturb import draw_member_parameters

    e = scenario.ensemble
    members = draw_member_parameters(e, e.members, e.seed)
    sched = scheduler if scheduler is not None else (e.scheduler or "local")
    fn = partial(ensemble_member, source_index=source_index, n_rays=rays)
    return run_ensemble(fn, members, scheduler=sched, progress=progress,
                        shared={"depth": depth, "scenario": scenario, "segments": segments},
                        top_k=scenario.output.top_k)


# ------------------------------------------------------------------------------------ demo
def demo_inputs(folder: str | os.PathLike) -> pathlib.Path:
    """Write the demo bathymetry and scenario into ``folder``; return the scenario path."""
    from importlib import resources

    from .demo import write_demo_data

    folder = pathlib.Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    write_demo_data(folder)
    text = resources.files("tsunamifocus").joinpath("data/demo_scenario.toml").read_text(encoding="utf-8")
    path = folder / "meridane.toml"
    path.write_text(text, encoding="utf-8")
    return path


def demo_cache_dir() -> pathlib.Path:
    """Folder holding the generated demo inputs (``$TSUNAMIFOCUS_CACHE`` or the user cache)."""
    base = os.environ.get("TSUNAMIFOCUS_CACHE") or os.environ.get("XDG_CACHE_HOME") or os.path.join(
        os.path.expanduser("~"), ".cache")
    sub = "" if os.environ.get("TSUNAMIFOCUS_CACHE") else "tsunamifocus"
    return pathlib.Path(base) / sub / f"demo-inputs-{_version()}"


def run_demo(out: str | os.PathLike, *, overwrite: bool = False, rays: int | None = None,
             scheduler: Any = None, progress: bool = True) -> int:
    """Run the bundled invented demo scenario end to end into ``out``; returns an exit code.

    The demo inputs (generated deterministically) are written to :func:`demo_cache_dir`, so the
    run's manifest keeps pointing at readable inputs and the run can be reproduced from it.
    """
    from .errors import OutputExistsError
    from .scenario import parse_scenario

    out = pathlib.Path(out)
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise OutputExistsError(f"{out}: folder is not empty; pass --overwrite or choose another --out")
    sc = parse_scenario(demo_inputs(demo_cache_dir()))
    if progress:
        print(f"demo inputs (invented Meridane coast): {sc.bathymetry.path.parent}", file=sys.stderr)
    cmd = ["tsunamifocus", "demo", "--out", str(out)] + (["--rays", str(rays)] if rays else [])
    run_scenario(sc, out=out, overwrite=overwrite, rays=rays, scheduler=scheduler, progress=progress, command=cmd)
    return 0
