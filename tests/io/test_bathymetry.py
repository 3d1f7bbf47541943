"""Tests of tsunamifocus.bathymetry: loading, conventions, crop, resample, smoothing.

External references: the real ETOPO1 0.1-degree grid read directly with netCDF4 (an
independent reader), GDAL via rasterio for GeoTIFF/ESRI ASCII, and grids whose values
encode their own coordinates (an analytical check of registration).
"""

from __future__ import annotations

import math

import netCDF4
import numpy as np
import pytest
import rasterio
import xarray as xr
from rasterio.transform import from_origin

from tsunamifocus import errors
from tsunamifocus.grid import crop_bathymetry, resample_bathymetry
from tsunamifocus.io.bathymetry import load_bathymetry
from tsunamifocus.ocean.smooth import smooth_bathymetry
from tsunamifocus.grid import GridInfo, make_grid

UTM = "EPSG:32633"


def _write_tif(path, arr, transform, crs=UTM, nodata=None, dtype="float32", tags=None, band_tags=None,
               scale=None, offset=None, units=None):
    with rasterio.open(path, "w", driver="GTiff", width=arr.shape[1], height=arr.shape[0], count=1,
                       dtype=dtype, crs=crs, transform=transform, nodata=nodata) as dst:
        dst.write(arr.astype(dtype), 1)
        if tags:
            dst.update_tags(**tags)
        if band_tags:
            dst.update_tags(1, **band_tags)
        if scale is not None:
            dst.scales = (scale,)
        if offset is not None:
            dst.offsets = (offset,)
        if units:
            dst.units = (units,)
    return path


def _coord_code(x, y):
    """Depth value that encodes its own position (positive everywhere)."""
    return 1000.0 + 0.001 * x + 0.0001 * y


# ----------------------------------------------------------------------------- real data
@pytest.mark.realdata
def test_real_grid_sign_decided_from_physical_bounds(etopo_path):
    # The file's variable 'z' has no units, no 'positive' attribute and a neutral name
    # (shared/data/README.md), so metadata cannot tell. Its minimum, -10,714 m (the file's own
    # actual_range attribute, read independently with netCDF4), lies below -8,900 m: no land is
    # that high (Mount Everest 8,849 m; common practice, no source), so it can only be sea floor
    # stored as negative elevation. auto must now agree with an explicit values='elevation'.
    with netCDF4.Dataset(etopo_path) as nc:
        lo = float(nc["z"].actual_range[0])
    assert lo < -8900.0
    auto = load_bathymetry(etopo_path)
    explicit = load_bathymetry(etopo_path, values="elevation")
    np.testing.assert_array_equal(auto.values, explicit.values)
    assert "sea floor stored as negative elevation" in auto.attrs["sign_decided_by"]
    assert auto.attrs["sign_decided_by"].startswith("values: minimum -10,714 m")


@pytest.mark.realdata
def test_real_grid_inspect_without_values(etopo_path, capsys):
    # `inspect` without --values used to refuse this grid ("cannot tell ... 71% negative")
    from tsunamifocus.cli.app import main

    assert main(["inspect", str(etopo_path)]) == 0
    out = capsys.readouterr().out
    assert "sign            values: minimum -10,714 m" in out
    # deepest sea cell: Challenger Deep at 0.1 degree, 10,714 m (the file's actual_range)
    assert "max 10714 m" in out


def _relief(lo, hi, shape=(6, 8)):
    """A grid whose values run linearly from lo to hi (no metadata at all)."""
    return np.linspace(lo, hi, shape[0] * shape[1]).reshape(shape)


@pytest.mark.parametrize(
    "lo, hi, units, expected",
    [
        # Physical bounds (common practice, no source): highest land 8,849 m (Everest), deepest sea
        # floor ~10,935 m (Challenger Deep). Elevation grids span about [-10,935, 8,849] m, depth
        # grids about [-8,849, 10,935] m.
        (-9500.0, 3000.0, None, "elevation"),   # below -8,900 m: only sea floor as negative elevation
        (-3000.0, 9500.0, None, "depth"),       # above +8,900 m: only sea floor as positive depth
        (-31000.0, 9000.0, "ft", "elevation"),  # -9,449 m after converting feet (NIST: 1 ft = 0.3048 m)
        (-9000.0, 31000.0, "ft", "depth"),      # +9,449 m
    ],
)
def test_auto_sign_from_physical_bounds(tmp_path, lo, hi, units, expected):
    arr = _relief(lo, hi)
    p = _write_tif(tmp_path / "g.tif", arr, from_origin(0, 6000, 1000, 1000), units=units)
    got = load_bathymetry(p)
    ref = load_bathymetry(p, values=expected)
    np.testing.assert_array_equal(got.values, ref.values)
    assert got.attrs["sign_decided_by"].startswith("values:")


