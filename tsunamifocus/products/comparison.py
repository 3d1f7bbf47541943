"""Writing a comparison of runs: tables, difference layers and the comparison appendix."""

from __future__ import annotations

import html
import json
import pathlib
from collections.abc import Sequence
from pathlib import Path

import pandas as pd
import xarray as xr

from ..cautions import caution_lines, caution_text
from ..errors import OutputExistsError
from ..grid import get_crs
from ..io.gis import write_cog, write_netcdf, write_segments
from ..studies.compare import Comparison, RunTuple, _column_suffix, compare_runs
from .appendix import build_appendix
from .figures import plot_ranked_pair

__all__ = ['compare_to_folder']


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    """Write a CSV whose leading ``#`` comment lines carry the caution (read with comment="#")."""
    header = "".join(f"# {line}\n" if line else "#\n" for line in ["CAUTION:", *caution_lines(width=100)])
    tmp = path.with_name(f".{path.name}.part")
    with open(tmp, "w", encoding="utf-8", newline="") as fh:
        fh.write(header)
        df.to_csv(fh, index=False, lineterminator="\n")
    tmp.replace(path)


def compare_to_folder(
    runs: Sequence[RunTuple] | Comparison,
    out_dir: str | Path,
    *,
    top_k: int = 10,
    overwrite: bool = False,
) -> dict[str, Path]:
    """Compare runs and write the comparison into a folder (every file carries the cautions).

    Parameters
    ----------
    runs : sequence of (name, segments, layers), or a Comparison
        Runs (see :func:`compare_runs`) or an existing comparison.
    out_dir : str or path-like
        Output folder (created).
    top_k : int
        k of the top-k counts (ignored for a given Comparison).
    overwrite : bool
        Replace files of an earlier comparison in ``out_dir``.

    Returns
    -------
    dict of str -> pathlib.Path
        ``ranking_gpkg`` / ``ranking_geojson`` (when segment geometries and a CRS exist),
        ``ranking_csv``, ``correlations_csv``, ``envelope_nc``, ``envelope_<layer>_tif``,
        ``differences_nc``, ``summary_md``, ``comparison_json``.
    """
    comp = runs if isinstance(runs, Comparison) else compare_runs(runs, top_k=top_k)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    planned = ["comparison_ranking.csv", "comparison_correlations.csv", "comparison_summary.md", "comparison.json"]
    if not overwrite:
        exist = [p for p in planned if (out / p).exists()]
        if exist:
            raise OutputExistsError(f"{out}: already holds a comparison ({exist[0]}); pass overwrite=True to replace it")
    written: dict[str, Path] = {}
    rank = comp.ranking.reset_index()
    crs = None
    for da in comp.envelope.values():
        crs = get_crs(da)
        break
    has_geom = "geometry" in rank.columns and rank["geometry"].notna().all()
    if has_geom and crs is not None:
        w = write_segments(rank, out / "comparison_ranking", crs, layer="comparison_ranking", csv_wkt=True)
        written.update({f"ranking_{k}": v for k, v in w.items()})
    else:
        _write_csv(rank.drop(columns=["geometry"], errors="ignore"), out / "comparison_ranking.csv")
        written["ranking_csv"] = out / "comparison_ranking.csv"
    _write_csv(comp.correlations, out / "comparison_correlations.csv")
    written["correlations_csv"] = out / "comparison_correlations.csv"
    title = f"Scenario comparison envelope ({', '.join(comp.names)})"
    if comp.envelope:
        written["envelope_nc"] = write_netcdf(comp.envelope, out / "comparison_envelope.nc", title=title)
        for lay, da in comp.envelope.items():
            written[f"envelope_{lay}_tif"] = write_cog(da, out / f"comparison_envelope_{lay}.tif")
    diff_layers: dict[str, xr.DataArray] = {}
    for run, d in comp.differences.items():
        for lay, da in d.items():
            diff_layers[f"{lay}_{comp.column_names.get(run, _column_suffix(run))}_minus_first"] = da
    if diff_layers:
        written["differences_nc"] = write_netcdf(
            diff_layers,
            out / "comparison_differences.nc",
            title=f"Scenario differences relative to '{comp.names[0]}'",
        )
    md = out / "comparison_summary.md"
    md.write_text(
        "# Scenario comparison\n\n" + markdown_text(comp.summary) + "\n\n## Cautions\n\n" + caution_text() + "\n",
        encoding="utf-8"
    )
    written["summary_md"] = md
    js = out / "comparison.json"
    js.write_text(
        json.dumps({**comp.to_dict(), "caution": caution_text()}, indent=2, allow_nan=False) + "\n", encoding="utf-8"
    )
    written["comparison_json"] = js
    return written


