"""End-to-end tests of the pipeline: the demo scenario's outputs read back with reference libraries,
cautions everywhere, atomic failure behaviour, and first-arrival times on the real global grid
against an independent eikonal solution (scikit-fmm)."""

from __future__ import annotations

import dataclasses
import html.parser
import json
import math
import re

import numpy as np
import pandas as pd
import pytest

from tsunamifocus.errors import DataFileError, OutputExistsError
from tsunamifocus.products.summaries import format_run_summary
from tsunamifocus.studies.run import arrival_times
from tsunamifocus.products.demo import demo_inputs
from tsunamifocus.products.runfolder import run_scenario
from tsunamifocus.io.scenario import parse_scenario


def _small(sc, rays=6000, members=2):
    return dataclasses.replace(
        sc,
        rays=dataclasses.replace(sc.rays, count=rays),
        ensemble=dataclasses.replace(sc.ensemble, members=members),
    )


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    base = tmp_path_factory.mktemp("demo")
    sc = _small(parse_scenario(demo_inputs(base / "inputs")))
    out = base / "run"
    result = run_scenario(sc, out=out, progress=False, command=["pytest"])
    return result, out


def test_demo_outputs_exist(demo_run):
    result, out = demo_run
    names = {p.name for p in out.iterdir()}
    for n in ("travel_time_min.tif", "energy.tif", "lensing_factor.tif", "focusing_factor.tif", "layers.nc",
              "segments.gpkg", "segments.geojson", "segments.csv", "points.csv", "appendix.html", "appendix.pdf",
              "manifest.json", "scenario.toml", "figures"):
        assert n in names, n
    figs = {p.name for p in (out / "figures").iterdir()}
    assert {"ray_field.png", "lensing_map.png", "ranking.png", "ranking_amplitude.png", "uplift.png",
            "travel_time.png"} <= figs
    # both rankings in the appendix; without a wave check the lensing factor's first
    page = (out / "appendix.html").read_text(encoding="utf-8")
    assert 0 < page.index("Ranked coastline segments") < page.index("Coastline segments ranked by indicative amplitude")
    assert {"isochrones.gpkg", "isochrones.geojson"} <= names
    assert not any(p.name.startswith(".") for p in out.parent.iterdir())  # no temp folders left


def test_geotiffs_read_back_as_cogs(demo_run):
    import rasterio
    from rio_cogeo.cogeo import cog_validate

    result, out = demo_run
    depth = result.depth
    for name in ("travel_time_min", "energy", "lensing_factor", "focusing_factor"):
        p = out / f"{name}.tif"
        valid, errors, _ = cog_validate(str(p))  # rio-cogeo's Cloud-Optimized GeoTIFF validator
        assert valid, (name, errors)
        with rasterio.open(p) as src:
            assert src.crs is not None and src.crs.to_wkt()
            assert (src.height, src.width) == depth.shape
            # cell edges = first centre - half a cell (GDAL geotransform convention)
            assert src.transform.c == pytest.approx(float(depth.x[0]) - 0.5 * float(depth.x[1] - depth.x[0]))
            assert src.nodata is not None
            tags = src.tags()
            assert any("SCREENING" in str(v).upper() for v in tags.values())
            assert src.descriptions[0]


def test_netcdf_is_cf(demo_run):
    import xarray as xr

    _, out = demo_run
    with xr.open_dataset(out / "layers.nc") as ds:
        assert ds.attrs["Conventions"].startswith("CF-")
        for v in ("travel_time_min", "energy", "lensing_factor", "focusing_factor", "depth"):
            assert v in ds and "units" in ds[v].attrs and "grid_mapping" in ds[v].encoding | ds[v].attrs
        assert "SCREENING" in (ds.attrs.get("comment", "") + ds.attrs.get("caution", "")).upper()
        assert ds["travel_time_min"].attrs["units"] == "min"


def test_first_arrivals_and_isochrones_of_the_run(demo_run):
    import pyogrio.raw
    import shapely

    result, out = demo_run
    seg = result.analysis.focusing.segments
    t, tray = seg["first_arrival_s"].to_numpy(float), seg["ray_arrival_s"].to_numpy(float)
    ok = np.isfinite(t) & np.isfinite(tray)
    assert ok.sum() > 0.8 * len(seg)
    # Fermat's principle: a ray's time is the time of one path, the first arrival the least over all
    # paths, so ray arrivals are not earlier (2 % for the rays' wavelength-smoothed sea floor and the
    # grid; common practice, no source)
    assert (tray[ok] >= 0.98 * t[ok]).all()
    # the layer written is the eikonal layer, and the isochrones lie on it
    tt = result.analysis.travel_times.travel_time_s
    np.testing.assert_allclose(result.analysis.focusing.travel_time_min.values, tt.values / 60.0)
    gj = json.loads((out / "isochrones.geojson").read_text())
    labels = {f["properties"]["label"]: f["properties"]["minutes"] for f in gj["features"]}
    assert labels.get("1 h") == 60.0 and labels.get("30 min") == 30.0
    _m, _f, wkb, fields = pyogrio.raw.read(out / "isochrones.gpkg")
    g = shapely.from_wkb(wkb)[list(fields[0]).index(60.0)]
    xy = shapely.get_coordinates(g)
    from scipy.interpolate import RegularGridInterpolator

    f = RegularGridInterpolator((tt.y.values, tt.x.values), tt.values / 60.0, bounds_error=False)
    v = f(xy[:, ::-1])
    assert np.nanmedian(np.abs(v - 60.0)) < 0.5  # minutes: the line is the 60-min level (linear interpolation)
    pts = pd.read_csv(out / "points.csv", comment="#")
    assert (pts["snap_distance_km"] <= 25.0).all() and np.isfinite(pts["first_arrival_min"]).all()


