"""Tests of the GIS/data exports (tsunamifocus.export), read back with independent libraries.

External references:
* GDAL raster data model (gdal.org/user/raster_data_model.html): the geotransform maps pixel
  corners; pixel (row, col) covers [x0 + col dx, x0 + (col + 1) dx); "AREA_OR_POINT=Area".
* rasterio ``DatasetReader.xy(row, col)`` returns the pixel centre by default (rasterio docs).
* Cloud-Optimized GeoTIFF layout checked by rio-cogeo's ``cog_validate`` (a port of GDAL's
  ``validate_cloud_optimized_geotiff.py``).
* CF Conventions 1.8: section 2.6 (global attributes), 3.1 (units), 5.6 (grid mappings),
  Appendix F (``transverse_mercator`` / ``latitude_longitude``).
* RFC 7946 (GeoJSON): section 3.1.1 lon/lat order, 4 (WGS 84, no "crs" member), 6.1 foreign
  members, 3.1.9 antimeridian cutting.
* Reproducibility: the same inputs give byte-identical files (reproducible-builds.org practice).
"""

from __future__ import annotations

import hashlib
import json
import math

import netCDF4
import numpy as np
import pandas as pd
import pyogrio
import pyogrio.raw
import pytest
import rasterio
import shapely
import xarray as xr
from pyproj import CRS, Transformer
from rio_cogeo.cogeo import cog_validate

from tsunamifocus.cautions import caution_text
from tsunamifocus.errors import CRSError, InputError
from tsunamifocus.io.gis import write_cog, write_netcdf, write_points_csv, write_segments
from tsunamifocus.grid import make_grid

CAUTION_MARK = "SCREENING ESTIMATES ONLY"


def _sha(p):
    return hashlib.sha256(p.read_bytes()).hexdigest()


@pytest.fixture
def utm_grid():
    """Projected grid (UTM 54N) whose values encode their own coordinates: v = x/1000 + 1000*y/1000."""
    x = 500_000.0 + 2000.0 * np.arange(700)  # > 512 columns: the COG gets internal tiles and overviews
    y = 4_000_000.0 + 1000.0 * np.arange(600)
    v = (x[None, :] / 1000.0) + 1000.0 * (y[:, None] / 1000.0)
    da = make_grid(v, x, y, "EPSG:32654", name="travel_time_min")
    da.values[5, 7] = np.nan
    return da


@pytest.fixture
def geo_grid():
    """Geographic 0.5-degree grid, values encode lon and lat: v = lon + 1000 * lat."""
    lon = -20.0 + 0.5 * np.arange(40)
    lat = -10.0 + 0.5 * np.arange(30)
    v = lon[None, :] + 1000.0 * lat[:, None]
    return make_grid(v, lon, lat, "EPSG:4326", name="lensing_factor")


def test_cog_round_trip_projected(tmp_path, utm_grid):
    p = write_cog(utm_grid, tmp_path / "tt.tif", tags={"scenario": "bay"})
    ok, errors, warnings = cog_validate(str(p))
    assert ok, errors
    with rasterio.open(p) as r:
        assert r.crs.to_epsg() == 32654
        # pixel-is-area transform: edge half a cell before the first centre, north-up
        assert r.transform.a == 2000.0 and r.transform.e == -1000.0
        assert r.transform.c == pytest.approx(500_000.0 - 1000.0)
        assert r.transform.f == pytest.approx(4_000_000.0 + 599 * 1000.0 + 500.0)
        assert r.tags()["AREA_OR_POINT"] == "Area"
        assert r.tags()["CAUTION"] == caution_text()
        assert r.tags()["scenario"] == "bay"
        assert r.descriptions[0].startswith("first-arrival travel time")
        assert r.units[0] == "min"
        assert math.isnan(r.nodata)
        assert len(r.overviews(1)) >= 1
        data = r.read(1)
        # each value sits at its own coordinates (pixel centre from rasterio.xy)
        for row, col in [(0, 0), (599, 699), (123, 456), (300, 1)]:
            xc, yc = r.xy(row, col)
            expect = xc / 1000.0 + yc
            assert data[row, col] == pytest.approx(expect, rel=1e-6)
        # the NaN cell written as nodata, at the right place
        rr, cc = r.index(500_000.0 + 7 * 2000.0, 4_000_000.0 + 5 * 1000.0)
        assert np.isnan(data[rr, cc])
        assert r.read_masks(1)[rr, cc] == 0


