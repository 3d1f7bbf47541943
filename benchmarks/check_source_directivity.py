"""Cross-check of the ray-fan directivity against the linear long-wave solver.

An elongated initial hump (a 150 km x 40 km rectangle smoothed by a 10 km Gaussian, 1 m) in a flat
4 km ocean is (a) turned into a ray fan by ``make_ray_fan`` (far-field angular spectrum) and (b)
propagated by ``simulate_linear_long_wave``. The energy radiated through a circle of radius r in each
direction is, for outgoing long waves, ``dE/dtheta = rho g c r int eta^2 dt`` (energy flux
``rho g c eta^2`` per unit crest length). The script prints, side by side, the fraction of energy per
direction sector from both, the perpendicular/along-strike ratio, and the total flux against E.

Run:  python benchmarks/check_source_directivity.py [--radius-km 600] [--cell-km 4]
"""

from __future__ import annotations

import argparse
import math

import numpy as np
from scipy.special import erf

from tsunamifocus.constants import GRAVITY, RHO_SEAWATER
from tsunamifocus.grid import make_grid
from tsunamifocus.source.rayfan import make_ray_fan
from tsunamifocus.source.energy import potential_energy
from tsunamifocus.propagation.wave import simulate_linear_long_wave


def main() -> None:
    """Run both and print the comparison."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--radius-km", type=float, default=600.0, help="radius of the flux circle")
    ap.add_argument("--cell-km", type=float, default=4.0, help="grid spacing")
    ap.add_argument("--sectors", type=int, default=12, help="direction sectors")
    args = ap.parse_args()

    h, L, W, s = 4000.0, 150e3, 40e3, 10e3
    r_ring = args.radius_km * 1e3
    half = r_ring + 150e3
    dx = args.cell_km * 1e3
    x = np.arange(-half, half + 1, dx)
    depth = make_grid(np.full((x.size, x.size), h), x, x, "EPSG:32610")
    E_, N_ = np.meshgrid(x, x)
    r2 = math.sqrt(2) * s
    eta0 = 0.25 * (erf((N_ + L / 2) / r2) - erf((N_ - L / 2) / r2)) * (erf((E_ + W / 2) / r2) - erf((E_ - W / 2) / r2))
    eta = depth.copy(data=eta0)
    E0 = potential_energy(eta, depth)
    fan = make_ray_fan(eta, depth, 360, seed=0)

    c = math.sqrt(GRAVITY * h)
    dur = (r_ring + 0.5 * L + 4 * s) / c + 600.0
    res = simulate_linear_long_wave(depth, eta, duration_s=dur, record_every_s=10.0, boundary="absorb")
    snaps = np.asarray(res.snapshots.values, dtype=float)
    t = np.asarray(res.snapshots["time"].values, dtype=float) if "time" in res.snapshots.coords else None
    dt_rec = float(t[1] - t[0]) if t is not None and t.size > 1 else 10.0

    # sample the ring (bilinear) at fine azimuths
    n_az = 720
    az = (np.arange(n_az) + 0.5) * 360.0 / n_az
    px = r_ring * np.sin(np.radians(az))
    py = r_ring * np.cos(np.radians(az))
    fi = (px - x[0]) / dx
    fj = (py - x[0]) / dx
    i0, j0 = np.floor(fi).astype(int), np.floor(fj).astype(int)
    wx, wy = fi - i0, fj - j0
    ring = (snaps[:, j0, i0] * (1 - wx) * (1 - wy) + snaps[:, j0, i0 + 1] * wx * (1 - wy)
            + snaps[:, j0 + 1, i0] * (1 - wx) * wy + snaps[:, j0 + 1, i0 + 1] * wx * wy)
    flux = RHO_SEAWATER * GRAVITY * c * r_ring * np.sum(ring**2, axis=0) * dt_rec  # J per radian
    total_flux = float(np.sum(flux) * 2 * math.pi / n_az)

    k = args.sectors
    width = 360.0 / k
    print(f"source: {L / 1e3:.0f} x {W / 1e3:.0f} km smoothed rectangle (long axis north), depth {h:.0f} m; "
          f"ring r = {r_ring / 1e3:.0f} km; grid {x.size} x {x.size} at {dx / 1e3:.0f} km")
    print(f"E (initial potential) = {E0:.4e} J; fan weights sum = {fan.weights.sum():.4e} J; "
          f"wave-solver energy through the ring = {total_flux:.4e} J ({total_flux / E0:.3f} E)")
    print(f"{'sector (deg)':>14}{'ray fan':>10}{'wave solver':>13}")
    for m in range(k):
        lo, hi = m * width - width / 2, m * width + width / 2
        a_f = ((fan.pattern_azimuth_deg - lo) % 360.0) < width
        a_w = ((az - lo) % 360.0) < width
        f_fan = float(fan.pattern[a_f].sum())
        f_wave = float(flux[a_w].sum() / flux.sum())
        print(f"{lo % 360:6.0f}-{hi % 360:<6.0f}{f_fan:>10.4f}{f_wave:>13.4f}")

    def at(a_deg: float, arr_az: np.ndarray, arr: np.ndarray, half_w: float = 5.0) -> float:
        d = np.abs(((arr_az - a_deg) + 180.0) % 360.0 - 180.0) <= half_w
        return float(arr[d].mean())

    ratio_fan = at(90.0, fan.pattern_azimuth_deg, fan.pattern) / at(0.0, fan.pattern_azimuth_deg, fan.pattern)
    ratio_wave = at(90.0, az, flux) / at(0.0, az, flux)
    print(f"perpendicular / along-strike (10-degree means): ray fan {ratio_fan:.1f}, wave solver {ratio_wave:.1f}")


if __name__ == "__main__":
    main()