def test_vectors_read_back(demo_run):
    import pyogrio
    from pyproj import CRS

    result, out = demo_run
    info = pyogrio.read_info(out / "segments.gpkg")
    assert CRS.from_user_input(info["crs"]).equals(CRS.from_wkt(result.depth.spatial_ref.attrs["crs_wkt"]))
    assert info["features"] == len(result.analysis.focusing.segments)
    gj = json.loads((out / "segments.geojson").read_text())
    lon, lat = gj["features"][0]["geometry"]["coordinates"][0][:2]
    # RFC 7946: WGS84 lon/lat; the invented coast lies near 117-120 W, 21-31 S
    assert -121 < lon < -116 and -32 < lat < -20


def test_appendix_html_and_pdf(demo_run):
    _, out = demo_run
    text = (out / "appendix.html").read_text(encoding="utf-8")

    class P(html.parser.HTMLParser):
        imgs: list = []

        def handle_starttag(self, tag, attrs):
            if tag == "img":
                self.imgs.append(dict(attrs).get("src", ""))

    p = P()
    p.feed(text)
    assert len(p.imgs) >= 4 and all(s.startswith("data:image/png;base64,") for s in p.imgs)
    # every figure once (a checked run's scatters and profile only in the check's section)
    assert len(p.imgs) == len(set(p.imgs)) == len(list((out / "figures").glob("*.png")))
    pdf = (out / "appendix.pdf").read_bytes()
    assert pdf.startswith(b"%PDF") and pdf.count(b"/Type /Page") - pdf.count(b"/Type /Pages") >= 3


def test_checked_run_shows_each_figure_once(tmp_path):
    # A run with the wave check writes the two scatters and the profile along the coast; its
    # appendix shows every figure once, numbered in reading order (common practice, no source).
    sc = _small(parse_scenario(demo_inputs(tmp_path / "inputs")), rays=3000)
    sc = dataclasses.replace(sc, ensemble=dataclasses.replace(sc.ensemble, members=0))
    out = tmp_path / "run"
    run_scenario(sc, out=out, progress=False, check=True)
    figs = sorted(p.name for p in (out / "figures").glob("*.png"))
    assert {"ray_vs_wave.png", "ray_vs_wave_lensing.png", "ray_vs_wave_profile.png", "wave_lensing_map.png"} <= set(figs)
    text = (out / "appendix.html").read_text(encoding="utf-8")
    imgs = re.findall(r'<img[^>]*src="(data:image/png;base64,[^"]+)"', text)
    assert len(imgs) == len(set(imgs)) == len(figs)
    caps = re.findall(r"<figcaption>(Figure \d+)\.", text)
    assert caps == [f"Figure {i}" for i in range(1, len(figs) + 1)]
    assert "whether a hotspot has moved along the coast" in text
    # checked: no "not checked" note under the ranking
    assert "not checked against the linear long-wave solver" not in text
    # the check's table names the file of this folder that holds every segment's row
    assert (out / "wave_check.csv").is_file() and "(all segments: wave_check.csv)" in text
    assert "wave_segments.csv" not in text
    # the segments layers carry the wave's values beside the rays', as in wave_check.csv, so that
    # a GIS reader can map the amplitudes the summary says to read from the check
    import pyogrio

    from tsunamifocus.products.runfolder import CHECK_SEGMENT_COLUMNS

    chk = pd.read_csv(out / "wave_check.csv", comment="#").set_index("segment_id")
    seg = pd.read_csv(out / "segments.csv", comment="#").set_index("segment_id")
    gpkg_fields = set(pyogrio.read_info(out / "segments.gpkg", layer="segments")["fields"])
    for col in CHECK_SEGMENT_COLUMNS:
        assert col in gpkg_fields, col
        np.testing.assert_allclose(seg[col].to_numpy(float), chk[col].reindex(seg.index).to_numpy(float),
                                   rtol=1e-6, equal_nan=True)
    assert np.isfinite(seg["wave_amp_stop_m"]).sum() >= 0.9 * len(seg)
    # ... and can hold the wave's lensing map beside the rays' (its own QGIS style, the same scale kind)
    import rasterio

    ramp = [float(v) for v in re.findall(r'<item value="([^"]+)"', (out / "wave_lensing.qml").read_text(encoding="utf-8"))]
    assert len(ramp) >= 3 and ramp[0] * ramp[-1] == pytest.approx(1.0)  # log scale symmetric about 1, as the rays' map
    with rasterio.open(out / "wave_lensing.tif") as src:
        v = src.read(1, masked=True).filled(np.nan)
        assert "SCREENING" in str(src.tags()) and np.isfinite(v).sum() > 1000
        assert np.nanpercentile(v, 5) < 1.0 < np.nanpercentile(v, 95)