def test_cog_geographic_registration_and_nodata(tmp_path, geo_grid):
    da = geo_grid.copy()
    da.values[0, 0] = np.nan
    p = write_cog(da, tmp_path / "lf.tif", nodata=-9999.0, units="1", description="lensing factor")
    assert cog_validate(str(p))[0]
    with rasterio.open(p) as r:
        assert r.crs.to_epsg() == 4326
        assert (r.transform.c, r.transform.f) == pytest.approx((-20.25, -10.0 + 29 * 0.5 + 0.25))
        assert r.nodata == -9999.0
        d = r.read(1)
        lon, lat = r.xy(0, 0)  # north-west corner pixel: northernmost latitude first
        assert (lon, lat) == pytest.approx((-20.0, 4.5))
        assert d[0, 0] == pytest.approx(lon + 1000 * lat)
        row, col = r.index(-20.0, -10.0)  # the NaN cell (first row of the ascending grid)
        assert d[row, col] == -9999.0
        assert r.descriptions == ("lensing factor",) and r.units == ("1",)


def test_cog_needs_crs(tmp_path):
    da = xr.DataArray(np.zeros((3, 4)), dims=("y", "x"), coords={"y": np.arange(3.0), "x": np.arange(4.0)})
    with pytest.raises(CRSError):
        write_cog(da, tmp_path / "x.tif")


def test_netcdf_cf_round_trip(tmp_path, utm_grid):
    energy = utm_grid.copy().rename("energy")
    energy.attrs = {}
    p = write_netcdf({"travel_time_min": utm_grid, "energy": energy}, tmp_path / "run.nc", title="Test run",
                     history="unit test", references="Okada (1985)")
    ds = xr.open_dataset(p)
    assert ds.attrs["Conventions"] == "CF-1.8"
    assert ds.attrs["title"] == "Test run" and "unit test" in ds.attrs["history"]
    assert ds.attrs["comment"] == caution_text() and ds.attrs["caution"] == caution_text()
    assert ds.attrs["references"] == "Okada (1985)"
    for name, unit in (("travel_time_min", "min"), ("energy", "J m-1")):
        v = ds[name]
        assert v.attrs["units"] == unit and v.attrs["long_name"]
        assert v.encoding.get("grid_mapping", v.attrs.get("grid_mapping")) == "spatial_ref"
    gm = ds["spatial_ref"].attrs
    assert gm["grid_mapping_name"] == "transverse_mercator"  # CF Appendix F for UTM
    assert CRS.from_cf(gm).to_epsg() == 32654  # pyproj reads the grid mapping back
    assert ds["x"].attrs["standard_name"] == "projection_x_coordinate" and ds["x"].attrs["axis"] == "X"
    ds.close()
    with netCDF4.Dataset(p) as nc:
        v = nc.variables["travel_time_min"]
        assert v.getncattr("grid_mapping") == "spatial_ref"
        vals = v[:]
        assert np.ma.is_masked(vals[5, 7])  # NaN written with the CF _FillValue
        assert float(vals[10, 20]) == pytest.approx(utm_grid.values[10, 20])
        assert "_FillValue" not in nc.variables["x"].ncattrs()  # coordinates have no missing values
        assert "coordinates" not in v.ncattrs()


def _strip_coord_attrs(da):
    """The grid as the run's layers reach the writer: coordinates without attributes."""
    da = da.copy()
    for d in da.dims:
        da[d].attrs = {}
    return da


@pytest.mark.parametrize("which", ["geo", "utm"])
def test_netcdf_coordinates_carry_cf_attributes(tmp_path, geo_grid, utm_grid, which):
    # CF-1.8 section 4.1 (latitude: units degrees_north, standard_name latitude), 4.2 (longitude:
    # degrees_east / longitude), 4.4 + Appendix A (axis X/Y), 5.6 (projection_x_coordinate /
    # projection_y_coordinate for projected grids); long_name is the CF descriptive attribute.
    # The run's layers reach the writer with bare coordinates: the writer must add everything.
    da = _strip_coord_attrs(geo_grid if which == "geo" else utm_grid)
    p = write_netcdf({"lensing_factor": da}, tmp_path / "c.nc", title="t")
    if which == "geo":
        want = {
            "lon": {"units": "degrees_east", "standard_name": "longitude", "long_name": "longitude", "axis": "X"},
            "lat": {"units": "degrees_north", "standard_name": "latitude", "long_name": "latitude", "axis": "Y"},
        }
    else:
        want = {
            "x": {"units": "m", "standard_name": "projection_x_coordinate",
                  "long_name": "x coordinate of projection", "axis": "X"},
            "y": {"units": "m", "standard_name": "projection_y_coordinate",
                  "long_name": "y coordinate of projection", "axis": "Y"},
        }
    with netCDF4.Dataset(p) as nc:
        for name, attrs in want.items():
            got = {k: nc.variables[name].getncattr(k) for k in nc.variables[name].ncattrs()}
            for k, v in attrs.items():
                assert got.get(k) == v, (name, k, got)
            assert nc.variables[name].dtype == np.float64  # positions keep full precision
            assert "_FillValue" not in got
    # and xarray (a CF decoder) sees the same attributes on its index coordinates
    with xr.open_dataset(p) as ds:
        for name, attrs in want.items():
            assert {k: ds[name].attrs.get(k) for k in attrs} == attrs


