"""Designs of the invented demo's sea floor against the wave check, over several relief realizations.

The demo's focusing must come from features ray theory can follow, or its lensing ranking cannot
hold against the wave (docs/focusing.md, "The demo's sea floor"). This script regenerates the
demo's sea floor for each design and each realization of its random relief
(``DemoRegion.seed``), runs the ray pipeline of ``sample_scenarios/meridane.toml`` at its default
settings (rays of seeds 7 and 8) and the wave check as it runs by default (``refine="auto"``),
and prints, side by side, the amplitude and lensing rankings' agreement with the wave (Spearman,
top-10 overlap) and each design's mean over the realizations.

Designs (heights, positions, the coast and the source are the same in all):

* ``previous`` - the sea floor before 2026-12-03: plateau 220 x 160 km with ~20 km flanks, ridge
  70 km wide, seamounts 45-65 km across, a 12 km fracture-zone trough, red relief down to 12 km;
* ``current`` - the demo as shipped (``tsunamifocus.ocean.demo``): every feature at least about
  half the deep-water wavelength across;
* with ``--all``, the five other designs of the table in docs/focusing.md (``flanks140``: the
  middle half of the plateau's rise over 120-160 km of flank; ``flanks65``: over 55-75 km, as
  shipped; ``seamounts2`` / ``2.5``: the previous seamount radii doubled / times 2.5).

Each design is a set of ``DemoRegion`` fields (``DemoFeatures`` sizes, the relief's shortest scale and rms).

``--fractions`` traces the rays over oceans wavelength-smoothed with each of the given Gaussian
widths (in local wavelengths; default the shipped ``WAVELENGTH_FRACTION``), and ``--judge-refine``
solves the wave check on the sea floor refined by each given factor instead of its default choice
(4 is converged on the demo: 3x against 4x agree at 0.995 in amplitude and 0.982 in lensing), so
that a setting can be judged on every realization against a converged wave.

``--min-widths`` spreads each caustic's energy over at least the given numbers of local
wavelengths along the coast (``coast.tubes.TUBE_MIN_WIDTH``; the shipped default 2 was chosen
among 0.5-3, docs/focusing.md, "The caustic footprint's width"; ``--designs current --min-widths
1 2 --judge-refine 2 4`` reproduces the old and the new default on every realization).

Run:  python benchmarks/bench_demo_design.py [--all | --designs current ...] [--realizations 20261202 1 2 3]
          [--fractions 0.25 0.06] [--min-widths 1 2] [--judge-refine 2 4]
"""

from __future__ import annotations

import argparse
import dataclasses
import itertools
import pathlib
import tempfile
import time
import warnings

import pandas as pd

import tsunamifocus.ocean.demo as demo
from tsunamifocus.coast.tubes import TUBE_MIN_WIDTH
from tsunamifocus.focusing.agreement import compare_rankings
from tsunamifocus.focusing.ranking import ranked_values
from tsunamifocus.io.scenario import parse_scenario
from tsunamifocus.ocean.wavelength import WAVELENGTH_FRACTION
from tsunamifocus.products.demo import write_demo_data
from tsunamifocus.studies.check import compare_with_waves
from tsunamifocus.studies.run import _segments_for, analyse_source, load_scenario_bathymetry

REPO = pathlib.Path(__file__).resolve().parents[1]
SCENARIO = REPO / "sample_scenarios" / "meridane.toml"
K = 10
PREVIOUS_SIGMAS = (22.0, 28.0, 32.0, 26.0, 30.0)


def _design(radii, flank, height, ridge, seamount_factor, fracture, smallest_km, rms_m=250.0):
    """Region parameters of one design (``seamount_factor`` scales the previous seamounts' sigmas)."""
    f = demo.DemoFeatures(plateau_radii_km=radii, plateau_flank_slope=flank, plateau_height_m=height,
                          ridge_halfwidth_km=ridge,
                          seamount_sigmas_km=tuple(seamount_factor * r for r in PREVIOUS_SIGMAS),
                          fracture_step_km=fracture[0], fracture_trough_km=fracture[1])
    return {"features": f, "relief_smallest_km": smallest_km, "relief_rms_m": rms_m}


#: name -> DemoRegion fields (heights, positions, the coast and the source are those of the demo)
DESIGNS: dict[str, dict] = {
    "previous": _design((110.0, 80.0), 5.0, 2600.0, 35.0, 1.0, (15.0, 12.0), 12.0),
    "current": {},  # the shipped demo
    "flanks140_seamounts2.5": _design((200.0, 150.0), 1.5, 2600.0, 100.0, 2.5, (80.0, 60.0), 80.0),
    "flanks140_seamounts2.5_relief150": _design((200.0, 150.0), 1.5, 2600.0, 100.0, 2.5, (80.0, 60.0), 80.0,
                                                rms_m=150.0),
    "flanks65_seamounts2.5": _design((200.0, 150.0), 3.0, 2600.0, 100.0, 2.5, (80.0, 60.0), 80.0),
    "flanks140_seamounts2": _design((200.0, 150.0), 1.5, 2600.0, 100.0, 2.0, (80.0, 60.0), 80.0),
    "flanks65_plateau2000": _design((200.0, 150.0), 3.0, 2000.0, 100.0, 2.5, (80.0, 60.0), 80.0),
    "flanks65_plateau2000_seamounts2": _design((200.0, 150.0), 3.0, 2000.0, 100.0, 2.0, (80.0, 60.0), 80.0),
}
SHOWN_BY_DEFAULT = ("previous", "current")


