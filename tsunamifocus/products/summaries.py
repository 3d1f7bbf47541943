"""Plain-text summaries: of a grid (inspect) and of a finished run."""

from __future__ import annotations

import math
import pathlib

import numpy as np
import pandas as pd

from ..cautions import caution_summary
from ..focusing.ranking import CAPPED_SHARE_NOTE, capped_share, ranked_mask, ranked_values
from ..ocean.wavelength import WAVELENGTH_FRACTION
from ..studies.run import RunResult
from ..studies.check import (AMPLITUDE_RATIO_FACTOR, FAINT_WAVE_FRACTION, MIN_CELLS_PER_WAVELENGTH, nest_ocean_words,
                             nested_instead_of, compared_words)

__all__ = ['format_summary', 'step_text']


def step_text(health: dict) -> str:
    """The ray integration step of a run's health record: one step, or the range of local steps."""
    hi = health.get("max_step_s")
    if hi:
        return f"{health['step_s']:.0f}-{hi:.0f} s (each ray's own cell and speed)"
    return f"{health['step_s']:.2f} s"


def _fmt_bytes(b: float) -> str:
    for unit in ("B", "KB", "MB", "GB", "TB"):
        if b < 1000 or unit == "TB":
            return f"{b:.0f} {unit}" if unit == "B" else f"{b:.1f} {unit}"
        b /= 1000.0
    return f"{b:.1f} TB"  # pragma: no cover


def _fmt_period(s: float) -> str:
    if not math.isfinite(s):
        return "no limit found"
    return f"{s:.0f} s ({s / 60:.1f} min)"


def format_summary(s: dict) -> str:
    """Format :func:`summarize_grid` output as readable text."""
    ext = s["extent"]
    u = "deg" if s["geographic"] else "m"
    lines = [
        f"file            {s.get('file') or '-'}",
        f"format          {s['format']}",
        *([f"sign            {s['sign_decided_by']}"] if s.get("sign_decided_by") else []),
        f"CRS             {s['crs']}" + (f" (EPSG:{s['crs_epsg']})" if s.get("crs_epsg") else ""),
        f"geometry        {'geographic lon/lat on a sphere' if s['geographic'] else 'projected plane (metres)'}"
        + (", wraps in longitude" if s["lon_periodic"] else ""),
        f"size            {s['shape'][0]} rows x {s['shape'][1]} columns",
        f"extent          x {ext[0]:.6g} .. {ext[2]:.6g} {u}, y {ext[1]:.6g} .. {ext[3]:.6g} {u}",
        f"spacing         {s['spacing'][0]:.6g} x {s['spacing'][1]:.6g} {u}"
        f"  (~{s['spacing_m'][0] / 1000:.3g} km x {s['spacing_m'][1] / 1000:.3g} km"
        + (" at mid latitude)" if s["geographic"] else ")"),
        f"sea / land / nodata  {s['sea_fraction']:.1%} / {s['land_fraction']:.1%} / {s['nodata_fraction']:.1%}",
    ]
    if "depth_min_m" in s:
        lines += [
            f"depth (sea)     min {s['depth_min_m']:.1f} m, median {s['depth_median_m']:.0f} m, "
            f"mean {s['depth_mean_m']:.0f} m, max {s['depth_max_m']:.0f} m",
            f"long-wave speed {s['speed_min_ms']:.1f} .. {s['speed_max_ms']:.1f} m/s "
            f"(median {s['speed_median_ms']:.0f} m/s = {s['speed_median_ms'] * 3.6:.0f} km/h; c = sqrt(g h), "
            f"g = {s['gravity']} m/s2)",
            f"ray theory      periods from {_fmt_period(s['shortest_period_s'])} "
            f"to {_fmt_period(s['longest_ray_period_s'])}",
            f"                ({s['period_rule']})",
            f"                on this grid as it is; a run traces each period band over the sea floor averaged "
            f"over {WAVELENGTH_FRACTION:g} of the band's wavelength (docs/focusing.md)",
        ]
    lines += [
        f"memory          grid {_fmt_bytes(s['memory_grid_bytes'])}, loading ~{_fmt_bytes(s['memory_load_bytes'])}, "
        f"ray tracing ~{_fmt_bytes(s['memory_trace_bytes'])} plus rays",
    ]
    return "\n".join(lines)