def test_netcdf_layers_float32_with_fill_value(tmp_path, geo_grid):
    # netCDF4 (reference library): the stored type is float32 and the missing cells hold the
    # declared _FillValue, netCDF's default float fill 9.96921e+36 (netcdf.h NC_FILL_FLOAT,
    # = netCDF4.default_fillvals["f4"]); masked reads and xarray give NaN back there.
    da = _strip_coord_attrs(geo_grid).copy()
    da.values = da.values + 0.123456789  # not exactly representable: exercises the float32 rounding
    da.values[3, 4] = np.nan
    p = write_netcdf({"lensing_factor": da, "energy": da.rename("energy")}, tmp_path / "f.nc", title="t")
    fill = netCDF4.default_fillvals["f4"]
    with netCDF4.Dataset(p) as nc:
        for name in ("lensing_factor", "energy"):
            v = nc.variables[name]
            assert v.dtype == np.float32
            assert v.getncattr("_FillValue") == np.float32(fill)
            v.set_auto_mask(False)
            raw = v[:]
            assert raw[3, 4] == np.float32(fill)
            assert np.isfinite(raw).all()  # no NaN stored: the fill value marks the gaps
            v.set_auto_mask(True)
            assert np.ma.is_masked(v[:][3, 4]) and int(np.ma.count_masked(v[:])) == 1
    with xr.open_dataset(p) as ds:
        got = ds["lensing_factor"].values
        assert np.isnan(got[3, 4]) and np.isnan(got).sum() == 1
        np.testing.assert_array_equal(got, da.values.astype(np.float32))
        # float32: relative rounding error below 2**-24 (IEEE 754 binary32, 24-bit significand)
        ok = np.isfinite(da.values)
        rel = np.abs(got[ok].astype(float) - da.values[ok]) / np.abs(da.values[ok])
        assert rel.max() <= 2.0**-24
    # float64 stays available on request, with netCDF's default double fill value
    q = write_netcdf({"lensing_factor": da}, tmp_path / "d.nc", title="t", dtype="float64")
    with netCDF4.Dataset(q) as nc:
        assert nc.variables["lensing_factor"].dtype == np.float64
        assert nc.variables["lensing_factor"].getncattr("_FillValue") == netCDF4.default_fillvals["f8"]
    with pytest.raises(InputError, match="dtype='float16'.*'float32' or 'float64'"):
        write_netcdf({"lensing_factor": da}, tmp_path / "e.nc", title="t", dtype="float16")
    assert not (tmp_path / "e.nc").exists()


def test_netcdf_float32_halves_a_noisy_layer(tmp_path):
    # 8-byte versus 4-byte IEEE 754 values: on a field without redundancy (zlib cannot shrink
    # random mantissas much) the float32 file must be well under the float64 one.
    rng = np.random.default_rng(3)
    lon = 120.0 + 0.1 * np.arange(400)
    lat = -30.0 + 0.1 * np.arange(300)
    da = make_grid(rng.lognormal(0.0, 1.0, (300, 400)), lon, lat, "EPSG:4326", name="energy")
    a = write_netcdf({"energy": da}, tmp_path / "a.nc", title="t")
    b = write_netcdf({"energy": da}, tmp_path / "b.nc", title="t", dtype="float64")
    assert a.stat().st_size < 0.65 * b.stat().st_size


def test_netcdf_geographic_and_mismatch(tmp_path, geo_grid, utm_grid):
    p = write_netcdf({"lensing_factor": geo_grid}, tmp_path / "g.nc", title="g")
    ds = xr.open_dataset(p)
    assert ds["spatial_ref"].attrs["grid_mapping_name"] == "latitude_longitude"
    assert ds["lat"].attrs["units"] == "degrees_north" and ds["lon"].attrs["units"] == "degrees_east"
    np.testing.assert_array_equal(ds["lensing_factor"].values, geo_grid.values)
    ds.close()
    with pytest.raises(CRSError):
        write_netcdf({"a": geo_grid, "b": utm_grid}, tmp_path / "bad.nc", title="x")
    shifted = geo_grid.assign_coords(lon=geo_grid.lon + 0.25)
    with pytest.raises(InputError, match="not on the grid"):
        write_netcdf({"a": geo_grid, "b": shifted}, tmp_path / "bad.nc", title="x")
    assert not (tmp_path / "bad.nc").exists()


