"""``tsunamifocus demo``: run the bundled invented demo scenario end to end."""

from __future__ import annotations

import argparse
import pathlib

from ..io.scenario import check_ray_count
from ..products.demo import run_demo

NAME = "demo"
HELP = "run the bundled invented demo scenario"


def configure(p: argparse.ArgumentParser) -> None:
    """Add the command's arguments."""
    p.add_argument("--out", default="tsunamifocus-demo", help="output folder (default: ./tsunamifocus-demo)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--rays", type=int, default=None, help="override the ray count of the demo scenario")
    p.add_argument("--scheduler", default=None, help="dask.distributed scheduler address for the ensemble")
    p.add_argument("--no-check", dest="check", action="store_false", help="skip the linear long-wave check of "
                   "the rankings (run by default on the demo)")


def run(args: argparse.Namespace) -> int:
    """Run the demo into ``--out``; returns the exit code."""
    if args.rays is not None:
        check_ray_count(args.rays)
    return run_demo(pathlib.Path(args.out), overwrite=args.overwrite, rays=args.rays, scheduler=args.scheduler,
                    progress=getattr(args, "quiet", 0) == 0, check=args.check)
