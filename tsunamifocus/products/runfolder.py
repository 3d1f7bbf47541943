"""Writing a run folder (layers, segments, points, figures, appendix, manifest) and run_scenario."""

from __future__ import annotations

import logging
import math
import os
import pathlib
import sys
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import Transformer

from ..coast.segments import STATIC_SEGMENT_COLUMNS as _STATIC_COLUMNS
from ..constants import __version__
from ..focusing.ranking import _rank_desc, ranked_mask
from ..grid import GridInfo
from ..io.gis import _plain_dtypes, longitude_note, write_cog, write_netcdf, write_points_csv, write_segments
from ..io.manifest import jsonable, write_manifest
from ..io.styles import lensing_scale
from ..io.guards import check_output_folder
from ..io.runfolder import RUN_FILES, OutputFolder, safe_name
from ..io.scenario import parse_scenario
from ..propagation.traveltime import isochrone_levels, isochrone_lines
from ..studies.progress import StageProgress
from ..studies.run import (
    RunResult,
    SourceAnalysis,
    analyse_scenario,
)
from . import figures as F
from .appendix import build_appendix
from .check import check_figures, check_section, write_check_table, write_wave_lensing
from .comparison import compare_to_folder
from .context import _report_context
from .summaries import format_run_summary


__all__ = ['run_scenario']

log = logging.getLogger(__name__)
#: Raster layers written as Cloud-Optimized GeoTIFF: name -> (description, units).
COG_LAYERS = {
    "travel_time_min": ("first-arrival travel time (eikonal, fast marching)", "min"),
    "energy": ("regularised ray energy per unit wavefront width", "J m-1"),
    "lensing_factor": ("lensing factor: energy over real / same-mean smoothed bathymetry", "1"),
    "focusing_factor": ("focusing factor: energy over real bathymetry / constant-depth ocean", "1"),
}

#: The wave check's columns the segments layers carry when a run was checked (``run --check``,
#: ``demo``): the wave maximum at the stop isobath [m], the wave lensing factor, the wave's first
#: arrival [s] and the two wave ranks (1 = largest), as in ``wave_check.csv``.
CHECK_SEGMENT_COLUMNS = ("wave_amp_stop_m", "wave_lensing", "wave_first_arrival_s", "rank_wave", "rank_wave_lensing")


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


def run_isochrones(a: SourceAnalysis, scenario: Any) -> pd.DataFrame:
    """The isochrones of a source's travel-time layer: hourly and every ``[output] isochrone_step_min``."""
    return isochrone_lines(a.travel_times.travel_time_s, scenario.output.isochrone_step_min)


def _uplift_basis(eta) -> str:
    """What the initial sea surface was computed from (for the uplift figure's title)."""
    if eta.attrs.get("source_kind") == "surface":
        return f"read from {pathlib.Path(str(eta.attrs.get('source_file', 'a raster'))).name}"
    return "Okada 1985"