@pytest.fixture
def segments():
    x0, y0 = 500_000.0, 4_000_000.0
    geoms = [shapely.LineString([(x0 + 1000 * i, y0 + 500 * i), (x0 + 1000 * (i + 1), y0 + 500 * (i + 1))])
             for i in range(3)]
    return pd.DataFrame({
        "segment_id": ["S0001", "S0002", "S0003"],
        "name": ["North cove", None, "Bay \u00e9"],
        "length_m": [1118.0, 1118.0, 1118.0],
        "n_rays": np.array([12, 0, 40], dtype=np.int64),
        "lensing_factor": [1.8, np.nan, 0.7],
        "rank_lensing": [1, 3, 2],
        "reliable": [True, False, True],
        "geometry": geoms,
    })


def test_segments_gpkg_geojson_csv(tmp_path, segments):
    out = write_segments(segments, tmp_path / "segments", "EPSG:32654")
    assert set(out) == {"gpkg", "geojson", "csv"}
    # GeoPackage: grid CRS, all features and fields
    info = pyogrio.read_info(out["gpkg"], layer="segments")
    assert CRS.from_user_input(info["crs"]).to_epsg() == 32654
    assert info["features"] == 3 and info["geometry_type"] == "LineString"
    assert list(info["fields"]) == ["segment_id", "name", "length_m", "n_rays", "lensing_factor",
                                    "rank_lensing", "reliable"]
    assert info["layer_metadata"]["CAUTION"] == caution_text()
    assert info["dataset_metadata"]["CAUTION"] == caution_text()
    meta, _, geom, fields = pyogrio.raw.read(out["gpkg"], layer="segments")
    got = shapely.from_wkb(geom)
    assert all(g.equals_exact(e, 1e-6) for g, e in zip(got, segments["geometry"]))
    names = dict(zip(meta["fields"], fields))
    assert list(names["segment_id"]) == ["S0001", "S0002", "S0003"]
    assert names["name"][2] == "Bay \u00e9" and names["name"][1] is None
    assert list(names["reliable"]) == [True, False, True]
    # GeoJSON: RFC 7946 lon/lat WGS 84, no crs member, caution as foreign member
    info = pyogrio.read_info(out["geojson"])
    assert CRS.from_user_input(info["crs"]).to_epsg() == 4326 and info["features"] == 3
    doc = json.loads(out["geojson"].read_text(encoding="utf-8"))
    assert doc["type"] == "FeatureCollection" and "crs" not in doc
    assert doc["caution"] == caution_text()
    tr = Transformer.from_crs("EPSG:32654", "EPSG:4326", always_xy=True)
    for feat, g in zip(doc["features"], segments["geometry"]):
        coords = np.array(feat["geometry"]["coordinates"])
        lon, lat = tr.transform(*np.array(g.coords).T)
        # lon first (UTM 54N centre meridian 141 E, y = 4000 km ~ 36 N)
        assert 138 < coords[0, 0] < 144 and 35 < coords[0, 1] < 37
        np.testing.assert_allclose(coords[:, 0], lon, atol=2e-7)
        np.testing.assert_allclose(coords[:, 1], lat, atol=2e-7)
    props = [f["properties"] for f in doc["features"]]
    assert props[0]["lensing_factor"] == 1.8 and props[1].get("lensing_factor") is None
    # CSV: caution header then the table
    text = out["csv"].read_text(encoding="utf-8")
    assert text.startswith("# CAUTION:")
    df = pd.read_csv(out["csv"], comment="#")
    assert list(df.columns) == ["segment_id", "name", "length_m", "n_rays", "lensing_factor",
                                "rank_lensing", "reliable"]
    assert df["n_rays"].tolist() == [12, 0, 40]


def test_segments_csv_wkt_and_errors(tmp_path, segments):
    out = write_segments(segments, tmp_path / "s", "EPSG:32654", formats=("csv",), csv_wkt=True)
    df = pd.read_csv(out["csv"], comment="#")
    assert shapely.from_wkt(df["geometry_wkt"][0]).equals_exact(segments["geometry"][0], 1e-6)
    with pytest.raises(InputError, match="no 'geometry' column"):
        write_segments(segments.drop(columns=["geometry"]), tmp_path / "s", "EPSG:32654")
    with pytest.raises(InputError, match="no rows"):
        write_segments(segments.iloc[:0], tmp_path / "s", "EPSG:32654")
    with pytest.raises(CRSError):
        write_segments(segments, tmp_path / "s", "EPSG:999999")


