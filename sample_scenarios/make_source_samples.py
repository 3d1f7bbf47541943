"""Regenerate the invented source samples of the Meridane coast into ./data/ (deterministic).

* ``data/meridane_slip_model.csv``: a subfault table (10 x 4 subfaults, centroids) of an invented
  Mw 8.3 rupture on the Meridane Trench with one slip patch;
* ``data/meridane_slide_eta.tif``: the initial sea surface of an invented submarine slide on the
  Meridane continental slope (a crest seaward, a trough landward), GeoTIFF in UTM zone 11 south.
"""

from __future__ import annotations

import pathlib

import numpy as np
import rasterio
from affine import Affine
from pyproj import Geod, Transformer

from tsunamifocus.ocean.demo import demo_to_lonlat

TRENCH = ((-126.3759, -27.8407), (-126.3555, -25.3140))  # the demo scenario's trench trace


def slip_model(path: pathlib.Path) -> None:
    g = Geod(ellps="WGS84")
    (lo1, la1), (lo2, la2) = TRENCH
    az, _, length = g.inv(lo1, la1, lo2, la2)
    n_along, n_down, dip, width = 10, 4, 12.0, 110.0
    sl, sw = length / 1e3 / n_along, width / n_down
    rows = ["# invented slip model on the Meridane Trench (demo); lon, lat, depth_km = subfault centroid",
            "lon,lat,depth_km,strike_deg,dip_deg,rake_deg,length_km,width_km,slip_m"]
    for i in range(n_along):
        for j in range(n_down):
            along, down = (i + 0.5) * sl, (j + 0.5) * sw
            lon, lat, _ = g.fwd(lo1, la1, az, along * 1e3)
            lon, lat, _ = g.fwd(lon, lat, az + 90.0, down * 1e3 * np.cos(np.radians(dip)))
            slip = 14.0 * np.exp(-((along - 170.0) / 70.0) ** 2 - ((down - 35.0) / 30.0) ** 2)
            rows.append(f"{lon:.5f},{lat:.5f},{5.0 + down * np.sin(np.radians(dip)):.3f},{az % 360:.2f},{dip:g},90,"
                        f"{sl:.3f},{sw:.3f},{slip:.3f}")
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")


def slide_surface(path: pathlib.Path) -> None:
    lon, lat = demo_to_lonlat(770e3, 600e3)
    cx, cy = Transformer.from_crs("EPSG:4326", "EPSG:32711", always_xy=True).transform(float(lon), float(lat))
    d = 1000.0
    x = cx + np.arange(-60e3, 60e3 + 1, d)
    y = cy + np.arange(-60e3, 60e3 + 1, d)
    X, Y = np.meshgrid(x, y)
    crest = np.exp(-(((X - (cx - 12e3)) / 10e3) ** 2 + ((Y - cy) / 20e3) ** 2))
    trough = np.exp(-(((X - (cx + 12e3)) / 10e3) ** 2 + ((Y - cy) / 20e3) ** 2))
    eta = 6.0 * crest - 4.0 * trough
    with rasterio.open(path, "w", driver="GTiff", height=y.size, width=x.size, count=1, dtype="float32",
                       crs="EPSG:32711", transform=Affine(d, 0.0, x[0] - d / 2, 0.0, -d, y[-1] + d / 2),
                       nodata=-9999.0, compress="deflate") as dst:
        dst.write(eta[::-1].astype("float32"), 1)
        dst.update_tags(1, units="m")
        dst.update_tags(description="initial sea surface of an invented submarine slide (demo); "
                                    "screening input only, not a model of any real event")


if __name__ == "__main__":
    here = pathlib.Path(__file__).resolve().parent / "data"
    here.mkdir(exist_ok=True)
    slip_model(here / "meridane_slip_model.csv")
    slide_surface(here / "meridane_slide_eta.tif")
    print(f"wrote {here / 'meridane_slip_model.csv'} and {here / 'meridane_slide_eta.tif'}")
