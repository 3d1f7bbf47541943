"""Benchmark of the focusing screening against its judge, the linear long-wave check, side by side.

Two cases:

* ``demo`` - the invented Meridane scenario (``sample_scenarios/meridane.toml``) at its own settings.
* ``real`` - the 0.1 degree global relief grid (``$TSUNAMIFOCUS_SHARED_DATA/etopo1_0p1deg.nc``, see
  that folder's README) cropped to lon 120..250 E, lat 0..65 N; a Mw 9.0 thrust off the Japan Trench
  (the interface: trace along the trench axis (144.3, 39.8)-(142.9, 36.3), dipping west under the
  island arc, top 5 km, dip 12, width 175 km, rake 90); travel-time limit
  15 h; the whole 20 m contour is cut into 20 km segments and the coast of interest (``[coast]
  region``) is the segments whose centres lie in lon 235..244 E, lat 32..49 N (the mainland coast of
  North America).

For each case the script reports

* the ray pipeline's wall time (:func:`tsunamifocus.studies.run.analyse_source`: Okada source, ray
  fan, period bands, tracing over the real, reference and constant-depth oceans, segment arrivals;
  the grid and the coastline segments are prepared beforehand and not timed) at the default
  settings (DEFAULT_RAY_COUNT rays, 3 period bands) against the wave check's wall time
  (:func:`tsunamifocus.studies.check.compare_with_waves`: the solver over the real and over the
  reference ocean, default duration) on the same grid (``refine=1``), and their ratio; the process
  CPU time (all threads) is printed too, since it stays meaningful when other jobs share the cores;
* the agreement of the ray rankings with the wave's (amplitude at the stop isobath and lensing
  factor: Spearman and top-10 overlap) for both ray seeds;
* the stability of the ray rankings between two ray seeds (top-10 overlap and Spearman of the
  amplitude and of the lensing rankings).

Numba is warmed first (a small ray run and a short wave run on the demo and on a small crop of
the real grid) so compilation is not counted. The load average at the start is printed.

The wave check is then run as it runs by default (``refine="auto"``: the same sea floor
interpolated onto the coarsest grid with ``MIN_CELLS_PER_WAVELENGTH`` cells per dominant wavelength
at the stop isobath), with its time, its agreement with the check at the grid's own spacing and the
rays' agreement with it. With ``--judge-refine N`` the wave check is run again on each case's sea floor interpolated onto
a grid N times finer (:func:`tsunamifocus.grid.refine_grid`) and the rays are compared with that
judge too: whether the check itself is converged in grid spacing near the coast
(docs/wave_check.md).

With ``--bands`` the demo's wave check is also resolved in the rays' period bands (both oceans
solved with snapshots, each cell's series band-passed with the rays' octave band edges) and each
band's ray columns are compared with the wave's band: which band's rays hold and which do not.

With ``--more-seeds N`` each case's rays are run for N further seeds and every seed's rankings are
compared with the default check: whether the two seeds of the table are typical draws.

Run:  python benchmarks/bench_focusing.py [--demo-only] [--rays N] [--seeds 7 8] [--judge-refine 2] [--more-seeds 6] [--bands]
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import pathlib
import platform
import time
import warnings

import numpy as np
import pandas as pd

from tsunamifocus.errors import ResolutionWarning
from tsunamifocus.focusing.agreement import compare_rankings
from tsunamifocus.focusing.ranking import ranked_values
from tsunamifocus.io.scenario import parse_scenario, scenario_from_dict
from tsunamifocus.propagation.wave import simulate_linear_long_wave
from tsunamifocus.studies.check import AUTO_REFINE, MIN_CELLS_PER_WAVELENGTH, compare_with_waves, wave_resolution
from tsunamifocus.studies.run import _segments_for, analyse_source, load_scenario_bathymetry
from tsunamifocus.studies.settings import DEFAULT_RAY_COUNT

REPO = pathlib.Path(__file__).resolve().parents[1]
DEMO_SCENARIO = REPO / "sample_scenarios" / "meridane.toml"
K = 10

#: The real-grid case (see the module docstring).
REAL_CROP = (120.0, 0.0, 250.0, 65.0)
REAL_COAST_BOX = (235.0, 32.0, 244.0, 49.0)  # coast of interest: lon0, lat0, lon1, lat1 of segment centres


def shared_data_dir() -> pathlib.Path | None:
    """Return the shared open-data folder (``$TSUNAMIFOCUS_SHARED_DATA`` or ``<repo>/../shared/data``)."""
    env = os.environ.get("TSUNAMIFOCUS_SHARED_DATA")
    for c in ([pathlib.Path(env)] if env else []) + [REPO.parent / "shared" / "data"]:
        if (c / "etopo1_0p1deg.nc").is_file():
            return c
    return None


def real_scenario(etopo: pathlib.Path, rays: int = DEFAULT_RAY_COUNT, seed: int = 0):
    """Return the real-grid case as a scenario (grid, source, rays, coast of interest)."""
    return scenario_from_dict({
        "scenario": {"name": "japan-trench-mw90"},
        "bathymetry": {"path": str(etopo), "values": "elevation", "crop": list(REAL_CROP)},
        "source": [{"name": "japan-trench-mw90", "kind": "fault", "magnitude": 9.0,
                    "segment": [{"trace": [[144.3, 39.8], [142.9, 36.3]], "top_depth_km": 5.0,
                                 "dip_deg": 12.0, "width_km": 175.0, "rake_deg": 90.0}]}],
        "rays": {"count": rays, "stop_depth_m": 20.0, "max_time_h": 15.0, "seed": seed},
        "coast": {"segment_km": 20.0, "region": list(REAL_COAST_BOX)},
    }, base_dir=etopo.parent, origin="real-grid case")


def with_seed(scenario, seed: int, rays: int | None):
    """Return the scenario with another ray seed (and ray count)."""
    r = scenario.rays
    return dataclasses.replace(scenario, rays=dataclasses.replace(r, seed=seed, count=rays or r.count))


def _series(seg: pd.DataFrame, col: str) -> pd.Series:
    """Return a ray column indexed by segment, NaN where its ranking does not rank the segment
    (:func:`tsunamifocus.focusing.ranking.ranked_mask`: lensing columns by ``reliable``, the others
    by ``amp_reliable``)."""
    return pd.Series(ranked_values(seg, col), index=seg["segment_id"].to_numpy())


def warm_up(demo_sc, real_sc) -> None:
    """Compile (or load from the numba cache) the ray and wave kernels on small runs."""
    sc = with_seed(demo_sc, demo_sc.rays.seed, 400)
    depth = load_scenario_bathymetry(sc)
    a = analyse_source(depth, sc, sc.sources[0], segments=_segments_for(depth, sc), keep_paths=0)
    simulate_linear_long_wave(depth, a.eta, duration_s=300.0)
    if real_sc is not None:  # lon/lat sphere: a small crop around the source
        d = load_scenario_bathymetry(real_sc).sel(lon=slice(135.0, 150.0), lat=slice(30.0, 45.0))
        sc = with_seed(real_sc, 0, 400)
        sc = dataclasses.replace(sc, coast=dataclasses.replace(sc.coast, region=None))
        a = analyse_source(d, sc, sc.sources[0], keep_paths=0)
        simulate_linear_long_wave(d, a.eta, duration_s=300.0)


def run_case(name: str, scenario, segments, depth, seeds: tuple[int, int], rays: int | None) -> dict:
    """Ray pipeline for two seeds, the wave check once, and the figures of the table."""
    out: dict = {"case": name}
    runs = []
    for s in seeds:
        sc = with_seed(scenario, s, rays)
        c0, t0 = time.process_time(), time.perf_counter()
        a = analyse_source(depth, sc, sc.sources[0], segments=segments)
        runs.append((time.perf_counter() - t0, time.process_time() - c0, a))
    out["rays"] = runs[0][2].fan.n_rays
    out["bands"] = len(runs[0][2].focusing.bands)
    out["ray_wall_s"], out["ray_cpu_s"] = runs[0][0], runs[0][1]
    out["ray_wall_s_2"] = runs[1][0]
    a = runs[0][2]
    seg = a.focusing.segments
    out["n_segments"] = len(seg)
    c0, t0 = time.process_time(), time.perf_counter()
    chk = compare_with_waves(depth, a.eta, seg, reference_depth=a.focusing.reference_depth,
                             stop_depth_m=scenario.rays.stop_depth_m, k=K, refine=1, period_s=a.period_s)
    out["wave_wall_s"], out["wave_cpu_s"] = time.perf_counter() - t0, time.process_time() - c0
    out["wave_hours"] = chk.wave.stats["duration_s"] / 3600.0
    out["wave_cells"] = int(np.isfinite(np.asarray(depth.values, float)).sum())
    wave = chk.table.set_index("segment_id")
    out["wave_table"] = wave
    for i, (_, _, ai) in enumerate(runs):
        sg = ai.focusing.segments
        out[f"amp_vs_wave_{i}"] = compare_rankings(_series(sg, "amp_stop_m"), wave["wave_amp_stop_m"], k=K)
        out[f"lens_vs_wave_{i}"] = compare_rankings(_series(sg, "lensing_factor"), wave["wave_lensing"], k=K)
    # the check's own figures must be those recomputed here for the first seed
    assert abs(chk.agreement["spearman"] - out["amp_vs_wave_0"]["spearman"]) < 1e-12
    s0, s1 = runs[0][2].focusing.segments, runs[1][2].focusing.segments
    out["amp_seeds"] = compare_rankings(_series(s0, "amp_stop_m"), _series(s1, "amp_stop_m"), k=K)
    out["lens_seeds"] = compare_rankings(_series(s0, "lensing_factor"), _series(s1, "lensing_factor"), k=K)
    out["reliable"] = int(seg["reliable"].sum()) if "reliable" in seg else len(seg)
    out["analyses"] = [ai for _, _, ai in runs]
    return out


def refined_judge(row: dict, scenario, depth, refine: int | str) -> dict:
    """The wave check again on the same sea floor interpolated onto a grid ``refine`` times finer
    (``"auto"``: the check's default choice)."""
    a = row["analyses"][0]
    c0, t0 = time.process_time(), time.perf_counter()
    chk = compare_with_waves(depth, a.eta, a.focusing.segments, reference_depth=a.focusing.reference_depth,
                             stop_depth_m=scenario.rays.stop_depth_m, k=K, refine=refine, period_s=a.period_s)
    out = {"case": row["case"], "refine": chk.agreement["refine"], "rule": str(refine),
           "wall_s": time.perf_counter() - t0, "cpu_s": time.process_time() - c0,
           "cells_per_wavelength": chk.agreement["resolution"]["cells_per_wavelength"]}
    base = wave_resolution(depth, a.period_s, stop_depth_m=scenario.rays.stop_depth_m)
    out["cells_per_wavelength_1"] = base["cells_per_wavelength"]
    fine = chk.table.set_index("segment_id")
    coarse = row["wave_table"]
    out["judges_amp"] = compare_rankings(coarse["wave_amp_stop_m"].where(coarse["ranked"]),
                                         fine["wave_amp_stop_m"].where(fine["ranked"]), k=K)
    out["judges_lens"] = compare_rankings(coarse["wave_lensing"].where(coarse["ranked"]),
                                          fine["wave_lensing"].where(fine["ranked"]), k=K)
    for i, ai in enumerate(row["analyses"]):
        sg = ai.focusing.segments
        out[f"amp_{i}"] = compare_rankings(_series(sg, "amp_stop_m"), fine["wave_amp_stop_m"], k=K)
        out[f"lens_{i}"] = compare_rankings(_series(sg, "lensing_factor"), fine["wave_lensing"], k=K)
    out["wave_table"] = fine
    return out


def more_seeds(row: dict, judge: dict, scenario, depth, n: int, rays: int | None) -> dict:
    """The ray rankings of ``n`` further seeds against the default judge: how far the two seeds of the
    table are typical draws (the wave does not depend on the seed; only the rays are run again)."""
    segments = _segments_for(depth, scenario)
    wave = judge["wave_table"]
    amp = [judge["amp_0"], judge["amp_1"]]
    lens = [judge["lens_0"], judge["lens_1"]]
    first = max(row["seeds"]) + 1
    for s in range(first, first + n):
        sc = with_seed(scenario, s, rays)
        sg = analyse_source(depth, sc, sc.sources[0], segments=segments, keep_paths=0).focusing.segments
        amp.append(compare_rankings(_series(sg, "amp_stop_m"), wave["wave_amp_stop_m"], k=K))
        lens.append(compare_rankings(_series(sg, "lensing_factor"), wave["wave_lensing"], k=K))
    return {"case": row["case"], "seeds": [*row["seeds"], *range(first, first + n)], "amp": amp, "lens": lens}


def print_more_seeds(rows: list[dict]) -> None:
    """Print every seed's agreement with the default judge and the mean over the seeds."""
    if not rows:
        return
    print()
    print("all seeds against the wave check as it runs by default (Spearman, top-10 common)")
    for r in rows:
        for key, what in (("amp", "amplitude"), ("lens", "lensing")):
            rho = np.array([d["spearman"] for d in r[key]])
            top = np.array([d["topk_common"] for d in r[key]])
            print(f"{r['case']:<6} {what:<9} seeds {r['seeds'][0]}-{r['seeds'][-1]}: mean {rho.mean():.3f} "
                  f"(min {rho.min():.3f}, max {rho.max():.3f}), top ten {top.min()}-{top.max()}/{K}: "
                  + " ".join(f"{v:.3f}" for v in rho))


def _band_maxima(res, bands: list[tuple[float, float]], dt: float) -> list[np.ndarray]:
    """Per period band: the maximum of |eta| band-passed (octave edges ``T/sqrt 2 .. sqrt 2 T``) at each cell."""
    snap = res.snapshots
    nt, ny = snap.shape[0], snap.shape[1]
    nfft = 2 * nt  # zero padding: no wrap-around of the train's end onto its start
    f = np.fft.rfftfreq(nfft, dt)
    out = [np.zeros(snap.shape[1:]) for _ in bands]
    for r0 in range(0, ny, 64):  # row blocks: a few hundred MB at a time
        F = np.fft.rfft(np.asarray(snap[:, r0:r0 + 64].values, np.float32), n=nfft, axis=0)
        for k, (t, _) in enumerate(bands):
            m = ((f >= 1.0 / (t * np.sqrt(2.0))) & (f < np.sqrt(2.0) / t))[:, None, None]
            out[k][r0:r0 + 64] = np.abs(np.fft.irfft(F * m, n=nfft, axis=0)[:nt]).max(axis=0)
    return out


def band_judge(row: dict, scenario, depth) -> dict:
    """The wave check resolved in the rays' period bands, on the check's default grid (demo-sized cases only).

    Both oceans are solved with snapshots every eighth of the shortest band's period; each cell's
    series is band-passed with the rays' octave band edges and its maximum taken; the segment
    maxima and the band lensing factor ``(max real / max reference)^2`` are compared with the rays'
    own per-band columns (``amp_stop_<band>_m``, ``lensing_<band>``).
    """
    import types

    from tsunamifocus.coast.waves import segment_max_amplitude
    from tsunamifocus.grid import refine_grid
    from tsunamifocus.studies.check import choose_refine, default_check_duration_s

    a = row["analyses"][0]
    seg = a.focusing.segments
    stop = scenario.rays.stop_depth_m
    bands = [(b.period_s, b.weight) for b in a.focusing.runs["bands"]]
    dur = default_check_duration_s(depth, seg)
    refine = choose_refine(depth, a.period_s, duration_s=dur, stop_depth_m=stop)["refine"]
    dt = min(t for t, _ in bands) / 8.0
    eta = refine_grid(a.eta, refine)
    t0 = time.perf_counter()
    amps = {}
    for ocean, d in (("real", depth), ("reference", a.focusing.reference_depth)):
        dw = refine_grid(d, refine)
        res = simulate_linear_long_wave(dw, eta, duration_s=dur, stop_depth_m=stop, coast="absorb", record_every_s=dt,
                                        max_memory_bytes=None, max_cell_updates=None)
        fields = _band_maxima(res, bands, dt)
        amps[ocean] = [segment_max_amplitude(types.SimpleNamespace(max_amplitude=res.max_amplitude.copy(data=m)),
                                             seg, dw, stop, search_radius_cells=2.0 * refine) for m in fields]
        del res
    names = ["short", "dominant", "long"] if len(bands) == 3 else [f"band{k}" for k in range(len(bands))]
    out = {"case": row["case"], "refine": refine, "wall_s": time.perf_counter() - t0, "bands": []}
    for k, ((t, w), nm) in enumerate(zip(bands, names)):
        wa, wr = amps["real"][k], amps["reference"][k]
        wl = (wa / wr) ** 2
        band = {"name": nm, "period_s": t, "weight": w}
        for i, ai in enumerate(row["analyses"]):
            sg = ai.focusing.segments
            band[f"amp_{i}"] = compare_rankings(_series(sg, f"amp_stop_{nm}_m"), wa, k=K)
            band[f"lens_{i}"] = compare_rankings(_series(sg, f"lensing_{nm}"), wl, k=K)
        ok = np.isfinite(wl.to_numpy()) & (wl.to_numpy() > 0)
        band["wave_lensing_p5_p95"] = np.percentile(wl.to_numpy()[ok], [5, 95])
        out["bands"].append(band)
    return out


def print_bands(rows: list[dict], seeds: dict) -> None:
    """Print the band-resolved agreement."""
    if not rows:
        return
    print()
    print("the wave check resolved in the rays' period bands (octave band-pass of each cell's series; "
          "rays' per-band columns against the wave's band; Spearman, top-10 common)")
    print(f"{'case':<6} {'refine':>6} {'band':<9} {'T (s)':>6} {'share':>6} {'wave lensing 5-95%':>19} "
          f"{'seed':>5}   {'amplitude':>11}   {'lensing':>11}")
    for r in rows:
        for b in r["bands"]:
            for i, sd in enumerate(seeds[r["case"]]):
                lo, hi = b["wave_lensing_p5_p95"]
                print(f"{r['case']:<6} {r['refine']:>6d} {b['name']:<9} {b['period_s']:>6.0f} {b['weight']:>6.2f} "
                      f"{lo:>9.2f} - {hi:<7.2f} {sd:>5d}   {_ag(b[f'amp_{i}'])}   {_ag(b[f'lens_{i}'])}")
        print(f"  ({r['case']}: both oceans solved with snapshots in {r['wall_s']:.0f} s)")


def print_refined(rows: list[dict], seeds: dict, ray_wall: dict, title: str) -> None:
    """Print the agreement against a wave check on a finer grid."""
    if not rows:
        return
    print()
    print(title)
    print("  (the same sea floor interpolated; cells/wl: cells per dominant wavelength at the stop isobath on the "
          "grid's own spacing -> on this grid)")
    print(f"{'case':<6} {'refine':>6} {'cells/wl':>13} {'wall':>7} {'CPU':>7} {'wave/ray':>9}   "
          f"{'grid-spacing vs this judge: amp':>32}   {'lensing':>11}")
    for r in rows:
        print(f"{r['case']:<6} {r['refine']:>6d} {r['cells_per_wavelength_1']:>5.1f} -> {r['cells_per_wavelength']:>4.1f} "
              f"{r['wall_s']:>6.0f}s {r['cpu_s']:>6.0f}s {r['wall_s'] / ray_wall[r['case']]:>9.1f}   "
              f"{_ag(r['judges_amp']):>32}   {_ag(r['judges_lens']):>11}")
    print(f"{'case':<6} {'seed':>5}   {'amplitude':>11}   {'lensing':>11}   (rays against this judge)")
    for r in rows:
        for i, sd in enumerate(seeds[r['case']]):
            print(f"{r['case']:<6} {sd:>5d}   {_ag(r[f'amp_{i}'])}   {_ag(r[f'lens_{i}'])}")


def _ag(d: dict) -> str:
    return f"{d['spearman']:>6.3f} {d['topk_common']:>2d}/{d['k']:<2d}"


def print_table(rows: list[dict]) -> None:
    """Print the side-by-side table."""
    print()
    print(f"{'case':<6} {'segs':>5} {'rays':>6} {'bands':>5} {'ray wall':>9} {'ray CPU':>8} "
          f"{'wave h':>7} {'wave wall':>10} {'wave CPU':>9} {'wave/ray':>9}")
    for r in rows:
        print(f"{r['case']:<6} {r['reliable']:>2d}/{r['n_segments']:<3d}{r['rays']:>6d} {r['bands']:>5d} "
              f"{r['ray_wall_s']:>8.1f}s {r['ray_cpu_s']:>7.1f}s {r['wave_hours']:>7.2f} "
              f"{r['wave_wall_s']:>9.1f}s {r['wave_cpu_s']:>8.1f}s "
              f"{r['wave_wall_s'] / r['ray_wall_s']:>9.2f}")
    second = ", ".join(f"{r['case']} {r['ray_wall_s_2']:.1f} s" for r in rows)
    print(f"  (segs = ranked / in the coast of interest; ray = one analyse_source run, first seed; "
          f"second seed's wall time: {second}; wave = real + reference solver runs)")
    print()
    print("agreement with the wave check at the grid's own spacing (refine 1; Spearman, top-10 common)")
    print(f"{'case':<6} {'seed':>5}   {'amplitude':>11}   {'lensing':>11}")
    for r in rows:
        for i, s in enumerate(r["seeds"]):
            print(f"{r['case']:<6} {s:>5d}   {_ag(r[f'amp_vs_wave_{i}'])}   {_ag(r[f'lens_vs_wave_{i}'])}")
    print()
    print("stability between the two ray seeds (Spearman, top-10 common)")
    print(f"{'case':<6} {'seeds':>7}   {'amplitude':>11}   {'lensing':>11}")
    for r in rows:
        sd = f"{r['seeds'][0]},{r['seeds'][1]}"
        print(f"{r['case']:<6} {sd:>7}   {_ag(r['amp_seeds'])}   {_ag(r['lens_seeds'])}")


def main() -> None:
    """Run the benchmark and print the table."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--demo-only", action="store_true", help="skip the real-grid case")
    ap.add_argument("--rays", type=int, default=None, help="ray count (default: the scenario's, the project default)")
    ap.add_argument("--seeds", type=int, nargs=2, default=None,
                    help="two ray seeds (default: the scenario's seed and the next one)")
    ap.add_argument("--judge-refine", type=int, default=1, metavar="N",
                    help="also run the wave check on each case's sea floor interpolated onto a grid N times finer "
                         "(about N^3 times the check's cost: ~3 min for the real case at N=2) and compare")
    ap.add_argument("--more-seeds", type=int, default=0, metavar="N",
                    help="also run N further ray seeds per case against the default wave check (the rays only, "
                         "about 1.5 s (demo) and 3.5 s (real) each): whether the two seeds of the table are "
                         "typical draws")
    ap.add_argument("--bands", action="store_true",
                    help="also resolve the demo's wave check in the rays' period bands (snapshots of the whole "
                         "grid: demo only, ~1-2 min and ~2 GB)")
    args = ap.parse_args()
    load0 = os.getloadavg()
    import numba

    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} CPUs, "
          f"numba {numba.__version__}; load average at start {load0[0]:.2f} {load0[1]:.2f} {load0[2]:.2f}")
    warnings.simplefilter("ignore", ResolutionWarning)  # coverage notes of the coasts of interest
    demo_sc = parse_scenario(DEMO_SCENARIO)
    real_sc = None
    if not args.demo_only:
        d = shared_data_dir()
        if d is None:
            raise SystemExit("shared open data not found: set TSUNAMIFOCUS_SHARED_DATA (or use --demo-only)")
        real_sc = real_scenario(d / "etopo1_0p1deg.nc")
    t0 = time.perf_counter()
    warm_up(demo_sc, real_sc)
    print(f"warm-up (numba) {time.perf_counter() - t0:.1f} s")

    rows = []
    cases = [("demo", demo_sc)] + ([("real", real_sc)] if real_sc is not None else [])
    for name, sc in cases:
        depth = load_scenario_bathymetry(sc)
        segments = _segments_for(depth, sc)  # the whole coast; the coast of interest is ranked
        seeds = tuple(args.seeds) if args.seeds else (sc.rays.seed, sc.rays.seed + 1)
        n_in = int(segments["in_region"].sum())
        print(f"{name}: grid {depth.shape[0]} x {depth.shape[1]}, {n_in} segments in the coast of interest "
              f"(of {len(segments)}), seeds {seeds} ...", flush=True)
        r = run_case(name, sc, segments, depth, seeds, args.rays)
        r["seeds"] = seeds
        rows.append(r)
    default, refined = [], []
    for (name, sc), r in zip(cases, rows):
        print(f"{name}: the wave check as it runs by default (refine {AUTO_REFINE}) ...", flush=True)
        default.append(refined_judge(r, sc, load_scenario_bathymetry(sc), AUTO_REFINE))
        if args.judge_refine > 1:
            print(f"{name}: the wave check on a grid {args.judge_refine} times finer ...", flush=True)
            refined.append(refined_judge(r, sc, load_scenario_bathymetry(sc), args.judge_refine))
    extra = []
    if args.more_seeds > 0:
        for (name, sc), r, judge in zip(cases, rows, default):
            print(f"{name}: {args.more_seeds} more ray seeds ...", flush=True)
            extra.append(more_seeds(r, judge, sc, load_scenario_bathymetry(sc), args.more_seeds, args.rays))
    banded = []
    if args.bands:
        print("demo: the wave check resolved in period bands ...", flush=True)
        banded.append(band_judge(rows[0], cases[0][1], load_scenario_bathymetry(cases[0][1])))
    print(f"load average at end {os.getloadavg()[0]:.2f}")
    print_table(rows)
    seeds = {r["case"]: r["seeds"] for r in rows}
    ray_wall = {r["case"]: r["ray_wall_s"] for r in rows}
    print_refined(default, seeds, ray_wall, f"the wave check as it runs by default (refine {AUTO_REFINE}: the "
                  f"coarsest grid with at least {MIN_CELLS_PER_WAVELENGTH:g} cells per wavelength)")
    print_refined(refined, seeds, ray_wall, f"the wave check on a grid {args.judge_refine} times finer")
    print_more_seeds(extra)
    print_bands(banded, seeds)


if __name__ == "__main__":
    main()
