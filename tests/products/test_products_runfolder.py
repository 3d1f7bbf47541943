"""Writing a run folder (products/runfolder.py) for scenarios the schema allows but demos do not use.

docs/scenario.md allows a point source (``kind = "point"``) and a scenario without ``[[point]]``;
both must give a complete run folder with the report on (the default), not fail after the
computation. Facts used: a point source has no moment magnitude (it is a sea-surface hump, not a
fault; common practice, no source); the report names the hump's radius and amplitude as given.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import rasterio
from pyproj import Transformer
from rasterio.transform import from_origin

from tsunamifocus.cli.app import main


def _shelf_scenario(tmp):
    x = np.arange(80) * 2000.0
    h = np.repeat((4000.0 * (1.0 - x / 140_000.0))[None, :], 80, axis=0).astype("float32")
    with rasterio.open(tmp / "shelf.tif", "w", driver="GTiff", width=80, height=80, count=1, dtype="float32",
                       crs="EPSG:32633", transform=from_origin(400_000.0, 4_560_000.0, 2000.0, 2000.0)) as dst:
        dst.write(h, 1)
        dst.update_tags(1, positive="down", units="m")
    lon, lat = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True).transform(440_000.0, 4_480_000.0)
    (tmp / "s.toml").write_text(
        f'[scenario]\nname = "hump only"\n\n[bathymetry]\npath = "shelf.tif"\n\n[[source]]\nname = "hump"\n'
        f'kind = "point"\nlon = {lon:.5f}\nlat = {lat:.5f}\nradius_km = 20\namplitude_m = 1.5\n\n'
        "[rays]\ncount = 200\nstop_depth_m = 20.0\nmax_time_h = 1.0\n\n[output]\nfigures = false\n",
        encoding="utf-8")
    return tmp / "s.toml"


def test_point_source_without_points_of_interest_writes_the_report(tmp_path, capsys):
    code = main(["-q", "run", str(_shelf_scenario(tmp_path)), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 0, err
    out = tmp_path / "out"
    html = (out / "appendix.html").read_text(encoding="utf-8")
    assert "radius 20.0 km, amplitude 1.50 m" in html  # the hump as given in the scenario
    assert ">Mw<" not in html  # no magnitude row for a hump
    assert (out / "appendix.pdf").read_bytes().startswith(b"%PDF")
    pts = pd.read_csv(out / "points.csv", comment="#")
    assert len(pts) == 0 and "first_arrival_min" in pts.columns
