"""The appendix context of a run: the numbers and tables the appendix shows."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from ..coast.coastline import line_length_m
from ..constants import ROTATIONS_PAST_PREDICTABILITY
from ..grid import GridInfo
from ..propagation.traveltime import isochrone_lines
from ..io.gis import _plain_dtypes, longitude_note
from ..studies.inspect import summarize_grid
from ..studies.ensemble import robustness_scale
from ..studies.run import SourceAnalysis
from .summaries import (UNCHECKED_RANKING, amplitude_first, capped_line, checked_ranking_note, fan_rotations,
                        fans_words, seed_agreement, step_text)

__all__ = []


def _fmt(v: Any, spec: str) -> str:
    """``v`` formatted with ``spec``; "n/a" for a missing (None) or non-finite value."""
    try:
        x = float(v)
    except (TypeError, ValueError):
        return "n/a"
    return format(x, spec) if np.isfinite(x) else "n/a"


def _report_context(a: SourceAnalysis, scenario: Any, depth: xr.DataArray, points: pd.DataFrame,
                    health: dict, figs: dict, ensemble: Any, extra_sections: dict | None, *,
                    choices: dict | None = None) -> dict:
    """The data the appendix needs (keys of tsunamifocus.report.CONTEXT_KEYS)."""
    f = a.focusing
    g = summarize_grid(depth)
    grid = {
        "file": str(scenario.bathymetry.path.name),
        "CRS": g["crs"],
        "geometry": "lon/lat on a sphere" if g["geographic"] else "projected plane",
        "size (rows x columns)": f"{g['shape'][0]} x {g['shape'][1]}",
        "spacing": f"{g['spacing_m'][0] / 1000:.3g} km x {g['spacing_m'][1] / 1000:.3g} km",
        "sea depth (median / max)": f"{_fmt(g.get('depth_median_m'), '.0f')} m / {_fmt(g.get('depth_max_m'), '.0f')} m",
        "long-wave speed (median)": f"{_fmt(g.get('speed_median_ms'), '.0f')} m/s",
    }
    lon_note = longitude_note(GridInfo.from_dataarray(depth))
    if lon_note:
        grid["GIS longitudes"] = lon_note
    sm = a.summary.to_dict()
    src = {"name": a.name}
    for label, key, spec in (("Mw", "mw", ".2f"), ("M0 (N m)", "m0_nm", ".3g"), ("mean slip (m)", "mean_slip_m", ".2f")):
        if sm.get(key) is not None:  # a point source has no magnitude, moment or slip: rows left out
            src[label] = _fmt(sm[key], spec)
    src.update({
        "max uplift / subsidence (m)": f"{_fmt(sm.get('max_uplift_m'), '.2f')} / {_fmt(sm.get('max_subsidence_m'), '.2f')}",
        "initial potential energy (J)": _fmt(sm.get("energy_J"), ".3g"),
        "displacement on land, left out (%)": _fmt(100 * (sm.get("land_share") or 0.0), ".1f"),
        "dominant wavelength (km)": _fmt(sm.get("wavelength_km"), ".0f"),
        "dominant period (min)": _fmt(a.period_s / 60, ".1f"),
        "rays": str(a.fan.n_rays) + (f" ({a.fan.rotations} rotations of a {a.fan.n_rays // a.fan.rotations}-ray fan)"
                                     if getattr(a.fan, "rotations", 1) > 1 else ""),
    })
    for i, note in enumerate(a.summary.notes):  # what the run summary prints as WARNING lines
        src["warning" if len(a.summary.notes) == 1 else f"warning {i + 1}"] = note
    for k, v in (sm.get("details") or {}).items():  # subfault table / sea-surface raster figures
        src[k.replace("_", " ")] = f"{v:.4g}" if isinstance(v, float) else str(v)
    for i, seg in enumerate(sm.get("segments", []) or []):
        if "strike_deg" not in seg:  # a point source: its hump
            src[f"hump {i + 1}"] = (f"radius {_fmt(seg.get('radius_km'), '.1f')} km, "
                                    f"amplitude {_fmt(seg.get('amplitude_m'), '.2f')} m")
            continue
        src[f"segment {i + 1}"] = (
            f"strike {_fmt(seg.get('strike_deg'), '.1f')} deg, dip {_fmt(seg.get('dip_deg'), '.1f')} deg, "
            f"rake {_fmt(seg.get('rake_deg'), '.0f')} deg, L {_fmt(seg.get('length_km'), '.0f')} km, "
            f"W {_fmt(seg.get('width_km'), '.0f')} km, top {_fmt(seg.get('top_depth_km'), '.1f')} km, "
            f"slip {_fmt(seg.get('slip_m'), '.2f')} m")
    ch = choices or {}

    def chosen(key: str, value: Any) -> Any:
        c = ch.get(key)
        if c is None or c.origin == "scenario":
            return value
        how = "command-line override" if c.origin == "override" else "default"
        return f"{_fmt_setting(value)} ({how}{': ' + c.why if c.why else ''})"

    settings = {
        "rays per source": chosen("rays", scenario.rays.count),
        "ray fan rotations averaged": (str(scenario.rays.rotations) if scenario.rays.rotations else
                                       f"{getattr(a.fan, 'rotations', 1)} (auto: {ROTATIONS_PAST_PREDICTABILITY} when "
                                       "the rays are past their predictability, else 1)"),
        "stop isobath (m)": scenario.rays.stop_depth_m,
        "time limit (h)": scenario.rays.max_time_h,
        "integration step": step_text(health),
        "reference low-pass (km)": f"{a.focusing.reference_smooth_km:.0f}"
        + ("" if scenario.focusing.reference_smooth_km else " (deep-water wavelength at the dominant period)"),
        "period bands (min: share)": ", ".join(f"{t / 60:.1f}: {w:.2f}" for t, w in a.focusing.bands),
        "segment length (km)": chosen("segment_km", scenario.coast.segment_km),
        "coastline from": str(scenario.coast.source),
        "coast of interest": _region_text(scenario, f.segments),
        "min ray tubes per reliable segment": scenario.coast.min_rays,
        "ray seed": scenario.rays.seed,
    }
    diag = f.diagnostics
    hl = {
        "rays traced": health["n_rays"],
        **{f"rays ending: {k}": f"{v:.1%}" for k, v in health["termination_fraction"].items()},
        "energy bookkeeping error": {"value": f"{health['energy_error_relative']:.2e}",
                                     "limit": f"{health['energy_tolerance']:.0e}",
                                     "ok": health["energy_error_relative"] <= health["energy_tolerance"]},
        "integration step": step_text(health),
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
    # the amplitude ranking beside the lensing factor's; first when the wave check held it and not the other
    ctx["amplitude_ranking"] = "first" if a.check is not None and amplitude_first(a.check.agreement) else True
    if a.check is None:
        ctx["ranking_note"] = f"This ranking was {UNCHECKED_RANKING[0]}; {UNCHECKED_RANKING[1]}."
    elif (note := checked_ranking_note(a.check.agreement)) is not None:
        ctx["ranking_note"] = note
    if (cl := capped_line(f.segments, a.check is not None, remedy=False)) is not None:
        if a.check is not None:
            rot = fan_rotations(f.segments)
            cl += f"; the wave check judged {fans_words(rot)}, and " + seed_agreement(rot)
        ctx["ranking_note"] = f"{ctx['ranking_note']} {cl}." if ctx.get("ranking_note") else f"{cl}."
    if a.travel_times is not None:
        ctx["travel_times"] = _travel_time_section(a, scenario, depth)
    if ensemble is not None:
        ctx["ensemble"] = _ensemble_section(ensemble, scenario)
    if extra_sections:
        ctx.update(extra_sections)
    return ctx


def _travel_time_section(a: SourceAnalysis, scenario: Any, depth: xr.DataArray) -> dict:
    """The first-arrival section: how the times were made and the isochrones written."""
    tt = a.travel_times
    info = GridInfo.from_dataarray(depth)
    iso = isochrone_lines(tt.travel_time_s, scenario.output.isochrone_step_min)
    rows = []
    for _, r in iso.iterrows():
        parts = list(getattr(r["geometry"], "geoms", [r["geometry"]]))
        km = sum(line_length_m(g, info) for g in parts) / 1000.0
        rows.append({"isochrone": r["label"], "minutes": f"{r['minutes']:g}", "hourly": "yes" if r["hourly"] else "",
                     "lines": len(parts), "length (km)": f"{km:,.0f}"})
    t = tt.travel_time_s.values
    latest = float(np.nanmax(t)) / 3600.0 if np.isfinite(t).any() else float("nan")
    return {
        "text": [
            "First arrivals solve the eikonal equation |grad T| = 1/c with c = sqrt(g h) by second-order fast "
            "marching on the grid itself (Huygens' principle: every place connected by water deeper than the "
            f"stop isobath ({scenario.rays.stop_depth_m:g} m) gets the earliest time of any path, behind islands "
            "included). " + ("On a lon/lat grid the solver works on the sphere (cell widths R cos(lat) dlon), "
                             "across the 0/360 seam when the grid spans the globe. " if info.geographic else "")
            + f"Initial front: {tt.stats.get('initial_front', '')}. The travel-time layer, the segments' "
            "first arrivals (earliest time along each segment's stretch of the stop isobath) and the points' "
            "first arrivals come from it; the segments' ray_arrival_s column (earliest ray ending at the "
            "segment) is a diagnostic of the ray fan only.",
            "Long-wave times run slightly early on trans-ocean paths (about 1-2 % beyond 10,000 km; Watada et "
            "al. 2014). Isochrones are written to isochrones.gpkg and isochrones.geojson (fields minutes, "
            "hours, label, hourly).",
        ],
        "metrics": {"solver time (s)": f"{tt.stats.get('elapsed_s', float('nan')):.2f}",
                    "sea cells reached": f"{tt.stats.get('n_reached', 0):,}",
                    "cells of the initial front": f"{tt.stats.get('n_front', 0):,}",
                    "latest first arrival on the grid (h)": f"{latest:.2f}",
                    "isochrone interval (min)": f"hourly and every {scenario.output.isochrone_step_min:g}"},
        "table": pd.DataFrame(rows, columns=["isochrone", "minutes", "hourly", "lines", "length (km)"]),
        "table_caption": "Isochrones written to the GIS files",
    }


def _fmt_setting(v: Any) -> str:
    return f"{v:g}" if isinstance(v, float) else str(v)


def _region_text(scenario: Any, seg: pd.DataFrame) -> str:
    c = scenario.coast
    n_all = int(seg.attrs.get("n_segments_all", len(seg)))
    parts = []
    if getattr(c, "region", None) is not None:
        b = c.region
        parts.append(f"lon {b[0]:g} to {b[2]:g}, lat {b[1]:g} to {b[3]:g}")
    if getattr(c, "region_file", None) is not None:
        parts.append(f"inside {c.region_file.name}")
    if not parts:
        return f"the whole coastline ({len(seg)} segments)"
    return "; ".join(parts) + f" ({len(seg)} of {n_all} segments)"


def _ensemble_perturbations(e: Any) -> str:
    """What an ensemble's members perturb, in words (perturbations of zero width left out)."""
    parts = []
    if e.bathy_rms > 0:
        parts.append(f"perturb the bathymetry by smooth Gaussian-correlated depth errors of {100 * e.bathy_rms:g} % "
                     f"rms (correlation length {e.bathy_corr_km:g} km)")
    src = [f"{name} +/- {v:g}{unit}" for name, v, unit in (
        ("strike", e.strike_deg, " deg"), ("dip", e.dip_deg, " deg"), ("along-strike", e.along_km, " km"),
        ("across-strike", e.across_km, " km"), ("magnitude", e.magnitude, "")) if v > 0]
    if src:
        parts.append("perturb the source within " + ", ".join(src))
    if e.launch_jitter_deg > 0:
        parts.append(f"rotate the ray fan by up to +/- {e.launch_jitter_deg:g} deg")
    if not parts:
        return "repeat the unperturbed case (no perturbation is set)"
    return ", ".join(parts[:-1]) + (" and " if len(parts) > 1 else "") + parts[-1]


