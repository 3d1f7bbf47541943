"""Running a source set and writing its folder: statistics, envelope maps, GIS layers, figure, appendix.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

:func:`run_source_set` prepares the grid, coast and settings once (:func:`~..studies.sourceset.prepare_set`),
reuses the members already in the member store (content-addressed, :class:`~..io.memberstore.MemberStore`),
runs the others on Dask (:func:`~..studies.ensemble.run_ensemble`: local threads by default or a
cluster by address; results folded in member order; a failed member is retried once, then
reported with its parameters and left out), stores each finished member as it is folded (so an
interrupted set resumes), and writes the set folder atomically.
"""

from __future__ import annotations

import json
import math
import os
import pathlib
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from matplotlib.figure import Figure

from ..cautions import caution_lines, caution_summary
from ..coast.segments import STATIC_SEGMENT_COLUMNS
from ..errors import EnsembleError
from ..grid import get_crs
from ..io.gis import write_cog, write_segments
from ..io.memberstore import MemberStore
from ..io.runfolder import OutputFolder, refuse_filled_folder
from ..io.sourceset import SourceSet, parse_source_set
from ..studies.ensemble import MemberFailure, run_ensemble
from ..studies.sourceset import (SET_GRIDS, PreparedSet, envelope_grids, grid_template, member_key,
                                 prepare_set, set_member, set_statistics)
from .appendix import build_appendix
from .figures import _finish, plot_lensing_map
from .summaries import LENSING_QUALITATIVE

__all__ = ["SetResult", "compute_source_set", "run_source_set", "SET_CAUTIONS", "plot_hotspot_frequency"]

#: Cautions particular to a set, added to the package's cautions in the set appendix.
SET_CAUTIONS = (
    "A hotspot frequency counts in how many of the chosen sources a coastline segment is among the top-k "
    "hotspots (by lensing factor, and by indicative amplitude). A weighted frequency only applies the relative "
    "weights given to those sources. Neither is a probability of occurrence, a return period or an exceedance rate: this is NOT a probabilistic tsunami "
    "hazard assessment, whose source rates, magnitude-frequency relations and epistemic logic trees are not "
    "modelled here.",
    "The set is only as complete as the sources listed: a segment that never appears may still focus the energy "
    "of a source that is not in the set.",
    "Members are traced as scenario runs are (three period bands of the source's spectrum, four rotated ray "
    "fans where the rays are past their predictability, one ray thread each). On the trans-Pacific benchmark "
    "case such a run's rankings follow the linear long-wave solver at Spearman 0.81-0.84 (amplitude) and "
    "0.51-0.62 (lensing factor) over eight ray seeds; no member of this set was checked, so read both hotspot "
    "counts as indications, the amplitude counts as the firmer.",
    "Hotspots are counted by lensing factor and by indicative amplitude, and no member is checked against the "
    "linear long-wave solver: " + LENSING_QUALITATIVE + ". To check one source, run it as a scenario with "
    "'tsunamifocus run SCENARIO --check'.",
)


@dataclass
class SetResult:
    """A finished source set in memory."""

    prep: PreparedSet
    statistics: pd.DataFrame
    hotspots: pd.DataFrame
    members: pd.DataFrame
    envelope: dict[str, xr.DataArray]
    failures: list[MemberFailure]
    timings: dict[str, float] = field(default_factory=dict)

    def summary(self) -> str:
        """A few lines of plain text."""
        m = self.members
        n_ok = int((m["status"] != "failed").sum())
        lines = [f"source set {self.prep.sset.name}: {n_ok} of {len(m)} members "
                 f"({int((m['status'] == 'resumed').sum())} reused from the member store), {len(self.failures)} failed"]
        k = self.prep.sset.top_k
        st = self.statistics
        lines.append(f"  most often among the top {k} by lensing factor:")
        for sid, r in st.sort_values("rank_frequency").head(5).iterrows():
            lines.append(f"    {sid}: {100 * r['topk_frequency']:.0f} % of the sources "
                         f"({100 * r['topk_frequency_weighted']:.0f} % weighted), lensing median "
                         f"{r['lensing_median']:.2f} / max {r['lensing_max']:.2f}")
        lines.append(f"  most often among the top {k} by indicative amplitude at 1 m depth:")
        for sid, r in st.sort_values("amp_rank_frequency").head(5).iterrows():
            lines.append(f"    {sid}: {100 * r['amp_topk_frequency']:.0f} % of the sources "
                         f"({100 * r['amp_topk_frequency_weighted']:.0f} % weighted), amplitude median "
                         f"{r['amp_median_m']:.2f} m / max {r['amp_max_m']:.2f} m")
        for f in self.failures:
            lines.append(f"  failed: {f.params.get('name')} after {f.attempts} attempts: {f.error}")
        t = self.timings
        if t and t.get("n_computed"):
            lines.append(f"  timings: prepare {t['prepare_s']:.1f} s, members {t['members_s']:.1f} s "
                         f"({t['member_s_mean']:.1f} s per computed member)")
        elif t:
            lines.append(f"  timings: prepare {t['prepare_s']:.1f} s; every member reused")
        lines.append("  a hotspot frequency is not a probability: this is not a probabilistic hazard assessment")
        lines.append("  hotspots are counted by lensing factor and by amplitude, not checked against the linear "
                     "long-wave solver: " + LENSING_QUALITATIVE)
        return "\n".join(lines)