def test_caution_in_every_output(demo_run):
    # CAUTIONS.md requires the caution in every output; binary formats carry it in tags/metadata
    _, out = demo_run
    key = "SCREENING"
    for p in out.rglob("*"):
        if p.is_dir():
            continue
        if p.suffix in (".tif", ".gpkg", ".nc"):
            if p.suffix == ".tif":
                import rasterio

                with rasterio.open(p) as src:
                    blob = " ".join(map(str, src.tags().values()))
            elif p.suffix == ".nc":
                import xarray as xr

                with xr.open_dataset(p) as ds:
                    blob = " ".join(map(str, ds.attrs.values()))
            else:
                import pyogrio

                blob = json.dumps(pyogrio.read_info(p).get("layer_metadata") or {}) + json.dumps(
                    pyogrio.read_info(p).get("dataset_metadata") or {})
            assert key in blob.upper(), p.name
        elif p.suffix == ".png":
            from PIL import Image

            im = Image.open(p)
            assert key.lower() in " ".join(map(str, im.info.values())).lower() or p.parent.name == "figures", p.name
        elif p.suffix == ".pdf":
            continue  # checked by the report tests (compressed streams)
        else:
            assert key in p.read_text(encoding="utf-8", errors="replace").upper(), p.name


def test_manifest_and_health(demo_run):
    result, out = demo_run
    m = json.loads((out / "manifest.json").read_text())
    assert m["parameters"]["rays"]["count"] == 6000
    assert any(r.get("sha256") for r in m["inputs"])
    h = result.health[result.analysis.name]
    assert h["energy_error_relative"] <= 0.01
    assert abs(sum(h["termination_fraction"].values()) - 1.0) < 1e-9
    assert result.ensemble is not None and result.ensemble.n_members == 2


def test_ensemble_robustness_by_both_rankings(demo_run):
    """The ensemble counts top-k hotspots by lensing factor and by amplitude, and the run says both."""
    result, out = demo_run
    es = result.ensemble.segments
    n = result.ensemble.n_succeeded
    k = result.ensemble.top_k
    for col in ("p_topk", "p_topk_amp"):
        # a share of the members (counted by hand: multiples of 1/n), k hotspots per member
        np.testing.assert_allclose((es[col] * n) % 1.0, 0.0, atol=1e-9)
        assert es[col].sum() * n == pytest.approx(k * n)
    html = (out / "appendix.html").read_text(encoding="utf-8")
    assert f"Segments most often among the top {k} by lensing factor" in html
    assert f"Segments most often among the top {k} by indicative amplitude" in html
    assert "most robust hotspots by amplitude" in format_run_summary(result)
    seg = pd.read_csv(out / "segments.csv", comment="#")
    assert {"ens_p_topk", "ens_p_topk_amp", "ens_robustness_amp"} <= set(seg.columns)


def test_points_of_interest(demo_run):
    result, _ = demo_run
    pts = result.points[result.analysis.name]
    assert list(pts["name"]) == [p.name for p in result.scenario.points]
    # invented harbours 500 km from the trench: first arrival after 40 min and before 3 h
    # (distance / sqrt(g * 4.5 km) ~ 40 min plus slower shelf crossing; common practice, no source)
    assert (pts["first_arrival_min"] > 40).all() and (pts["first_arrival_min"] < 180).all()
    assert pts["nearest_segment"].str.startswith("S").all()


def test_refuses_nonempty_output_and_failed_run_leaves_folder(tmp_path):
    sc = _small(parse_scenario(demo_inputs(tmp_path / "in")), rays=500, members=0)
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("earlier results")
    with pytest.raises(OutputExistsError):
        run_scenario(sc, out=out, progress=False)
    # --overwrite replaces only an earlier run (a folder with its manifest), never a user's folder
    with pytest.raises(OutputExistsError, match="replaces only an earlier run output"):
        run_scenario(sc, out=out, overwrite=True, progress=False)
    (out / "manifest.json").write_text('{"format": "tsunamifocus-manifest", "parameters": {"a": 1}}')
    bad = tmp_path / "in" / "meridane_elevation.tif"
    bad.write_bytes(b"truncated")
    with pytest.raises(DataFileError):
        run_scenario(sc, out=out, overwrite=True, progress=False)
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt", "manifest.json"]
    assert (out / "keep.txt").read_text() == "earlier results"