@pytest.mark.parametrize(
    "lo, hi, units, match",
    [
        (-6000.0, 3000.0, None, "all within"),  # a plausible elevation grid AND a plausible depth grid
        (-3000.0, 6000.0, None, "all within"),
        # -20,000 ft = -6,096 m: within the bounds once in metres, so still undecidable (the
        # bound applies to metres, not to the stored numbers)
        (-20000.0, 5000.0, "ft", "all within"),
        (-9500.0, 9500.0, None, "beyond"),     # impossible either way: refuse, never guess
    ],
)
def test_auto_sign_still_refused_when_values_cannot_tell(tmp_path, lo, hi, units, match):
    arr = _relief(lo, hi)
    p = _write_tif(tmp_path / "g.tif", arr, from_origin(0, 6000, 1000, 1000), units=units)
    with pytest.raises(errors.SignConventionError, match=match) as ei:
        load_bathymetry(p)
    msg = str(ei.value)
    assert "values='elevation'" in msg and "\n" not in msg and str(p) in msg


@pytest.fixture(scope="module")
def etopo_depth(etopo_path):
    return load_bathymetry(etopo_path, values="elevation")


@pytest.mark.realdata
def test_real_grid_layout(etopo_depth):
    d = etopo_depth
    info = GridInfo.from_dataarray(d)
    # 3601 columns with the 0 and 360 meridian duplicated (shared/data/README.md) -> 3600 kept
    assert d.shape == (1801, 3600)
    assert info.periodic_x and info.geographic
    assert d.lon.values[0] == 0.0 and abs(d.lon.values[-1] - 359.9) < 1e-9
    assert d.lat.values[0] == -90.0 and d.lat.values[-1] == 90.0  # gridline registered: nodes at the poles
    assert d.attrs["positive"] == "down" and d.attrs["units"] == "m"


@pytest.mark.realdata
def test_real_grid_deepest_cell_is_mariana_trench(etopo_depth):
    # Deepest ocean: Challenger Deep, Mariana Trench, ~11.3 N 142.2 E, deeper than 10,000 m
    # (common practice, no source). At 0.1 degree the grid's maximum must lie there.
    d = etopo_depth
    j, i = np.unravel_index(np.nanargmax(d.values), d.shape)
    assert d.values[j, i] > 10000.0
    assert 10.0 < d.lat.values[j] < 13.0
    assert 141.0 < d.lon.values[i] < 144.0


@pytest.mark.realdata
@pytest.mark.parametrize("lon,lat", [(0.0, 0.0), (200.0, 20.0), (359.9, -45.3), (142.5, 11.4), (10.0, 89.9)])
def test_real_grid_point_lookup_matches_netcdf4(etopo_depth, etopo_path, lon, lat):
    # independent reader: netCDF4 straight from the file; depth = -elevation
    with netCDF4.Dataset(etopo_path) as nc:
        lons = nc["lon"][:]
        lats = nc["lat"][:]
        i = int(np.argmin(np.abs(lons - lon)))
        j = int(np.argmin(np.abs(lats - lat)))
        ref = -float(nc["z"][j, i])
    got = float(etopo_depth.sel(lon=lon, lat=lat, method="nearest"))
    assert got == pytest.approx(ref, abs=1e-3)


