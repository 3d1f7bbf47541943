"""Benchmark of the linear long-wave check solver: cell-updates per second at 1 and 2 threads.

Grid: 2000 x 2000 cells of 1 km (projected metres), depth 4 km mean with 5 % rms Gaussian random
fluctuations of 20 km correlation length (tsunamifocus.randomfield.gaussian_random_field, seed 0),
a 30 km Gaussian hump of 1 m in the middle, absorbing edges, a few hundred steps.
A cell update = one grid cell advanced by one time step (both flux faces and the surface).
Besides the wall-clock rate the script prints updates per CPU-second of the process (all threads),
which stays meaningful when other jobs share the cores, and the load average at the start.

Run:  python benchmarks/bench_wave.py [--steps 300] [--n 2000] [--threads 1 2]
"""

from __future__ import annotations

import argparse
import os
import platform
import time

import numba
import numpy as np

from tsunamifocus.grid import make_grid
from tsunamifocus.ocean.randomfield import gaussian_random_field
from tsunamifocus.propagation.wave import simulate_linear_long_wave, wave_time_step


def main() -> None:
    """Run the benchmark and print the figures side by side."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=2000, help="cells per side (default 2000)")
    ap.add_argument("--steps", type=int, default=300, help="time steps per run (default 300)")
    ap.add_argument("--threads", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--repeat", type=int, default=2, help="runs per thread count; best is reported")
    args = ap.parse_args()

    n, dx = args.n, 1000.0
    x = np.arange(n) * dx
    y = np.arange(n) * dx
    depth = make_grid(4000.0 * (1.0 + gaussian_random_field((n, n), dx, 20_000.0, rms=0.05, seed=0)), x, y, "EPSG:3857")
    xx, yy = np.meshgrid(x - x.mean(), y - y.mean())
    eta0 = depth.copy(data=np.exp(-(xx**2 + yy**2) / (2 * 30_000.0**2)))
    dt = wave_time_step(depth)
    duration = args.steps * dt * (1 - 1e-12)

    # compile (numba cache) on a small grid first so it is not timed
    small = depth.isel(x=slice(0, 64), y=slice(0, 64))
    simulate_linear_long_wave(small, eta0.isel(x=slice(0, 64), y=slice(0, 64)), duration_s=10 * dt)

    load0 = os.getloadavg()[0]
    rows = []
    ref = None
    for th in args.threads:
        best = None
        cpu_best = 0.0
        for _ in range(args.repeat):
            c0 = time.process_time()
            r = simulate_linear_long_wave(depth, eta0, duration_s=duration, threads=th)
            cpu = time.process_time() - c0
            if best is None or r.stats["elapsed_s"] < best.stats["elapsed_s"]:
                best = r
                cpu_best = cpu
        assert best is not None
        best.stats["cpu_s"] = cpu_best
        same = "" if ref is None else ("identical" if np.array_equal(ref, best.eta.values) else "DIFFERENT")
        if ref is None:
            ref = best.eta.values
        rows.append((th, best.stats, same))

    print(f"grid {n} x {n} cells of {dx / 1000:.0f} km, mean depth 4 km +-5 % (20 km corr.), "
          f"dt = {rows[0][1]['dt_s']:.3f} s, {rows[0][1]['steps']} steps")
    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} CPUs, numba {numba.__version__} "
          f"({numba.threading_layer()} layer), load average at start {load0:.1f}")
    print(f"{'threads':>8} {'wall [s]':>10} {'cell-updates/s':>16} {'per CPU-s':>12} {'speed-up':>9} "
          f"{'mass err':>10}  result vs 1st")
    base = rows[0][1]["cell_updates_per_s"]
    for th, st, same in rows:
        per_cpu = st["n_cells"] * st["steps"] / st["cpu_s"] if st["cpu_s"] > 0 else float("nan")
        print(f"{th:>8d} {st['elapsed_s']:>10.2f} {st['cell_updates_per_s']:>16.3e} {per_cpu:>12.3e} "
              f"{st['cell_updates_per_s'] / base:>9.2f} {st['mass_error']:>10.1e}  {same}")


if __name__ == "__main__":
    main()
