"""``tsunamifocus check RUN_DIR``: check a run's ranking against the linear long-wave solver."""

from __future__ import annotations

import argparse

from ..constants import DEFAULTS, WORK_LIMITS
from ..grid import MAX_REFINE_FACTOR
from ..products.check import run_wave_check
from ..studies.check import AUTO_REFINE, MIN_CELLS_PER_WAVELENGTH, NEST_DEFAULT, NEST_MARGIN_KM

NAME = "check"
HELP = "check a run's ranking against a linear long-wave (shallow-water) simulation"


def configure(p: argparse.ArgumentParser) -> None:
    """Add the command's arguments."""
    p.add_argument("run_dir", help="a finished run folder")
    p.add_argument("--out", help="output folder (default: RUN_DIR/wave_check)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--hours", type=float,
                   help="simulated duration [h] (default: 1.2 x the latest first arrival of the run's segments + 1 h)")
    p.add_argument("--force", action="store_true", help="run the wave solver even beyond the work limit of "
                   f"{WORK_LIMITS['wave_cell_updates']:.3g} wet-cell updates (cells x time steps)")
    p.add_argument("--refine", type=_refine_arg, default=AUTO_REFINE, metavar="N|auto",
                   help="solve the wave on the run's sea floor interpolated onto a grid N times finer "
                   f"(1-{MAX_REFINE_FACTOR}; more cells per wavelength near the coast, about N^3 times the cost; "
                   f"1: the run's grid; default {AUTO_REFINE}: the coarsest grid with at least "
                   f"{MIN_CELLS_PER_WAVELENGTH:g} cells per dominant wavelength at the stop isobath, within the "
                   "memory and work limits)")
    p.add_argument("--nest", action=argparse.BooleanOptionalAction, default=NEST_DEFAULT,
                   help=f"refine only a box around the segments ({NEST_MARGIN_KM:g} km of sea around "
                   "them), one-way nested in the wave solved on the run's grid (itself refined for a box refined "
                   "4x or more): the coast as finely resolved at a fraction of the cost; the whole grid is refined "
                   "when the box would hold more than half of it (default: "
                   + ("--nest" if NEST_DEFAULT else "--no-nest") + "; --no-nest refines the whole grid)")
    top_k = DEFAULTS["output"]["top_k"]
    p.add_argument("--top", type=int, default=top_k, help=f"k of the top-k overlap (default {top_k}, as [output] top_k)")


def _refine_arg(text: str) -> int | str:
    """``--refine`` value: ``auto`` or an integer factor (range checked by the check itself)."""
    if text.strip().lower() == AUTO_REFINE:
        return AUTO_REFINE
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected {AUTO_REFINE!r} or an integer from 1 to {MAX_REFINE_FACTOR}, "
                                         f"got {text!r}") from None


def run(args: argparse.Namespace) -> int:
    """Run the check; returns the exit code."""
    run_wave_check(args.run_dir, out=args.out, overwrite=args.overwrite, hours=args.hours, k=args.top,
                   progress=getattr(args, "quiet", 0) == 0, force=args.force,
                   refine=args.refine, nest=args.nest)
    return 0
