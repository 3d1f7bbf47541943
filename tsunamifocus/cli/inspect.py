"""``tsunamifocus inspect GRID``: summarise a bathymetry grid."""

from __future__ import annotations

import argparse
import json

from ..constants import DEFAULTS
from ..io.bathymetry import load_bathymetry
from ..products.summaries import format_summary
from ..studies.inspect import summarize_grid

NAME = "inspect"
HELP = "summarise a bathymetry grid"


def configure(p: argparse.ArgumentParser) -> None:
    """Add the command's arguments."""
    p.add_argument("path", help="bathymetry grid (GeoTIFF, NetCDF, ESRI ASCII ...)")
    p.add_argument("--values", choices=["auto", "elevation", "depth"], default="auto",
                   help="stored numbers are elevation (negative below sea level) or depth (positive down)")
    p.add_argument("--variable", help="NetCDF variable name, if the file has several")
    p.add_argument("--crs", help="CRS to assume when the file has none (e.g. EPSG:4326)")
    p.add_argument("--units", help="vertical units when the file declares none (m or ft)")
    limit = DEFAULTS["bathymetry"]["max_memory_gb"]
    p.add_argument("--max-memory-gb", type=float, default=None, help="refuse grids needing more memory [GB] (default "
                   f"{limit:g}, as [bathymetry] max_memory_gb, or $TSUNAMIFOCUS_MAX_MEMORY_GB)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")


def run(args: argparse.Namespace) -> int:
    """Print the grid summary; returns the exit code."""
    depth = load_bathymetry(
        args.path, values=args.values, variable=args.variable, crs=args.crs, units=args.units,
        max_memory_gb=args.max_memory_gb,
    )
    s = summarize_grid(depth)
    if args.json:
        print(json.dumps(s, indent=2, default=float))
    else:
        print(format_summary(s))
    return 0