@pytest.mark.realdata
def test_real_grid_crop_across_seam(etopo_depth, etopo_path):
    # a box from 170 E to 170 W crosses the 0/360 seam of a -180..180 request
    c = crop_bathymetry(etopo_depth, (170.0, -30.0, 190.0, -10.0))
    lon = c.lon.values
    assert np.all(np.diff(lon) > 0)
    assert lon[0] == pytest.approx(170.0) and lon[-1] == pytest.approx(190.0)
    c2 = crop_bathymetry(etopo_depth, (-10.0, 40.0, 10.0, 50.0))  # across 0 E, asked as -10..10
    assert c2.lon.values[0] == pytest.approx(-10.0) and c2.lon.values[-1] == pytest.approx(10.0)
    with netCDF4.Dataset(etopo_path) as nc:  # independent value check on the west side of the seam
        ref = -float(nc["z"][int(round((45.0 + 90) / 0.1)), int(round(355.0 / 0.1))])
    assert float(c2.sel(lon=-5.0, lat=45.0, method="nearest")) == pytest.approx(ref, abs=1e-3)


@pytest.mark.realdata
def test_real_grid_crop_across_antimeridian_written_in_180_numbers(etopo_path):
    # [120, 0, -110, 65]: xmin in 0..180 and xmax in -180..0 is the -180..180 way of writing a
    # box across the antimeridian, i.e. 120..250 E (common practice, no source). It used to be
    # refused with "expected xmin < xmax" and no hint.
    a = load_bathymetry(etopo_path, bbox=(120.0, 0.0, -110.0, 65.0))
    b = load_bathymetry(etopo_path, bbox=(120.0, 0.0, 250.0, 65.0))
    assert a.lon.values[0] == pytest.approx(120.0) and a.lon.values[-1] == pytest.approx(250.0)
    np.testing.assert_array_equal(a.values, b.values)
    with netCDF4.Dataset(etopo_path) as nc:  # independent read east of the antimeridian (235 E = 125 W)
        ref = -float(nc["z"][int(round((40.0 + 90) / 0.1)), int(round(235.0 / 0.1))])
    assert float(a.sel(lon=235.0, lat=40.0, method="nearest")) == pytest.approx(ref, abs=1e-3)


def test_crop_across_antimeridian_needs_a_lonlat_grid():
    d = _proj_grid()
    with pytest.raises(errors.InputError, match=r"antimeridian \(120 \.\. 250 E\) needs a lon/lat grid"):
        crop_bathymetry(d, (120.0, 0.0, -110.0, 65.0))
    # a plainly inverted box (both east) stays refused, with the way to write a crossing box
    g = make_grid(np.full((10, 40), 100.0), 100.0 + np.arange(40.0), np.arange(10.0), "EPSG:4326")
    with pytest.raises(errors.InputError, match=r"expected xmin < xmax.*\(120, 0, -110, 65\) for 120\.\.250 E"):
        crop_bathymetry(g, (130.0, 1.0, 120.0, 5.0))
    # a global grid held in -180..180 is rolled so the crossing box is contiguous, 120..250
    lon = -179.5 + np.arange(360.0)
    glob = make_grid(np.tile(lon, (20, 1)), lon, -9.5 + np.arange(20.0), "EPSG:4326", lon_periodic=True)
    c = crop_bathymetry(glob, (120.0, -5.0, -110.0, 5.0))
    assert c.lon.values[0] == pytest.approx(120.5) and c.lon.values[-1] == pytest.approx(249.5)
    assert np.all(np.diff(c.lon.values) > 0)
    # each value is its own -180..180 longitude: 235.5 E holds -124.5 (the same meridian)
    assert float(c.sel(lon=235.5, lat=0.5)) == pytest.approx(-124.5)
    # on a regional lon/lat grid in 0..360 numbers the crossing box is cut out at 120..250 E
    g = make_grid(np.arange(10 * 200.0).reshape(10, 200), 100.5 + np.arange(200.0), np.arange(10.0), "EPSG:4326")
    c = crop_bathymetry(g, (120.0, 1.0, -110.0, 5.0))
    assert c.lon.values[0] == pytest.approx(120.5) and c.lon.values[-1] == pytest.approx(249.5)