def _figures(a: SourceAnalysis, depth: xr.DataArray, scenario: Any, folder: pathlib.Path,
             ensemble: Any = None) -> dict[str, pathlib.Path]:

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
        depth, f.lensing_factor, F.smooth_for_contours(f.travel_time_min), _plain_dtypes(f.segments), scenario.output.top_k,
        out_path=folder / "lensing_map.png", source_outline=a.outline or None,
        title=f"Lensing factor, travel time and ranked segments: {a.name}")
    seg = _plain_dtypes(f.segments)
    if ensemble is not None and getattr(ensemble, "segments", None) is not None:
        seg = _with_ensemble_intervals(seg, ensemble.segments, getattr(ensemble, "member_segments", None))
    title = _ranking_title(seg, scenario.output.top_k)
    whiskers = (f"\n(ensemble median and 5-95 % interval over {ensemble.n_members} members)" if ensemble is not None
                else "\n(whiskers: 5-95 % bootstrap interval over rays)")
    title += whiskers
    prob = None
    if ensemble is not None and "p_topk" in ensemble.segments:
        seg = seg.copy()
        seg["p_topk"] = ensemble.segments["p_topk"].reindex(seg["segment_id"].to_numpy()).to_numpy(dtype=float)
        prob = "p_topk"
    if np.isfinite(pd.to_numeric(seg["lensing_factor"], errors="coerce").to_numpy(float)).any():
        figs["ranking"] = F.plot_ranking(seg, scenario.output.top_k, out_path=folder / "ranking.png", title=title,
                                         prob_col=prob)
    if "rank_amplitude" in seg and np.isfinite(pd.to_numeric(seg["amp_1m_m"], errors="coerce").to_numpy(float)).any():
        prob_a = None
        if ensemble is not None and "p_topk_amp" in ensemble.segments:
            seg = seg.copy()
            seg["p_topk_amp"] = ensemble.segments["p_topk_amp"].reindex(
                seg["segment_id"].to_numpy()).to_numpy(dtype=float)
            prob_a = "p_topk_amp"
        figs["ranking_amplitude"] = F.plot_ranking(
            seg, scenario.output.top_k, by="amp_1m_m", out_path=folder / "ranking_amplitude.png",
            title=_ranking_title(seg, scenario.output.top_k, by="amplitude") + whiskers,
            xlabel="Indicative amplitude at 1 m depth (m; Green's law, indicative only)", prob_col=prob_a)
    tt = a.travel_times.travel_time_s
    figs["travel_time"] = F.plot_travel_time(
        tt, depth, isochrone_levels(tt, scenario.output.isochrone_step_min), out_path=folder / "travel_time.png",
        source_outline=a.outline or None, points=_points_xy(scenario.points, depth),
        title=f"First-arrival travel time and isochrones: {a.name}")
    figs["uplift"] = F.plot_uplift(a.eta, out_path=folder / "uplift.png", depth=depth,
                                   source_outline=a.outline or None, coast_lines=coast,
                                   title=f"Initial sea-surface displacement ({_uplift_basis(a.eta)}): {a.name}")
    if f.ray_depth is not None:
        ref_seen = f.ray_reference_depth if f.ray_reference_depth is not None else f.reference_depth
        figs["oceans"] = F.plot_oceans(f.ray_depth, ref_seen, out_path=folder / "oceans.png",
                                       period_s=a.period_s, reference_smooth_km=f.reference_smooth_km,
                                       title=f"The two oceans of the lensing factor: {a.name}")
    if a.check is not None:
        figs.update(check_figures(a.check, folder, segments=f.segments, depth=depth))
    return {k: pathlib.Path(v) if v is not None else folder / f"{k}.png" for k, v in figs.items()}


def _is_check_figure(key: str) -> bool:
    """Whether a figure belongs to the wave check's section of the appendix."""
    return key.startswith("ray_vs") or key == "wave_lensing_map"


def _points_xy(points: Sequence[Any], depth: xr.DataArray) -> list[tuple[str, float, float]]:
    """Points of interest inside the grid as (name, x, y) in the grid CRS."""
    info = GridInfo.from_dataarray(depth)
    out = []
    for p in points or []:
        if info.geographic:
            x, y = float(info.wrap_lon(p.lon)), float(p.lat)
        else:
            x, y = (float(v) for v in Transformer.from_crs("EPSG:4326", info.crs, always_xy=True)
                    .transform(p.lon, p.lat))
        if np.isfinite(x) and np.isfinite(y) and bool(np.all(info.contains(x, y))):
            out.append((p.name, x, y))
    return out


def _ranking_title(seg: pd.DataFrame, top_k: int, by: str = "lensing") -> str:
    """First title line of a ranking chart (``by`` "lensing" or "amplitude"), with the counts actually
    drawn (ranked, then unreliable)."""
    col, what = (("amp_1m_m", "amplitude at 1 m depth") if by == "amplitude"
                 else ("lensing_factor", "lensing factor"))
    v = pd.to_numeric(seg[col], errors="coerce").to_numpy(float)
    rel = ranked_mask(seg, by)
    n_rel = min(top_k, int((rel & np.isfinite(v)).sum()))
    n_unrel = min(top_k - n_rel, int((~rel & np.isfinite(v)).sum()))
    if n_rel == 0:
        plural = "amplitudes" if by == "amplitude" else "lensing factors"
        return f"No reliable segment: the {n_unrel} highest {plural}\n(all unreliable, not ranked)"
    return (f"Top {n_rel} ranked coastline segments by {what}"
            + (f"\nand {n_unrel} unreliable (hatched, not ranked)" if n_unrel else ""))