@pytest.mark.realdata
@pytest.mark.slow
def test_global_point_source_arrivals_match_eikonal(etopo_path):
    """``arrival_times`` (eikonal solver) on the real 0.5-degree Pacific against scikit-fmm on a Mercator grid.

    Independent reference: the eikonal equation |grad T| = 1/c solved by fast marching
    (scikit-fmm, general-purpose) on a conformal Mercator grid, where the sphere's metric is
    isotropic (ds = R cos(lat) sqrt(dx^2 + dy^2)), so the effective speed is c / (R cos lat).
    """
    import skfmm
    from scipy.interpolate import RegularGridInterpolator

    from tsunamifocus.grid import crop_bathymetry, resample_bathymetry
    from tsunamifocus.io.bathymetry import load_bathymetry

    d = resample_bathymetry(load_bathymetry(etopo_path, values="elevation"), 50.0)
    d = crop_bathymetry(d, (130.0, -55.0, 290.0, 55.0))
    src = (250.0, -30.0)  # open South Pacific
    targets = [(200.0, 10.0), (180.0, -20.0), (160.0, 30.0), (215.0, -45.0)]
    t_ray = arrival_times(d, src, targets, stop_depth_m=20.0)

    R = 6371008.8
    lon = np.radians(d.lon.values)
    lat = d.lat.values
    ymerc = np.log(np.tan(np.pi / 4 + np.radians(lat) / 2))
    yy = np.linspace(ymerc[0], ymerc[-1], 2 * len(lat))
    lat_of_yy = np.degrees(2 * np.arctan(np.exp(yy)) - np.pi / 2)
    f = RegularGridInterpolator((lat, d.lon.values), np.where(d.values > 20.0, d.values, 0.0))
    LAT, LON = np.meshgrid(lat_of_yy, d.lon.values, indexing="ij")
    h = f(np.stack([LAT.ravel(), LON.ravel()], -1)).reshape(LAT.shape)
    c = np.sqrt(9.81 * np.maximum(h, 0.0))
    speed = c / (R * np.cos(np.radians(LAT)))
    sea = h > 20.0
    dx = lon[1] - lon[0]
    dy = yy[1] - yy[0]
    j0 = int(np.argmin(abs(lat_of_yy - src[1])))
    i0 = int(np.argmin(abs(d.lon.values - src[0])))
    phi = np.ones_like(h)
    phi[j0, i0] = -1.0
    phi = np.ma.MaskedArray(phi, mask=~sea)
    T = skfmm.travel_time(phi, np.where(sea, speed, 1e-9), dx=[dy, dx], order=2)
    T = np.ma.filled(T, np.nan)
    g = RegularGridInterpolator((lat_of_yy, d.lon.values), T)
    for (tl, tb), tr in zip(targets, t_ray):
        te = float(g([[tb, tl]])[0])
        assert math.isfinite(tr) and math.isfinite(te)
        # reference: scikit-fmm on the Mercator grid (independent library and projection), within 2 %
        assert tr == pytest.approx(te, rel=0.02), (tl, tb, tr / 3600, te / 3600)


def test_compare_and_check_commands(demo_run, tmp_path, capsys):
    """``compare`` on two runs of different sources and ``check`` against the wave solver (CLI)."""
    import xarray as xr

    from tsunamifocus.cli.app import main

    result, out = demo_run
    sc = result.scenario
    src = sc.sources[0]
    shifted = dataclasses.replace(src, name="shifted", magnitude=8.4)
    sc2 = dataclasses.replace(sc, sources=(shifted,), ensemble=dataclasses.replace(sc.ensemble, members=0))
    out2 = tmp_path / "run2"
    run_scenario(sc2, out=out2, progress=False)
    cmp_dir = tmp_path / "cmp"
    assert main(["compare", str(out), str(out2), "--out", str(cmp_dir)]) == 0
    text = capsys.readouterr().out
    assert "Spearman" in text
    corr = (cmp_dir / "comparison_correlations.csv").read_text()
    assert "spearman_rho" in corr
    with xr.open_dataset(cmp_dir / "comparison_envelope.nc") as env:
        a = xr.open_dataset(out / "layers.nc")["lensing_factor"]
        b = xr.open_dataset(out2 / "layers.nc")["lensing_factor"]
        # envelope = cell-wise maximum (definition of the envelope layer)
        np.testing.assert_allclose(env["lensing_factor"].values, np.fmax(a.values, b.values), equal_nan=True)
    assert (cmp_dir / "comparison_appendix.pdf").read_bytes().startswith(b"%PDF")
    assert (cmp_dir / "comparison_scatter.png").is_file()
    # a run on another segmentation is refused with a clear message
    sc3 = dataclasses.replace(sc2, coast=dataclasses.replace(sc2.coast, segment_km=20.0))
    out3 = tmp_path / "run3"
    run_scenario(sc3, out=out3, progress=False)
    assert main(["compare", str(out), str(out3), "--out", str(tmp_path / "cmp2")]) == 2
    assert "segment" in capsys.readouterr().err
    assert not (tmp_path / "cmp2").exists()

    # independent wave-equation check of the demo ranking
    assert main(["-q", "check", str(out)]) == 0
    line = capsys.readouterr().out.strip().splitlines()[-1]
    # without -q it prints its summary with the cautions once (they were printed twice)
    assert main(["check", str(out), "--out", str(tmp_path / "check_again")]) == 0
    err = capsys.readouterr().err
    assert err.count("SCREENING ESTIMATES ONLY") == 1 and "no inundation" in err
    rho = float(line.split()[1])
    ag = json.loads((out / "wave_check" / "agreement.json").read_text())
    # nesting is the default, but the demo's coast spans most of its grid: the box would hold more
    # than half the cells, so the check refines the whole grid and says so (agreement "nest": null)
    assert ag["nest"] is None
    # --no-nest asks for the whole grid refined: the same grid here, the same figures
    assert main(["-q", "check", str(out), "--no-nest", "--out", str(tmp_path / "check_nest")]) == 0
    ag_nest = json.loads((tmp_path / "check_nest" / "agreement.json").read_text())
    assert ag_nest["nest"] is None and ag_nest["refine"] == ag["refine"]
    assert ag_nest["spearman"] == pytest.approx(ag["spearman"], abs=1e-12)
    assert ag["spearman"] == pytest.approx(rho, abs=1e-3)
    # like with like: the lensing ranking is checked too (wave over the real and the reference oceans)
    assert set(ag["lensing"]) >= {"spearman", "kendall", "topk_overlap", "n"}
    # measured on the demo with tube energies over wavelength-smoothed oceans (docs/focusing.md,
    # coast of interest, 10000 rays): amplitude Spearman 0.93, top-10 8/10; fail well below that
    assert rho > 0.8
    assert ag["topk_overlap"] >= 0.5
    for n in ("wave_max_amplitude.tif", "wave_lensing.tif", "wave_check.nc", "wave_segments.csv", "ray_vs_wave.png",
              "ray_vs_wave_lensing.png", "ray_vs_wave_profile.png", "wave_lensing_map.png", "wave_check_appendix.pdf"):
        assert (out / "wave_check" / n).is_file()
    # the check's appendix shows the profile along the coast and the wave's lensing map, each with its caption
    html = (out / "wave_check" / "wave_check_appendix.html").read_text(encoding="utf-8")
    assert html.count("data:image/png") >= 4 and "whether a hotspot has moved along the coast" in html
    assert "Where the wave focuses" in html
    # the lensing map's GeoTIFF and NetCDF layer hold the same values, squared ratios of the two oceans' maxima
    import rasterio

    with rasterio.open(out / "wave_check" / "wave_lensing.tif") as src, \
            xr.open_dataset(out / "wave_check" / "wave_check.nc") as nc:
        tif = src.read(1, masked=True).filled(np.nan)[::-1] if src.transform.e < 0 else src.read(1, masked=True).filled(np.nan)
        lay = nc["wave_lensing"].values
        assert tif.shape == lay.shape and np.isfinite(lay).sum() > 1000
        np.testing.assert_allclose(tif, lay, rtol=1e-6, equal_nan=True)
        assert np.nanpercentile(lay, 5) < 1.0 < np.nanpercentile(lay, 95)


