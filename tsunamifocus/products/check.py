"""``tsunamifocus check RUN_DIR``: an independent linear long-wave check of a finished run.

The run folder is self-contained for this: its ``layers.nc`` holds the depth grid and the
source's initial sea surface, ``segments.csv`` the ray ranking and ``scenario.toml`` the stop
isobath. The check simulates the linear shallow-water equations (:mod:`tsunamifocus.wave`) from
that initial sea surface, takes the maximum amplitude per coastline segment at the stop
isobath, and compares its ranking with the ray-based indicative amplitude at the same place.

Screening estimates only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).
"""

from __future__ import annotations

import dataclasses
import json
import pathlib
import sys
from typing import Any

import numpy as np
import pandas as pd

from ..cautions import caution_summary
from ..errors import DataFileError, InputError
from ..io.gis import write_cog, write_netcdf
from ..io.manifest import jsonable, read_manifest, write_manifest
from ..io.guards import check_output_folder
from ..io.runfolder import OutputFolder
from ..io.runs import read_run
from ..io.scenario import Scenario, parse_scenario
from ..grid import refine_grid
from ..io.styles import lensing_scale
from ..studies.check import (AUTO_REFINE, FAINT_WAVE_FRACTION, NEST_DEFAULT, WaveCheck, check_refine, compare_with_waves, nest_ocean_words,
                             nested_instead_of)
from .appendix import build_appendix
from .summaries import amplitude_first
from .figures import plot_check_profile, plot_lensing_map, plot_ray_vs_wave

__all__ = ['wave_check', 'run_wave_check', 'check_figures', 'check_section', 'write_check_table', 'write_wave_lensing',
           'CHECK_FOLDER']

#: Default sub-folder of a run that receives the check's outputs.
CHECK_FOLDER = "wave_check"


def wave_check(depth, eta0, segments, *, figure_path=None, **kwargs) -> WaveCheck:
    """Compare the wave solver with the ray ranking (:func:`~tsunamifocus.studies.check.compare_with_waves`).

    Parameters
    ----------
    depth, eta0, segments, **kwargs
        As :func:`tsunamifocus.studies.check.compare_with_waves`.
    figure_path : str or pathlib.Path, optional
        Write the scatter figure (:func:`~tsunamifocus.products.figures.plot_ray_vs_wave`) there.

    Returns
    -------
    WaveCheck
        With ``figure`` set when ``figure_path`` was given.
    """
    chk = compare_with_waves(depth, eta0, segments, **kwargs)
    if figure_path is not None:
        figs = check_figures(chk, pathlib.Path(figure_path).parent, stem=pathlib.Path(figure_path).stem,
                             segments=segments if isinstance(segments, pd.DataFrame) else None, depth=depth)
        chk.figure = figs["ray_vs_wave"]
        chk.figure_lensing = figs.get("ray_vs_wave_lensing")
        chk.figure_profile = figs.get("ray_vs_wave_profile")
        chk.figure_lensing_map = figs.get("wave_lensing_map")
    return chk


def check_figures(chk: WaveCheck, folder: pathlib.Path, *, stem: str = "ray_vs_wave",
                  segments: pd.DataFrame | None = None, depth: Any = None) -> dict[str, pathlib.Path]:
    """Figures of the ranked segments: the amplitude (``stem.png``) and lensing (``stem_lensing.png``)
    scatters and, with the run's ``segments`` table, both along the coast (``stem_profile.png``); with
    the run's ``depth`` grid too, the wave's lensing factor over the ocean (``wave_lensing_map.png``)."""
    t = chk.table.set_index("segment_id")
    ranked = t["ranked"]
    k = chk.agreement["k"]
    ray_column = chk.agreement["ray_column"]
    label = "Ray-theory amplitude at stop isobath [m]" if ray_column == "amp_stop_m" else f"Ray {ray_column}"
    out = {"ray_vs_wave": plot_ray_vs_wave(t["ray_value"].where(ranked).rename("ray_value"),
                                           t["wave_amp_stop_m"].where(ranked), folder / f"{stem}.png", k=k,
                                           ray_label=label)}
    if "lensing" in chk.agreement:
        ranked_lens = t[_lens_col(t)]
        out["ray_vs_wave_lensing"] = plot_ray_vs_wave(
            t["ray_lensing"].where(ranked_lens).rename("ray_lensing"), t["wave_lensing"].where(ranked_lens),
            folder / f"{stem}_lensing.png", k=k, ray_label="Ray lensing factor (energy, real / reference ocean)",
            wave_label="Wave lensing factor (energy, real / reference ocean)",
            title="Lensing ranking: rays vs linear long-wave check, per coastline segment")
    if segments is not None and segments.index.name == "segment_id" and "segment_id" not in segments.columns:
        segments = segments.reset_index()
    if segments is not None and {"segment_id", "geometry", "length_m"} <= set(segments.columns):
        out["ray_vs_wave_profile"] = plot_check_profile(chk.table, segments, folder / f"{stem}_profile.png", k=k)
        lens_map = chk.lensing_map()
        if depth is not None and lens_map is not None:
            out["wave_lensing_map"] = _wave_lensing_figure(chk, lens_map, segments, depth,
                                                           folder / "wave_lensing_map.png")
    return out