def _place(r) -> str:
    """``"41.75N 124.20W"`` (and the name when there is one) of a segment row."""
    lat, lon = float(r.get("lat_mid", np.nan)), float(r.get("lon_mid", np.nan))
    nm = r.get("name", "")
    where = ""
    if math.isfinite(lat) and math.isfinite(lon):
        lon = ((lon + 180.0) % 360.0) - 180.0
        where = f"{abs(lat):.2f}{'N' if lat >= 0 else 'S'} {abs(lon):.2f}{'E' if lon >= 0 else 'W'}"
    if isinstance(nm, str) and nm.strip():
        return f"{nm.strip()}, {where}" if where else nm.strip()
    return where


def seg_sigma_km(seg: pd.DataFrame) -> np.ndarray:
    """Fresnel regularisation width at each segment [km] (or 2 segment lengths where unknown)."""
    if "fresnel_sigma_m" in seg:
        v = seg["fresnel_sigma_m"].to_numpy(dtype=float) / 1000.0
        if np.isfinite(v).any():
            return v
    return 2.0 * seg["length_m"].to_numpy(dtype=float) / 1000.0


#: Below this Spearman correlation with the wave a ranking is called weak in the summary (a rank
#: correlation under 0.5 is weak agreement: common practice, no source); below this share of its
#: top k among the wave's top k it is called weak at the top (the hotspots a reader acts on).
WEAK_AGREEMENT: float = 0.5


def fan_rotations(seg: pd.DataFrame) -> int:
    """Rotated ray fans a segments table was averaged over (``attrs["rotations"]``; 1 when unset)."""
    return int(seg.attrs.get("rotations", 1) or 1)


def fans_words(rotations: int) -> str:
    """What a wave check judged: "this ray fan", or "these fans" for rotated fans averaged."""
    return "these fans" if rotations > 1 else "this ray fan"


def capped_line(seg: pd.DataFrame, checked: bool, remedy: bool = True) -> str | None:
    """The summary's sentence on rays past their predictability, or None below CAPPED_SHARE_NOTE
    (``remedy``: end with where to see how far the rankings hold). It says whether the run
    averaged rotated ray fans (``seg.attrs["rotations"]``, from the focusing stage)."""
    cs = capped_share(seg)
    if cs is None or cs < CAPPED_SHARE_NOTE:
        return None
    rot = fan_rotations(seg)
    text = (f"{100 * cs:.0f} % of the energy reaching the ranked segments came in ray tubes wider than their first "
            "Fresnel zone (rays past their predictability, as across an ocean): "
            + (f"the run averaged {rot} rotated ray fans, and segment amplitudes still scatter by "
               f"{SEED_SCATTER[1]} between ray seeds (one fan: {SEED_SCATTER[0]})" if rot > 1 else
               "segment values scatter by tens of percent between ray seeds"))
    if not remedy:
        return text
    return text + (f"; the wave check says how far the rankings hold for {fans_words(rot)}, and {seed_agreement(rot)}"
                   if checked else "; 'tsunamifocus check RUN' says how far the "
                   "rankings hold")


#: Measured scatter of the segments' indicative amplitudes between ray seeds on the trans-Pacific
#: case (rms of the log ratio over pairs of seeds, docs/focusing.md): one fan, four rotated fans.
SEED_SCATTER: tuple[str, str] = ("about 16 %", "about 7 %")


def seed_agreement(rotations: int = 1) -> str:
    """Said with a checked run whose rays are past their predictability: the check judged one draw
    of the ray fan(s), and how far that agreement moves between ray seeds (measured, docs/focusing.md)."""
    if rotations > 1:
        return ("that agreement varies between ray seeds too (amplitude Spearman 0.81-0.84 over eight seeds with four "
                "rotated fans on a trans-Pacific case, 0.75-0.86 with one fan; docs/focusing.md)")
    return ("that agreement varies between ray seeds too (amplitude Spearman 0.75-0.86 over eight seeds on "
            "a trans-Pacific case, docs/focusing.md)")


