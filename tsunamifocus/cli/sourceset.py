"""``tsunamifocus sourceset SETFILE --out DIR``: screen one coast against a set of sources."""

from __future__ import annotations

import argparse
import pathlib

from ..errors import InputError
from ..products.sourceset import run_source_set

NAME = "sourceset"
HELP = "screen one coast against a set of sources (explicit sources, scenario files, trench sweeps)"


def configure(p: argparse.ArgumentParser) -> None:
    """Add the command's arguments."""
    p.add_argument("setfile", help="source-set file (TOML, see docs/sourcesets.md)")
    p.add_argument("--out", required=True, help="folder for the set outputs")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--scheduler", default=None,
                   help="dask.distributed scheduler address (default: Dask threads on this machine)")
    p.add_argument("--rays", type=int, default=None, help="override the number of rays per source")
    p.add_argument("--store", default=None,
                   help="folder of finished members reused by a rerun (default: <out>_members beside --out)")


def run(args: argparse.Namespace) -> int:
    """Run the set and write its folder; returns the exit code."""
    if args.rays is not None and args.rays < 8:
        raise InputError(f"--rays {args.rays}: expected at least 8 rays per source")
    out = pathlib.Path(args.out)
    res = run_source_set(args.setfile, out, overwrite=args.overwrite, scheduler=args.scheduler, rays=args.rays,
                         progress=not getattr(args, "quiet", 0), store=args.store)
    print(res.summary())
    print(f"outputs: {out}")
    return 0