def _lens_col(t: pd.DataFrame) -> str:
    """The check table's column of the segments the lensing ranking compares (older tables: ``ranked``)."""
    return "ranked_lensing" if "ranked_lensing" in t.columns else "ranked"


def _wave_lensing_figure(chk: WaveCheck, lens_map: Any, segments: pd.DataFrame, depth: Any,
                         path: pathlib.Path) -> pathlib.Path:
    """The wave's lensing map with the ranked segments coloured and numbered by the wave's lensing."""
    t = chk.table.set_index("segment_id")
    seg = segments[segments["segment_id"].isin(t.index[t[_lens_col(t)]])].copy()
    seg["lensing_factor"] = t["wave_lensing"].reindex(seg["segment_id"].to_numpy()).to_numpy(float)
    seg["rank_lensing"] = t["rank_wave_lensing"].reindex(seg["segment_id"].to_numpy()).to_numpy(float)
    refine = int(chk.agreement.get("refine", 1))
    grid = chk.depth if chk.depth is not None else (refine_grid(depth, refine) if refine > 1 else depth)
    return plot_lensing_map(grid, lens_map, None, seg,
                            top_k=int(chk.agreement["k"]), out_path=path,
                            title="Where the wave focuses: the wave check's lensing factor\n"
                                  "(linear long-wave energy over the real / over the reference sea floor)",
                            no_value_label="Dry, or almost no wave",
                            segment_label="Ranked segment (the wave's lensing)")


def _run_scenario(run_dir: pathlib.Path) -> Scenario:
    """The scenario a run folder was made with (its ``scenario.toml``, read by the scenario parser)."""
    p = run_dir / "scenario.toml"
    if not p.is_file():
        raise DataFileError(f"{p}: missing; is {run_dir} a tsunamifocus run folder?")
    return parse_scenario(p)


def _run_manifest(run_dir: pathlib.Path) -> dict:
    """The run's manifest, or an empty dict when it has none readable (folders assembled by hand)."""
    try:
        return read_manifest(run_dir)
    except DataFileError:
        return {}


def _manifest_period_s(manifest: dict) -> float | None:
    """The source's dominant period [s] recorded in a run's manifest, or None."""
    try:
        p = float(manifest["extra"]["source_summary"]["period_s"])
    except (ValueError, KeyError, TypeError):
        return None
    return p if np.isfinite(p) and p > 0 else None


