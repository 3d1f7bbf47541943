"""A trans-ocean screening study on real data, run from the command line with default settings.

A Mw 9.0 thrust on the Japan Trench interface (top edge along the trench, roughly 144.4 E 39.6 N to
142.6 E 36.0 N, dipping 12 deg west under the island arc, width 175 km) on the shared 0.1-degree global relief grid cropped across the antimeridian
(120..250 E, 0..65 N, written in 0..360 numbers), screening the mainland coast of western North
America (lon -125..-117, lat 32..49) with points of interest in -180..180 longitudes.

References:
* Travel time: great-circle distance (pyproj.Geod, WGS84) divided by the long-wave speed
  c = sqrt(g h) at the mean North Pacific depth, h ~ 4,000 m (c = 198 m/s; common practice, no source);
  rays follow the deeper and shallower parts of the basin, so the ray arrival lies within -20/+20 %
  of that estimate.
* RFC 7946: GeoJSON coordinates are WGS84 longitude/latitude; any longitude numbering names the same
  meridian modulo 360 degrees (common practice, no source).
* GeoPackage, GeoTIFF and NetCDF outputs are read back with pyogrio, rasterio and netCDF4/xarray
  (reference libraries).

Run time: about 1-1.5 min on 2 cores with the default ray count (the auto count decides it).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import shapely
from pyproj import Geod

from tsunamifocus.cli.app import main
from tsunamifocus.studies.settings import DEFAULT_RAY_COUNT

REGION = (-125.0, 32.0, -117.0, 49.0)
POINTS = {
    "Crescent City": (-124.20, 41.75),
    "Santa Cruz": (-122.02, 36.96),
    "Hilo (outside the region)": (-155.08, 19.73),
    "Atlantic (outside the grid)": (-70.0, 40.0),
}


def _scenario(etopo_path, out) -> str:
    pts = "".join(f'[[point]]\nname = "{n}"\nlon = {lo}\nlat = {la}\n' for n, (lo, la) in POINTS.items())
    return f'''
[scenario]
name = "japan-trench-to-west-coast"
description = "Real-data test: a Mw 9.0 Japan Trench thrust screened on the North American west coast."
[bathymetry]
path = "{etopo_path}"
values = "elevation"
crop = [120.0, 0.0, 250.0, 65.0]
[[source]]
name = "japan-trench"
magnitude = 9.0
[[source.segment]]
trace = [[144.4, 39.6], [142.6, 36.0]]
top_depth_km = 5.0
dip_deg = 12.0
width_km = 175.0
[coast]
region = [{REGION[0]}, {REGION[1]}, {REGION[2]}, {REGION[3]}]
{pts}
[output]
folder = "{out}"
'''


def _in_region(lon, lat, tol: float = 1e-9) -> np.ndarray:
    lon = ((np.asarray(lon, dtype=float) + 180.0) % 360.0) - 180.0
    lat = np.asarray(lat, dtype=float)
    return (lon >= REGION[0] - tol) & (lon <= REGION[2] + tol) & (lat >= REGION[1] - tol) & (lat <= REGION[3] + tol)


@pytest.mark.realdata
@pytest.mark.slow
def test_japan_trench_to_west_coast_from_the_cli(etopo_path, tmp_path, capsys):
    import pyogrio
    import rasterio
    import xarray as xr

    out = tmp_path / "run"
    p = tmp_path / "study.toml"
    p.write_text(_scenario(etopo_path, out), encoding="utf-8")
    assert main(["run", str(p)]) == 0
    err = capsys.readouterr().err
    # the summary says what was chosen and why; no resolution warning with default settings
    assert f"ray count per source: {DEFAULT_RAY_COUNT} rays (default)" in err
    assert "segment length: 22.3 km (default: 2 grid cells of 11.1 km)" in err
    assert "coast of interest: lon -125..-117, lat 32..49" in err
    assert "ResolutionWarning: segment_length_m" not in err

    # manifest: the count and segment length actually used, how they were chosen, the region
    m = json.loads((out / "manifest.json").read_text())
    prm = m["parameters"]
    assert prm["rays"]["count"] == DEFAULT_RAY_COUNT and m["extra"]["settings_chosen"]["rays"]["origin"] == "default"
    assert prm["coast"]["segment_km"] == pytest.approx(22.3) and prm["coast"]["region"] == list(REGION)
    # across the ocean the rays are past their predictability: the run traced four rotated copies
    # of the fan ([rays] rotations auto; docs/focusing.md) and says so
    assert m["extra"]["health"]["fan_rotations"] == 4
    assert m["extra"]["health"]["n_rays"] == 4 * DEFAULT_RAY_COUNT
    assert "the run averaged 4 rotated ray fans" in err

    # segments: only the coast of interest, at least one reliable ranked segment
    seg = pd.read_csv(out / "segments.csv", comment="#")
    assert len(seg) > 50 and _in_region(seg["lon_mid"], seg["lat_mid"]).all()
    ranked = seg[seg["rank_lensing"].notna()]
    assert len(ranked) >= 1 and _in_region(ranked["lon_mid"], ranked["lat_mid"]).all()
    # GIS layers read back with reference libraries put the segments on the same coast
    gj = json.loads((out / "segments.geojson").read_text())
    assert len(gj["features"]) == len(seg)
    for f in gj["features"]:  # a segment whose midpoint is inside may reach half a segment (0.2 deg) out
        c = np.asarray(f["geometry"]["coordinates"], dtype=float).reshape(-1, 2)
        assert _in_region(c[:, 0], c[:, 1], tol=0.25).all()
    info = pyogrio.read_info(out / "segments.gpkg")
    assert info["features"] == len(seg)
    _meta, _fids, wkb, _fields = pyogrio.raw.read(out / "segments.gpkg")
    geoms = shapely.from_wkb(wkb)
    c = shapely.get_coordinates(geoms)
    assert len(geoms) == len(seg) and _in_region(c[:, 0], c[:, 1], tol=0.25).all()
    with rasterio.open(out / "travel_time_min.tif") as src:
        assert src.crs is not None and src.width == 1301 and src.height == 651
    with xr.open_dataset(out / "layers.nc") as ds:
        assert {"travel_time_min", "lensing_factor", "energy"} <= set(ds.data_vars)

    # points: the right segment (on this coast), distances given, limits respected
    pts = pd.read_csv(out / "points.csv", comment="#").set_index("name")
    geod = Geod(ellps="WGS84")
    src_mid = (143.5, 37.8)
    for name in ("Crescent City", "Santa Cruz"):
        r = pts.loc[name]
        lon, lat = POINTS[name]
        assert r["nearest_segment"] in set(seg["segment_id"])
        near = seg.set_index("segment_id").loc[r["nearest_segment"]]
        assert _in_region(near["lon_mid"], near["lat_mid"])
        assert 0.0 <= r["segment_distance_km"] < 35.0 and 0.0 <= r["snap_distance_km"] < 25.0
        d_m = geod.inv(src_mid[0], src_mid[1], lon, lat)[2]
        t_est = d_m / math.sqrt(9.81 * 4000.0) / 60.0
        assert 0.8 * t_est < r["first_arrival_min"] < 1.2 * t_est, (name, r["first_arrival_min"], t_est)
        assert np.isfinite(r["amp_1m_m"]) and isinstance(r["note"], float)  # empty note reads back as NaN
    hilo = pts.loc["Hilo (outside the region)"]
    assert hilo["segment_distance_km"] > 3000.0 and math.isnan(hilo["amp_1m_m"])
    assert "no segment values" in hilo["note"]
    atl = pts.loc["Atlantic (outside the grid)"]
    assert "outside the grid" in atl["note"] and math.isnan(atl["first_arrival_min"])
    assert "WARNING: point 'Atlantic (outside the grid)'" in err and "WARNING: point 'Hilo" in err
