"""Draw docs/img/source_uplift.png: the initial sea surface of one invented thrust rupture.

Run from the repository root: ``python docs/make_source_figure.py``. The rupture and the flat
4 km deep ocean are invented; the figure illustrates the conventions of docs/sources.md
(strike from trace point 1 to point 2, dip to the right, uplift on the hanging-wall side).
"""

from __future__ import annotations

import pathlib

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from tsunamifocus.grid import make_grid  # noqa: E402
from tsunamifocus.source.faults import FaultSegment  # noqa: E402
from tsunamifocus.source.rayfan import make_ray_fan  # noqa: E402
from tsunamifocus.source.summary import summarize_source  # noqa: E402
from tsunamifocus.source.uplift import uplift_on_grid  # noqa: E402

OUT = pathlib.Path(__file__).resolve().parent / "img" / "source_uplift.png"


def main() -> None:
    """Compute the example and write the PNG."""
    crs = "EPSG:32610"  # any metric CRS; the ocean is invented
    x = 500e3 + np.arange(-300e3, 300e3 + 1, 3e3)
    y = 4000e3 + np.arange(-300e3, 300e3 + 1, 3e3)
    depth = make_grid(np.full((y.size, x.size), 4000.0), x, y, crs)
    p1 = (500e3 - 60e3, 4000e3 - 160e3)
    p2 = (500e3 + 60e3, 4000e3 + 160e3)
    seg = FaultSegment(trace=(p1, p2), top_depth_km=5.0, dip_deg=15.0, rake_deg=90.0, magnitude=8.5,
                       trace_crs=crs, name="example")
    eta = uplift_on_grid(seg, depth)
    fan = make_ray_fan(eta, depth, 72, seed=0)
    summ = summarize_source(seg, eta, depth, fan)

    fig, (ax, axp) = plt.subplots(1, 2, figsize=(8.4, 4.0), gridspec_kw={"width_ratios": [1.25, 1]})
    km = 1e-3
    lim = float(np.max(np.abs(eta.values)))
    im = ax.pcolormesh((x - 500e3) * km, (y - 4000e3) * km, eta.values, cmap="RdBu_r", vmin=-lim, vmax=lim,
                       shading="auto", rasterized=True)
    ax.plot([(p1[0] - 500e3) * km, (p2[0] - 500e3) * km], [(p1[1] - 4000e3) * km, (p2[1] - 4000e3) * km],
            "k-", lw=2)
    ax.annotate("1", ((p1[0] - 500e3) * km, (p1[1] - 4000e3) * km), xytext=(-10, -4), textcoords="offset points")
    ax.annotate("2", ((p2[0] - 500e3) * km, (p2[1] - 4000e3) * km), xytext=(4, 2), textcoords="offset points")
    ax.scatter((fan.x0 - 500e3) * km, (fan.y0 - 4000e3) * km, s=4, c="k", alpha=0.5)
    ax.set_aspect("equal")
    ax.set_xlabel("easting [km]")
    ax.set_ylabel("northing [km]")
    ax.set_title(f"Mw {summ.mw:.1f} thrust, strike {seg.strike_deg:.0f}°, dip 15° (to the right)", fontsize=9)
    fig.colorbar(im, ax=ax, label="initial sea surface η [m]", shrink=0.85)

    th = np.radians(fan.pattern_azimuth_deg)
    pat = fan.pattern / fan.pattern.max()
    axp.remove()
    axp = fig.add_subplot(1, 2, 2, projection="polar")
    axp.set_theta_zero_location("N")
    axp.set_theta_direction(-1)
    axp.plot(th, pat, "C3-", lw=1.2)
    axp.set_title("directional energy (far-field angular spectrum)", fontsize=9)
    axp.set_yticklabels([])
    fig.text(0.01, 0.01, "Screening illustration, invented source. Not a warning, forecast or inundation map.",
             fontsize=7)
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    OUT.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(OUT, dpi=80)
    print(f"wrote {OUT} ({OUT.stat().st_size / 1024:.0f} kB)")
    print(summ)


if __name__ == "__main__":
    main()