def _with_ensemble_intervals(seg: pd.DataFrame, ens: pd.DataFrame, members: pd.DataFrame | None = None) -> pd.DataFrame:
    """Segments table carrying the ensemble's median, 5-95 % interval and rank of the lensing factor
    and, when the members report it, of the indicative amplitude (``members``: the ensemble's long
    table of member values, for the number of members with an amplitude per segment)."""
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
        out["rank_lensing"] = _rank_desc(out["lensing_factor"].to_numpy(dtype=float), ok)
    if (members is not None and "amp_1m_m" in e.columns and "amp_1m_m" in members.columns
            and "segment_id" in members.columns and "rank_amplitude" in out.columns):
        for col in ("amp_1m_m", "amp_lo", "amp_hi"):
            if col in e.columns:
                out[col] = e[col].to_numpy(dtype=float)
        cnt = members.groupby("segment_id")["amp_1m_m"].count().reindex(out["segment_id"].to_numpy()).fillna(0)
        n = int(members["member"].nunique()) if "member" in members.columns else int(cnt.max())
        ok = cnt.to_numpy(dtype=float) >= max(1, math.ceil(n / 2))
        out["amp_reliable"] = ok
        out["rank_amplitude"] = _rank_desc(out["amp_1m_m"].to_numpy(dtype=float), ok)
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
    choices: dict | None = None,
) -> dict[str, pathlib.Path]:
    """Write every output of one analysed source into ``folder`` (which must exist).

    ``scenario`` is the effective scenario (every setting the run chose written in), so the
    manifest, ``scenario.toml`` and the appendix record what was run; ``choices`` (name ->
    :class:`~tsunamifocus.studies.settings.Choice`) says how the open settings were chosen.

    Returns
    -------
    dict
        Output kind -> path.
    """
    info = GridInfo.from_dataarray(depth)
    files: dict[str, pathlib.Path] = {}
    layers = _layers(a, depth)
    if ensemble is not None:
        for k, v in _ensemble_layers(ensemble, depth).items():
            layers[k] = v
    # the lensing map's colour scale (raster and segments), shared by the GIS style files
    seg_lf = pd.to_numeric(a.focusing.segments["lensing_factor"], errors="coerce").to_numpy(float)
    lens = lensing_scale(layers["lensing_factor"].values, seg_lf)
    for name, (desc, units) in COG_LAYERS.items():
        style = lens if name == "lensing_factor" else True
        files[name] = pathlib.Path(write_cog(layers[name], folder / f"{name}.tif", description=desc, units=units,
                                             style=style))
    files["layers"] = pathlib.Path(write_netcdf(
        layers, folder / RUN_FILES["layers"],
        title=f"tsunamifocus screening layers: {scenario.name} / {a.name}",
        history=f"tsunamifocus {__version__} run of scenario '{scenario.name}' (time and inputs in manifest.json)",
        source=f"tsunamifocus {__version__} long-wave ray tracing",
        references="Okada (1985) BSSA 75:1135; Cerveny (2001) Seismic Ray Theory; Green (1838); "
                   "Kaplan (2002) PRL 89:184103; Degueldre et al. (2016) Nat. Phys. 12:259",
    ))
    seg_out = a.focusing.segments.copy()
    if ensemble is not None and getattr(ensemble, "segments", None) is not None:
        ens_cols = [c for c in ensemble.segments.columns if c not in _STATIC_COLUMNS]
        seg_out = seg_out.join(ensemble.segments[ens_cols].add_prefix("ens_"), on="segment_id")
    if a.check is not None:  # the wave's values beside the rays' in the GIS layers, named as in wave_check.csv
        chk = a.check.table.set_index("segment_id")
        seg_out = seg_out.join(chk[[c for c in CHECK_SEGMENT_COLUMNS if c in chk.columns]], on="segment_id")
    seg_files = write_segments(_plain_dtypes(seg_out), folder / RUN_FILES["segments"], info.crs, csv_wkt=True,
                               style=lens)
    if isinstance(seg_files, dict):
        files.update({f"segments_{k}": pathlib.Path(v) for k, v in seg_files.items()})
    files["points"] = pathlib.Path(write_points_csv(points, folder / RUN_FILES["points"]))
    iso = run_isochrones(a, scenario)
    if len(iso):
        iso_files = write_segments(iso, folder / RUN_FILES["isochrones"], info.crs, layer="isochrones",
                                   formats=("gpkg", "geojson"), style=None)
        files.update({f"isochrones_{k}": pathlib.Path(v) for k, v in iso_files.items()})
    else:  # every first arrival comes before the first isochrone level
        log.info("no isochrone file: every first arrival is earlier than %g min", scenario.output.isochrone_step_min)
    if a.check is not None:
        files["wave_check"] = write_check_table(a.check.table, folder / "wave_check.csv")
        if write_wave_lensing(a.check, folder / "wave_lensing.tif") is not None:
            files["wave_lensing"] = folder / "wave_lensing.tif"
    (folder / RUN_FILES["scenario"]).write_text(_scenario_toml(scenario), encoding="utf-8")
    figs = {}
    if scenario.output.figures:
        figs = _figures(a, depth, scenario, folder / RUN_FILES["figures"], ensemble=ensemble)
        files.update({f"figure_{k}": v for k, v in figs.items()})
    if scenario.output.report:

        ctx = _report_context(a, scenario, depth, points, health, figs, ensemble, extra_sections, choices=choices)
        if a.check is not None:
            # the check's figures appear once, in its own section
            ctx["wave_check"] = check_section(a.check, {k: str(v) for k, v in figs.items() if _is_check_figure(k)},
                                              table_file="wave_check.csv")
            ctx["figures"] = {k: v for k, v in ctx["figures"].items() if not _is_check_figure(k)}
        html, pdf = folder / RUN_FILES["html"], folder / RUN_FILES["pdf"]
        build_appendix(ctx, html, pdf)
        files["html"], files["pdf"] = html, pdf
    write_manifest(
        folder / RUN_FILES["manifest"], scenario=scenario, timings=timings or {}, output_dir=folder,
        command=list(command) if command else None,
        seeds={"rays": scenario.rays.seed, "ensemble": scenario.ensemble.seed},
        extra={"source": a.name, "health": health, "gis_longitudes": longitude_note(info),
               "source_summary": jsonable(a.summary.to_dict()),
               "wave_check": jsonable(a.check.agreement) if a.check is not None else None,
               "settings_chosen": {k: jsonable(c.to_dict()) for k, c in (choices or {}).items()},
               "points_warnings": list(points.attrs.get("warnings", [])) if points is not None else [],
               "ensemble": jsonable(ensemble.to_dict()) if ensemble is not None else None},
    )
    files["manifest"] = folder / RUN_FILES["manifest"]
    return files