def test_geojson_antimeridian_cut(tmp_path):
    """RFC 7946 3.1.9: a line crossing the antimeridian is cut in two, longitudes within [-180, 180]."""
    df = pd.DataFrame({"segment_id": ["S0001", "S0002"],
                       "geometry": [shapely.LineString([(179.5, -17.0), (180.5, -17.2)]),
                                    shapely.LineString([(200.0, 10.0), (201.0, 10.5)])]})  # 0..360 grid
    out = write_segments(df, tmp_path / "am", "EPSG:4326", formats=("geojson",))
    feats = json.loads(out["geojson"].read_text())["features"]
    assert feats[1]["geometry"]["coordinates"] == [[-160.0, 10.0], [-159.0, 10.5]]  # RFC 7946: -180..180
    g = feats[0]["geometry"]
    assert g["type"] == "MultiLineString"
    lons = [c[0] for part in g["coordinates"] for c in part]
    assert min(lons) >= -180 and max(lons) <= 180
    assert any(abs(v - 179.5) < 1e-9 for v in lons) and any(abs(v + 179.5) < 1e-9 for v in lons)


def test_points_csv(tmp_path):
    pts = [{"name": "Harbour A", "lon": 135.5, "lat": 34.5, "first_arrival_min": 42.5, "lensing_factor": 1.3,
            "amp_1m_m": 2.1, "nearest_segment": "S0004", "distance_km": 1.2}]
    p = write_points_csv(pts, tmp_path / "points.csv")
    text = p.read_text(encoding="utf-8")
    assert text.startswith("# CAUTION:") and CAUTION_MARK in text
    df = pd.read_csv(p, comment="#")
    assert list(df.columns)[:7] == ["name", "lon", "lat", "first_arrival_min", "lensing_factor", "amp_1m_m",
                                    "nearest_segment"]
    assert df["distance_km"][0] == 1.2 and df["first_arrival_min"][0] == 42.5
    # CSV longitudes are written in -180..180 (docs/outputs.md): a point given in 0..360 numbers
    # reads as the same number a user would type, without float residue (235.78 -> -124.22)
    p2 = write_points_csv([{**pts[0], "lon": 235.78}, {**pts[0], "lon": -124.22}], tmp_path / "points2.csv")
    lines = [ln for ln in p2.read_text(encoding="utf-8").splitlines() if ln.startswith("Harbour A")]
    assert [ln.split(",")[1] for ln in lines] == ["-124.22", "-124.22"]
    with pytest.raises(InputError, match="missing column"):
        write_points_csv([{"name": "x", "lon": 1, "lat": 2}], tmp_path / "bad.csv")
    assert not (tmp_path / "bad.csv").exists()


def test_every_writer_carries_caution_and_is_reproducible(tmp_path, utm_grid, segments):
    """The caution is in the bytes of every file; writing twice gives identical bytes."""
    small = utm_grid.isel(x=slice(0, 50), y=slice(0, 40))
    hashes = []
    for run in ("a", "b"):
        d = tmp_path / run
        d.mkdir()
        files = [write_cog(small, d / "t.tif"), d / "t.qml",  # the raster's QGIS style beside it
                 write_netcdf({"travel_time_min": small}, d / "t.nc", title="t")]
        files += list(write_segments(segments, d / "seg", "EPSG:32654").values())
        files.append(write_points_csv([{"name": "A", "lon": 1.0, "lat": 2.0, "first_arrival_min": 3.0,
                                        "lensing_factor": 1.0, "amp_1m_m": 0.5, "nearest_segment": "S0001"}],
                                      d / "points.csv"))
        for f in files:
            assert CAUTION_MARK.encode() in f.read_bytes(), f.name
        assert sorted(p.name for p in d.iterdir()) == sorted(f.name for f in files)  # no temporary leftovers
        hashes.append([_sha(f) for f in files])
    assert hashes[0] == hashes[1]


def test_write_layers(tmp_path, geo_grid):
    from tsunamifocus.io.gis import write_layers

    tt = geo_grid.rename("travel_time_min")
    out = write_layers({"travel_time_min": tt, "lensing_factor": geo_grid}, tmp_path, title="run")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["layers.nc", "lensing_factor.qml", "lensing_factor.tif",
                                                          "travel_time_min.qml", "travel_time_min.tif"]
    with rasterio.open(out["travel_time_min"]) as r:
        assert r.units == ("min",)
    ds = xr.open_dataset(out["netcdf"])
    assert set(ds.data_vars) == {"travel_time_min", "lensing_factor", "spatial_ref"}
    ds.close()
    with pytest.raises(InputError, match="not usable as a file name"):
        write_layers({"../x": tt}, tmp_path, title="run")


