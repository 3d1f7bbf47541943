"""Benchmark of the nested wave check against the check refined everywhere, side by side.

The real-grid case of ``bench_focusing.py`` (the Japan Trench interface, Mw 9.0; the North American
coast 32-49 N on the 0.1 degree global relief, ``$TSUNAMIFOCUS_SHARED_DATA/etopo1_0p1deg.nc``). The
wave check (:func:`tsunamifocus.studies.check.compare_with_waves`, real and reference oceans) is run

* on the run's own grid (``refine=1``);
* refined ``N`` times everywhere (``nest=False``) and refined ``N`` times in a box around the coast
  only (``nest=True``, :func:`tsunamifocus.propagation.nest.simulate_nested`; for ``N`` of 4 or
  more the ocean around the box is refined too, :func:`tsunamifocus.propagation.nest.ocean_factor`),
  for each ``N`` of ``--refine`` (default 2). ``--nest-only N`` adds factors run nested only (a
  whole-grid 4x check takes 38-64 minutes on 2 cores).

It prints each check's wall time and the agreement of the wave rankings between every pair of
checks (amplitude at the stop isobath and lensing: Spearman and top-10 overlap), and of the rays
(seed 0, default settings) with each. Numba is warmed first. Only times measured in one run on a
quiet machine mean anything; the load average is printed.

Run:  python benchmarks/bench_nest.py [--refine 2] [--nest-only 4] [--save tables.csv]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings

import numpy as np
import pandas as pd

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import bench_focusing as B  # noqa: E402  (the shared real-grid case)

from tsunamifocus.errors import ResolutionWarning  # noqa: E402
from tsunamifocus.focusing.agreement import compare_rankings  # noqa: E402
from tsunamifocus.studies.check import NEST_MARGIN_KM, compare_with_waves  # noqa: E402
from tsunamifocus.studies.run import _segments_for, analyse_source, load_scenario_bathymetry  # noqa: E402

K = 10


def _pair(t1, t2, col: str) -> str:
    a = compare_rankings(t1[col].where(t1["ranked"]), t2[col].where(t2["ranked"]), k=K)
    return f"{a['spearman']:.3f} {a['topk_common']}/{K}"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--refine", type=int, nargs="*", default=[2], help="factors run both ways")
    ap.add_argument("--nest-only", type=int, nargs="*", default=[], help="factors run nested only")
    ap.add_argument("--save", help="write every check's segment table to this CSV (one column per check and value)")
    args = ap.parse_args()
    data = B.shared_data_dir()
    if data is None:
        raise SystemExit("bench_nest: the shared data folder with etopo1_0p1deg.nc was not found "
                         "(set TSUNAMIFOCUS_SHARED_DATA)")
    warnings.simplefilter("ignore", ResolutionWarning)
    sc = B.real_scenario(data / "etopo1_0p1deg.nc")
    print(f"load average at start: {os.getloadavg()[0]:.2f}; box margin {NEST_MARGIN_KM:g} km", flush=True)
    B.warm_up(B.parse_scenario(B.DEMO_SCENARIO), sc)
    depth = load_scenario_bathymetry(sc)
    a = analyse_source(depth, B.with_seed(sc, 0, None), sc.sources[0], segments=_segments_for(depth, sc))
    seg = a.focusing.segments
    runs = [("run's grid", 1, False)]
    for r in args.refine:
        runs += [(f"{r}x whole grid", r, False), (f"{r}x nested", r, True)]
    runs += [(f"{r}x nested", r, True) for r in args.nest_only]
    tabs = {}
    print(f"{'check':<16} {'wall s':>7} {'box share':>9} {'cells/wavelength':>16}  rays vs it: amplitude | lensing")
    for label, r, nest in runs:
        t0 = time.perf_counter()
        chk = compare_with_waves(depth, a.eta, seg, reference_depth=a.focusing.reference_depth, stop_depth_m=20.0,
                                 k=K, refine=r, nest=nest, period_s=a.period_s)
        wall = time.perf_counter() - t0
        t = chk.table.set_index("segment_id")
        tabs[label] = t
        share = chk.agreement["nest"]["share"] if chk.agreement.get("nest") else 1.0
        cpw = chk.agreement["resolution"]["cells_per_wavelength"]
        lens = chk.agreement["lensing"]
        print(f"{label:<16} {wall:>7.1f} {share:>9.3f} {cpw:>16.1f}  {chk.agreement['spearman']:.3f} "
              f"{chk.agreement['topk_common']}/{K} | {lens['spearman']:.3f} {lens['topk_common']}/{K}", flush=True)
    print("\nthe wave checks against each other: amplitude | lensing")
    labels = list(tabs)
    for i, l1 in enumerate(labels):
        for l2 in labels[i + 1:]:
            print(f"  {l1:<16} vs {l2:<16} {_pair(tabs[l1], tabs[l2], 'wave_amp_stop_m')} | "
                  f"{_pair(tabs[l1], tabs[l2], 'wave_lensing')}")
    n = {lab: int(np.isfinite(t['wave_amp_stop_m'].where(t['ranked'])).sum()) for lab, t in tabs.items()}
    print("\nranked segments with a wave value:", ", ".join(f"{k} {v}" for k, v in n.items()))
    if args.save:  # later comparisons (another nesting, another judge) without re-running the long checks
        cols = {f"{lab}: {c}": t[c] for lab, t in tabs.items() for c in ("ranked", "wave_amp_stop_m", "wave_lensing")}
        pd.DataFrame(cols).to_csv(args.save)
        print(f"tables: {args.save}")


if __name__ == "__main__":
    main()