#: Headers of the ensemble tables' columns.
_ENSEMBLE_HEADERS = {"segment_id": "segment", "lensing_factor": "lensing (median)", "lensing_lo": "lensing 5 %",
                     "lensing_hi": "lensing 95 %", "amp_1m_m": "amp. at 1 m (median, m)", "amp_lo": "amp. 5 %",
                     "amp_hi": "amp. 95 %", "robustness_amp": "robustness"}


def _robust_table(ordered: pd.DataFrame, rows: int, cols: tuple[str, ...], top_k: int) -> pd.DataFrame:
    """The first ``rows`` segments of ``ordered`` with ``cols`` (those present), numbers to two
    decimals, headed for the appendix (``p_topk*`` as ``P(top k)``)."""
    cols = [c for c in ("segment_id", *cols) if c in ordered]
    top = ordered.head(rows)[cols].copy()
    for c in top.columns:
        if top[c].dtype.kind == "f":
            top[c] = top[c].map(lambda v: f"{v:.2f}" if np.isfinite(v) else "")
    return top.rename(columns={**_ENSEMBLE_HEADERS, "p_topk": f"P(top {top_k})", "p_topk_amp": f"P(top {top_k})"})


def _ensemble_section(ens: Any, scenario: Any) -> dict:
    e = scenario.ensemble
    seg = ens.segments.reset_index()
    k = scenario.output.top_k
    top = _robust_table(seg.sort_values("p_topk", ascending=False), k,
                        ("lensing_factor", "lensing_lo", "lensing_hi", "amp_1m_m", "amp_lo", "amp_hi", "p_topk",
                         "robustness"), ens.top_k)
    more = []
    if "p_topk_amp" in seg:
        top_a = _robust_table(seg.sort_values(["p_topk_amp", "amp_1m_m"], ascending=False, kind="stable",
                                              na_position="last"), k,
                              ("amp_1m_m", "amp_lo", "amp_hi", "lensing_factor", "p_topk_amp", "robustness_amp"),
                              ens.top_k)
        more.append({"table": top_a, "caption": f"Segments most often among the top {ens.top_k} by indicative "
                                                "amplitude"})
    return {
        "text": [
            f"{ens.n_members} members {_ensemble_perturbations(e)}. Member 0 is the unperturbed case.",
            "Per segment: median and 5-95 % interval of the lensing factor and indicative amplitude over the "
            f"members, and the probability of ranking among the top {ens.top_k} ({robustness_scale()}; "
            "the calibrated likelihood terms of hazard and climate assessments), by lensing factor and by "
            "indicative amplitude.",
        ],
        "metrics": {"members": ens.n_members, "failed": len(ens.failures),
                    "members per minute": _fmt(ens.timings.get('members_per_minute'), '.1f'),
                    "scheduler": str(ens.scheduler.get("kind", ""))},
        "table": top,
        "table_caption": f"Segments most often among the top {ens.top_k} by lensing factor",
        "more_tables": more,
    }


