"""Out-of-sample benchmark: the ray rankings against the wave check on four trans-ocean cases.

``bench_focusing.py`` measures one real case (the project's targets are set on it). This script
measures how far the same defaults hold on other ruptures and other coasts, one run, side by side,
so that a change tuned on one case is seen on the others. All cases use the shared 0.1 degree
global relief (``$TSUNAMIFOCUS_SHARED_DATA/etopo1_0p1deg.nc``, see that folder's README) cropped
to lon 120..250 E, lat 0..65 N, a Mw 9.0 thrust (top 5 km, rake 90), rays at the default settings,
a 15 h travel-time limit, 20 km segments of the 20 m contour and a coast of interest given as a
box of segment centres. The fault traces are placed along the trench axes of the relief grid
(positions from memory, checked against the grid's depths; the trace order sets the dip side):

========  ===================================  ================  ===========================
case      trace (lon, lat) -> (lon, lat)       width, dip        coast of interest
========  ===================================  ================  ===========================
japan     (144.3, 39.8) -> (142.9, 36.3)       175 km, 12 deg    North America, 235..244 E, 32..49 N
aleutian  (191.0, 50.9) -> (185.0, 50.6)       175 km, 12 deg    North America, 235..244 E, 32..49 N
kuril     (151.5, 45.3) -> (147.5, 42.3)       175 km, 12 deg    North America, 235..244 E, 32..49 N
cascadia  (234.85, 41.5) -> (234.0, 47.5)      100 km, 10 deg    Japan, 139.5..146 E, 33..43 N
========  ===================================  ================  ===========================

For each case: the ray pipeline's wall time for two seeds, the wave check as it runs by default
(``refine="auto"``; its grid choice and wall time), the agreement of both seeds' amplitude and
lensing rankings with the wave's (Spearman, top-10 overlap, ranked segments), the agreement
between the seeds, and the share of the ranked segments' ray energy that came in tubes past their
first Fresnel zone (``capped``: rays past their predictability, docs/focusing.md). About 12-15 minutes on 2 cores (the checks dominate).

Run:  python benchmarks/bench_trans_ocean.py [--cases japan cascadia] [--rays N] [--seeds 0 1]
"""

from __future__ import annotations

import argparse
import os
import pathlib
import platform
import time
import warnings

from bench_focusing import DEMO_SCENARIO, REAL_CROP, K, _series, shared_data_dir, warm_up, with_seed

from tsunamifocus.errors import ResolutionWarning
from tsunamifocus.focusing.agreement import compare_rankings
from tsunamifocus.io.scenario import parse_scenario, scenario_from_dict
from tsunamifocus.products.summaries import capped_share
from tsunamifocus.studies.check import compare_with_waves
from tsunamifocus.studies.run import _segments_for, analyse_source, load_scenario_bathymetry

NORTH_AMERICA = [235.0, 32.0, 244.0, 49.0]
JAPAN = [139.5, 33.0, 146.0, 43.0]
#: name: (trace, width_km, dip_deg, coast-of-interest box)
CASES = {
    "japan": ([[144.3, 39.8], [142.9, 36.3]], 175.0, 12.0, NORTH_AMERICA),
    "aleutian": ([[191.0, 50.9], [185.0, 50.6]], 175.0, 12.0, NORTH_AMERICA),
    "kuril": ([[151.5, 45.3], [147.5, 42.3]], 175.0, 12.0, NORTH_AMERICA),
    "cascadia": ([[234.85, 41.5], [234.0, 47.5]], 100.0, 10.0, JAPAN),
}


def case_scenario(name: str, etopo: pathlib.Path):
    """Return one trans-ocean case as a scenario (see the module docstring)."""
    trace, width, dip, box = CASES[name]
    return scenario_from_dict({
        "scenario": {"name": f"{name}-mw90"},
        "bathymetry": {"path": str(etopo), "values": "elevation", "crop": list(REAL_CROP)},
        "source": [{"name": f"{name}-mw90", "kind": "fault", "magnitude": 9.0,
                    "segment": [{"trace": trace, "top_depth_km": 5.0, "dip_deg": dip, "width_km": width,
                                 "rake_deg": 90.0}]}],
        "rays": {"stop_depth_m": 20.0, "max_time_h": 15.0, "seed": 0},
        "coast": {"segment_km": 20.0, "region": box},
    }, base_dir=etopo.parent, origin=f"trans-ocean case {name}")