def _eikonal_mercator(d, src):
    """First-arrival times [s] by scikit-fmm on a conformal Mercator resampling of a lon/lat grid."""
    import skfmm
    from scipy.interpolate import RegularGridInterpolator

    R = 6371008.8
    lat = d.lat.values
    ymerc = np.log(np.tan(np.pi / 4 + np.radians(lat) / 2))
    yy = np.linspace(ymerc[0], ymerc[-1], 2 * len(lat))
    lat_yy = np.clip(np.degrees(2 * np.arctan(np.exp(yy)) - np.pi / 2), lat[0], lat[-1])  # round-off
    f = RegularGridInterpolator((lat, d.lon.values), np.where(d.values > 20.0, d.values, 0.0))
    LAT, LON = np.meshgrid(lat_yy, d.lon.values, indexing="ij")
    h = f(np.stack([LAT.ravel(), LON.ravel()], -1)).reshape(LAT.shape)
    sea = h > 20.0
    speed = np.sqrt(9.81 * np.maximum(h, 0.0)) / (R * np.cos(np.radians(LAT)))
    phi = np.ones_like(h)
    phi[int(np.argmin(abs(lat_yy - src[1]))), int(np.argmin(abs(d.lon.values - src[0])))] = -1.0
    T = skfmm.travel_time(np.ma.MaskedArray(phi, mask=~sea), np.where(sea, speed, 1e-9),
                          dx=[yy[1] - yy[0], np.radians(d.lon.values[1] - d.lon.values[0])], order=2)
    return RegularGridInterpolator((lat_yy, d.lon.values), np.ma.filled(T, np.nan))


@pytest.mark.realdata
@pytest.mark.slow
def test_real_grid_scenario_run_and_check(etopo_path, tmp_path, capsys):
    """A scenario on the real global relief grid: a trans-ocean point source (an invented test source)
    runs end to end; first arrivals at named open-ocean points agree with scikit-fmm within a few
    percent; the wave-equation check runs on the result."""
    from tsunamifocus.cli.app import main

    text = f'''
[scenario]
name = "pacific-point-test"
description = "Test of the pipeline on open data: an invented point source in the South Pacific."
[bathymetry]
path = "{etopo_path}"
values = "elevation"
crop = [150.0, -50.0, 290.0, 40.0]
resample_km = 50.0
[[source]]
name = "test-hump"
kind = "point"
lon = 250.0
lat = -30.0
radius_km = 150.0
amplitude_m = 1.0
[rays]
count = 6000
stop_depth_m = 50.0
max_time_h = 26.0
[coast]
segment_km = 300.0
min_rays = 5
[[point]]
name = "open ocean A"
lon = 200.0
lat = 10.0
[[point]]
name = "open ocean B"
lon = 180.0
lat = -20.0
[[point]]
name = "open ocean C"
lon = 215.0
lat = -45.0
[output]
folder = "out"
report = false
'''
    p = tmp_path / "pacific.toml"
    p.write_text(text)
    sc = parse_scenario(p)
    res = run_scenario(sc, progress=False)
    pts = res.points["test-hump"]
    g = _eikonal_mercator(res.depth, (250.0, -30.0))
    for _, r in pts.iterrows():
        lon = r["lon"] % 360.0
        te = float(g([[r["lat"], lon]])[0]) / 60.0
        # the hump's 150 km radius starts the rays ~0.2 h ahead of the point-source eikonal: allow 5 %
        assert r["first_arrival_min"] == pytest.approx(te, rel=0.05), (r["name"], r["first_arrival_min"], te)
    assert main(["-q", "check", str(tmp_path / "out"), "--top", "5"]) == 0
    ag = json.loads((tmp_path / "out" / "wave_check" / "agreement.json").read_text())
    assert ag["n"] >= 10 and -1.0 <= ag["spearman"] <= 1.0