def _scenario_toml(scenario: Any) -> str:
    try:
        return scenario.to_toml()
    except Exception:  # pragma: no cover - defensive
        import json

        return "# scenario as run (JSON)\n# " + json.dumps(jsonable(scenario.to_dict()))


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


def _inputs_of(scenario: Any) -> dict[str, Any]:
    """The input files of a scenario (role -> path), the scenario file itself included."""
    files = {"scenario_file": scenario.file} if getattr(scenario, "file", None) is not None else {}
    files.update(scenario.input_files)
    return files


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
    check: bool = False,
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
    rays, scheduler, progress
        As :func:`tsunamifocus.studies.run.analyse_scenario` (ray count override, ensemble
        scheduler, stage messages on stderr).
    command : list of str, optional
        Command line, recorded in the manifest.
    write : bool
        Write outputs (False: compute only).
    check : bool
        Run the wave check of every source (:func:`tsunamifocus.studies.run.analyse_scenario`); its
        figures, table and agreement go to the run folder, its figures to the summary and appendix.

    Returns
    -------
    RunResult
    """
    if isinstance(scenario, (str, os.PathLike)):
        scenario = parse_scenario(scenario)
    pr = StageProgress(progress)
    out_dir = _resolve_out(scenario, out)
    if write:
        # refuse early, before any work: filled folder without overwrite, a folder that is not an
        # earlier run, a folder holding the inputs, a link, a place that cannot be written
        check_output_folder(out_dir, overwrite=overwrite, kind="run", inputs=_inputs_of(scenario))
    result = analyse_scenario(scenario, rays=rays, scheduler=scheduler, progress=progress, stages=pr, check=check)
    if write:
        result.out_dir = out_dir
        pr.start("export", f"writing outputs to {out_dir}")
        with OutputFolder(out_dir, overwrite=overwrite) as of:
            root = pathlib.Path(of.tmp_dir)
            analyses = result.analyses
            multi = len(analyses) > 1
            for a in analyses:
                folder = root / safe_name(a.name, "source") if multi else root
                folder.mkdir(parents=True, exist_ok=True)
                write_run_folder(folder, a, result.scenario, result.depth, result.points[a.name],
                                 result.health[a.name], ensemble=result.ensemble if a is analyses[0] else None,
                                 timings=pr.timings, command=command, choices=result.choices)
            if multi:
                _write_comparison(root, analyses, result.depth)
        pr.done("done")
    if progress:
        print(format_run_summary(result), file=sys.stderr)
    return result


def _write_comparison(root: pathlib.Path, analyses: list[SourceAnalysis], depth: xr.DataArray) -> None:

    runs = [(a.name, a.focusing.segments, _layers(a, depth)) for a in analyses]
    compare_to_folder(runs, root / "comparison")