# ----------------------------------------------------------------------------- registration
@pytest.mark.parametrize("area_or_point", ["Area", "Point"])
@pytest.mark.parametrize("north_up", [True, False])
def test_geotiff_registration_no_half_cell_shift(tmp_path, area_or_point, north_up):
    # values encode their own cell-centre coordinates: after loading, the value found at each
    # coordinate must equal the code of that coordinate (no half-cell shift). GDAL normalises
    # pixel-is-point files to an area transform itself (GDAL GeoTIFF driver documentation).
    nx, ny, dx = 40, 30, 1000.0
    x0, ytop = 500000.0, 4100000.0
    xc = x0 + dx * (np.arange(nx) + 0.5)
    yc = ytop - dx * (np.arange(ny) + 0.5)
    arr = _coord_code(xc[None, :], yc[:, None])
    if north_up:
        tr = from_origin(x0, ytop, dx, dx)
    else:  # south-up raster: positive e
        arr = arr[::-1]
        tr = rasterio.Affine(dx, 0, x0, 0, dx, ytop - ny * dx)
    p = _write_tif(tmp_path / "g.tif", arr, tr, dtype="float64", tags={"AREA_OR_POINT": area_or_point})
    d = load_bathymetry(p, values="depth")
    X, Y = np.meshgrid(d.x.values, d.y.values)
    np.testing.assert_allclose(d.values, _coord_code(X, Y), rtol=0, atol=1e-9)
    with rasterio.open(p) as src:  # reference: GDAL's own pixel centre of pixel (row 0, col 0)
        xr0, yr0 = src.xy(0, 0)
        assert float(d.sel(x=xr0, y=yr0, method="nearest")) == pytest.approx(float(src.read(1)[0, 0]))


@pytest.mark.parametrize("lon_kind", ["0..360 with seam", "-180..180", "descending lat"])
def test_netcdf_lonlat_orientation_and_seam(tmp_path, lon_kind):
    if lon_kind == "0..360 with seam":
        lon = np.arange(0, 360.001, 5.0)
    else:
        lon = np.arange(-180, 180, 5.0)
    lat = np.arange(-85, 85.1, 5.0)
    if lon_kind == "descending lat":
        lat = lat[::-1]
    code = 5000.0 + lat[:, None] * 10 + np.mod(lon[None, :], 360.0) * 0.01
    ds = xr.Dataset({"elev": (("lat", "lon"), -code)}, coords={"lat": lat, "lon": lon})
    ds["elev"].attrs.update(units="m", positive="up")
    p = tmp_path / "g.nc"
    ds.to_netcdf(p)
    d = load_bathymetry(p)  # positive="up" makes auto unambiguous (CF conventions, 'positive' attribute)
    info = GridInfo.from_dataarray(d)
    assert info.periodic_x
    assert np.all(np.diff(d.lat.values) > 0) and np.all(np.diff(d.lon.values) > 0)
    assert d.sizes["lon"] == 72
    LON, LAT = np.meshgrid(d.lon.values, d.lat.values)
    np.testing.assert_allclose(d.values, 5000.0 + LAT * 10 + np.mod(LON, 360.0) * 0.01, atol=1e-9)


def test_esri_ascii_grid(tmp_path):
    # ESRI ASCII grid: xllcorner/yllcorner are the lower-left cell edge (ESRI format spec);
    # rows are written north to south. Values encode coordinates.
    nx, ny, dx, x0, y0 = 6, 4, 100.0, 1000.0, 2000.0
    xc = x0 + dx * (np.arange(nx) + 0.5)
    yc = y0 + dx * (np.arange(ny) + 0.5)
    vals = _coord_code(xc[None, :], yc[:, None])[::-1]
    vals[0, 0] = -9999
    lines = [f"ncols {nx}", f"nrows {ny}", f"xllcorner {x0}", f"yllcorner {y0}", f"cellsize {dx}",
             "NODATA_value -9999"] + [" ".join(f"{v:.6f}" for v in row) for row in vals]
    p = tmp_path / "g.asc"
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(errors.CRSError, match="no CRS"):
        load_bathymetry(p, values="depth")
    d = load_bathymetry(p, values="depth", crs=UTM)
    assert np.isnan(d.values[-1, 0])  # the north-west cell was nodata
    X, Y = np.meshgrid(d.x.values, d.y.values)
    ok = np.isfinite(d.values)
    np.testing.assert_allclose(d.values[ok], _coord_code(X, Y)[ok], atol=1e-5)