def test_edge_distance_of_segments(demo_run):
    # independent geometry: shapely distance from each segment centre to the grid's outer boundary
    from shapely.geometry import Point, box

    from tsunamifocus.grid import GridInfo

    result, _ = demo_run
    seg = result.analysis.focusing.segments
    b = GridInfo.from_dataarray(result.depth).bounds
    ring = box(*b).exterior
    ref = np.array([ring.distance(Point(x, y)) / 1000.0 for x, y in zip(seg["x_mid"], seg["y_mid"])])
    np.testing.assert_allclose(seg["edge_distance_km"].to_numpy(dtype=float), ref, rtol=1e-9, atol=1e-9)


def test_rays_override_recorded_and_no_reliable_segment_said_plainly(tmp_path, capsys):
    """``--rays`` is recorded where a rerun reads it (manifest, scenario.toml, appendix); a run with
    no reliable segment says so instead of an empty list."""
    from tsunamifocus.cli.app import main
    from tsunamifocus.io.manifest import scenario_from_manifest

    sc = _small(parse_scenario(demo_inputs(tmp_path / "in")), rays=6000, members=0)
    sc = dataclasses.replace(sc, coast=dataclasses.replace(sc.coast, min_rays=100000),
                             output=dataclasses.replace(sc.output, folder=tmp_path / "out"))
    p = tmp_path / "s.toml"
    p.write_text(sc.to_toml(), encoding="utf-8")
    assert main(["run", str(p), "--rays", "400"]) == 0
    err = capsys.readouterr().err
    out = tmp_path / "out"
    m = json.loads((out / "manifest.json").read_text())
    assert m["parameters"]["rays"]["count"] == 400
    assert m["extra"]["settings_chosen"]["rays"] == {"value": 400, "origin": "override", "why": ""}
    assert parse_scenario(out / "scenario.toml").rays.count == 400
    assert scenario_from_manifest(out / "manifest.json").rays.count == 400  # a rerun repeats the run
    assert "400 (command-line override)" in (out / "appendix.html").read_text(encoding="utf-8")
    assert "ray count per source: 400 rays (command-line override)" in err
    assert "no reliable segment: none of the" in err and "top 5 hotspots" not in err
    assert "No segment of the" in (out / "appendix.html").read_text(encoding="utf-8")


def test_scenario_max_distance_and_region_reach_the_analysis(tmp_path):
    """``[coast] max_distance_m`` is the distance used to assign rays, and ``region`` keeps only the
    segments whose midpoints lie in the box (checked against the box itself)."""
    from tsunamifocus.studies.run import analyse_scenario

    sc = _small(parse_scenario(demo_inputs(tmp_path / "in")), rays=1500, members=0)
    full = analyse_scenario(sc, progress=False).analysis.focusing.segments
    lat = full["lat_mid"].to_numpy(float)
    box = (-180.0, float(np.quantile(lat, 0.3)), 180.0, float(np.quantile(lat, 0.7)))
    sc2 = dataclasses.replace(sc, coast=dataclasses.replace(sc.coast, max_distance_m=7000.0, region=box))
    res = analyse_scenario(sc2, progress=False)
    seg = res.analysis.focusing.segments
    assert seg.attrs["max_distance_m"] == 7000.0
    inside = (full["lat_mid"] >= box[1]) & (full["lat_mid"] <= box[3])
    assert list(seg["segment_id"]) == list(full.loc[inside, "segment_id"])
    rk = res.analysis.focusing.ranking
    assert set(rk["segment_id"]) <= set(seg["segment_id"])


