"""Benchmark of the ray engine (tsunamifocus.propagation.rays.trace_rays); prints a table.

Synthetic case: seeded 2000 x 2000 grid of 1 km cells, 4 km mean depth, 5 % rms depth
fluctuations with a 20 km correlation length (tsunamifocus.ocean.randomfield), a coast along the east
edge (depth ramps to land over the last 50 km), and a line source of parallel rays (plane wave,
q0 = 1, p0 = 0) along the west edge. For 1e4, 1e5, 1e6 rays, on 1 and 2 threads: wall time,
ray-steps per second (wall and per CPU-second), peak resident memory. Each configuration runs in
a fresh subprocess so the peak memory belongs to it alone. A small sample of the same rays is
integrated with scipy.integrate.solve_ivp over scipy's RegularGridInterpolator (what a user would
write) for the speed ratio. Numba compile time (empty cache) is reported separately.
Real grid: 1e6 rays from a trans-ocean point source over the 0.1-degree global relief, 24 h.

Usage::

    python benchmarks/bench_rays.py            # full set (several minutes on 2 cores)
    python benchmarks/bench_rays.py --quick    # 1e4 and 1e5 rays, 2e4 rays on the global grid

The machine's other load is printed (load average): on a shared 2-core box wall times vary.
"""

from __future__ import annotations

import argparse
import json
import os
import pathlib
import resource
import subprocess
import sys
import tempfile
import time

import numpy as np

HERE = pathlib.Path(__file__).resolve()
REPO = HERE.parents[1]
ETOPO = (
    pathlib.Path(os.environ.get("TSUNAMIFOCUS_SHARED_DATA", REPO.parent / "shared" / "data"))
    / "etopo1_0p1deg.nc"
)

N = 2000
DX = 1000.0


def synthetic_depth():
    from tsunamifocus.grid import make_grid
    from tsunamifocus.ocean.randomfield import gaussian_random_field

    h = 4000.0 * (1.0 + gaussian_random_field((N, N), DX, 20e3, 0.05, seed=2024))
    ramp = np.clip((N - 1 - np.arange(N)) / 50.0, 0.0, 1.0)  # coast: last 50 km shoal to land
    h = h * ramp[None, :] - 100.0 * (ramp[None, :] == 0)
    return make_grid(h, np.arange(N) * DX, np.arange(N) * DX, "EPSG:3857")


def line_source(nrays):
    y0 = np.linspace(5e3, (N - 1) * DX - 5e3, nrays)
    return np.full(nrays, 5e3), y0, np.full(nrays, 90.0)


def peak_rss_mb():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


# ----------------------------------------------------------------------------------------------
# child modes (one configuration per process)
# ----------------------------------------------------------------------------------------------


def child_synthetic(nrays, threads, step):
    from tsunamifocus.propagation.rays import trace_rays
    from tsunamifocus.propagation.speedfield import SpeedField

    fld = SpeedField(synthetic_depth())
    trace_rays(fld, [5e3], [1e6], [90.0], threads=threads, max_time_s=100.0)  # warm (cache load)
    x0, y0, az = line_source(nrays)
    w = np.full(nrays, 1.0 / nrays)
    c0 = time.process_time()
    t0 = time.perf_counter()
    r = trace_rays(fld, x0, y0, az, weights=w, q0=1.0, p0=0.0, step_s=step, threads=threads)
    wall = time.perf_counter() - t0
    cpu = time.process_time() - c0
    return dict(
        nrays=nrays,
        threads=threads,
        step_s=r.stats["step_s"],
        wall_s=wall,
        cpu_s=cpu,
        steps=r.stats["n_steps"],
        peak_mb=peak_rss_mb(),
        reasons=r.stats["reasons"],
    )


def child_compile():
    from tsunamifocus.grid import make_grid
    from tsunamifocus.propagation.rays import trace_rays

    d = make_grid(np.full((20, 30), 4000.0), np.arange(30) * 1e3, np.arange(20) * 1e3, "EPSG:3857")
    t0 = time.perf_counter()
    import tsunamifocus.propagation._raykernel  # noqa: F401

    trace_rays(d, [5e3], [10e3], [90.0], max_time_s=100.0)
    t1 = time.perf_counter()
    trace_rays(d, [5e3], [10e3], [90.0], max_time_s=100.0)
    t2 = time.perf_counter()
    return dict(first_call_s=t1 - t0, second_call_s=t2 - t1)