# ----------------------------------------------------------------------------- values
def test_nodata_scale_offset_integer_feet(tmp_path):
    # int16 raster with scale 0.5, offset -100 and a nodata value; units feet -> metres
    # (1 international foot = 0.3048 m exactly, by definition since 1959)
    raw = np.array([[10, 20, -32768], [40, 50, 60]], dtype="int16")
    p = _write_tif(tmp_path / "i.tif", raw, from_origin(0, 2000, 1000, 1000), nodata=-32768, dtype="int16",
                   scale=0.5, offset=-100.0, units="ft")
    d = load_bathymetry(p, values="elevation")
    expected_elev_ft = raw.astype(float) * 0.5 - 100.0
    exp = -(expected_elev_ft * 0.3048)[::-1]
    exp[1, 2] = np.nan
    np.testing.assert_allclose(d.values, exp, atol=1e-9)


def test_auto_sign_from_metadata(tmp_path):
    arr = np.full((5, 5), 100.0)
    arr[0, 0] = -5
    p1 = _write_tif(tmp_path / "a.tif", arr, from_origin(0, 5000, 1000, 1000), band_tags={"positive": "down"})
    assert float(load_bathymetry(p1).values[-1, 0]) == pytest.approx(-5.0)
    p2 = _write_tif(tmp_path / "b.tif", -arr, from_origin(0, 5000, 1000, 1000), band_tags={"positive": "up"})
    assert float(load_bathymetry(p2).values[-1, 0]) == pytest.approx(-5.0)
    p3 = _write_tif(tmp_path / "c.tif", arr, from_origin(0, 5000, 1000, 1000))
    with pytest.raises(errors.SignConventionError):
        load_bathymetry(p3)


# ----------------------------------------------------------------------------- crop/resample/smooth
def _proj_grid(nx=60, ny=40, dx=1000.0):
    x = dx * (np.arange(nx) + 0.5)
    y = dx * (np.arange(ny) + 0.5)
    v = _coord_code(x[None, :], y[:, None])
    return make_grid(v, x, y, UTM)


def test_crop_with_margin():
    d = _proj_grid()
    c = crop_bathymetry(d, (10000, 10000, 20000, 15000), margin_km=2.0)
    assert c.x.values[0] >= 8000 - 1e-9 and c.x.values[0] < 9000
    assert c.x.values[-1] <= 22000 and c.x.values[-1] > 21000
    with pytest.raises(errors.InputError, match="does not overlap"):
        crop_bathymetry(d, (1e7, 1e7, 2e7, 2e7))