def test_coastline_file_sets_the_coast_whose_energy_the_warnings_count(tmp_path):
    """With a coastline file and no region, the coverage warnings compare with the energy reaching
    the file's stretch of coast (its bounding box grown by 5 cells), not every coast of the grid."""
    from tsunamifocus.grid import make_grid
    from tsunamifocus.studies.run import _segments_for

    lon = np.arange(225.0, 240.0 + 1e-9, 0.1)
    lat = np.arange(30.0, 50.0 + 1e-9, 0.1)
    d = make_grid(np.where(lon[None, :] < 235.5, 3000.0, -100.0) * np.ones((lat.size, 1)), lon, lat, "EPSG:4326")
    coast = tmp_path / "coast.geojson"  # RFC 7946: WGS84, written in -180..180 numbers
    coast.write_text(json.dumps({"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {},
                     "geometry": {"type": "LineString", "coordinates": [[-124.5, 40.0], [-124.5, 42.0]]}}]}))
    p = tmp_path / "s.toml"
    p.write_text(f'[bathymetry]\npath = "g.nc"\n[[source]]\nname = "p"\nkind = "point"\nlon = 230\nlat = 40\n'
                 f'[coast]\nfrom = "{coast}"\nsegment_km = 20\n')
    seg = _segments_for(d, parse_scenario(p))
    area = seg.attrs["coast_area"]
    assert area is not None and seg["in_region"].all()
    # 5 cells of 0.1 deg of latitude (11.1 km) beyond the line's ends, in either longitude numbering
    assert area.contains_lonlat(235.5, 41.0) and area.contains_lonlat(-124.5, 42.45)
    assert not area.contains_lonlat(235.5, 42.7) and not area.contains_lonlat(235.5, 45.0)
    assert not area.contains_lonlat(230.0, 41.0)


def test_region_without_coast_is_a_one_line_error(tmp_path):
    import dataclasses as dc

    from tsunamifocus.errors import CoastError
    from tsunamifocus.grid import make_grid
    from tsunamifocus.studies.run import _segments_for

    lon = np.arange(225.0, 240.0 + 1e-9, 0.1)
    lat = np.arange(30.0, 50.0 + 1e-9, 0.1)
    d = make_grid(np.where(lon[None, :] < 235.5, 3000.0, -100.0) * np.ones((lat.size, 1)), lon, lat, "EPSG:4326")
    p = tmp_path / "s.toml"
    p.write_text('[bathymetry]\npath = "g.nc"\n[[source]]\nname = "p"\nkind = "point"\nlon = 230\nlat = 40\n'
                 "[coast]\nregion = [140, 30, 145, 40]\n")
    sc = parse_scenario(p)
    with pytest.raises(CoastError, match=r"\[coast\] region \(lon 140\.\.145, lat 30\.\.40\) holds none of the") as ei:
        _segments_for(d, dc.replace(sc, coast=dc.replace(sc.coast, segment_km=20.0)))
    assert "\n" not in str(ei.value)


def test_arrival_times_point_fault_and_rupture_use_the_eikonal_solver():
    """``arrival_times`` for a (lon, lat) point, a FaultSegment and a Rupture on a constant-depth sphere."""
    from pyproj import Geod

    from tsunamifocus.constants import EARTH_RADIUS_M
    from tsunamifocus.errors import PointWarning
    from tsunamifocus.grid import make_grid
    from tsunamifocus.propagation.traveltime import first_arrival_times, sample_at_sea
    from tsunamifocus.source.faults import FaultSegment, Rupture
    from tsunamifocus.source.uplift import uplift_on_grid

    lon = np.arange(140.0, 180.0, 0.2)
    lat = np.arange(10.0, 40.0, 0.2)
    h = np.full((lat.size, lon.size), 4000.0)
    h[:, lon > 175.0] = -100.0  # land in the east
    d = make_grid(h, lon, lat, "EPSG:4326")
    c = math.sqrt(9.81 * 4000.0)
    pts = [(160.0, 30.0), (150.0, 15.0), (177.0, 25.0)]  # the last one inland, 200 km from the sea
    with pytest.warns(PointWarning, match="point"):
        t = arrival_times(d, (145.0, 25.0), pts)
    g = Geod(a=EARTH_RADIUS_M, b=EARTH_RADIUS_M)
    for (lo, la), tk in zip(pts[:2], t[:2]):
        # reference: great-circle distance (pyproj.Geod) / sqrt(g h), within 0.5 %
        assert tk == pytest.approx(g.inv(145.0, 25.0, lo, la)[2] / c, rel=0.005)
    assert math.isnan(t[2])  # beyond the search radius: no value
    seg = FaultSegment(trace=((150.0, 20.0), (151.0, 23.0)), top_depth_km=5.0, dip_deg=15.0, width_km=80.0,
                       magnitude=8.3)
    tf_seg = arrival_times(d, seg, pts[:2])
    tf_rup = arrival_times(d, Rupture([seg]), pts[:2])
    # the same solver from the uplift area: a fault and a one-segment rupture give the same field
    np.testing.assert_allclose(tf_seg, tf_rup)
    direct = first_arrival_times(d, uplift=uplift_on_grid(Rupture([seg]), d)).travel_time_s
    ref = sample_at_sea(direct, np.array([p[0] for p in pts[:2]]), np.array([p[1] for p in pts[:2]]), 25e3)[0]
    np.testing.assert_allclose(tf_rup, ref)
    # the uplift area starts the front ahead of its centre: earlier than from the centre point
    # (geometry: the front starts up to the area's half-width closer; common practice, no source)
    t_pt = arrival_times(d, (150.5, 21.5), pts[:2])
    assert (tf_rup < t_pt).all()