def run_wave_check(
    run_dir: str | pathlib.Path,
    *,
    out: str | pathlib.Path | None = None,
    overwrite: bool = False,
    hours: float | None = None,
    k: int = 10,
    progress: bool = True,
    force: bool = False,
    refine: int | str = AUTO_REFINE,
    nest: bool = NEST_DEFAULT,
) -> dict[str, Any]:
    """Run the wave-equation check of a finished run and write its outputs.

    Parameters
    ----------
    run_dir : path
        A folder written by ``tsunamifocus run`` / ``demo``.
    out : path, optional
        Output folder (default ``RUN_DIR/wave_check``).
    overwrite : bool
        Replace an existing output folder.
    hours : float, optional
        Simulated duration [h]; default ``1.2 x`` the latest first arrival of the segments + 1 h
        (:func:`~tsunamifocus.studies.check.default_check_duration_s`).
    k : int
        Top-k of the overlap statistic.
    progress : bool
        Messages and a progress bar on stderr.
    force : bool
        Run the wave solver beyond the work limit (``constants.WORK_LIMITS["wave_cell_updates"]``).
    refine : int or "auto"
        Solve the wave on the run's sea floor interpolated onto a grid this many times finer;
        ``"auto"`` (default): fine enough for the check's minimum of cells per dominant wavelength
        at the stop isobath (:func:`tsunamifocus.studies.check.compare_with_waves` ``refine``).
    nest : bool
        Refine only a box around the segments, one-way nested in the run's grid (False: refine the
        whole grid; :func:`tsunamifocus.studies.check.compare_with_waves` ``nest``).

    Returns
    -------
    dict
        The agreement statistics (``spearman``, ``kendall``, ``topk_overlap`` ...) and output paths.
    """
    run_dir = pathlib.Path(run_dir)
    if k < 1:
        raise InputError(f"--top {k}: expected k >= 1")
    if hours is not None and not hours > 0:
        raise InputError(f"--hours {hours}: expected a positive duration in hours")
    check_refine(refine, "--refine")  # before any output folder is made
    out_dir = pathlib.Path(out) if out is not None else run_dir / CHECK_FOLDER
    check_output_folder(out_dir, overwrite=overwrite, kind="wave_check", option="--out" if out else "check folder (--out)",
                        inputs=[("run file", run_dir / f) for f in ("layers.nc", "segments.csv", "scenario.toml",
                                                                     "manifest.json")])
    name, segments, layers = read_run(run_dir)
    manifest = _run_manifest(run_dir)
    for need in ("depth", "initial_sea_surface"):
        if need not in layers:
            raise DataFileError(f"{run_dir / 'layers.nc'}: has no '{need}' layer; re-run with this version")
    sc = _run_scenario(run_dir)
    stop_depth_m = sc.rays.stop_depth_m
    seg = segments.reset_index() if "segment_id" not in segments.columns else segments
    if progress:
        print(f"linear long-wave check of '{name}' (stop isobath {stop_depth_m:g} m) ...", file=sys.stderr)
    with OutputFolder(out_dir, overwrite=overwrite) as of:
        tmp = pathlib.Path(of.tmp_dir)
        chk = wave_check(layers["depth"], layers["initial_sea_surface"], seg, k=k, stop_depth_m=stop_depth_m,
                         reference_depth=layers.get("reference_depth"),
                         duration_s=None if hours is None else hours * 3600.0,
                         figure_path=tmp / "ray_vs_wave.png", progress=progress,
                         max_memory_bytes=sc.bathymetry.max_memory_gb * 1e9, refine=refine, nest=nest,
                         period_s=_manifest_period_s(manifest),
                         **({"max_cell_updates": None} if force else {}))
        amp = chk.wave.max_amplitude.copy()
        amp.name = "wave_max_amplitude"
        amp.attrs.update(units="m", long_name="maximum sea-surface elevation, linear long-wave solver")
        write_cog(amp, tmp / "wave_max_amplitude.tif", description="maximum sea-surface elevation (linear "
                  "long-wave check)", units="m")
        layers_out = {"wave_max_amplitude": amp}
        lens_map = write_wave_lensing(chk, tmp / "wave_lensing.tif")
        if lens_map is not None:
            layers_out["wave_lensing"] = lens_map
        write_netcdf(layers_out, tmp / "wave_check.nc",
                     title=f"tsunamifocus wave-equation check: {name}",
                     source="tsunamifocus linear long-wave solver (C grid, forward-backward)")
        table = pd.DataFrame(chk.table)
        write_check_table(table, tmp / "wave_segments.csv")
        ag = jsonable(chk.agreement)
        (tmp / "agreement.json").write_text(json.dumps(jsonable(ag), indent=2), encoding="utf-8")
        _appendix(tmp, run_dir, name, seg, chk, manifest)
        write_manifest(tmp / "manifest.json", output_dir=tmp, inputs={"run_layers": run_dir / "layers.nc",
                       "run_segments": run_dir / "segments.csv"},
                       extra={"wave_stats": jsonable(chk.wave.stats), "agreement": jsonable(ag)})
    if progress:
        print(chk.summary(), file=sys.stderr)  # ends with the cautions and the wave check's limits
        print(f"outputs: {out_dir}", file=sys.stderr)
    lens = ag.get("lensing") or {}
    sp, lsp = ag.get("spearman"), lens.get("spearman")
    print(f"spearman {sp if sp is None else round(sp, 3)}  top{k}_overlap {ag.get('topk_overlap')}"
          + (f"  lensing_spearman {lsp if lsp is None else round(lsp, 3)}  lensing_top{k}_overlap "
             f"{lens.get('topk_overlap')}" if lens else ""))
    return {"agreement": ag, "out": out_dir}