def test_nullable_columns_keep_their_types(tmp_path, segments):
    """Ranks with gaps (pandas Int64) and booleans with gaps stay integer/boolean fields with nulls."""
    df = segments.assign(rank_amplitude=pd.array([2, None, 1], dtype="Int64"),
                         robust=pd.array([True, None, False], dtype="boolean"),
                         flag_obj=pd.Series([True, None, False], dtype=object))
    out = write_segments(df, tmp_path / "n", "EPSG:32654", formats=("gpkg", "geojson"))
    info = pyogrio.read_info(out["gpkg"], layer="segments")
    types = dict(zip(info["fields"], zip(info["ogr_types"], info["ogr_subtypes"])))
    assert types["rank_amplitude"][0] == "OFTInteger64"
    assert types["robust"] == ("OFTInteger", "OFSTBoolean") and types["flag_obj"][1] == "OFSTBoolean"
    meta, _, _, fields = pyogrio.raw.read(out["gpkg"], layer="segments")
    col = dict(zip(meta["fields"], fields))
    assert col["rank_amplitude"][0] == 2 and col["rank_amplitude"][2] == 1
    props = [f["properties"] for f in json.loads(out["geojson"].read_text())["features"]]
    assert [p.get("rank_amplitude") for p in props] == [2, None, 1]
    assert [p.get("robust") for p in props] == [True, None, False]


def test_statistic_layers_inherit_units(tmp_path, geo_grid):
    """Ensemble statistics of a standard layer keep its units (a spread has the units of the field)."""
    p = write_cog(geo_grid.rename("travel_time_min_p95"), tmp_path / "p95.tif")
    with rasterio.open(p) as r:
        assert r.units == ("min",) and r.descriptions[0].startswith("ensemble 95th percentile of first-arrival")
    q = write_netcdf({"energy_std": geo_grid.rename("energy_std")}, tmp_path / "s.nc", title="t")
    with xr.open_dataset(q) as ds:
        assert ds["energy_std"].attrs["units"] == "J m-1"


def test_netcdf_attrs_sanitised(tmp_path, geo_grid):
    """Attributes netCDF cannot hold (None, bool, dict) are dropped or stored as 0/1 / JSON text."""
    da = geo_grid.copy()
    da.attrs.update(flag=True, nothing=None, meta={"a": 1}, levels=[1.0, 2.0])
    p = write_netcdf({"lensing_factor": da}, tmp_path / "a.nc", title="t", attrs={"run": {"n": 3}})
    with netCDF4.Dataset(p) as nc:
        v = nc.variables["lensing_factor"]
        assert v.getncattr("flag") == 1 and "nothing" not in v.ncattrs()
        assert json.loads(v.getncattr("meta")) == {"a": 1}
        assert list(v.getncattr("levels")) == [1.0, 2.0]
        assert json.loads(nc.getncattr("run")) == {"n": 3}


# ----------------------------------------------------------------------------- antimeridian
# Convention (docs/outputs.md "Longitudes"): vectors and CSV longitudes in -180..180, cut at the
# antimeridian (RFC 7946 section 3.1.9); rasters in -180..180 unless they cross it, then kept in
# 0..360 numbers with a GDAL VRT beside them that shows the same cells in -180..180.
# References: GDAL VRT driver (gdal.org/drivers/raster/vrt.html) read through rasterio; pyogrio
# (GDAL/OGR) for the vectors; a longitude L and L - 360 are the same meridian (common practice,
# no source). The test grids' values encode their own 0..360 longitude, so every value read
# back says where it came from.


def _pacific(lon0=120.05, lon1=249.95, dlon=0.1, lat0=-2.95, nlat=60):
    """Geographic grid across the antimeridian (120..250 E); value = lon (0..360) + 1000 * lat."""
    lon = lon0 + dlon * np.arange(int(round((lon1 - lon0) / dlon)) + 1)
    lat = lat0 + dlon * np.arange(nlat)
    v = lon[None, :] + 1000.0 * lat[:, None]
    da = make_grid(v, lon, lat, "EPSG:4326", name="lensing_factor")
    da.values[0, 5] = np.nan
    return da