def test_water_the_front_cannot_reach_gets_no_tube_energy_and_no_rank():
    # A lake below sea level inside the land is not connected to the sea: no long wave reaches it
    # (connectivity of the water body; common practice, no source). The eikonal front gives it no
    # first arrival, its segments are marked unreachable, and every coast ray's energy goes to the
    # reachable coast (the ray tubes' energy is conserved: each row of the deposit sums to the ray's
    # weight; tube bookkeeping, Cerveny 2001 ch. 4).
    from tsunamifocus.coast.coastline import coastline_from_grid
    from tsunamifocus.coast.segments import segment_coastline
    from tsunamifocus.coast.tubes import tube_deposit, tube_steps
    from tsunamifocus.grid import GridInfo, make_grid
    from tsunamifocus.propagation.rays import trace_rays
    from tsunamifocus.propagation.traveltime import first_arrival_times
    from tsunamifocus.studies.run import reachable_segments

    x = np.arange(0.0, 200e3 + 1, 1000.0)
    y = np.arange(-100e3, 100e3 + 1, 1000.0)
    X, Y = np.meshgrid(x, y)
    h = np.where(X < 120e3, 2000.0, -10.0)
    lake = (X - 165e3) ** 2 + Y**2 < 20e3**2  # 40 km lake, 25 km inland
    h = np.where(lake, 50.0, h)
    d = make_grid(h, x, y, "EPSG:32631")
    tt = first_arrival_times(d, point=(10e3, 0.0), point_crs=None, stop_depth_m=20.0)
    seg = segment_coastline(coastline_from_grid(d, 20.0), 10e3, d)
    seg = reachable_segments(seg, tt)
    # times computed beforehand for another table are refused with a one-line error naming the field
    # (bad input, common practice, no source)
    from tsunamifocus.errors import InputError
    with pytest.raises(InputError, match=r"first_arrival_s has shape \(3,\), expected one time per segment"):
        reachable_segments(seg, tt, first_arrival_s=np.zeros(3))
    in_lake = ((seg["x_mid"] - 165e3) ** 2 + seg["y_mid"] ** 2 < 21e3**2).to_numpy()
    assert in_lake.sum() >= 8 and (~in_lake).sum() >= 15
    assert not seg["reachable"][in_lake].any() and seg["reachable"][~in_lake].all()
    n = 720
    w = np.full(n, 1e15 / n)
    r = trace_rays(d, np.full(n, 10e3), np.zeros(n), (np.arange(n) + 0.5) * 360.0 / n, weights=w,
                   stop_depth_m=20.0, max_time_s=3 * 3600.0)
    # a wide regularisation (10 wavelengths of a 600 s wave) reaches the lake across the land strip
    dep = tube_deposit(seg, r.end, d, steps=tube_steps(r.end, GridInfo.from_dataarray(d)), period_s=600.0,
                       max_distance_m=3000.0, min_width_factor=10.0)
    assert np.all(dep.energy_J[in_lake] == 0.0)
    rows = np.asarray(dep.matrix.sum(axis=1)).ravel()
    np.testing.assert_allclose(rows[dep.assigned], w[dep.assigned], rtol=1e-9)
    assert dep.energy_J[~in_lake].sum() == pytest.approx(w[dep.assigned].sum(), rel=1e-9)


def test_fault_outline_in_the_grid_longitudes():
    # A grid across the antimeridian keeps its longitudes in 120..295 E; a trace given in
    # -180..180 (here -77 / -75.2 E) must be drawn at 283 / 284.8 E, inside the map, not 360
    # degrees west of it (the outline is only drawn; common practice, no source).
    from tsunamifocus.grid import make_grid
    from tsunamifocus.source.faults import FaultSegment, Rupture
    from tsunamifocus.studies.run import _source_outline

    lon = np.arange(120.0, 295.0, 0.5)
    lat = np.arange(-60.0, 50.0, 0.5)
    d = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326")
    seg = FaultSegment(trace=((-77.0, -46.0), (-75.2, -38.0)), top_depth_km=5.0, dip_deg=15.0, width_km=200.0,
                       rake_deg=90.0, slip_m=10.0)
    (ring,) = _source_outline(Rupture([seg], name="r"), d)
    assert np.all((ring[:, 0] >= 119.75) & (ring[:, 0] < 295.0))
    np.testing.assert_allclose(ring[:2, 0], [283.0, 284.8], atol=1e-9)
    np.testing.assert_allclose(ring[:2, 1], [-46.0, -38.0], atol=1e-9)


def test_rotated_fans_only_where_they_fit_in_memory():
    # The auto rotations trace ROTATIONS_PAST_PREDICTABILITY copies of the fan only if the run's
    # memory model (the guard's, measured: docs/reliability.md) fits the limit: 0.61 GB + 700 B per
    # cell + 1540 B per ray. 400 x 333 cells and 4 x 10000 rays: 0.61 + 0.093 + 0.062 = 0.765 GB.
    from tsunamifocus.focusing.ranking import ROTATIONS_PAST_PREDICTABILITY
    from tsunamifocus.grid import make_grid
    from tsunamifocus.studies.run import _rotations_fit

    assert ROTATIONS_PAST_PREDICTABILITY == 4
    d = make_grid(np.full((333, 400), 4000.0), np.arange(400) * 1e3, np.arange(333) * 1e3, "EPSG:32631")
    from types import SimpleNamespace

    for limit, fits in ((0.77, True), (0.76, False)):
        sc = SimpleNamespace(bathymetry=SimpleNamespace(max_memory_gb=limit))
        assert _rotations_fit(d, sc, 10_000) is fits