#: How to read a lensing factor no wave check confirmed (run summaries, appendices, source sets).
LENSING_QUALITATIVE: str = ("read the lensing factor as qualitative (the project's checks hold the amplitude "
                            "ranking more closely; docs/focusing.md)")

#: Said of a run's rankings when no wave check was run (summary and appendix): what, and the remedy.
UNCHECKED_RANKING: tuple[str, str] = (
    "not checked against the linear long-wave solver: " + LENSING_QUALITATIVE,
    "'tsunamifocus check RUN' compares both rankings with the wave on this grid")


def _weakness(a: dict | None) -> str:
    """Why a measured agreement with the wave is weak ("" when it is not, or not measured).

    Weak: a Spearman correlation below :data:`WEAK_AGREEMENT`, or fewer than that share of the
    ranking's top k among the wave's top k (a ranking can hold as a whole, Spearman 0.90, while
    its top ten shares 3 segments with the wave's, as on the real-grid benchmark case at 0.1 deg).
    """
    rho = a.get("spearman", np.nan) if a else np.nan
    if not np.isfinite(rho):
        return ""
    if rho < WEAK_AGREEMENT:
        return "the wave does not confirm this ranking"
    k, common = a.get("k"), a.get("topk_common")
    if k and common is not None and common < WEAK_AGREEMENT * k:
        return f"fewer than half of its top {k} are among the wave's"
    return ""


def _is_weak(a: dict | None) -> bool:
    """A measured agreement with the wave that :func:`_weakness` calls weak."""
    return bool(_weakness(a))


def _agreement_text(a: dict | None) -> str:
    """``"Spearman 0.90, top-10 overlap 3/10"`` (or "not measurable") of one ranking against the wave."""
    return (f"Spearman {a['spearman']:.2f}, top-{a['k']} overlap {a['topk_common']}/{a['k']}"
            if a and np.isfinite(a.get("spearman", np.nan)) else "not measurable")


def _unconverged_cells(ag: dict) -> float | None:
    """The check's cells per wavelength at the stop isobath when below the converged minimum, else None."""
    cpw = (ag.get("resolution") or {}).get("cells_per_wavelength", np.nan)
    return float(cpw) if np.isfinite(cpw) and cpw < MIN_CELLS_PER_WAVELENGTH else None


def _check_lines(ag: dict) -> list[str]:
    """How far the rankings held against the linear long-wave check."""
    held = _agreement_text

    def weak(a: dict) -> str:
        why = _weakness(a)
        return f" - weak: {why}" if why else ""

    out = [f"  wave check (linear long-wave solver, unsmoothed sea floor) on {compared_words(ag)}:",
           f"    amplitude ranking against the wave's maxima: {held(ag)}{weak(ag)}"]
    if ag.get("lensing"):
        out.append(f"    lensing ranking against the wave's energy:   {held(ag['lensing'])}{weak(ag['lensing'])}")
        if amplitude_first(ag):
            out.append("    rank this coast with the amplitude ranking, not the lensing factor (docs/focusing.md)")
        if _weakness(ag["lensing"]):
            out.append("    where the wave itself focuses: wave_lensing.tif and figures/wave_lensing_map.png")
    if ag.get("amplitude_ratio"):
        out.append(f"    size: {_size_text(ag)}" + ("; read amplitudes from the wave check" if _size_off(ag) else ""))
    if ag.get("n_faint_wave"):
        out.append(f"    {ag['n_faint_wave']} of the segments got almost no wave in the check (below "
                   f"{100 * FAINT_WAVE_FRACTION:g} % of the median: a narrow passage or sheltered water the wave barely "
                   "reaches on this grid); see them along the coast in figures/ray_vs_wave_profile.png")
    cpw = _unconverged_cells(ag)
    if cpw is not None:
        out.append(f"    the check had {cpw:.1f} cells per {ag['resolution']['period_s']:.0f} s wavelength at the stop isobath "
                   f"(fewer than {MIN_CELLS_PER_WAVELENGTH:g}): its coastal maxima are not converged; re-run it on a "
                   f"finer grid ({_refine_hint(ag)}) before reading these figures (docs/wave_check.md)")
    elif ag.get("refine", 1) > 1:
        out.append(f"    the wave was solved on the run's sea floor interpolated onto a grid {ag['refine']} times finer"
                   + (f" in a box around the coast, one-way nested in {nest_ocean_words(ag['nest'])}"
                      if ag.get("nest") else "")
                   + (f" ({ag['refine']} rather than {nested_instead_of(ag)}: a box that fine costs less than the "
                      "whole grid)" if nested_instead_of(ag) else "")
                   + (f" ({ag['resolution']['cells_per_wavelength']:.1f} cells per dominant wavelength at the "
                      "stop isobath)" if ag.get("resolution") else ""))
    return out


