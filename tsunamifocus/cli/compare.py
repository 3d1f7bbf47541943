"""``tsunamifocus compare RUN RUN ... --out DIR``: compare the rankings of finished runs."""

from __future__ import annotations

import argparse
import pathlib

from ..constants import DEFAULTS
from ..errors import InputError
from ..io.guards import check_output_folder
from ..io.runfolder import OutputFolder
from ..io.runs import read_run
from ..products.comparison import _summary_of, compare_to_folder, comparison_appendix
from ..studies.compare import compare_runs

NAME = "compare"
HELP = "compare the rankings of two or more finished runs"


def configure(p: argparse.ArgumentParser) -> None:
    """Add the command's arguments."""
    p.add_argument("runs", nargs="+", help="two or more finished run folders")
    p.add_argument("--out", required=True, help="folder for the comparison outputs")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    top_k = DEFAULTS["output"]["top_k"]
    p.add_argument("--top", type=int, default=top_k, help=f"k of the top-k counts (default {top_k}, as [output] top_k)")


def run(args: argparse.Namespace) -> int:
    """Compare the runs and write the comparison folder; returns the exit code."""
    if len(args.runs) < 2:
        raise InputError("compare needs at least two run folders")
    out = pathlib.Path(args.out)
    check_output_folder(out, overwrite=args.overwrite, kind="comparison",
                        inputs=[("run folder", r) for r in args.runs])
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