def child_scipy(nsample, step):
    """Trace the same rays with solve_ivp over RegularGridInterpolator (bilinear c, gradients)."""
    from scipy.integrate import solve_ivp
    from scipy.interpolate import RegularGridInterpolator

    from tsunamifocus.propagation.rays import trace_rays
    from tsunamifocus.propagation.speedfield import SpeedField

    d = synthetic_depth()
    h = d.values
    c = np.sqrt(9.81 * np.maximum(h, 1.0))
    gy, gx = np.gradient(c, DX)
    gyy, gyx = np.gradient(gy, DX)
    gxy, gxx = np.gradient(gx, DX)
    pts = (d.y.values, d.x.values)
    interp = RegularGridInterpolator(
        pts, np.stack([c, gx, gy, gxx, gxy, gyy], axis=-1), bounds_error=False, fill_value=None
    )
    hint = RegularGridInterpolator(pts, h, bounds_error=False, fill_value=None)
    x0, y0, az = line_source(10000)
    sel = np.linspace(0, 9999, nsample).astype(int)
    x0, y0 = x0[sel], y0[sel]

    def rhs(t, s):
        x, y, se, sn, q, p = s
        cc, cx, cy, cxx, cxy, cyy = interp([[y, x]])[0]
        om = -(cx * sn - cy * se)
        cnn = sn * sn * cxx - 2 * sn * se * cxy + se * se * cyy
        return [cc * se, cc * sn, sn * om, -se * om, cc * cc * p, -cnn / cc * q]

    def coast(t, s):
        return float(hint([[s[1], s[0]]])[0]) - 20.0

    coast.terminal = True

    def out(t, s):
        return min(s[0], s[1], (N - 1) * DX - s[0], (N - 1) * DX - s[1])

    out.terminal = True
    t0 = time.perf_counter()
    nev = 0
    for k in range(nsample):
        sol = solve_ivp(
            rhs,
            (0, 86400.0),
            [x0[k], y0[k], 1.0, 0.0, 1.0, 0.0],
            method="RK45",
            rtol=1e-6,
            atol=1e-3,
            events=(coast, out),
        )
        nev += sol.nfev
    wall_ivp = time.perf_counter() - t0
    fld = SpeedField(d)
    trace_rays(fld, x0[:1], y0[:1], 90.0, max_time_s=10.0, accumulate=False)
    t0 = time.perf_counter()
    r = trace_rays(
        fld, x0, y0, np.full(nsample, 90.0), q0=1.0, p0=0.0, step_s=step, threads=1, accumulate=False
    )
    wall_tf = time.perf_counter() - t0
    return dict(
        nsample=nsample,
        ivp_s=wall_ivp,
        ivp_rays_per_s=nsample / wall_ivp,
        ivp_nfev=nev,
        tf_s=wall_tf,
        tf_rays_per_s=nsample / wall_tf,
        tf_steps=r.stats["n_steps"],
    )


def child_global(nrays, threads, step):
    import xarray as xr

    from tsunamifocus.propagation.rays import trace_rays
    from tsunamifocus.propagation.speedfield import SpeedField

    t0 = time.perf_counter()
    try:
        from tsunamifocus.io.bathymetry import load_bathymetry

        depth = load_bathymetry(ETOPO, values="elevation")
    except ImportError:  # pragma: no cover - fallback when the loader is absent
        from tsunamifocus.grid import make_grid

        ds = xr.open_dataset(ETOPO)
        z = ds["z"].values[:, :-1]
        depth = make_grid(
            -z.astype(float), ds["lon"].values[:-1], ds["lat"].values, "EPSG:4326", lon_periodic=True
        )
    fld = SpeedField(depth)
    t_load = time.perf_counter() - t0
    lon0, lat0 = 282.0, -30.0  # open ocean, eastern side of the largest basin (a test point)
    az = np.linspace(0.0, 360.0, nrays, endpoint=False)
    trace_rays(fld, [lon0], [lat0], [270.0], max_time_s=100.0, threads=threads)  # warm
    c0 = time.process_time()
    t1 = time.perf_counter()
    r = trace_rays(
        fld,
        np.full(nrays, lon0),
        np.full(nrays, lat0),
        az,
        step_s=step,
        max_time_s=86400.0,
        threads=threads,
        weights=np.full(nrays, 1.0 / nrays),
    )
    wall = time.perf_counter() - t1
    cpu = time.process_time() - c0
    e = r.end
    crossed = int(np.sum(e.path_length_m.values > 1.0e7))
    return dict(
        nrays=nrays,
        threads=threads,
        step_s=r.stats["step_s"],
        wall_s=wall,
        cpu_s=cpu,
        steps=r.stats["n_steps"],
        peak_mb=peak_rss_mb(),
        load_s=t_load,
        reasons=r.stats["reasons"],
        rays_over_10000km=crossed,
        grid=f"{fld.info.ny}x{fld.info.nx}",
    )


