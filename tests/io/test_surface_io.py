"""Tests of tsunamifocus.io.surface: reading initial sea-surface rasters (GeoTIFF, NetCDF)."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
import xarray as xr
from affine import Affine

from tsunamifocus.errors import DataFileError, InputError
from tsunamifocus.grid import GridInfo, get_crs
from tsunamifocus.io.surface import read_sea_surface


def hump(n=41):
    yy, xx = np.mgrid[0:n, 0:n] - n // 2
    return np.exp(-(xx**2 + yy**2) / 60.0)


def write_tif(path, arr, crs="EPSG:32611", x0=400e3, y0=7100e3, d=1000.0, units=None, nodata=None, count=1):
    with rasterio.open(path, "w", driver="GTiff", height=arr.shape[-2], width=arr.shape[-1], count=count,
                       dtype="float32", crs=crs, transform=Affine(d, 0.0, x0, 0.0, -d, y0), nodata=nodata) as dst:
        dst.write(np.broadcast_to(arr, (count, *arr.shape[-2:])).astype("float32"))
        if units:
            dst.update_tags(1, units=units)
    return path


def test_geotiff_in_a_projected_crs(tmp_path):
    p = write_tif(tmp_path / "eta.tif", 2.0 * hump(), nodata=-9999.0)
    eta = read_sea_surface(p)
    gi = GridInfo.from_dataarray(eta)
    # cell centres half a cell inside the outer edge (GDAL pixel-is-area geotransform)
    assert gi.x0 == pytest.approx(400e3 + 500.0) and gi.y0 == pytest.approx(7100e3 - 40 * 1000.0 - 500.0)
    assert get_crs(eta).to_epsg() == 32611
    assert float(eta.max()) == pytest.approx(2.0, rel=1e-6)
    # rows ascending northward: the file's first row (north) is the last row here
    np.testing.assert_allclose(eta.values[::-1], (2.0 * hump()).astype("float32"))


def test_units_in_centimetres_are_converted(tmp_path):
    eta = read_sea_surface(write_tif(tmp_path / "cm.tif", 250.0 * hump(), units="cm"))
    assert float(eta.max()) == pytest.approx(2.5, rel=1e-6)


def test_netcdf_lonlat(tmp_path):
    lon = np.linspace(170.0, 174.0, 41)
    lat = np.linspace(-40.0, -36.0, 41)
    ds = xr.Dataset({"eta": (("lat", "lon"), hump(), {"units": "m"})},
                    coords={"lon": ("lon", lon, {"units": "degrees_east"}),
                            "lat": ("lat", lat, {"units": "degrees_north"})})
    p = tmp_path / "eta.nc"
    ds.to_netcdf(p)  # netCDF4/xarray as the reference writer
    eta = read_sea_surface(p)
    assert get_crs(eta).is_geographic
    np.testing.assert_allclose(eta.values, hump())


@pytest.mark.parametrize("arr, kw, message", [
    (300.0 * hump(), {}, r"\|displacement\| reaches 300 m; expected at most 100 m"),
    (0.0 * hump(), {}, "the displacement is zero everywhere"),
    (hump(), {"units": "feet"}, "units 'feet' of the sea-surface values not understood"),
    (hump(), {"count": 2}, "has 2 bands"),
])
def test_bad_rasters_are_one_line_errors(tmp_path, arr, kw, message):
    p = write_tif(tmp_path / "bad.tif", arr, **kw)
    with pytest.raises(InputError, match=message) as exc:
        read_sea_surface(p)
    assert str(exc.value).startswith(str(p)) and "\n" not in str(exc.value)


def test_all_nodata_and_missing_files(tmp_path):
    p = write_tif(tmp_path / "nod.tif", np.full((5, 5), -9999.0), nodata=-9999.0)
    with pytest.raises(InputError, match="every cell is no data"):
        read_sea_surface(p)
    with pytest.raises(DataFileError, match="sea-surface raster not found"):
        read_sea_surface(tmp_path / "none.tif")
    (tmp_path / "empty.tif").write_bytes(b"")
    with pytest.raises(DataFileError, match="file is empty"):
        read_sea_surface(tmp_path / "empty.tif")
    (tmp_path / "junk.tif").write_bytes(b"not a raster at all")
    with pytest.raises(DataFileError, match="not a readable raster"):
        read_sea_surface(tmp_path / "junk.tif")
    with pytest.raises(InputError, match="applies to NetCDF files only"):
        read_sea_surface(write_tif(tmp_path / "ok.tif", hump()), variable="eta")