def _envelope_table(rk, cmp, sort_col: str, value: str, rank: str, flag: str, tail: list[str]):
    """The top ``cmp.top_k`` rows of the envelope ranking ``sort_col``: per run its value and rank
    (``value`` / ``rank`` / ``flag``: column patterns with ``{}`` for the run), then ``tail``. A value
    the run does not rank (ray shadow, too few rays) is not shown as a rank."""
    import numpy as np

    top = rk.sort_values(sort_col).head(cmp.top_k)
    runs = [cmp.column_names.get(n, n) for n in cmp.names]
    cols = ["segment_id", *[c for sn in runs for c in (value.format(sn), rank.format(sn))], *tail]
    table = top[[c for c in cols if c in top.columns]].copy()
    for c in table.columns:
        if table[c].dtype.kind == "f":
            table[c] = table[c].map(lambda v: f"{v:.2f}" if np.isfinite(v) else "")
    for sn in runs:
        off = ~top[flag.format(sn)].to_numpy(dtype=bool)
        if off.any():
            table.loc[off, value.format(sn)] = [f"({v}, not ranked)" if v else "" for v in
                                                table.loc[off, value.format(sn)]]
            table[rank.format(sn)] = table[rank.format(sn)].astype(object)
            table.loc[off, rank.format(sn)] = "-"
    return table