def run_child(args, env=None):
    cmd = [sys.executable, str(HERE), "--child", json.dumps(args)]
    out = subprocess.run(cmd, capture_output=True, text=True, env=env, check=False)
    if out.returncode != 0:
        sys.stderr.write(out.stderr)
        raise SystemExit(f"child {args} failed")
    return json.loads(out.stdout.strip().splitlines()[-1])


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="reduced set (1e4, 1e5 rays; small global run)")
    ap.add_argument(
        "--step",
        type=float,
        default=28.0,
        help="RK4 step [s] for the synthetic runs (28 s ~ 360 steps per ray, as the reference prototype)",
    )
    ap.add_argument("--global-step", type=float, default=60.0, help="RK4 step [s] on the 0.1-degree grid")
    ap.add_argument("--no-global", action="store_true", help="skip the real-grid run")
    ap.add_argument("--no-compile", action="store_true", help="skip the empty-cache compile timing")
    ap.add_argument(
        "--counts", help="comma-separated ray counts for the synthetic runs (default 1e4,1e5,1e6)"
    )
    ap.add_argument("--no-scipy", action="store_true", help="skip the solve_ivp comparison")
    ap.add_argument("--child", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.child:
        spec = json.loads(a.child)
        mode = spec.pop("mode")
        fn = {"syn": child_synthetic, "compile": child_compile, "scipy": child_scipy, "global": child_global}[
            mode
        ]
        print(json.dumps(fn(**spec)))
        return

    print(
        f"tsunamifocus ray benchmark  (cores: {os.cpu_count()}, load average at start: "
        f"{', '.join(f'{x:.1f}' for x in os.getloadavg())})"
    )
    if not a.no_compile:
        with tempfile.TemporaryDirectory() as tmp:
            env = dict(os.environ, NUMBA_CACHE_DIR=tmp)
            cold = run_child({"mode": "compile"}, env=env)
        warm = run_child({"mode": "compile"})
        print(
            f"numba compile (empty cache): {cold['first_call_s']:.1f} s; "
            f"with cache: first call {warm['first_call_s']:.2f} s, "
            f"second {warm['second_call_s'] * 1e3:.1f} ms"
        )

    counts = [10_000, 100_000] if a.quick else [10_000, 100_000, 1_000_000]
    if a.counts:
        counts = [int(float(c)) for c in a.counts.split(",")]
    print()
    print(
        f"Synthetic 2000x2000 grid, line source, step {a.step:g} s (targets: 1e6 rays <= 30 s on 2 "
        "threads, >= 12 M ray-steps/s, peak <= 2 GB)"
    )
    hdr = (
        f"{'kernel':>6} {'rays':>9} {'thr':>3} {'step s':>6} {'steps/ray':>9} {'wall s':>8} {'M steps/s':>9} "
        f"{'M steps/cpu-s':>13} {'peak MB':>8} {'load':>5}"
    )
    print(hdr)
    print("-" * len(hdr))
    for n in counts:
        for th in (1, 2):
            for kern in ("new",):
                r = run_child({"mode": "syn", "nrays": n, "threads": th, "step": a.step})
                print(
                    f"{kern:>6} {n:>9} {th:>3} {r['step_s']:>6.1f} {r['steps'] / n:>9.0f} "
                    f"{r['wall_s']:>8.2f} "
                    f"{r['steps'] / r['wall_s'] / 1e6:>9.2f} {r['steps'] / r['cpu_s'] / 1e6:>13.2f} "
                    f"{r['peak_mb']:>8.0f} {os.getloadavg()[0]:>5.1f}",
                    flush=True,
                )
    r = run_child({"mode": "syn", "nrays": 10_000, "threads": 2, "step": None})
    print(
        f"{'new':>6} {10_000:>9} {2:>3} {r['step_s']:>6.1f} {r['steps'] / 1e4:>9.0f} {r['wall_s']:>8.2f} "
        f"{r['steps'] / r['wall_s'] / 1e6:>9.2f} {r['steps'] / r['cpu_s'] / 1e6:>13.2f} "
        f"{r['peak_mb']:>8.0f} {os.getloadavg()[0]:>5.1f}   (default step)",
        flush=True,
    )

    if not a.no_scipy:
        s = run_child({"mode": "scipy", "nsample": 10 if a.quick else 20, "step": a.step})
        print()
        print(
            f"solve_ivp (RK45, rtol 1e-6) over RegularGridInterpolator, {s['nsample']} rays: "
            f"{s['ivp_rays_per_s']:.2f} rays/s; trace_rays 1 thread same rays: {s['tf_rays_per_s']:.0f} "
            f"rays/s -> speed ratio {s['tf_rays_per_s'] / s['ivp_rays_per_s']:.0f}x"
        )

    if not a.no_global:
        if not ETOPO.is_file():
            print(f"\nreal grid not found at {ETOPO}: skipped")
        else:
            n = 20_000 if a.quick else 1_000_000
            print()
            print(
                f"0.1-degree global grid, point source, {n} rays, 24 h, step {a.global_step:g} s, "
                "2 threads (target 1e6 rays <= 180 s):"
            )
            for kern in ("new",):
                g = run_child({"mode": "global", "nrays": n, "threads": 2, "step": a.global_step})
                print(
                    f"  {kern}: grid {g['grid']}, wall {g['wall_s']:.1f} s, "
                    f"{g['steps'] / g['wall_s'] / 1e6:.2f} M steps/s, "
                    f"{g['steps'] / g['cpu_s'] / 1e6:.2f} M steps/cpu-s, {g['steps'] / n:.0f} steps/ray, "
                    f"peak {g['peak_mb']:.0f} MB, grid load {g['load_s']:.1f} s, "
                    f"load {os.getloadavg()[0]:.1f}; end reasons {g['reasons']}; "
                    f"rays longer than 10,000 km: {g['rays_over_10000km']}",
                    flush=True,
                )
    print(f"\nload average at end: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