def test_resample_is_area_average():
    d = _proj_grid()
    r = resample_bathymetry(d, 3.0)
    assert r.shape == (40 // 3, 60 // 3)
    manual = d.values[:39, :60].reshape(13, 3, 20, 3).mean(axis=(1, 3))
    np.testing.assert_allclose(r.values, manual)
    # block-mean coordinates: the centre of each block of cells
    np.testing.assert_allclose(r.x.values[:3], [1500.0, 4500.0, 7500.0])  # cells 0-3 km -> 1.5 km
    with pytest.raises(errors.InputError, match="only downsampling"):
        resample_bathymetry(d, 0.1)


def test_smoothing_keeps_mean_and_land():
    d = _proj_grid()
    v = d.values.copy()
    v[:, -5:] = -10.0  # land strip
    d = d.copy(data=v)
    s = smooth_bathymetry(d, 3.0)
    np.testing.assert_array_equal(s.values[:, -5:], -10.0)
    # a linear field is reproduced by a normalised Gaussian away from edges (symmetric kernel)
    np.testing.assert_allclose(s.values[15:25, 15:35], d.values[15:25, 15:35], rtol=1e-9)
    const = d.copy(data=np.where(v > 0, 3000.0, v))
    np.testing.assert_allclose(smooth_bathymetry(const, 5.0).values[v > 0], 3000.0)


def test_smoothing_width_in_km_on_lonlat():
    # a single bump at the equator and at 60 N: after smoothing, the east-west spread in km
    # must be the same (a degree of longitude is cos(lat) shorter: spherical geometry)
    lon = np.arange(0, 20, 0.05)
    lat = np.arange(-5, 65, 0.05)
    v = np.full((lat.size, lon.size), 4000.0)
    j0, j60, i0 = int(np.argmin(abs(lat))), int(np.argmin(abs(lat - 60))), 200
    v[j0, i0] += 1000.0
    v[j60, i0] += 1000.0
    d = make_grid(v, lon, lat, "EPSG:4326")
    s = smooth_bathymetry(d, 20.0).values - 4000.0

    def width_km(row, lat_deg):
        prof = row / row.max()
        km = (lon - lon[i0]) * math.pi / 180 * 6371.0088 * math.cos(math.radians(lat_deg))
        return math.sqrt(np.sum(prof * km**2) / np.sum(prof))  # rms width = sigma of the kernel

    assert width_km(s[j0], 0.0) == pytest.approx(20.0, rel=0.03)
    assert width_km(s[j60], lat[j60]) == pytest.approx(20.0, rel=0.03)


# ----------------------------------------------------------------------------- bad input
def test_memory_refusal(tmp_path):
    p = _write_tif(tmp_path / "m.tif", np.full((50, 50), 100.0), from_origin(0, 5e4, 1000, 1000))
    with pytest.raises(errors.ResourceLimitError, match="GB"):
        load_bathymetry(p, values="depth", max_memory_gb=1e-6)


def _bad_cases(tmp_path):
    cases = {}
    cases["missing"] = (tmp_path / "nope.tif", {}, errors.DataFileError, "not found")
    (tmp_path / "empty.tif").write_bytes(b"")
    cases["empty"] = (tmp_path / "empty.tif", {}, errors.DataFileError, "empty")
    (tmp_path / "junk.tif").write_bytes(b"II*\x00garbage" * 20)
    cases["corrupt tif"] = (tmp_path / "junk.tif", {}, errors.DataFileError, "not a readable raster")
    (tmp_path / "junk.nc").write_bytes(b"CDF\x01" + b"\x00\xff" * 50)
    cases["corrupt nc"] = (tmp_path / "junk.nc", {}, errors.DataFileError, "not a readable NetCDF")
    _write_tif(tmp_path / "nocrs.tif", np.ones((4, 4)), from_origin(0, 4, 1, 1), crs=None)
    cases["no crs"] = (tmp_path / "nocrs.tif", {"values": "depth"}, errors.CRSError, "no CRS")
    _write_tif(tmp_path / "land.tif", np.full((4, 4), 50.0), from_origin(0, 4000, 1000, 1000))
    cases["all land"] = (tmp_path / "land.tif", {"values": "elevation"}, errors.InputError, "no sea cells")
    _write_tif(tmp_path / "nan.tif", np.full((4, 4), np.nan), from_origin(0, 4000, 1000, 1000))
    cases["all nan"] = (tmp_path / "nan.tif", {"values": "depth"}, errors.InputError, "nodata")
    _write_tif(tmp_path / "rot.tif", np.ones((4, 4)), rasterio.Affine(1000, 10, 0, 10, -1000, 4000))
    cases["rotated"] = (tmp_path / "rot.tif", {"values": "depth"}, errors.InputError, "rotated or sheared")
    xr.Dataset({"z": (("time", "lat", "lon"), np.ones((3, 4, 5)))},
               coords={"lat": np.arange(4.0), "lon": np.arange(5.0)}).to_netcdf(tmp_path / "3d.nc")
    cases["3-D"] = (tmp_path / "3d.nc", {"values": "depth"}, errors.InputError, "expected a 2-D")
    xr.Dataset({"a": (("lat", "lon"), np.ones((4, 5))), "b": (("lat", "lon"), np.ones((4, 5)))},
               coords={"lat": np.arange(4.0), "lon": np.arange(5.0)}).to_netcdf(tmp_path / "two.nc")
    cases["two vars"] = (tmp_path / "two.nc", {"values": "depth"}, errors.InputError, "several 2-D variables")
    xr.Dataset({"z": (("lat", "lon"), np.ones((4, 5)))},
               coords={"lat": np.arange(0, 200.0, 50), "lon": np.arange(5.0)}).to_netcdf(tmp_path / "swap.nc")
    cases["lat/lon swapped"] = (tmp_path / "swap.nc", {"values": "depth"}, errors.InputError, "swapped")
    xr.Dataset({"z": (("y", "x"), np.ones((4, 5)))},
               coords={"y": np.arange(4.0), "x": np.arange(5.0)}).to_netcdf(tmp_path / "xy.nc")
    cases["projected without grid mapping"] = (tmp_path / "xy.nc", {"values": "depth"}, errors.CRSError,
                                               "no grid_mapping")
    cases["bad values kw"] = (tmp_path / "land.tif", {"values": "height"}, errors.InputError, "expected 'auto'")
    return cases


@pytest.mark.parametrize("case", [
    "missing", "empty", "corrupt tif", "corrupt nc", "no crs", "all land", "all nan", "rotated", "3-D",
    "two vars", "lat/lon swapped", "projected without grid mapping", "bad values kw",
])
def test_bad_input(tmp_path, case):
    path, kw, exc, msg = _bad_cases(tmp_path)[case]
    with pytest.raises(exc, match=msg) as info:
        load_bathymetry(path, **kw)
    text = str(info.value)
    assert "\n" not in text
    if case != "bad values kw":
        assert path.name in text  # the message names the file


def test_projected_netcdf_with_grid_mapping_round_trip(tmp_path):
    d = _proj_grid()
    ds = d.to_dataset(name="depth")
    ds["depth"].attrs["grid_mapping"] = "spatial_ref"
    p = tmp_path / "p.nc"
    ds.to_netcdf(p)
    back = load_bathymetry(p, values="depth")
    assert GridInfo.from_dataarray(back).crs.to_epsg() == 32633
    np.testing.assert_array_equal(back.values, d.values)
    np.testing.assert_array_equal(back.x.values, d.x.values)


@pytest.mark.parametrize("kind", ["geotiff", "netcdf"])
def test_round_trip_geotiff_netcdf_exact(tmp_path, kind):
    # load -> write with the package's own writers -> load again: CRS, coordinates (hence the
    # transform) and values identical; the independent reader (rasterio/GDAL) confirms the transform
    from tsunamifocus.products.demo import write_demo_data
    from tsunamifocus.io.gis import write_cog, write_netcdf

    src = write_demo_data(tmp_path / "in")[kind]
    d = load_bathymetry(src)
    info = GridInfo.from_dataarray(d)
    tif = write_cog(d.astype("float32"), tmp_path / "back.tif", description="depth", units="m")
    nc = write_netcdf({"depth": d}, tmp_path / "back.nc", title="round trip")
    for p in (tif, nc):
        b = load_bathymetry(p, values="depth")
        bi = GridInfo.from_dataarray(b)
        assert bi.crs.equals(info.crs)
        np.testing.assert_array_equal(b.values, d.values.astype("float32").astype("float64") if p == tif
                                      else d.values)
        np.testing.assert_allclose(b[b.dims[1]].values, d[d.dims[1]].values, rtol=0, atol=1e-9 * abs(info.dx))
        np.testing.assert_allclose(b[b.dims[0]].values, d[d.dims[0]].values, rtol=0, atol=1e-9 * abs(info.dy))
    with rasterio.open(tif) as r:
        assert r.transform.a == pytest.approx(info.dx) and r.transform.c == pytest.approx(info.bounds[0])
        assert r.transform.f == pytest.approx(info.bounds[3])


def test_a_few_impossible_depths_become_no_data_with_a_warning(tmp_path):
    """One spike of 1e9 m among 10,000 cells: set aside with a warning naming the count, not used.

    No sea floor is deeper than about 11 km (Challenger Deep, about 10,935 m; from memory)."""
    import warnings

    import numpy as np
    import xarray as xr

    from tsunamifocus.errors import DataWarning
    from tsunamifocus.io.bathymetry import load_bathymetry

    z = np.full((100, 100), -3000.0)
    z[:, -5:] = 50.0
    z[40, 40] = -1e9
    xr.Dataset({"z": (("lat", "lon"), z, {"positive": "up", "units": "m"})},
               coords={"lat": np.linspace(-5, 5, 100), "lon": np.linspace(0, 10, 100)}).to_netcdf(tmp_path / "s.nc")
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        d = load_bathymetry(tmp_path / "s.nc")
    msgs = [str(x.message) for x in w if issubclass(x.category, DataWarning)]
    assert len(msgs) == 1 and "1 of 10000 cells" in msgs[0] and "treated as no data" in msgs[0], msgs
    assert np.isnan(d.values[40, 40]) and float(np.nanmax(d.values)) == 3000.0