def test_raster_across_antimeridian_keeps_0_360_and_adds_a_180_alternative(tmp_path):
    da = _pacific()
    p = write_cog(da, tmp_path / "lensing_factor.tif")
    alt = tmp_path / "lensing_factor_lon180.vrt"
    assert alt.is_file()
    assert cog_validate(str(p))[0]
    with rasterio.open(p) as r:
        # one contiguous raster, 120..250 in EPSG:4326 numbers, with the note in its tags
        assert r.crs.to_epsg() == 4326
        assert (r.bounds.left, r.bounds.right) == pytest.approx((120.0, 250.0))
        assert "crosses the antimeridian" in r.tags()["LONGITUDES"] and alt.name in r.tags()["LONGITUDES"]
        main = r.read(1)
    with rasterio.open(alt) as r:
        assert r.crs.to_epsg() == 4326
        assert r.bounds.left >= -180.0 - 1e-9 and r.bounds.right <= 180.0 + 1e-9
        assert r.transform.a == pytest.approx(0.1) and r.transform.f == pytest.approx(-2.95 + 59 * 0.1 + 0.05)
        assert r.descriptions[0].startswith("lensing factor") and r.units[0] == "1"
        assert math.isnan(r.nodata)
        alt_data = r.read(1)
        # every cell once: same count of values, same multiset, nothing invented in between
        assert np.isfinite(alt_data).sum() == np.isfinite(main).sum() == da.size - 1
        np.testing.assert_array_equal(np.sort(alt_data[np.isfinite(alt_data)]), np.sort(main[np.isfinite(main)]))
        # sample by -180..180 longitude: 125 W is 235 E, 170 E is 170 E
        for lon180, lat in ((-125.05, 0.05), (170.05, -2.05), (-179.95, 2.05), (179.95, 2.05), (-110.05, 0.05)):
            (val,) = next(r.sample([(lon180, lat)]))
            lon360 = lon180 % 360.0
            assert val == pytest.approx(lon360 + 1000.0 * lat, abs=0.02)
        (gap,) = next(r.sample([(0.0, 0.05)]))  # Greenwich: outside the grid, no data
        assert math.isnan(gap)


def test_global_0_360_raster_written_in_180(tmp_path):
    # a longitude-periodic grid is rolled (same cells, no duplicate) to start at -180
    lon = 0.5 + np.arange(360.0)
    lat = -59.5 + np.arange(120.0)
    v = lon[None, :] + 1000.0 * lat[:, None]
    da = make_grid(v, lon, lat, "EPSG:4326", name="energy", lon_periodic=True)
    p = write_cog(da, tmp_path / "energy.tif")
    assert not (tmp_path / "energy_lon180.vrt").exists()
    with rasterio.open(p) as r:
        assert (r.bounds.left, r.bounds.right) == pytest.approx((-180.0, 180.0))
        assert r.tags()["LON_PERIODIC"] == "1"
        for lon180, lat in ((-170.5, 10.5), (-0.5, -20.5), (179.5, 0.5), (0.5, 0.5)):
            (val,) = next(r.sample([(lon180, lat)]))
            assert val == pytest.approx(lon180 % 360.0 + 1000.0 * lat, abs=0.02)


@pytest.mark.parametrize("lon0, lon1, left", [(200.05, 249.95, -160.0), (-29.95, -0.05, -30.0),
                                               (-209.95, -190.05, 150.0)])
def test_regional_raster_not_crossing_written_in_180(tmp_path, lon0, lon1, left):
    # 200..250 E is 160..110 W; -210..-190 is 150..170 E: both drop onto a -180..180 basemap
    da = _pacific(lon0, lon1)
    p = write_cog(da, tmp_path / "t.tif")
    assert not (tmp_path / "t_lon180.vrt").exists()
    with rasterio.open(p) as r:
        assert r.bounds.left == pytest.approx(left)
        assert -180.0 <= r.bounds.left and r.bounds.right <= 180.0
        assert "LONGITUDES" not in r.tags()
        x, y = r.xy(10, 10)
        (val,) = next(r.sample([(x, y)]))
        lon_stored = val - 1000.0 * y  # the longitude the value was made from, in the input's numbers
        assert (lon_stored - x) % 360.0 == pytest.approx(0.0, abs=0.05) or (lon_stored - x) % 360.0 == pytest.approx(360.0, abs=0.05)


def test_vectors_in_180_and_cut_at_the_antimeridian(tmp_path):
    # segments of a grid in 0..360 numbers: one on a coast at 125 W (= 235 E), one across 180
    table = pd.DataFrame({
        "segment_id": ["S1", "S2", "S3"],
        "x_mid": [235.0, 180.0, 150.1],
        "lon_mid": [235.0, 180.0, 150.1],
        "lat_mid": [40.1, -20.25, 10.05],
        "lensing_factor": [1.5, 2.0, 0.5],
        "geometry": [shapely.LineString([(234.9, 40.0), (235.1, 40.2)]),
                     shapely.LineString([(179.5, -20.0), (180.5, -20.5)]),
                     shapely.LineString([(150.0, 10.0), (150.2, 10.1)])],
    })
    w = write_segments(table, tmp_path / "segments", "EPSG:4326", csv_wkt=True)
    for fmt in ("gpkg", "geojson"):
        info = pyogrio.read_info(w[fmt], layer="segments")
        lo, _, hi, _ = info["total_bounds"]
        assert -180.0 <= lo and hi <= 180.0, (fmt, info["total_bounds"])
        _, _, wkb, fields = pyogrio.raw.read(w[fmt], layer="segments")
        geoms = shapely.from_wkb(wkb)
        g1, g2, g3 = geoms
        assert g1.bounds == pytest.approx((-125.1, 40.0, -124.9, 40.2))
        # the line across 180 is one feature with a piece on each side, touching +/-180
        assert g2.geom_type == "MultiLineString" and len(g2.geoms) == 2
        assert sorted(round(p.bounds[0], 6) for p in g2.geoms) == [-180.0, 179.5]
        assert g2.length == pytest.approx(shapely.LineString([(179.5, -20.0), (180.5, -20.5)]).length)
        assert g3.bounds == pytest.approx((150.0, 10.0, 150.2, 10.1))
    # GeoPackage geometries keep the grid CRS (geographic) and its lon/lat axis meaning
    assert CRS.from_user_input(pyogrio.read_info(w["gpkg"], layer="segments")["crs"]).to_epsg() == 4326
    df = pd.read_csv(w["csv"], comment="#")
    np.testing.assert_allclose(df["lon_mid"], [-125.0, -180.0, 150.1])
    # grid coordinates stay as the grid holds them (x_mid, geometry_wkt read back by `compare`)
    np.testing.assert_allclose(df["x_mid"], [235.0, 180.0, 150.1])
    assert df["geometry_wkt"][0] == "LINESTRING (234.9 40, 235.1 40.2)"