def _numeric(seg: pd.DataFrame) -> pd.DataFrame:
    """The member table as stored: ``segment_id`` (text) index, float columns only."""
    cols = [c for c in seg.columns if c not in STATIC_SEGMENT_COLUMNS and pd.api.types.is_numeric_dtype(seg[c])
            and not pd.api.types.is_bool_dtype(seg[c])]
    out = pd.DataFrame({c: seg[c].to_numpy(dtype=float) for c in cols},
                       index=pd.Index(np.asarray(seg.index.astype(str), dtype=object), name="segment_id"))
    return out


def compute_source_set(sset: SourceSet, *, store: MemberStore, scheduler: Any = None, rays: int | None = None,
                       progress: bool = True) -> SetResult:
    """Run a set (reusing stored members) and compute its statistics and envelope in memory.

    Every computed member is written to ``store`` as it is folded, before the next one.
    """
    t0 = time.perf_counter()
    prep = prepare_set(sset, rays=rays)
    t_prep = time.perf_counter() - t0
    keys = [member_key(prep, m) for m in prep.members]
    todo = [i for i, k in enumerate(keys) if not store.has(k)]
    tables: dict[int, pd.DataFrame] = {}
    infos: dict[int, dict] = {}
    status = {i: "resumed" for i in range(len(keys)) if i not in todo}
    envelope: dict[str, xr.DataArray] = {}

    def fold(i: int, seg: pd.DataFrame, grids: dict[str, Any], info: dict) -> None:
        nonlocal envelope
        tables[i] = _numeric(seg)
        infos[i] = info
        envelope = envelope_grids(envelope, {n: grid_template(prep.depth, np.asarray(getattr(grids[n], "values",
                                                                                          grids[n])), n)
                                             for n in SET_GRIDS})

    def on_result(j: int, res: Any, params: dict) -> None:
        i = int(params["index"])
        info = {**res.info, "name": params["name"]}
        store.save(keys[i], _numeric(res.segments), {n: res.grids[n] for n in SET_GRIDS}, info)
        status[i] = "computed"
        fold(i, res.segments, res.grids, info)

    failures: list[MemberFailure] = []
    t1 = time.perf_counter()
    mean_s = float("nan")
    if todo:
        params = [{"index": i, "name": prep.members[i].source.name, "weight": prep.members[i].weight,
                   "source": prep.members[i].source} for i in todo]
        try:
            ens = run_ensemble(set_member, params, scheduler=scheduler, retries=1, progress=progress,
                               shared={"depth": prep.depth, "scenario": prep.scenario, "segments": prep.segments,
                                       "reference": prep.reference},
                               top_k=sset.top_k, reduce=SET_GRIDS, on_result=on_result,
                               progress_label="set members")
            failures = list(ens.failures)
            mean_s = float(ens.timings.get("member_s_mean", float("nan")))
        except EnsembleError as exc:  # every member to compute failed; the reused ones still count
            if len(todo) == len(keys):
                raise
            failures = [MemberFailure(j, None, p, str(exc), "", 2) for j, p in enumerate(params)]
    for i in range(len(keys)):
        if status.get(i) == "resumed":
            seg, grids, info = store.load(keys[i])
            fold(i, seg, grids, info)
    for f in failures:
        status[int(f.params["index"])] = "failed"
    t_members = time.perf_counter() - t1
    names = {i: prep.members[i].source.name for i in tables}
    weights = {i: prep.members[i].weight for i in tables}
    reg = prep.segments[prep.segments["in_region"].to_numpy(bool)].set_index("segment_id")
    static = reg[[c for c in STATIC_SEGMENT_COLUMNS if c in reg.columns]]
    static.index = pd.Index(np.asarray(static.index.astype(str), dtype=object), name="segment_id")
    stats, pairs = set_statistics(tables, names, weights, top_k=sset.top_k, static=static)
    rows = []
    for i, m in enumerate(prep.members):
        info = infos.get(i, {})
        fail = next((f for f in failures if int(f.params["index"]) == i), None)
        seg0 = m.source.segments[0] if m.source.segments else None
        rows.append({"member": i, "source": m.source.name, "kind": m.source.kind, "origin": m.origin,
                     "weight": m.weight, "status": status.get(i, "failed"),
                     "magnitude": seg0.magnitude if seg0 is not None else None,
                     "Mw": info.get("mw"), "energy_J": info.get("energy_J"), "period_s": info.get("period_s"),
                     "trace": json.dumps([list(p) for p in seg0.trace]) if seg0 is not None else "",
                     "dip_deg": seg0.dip_deg if seg0 is not None else None,
                     "error": fail.error if fail is not None else "", "key": keys[i]})
    members = pd.DataFrame(rows)
    timings = {"prepare_s": t_prep, "members_s": t_members, "member_s_mean": mean_s,
               "n_computed": len([s for s in status.values() if s == "computed"])}
    return SetResult(prep=prep, statistics=stats, hotspots=pairs, members=members, envelope=envelope,
                     failures=failures, timings=timings)


