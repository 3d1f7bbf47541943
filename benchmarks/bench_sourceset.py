"""Source-set throughput: a sweep along the demo trench at default settings, beside a single run.

Usage::

    python benchmarks/bench_sourceset.py [--sources 100] [--rays N]

Builds a set of ``--sources`` ruptures swept along the invented demo trench (Mw 7.8-8.8, placed
every few km so that the requested count is reached) against the demo scenario's grid and coast
with its settings (``--rays`` overrides the ray count), runs it with the default local Dask
scheduler into a temporary folder and prints, side by side: the time of one full single-source
run of the same scenario (three period bands, as ``tsunamifocus run`` does), the per-member time
of the set (three period bands as the single run, one ray thread per member, members in parallel
on the cores), the total set time and the projection for 100 sources. Figures are wall clock on
whatever machine runs this; other processes sharing the cores slow them down.
"""

from __future__ import annotations

import argparse
import dataclasses
import pathlib
import tempfile
import time

import numpy as np
from pyproj import Geod

from tsunamifocus.io.scenario import parse_scenario
from tsunamifocus.io.sourceset import SourceSet, SweepConfig
from tsunamifocus.products.demo import demo_inputs
from tsunamifocus.products.sourceset import run_source_set
from tsunamifocus.source.faults import strasser2010_interface
from tsunamifocus.studies.run import analyse_scenario


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sources", type=int, default=100)
    ap.add_argument("--rays", type=int, default=None)
    args = ap.parse_args()
    tmp = pathlib.Path(tempfile.mkdtemp(prefix="bench_set_"))
    sc = parse_scenario(demo_inputs(tmp / "inputs"))
    sc = dataclasses.replace(sc, ensemble=dataclasses.replace(sc.ensemble, members=0))
    if args.rays:
        sc = dataclasses.replace(sc, rays=dataclasses.replace(sc.rays, count=args.rays))
    # the demo trench extended along its strike (invented line)
    (lo1, la1), (lo2, la2) = sc.sources[0].segments[0].trace
    g = Geod(ellps="WGS84")
    az = g.inv(lo1, la1, lo2, la2)[0]
    a = g.fwd(lo1, la1, az + 180.0, 250e3)
    b = g.fwd(lo2, la2, az, 250e3)
    trace = ((a[0], a[1]), (b[0], b[1]))
    total_km = g.inv(a[0], a[1], b[0], b[1])[2] / 1e3
    mags = (7.8, 8.1, 8.4, 8.6, 8.8)
    per_mag = int(np.ceil(args.sources / len(mags)))
    lengths = [strasser2010_interface(m)[0] for m in mags]
    spacing = max(1.0, (total_km - max(lengths)) / max(per_mag - 1, 1))
    sweep = SweepConfig(name="demo trench", trace=trace, spacing_km=spacing, magnitudes=mags,
                        magnitude_weights=tuple(1.0 for _ in mags), dip_deg=(12.0,), top_depth_km=5.0)
    sset = SourceSet(name="bench", scenario=sc, top_k=sc.output.top_k, members=(), sweeps=(sweep,))

    t0 = time.perf_counter()
    single = analyse_scenario(sc, progress=False)
    t_single = time.perf_counter() - t0
    rays = single.choices["rays"].value
    t0 = time.perf_counter()
    res = run_source_set(sset, tmp / "set", progress=True)
    t_set = time.perf_counter() - t0
    n = len(res.members)
    ok = int((res.members["status"] != "failed").sum())
    per = res.timings["member_s_mean"]
    print(f"\nsource set on the demo ({rays} rays per source, grid {single.depth.shape[0]} x {single.depth.shape[1]})")
    print(f"{'single run (3 bands)':>24} | {'set member (3 bands, 1 thread)':>31} | {'set total':>10} | "
          f"{'members':>8} | {'per member, wall':>16} | {'100 sources, projected':>22}")
    print(f"{t_single:>22.1f} s | {per:>29.1f} s | {t_set:>8.1f} s | {ok:>3}/{n:<4} | {t_set / n:>14.1f} s | "
          f"{100 * t_set / n / 60:>19.1f} min")


if __name__ == "__main__":
    main()
