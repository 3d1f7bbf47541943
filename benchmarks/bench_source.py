"""Benchmark of the source stage: Okada uplift on a grid, Kajiura filter and ray-fan construction.

Grid: lon/lat, 1 arc-minute cells over 20 x 17 degrees (1.22 million cells), flat 5 km ocean;
an invented Mw 9.0 interface thrust (Strasser et al. 2010 geometry, top 5 km, dip 12 degrees).
Also the raw okada85 throughput (points per second) on a vector of points.

Run:  python benchmarks/bench_source.py [--rays 20000] [--repeat 2]
"""

from __future__ import annotations

import argparse
import platform
import time

import numpy as np

from tsunamifocus.grid import make_grid
from tsunamifocus.source.okada import okada85
from tsunamifocus.source.faults import FaultSegment
from tsunamifocus.source.rayfan import make_ray_fan
from tsunamifocus.source.uplift import uplift_on_grid


def _best(fn, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def main() -> None:
    """Run the benchmark and print the figures side by side."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rays", type=int, default=20000, help="rays in the fan (default 20000)")
    ap.add_argument("--repeat", type=int, default=2, help="runs per item; best is reported")
    args = ap.parse_args()

    lon = np.arange(130.0, 150.0, 1 / 60)
    lat = np.arange(28.0, 45.0, 1 / 60)
    depth = make_grid(np.full((lat.size, lon.size), 5000.0), lon, lat, "EPSG:4326")
    seg = FaultSegment.from_magnitude(142.0, 37.0, 20.0, 9.0, top_depth_km=5.0, dip_deg=12.0)
    n_pts = 1_000_000
    rng = np.random.default_rng(0)
    px, py = rng.uniform(-50, 50, n_pts), rng.uniform(-50, 50, n_pts)

    t_okada = _best(lambda: okada85(px, py, 20.0, 30.0, 40.0, 20.0, 1.0, 1.0, 0.0), args.repeat)
    t_up = _best(lambda: uplift_on_grid(seg, depth), args.repeat)
    t_kaj = _best(lambda: uplift_on_grid(seg, depth, kajiura=True), args.repeat)
    eta = uplift_on_grid(seg, depth)
    t_fan = _best(lambda: make_ray_fan(eta, depth, args.rays, seed=0), args.repeat)

    print(f"machine: {platform.processor() or platform.machine()}, python {platform.python_version()}")
    print(f"grid {lat.size} x {lon.size} = {lat.size * lon.size / 1e6:.2f} M cells, Mw 9.0, best of {args.repeat}")
    print(f"{'item':<34}{'seconds':>10}{'rate':>24}")
    print(f"{'okada85, 1e6 points':<34}{t_okada:>10.3f}{n_pts / t_okada / 1e6:>18.2f} Mpt/s")
    print(f"{'uplift_on_grid':<34}{t_up:>10.3f}{lat.size * lon.size / t_up / 1e6:>18.2f} Mcell/s")
    print(f"{'uplift_on_grid + Kajiura':<34}{t_kaj:>10.3f}{lat.size * lon.size / t_kaj / 1e6:>18.2f} Mcell/s")
    print(f"{'make_ray_fan (' + str(args.rays) + ' rays)':<34}{t_fan:>10.3f}{args.rays / t_fan / 1e3:>18.1f} krays/s")


if __name__ == "__main__":
    main()
