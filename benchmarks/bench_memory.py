"""Memory guard: the estimate before loading a grid against the real peak resident memory.

For grids of growing size (float32 GeoTIFF and NetCDF, an invented smooth sea floor) this runs
``tsunamifocus inspect`` in a child process, reads the child's peak resident set size
(``getrusage``/``wait4``: ``ru_maxrss``, kilobytes on Linux) and prints it beside the estimate the
loader refuses by (:func:`tsunamifocus.io.bathymetry.estimate_grid_memory`). The guard is meant
to hold within 25 %.

With ``--run`` it does the same for whole runs (``tsunamifocus run`` of the invented demo scenario
without ensemble, at its native 3 km grid and resampled to 6 km, with 20,000 and 500,000 rays) against
the tracing guard's estimate (``studies.run._guard_resources``).

Run: ``python benchmarks/bench_memory.py [--sizes 1000 3000 6000] [--run]``
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np


def _write(path: Path, n: int) -> None:
    import rasterio
    import xarray as xr
    from rasterio.transform import from_origin

    x = np.linspace(0.0, 1.0, n, dtype=np.float32)
    z = (-4000.0 + 4400.0 * x[None, :] + 200.0 * np.sin(7.0 * x[:, None])).astype(np.float32)  # sea west, land east
    if path.suffix == ".tif":
        with rasterio.open(path, "w", driver="GTiff", width=n, height=n, count=1, dtype="float32",
                           crs="EPSG:32633", transform=from_origin(400_000.0, 4_560_000.0, 100.0, 100.0),
                           tiled=True) as dst:
            dst.write(z, 1)
            dst.update_tags(1, positive="up", units="m")
    else:
        lon = np.linspace(0.0, 10.0, n)
        lat = np.linspace(-5.0, 5.0, n)
        xr.Dataset({"z": (("lat", "lon"), z, {"positive": "up", "units": "m"})},
                   coords={"lat": lat, "lon": lon}).to_netcdf(path)


def _peak_rss_bytes(args: list[str]) -> tuple[int, int]:
    env = dict(os.environ, TSUNAMIFOCUS_MAX_MEMORY_GB="1000")
    env.setdefault("MPLBACKEND", "Agg")
    p = subprocess.Popen([sys.executable, "-m", "tsunamifocus.cli", *args], stdout=subprocess.DEVNULL,
                         stderr=subprocess.PIPE, env=env)
    _, status, ru = os.wait4(p.pid, 0)
    p.returncode = os.waitstatus_to_exitcode(status)
    err = p.stderr.read().decode() if p.stderr else ""
    if p.returncode:
        raise SystemExit(f"inspect failed: {err}")
    return ru.ru_maxrss * 1024, p.returncode


def _runs() -> None:
    from tsunamifocus.io.bathymetry import load_bathymetry
    from tsunamifocus.products.demo import demo_inputs
    from tsunamifocus.studies import run as R

    print(f"{'run':22s} {'cells':>8s} {'rays':>8s} {'estimate GB':>12s} {'peak RSS GB':>12s} {'peak/estimate':>14s}")
    with tempfile.TemporaryDirectory() as tmp:
        sc = Path(demo_inputs(Path(tmp) / "in"))
        text = sc.read_text(encoding="utf-8").replace("members = 6", "members = 0")
        for label, extra in (("demo 3 km", ""), ("demo resampled 6 km", "resample_km = 6.0\n")):
            f = Path(tmp) / "in" / f"s{len(extra)}.toml"
            f.write_text(text.replace('values = "elevation"\n', 'values = "elevation"\n' + extra), encoding="utf-8")
            from tsunamifocus.io.scenario import parse_scenario

            b = parse_scenario(f).bathymetry
            cells = load_bathymetry(b.path, values=b.values, resample_km=b.resample_km).size
            for n in (20_000, 500_000):
                est = R._RUN_BASE_BYTES + cells * R._RUN_BYTES_PER_CELL + n * R._RUN_BYTES_PER_RAY
                peak, _ = _peak_rss_bytes(["-q", "run", str(f), "--rays", str(n), "--out", str(Path(tmp) / f"o{n}{len(extra)}")])
                print(f"{label:22s} {cells:8d} {n:8d} {est / 1e9:12.3f} {peak / 1e9:12.3f} {peak / est:14.2f}")


def main() -> None:
    from tsunamifocus.io.bathymetry import estimate_grid_memory

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[500, 2000, 4000, 6000])
    ap.add_argument("--run", action="store_true", help="measure whole runs against the tracing guard")
    a = ap.parse_args()
    if a.run:
        _runs()
        return
    print(f"{'file':14s} {'cells':>12s} {'estimate GB':>12s} {'peak RSS GB':>12s} {'peak/estimate':>14s}")
    worst = 0.0
    with tempfile.TemporaryDirectory() as tmp:
        for n in a.sizes:
            for ext in (".tif", ".nc"):
                f = Path(tmp) / f"grid{n}{ext}"
                _write(f, n)
                peak, _ = _peak_rss_bytes(["inspect", str(f)])
                est = estimate_grid_memory((n, n))
                worst = max(worst, abs(peak / est - 1.0))
                print(f"{f.name:14s} {n * n:12d} {est / 1e9:12.3f} {peak / 1e9:12.3f} {peak / est:14.2f}")
                f.unlink()
    print(f"largest deviation of the estimate from the peak: {worst:.0%} (target: within 25 %)")


if __name__ == "__main__":
    main()