def run_case(name: str, etopo: pathlib.Path, seeds: tuple[int, int], rays: int | None) -> dict:
    """Rays for two seeds and the default wave check; the figures of one table row."""
    sc = case_scenario(name, etopo)
    depth = load_scenario_bathymetry(sc)
    segments = _segments_for(depth, sc)
    runs = []
    for s in seeds:
        scs = with_seed(sc, s, rays)
        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ResolutionWarning)  # coverage notes, reported by the run itself
            a = analyse_source(depth, scs, scs.sources[0], segments=segments, keep_paths=0)
        runs.append((time.perf_counter() - t0, a))
    a = runs[0][1]
    t0 = time.perf_counter()
    chk = compare_with_waves(depth, a.eta, a.focusing.segments, reference_depth=a.focusing.reference_depth,
                             stop_depth_m=sc.rays.stop_depth_m, k=K, period_s=a.period_s)
    out = {"case": name, "rays": a.fan.n_rays, "ray_s": runs[0][0], "check_s": time.perf_counter() - t0,
           "period_min": a.period_s / 60.0, "grid": _grid_words(chk.agreement),
           "capped": capped_share(a.focusing.segments)}
    w = chk.table.set_index("segment_id")
    for i, (_, ai) in enumerate(runs):
        sg = ai.focusing.segments
        out[f"amp_{i}"] = compare_rankings(_series(sg, "amp_stop_m"), w["wave_amp_stop_m"], k=K)
        out[f"lens_{i}"] = compare_rankings(_series(sg, "lensing_factor"), w["wave_lensing"], k=K)
    s0, s1 = runs[0][1].focusing.segments, runs[1][1].focusing.segments
    out["amp_seeds"] = compare_rankings(_series(s0, "amp_stop_m"), _series(s1, "amp_stop_m"), k=K)
    out["lens_seeds"] = compare_rankings(_series(s0, "lensing_factor"), _series(s1, "lensing_factor"), k=K)
    return out


def _grid_words(agreement: dict) -> str:
    """The check's grid in a few characters: ``2x``, ``4x box / 2x``."""
    nest = agreement.get("nest")
    if nest:
        return f"{agreement['refine']}x box/{nest['ocean_refine']}x"
    return f"{agreement['refine']}x"


def _pair(r0: dict, r1: dict) -> str:
    return f"{r0['spearman']:6.3f} /{r1['spearman']:6.3f}  {r0['topk_common']:2d}/{r1['topk_common']:2d}"


def print_table(rows: list[dict], seeds: tuple[int, int]) -> None:
    """The cases side by side."""
    print(f"\nrays vs the default wave check (Spearman seed {seeds[0]} / seed {seeds[1]}, top-{K} overlap), "
          "and the two seeds against each other")
    print(f"{'case':9s} {'T0 min':>6s} {'n':>4s} {'rays s':>6s} {'check':>13s} {'check s':>7s}   "
          f"{'amplitude vs wave':>22s}   {'lensing vs wave':>22s}   {'seeds amp':>10s} {'seeds lens':>10s}  capped")
    for r in rows:
        print(f"{r['case']:9s} {r['period_min']:6.1f} {r['amp_0']['n']:4d} {r['ray_s']:6.1f} {r['grid']:>13s} "
              f"{r['check_s']:7.0f}   {_pair(r['amp_0'], r['amp_1']):>22s}   {_pair(r['lens_0'], r['lens_1']):>22s}   "
              f"{r['amp_seeds']['spearman']:6.3f} {r['amp_seeds']['topk_common']:2d}  "
              f"{r['lens_seeds']['spearman']:6.3f} {r['lens_seeds']['topk_common']:2d}  {100 * (r['capped'] or 0):4.0f} %")
    if rows:
        mean = sum(0.5 * (r["amp_0"]["spearman"] + r["amp_1"]["spearman"]) for r in rows) / len(rows)
        print(f"mean amplitude Spearman over the cases and seeds: {mean:.3f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="+", choices=list(CASES), default=list(CASES), help="cases to run (default: all)")
    ap.add_argument("--rays", type=int, default=None, help="ray count (default: the project default)")
    ap.add_argument("--seeds", type=int, nargs=2, default=(0, 1), help="two ray seeds")
    args = ap.parse_args()
    d = shared_data_dir()
    if d is None:
        raise SystemExit("shared open data not found: set TSUNAMIFOCUS_SHARED_DATA to the folder holding "
                         "etopo1_0p1deg.nc")
    print(f"python {platform.python_version()}, {os.cpu_count()} cores, load {os.getloadavg()[0]:.2f} at start")
    warm_up(parse_scenario(DEMO_SCENARIO), case_scenario("japan", d / "etopo1_0p1deg.nc"))  # numba: not timed
    rows = []
    for name in args.cases:
        print(f"{name}: rays (2 seeds) and the default wave check ...", flush=True)
        rows.append(run_case(name, d / "etopo1_0p1deg.nc", tuple(args.seeds), args.rays))
    print_table(rows, tuple(args.seeds))
    print(f"load {os.getloadavg()[0]:.2f} at end")


if __name__ == "__main__":
    main()