def comparison_appendix(cmp, runs, folder: pathlib.Path) -> None:
    """Write ``comparison_appendix.html/.pdf``: cautions, the first run's ranking and the comparison section."""
    import numpy as np
    import pandas as pd


    names = list(cmp.names)
    rk = cmp.ranking.reset_index()
    table = _envelope_table(rk, cmp, "rank_envelope", "lensing_factor_{}", "rank_{}", "ranked_{}",
                            ["lensing_factor_max", "n_topk", "rank_envelope"])
    more = []
    if "amp_rank_envelope" in rk:
        atable = _envelope_table(rk, cmp, "amp_rank_envelope", "amp_1m_m_{}", "amp_rank_{}", "amp_ranked_{}",
                                 ["amp_1m_m_max", "amp_max_run", "amp_n_topk"])
        ren = {"segment_id": "Segment ID", "amp_1m_m_max": "Envelope amplitude (m)",
               "amp_max_run": "Run of the largest", "amp_n_topk": f"Runs with it in their top {cmp.top_k}"}
        for n in names:
            sn = cmp.column_names.get(n, n)
            ren[f"amp_1m_m_{sn}"] = f"Amplitude (m), {n}"
            ren[f"amp_rank_{sn}"] = f"Rank, {n}"
        atable = atable.rename(columns=ren)
        more.append({"table": atable, "caption": f"Top {cmp.top_k} segments of the envelope ranking by indicative "
                                                 "amplitude at 1 m depth [m], amplitude and rank per run"})
    corr = pd.DataFrame(cmp.correlations).copy()
    figs = {}
    # the segments both runs rank, as in the comparison's correlations and top-k counts
    by_id = cmp.ranking
    sa, sb = (cmp.column_names.get(n, n) for n in names[:2])
    pairs = [("comparison_scatter", "lensing_factor_{}", "ranked_{}", "Lensing factor (-)", "Lensing factor")]
    if "amp_rank_envelope" in by_id:
        pairs.append(("comparison_scatter_amplitude", "amp_1m_m_{}", "amp_ranked_{}",
                      "Indicative amplitude at 1 m (m)", "Indicative amplitude at 1 m depth"))
    for key, val, flag, label, what in pairs:
        a = by_id[val.format(sa)].where(by_id[flag.format(sa)]).astype(float)
        b = by_id[val.format(sb)].where(by_id[flag.format(sb)]).astype(float)
        ok = np.isfinite(a.to_numpy()) & np.isfinite(b.to_numpy())
        if ok.sum() >= 3:
            fig = folder / f"{key}.png"
            plot_ranked_pair(a[ok], b[ok], fig, k=max(1, min(int(cmp.top_k), int(ok.sum()))),
                             xlabel=f"{label}, {names[0]}", ylabel=f"{label}, {names[1]}",
                             title=(f"{what.replace(' depth', '')} per segment ranked in both runs\n"
                                    f"{names[0]} vs {names[1]}"),
                             names=(names[0], names[1]))
            figs[key] = {"path": str(fig), "caption": f"{what} per coastline segment ranked in both runs, "
                                                      f"{names[0]} against {names[1]}, the top {cmp.top_k} of "
                                                      "each marked."}
    metrics = {}
    for _, r in corr.iterrows():
        by = "lensing factor" if r.get("ranking", "lensing") == "lensing" else "amplitude"
        metrics[f"{r['run_a']} vs {r['run_b']}, {by}"] = (
            f"Spearman {r['spearman_rho']:.3f}, Kendall {r['kendall_tau']:.3f} over the {int(r['n'])} segments "
            "both rank")
    section = {
        "text": [f"Runs compared: {', '.join(names)}. They share the grid, coastline and segmentation (runs that "
                 "do not are refused). The envelope layer holds the maximum lensing factor and the earliest "
                 "arrival over the runs; difference layers are each run minus the first. Both rankings are "
                 "compared, by lensing factor and by indicative amplitude; the wave checks hold the amplitude "
                 "ranking more closely."],
        "metrics": metrics,
        "table": table,
        "table_caption": f"Top {cmp.top_k} segments of the envelope ranking, lensing factor and rank per run",
        "more_tables": more,
        "figures": figs,
    }
    first = runs[0]
    ranking = first[1].reset_index() if "segment_id" not in first[1].columns else first[1]
    ctx = {
        "title": "Comparison of tsunami-energy focusing screening runs",
        "subtitle": "Supplement to the planning-study appendices (screening level)",
        "scenario": {"name": " vs ".join(names), "description": f"Comparison of {len(names)} runs; the ranked "
                     f"table below is that of the first run, {names[0]}."},
        "ranking": ranking.drop(columns=[c for c in ("wkt",) if c in ranking.columns]),
        "comparison": section,
        "validation_notes": ["Each run's validation summary (its wave check, when run) is in its own appendix "
                             "(appendix.pdf in the run folder); a comparison adds no validation of its own."],
        "health": "Each run's numerical health checks are in its own appendix (appendix.pdf in the run folder).",
    }
    build_appendix(ctx, folder / "comparison_appendix.html", folder / "comparison_appendix.pdf")


#: Characters with a meaning in Markdown (CommonMark 0.31, "Backslash escapes": any ASCII punctuation
#: may be escaped) that names from scenario files may carry; HTML tags are written as text.
_MD_SPECIAL = set("\\`*_{}[]()#+!|~")


def markdown_text(text: str) -> str:
    """Plain text made safe for a Markdown file: ``<``, ``>`` and ``&`` as HTML entities (no raw HTML
    from scenario names reaches a Markdown viewer) and Markdown punctuation backslash-escaped."""
    out = []
    for line in str(text).split("\n"):
        esc = html.escape(line, quote=False)
        out.append("".join("\\" + c if c in _MD_SPECIAL else c for c in esc))
    return "  \n".join(out)  # keep the plain text's line breaks (two spaces: a Markdown line break)


def _summary_of(cmp) -> str:
    s = getattr(cmp, "summary", None)
    return s() if callable(s) else str(s if s is not None else cmp)