def _size_text(ag: dict) -> str:
    """The wave's maxima against the rays' indicative amplitudes, in words (needs ``amplitude_ratio``)."""
    r = ag["amplitude_ratio"]
    return (f"the wave's maxima are a median {r['median']:.2f} times the rays' indicative amplitudes "
            f"(5-95 % of the segments {r['p5']:.2f}-{r['p95']:.2f})")


def _size_off(ag: dict | None) -> bool:
    """The check found the rays' amplitudes more than AMPLITUDE_RATIO_FACTOR off the wave's (median)."""
    r = (ag or {}).get("amplitude_ratio")
    return bool(r) and not 1 / AMPLITUDE_RATIO_FACTOR <= r["median"] <= AMPLITUDE_RATIO_FACTOR


def _refine_hint(ag: dict) -> str:
    """What to run for a converged check, given why the last one was not."""
    lim = (ag.get("refine_choice") or {}).get("limited_by")
    if lim in ("memory", "work"):
        return (f"the {lim} limit held it to {ag.get('refine', 1)} times finer: raise [bathymetry] max_memory_gb "
                "or use tsunamifocus check RUN --force, or crop the grid")
    if lim == "largest factor":
        return "even the finest grid the check makes has too few cells: the coast needs a finer run grid"
    return "tsunamifocus check RUN --refine auto, the default"


def checked_ranking_note(ag: dict | None) -> str | None:
    """A note for under the appendix's ranking table when the wave check found the ranking weak.

    The lensing ranking's weakness in words, with the amplitude ranking's figures when the check
    held that one (:func:`amplitude_first`) and the check's own resolution when it was not
    converged; and, when the wave's maxima are more than ``AMPLITUDE_RATIO_FACTOR`` off the
    rays' indicative amplitudes, their size. None when there is nothing to say.
    """
    lens = (ag or {}).get("lensing")
    why = _weakness(lens)
    size = (f" In size, {_size_text(ag)}: read amplitudes from the wave check section, not from this table."
            if _size_off(ag) else "")
    if not why:
        return size.strip() or None
    text = (f"The linear long-wave check found this lensing ranking weak: {why} ({_agreement_text(lens)}; "
            "see the wave check section).") + size
    if amplitude_first(ag):
        text += f" It held the amplitude ranking ({_agreement_text(ag)}): rank this coast by indicative amplitude."
    elif _is_weak(ag):
        text += f" The amplitude ranking is weak too: {_weakness(ag)}."
    cpw = _unconverged_cells(ag)
    if cpw is not None:
        text += (f" The check had {cpw:.1f} cells per wavelength at the stop isobath (fewer than "
                 f"{MIN_CELLS_PER_WAVELENGTH:g}): refine it ({_refine_hint(ag)}) before reading "
                 "these figures.")
    return text


def amplitude_first(ag: dict | None) -> bool:
    """The check held the amplitude ranking and found the lensing ranking weak."""
    if not ag or not ag.get("lensing"):
        return False
    return _is_weak(ag["lensing"]) and bool(np.isfinite(ag.get("spearman", np.nan))) and not _is_weak(ag)


