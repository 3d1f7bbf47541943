"""Ensemble throughput: members per minute at 1 and 2 Dask workers on the demo, and the scaling ratio.

Usage::

    python benchmarks/bench_ensemble.py [--members 8] [--rays 20000] [--member auto|pipeline|example]

The member function is the pipeline's ``tsunamifocus.studies.run.ensemble_member`` on the invented
demo scenario when it is importable and a probe member succeeds (``--member auto``), else the
numpy-only ``tsunamifocus.studies.toymember.example_member`` on the demo grid (printed in the header).
Workers are processes of a ``distributed.LocalCluster`` (``threads_per_worker=1``, numba/BLAS
threads pinned to 1 per worker so the two columns compare like with like); each worker runs one
untimed warm-up member first (numba compilation, imports). The local default (Dask threads in
this process) and a plain serial loop are printed beside them for reference. Figures are wall
clock on whatever machine runs this; other processes sharing the cores lower them.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
import warnings

for _v in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import numpy as np  # noqa: E402

from tsunamifocus.studies.toymember import example_member
from tsunamifocus.studies.ensemble import run_ensemble
from tsunamifocus.ocean.perturb import draw_member_parameters

_ENV = {v: "1" for v in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}


def _pipeline_setup(rays: int, folder: str):
    from functools import partial

    from tsunamifocus.io.scenario import parse_scenario
    from tsunamifocus.products.demo import demo_inputs
    from tsunamifocus.studies import run as pipeline

    path = demo_inputs(folder)
    sc = parse_scenario(path)
    depth = pipeline.load_scenario_bathymetry(sc)
    segs = pipeline._segments_for(depth, sc)
    fn = partial(pipeline.ensemble_member, n_rays=rays)
    shared = {"depth": depth, "scenario": sc, "segments": segs}
    members = draw_member_parameters(sc.ensemble, 2, sc.ensemble.seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fn(members[1], **shared)  # probe
    return fn, shared, sc.ensemble, f"pipeline.ensemble_member, demo scenario, {rays} rays, {depth.shape} grid"


def _example_setup():
    from tsunamifocus.ocean.demo import make_demo_bathymetry

    depth = make_demo_bathymetry()
    settings = dict(bathy_rms=0.02, bathy_corr_km=20.0, magnitude=0.1, launch_jitter_deg=0.5)
    return example_member, {"depth": depth}, settings, f"ensemble.example_member (numpy only), demo grid {depth.shape}"


class _Timed:
    """Wrap a member function; record its thread CPU time and wall time in ``info``."""

    def __init__(self, fn):
        self.fn = fn

    def __call__(self, params, **shared):
        c0, w0 = time.thread_time(), time.perf_counter()
        res = self.fn(params, **shared)
        res.info["cpu_s"] = time.thread_time() - c0
        res.info["wall_s"] = time.perf_counter() - w0
        return res


def _warm(fn, params, shared):
    import warnings as w

    with w.catch_warnings():
        w.simplefilter("ignore")
        fn(params, **shared)
    return True


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=8)
    ap.add_argument("--rays", type=int, default=20000)
    ap.add_argument("--member", choices=("auto", "pipeline", "example"), default="auto")
    args = ap.parse_args(argv)
    from distributed import Client, LocalCluster

    tmp = tempfile.mkdtemp(prefix="bench_ensemble_")
    setup = None
    why = ""
    if args.member in ("auto", "pipeline"):
        try:
            setup = _pipeline_setup(args.rays, tmp)
        except Exception as exc:  # noqa: BLE001 - fall back and say why
            if args.member == "pipeline":
                raise
            why = f" (pipeline member unavailable: {type(exc).__name__}: {str(exc)[:100]})"
    if setup is None:
        setup = _example_setup()
    fn, shared, settings, label = setup
    fn = _Timed(fn)
    members = draw_member_parameters(settings, args.members, 2026)
    print(f"member function: {label}{why}")
    print(f"members: {args.members}; cores: {os.cpu_count()}; numba/BLAS threads per worker: 1")
    rows = []
    warnings.simplefilter("ignore")
    t0 = time.perf_counter()
    serial = run_ensemble(fn, members, scheduler="serial", shared=shared)
    rows.append(("serial loop", 1, serial.timings["total_s"], serial))
    local = run_ensemble(fn, members, scheduler="local", shared=shared)
    rows.append(("local threads", os.cpu_count() or 1, local.timings["total_s"], local))
    for n in (1, 2):
        with LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                          silence_logs=40, env=_ENV) as cluster, Client(cluster, set_as_default=False) as client:
            client.run(_warm, fn, members[0], shared)
            res = run_ensemble(fn, members, scheduler=client, shared=shared)
            rows.append((f"LocalCluster {n} proc", n, res.timings["total_s"], res))
    print(f"total benchmark wall time {time.perf_counter() - t0:.1f} s\n")
    print(f"{'engine':<22}{'workers':>8}{'wall s':>10}{'members/min':>14}{'s/member':>10}{'cpu s/member':>14}"
          f"{'identical':>11}")
    for name, n, t, res in rows:
        same = all(
            np.array_equal(np.asarray(res.mean[k]), np.asarray(serial.mean[k]), equal_nan=True) for k in serial.mean
        ) and res.segments.equals(serial.segments)
        per = res.timings["member_s_mean"]
        cpu = float(np.mean([i["cpu_s"] for i in res.member_info.values()]))
        print(f"{name:<22}{n:>8}{t:>10.2f}{60.0 * len(members) / t:>14.1f}{per:>10.2f}{cpu:>14.2f}{str(same):>11}")
    t1 = rows[2][2]
    t2 = rows[3][2]
    print(f"\nscaling 1 -> 2 workers (LocalCluster): {t1 / t2:.2f}x (ideal 2.00x); "
          f"s/member = mean wall time of one member inside its worker, cpu s/member its thread CPU time; "
          f"s/member >> cpu s/member means the cores were shared with other processes")
    if hasattr(os, "getloadavg"):
        print(f"load average at the end (1, 5, 15 min): {', '.join(f'{v:.1f}' for v in os.getloadavg())}")
    print(f"member result grids: {serial.memory['member_result_grid_bytes'] / 1e6:.1f} MB per member; "
          f"client accumulators {serial.memory['client_accumulator_bytes'] / 1e6:.1f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
