"""``tsunamifocus run SCENARIO``: run a scenario end to end (or reproduce a run from its manifest)."""

from __future__ import annotations

import argparse
import sys

from ..io.manifest import scenario_for_rerun
from ..io.scenario import check_ray_count, parse_scenario
from ..products.runfolder import run_scenario

NAME = "run"
HELP = "run a scenario end to end (rays, focusing, exports, appendix)"


def configure(p: argparse.ArgumentParser) -> None:
    """Add the command's arguments."""
    p.add_argument("scenario", help="scenario file (TOML, see docs/scenario.md), or the manifest.json of an "
                   "earlier run to reproduce it")
    p.add_argument("--out", help="output folder (default: the scenario's [output] folder)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--rays", type=int, help="override the number of rays per source")
    p.add_argument("--scheduler", help="dask.distributed scheduler address for the ensemble (default: local)")
    p.add_argument("--check", action="store_true", help="also solve the linear long-wave equations and report how "
                   "far the amplitude and lensing rankings hold (seconds to minutes)")


def run(args: argparse.Namespace) -> int:
    """Run the scenario; returns the exit code."""
    if args.rays is not None:
        check_ray_count(args.rays)
    if str(args.scenario).lower().endswith(".json"):
        sc = scenario_for_rerun(args.scenario)
    else:
        sc = parse_scenario(args.scenario)
    quiet = getattr(args, "quiet", 0) > 0
    run_scenario(sc, out=args.out, overwrite=args.overwrite, rays=args.rays, scheduler=args.scheduler,
                 progress=not quiet, command=["tsunamifocus", *sys.argv[1:]], check=args.check)
    return 0