def amplitude_lines(seg: pd.DataFrame, ag: dict | None = None) -> list[str]:
    """The segments with the largest indicative amplitude (summary lines).

    Three on one line; when the wave check held the amplitude ranking but not the lensing ranking
    (``ag``), the top five with their 5-95 % intervals, lensing factor and first arrival, as the
    ranking to read.
    """
    if "rank_amplitude" not in seg:
        return []
    first = amplitude_first(ag)
    by_amp = seg[seg["rank_amplitude"].notna()].sort_values("rank_amplitude").head(5 if first else 3)
    if not len(by_amp):
        return []
    if not first:
        return ["  largest indicative amplitude at 1 m depth (Green's law, indicative only): " + ", ".join(
            f"{r['segment_id']} {r['amp_1m_m']:.2f} m" for _, r in by_amp.iterrows())]
    out = [f"  top {len(by_amp)} by indicative amplitude at 1 m depth (5-95 % interval; Green's law, indicative "
           "only) - the ranking the wave check held:"]
    for _, r in by_amp.iterrows():
        fa = r.get("first_arrival_s", np.nan)
        out.append(f"    #{int(r['rank_amplitude']):>2} {r['segment_id']:>6} ({_place(r)})  {r['amp_1m_m']:.2f} m "
                   f"[{r.get('amp_lo', np.nan):.2f}-{r.get('amp_hi', np.nan):.2f}]  lensing "
                   f"{r.get('lensing_factor', np.nan):.2f}"
                   + (f"  first arrival {fa / 60:.0f} min" if np.isfinite(fa) else ""))
    return out


def settings_lines(result: RunResult) -> list[str]:
    """What the run chose for the settings the scenario left open, and why (summary lines)."""
    sc = result.scenario
    ch = result.choices or {}
    out = []
    if "rays" in ch:
        out.append(f"ray count per source: {ch['rays'].describe('rays')}")
    if "segment_km" in ch:
        out.append(f"segment length: {ch['segment_km'].describe('km')}")
    a = result.analyses[0] if result.analyses else None
    if a is not None:
        seg = a.focusing.segments
        n_all = int(seg.attrs.get("n_segments_all", len(seg)))
        reg = sc.coast
        if getattr(reg, "region", None) is not None or getattr(reg, "region_file", None) is not None:
            box = reg.region
            what = (f"lon {box[0]:g}..{box[2]:g}, lat {box[1]:g}..{box[3]:g}" if box is not None else "")
            if getattr(reg, "region_file", None) is not None:
                what = (what + "; " if what else "") + f"inside {pathlib.Path(reg.region_file).name}"
            out.append(f"coast of interest: {what} ({len(seg)} of {n_all} segments; rays travel the whole grid)")
        else:
            out.append(f"coast of interest: the whole coastline ({len(seg)} segments)")
    return out


def _no_reliable_line(f, min_rays: int) -> str:
    seg = f.segments
    n = np.asarray(seg["n_rays"], dtype=float) if "n_rays" in seg else np.zeros(len(seg))
    nref = np.asarray(seg["ref_n_rays"], dtype=float) if "ref_n_rays" in seg else n
    both = np.fmin(n, nref) if len(seg) else n
    best = int(np.nanmax(both)) if both.size else 0
    reached = int((n > 0).sum())
    return (f"  no reliable segment: none of the {len(seg)} segments of the coast of interest has >= {min_rays} "
            f"contributing rays in the real and reference runs ({reached} segments were reached, the best by "
            f"{best} rays); there is no ranking. Trace more rays ([rays] count or --rays) or use longer "
            "segments ([coast] segment_km)")