def test_points_csv_longitudes_in_180(tmp_path):
    pts = [{"name": "Harbour", "lon": 235.5, "lat": 40.0, "first_arrival_min": 600.0, "lensing_factor": 1.1,
            "amp_1m_m": 0.4, "nearest_segment": "S1"},
           {"name": "Gauge", "lon": -170.0, "lat": -10.0, "first_arrival_min": 300.0, "lensing_factor": 0.9,
            "amp_1m_m": 0.2, "nearest_segment": "S2"}]
    df = pd.read_csv(write_points_csv(pts, tmp_path / "points.csv"), comment="#")
    np.testing.assert_allclose(df["lon"], [-124.5, -170.0])


def test_longitude_note_names_the_alternative():
    from tsunamifocus.grid import GridInfo
    from tsunamifocus.io.gis import longitude_note

    cross = GridInfo.from_dataarray(_pacific())
    note = longitude_note(cross)
    assert "120..250" in note and "<layer>_lon180.vrt" in note and "-180..180" in note
    inside = GridInfo.from_dataarray(_pacific(200.05, 249.95))
    assert "GeoTIFF rasters are in -180..180" in longitude_note(inside)
    proj = GridInfo.from_dataarray(make_grid(np.ones((3, 4)), np.arange(4.0), np.arange(3.0), "EPSG:32654"))
    assert longitude_note(proj) is None


@pytest.mark.realdata
def test_real_grid_across_antimeridian_drops_onto_a_180_basemap(etopo_path, tmp_path):
    # the shared global relief grid cropped across the antimeridian ([160, 10, -150, 40] =
    # 160..210 E), written as GeoTIFF: the VRT alternative read at a -180..180 longitude gives
    # the depth the file holds at the same meridian in its own 0..360 numbers (netCDF4 read).
    from tsunamifocus.io.bathymetry import load_bathymetry

    depth = load_bathymetry(etopo_path, bbox=(160.0, 10.0, -150.0, 40.0))
    p = write_cog(depth, tmp_path / "depth.tif")
    assert (tmp_path / "depth_lon180.vrt").is_file()
    with netCDF4.Dataset(etopo_path) as nc:
        lon, lat = nc["lon"][:], nc["lat"][:]
        for lon180, la in ((-157.8, 21.3), (-175.0, 30.0), (170.0, 15.0)):
            i = int(np.argmin(np.abs(lon - lon180 % 360.0)))
            j = int(np.argmin(np.abs(lat - la)))
            want = -float(nc["z"][j, i])  # elevation -> depth
            with rasterio.open(tmp_path / "depth_lon180.vrt") as r:
                (got,) = next(r.sample([(float(lon[i]) - (360.0 if lon[i] > 180 else 0.0), float(lat[j]))]))
            assert got == pytest.approx(want, abs=0.5)
    with rasterio.open(p) as r:
        assert r.bounds.left == pytest.approx(159.95) and r.bounds.right == pytest.approx(210.05)


def test_points_csv_without_points(tmp_path):
    """A scenario without [[point]] (allowed, docs/scenario.md): the cautions and the header only."""
    import pandas as pd

    from tsunamifocus.io.gis import POINT_COLUMNS, write_points_csv

    p = write_points_csv(pd.DataFrame(), tmp_path / "points.csv")
    t = pd.read_csv(p, comment="#")
    assert len(t) == 0 and list(t.columns) == list(POINT_COLUMNS)
    assert p.read_text().startswith("# CAUTION")