def run_one(name: str, realization: int, folder: pathlib.Path, fractions: list[float] | None = None,
            judges: list[int | str] | None = None, min_widths: list[float] | None = None) -> list[dict]:
    """Generate one design and realization, trace two ray seeds per (fraction, footprint width), check once per judge grid.

    Returns one row of figures per (fraction, footprint width, judge).
    """
    region = dataclasses.replace(demo.DemoRegion(), seed=realization, **DESIGNS[name])
    write_demo_data(folder / "data", region)
    (folder / "m.toml").write_text(SCENARIO.read_text(encoding="utf-8"), encoding="utf-8")
    sc = parse_scenario(folder / "m.toml")
    depth = load_scenario_bathymetry(sc)
    segments = _segments_for(depth, sc)
    rows = []
    waves: dict = {}
    for frac, minw in itertools.product(fractions or [WAVELENGTH_FRACTION], min_widths or [TUBE_MIN_WIDTH]):
        runs = [analyse_source(depth, dataclasses.replace(sc, rays=dataclasses.replace(sc.rays, seed=s)),
                               sc.sources[0], segments=segments, keep_paths=0, wavelength_fraction=frac,
                               min_width_factor=minw)
                for s in (7, 8)]
        a = runs[0]
        for judge in judges or ["auto"]:
            if judge not in waves:  # the wave does not depend on the rays' smoothing
                chk = compare_with_waves(depth, a.eta, a.focusing.segments, reference_depth=a.focusing.reference_depth,
                                         stop_depth_m=sc.rays.stop_depth_m, k=K, period_s=a.period_s, refine=judge)
                waves[judge] = chk.table.set_index("segment_id")
            wave = waves[judge]
            out = {"design": name, "realization": realization, "fraction": frac, "min_width": minw, "judge": judge}
            for i, r in enumerate(runs):
                seg = r.focusing.segments
                amp = pd.Series(ranked_values(seg, "amp_stop_m"), index=seg["segment_id"].to_numpy())
                lens = pd.Series(ranked_values(seg, "lensing_factor"), index=seg["segment_id"].to_numpy())
                ca = compare_rankings(amp, wave["wave_amp_stop_m"], k=K)
                cl = compare_rankings(lens, wave["wave_lensing"], k=K)
                out[f"amp_{i}"], out[f"amp_top_{i}"] = ca["spearman"], ca["topk_common"]
                out[f"lens_{i}"], out[f"lens_top_{i}"] = cl["spearman"], cl["topk_common"]
            rows.append(out)
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--all", action="store_true", help="all seven designs of docs/focusing.md, not only previous and current")
    ap.add_argument("--realizations", type=int, nargs="+", default=[20261202, 1, 2, 3],
                    help="DemoRegion.seed values (the demo's own is 20261202)")
    ap.add_argument("--designs", nargs="+", choices=list(DESIGNS), default=None,
                    help="only these designs (default: previous and current, or all with --all)")
    ap.add_argument("--fractions", type=float, nargs="+", default=[WAVELENGTH_FRACTION],
                    help="wavelength-smoothing widths of the rays' oceans, in local wavelengths")
    ap.add_argument("--min-widths", type=float, nargs="+", default=[TUBE_MIN_WIDTH],
                    help="smallest tube footprints along the coast, in local wavelengths (caustic regularisation)")
    ap.add_argument("--judge-refine", type=int, nargs="+", default=None,
                    help="solve the wave check on the sea floor refined by these factors (default: its own choice)")
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    names = args.designs or (list(DESIGNS) if args.all else list(SHOWN_BY_DEFAULT))
    rows = []
    t0 = time.perf_counter()
    for name in names:
        for r in args.realizations:
            with tempfile.TemporaryDirectory() as tmp:
                new = run_one(name, r, pathlib.Path(tmp), args.fractions, args.judge_refine, args.min_widths)
            rows += new
            for x in new:
                print(f"{name:34s} {r:>9d}  fraction {x['fraction']:<5g} width {x['min_width']:<4g} judge {str(x['judge']):>4s}  amplitude "
                      f"{x['amp_0']:.3f} {x['amp_top_0']:2d}/10 ({x['amp_1']:.3f} {x['amp_top_1']:2d}/10)   lensing "
                      f"{x['lens_0']:.3f} {x['lens_top_0']:2d}/10 ({x['lens_1']:.3f} {x['lens_top_1']:2d}/10)", flush=True)
    df = pd.DataFrame(rows)
    df["judge"] = df["judge"].astype(str)
    print(f"\nmeans over realizations {args.realizations} (rays of seed 7; seed 8 in brackets), "
          f"{time.perf_counter() - t0:.0f} s in all")
    print(f"{'design':34s} fraction width judge  amplitude        top-10      lensing          top-10")
    for (name, frac, minw, judge), g in df.groupby(["design", "fraction", "min_width", "judge"], sort=False):
        print(f"{name:34s} {frac:<8g} {minw:<5g} {judge:>5s}  {g['amp_0'].mean():.3f} ({g['amp_1'].mean():.3f})  "
              f"{g['amp_top_0'].mean():4.2f} ({g['amp_top_1'].mean():4.2f})  {g['lens_0'].mean():.3f} ({g['lens_1'].mean():.3f})  "
              f"{g['lens_top_0'].mean():4.2f} ({g['lens_top_1'].mean():4.2f})")


if __name__ == "__main__":
    main()