def validation_summary() -> list[dict]:
    """The checks the test suite makes against outside references, with the grid each was measured on.

    Only what the tests assert is listed (the criterion is the test's tolerance); the test files
    name each reference beside the check.
    """
    return [
        {"check": "Long-wave speed c = sqrt(g h) at 4 km depth", "reference": "Berry (2007) Proc. R. Soc. A 463",
         "grid": "3 x 4 cells, 4 km deep", "criterion": "198.1 m/s within 0.05 m/s"},
        {"check": "Straight rays and travel time on constant depth", "reference": "analytic",
         "grid": "plane, 120 x 200 cells of 1 km", "criterion": "1e-6 relative"},
        {"check": "Great-circle rays on a constant-depth sphere", "reference": "pyproj.Geod (sphere)",
         "grid": "global, 1 deg", "criterion": "< 0.1 km over 5,000 km"},
        {"check": "Snell's and Bouguer's invariants", "reference": "classical ray optics",
         "grid": "plane, 1 km cells", "criterion": "1e-6 / 1e-5 relative"},
        {"check": "Geometrical spreading q = c t; Green's law h^(-1/4)", "reference": "Cerveny (2001); Green (1838)",
         "grid": "plane, 1 km cells", "criterion": "1e-9 / 1e-3 relative"},
        {"check": "Ray first arrivals vs an eikonal solution (plane wave, random depth)",
         "reference": "scikit-fmm fast marching", "grid": "plane, 220 x 200 cells of 1 km",
         "criterion": "max 1 %, median 0.1 %"},
        {"check": "Eikonal first arrivals, constant depth on the sphere (seam, poles)",
         "reference": "pyproj.Geod great circle / c", "grid": "global, 0.25 and 0.5 deg",
         "criterion": "within 0.5 %"},
        {"check": "Eikonal first arrivals behind a round island (shadow filled)",
         "reference": "analytic shortest path around a disc", "grid": "plane, 401 x 401 cells of 1 km",
         "criterion": "within 1 %"},
        {"check": "Eikonal first arrivals on real bathymetry, open ocean and coastal places",
         "reference": "scikit-fmm on a Mercator grid", "grid": "ETOPO1 Pacific, 0.2 deg and 0.4 deg",
         "criterion": "within 2 %"},
        {"check": "Eikonal first arrivals of historical trans-ocean tsunamis (2011, 1960, 2010)",
         "reference": "observed first arrivals at tide gauges (values from memory)",
         "grid": "ETOPO1 global, 0.2 deg", "criterion": "within 5 %"},
        {"check": "Distance to first caustic ~ eps^(-2/3)", "reference": "Kaplan (2002) PRL 89:184103",
         "grid": "plane, 200 x 1500 cells of 1 km", "criterion": "exponent within 0.1"},
        {"check": "Okada sea-floor displacement", "reference": "Okada (1985) BSSA 75, Table 2",
         "grid": "points of the table", "criterion": "half a unit of the table's last digit"},
        {"check": "Moment magnitude", "reference": "Hanks & Kanamori (1979)", "grid": "none",
         "criterion": "round trip"},
        {"check": "Linear long-wave solver: spreading, shoaling, mass", "reference": "linear long-wave theory; "
         "Green (1838)", "grid": "see docs/wave_check.md", "criterion": "see docs/wave_check.md"},
    ]