def write_wave_lensing(chk: WaveCheck, path: pathlib.Path) -> Any:
    """Write the wave's lensing map (:meth:`WaveCheck.lensing_map`) as a GeoTIFF with its QGIS style.

    The style is the lensing map's colour scale (diverging, log, symmetric about 1) over the map
    and the ranked segments' wave lensing. Returns the map, or None (and no file) without a
    reference run.
    """
    lens_map = chk.lensing_map()
    if lens_map is None:
        return None
    t = chk.table
    seg_vals = pd.to_numeric(t["wave_lensing"].where(t[_lens_col(t)]), errors="coerce").to_numpy(float)
    scale = dataclasses.replace(lensing_scale(lens_map.values, seg_vals), layer="wave_lensing",
                                title="Wave lensing factor (-), log scale; 1 = no focusing")
    write_cog(lens_map, path, description="wave lensing factor: linear long-wave energy (time integral of the "
              "squared elevation) over the real / over the reference sea floor", units="1", style=scale)
    return lens_map


def write_check_table(df: pd.DataFrame, path: pathlib.Path) -> pathlib.Path:
    """Write the check's per-segment table as CSV, cautions first (integer ranks as numbers)."""
    out = df.drop(columns=[c for c in ("geometry",) if c in df.columns])
    for c in out.columns:
        if isinstance(out[c].dtype, pd.api.extensions.ExtensionDtype) and out[c].dtype.kind in "iu":
            out[c] = out[c].astype("float64")
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(f"# CAUTION: {caution_summary()}\n")
        out.to_csv(fh, index=False)
    return path


def _appendix(tmp: pathlib.Path, run_dir: pathlib.Path, name: str, seg: pd.DataFrame,
              chk: Any, manifest: dict) -> None:
    """A supplement to the run's appendix: the cautions, the ranked table and the check section."""

    section = check_section(chk, {"ray_vs_wave": str(tmp / "ray_vs_wave.png"),
                                  **({"ray_vs_wave_lensing": str(chk.figure_lensing)} if chk.figure_lensing else {}),
                                  **({"ray_vs_wave_profile": str(chk.figure_profile)} if chk.figure_profile else {}),
                                  **({"wave_lensing_map": str(chk.figure_lensing_map)} if chk.figure_lensing_map
                                     else {})})
    desc = (manifest.get("parameters", {}) or {}).get("description", "")
    ctx = {
        "title": f"Wave-equation check of the ray screening: {name}",
        "subtitle": "Supplement to the planning-study appendix (screening level)",
        "scenario": {"name": name, "description": desc or f"Check of run folder {run_dir.name}"},
        "ranking": seg.drop(columns=[c for c in seg.columns if c == "wkt"]),
        "amplitude_ranking": "first" if amplitude_first(chk.agreement) else True,
        "wave_check": section,
    }
    build_appendix(ctx, tmp / "wave_check_appendix.html", tmp / "wave_check_appendix.pdf")


