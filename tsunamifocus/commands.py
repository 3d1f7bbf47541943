"""The ``run``, ``compare`` and ``check`` sub-commands (registered into :mod:`tsunamifocus.cli`)."""

from __future__ import annotations

import argparse
import pathlib
import sys

from .cli import _COMMANDS

__all__: list[str] = []


def _configure_run(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenario", help="scenario file (TOML, see docs/scenario.md), or the manifest.json of an "
                   "earlier run to reproduce it")
    p.add_argument("--out", help="output folder (default: the scenario's [output] folder)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--rays", type=int, help="override the number of rays per source")
    p.add_argument("--scheduler", help="dask.distributed scheduler address for the ensemble (default: local)")


def _run_run(args: argparse.Namespace) -> int:
    from .errors import InputError
    from .pipeline import run_scenario
    from .scenario import parse_scenario

    if args.rays is not None and args.rays < 1:
        raise InputError(f"--rays {args.rays}: expected a positive number of rays")
    if str(args.scenario).lower().endswith(".json"):
        from .outputs import scenario_from_manifest, verify_inputs

        sc = scenario_from_manifest(args.scenario)
        bad = [b for b in verify_inputs(args.scenario) if "scenario_file" not in b]
        if bad:
            raise InputError(f"{args.scenario}: cannot reproduce the run: {'; '.join(bad)}")
    else:
        sc = parse_scenario(args.scenario)
    quiet = getattr(args, "quiet", 0) > 0
    run_scenario(sc, out=args.out, overwrite=args.overwrite, rays=args.rays, scheduler=args.scheduler,
                 progress=not quiet, command=["tsunamifocus", *sys.argv[1:]])
    return 0


_COMMANDS["run"] = (_run_run, _configure_run, "run a scenario end to end (rays, focusing, exports, appendix)")


def _configure_compare(p: argparse.ArgumentParser) -> None:
    p.add_argument("runs", nargs="+", help="two or more finished run folders")
    p.add_argument("--out", required=True, help="folder for the comparison outputs")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--top", type=int, default=10, help="k of the top-k counts (default 10)")


def _run_compare(args: argparse.Namespace) -> int:
    from .compare import compare_runs, compare_to_folder, read_run
    from .errors import InputError, OutputExistsError
    from .outputs import OutputFolder

    if len(args.runs) < 2:
        raise InputError("compare needs at least two run folders")
    out = pathlib.Path(args.out)
    if out.is_dir() and any(out.iterdir()) and not args.overwrite:
        raise OutputExistsError(f"{out}: folder is not empty; pass --overwrite or choose another --out")
    runs = [read_run(r) for r in args.runs]
    names = [r[0] for r in runs]
    if len(set(names)) < len(names):  # same scenario name: tell the runs apart by their folders
        folders = [pathlib.Path(r).resolve().name for r in args.runs]
        if len(set(folders)) < len(folders):
            folders = [str(pathlib.Path(r).resolve()) for r in args.runs]
        runs = [(f, seg, lay) for f, (_, seg, lay) in zip(folders, runs)]
    cmp = compare_runs(runs, top_k=args.top)
    with OutputFolder(out, overwrite=args.overwrite) as of:
        compare_to_folder(cmp, of.tmp_dir)
        comparison_appendix(cmp, runs, pathlib.Path(of.tmp_dir))
    print(getattr(cmp, "summary_text", None) or _summary_of(cmp))
    print(f"outputs: {out}")
    return 0


def comparison_appendix(cmp, runs, folder: pathlib.Path) -> None:
    """Write ``comparison_appendix.html/.pdf``: cautions, the first run's ranking and the comparison section."""
    import numpy as np
    import pandas as pd

    from .figures import plot_agreement
    from .report import build_appendix

    names = list(cmp.names)
    rk = cmp.ranking.reset_index()
    cols = [c for c in rk.columns if c.startswith(("lensing_factor_", "rank_")) or c in ("segment_id", "n_topk")]
    table = rk.sort_values("rank_envelope" if "rank_envelope" in rk else cols[1]).head(cmp.top_k)[cols].copy()
    for c in table.columns:
        if table[c].dtype.kind == "f":
            table[c] = table[c].map(lambda v: f"{v:.2f}" if np.isfinite(v) else "")
    corr = pd.DataFrame(cmp.correlations).copy()
    figs = {}
    first, second = runs[0], runs[1]
    a = first[1]["lensing_factor"].astype(float)
    b = second[1]["lensing_factor"].reindex(a.index).astype(float)
    ok = np.isfinite(a.to_numpy()) & np.isfinite(b.to_numpy())
    if ok.sum() >= 3:
        fig = folder / "comparison_scatter.png"
        plot_agreement(a.to_numpy()[ok], b.to_numpy()[ok], out_path=fig, xlabel=f"lensing factor, {names[0]}",
                       ylabel=f"lensing factor, {names[1]}", title="Lensing factor per coastline segment: "
                       f"{names[0]} vs {names[1]}", labels=list(a.index[ok]))
        figs["comparison_scatter"] = str(fig)
    metrics = {}
    for _, r in corr.iterrows():
        metrics[f"{r['run_a']} vs {r['run_b']}"] = (f"Spearman {r['spearman_rho']:.3f}, Kendall {r['kendall_tau']:.3f}"
                                                   f" over {int(r['n'])} segments")
    section = {
        "text": [f"Runs compared: {', '.join(names)}. They share the grid, coastline and segmentation (runs that "
                 "do not are refused). The envelope layer holds the maximum lensing factor and the earliest "
                 "arrival over the runs; difference layers are each run minus the first."],
        "metrics": metrics,
        "table": table,
        "table_caption": f"Top {cmp.top_k} segments of the envelope ranking, lensing factor and rank per run",
        "figures": figs,
    }
    ranking = first[1].reset_index() if "segment_id" not in first[1].columns else first[1]
    ctx = {
        "title": "Comparison of tsunami-energy focusing screening runs",
        "subtitle": "Supplement to the planning-study appendices (screening level)",
        "scenario": {"name": " vs ".join(names), "description": f"Comparison of {len(names)} runs; the ranked "
                     f"table below is that of the first run, {names[0]}."},
        "ranking": ranking.drop(columns=[c for c in ("wkt",) if c in ranking.columns]),
        "comparison": section,
    }
    build_appendix(ctx, folder / "comparison_appendix.html", folder / "comparison_appendix.pdf")


def _summary_of(cmp) -> str:
    s = getattr(cmp, "summary", None)
    return s() if callable(s) else str(s if s is not None else cmp)


_COMMANDS["compare"] = (_run_compare, _configure_compare, "compare the rankings of two or more finished runs")


def _configure_check(p: argparse.ArgumentParser) -> None:
    p.add_argument("run_dir", help="a finished run folder")
    p.add_argument("--out", help="output folder (default: RUN_DIR/wave_check)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--hours", type=float, help="simulated duration [h] (default: the latest first arrival + 30 min)")
    p.add_argument("--top", type=int, default=10, help="k of the top-k overlap (default 10)")


def _run_check(args: argparse.Namespace) -> int:
    from .checkrun import run_wave_check

    run_wave_check(args.run_dir, out=args.out, overwrite=args.overwrite, hours=args.hours, k=args.top,
                   progress=getattr(args, "quiet", 0) == 0)
    return 0


_COMMANDS["check"] = (_run_check, _configure_check,
                      "check a run's ranking against a linear long-wave (shallow-water) simulation")