def _write_csv(df: pd.DataFrame, path: pathlib.Path, index: bool = False) -> None:
    """CSV whose leading ``#`` lines carry the caution (read with ``comment="#"``: text cells lose their ``#``)."""
    df = df.copy()
    for c in df.columns:
        if df[c].dtype == object or pd.api.types.is_string_dtype(df[c]):
            df[c] = df[c].map(lambda v: v.replace("#", "no. ") if isinstance(v, str) else v)
    header = "".join(f"# {line}\n" if line else "#\n" for line in ["CAUTION:", *caution_lines(width=100)])
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(header)
        df.to_csv(fh, index=index, lineterminator="\n")


def plot_hotspot_frequency(stats: pd.DataFrame, top_k: int, out_path: str | os.PathLike, *, title: str,
                           n_members: int) -> pathlib.Path:
    """Hotspot frequency along the coast, side by side by lensing factor and by indicative amplitude:
    bars per segment in coastline order (south at the bottom), the most frequent of each labelled."""
    s = stats.copy()
    order = np.argsort(s["lat_mid"].to_numpy(float)) if "lat_mid" in s else np.arange(len(s))
    s = s.iloc[order]
    y = np.arange(len(s))
    fig = Figure(figsize=(11.0, max(4.5, 0.11 * len(s) + 2.0)), layout="constrained")
    axes = fig.subplots(1, 2, sharey=True)
    any_hit = (s["topk_frequency"] > 0) | (s.get("amp_topk_frequency", 0.0) > 0)
    ticks = [j for j in range(len(s)) if any_hit.iloc[j] or j % max(1, len(s) // 10) == 0]
    lab = [f"{sid}  {s['lat_mid'].iloc[j]:.2f}°" if "lat_mid" in s else str(sid)
           for j, sid in zip(ticks, s.index[ticks])]
    panels = (("", "lensing factor", "lensing hotspot",
               "a frequency over the chosen sources, not a probability of occurrence"),
              ("amp_", "indicative amplitude", "amplitude hotspot",
               "a frequency over the chosen sources; no member checked against the wave"))
    for ax, (prefix, what, noun, note) in zip(axes, panels):
        f, fw = f"{prefix}topk_frequency", f"{prefix}topk_frequency_weighted"
        ax.barh(y, 100 * s[f].to_numpy(float), color="0.75", height=0.85,
                label=f"unweighted (share of the {n_members} sources)")
        ax.barh(y, 100 * s[fw].to_numpy(float), color="#c0392b", height=0.4,
                label="weighted by the sources' relative weights")
        ax.set_ylim(-1, len(s))
        ax.set_xlim(0, 140)  # room for the labels right of the bars
        ax.set_xticks([0, 20, 40, 60, 80, 100])
        best = np.argsort(-s[fw].to_numpy(float), kind="stable")[:3]
        for j in best:
            v = 100 * s[fw].iloc[j]
            x = 100 * max(s[fw].iloc[j], s[f].iloc[j])
            if v > 0:
                ax.annotate(f"{s.index[j]}: {v:.0f} %", (x, j), xytext=(6, 0), textcoords="offset points",
                            va="center", fontsize=8, fontweight="bold")
        ax.set_title(f"by {what}", loc="left", fontsize=9.5)
        ax.grid(axis="x", color="0.9")
        ax.set_xlabel(f"sources for which the segment is a top-{top_k} {noun} (%)\n{note}", fontsize=9)
    axes[0].set_ylabel("coastline segments, south (bottom) to north (top)")
    axes[0].set_yticks(ticks)
    axes[0].set_yticklabels(lab, fontsize=6.5)
    axes[1].tick_params(axis="y", labelleft=False)
    fig.suptitle(title, x=0.01, ha="left", fontsize=10)
    return _finish(fig, out_path, handles=axes[0].get_legend_handles_labels()[0])


def write_set_folder(res: SetResult, folder: pathlib.Path) -> dict[str, pathlib.Path]:
    """Write the outputs of a finished set into ``folder`` (every file carries the cautions)."""
    folder.mkdir(parents=True, exist_ok=True)
    prep = res.prep
    files: dict[str, pathlib.Path] = {}
    stats = res.statistics
    crs = get_crs(prep.depth)
    tab = stats.reset_index()
    if "geometry" in tab:
        files.update({f"segments_{k}": v for k, v in write_segments(tab, folder / "set_segments", crs,
                                                                      layer="set_segments", style=None).items()})
    else:
        _write_csv(tab, folder / "set_segments.csv")
        files["segments_csv"] = folder / "set_segments.csv"
    _write_csv(res.hotspots, folder / "set_hotspots.csv")
    _write_csv(res.members.drop(columns=["key"]), folder / "set_members.csv")
    files.update(hotspots_csv=folder / "set_hotspots.csv", members_csv=folder / "set_members.csv")
    desc = {"energy": ("maximum over the set of the ray energy per unit wavefront width", "J m-1"),
            "lensing_factor": ("maximum over the set of the lensing factor", "1")}
    for n, da in res.envelope.items():
        p = folder / f"envelope_{n}.tif"
        write_cog(da, p, description=desc[n][0], units=desc[n][1], style=None)
        files[f"envelope_{n}"] = p
    (folder / "figures").mkdir(exist_ok=True)
    n_ok = int((res.members["status"] != "failed").sum())
    fig = plot_hotspot_frequency(stats, prep.sset.top_k, folder / "figures" / "hotspot_frequency.png",
                                 title=f"Hotspot frequency along the coast: {prep.sset.name}", n_members=n_ok)
    files["figure"] = fig
    env_seg = stats.reset_index().assign(lensing_factor=lambda d: d["lensing_max"])
    env_fig = plot_lensing_map(prep.depth, res.envelope["lensing_factor"], None, env_seg, prep.sset.top_k,
                               out_path=folder / "figures" / "envelope_lensing_map.png",
                               title=f"Envelope (maximum over the sources) of the lensing factor: {prep.sset.name}")
    files["envelope_figure"] = env_fig
    rec = {"set": prep.sset.name, "n_members": len(res.members), "n_succeeded": n_ok, "top_k": prep.sset.top_k,
           "failures": [f.to_dict() for f in res.failures], "timings": res.timings,
           "grid_sha256": prep.grid_sha256, "settings": {k: prep.scenario.to_dict()[k] for k in ("rays", "coast")},
           "cautions": caution_summary(), "set_cautions": list(SET_CAUTIONS)}
    (folder / "set.json").write_text(json.dumps(rec, indent=2, default=str), encoding="utf-8")
    files["set_json"] = folder / "set.json"
    k = prep.sset.top_k

    def top_table(rank_col: str, cols: list[str]) -> pd.DataFrame:
        t = stats.sort_values(rank_col).head(k)[cols].reset_index()
        for c in cols[:-1]:
            t[c] = t[c].map(lambda v: f"{v:.2f}" if isinstance(v, float) and math.isfinite(v) else "")
        return t

    table = top_table("rank_frequency", ["topk_frequency", "topk_frequency_weighted", "lensing_median",
                                         "lensing_p90", "lensing_max", "amp_median_m", "amp_max_m",
                                         "hotspot_sources"])
    amp_table = top_table("amp_rank_frequency", ["amp_topk_frequency", "amp_topk_frequency_weighted",
                                                 "amp_median_m", "amp_p90_m", "amp_max_m", "lensing_median",
                                                 "amp_hotspot_sources"])
    ranking = stats.reset_index().rename(columns={"lensing_median": "lensing_factor", "amp_median_m": "amp_1m_m"})
    ranking = ranking.drop(columns=[c for c in ("geometry",) if c in ranking.columns])
    section = {
        "title": "Source set: hotspot frequency",
        "text": [f"{n_ok} of {len(res.members)} sources ran against one grid and one coastline "
                 f"({len(res.failures)} failed and are left out). For each coastline segment: the share of the "
                 f"sources for which it is among the top-{k} hotspots by lensing factor and by indicative "
                 "amplitude at 1 m depth (unweighted, and with the sources' relative weights), and the median, "
                 "90th percentile and maximum of the lensing factor and of the indicative amplitude over the "
                 "sources. In scenario runs the wave checks hold the amplitude ranking more closely than the "
                 "lensing factor's (docs/focusing.md); the set's members are traced as scenario runs are but "
                 "none was checked, so both tables are indications (below).", *SET_CAUTIONS],
        "metrics": {"sources": str(len(res.members)), "succeeded": str(n_ok), "top k": str(prep.sset.top_k)},
        "table": table,
        "table_caption": f"The {len(table)} segments most often among the top-{k} hotspots by lensing factor",
        "more_tables": [{"table": amp_table, "caption": f"The {len(amp_table)} segments most often among the "
                         f"top-{k} hotspots by indicative amplitude at 1 m depth"}],
        "figures": {"hotspot_frequency": {"path": str(fig), "caption": "Hotspot frequency along the coast, by "
                                          "lensing factor (left) and by indicative amplitude (right)."},
                    "envelope_lensing_map": {"path": str(env_fig), "caption": "Maximum over the sources of the "
                                             "lensing factor; coastline segments coloured by their maximum, the "
                                             "highest maxima numbered."}},
    }
    ctx = {"title": "Source-set appendix: coastal tsunami-energy focusing screening",
           "subtitle": f"Set “{prep.sset.name}” on the grid of scenario “{prep.scenario.name}”",
           "scenario": {"name": prep.sset.name,
                        "description": f"{len(res.members)} sources screened against one coast; the ranked tables "
                                       "list the median lensing factor and the median indicative amplitude over "
                                       "the sources."},
           "ranking": ranking, "amplitude_ranking": True, "comparison": section}
    build_appendix(ctx, folder / "set_appendix.html", folder / "set_appendix.pdf")
    files.update(appendix_html=folder / "set_appendix.html", appendix_pdf=folder / "set_appendix.pdf")
    return files


def run_source_set(path: str | os.PathLike | SourceSet, out: str | os.PathLike, *, overwrite: bool = False,
                   scheduler: Any = None, rays: int | None = None, progress: bool = True,
                   store: str | os.PathLike | None = None) -> SetResult:
    """Run a source-set file and write its folder (atomically; the member store stays beside it).

    Parameters
    ----------
    path : str, path-like or SourceSet
        The set file (see :mod:`tsunamifocus.io.sourceset`) or a parsed set.
    out : str or path-like
        Output folder; refused when filled unless ``overwrite``.
    scheduler : None, str or distributed.Client
        ``None``/``"local"``: Dask threads on this machine; an address: a running cluster.
    rays : int, optional
        Ray-count override for every member.
    store : str or path-like, optional
        Member store folder (default ``<out>_members`` beside ``out``); a rerun reuses its members.

    Returns
    -------
    SetResult
    """
    sset = path if isinstance(path, SourceSet) else parse_source_set(path)
    out = pathlib.Path(out)
    refuse_filled_folder(out, overwrite)
    st = MemberStore(store if store is not None else out.with_name(f"{out.name}_members"))
    res = compute_source_set(sset, store=st, scheduler=scheduler, rays=rays, progress=progress)
    with OutputFolder(out, overwrite=overwrite) as of:
        write_set_folder(res, pathlib.Path(of.tmp_dir))
    return res