def format_run_summary(result: RunResult) -> str:
    """Short end-of-run summary: settings and why, top hotspots, points, timings, outputs, cautions."""
    lines = ["", "== tsunamifocus run summary: " + str(result.scenario.name)]
    lines += settings_lines(result)
    for a in result.analyses:
        f = a.focusing
        lines.append(f"source {a.name}: {a.summary.headline}, "
                     f"dominant period {a.period_s / 60:.1f} min")
        lines += [f"  WARNING: {n}" for n in a.summary.notes]
        h = result.health[a.name]
        tf = ", ".join(f"{k} {v:.1%}" for k, v in h["termination_fraction"].items() if v > 0)
        rot = int(h.get("fan_rotations", 1) or 1)
        rot_txt = f" in {rot} rotated fans" if rot > 1 else ""
        lines.append(f"  rays: {h['n_rays']}{rot_txt} ({tf}); energy bookkeeping error {h['energy_error_relative']:.2e}"
                     f" (limit {h['energy_tolerance']:.0e})")
        lines.append(f"  integration step {step_text(h)}, steps per ray {h['steps_per_ray_mean']:.0f} mean / "
                     f"{h['steps_per_ray_max']:.0f} max; rays stopped in NaN holes or on land "
                     f"{h['nan_or_land_fraction']:.2%}")
        tts = getattr(a, "travel_times", None)
        if tts is not None and "first_arrival_s" in f.segments:
            fa = pd.to_numeric(f.segments["first_arrival_s"], errors="coerce").to_numpy(float)
            n_none = int((~np.isfinite(fa)).sum())
            lines.append(f"  first arrivals: eikonal equation by fast marching ({tts.stats['elapsed_s']:.1f} s)"
                         + (f"; {n_none} of {len(fa)} segments not joined to the source by water deeper than the "
                            "stop isobath on this grid: no first arrival" if n_none else ""))
        rk = f.ranking
        rel = rk[ranked_mask(rk)]
        if len(rel) == 0:
            lines.append(_no_reliable_line(f, int(result.scenario.coast.min_rays)))
        else:
            shown = min(5, len(rel))
            n_rel = int(ranked_mask(f.segments).sum())
            lines.append(f"  top {shown} hotspots by lensing factor (5-95 % interval), of {n_rel} reliable "
                         f"among {len(f.segments)} segments:")
        edge_km = 2.0 * float(np.nanmedian(seg_sigma_km(f.segments))) if len(f.segments) else 0.0
        for _, r in rel.head(min(5, len(rel))).iterrows():
            near = r.get("edge_distance_km", np.inf) < edge_km
            lines.append(f"    #{int(r['rank_lensing']):>2} {r['segment_id']:>6} ({_place(r)})  lensing "
                         f"{r['lensing_factor']:.2f} [{r['lensing_lo']:.2f}-{r['lensing_hi']:.2f}]  indicative "
                         f"amplitude at 1 m {r['amp_1m_m']:.2f} m  first arrival {r['first_arrival_s'] / 60:.0f} min"
                         + (f"  (within {edge_km:.0f} km of the grid edge: rays from beyond it are missing)"
                            if near else ""))
        cl = capped_line(f.segments, a.check is not None)
        if cl is not None:
            lines.append("  " + cl)
        if a.check is not None:
            lines.extend(_check_lines(a.check.agreement))
        elif len(rel):
            lines += ["  " + UNCHECKED_RANKING[0], "    " + UNCHECKED_RANKING[1]]
        lines.extend(amplitude_lines(f.segments, a.check.agreement if a.check is not None else None))
        pts = result.points.get(a.name)
        if pts is not None and len(pts):
            warn = list(pts.attrs.get("warnings", []))
            lim = pts.attrs.get("max_distance_km")
            ok = int((pts["note"] == "").sum()) if "note" in pts else len(pts)
            lines.append(f"  points of interest: {ok} of {len(pts)} with every value"
                         + (f" (search radius {lim:g} km for the sea cell and the segment read)" if lim else ""))
            for w in warn:
                lines.append(f"    WARNING: {w}")
    if result.ensemble is not None:
        e = result.ensemble
        lines.append(f"ensemble: {e.n_members} members, {len(e.failures)} failed")
        es = e.segments
        if "p_topk" in es:
            top = es.sort_values("p_topk", ascending=False).head(5)
            lines.append(f"  most robust hotspots by lensing factor, P(top {e.top_k}): " + ", ".join(
                f"{sid} {r['p_topk']:.2f} ({r.get('robustness', '')})" for sid, r in top.iterrows()))
        if "p_topk_amp" in es:
            top = es.sort_values("p_topk_amp", ascending=False, kind="stable").head(5)
            lines.append(f"  most robust hotspots by amplitude, P(top {e.top_k}): " + ", ".join(
                f"{sid} {r['p_topk_amp']:.2f} ({r.get('robustness_amp', '')})" for sid, r in top.iterrows()))
    if result.timings:
        lines.append("timings: " + ", ".join(f"{k} {v:.1f} s" for k, v in result.timings.items()))
    if result.out_dir is not None:
        lines.append(f"outputs: {result.out_dir}")
    lines.append("CAUTION: " + caution_summary())
    return "\n".join(lines)