def check_section(chk: WaveCheck, figures: dict[str, str], table_file: str = "wave_segments.csv") -> dict[str, Any]:
    """The appendix section of a wave check: method text, agreement metrics, table and figures.

    ``table_file`` is the name of the file beside the appendix that holds every segment's row
    (``wave_segments.csv`` in a check folder, ``wave_check.csv`` in a run folder).
    """
    ag = jsonable(chk.agreement)
    st = chk.wave.stats
    k = ag.get("k", 10)

    def fmt(v: Any) -> str:
        return f"{v:.3f}" if isinstance(v, (int, float)) else "n/a"

    text = [
        "The same initial sea surface was propagated with the linear long-wave (shallow-water) equations on "
        + ("the same grid" if ag.get("refine", 1) <= 1 else
           f"the same sea floor interpolated onto a grid {ag['refine']} times finer (more cells per wavelength "
           "near the coast, no new detail"
           + (f"; only in a box around the segments ({ag['nest']['margin_km']:g} km of sea around them), "
              f"forced on its edges by the same wave solved on {nest_ocean_words(ag['nest'])} (one-way nesting)"
              if ag.get("nest") else "")
           + (f"; chosen for at least {ag['refine_choice']['min_cells_per_wavelength']:g} cells per dominant "
              "wavelength at the stop isobath" if ag.get("refine_choice") else "")
           + (f"; {ag['refine']} rather than {nested_instead_of(ag)} times finer, since a box "
              f"{ag['refine']} times finer costs less than the whole grid {nested_instead_of(ag)} "
              "times finer" if nested_instead_of(ag) else "")
           + ")")
        + ", over the unsmoothed sea floor and over the run's lensing reference (staggered C grid, "
        "forward-backward time stepping under the CFL condition, absorbing open boundaries, absorbing coast "
        "at the stop isobath). Like is compared with like on the segments the run ranks: the maximum "
        "elevation per segment with the ray-based indicative amplitude there, and the wave lensing factor "
        "(the ratio of the wave energies that passed the segment over the two oceans: the time integral of "
        "the squared elevation, energy as the rays count it) with the ray lensing factor.",
        "The wave solution includes diffraction, which ray theory leaves out: where they disagree, the "
        "ray ranking of that segment is not supported and should not be used on its own.",
    ]
    lens = ag.get("lensing") or {}

    def overlap(d: dict) -> Any:
        # "6/10" (segments in both top-k lists), as the summaries print it, not the fraction 0.6
        common, kk = d.get("topk_common"), d.get("k", k)
        return f"{common}/{kk}" if common is not None else d.get("topk_overlap")

    two = lens.get("n") is not None and lens.get("n") != ag.get("n")  # each ranking has its own segments
    metrics = {
        ("segments compared by amplitude (ranked by it)" if two else "segments compared (ranked)"): ag.get("n"),
        **({"segments compared by lensing factor (ranked by it)": lens.get("n")} if two else {}),
        "amplitude ranking: Spearman": fmt(ag.get("spearman")),
        "amplitude ranking: Kendall tau": fmt(ag.get("kendall")),
        f"amplitude ranking: top-{k} overlap": overlap(ag),
    }
    if lens:
        metrics.update({"lensing ranking: Spearman": fmt(lens.get("spearman")),
                        "lensing ranking: Kendall tau": fmt(lens.get("kendall")),
                        f"lensing ranking: top-{k} overlap": overlap(lens)})
    peak = ag.get("lensing_peak") or {}
    if peak:
        metrics["lensing ranking against the squared ratio of the wave maxima instead: Spearman (top-"
                f"{k} overlap)"] = f"{fmt(peak.get('spearman'))} ({overlap(peak)})"
    if ag.get("amplitude_ratio"):
        r = ag["amplitude_ratio"]
        metrics["wave maximum / ray amplitude: median (5-95 % of the segments)"] = \
            f"{r['median']:.2f} ({r['p5']:.2f}-{r['p95']:.2f})"
    res = ag.get("resolution") or {}
    if ag.get("refine", 1) > 1:
        metrics["wave grid"] = (f"the run's sea floor interpolated onto a grid {ag['refine']} times finer"
                                + (f" in a box around the segments ({ag['nest']['margin_km']:g} km of sea around "
                                   f"them), one-way nested in {nest_ocean_words(ag['nest'])}" if ag.get("nest") else ""))
    if res:
        metrics[f"cells per {res['period_s']:.0f} s wavelength at the stop isobath"] = fmt(res.get("cells_per_wavelength"))
    if ag.get("n_faint_wave"):
        metrics[f"ranked segments with almost no wave (below {100 * FAINT_WAVE_FRACTION:g} % of the median)"] = \
            ag["n_faint_wave"]
    metrics.update({"time step (s)": fmt(st.get("dt_s")),
                    "simulated time (h)": fmt(st.get("duration_s", float("nan")) / 3600),
                    "mass error (relative)": f"{st.get('mass_error', float('nan')):.1e}"})
    return {
        "text": text,
        "metrics": metrics,
        "table": _section_table(chk.table),
        "table_caption": f"Top 20 segments by the rays' amplitude (all segments: {table_file})",
        "figures": figures,
    }


#: Columns of the check's appendix table, with their headers.
_SECTION_COLUMNS = {"segment_id": "Segment", "name": "Name", "ray_value": "Ray amp (m)", "wave_amp_stop_m": "Wave amp (m)",
                    "rank_ray": "Rank ray", "rank_wave": "Rank wave", "ray_lensing": "Ray lens",
                    "wave_lensing": "Wave lens", "rank_ray_lensing": "Rank ray lens",
                    "rank_wave_lensing": "Rank wave lens"}


def _section_table(table: pd.DataFrame, n: int = 20) -> pd.DataFrame:
    """The check's top ``n`` segments by the ray amplitude ranking, values to 3 significant digits."""
    t = table.copy()
    if "rank_ray" in t:
        t = t.sort_values("rank_ray", na_position="last", kind="stable")
    named = "name" in t and t["name"].map(lambda v: isinstance(v, str) and v.strip() != "").any()
    cols = [c for c in _SECTION_COLUMNS if c in t.columns and (c != "name" or named)]
    t = t[cols].head(n)
    for c in ("ray_value", "wave_amp_stop_m", "ray_lensing", "wave_lensing"):
        if c in t:
            t[c] = [f"{v:.3g}" if np.isfinite(v) else "" for v in t[c].to_numpy(float)]
    return t.rename(columns=_SECTION_COLUMNS)
