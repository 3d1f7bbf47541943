"""The ``run``, ``compare`` and ``check`` sub-commands (registered into :mod:`tsunamifocus.cli`)."""

from __future__ import annotations

import argparse
import pathlib
import sys

from .cli import _COMMANDS

__all__: list[str] = []


def _configure_run(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenario", help="scenario file (TOML); see docs/scenario.md")
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
    cmp = compare_runs(runs, top_k=args.top)
    with OutputFolder(out, overwrite=args.overwrite) as of:
        compare_to_folder(cmp, of.tmp_dir)
    print(getattr(cmp, "summary_text", None) or _summary_of(cmp))
    print(f"outputs: {out}")
    from .cautions import caution_summary

    print("CAUTION: " + caution_summary())
    return 0


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
