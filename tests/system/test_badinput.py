"""Table-driven bad-input suite across the entry points: the Python API and the command line.

Project rule (CAUTIONS / DEVELOPERS): bad input gets a one-line error from tsunamifocus/errors.py
naming the file, field or value and what was expected -- never silently wrong numbers. Each row
below builds one bad input in a temporary folder and checks

* API rows: the exact exception class, a one-line message matching a pattern, and that the
  message names the offending file / field / value;
* CLI rows (``tsunamifocus.cli.main``): exit code 2, exactly one line ``error: ...`` on stderr,
  no traceback, and the same naming.

Facts of the trade the rows rely on (each noted again beside its row):
* latitude lies in [-90, 90] degrees (definition of geodetic latitude);
* a north-up GeoTIFF has a geotransform with zero rotation terms (GDAL data model, "Affine
  GeoTransform": GT(2) = GT(4) = 0 for north-up images);
* TOML files are UTF-8 (TOML v1.0.0 specification, toml.io/en/v1.0.0, "Spec");
* CF conventions 1.8 section 4.3: the attribute ``positive`` ("up"/"down") fixes the direction of
  a vertical coordinate, so elevation is positive up and depth positive down.
"""

from __future__ import annotations

import json
import math
import pathlib
import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pytest
import rasterio
import xarray as xr
from pyproj import Transformer
from rasterio.transform import from_origin
from shapely.geometry import LineString

from tsunamifocus import errors as E
from tsunamifocus.cli.app import main
from tsunamifocus.errors import MESSAGE_LINE_CHARS

UTM = "EPSG:32633"  # UTM zone 33N: central meridian 15 E
_TO_LL = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)


# ------------------------------------------------------------------------------------- builders
def _tif(path: pathlib.Path, arr, *, crs=UTM, transform=None, count=1, band_tags=None) -> pathlib.Path:
    arr = np.asarray(arr, dtype="float32")
    if transform is None:
        transform = from_origin(400_000.0, 4_560_000.0, 2000.0, 2000.0)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=arr.shape[-1],
        height=arr.shape[-2],
        count=count,
        dtype="float32",
        crs=crs,
        transform=transform,
    ) as dst:
        for b in range(1, count + 1):
            dst.write(arr if arr.ndim == 2 else arr[b - 1], b)
        if band_tags:
            dst.update_tags(1, **band_tags)
    return path


def _shelf(ny=80, nx=80) -> np.ndarray:
    """Depth [m, positive down] of a shelf: 4000 m in the west rising to land in the east."""
    x = np.arange(nx) * 2000.0
    h = 4000.0 * (1.0 - x / 140_000.0)
    return np.repeat(h[None, :], ny, axis=0)


def _good_tif(tmp: pathlib.Path, name="shelf.tif") -> pathlib.Path:
    return _tif(tmp / name, _shelf(), band_tags={"positive": "down", "units": "m"})


def _good_nc(tmp: pathlib.Path, name="grid.nc") -> pathlib.Path:
    lon = np.arange(0.0, 10.01, 0.5)
    lat = np.arange(-5.0, 5.01, 0.5)
    z = np.repeat((-4000.0 + 450.0 * lon)[None, :], lat.size, axis=0)  # sea west, land east
    xr.Dataset(
        {"z": (("lat", "lon"), z, {"positive": "up", "units": "m"})}, coords={"lat": lat, "lon": lon}
    ).to_netcdf(tmp / name)
    return tmp / name


def _put(path: pathlib.Path, data: bytes | str) -> pathlib.Path:
    if isinstance(data, str):
        path.write_text(data, encoding="utf-8")
    else:
        path.write_bytes(data)
    return path


def _truncate(path: pathlib.Path, fraction: float) -> pathlib.Path:
    b = path.read_bytes()
    path.write_bytes(b[: int(len(b) * fraction)])
    return path


def _ll(x: float, y: float) -> tuple[float, float]:
    lon, lat = _TO_LL.transform(x, y)
    return float(lon), float(lat)


def _scenario(
    tmp: pathlib.Path,
    *,
    grid: str = "shelf.tif",
    source: str | None = None,
    extra: str = "",
    rays: str = "count = 200\nstop_depth_m = 20.0\nmax_time_h = 1.0\n",
) -> pathlib.Path:
    """A small valid scenario on the shelf grid (a point source in deep water) with edits."""
    if not (tmp / "shelf.tif").exists():
        _good_tif(tmp)
    if source is None:
        lon, lat = _ll(440_000.0, 4_480_000.0)  # 3400 m deep
        source = f'name = "hump"\nkind = "point"\nlon = {lon:.5f}\nlat = {lat:.5f}\nradius_km = 20\n'
    text = (
        f'[scenario]\nname = "bad input"\n\n[bathymetry]\npath = "{grid}"\n\n[[source]]\n{source}\n'
        f"[rays]\n{rays}\n[output]\nfigures = false\nreport = false\n{extra}"
    )
    p = tmp / "scenario.toml"
    p.write_text(text, encoding="utf-8")
    return p


def _plane(h, dx=2000.0):
    from tsunamifocus.grid import make_grid

    ny, nx = h.shape
    return make_grid(
        np.asarray(h, float), 400_000.0 + np.arange(nx) * dx, 4_400_000.0 + np.arange(ny) * dx, UTM
    )


def _lonlat_grid(lon, lat, h):
    from tsunamifocus.grid import make_grid

    return make_grid(np.asarray(h, float), lon, lat, "EPSG:4326")


def _geojson(path: pathlib.Path, geoms: list[dict | None], props: list[dict] | None = None) -> pathlib.Path:
    feats = [
        {"type": "Feature", "properties": (props or [{}] * len(geoms))[i], "geometry": g}
        for i, g in enumerate(geoms)
    ]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": feats}), encoding="utf-8")
    return path


def _coast_line_ll() -> list[list[float]]:
    """A north-south line near the 20 m isobath of the shelf grid, in lon/lat."""
    return [list(_ll(538_000.0, y)) for y in (4_410_000.0, 4_480_000.0, 4_550_000.0)]


# ------------------------------------------------------------------------------------- API table
@dataclass
class ApiCase:
    id: str
    build: Callable[[pathlib.Path], tuple[Callable[[], Any], str]]  # -> (call, text the message must name)
    exc: type
    pattern: str


def _load(path, **kw):
    from tsunamifocus.io.bathymetry import load_bathymetry

    return lambda: load_bathymetry(path, **kw)


def _grid_case(id_, make, exc, pattern, **kw):
    def build(tmp):
        p = make(tmp)
        return _load(p, **kw), p.name

    return ApiCase(id_, build, exc, pattern)


def _mk_rotated(tmp):
    # GDAL data model: a north-up image has GT(2) = GT(4) = 0; here both rotation terms are set
    return _tif(
        tmp / "rotated.tif", _shelf(), transform=rasterio.Affine(2000.0, 300.0, 4e5, 300.0, -2000.0, 4.56e6)
    )


def _mk_sheared(tmp):
    return _tif(
        tmp / "sheared.tif", _shelf(), transform=rasterio.Affine(2000.0, 500.0, 4e5, 0.0, -2000.0, 4.56e6)
    )


def _mk_3d(tmp):
    xr.Dataset(
        {"z": (("time", "lat", "lon"), -np.ones((3, 6, 7)) * 1000.0, {"positive": "up"})},
        coords={"time": [0.0, 1.0, 2.0], "lat": np.arange(6.0), "lon": np.arange(7.0)},
    ).to_netcdf(tmp / "cube.nc")
    return tmp / "cube.nc"


def _mk_nc(name, values, *, lat=None, lon=None, attrs=None, extra_vars=None):
    def make(tmp):
        la = np.arange(-3.0, 3.01, 1.0) if lat is None else np.asarray(lat, float)
        lo = np.arange(0.0, 8.01, 1.0) if lon is None else np.asarray(lon, float)
        v = np.broadcast_to(np.asarray(values, float), (la.size, lo.size)).copy()
        data = {"z": (("lat", "lon"), v, dict({"positive": "up", "units": "m"} if attrs is None else attrs))}
        for k in extra_vars or ():
            data[k] = (("lat", "lon"), v.copy())
        xr.Dataset(data, coords={"lat": la, "lon": lo}).to_netcdf(tmp / name)
        return tmp / name

    return make


def _mk_projected_nc_without_mapping(tmp):
    xr.Dataset(
        {"depth": (("y", "x"), _shelf(6, 7), {"positive": "down"})},
        coords={"y": np.arange(6) * 2000.0, "x": np.arange(7) * 2000.0},
    ).to_netcdf(tmp / "xy.nc")
    return tmp / "xy.nc"


def _mk_folder(tmp):
    (tmp / "grid_folder.tif").mkdir()
    return tmp / "grid_folder.tif"


GRID_CASES = [
    _grid_case("grid-missing", lambda t: t / "absent.tif", E.DataFileError, r"file not found"),
    _grid_case("grid-empty-file", lambda t: _put(t / "empty.tif", b""), E.DataFileError, r"file is empty"),
    _grid_case("grid-folder-not-file", _mk_folder, E.DataFileError, r"not a regular file"),
    _grid_case(
        "grid-truncated-geotiff",
        lambda t: _truncate(_good_tif(t), 0.3),
        E.DataFileError,
        r"not a readable raster|cannot read raster data",
        values="depth",
    ),
    _grid_case(
        "grid-corrupt-geotiff",
        lambda t: _put(t / "junk.tif", b"II*\x00" + bytes(range(256)) * 8),
        E.DataFileError,
        r"not a readable raster|cannot read raster data",
    ),
    _grid_case(
        "grid-corrupt-netcdf",
        lambda t: _put(t / "junk.nc", b"CDF\x01" + b"\xff" * 500),
        E.DataFileError,
        r"not a readable NetCDF",
    ),
    _grid_case(
        "grid-truncated-netcdf",
        lambda t: _truncate(_good_nc(t), 0.5),
        E.DataFileError,
        r"not a readable NetCDF|cannot read variable",
        values="elevation",
    ),
    _grid_case(
        "grid-geotiff-without-crs",
        lambda t: _tif(t / "nocrs.tif", _shelf(), crs=None),
        E.CRSError,
        r"raster has no CRS; pass crs=",
        values="depth",
    ),
    _grid_case(
        "grid-projected-netcdf-without-grid-mapping",
        _mk_projected_nc_without_mapping,
        E.CRSError,
        r"no grid_mapping",
        values="depth",
    ),
    _grid_case(
        "grid-rotated-transform",
        _mk_rotated,
        E.InputError,
        r"rotated or sheared geotransform.*north-up",
        values="depth",
    ),
    _grid_case(
        "grid-sheared-transform",
        _mk_sheared,
        E.InputError,
        r"rotated or sheared geotransform",
        values="depth",
    ),
    _grid_case("grid-3d-variable", _mk_3d, E.InputError, r"'z' has dims \('time', 'lat', 'lon'\).*2-D"),
    _grid_case("grid-all-nan", _mk_nc("nan.nc", np.nan), E.InputError, r"every cell is nodata"),
    _grid_case("grid-all-land", _mk_nc("land.nc", 250.0), E.InputError, r"no sea cells"),
    _grid_case("grid-constant-zero-depth", _mk_nc("zero.nc", 0.0), E.InputError, r"no sea cells"),
    _grid_case(
        "grid-sign-undecidable",
        _mk_nc("plain.nc", -1000.0, attrs={}),
        E.SignConventionError,
        r"cannot tell whether 'z' holds elevation or depth.*values='elevation'",
    ),
    # CF 1.8 section 4.3: positive="up" declares elevation; the user claims depth
    _grid_case(
        "grid-sign-contradicts-positive-attr",
        _mk_nc("up.nc", -1000.0),
        E.SignConventionError,
        r"values='depth' contradicts.*positive='up'",
        values="depth",
    ),
    # latitude in [-90, 90]: a 'lat' axis running to 200 holds longitudes
    _grid_case(
        "grid-lat-lon-swapped",
        _mk_nc("swap.nc", -1000.0, lat=np.arange(0.0, 201.0, 50.0)),
        E.InputError,
        r"beyond \+/-90 degrees; are longitude and latitude swapped",
    ),
    _grid_case(
        "grid-irregular-spacing",
        _mk_nc("irr.nc", -1000.0, lon=[0.0, 1.0, 2.0, 4.0, 5.0]),
        E.InputError,
        r"'lon' is not regularly spaced",
    ),
    _grid_case(
        "grid-two-bands",
        lambda t: _tif(t / "two.tif", np.stack([_shelf(), _shelf()]), count=2),
        E.InputError,
        r"has 2 bands; expected a single-band",
        values="depth",
    ),
    _grid_case(
        "grid-several-variables",
        _mk_nc("several.nc", -1000.0, extra_vars=["w"]),
        E.InputError,
        r"several 2-D variables.*variable=",
    ),
    _grid_case(
        "grid-unknown-variable",
        _mk_nc("one.nc", -1000.0),
        E.InputError,
        r"no variable 'elev'",
        variable="elev",
    ),
    _grid_case(
        "grid-variable-on-geotiff",
        _good_tif,
        E.InputError,
        r"'variable' applies to NetCDF files only",
        variable="z",
    ),
    _grid_case(
        "grid-unknown-vertical-units",
        _mk_nc("fath.nc", -1000.0, attrs={"positive": "up", "units": "fathoms"}),
        E.InputError,
        r"vertical units 'fathoms' not understood",
    ),
    _grid_case(
        "grid-single-row",
        _mk_nc("row.nc", -1000.0, lat=[0.0]),
        E.InputError,
        r"'z' is 1 x 9 cells; expected at least 2 x 2 cells",
    ),
    _grid_case(
        "grid-memory-limit",
        _good_tif,
        E.ResourceLimitError,
        r"needs about .* GB, above the limit",
        values="depth",
        max_memory_gb=1e-5,
    ),
    ApiCase(
        "grid-bbox-outside",
        lambda t: (
            _load(_good_tif(t), values="depth", bbox=(0.0, 0.0, 1e3, 1e3)),
            "bbox (0.0, 0.0, 1000.0, 1000.0)",
        ),
        E.InputError,
        r"does not overlap the grid \(400000.0, 4400000.0",
    ),
    ApiCase(
        "grid-bad-values-option",
        lambda t: (_load(_good_tif(t), values="height"), "values='height'"),
        E.InputError,
        r"expected 'auto', 'elevation' or 'depth'",
    ),
]


def _parse(path):
    from tsunamifocus.io.scenario import parse_scenario

    return lambda: parse_scenario(path)


def _scen_case(
    id_, edit: Callable[[str], str] | None, pattern, *, raw: bytes | None = None, name="scenario.toml"
):
    def build(tmp):
        p = _scenario(tmp)
        if raw is not None:
            p.write_bytes(raw)
        elif edit is not None:
            p.write_text(edit(p.read_text(encoding="utf-8")), encoding="utf-8")
        return _parse(p), p.name

    return ApiCase(id_, build, E.ScenarioError, pattern)


SCENARIO_CASES = [
    _scen_case(
        "scenario-unknown-key",
        lambda s: s.replace("count = 200", "cuont = 200"),
        r"\[rays\].*unknown key 'cuont'.*did you mean 'count'",
    ),
    _scen_case(
        "scenario-unknown-section", lambda s: s + "\n[raytracing]\nx = 1\n", r"unknown section 'raytracing'"
    ),
    _scen_case(
        "scenario-wrong-type-string",
        lambda s: s.replace("count = 200", 'count = "200"'),
        r"count = \"200\".*integer",
    ),
    _scen_case(
        "scenario-wrong-type-float-for-int",
        lambda s: s.replace("count = 200", "count = 2.5"),
        r"count = 2\.5.*integer",
    ),
    _scen_case(
        "scenario-out-of-range-stop-depth",
        lambda s: s.replace("stop_depth_m = 20.0", "stop_depth_m = -5.0"),
        r"stop_depth_m = -5.*> 0 and <= 2000 m",
    ),
    _scen_case(
        "scenario-out-of-range-time",
        lambda s: s.replace("max_time_h = 1.0", "max_time_h = 500.0"),
        r"max_time_h = 500.*<= 72 h",
    ),
    # latitude in [-90, 90]
    _scen_case(
        "scenario-source-lat-out-of-range",
        lambda s: re.sub(r"lat = [-0-9.]+", "lat = 140.0", s, count=1),
        r"lat = 140.*>= -90 and <= 90 degrees",
    ),
    # TOML v1.0.0: a TOML file must be a valid UTF-8 encoded Unicode document
    _scen_case(
        "scenario-latin1-encoding",
        None,
        r"not UTF-8 text",
        raw='[scenario]\nname = "Baie de l\u00e9gende"\n'.encode("latin-1"),
    ),
    _scen_case(
        "scenario-utf16-encoding",
        None,
        r"not UTF-8 text|invalid TOML",
        raw='[scenario]\nname = "x"\n'.encode("utf-16"),
    ),
    _scen_case(
        "scenario-invalid-toml", lambda s: s.replace("count = 200", "count = [200"), r"line \d+.*invalid TOML"
    ),
    _scen_case(
        "scenario-bool-as-string",
        lambda s: s.replace("figures = false", 'figures = "no"'),
        r'figures = "no".*true or false',
    ),
    _scen_case(
        "scenario-missing-bathymetry-path",
        lambda s: s.replace('path = "shelf.tif"', ""),
        r"\[bathymetry\]: missing key 'path'",
    ),
]


def _missing_scenario_case():
    def build(tmp):
        p = tmp / "no_such_scenario.toml"
        return _parse(p), p.name

    return ApiCase("scenario-file-missing", build, E.ScenarioError, r"scenario file not found")


SCENARIO_CASES.append(_missing_scenario_case())


# ---- sources: on land, outside the grid, across the antimeridian of a regional grid
def _point_source(x, y, crs=UTM, name="hump"):
    from tsunamifocus.source.faults import PointSource

    return PointSource(x=x, y=y, radius_km=20.0, amplitude_m=1.0, name=name, crs=crs)


def _fault(trace, name="f"):
    from tsunamifocus.source.faults import FaultSegment

    return FaultSegment(
        trace=trace, top_depth_km=5.0, dip_deg=15.0, width_km=60.0, slip_m=3.0, rake_deg=90.0, name=name
    )


def _uplift(src, depth):
    from tsunamifocus.source.uplift import uplift_on_grid

    return lambda: uplift_on_grid(src, depth)


def _src_case(id_, make_src, make_grid, pattern, names: str):
    def build(tmp):
        return _uplift(make_src(), make_grid()), names

    return ApiCase(id_, build, E.SourceError, pattern)


def _regional_180():
    # regional grid 150 E .. 179.5 E in the -180..180 convention; deep sea everywhere
    lon = np.arange(150.0, 179.51, 0.5)
    lat = np.arange(-20.0, 0.01, 0.5)
    return _lonlat_grid(lon, lat, np.full((lat.size, lon.size), 4000.0))


def _fan_case(id_, n_rays, make_eta, pattern, names):
    def build(tmp):
        from tsunamifocus.source.rayfan import make_ray_fan

        d = _plane(_shelf(40, 80))
        return (lambda: make_ray_fan(make_eta(d), d, n_rays)), names

    return ApiCase(id_, build, E.SourceError, pattern)


SOURCE_CASES = [
    _src_case(
        "source-point-on-land",
        lambda: _point_source(555_000.0, 4_480_000.0),
        lambda: _plane(_shelf()),
        r"centre .* lies on land or no-data",
        "hump",
    ),
    _src_case(
        "source-point-outside-grid",
        lambda: _point_source(900_000.0, 4_480_000.0),
        lambda: _plane(_shelf()),
        r"lie outside the grid \(bounds",
        "900000",
    ),
    _src_case(
        "source-fault-trace-on-land",
        lambda: _fault((_ll(548_000.0, 4_450_000.0), _ll(552_000.0, 4_520_000.0)), name="onshore"),
        lambda: _plane(_shelf()),
        r"whole fault trace .* lies on land",
        "onshore",
    ),
    _src_case(
        "source-fault-outside-grid",
        lambda: _fault(((30.0, 10.0), (30.5, 11.0)), name="far"),
        lambda: _plane(_shelf()),
        r"lie outside the grid",
        "far",
    ),
    # crossing the antimeridian on a regional grid that stops at 179.5 E: the east end is off the grid
    _src_case(
        "source-antimeridian-on-regional-grid",
        lambda: _fault(((179.0, -11.0), (-179.0, -9.0)), name="dateline"),
        _regional_180,
        r"outside the grid \(bounds \(149\.75",
        "dateline",
    ),
    _fan_case("source-fan-too-few-rays", 3, lambda d: d * 0 + 1.0, r"n_rays=3: expected an integer >= 8 \(\[rays\] count, --rays\)", "3"),
    _fan_case("source-fan-no-uplift-over-sea", 500, lambda d: d * 0.0, r"no sea-surface displacement", "sea"),
]


def _nan_trace():
    from tsunamifocus.source.faults import FaultSegment

    return FaultSegment(
        trace=((float("nan"), 0.0), (1.0, 1.0)),
        top_depth_km=5.0,
        dip_deg=15.0,
        width_km=50.0,
        slip_m=1.0,
        name="nan trace",
    )


SOURCE_CASES.append(
    ApiCase(
        "source-non-finite-trace",
        lambda tmp: (_nan_trace, "nan"),
        E.SourceError,
        r"trace has non-finite coordinates",
    )
)


# ---- ray launch errors
def _ray_case(id_, pattern, names, **over):
    def build(tmp):
        from tsunamifocus.propagation.rays import trace_rays

        h = _shelf(30, 80)
        h[10:14, 10:14] = np.nan  # a no-data hole
        d = _plane(h)
        a = dict(x0=[440_000.0], y0=[4_440_000.0], azimuth_deg=[90.0])
        a.update({k: over.pop(k) for k in list(over) if k in a})
        return (lambda: trace_rays(d, a["x0"], a["y0"], a["azimuth_deg"], **over)), names

    return ApiCase(id_, build, E.RayError, pattern)


RAY_CASES = [
    _ray_case("rays-launch-on-land", r"launched on land at .*depth -", "555000", x0=[555_000.0]),
    _ray_case(
        "rays-launch-outside-grid", r"launched outside the grid.*grid bounds", "900000", x0=[900_000.0]
    ),
    _ray_case(
        "rays-launch-in-nan-hole",
        r"launched on a no-data \(NaN\) cell",
        "ray 0",
        x0=[424_000.0],
        y0=[4_424_000.0],
    ),
    _ray_case(
        "rays-nan-weight", r"weights\[0\] = nan J: expected a finite energy >= 0", "weights", weights=[np.nan]
    ),
    _ray_case(
        "rays-negative-weight",
        r"weights\[0\] = -2.0 J: expected a finite energy >= 0",
        "-2.0",
        weights=[-2.0],
    ),
    _ray_case("rays-zero-rays", r"no rays to trace: x0 is empty", "x0", x0=[], y0=[], azimuth_deg=[]),
    _ray_case(
        "rays-stop-isobath-deeper-than-launch",
        r"stop_depth_m = 3900.0 m is not shallower than the launch depth",
        "3900",
        stop_depth_m=3900.0,
    ),
    _ray_case(
        "rays-absurd-step", r"step_s = 1000000.0 s: expected 0 < step_s <= [0-9.]+ s", "step_s", step_s=1e6
    ),
    _ray_case("rays-zero-step", r"step_s = 0.0 s: expected 0 < step_s", "step_s", step_s=0.0),
    _ray_case(
        "rays-negative-time-limit",
        r"max_time_s = -60.0: expected a positive time",
        "max_time_s",
        max_time_s=-60.0,
    ),
    _ray_case(
        "rays-mismatched-lengths",
        r"azimuth_deg has 2 values, expected 1",
        "azimuth_deg",
        azimuth_deg=[0.0, 90.0],
    ),
    _ray_case(
        "rays-nan-azimuth", r"azimuth_deg\[0\] = nan is not finite", "azimuth_deg", azimuth_deg=[np.nan]
    ),
    _ray_case(
        "rays-negative-keep-paths", r"keep_paths = -1: expected a count >= 0", "keep_paths", keep_paths=-1
    ),
]


# ---- coastlines: files, CRS, empty/invalid geometries, segmentation
def _coast_read(path, **kw):
    from tsunamifocus.io.coastline import read_coastline

    return lambda: read_coastline(path, UTM, **kw)


def _coast_case(id_, make, pattern, **kw):
    def build(tmp):
        p = make(tmp)
        return _coast_read(p, **kw), p.name

    return ApiCase(id_, build, E.CoastError, pattern)


def _mk_gpkg_no_crs(tmp):
    import pyogrio
    import shapely

    p = tmp / "nocrs.gpkg"
    with pytest.warns(UserWarning):
        pyogrio.raw.write(
            p,
            np.array([shapely.to_wkb(LineString([(0, 0), (1, 1)]))], dtype=object),
            geometry_type="LineString",
            field_data=[],
            fields=[],
            crs=None,
            driver="GPKG",
        )
    return p


def _segment(lines, length_m, depth=None):
    from tsunamifocus.coast.segments import segment_coastline

    return lambda: segment_coastline(lines, length_m, _plane(_shelf()) if depth is None else depth)


_SEA_LINE = LineString([(538_000.0, 4_410_000.0), (538_000.0, 4_550_000.0)])

COAST_CASES = [
    _coast_case("coast-file-missing", lambda t: t / "absent.geojson", r"does not exist"),
    _coast_case(
        "coast-file-unreadable",
        lambda t: _put(t / "junk.geojson", "{not json"),
        r"cannot be read as a vector file",
    ),
    _coast_case("coast-file-without-crs", _mk_gpkg_no_crs, r"has no CRS; expected a file with a defined CRS"),
    _coast_case(
        "coast-only-empty-geometries",
        lambda t: _geojson(t / "empty.geojson", [None, None]),
        r"no usable line or polygon features",
    ),
    _coast_case(
        "coast-invalid-one-point-line",
        lambda t: _geojson(t / "onept.geojson", [{"type": "LineString", "coordinates": [[15.0, 40.0]]}]),
        r"no usable line or polygon features \(1 empty or invalid\)",
    ),
    _coast_case(
        "coast-only-points",
        lambda t: _geojson(t / "points.geojson", [{"type": "Point", "coordinates": [15.0, 40.0]}]),
        r"no usable line or polygon features",
    ),
    _coast_case(
        "coast-name-field-missing",
        lambda t: _geojson(
            t / "named.geojson",
            [{"type": "LineString", "coordinates": _coast_line_ll()}],
            [{"label": "north"}],
        ),
        r"name_field 'name' not found; fields are \['label'\]",
        name_field="name",
    ),
    ApiCase(
        "coast-segment-length-zero",
        lambda t: (_segment([_SEA_LINE], 0.0), "segment_length_m"),
        E.CoastError,
        r"segment_length_m=0.0: expected a length > 0 m",
    ),
    ApiCase(
        "coast-segment-longer-than-coast",
        lambda t: (_segment([_SEA_LINE], 1e7), "10000000"),
        E.CoastError,
        r"longer than the whole coastline \(140000 m\)",
    ),
    ApiCase(
        "coast-no-lines",
        lambda t: (_segment([LineString()], 1e4), "empty"),
        E.CoastError,
        r"no coastline lines given \(empty list\)",
    ),
]


def _isobath_case():
    def build(tmp):
        from tsunamifocus.coast.coastline import coastline_from_grid

        d = _plane(_shelf())
        return (lambda: coastline_from_grid(d, -20.0)), "isobath_m=-20"

    return ApiCase("coast-negative-isobath", build, E.CoastError, r"isobath_m=-20.0: expected a depth > 0 m")


COAST_CASES.append(_isobath_case())

# issue 16, class 2: impossible depths. The deepest sea floor (Challenger Deep) is about 10,935 m
# and the highest land (Mount Everest) 8,849 m (facts of geography, values from memory).
def _impossible(name, value, ny=7):
    def make(tmp):
        lo = np.arange(0.0, 8.01, 1.0)
        z = np.broadcast_to(-4000.0 + 450.0 * lo, (ny, lo.size)).copy()
        z[:, :4] = value  # half the sea cells
        xr.Dataset({"z": (("lat", "lon"), z, {"positive": "up", "units": "m"})},
                   coords={"lat": np.arange(ny) - 3.0, "lon": lo}).to_netcdf(tmp / name)
        return tmp / name

    return make


def _nan_coordinate(tmp):
    lo = np.arange(0.0, 8.01, 1.0)
    lo[3] = np.nan
    z = np.broadcast_to(-4000.0 + 450.0 * np.arange(9.0), (7, 9))
    xr.Dataset({"z": (("lat", "lon"), z, {"positive": "up", "units": "m"})},
               coords={"lat": np.arange(7.0) - 3.0, "lon": lo}).to_netcdf(tmp / "nanlon.nc")
    return tmp / "nanlon.nc"


RELIABILITY_API_CASES = [
    _grid_case("grid-depth-1e9-m", _impossible("deep.nc", -1e9), E.InputError,
               r"28 of 63 cells lie outside the physical range \(depth at most 11,000 m.*depth 1e\+09 m\); "
               r"expected depths in metres"),
    _grid_case("grid-height-above-highest-land", _impossible("high.nc", 25_000.0), E.InputError,
               r"outside the physical range .*height 25,000 m"),
    # class 4: a NaN coordinate is not a coordinate (grid convention: finite, ascending, regular)
    _grid_case("grid-nan-longitude", _nan_coordinate, E.InputError,
               r"coordinate 'lon' holds 1 non-finite value\(s\) \(first nan at index 3\)"),
]

API_CASES = GRID_CASES + SCENARIO_CASES + SOURCE_CASES + RAY_CASES + COAST_CASES + RELIABILITY_API_CASES


@pytest.mark.parametrize("case", API_CASES, ids=[c.id for c in API_CASES])
def test_api_bad_input(tmp_path, case: ApiCase):
    call, names = case.build(tmp_path)
    with pytest.raises(E.TsunamiFocusError) as info:
        call()
    exc = info.value
    assert type(exc) is case.exc, f"{type(exc).__name__} raised, expected exactly {case.exc.__name__}: {exc}"
    msg = str(exc)
    assert "\n" not in msg, msg  # one line
    assert re.search(case.pattern, msg), f"{case.pattern!r} not in {msg!r}"
    assert names in msg, f"message does not name {names!r}: {msg!r}"


# ------------------------------------------------------------------------------------- CLI table
@dataclass
class CliCase:
    id: str
    build: Callable[[pathlib.Path], tuple[list[str], str]]  # -> (argv, text the message must name)
    pattern: str
    code: int = 2


def _inspect(make, *opts):
    def build(tmp):
        p = make(tmp)
        return ["inspect", str(p), *opts], p.name

    return build


def _run(edit_tmp: Callable[[pathlib.Path], pathlib.Path], names: str, *opts):
    def build(tmp):
        p = edit_tmp(tmp)
        return ["-q", "run", str(p), "--out", str(tmp / "out"), *opts], names

    return build


def _scen_edit(old, new, **kw):
    def make(tmp):
        p = _scenario(tmp, **kw)
        s = p.read_text(encoding="utf-8")
        assert old in s, old
        p.write_text(s.replace(old, new), encoding="utf-8")
        return p

    return make


def _with_coast_file(make_file):
    def make(tmp):
        f = make_file(tmp)
        return _scenario(tmp, extra=f'\n[coast]\nfrom = "{f.name}"\n')

    return make


def _source_at(x, y, name="hump"):
    lon, lat = _ll(x, y)
    return f'name = "{name}"\nkind = "point"\nlon = {lon:.5f}\nlat = {lat:.5f}\nradius_km = 20\n'


def _fault_src(trace, name="rupture"):
    (a, b), (c, d) = trace
    return (
        f'name = "{name}"\nkind = "fault"\ntrace = [[{a}, {b}], [{c}, {d}]]\ntop_depth_km = 5.0\n'
        f"dip_deg = 15.0\nwidth_km = 60.0\nslip_m = 3.0\n"
    )


def _regional_tif_scenario(tmp):
    # lon/lat GeoTIFF 150..179.5 E, deep sea; a fault crossing the antimeridian
    lon0, d = 149.75, 0.5
    lon = lon0 + d * (np.arange(60) + 0.5)
    h = np.repeat(
        np.clip(4000.0 * (lon - 152.0) / 3.0, -50.0, 4000.0)[None, :], 40, axis=0
    )  # coast near 152 E
    _tif(
        tmp / "regional.tif",
        h,
        crs="EPSG:4326",
        transform=from_origin(lon0, 0.25, d, d),
        band_tags={"positive": "down", "units": "m"},
    )
    return _scenario(
        tmp, grid="regional.tif", source=_fault_src(((179.0, -11.0), (-179.0, -9.0)), "dateline")
    )


def _empty_run_folder(tmp):
    (tmp / "not_a_run").mkdir()
    (tmp / "not_a_run" / "notes.txt").write_text("nothing here")
    return tmp / "not_a_run"


CLI_CASES = [
    # inspect: grids
    CliCase("cli-inspect-missing-grid", _inspect(lambda t: t / "absent.tif"), r"file not found"),
    CliCase("cli-inspect-empty-grid", _inspect(lambda t: _put(t / "e.nc", b"")), r"file is empty"),
    CliCase(
        "cli-inspect-truncated-geotiff",
        _inspect(lambda t: _truncate(_good_tif(t), 0.3), "--values", "depth"),
        r"not a readable raster|cannot read raster data",
    ),
    CliCase(
        "cli-inspect-corrupt-netcdf",
        _inspect(lambda t: _put(t / "j.nc", b"\x89HDF\r\n\x1a\n" + b"\0" * 99)),
        r"not a readable NetCDF",
    ),
    CliCase(
        "cli-inspect-no-crs",
        _inspect(lambda t: _tif(t / "nocrs.tif", _shelf(), crs=None), "--values", "depth"),
        r"raster has no CRS",
    ),
    CliCase("cli-inspect-rotated", _inspect(_mk_rotated, "--values", "depth"), r"rotated or sheared"),
    CliCase("cli-inspect-3d", _inspect(_mk_3d), r"expected a 2-D \(y, x\) grid"),
    CliCase("cli-inspect-all-nan", _inspect(_mk_nc("nan.nc", np.nan)), r"every cell is nodata"),
    CliCase("cli-inspect-all-land", _inspect(_mk_nc("land.nc", 120.0)), r"no sea cells"),
    CliCase(
        "cli-inspect-sign-undecidable",
        _inspect(_mk_nc("plain.nc", -1000.0, attrs={})),
        r"values='elevation'.*values='depth'",
    ),
    CliCase(
        "cli-inspect-sign-contradiction",
        _inspect(_mk_nc("up.nc", -1000.0), "--values", "depth"),
        r"contradicts the file's attribute positive='up'",
    ),
    CliCase(
        "cli-inspect-lat-lon-swapped",
        _inspect(_mk_nc("swap.nc", -1000.0, lat=np.arange(0.0, 201.0, 50.0))),
        r"are longitude and latitude swapped",
    ),
    CliCase(
        "cli-inspect-memory-limit-nonpositive",
        lambda t: (["inspect", str(_good_tif(t)), "--max-memory-gb", "-1"], "max_memory_gb=-1.0"),
        r"expected a positive number of GB",
    ),
    # run: scenario files
    CliCase(
        "cli-run-missing-scenario",
        _run(lambda t: t / "absent.toml", "absent.toml"),
        r"scenario file not found",
    ),
    CliCase(
        "cli-run-unknown-key", _run(_scen_edit("count = 200", "nrays = 200"), "nrays"), r"unknown key 'nrays'"
    ),
    CliCase(
        "cli-run-wrong-type",
        _run(_scen_edit("max_time_h = 1.0", 'max_time_h = "one"'), "max_time_h"),
        r'max_time_h = "one".*a number',
    ),
    CliCase(
        "cli-run-out-of-range",
        _run(_scen_edit("radius_km = 20", "radius_km = -20"), "radius_km"),
        r"radius_km = -20.*> 0",
    ),
    CliCase(
        "cli-run-latin1",
        _run(lambda t: _put(t / "l1.toml", 'name = "\u00e9"\n'.encode("latin-1")), "l1.toml"),
        r"not UTF-8 text",
    ),
    CliCase(
        "cli-run-rays-zero",
        _run(lambda t: _scenario(t), "--rays 0", "--rays", "0"),
        r"expected a number of rays >= 8 and <= 100000000 \(as \[rays\] count\)",
    ),
    # run: data referenced by a valid scenario
    CliCase(
        "cli-run-grid-missing", _run(lambda t: _scenario(t, grid="gone.tif"), "gone.tif"), r"file not found"
    ),
    CliCase(
        "cli-run-grid-sign-undecidable",
        _run(lambda t: _scenario(t, grid=_tif(t / "nosign.tif", _shelf()).name), "nosign.tif"),
        r"cannot tell whether",
    ),
    CliCase(
        "cli-run-source-on-land",
        _run(lambda t: _scenario(t, source=_source_at(556_000.0, 4_480_000.0)), "hump"),
        r"lies on land or no-data",
    ),
    CliCase(
        "cli-run-source-outside-grid",
        _run(lambda t: _scenario(t, source=_source_at(1_200_000.0, 4_480_000.0)), "hump"),
        r"outside the grid",
    ),
    CliCase(
        "cli-run-fault-across-antimeridian-regional",
        _run(_regional_tif_scenario, "dateline"),
        r"outside the grid",
    ),
    CliCase(
        "cli-run-coast-file-missing",
        _run(_scen_edit("[output]", '[coast]\nfrom = "gone.geojson"\n\n[output]'), "gone.geojson"),
        r"does not exist",
    ),
    CliCase(
        "cli-run-coast-file-empty-geometries",
        _run(_with_coast_file(lambda t: _geojson(t / "blank.geojson", [None])), "blank.geojson"),
        r"no usable line or polygon features",
    ),
    CliCase(
        "cli-run-coast-file-invalid-geometry",
        _run(
            _with_coast_file(
                lambda t: _geojson(t / "bad.geojson", [{"type": "LineString", "coordinates": [[15.0, 40.0]]}])
            ),
            "bad.geojson",
        ),
        r"1 empty or invalid",
    ),
    # other commands
    CliCase(
        "cli-compare-one-run",
        lambda t: (["compare", str(t), "--out", str(t / "cmp")], "two run folders"),
        r"at least two run folders",
    ),
    CliCase(
        "cli-check-not-a-run",
        lambda t: (["-q", "check", str(_empty_run_folder(t))], "not_a_run"),
        r"manifest.json: not found; expected a finished run folder with its manifest",
    ),
    CliCase(
        "cli-demo-rays-zero",
        lambda t: (["demo", "--out", str(t / "d"), "--rays", "0"], "--rays 0"),
        r"expected a number of rays >= 8 and <= 100000000 \(as \[rays\] count\)",
    ),
    # existing results are never overwritten without --overwrite
    CliCase(
        "cli-demo-existing-results",
        lambda t: (["-q", "demo", "--out", str(_empty_run_folder(t))], "not_a_run"),
        r"not empty; pass --overwrite",
    ),
    CliCase(
        "cli-compare-existing-results",
        lambda t: (
            ["compare", str(t / "r1"), str(t / "r2"), "--out", str(_empty_run_folder(t))],
            "not_a_run",
        ),
        r"not empty; pass --overwrite",
    ),
]


# ------------------------------------------------------------------ issue 16: reliability, round two
# Each class of failure adds rows here; the rule each row checks is the project's own (never lose a
# user's files, refuse with one line naming file/field/value and what was expected).


def _fake_run(tmp: pathlib.Path, name: str) -> pathlib.Path:
    """A folder laid out like a finished run (a tsunamifocus manifest with parameters, a segments table)."""
    d = tmp / name
    d.mkdir()
    (d / "segments.csv").write_text("segment_id,lensing_factor\ns1,1.0\n", encoding="utf-8")
    (d / "manifest.json").write_text(json.dumps({
        "format": "tsunamifocus-manifest", "format_version": 1, "parameters": {"scenario": {"name": name}},
        "inputs": [], "outputs": [], "seeds": {}, "software": {}}), encoding="utf-8")
    return d


def _run_into(out_of: Callable[[pathlib.Path], pathlib.Path], names: str | Callable[[pathlib.Path], str], *opts):
    """``run`` of the small scenario with --out chosen by ``out_of(tmp)``."""
    def build(tmp):
        sc = _scenario(tmp)
        out = out_of(tmp)
        return ["-q", "run", str(sc), "--out", str(out), *opts], names(tmp) if callable(names) else names

    return build


def _symlink_to_folder(tmp: pathlib.Path) -> pathlib.Path:
    (tmp / "real_results").mkdir()
    (tmp / "linked_out").symlink_to(tmp / "real_results")
    return tmp / "linked_out"


def _recorded_run(tmp: pathlib.Path, name: str = "R") -> pathlib.Path:
    """A run folder as ``run`` leaves it, in miniature: scenario.toml, segments.csv, manifest listing both."""
    from tsunamifocus.io.manifest import write_manifest
    from tsunamifocus.io.scenario import parse_scenario

    sc = parse_scenario(_scenario(tmp))
    d = tmp / name
    d.mkdir()
    (d / "scenario.toml").write_text(sc.to_toml(), encoding="utf-8")
    (d / "segments.csv").write_text("segment_id,lensing_factor\nS0001,1.20\nS0002,0.90\n", encoding="utf-8")
    write_manifest(d, scenario=sc)
    return d


def _without(d: pathlib.Path, rel: str) -> pathlib.Path:
    (d / rel).unlink()
    return d


def _edited(rel: str, old: str, new: str, name: str = "R"):
    def make(tmp):
        d = _recorded_run(tmp, name)
        f = d / rel
        text = f.read_text(encoding="utf-8")
        assert old in text, old
        f.write_text(text.replace(old, new, 1), encoding="utf-8")
        return d

    return make


def _edited_manifest_parameter(section: str, key: str, value):
    def make(tmp):
        d = _recorded_run(tmp)
        m = json.loads((d / "manifest.json").read_text(encoding="utf-8"))
        m["parameters"][section][key] = value
        (d / "manifest.json").write_text(json.dumps(m), encoding="utf-8")
        return d / "manifest.json"

    return make


def _sparse_tif(tmp: pathlib.Path, n: int) -> pathlib.Path:
    """An n x n float32 GeoTIFF whose blocks are never written (GDAL SPARSE_OK): tiny on disk."""
    with rasterio.open(tmp / "huge.tif", "w", driver="GTiff", width=n, height=n, count=1, dtype="float32",
                       crs=UTM, transform=from_origin(4e5, 4.56e6, 10.0, 10.0), tiled=True,
                       sparse_ok=True, nodata=np.nan) as dst:
        dst.update_tags(1, positive="down", units="m")
    return tmp / "huge.tif"


RELIABILITY_CLI_CASES = [
    # class 10: deep nesting, unreadable grids: the file, the line, exit 2 (never "unexpected")
    CliCase(
        "cli-run-toml-nested-too-deeply",
        _run(lambda t: _put(t / "deep.toml", "[rays]\ncount = " + "[" * 3000 + "1" + "]" * 3000 + "\n"), "deep.toml"),
        r"deep.toml: line 2: arrays or tables nested too deeply to read",
    ),
    # class 12: values are cut in messages (a 1 MB description must not give a 1 MB error line)
    CliCase(
        "cli-run-megabyte-description",
        _run(_scen_edit('name = "bad input"', 'name = "bad input"\ndescription = "' + "d" * 1_000_000 + '"'),
             "(1000000 characters): expected at most 20000 characters"),
        r'\[scenario\] description = "ddd+\.\.\.ddd+" \(1000000 characters\)',
    ),
    CliCase(
        "cli-run-megabyte-name",
        _run(_scen_edit('name = "bad input"', 'name = "' + "n" * 1_000_000 + '"'), "[scenario] name"),
        r"expected at most 200 characters",
    ),
    # class 13: one ray-count limit (a fan has at least 8 rays), checked where the count is given
    CliCase(
        "cli-run-one-ray",
        _run(_scen_edit("count = 200", "count = 1"), "[rays] count = 1"),
        r"scenario.toml: line \d+: \[rays\] count = 1: expected an integer >= 8 and <= 100000000 rays",
    ),
    CliCase(
        "cli-run-rays-option-below-fan",
        _run(lambda t: _scenario(t), "--rays 7", "--rays", "7"),
        r"--rays 7: expected a number of rays >= 8",
    ),
    # class 14: names are one visible line: no line separators (U+2028, U+0085), no bidirectional
    # overrides (U+202E) (Unicode Standard: general categories Zl, Cc, Cf)
    CliCase(
        "cli-run-name-with-line-separator",
        _run(_scen_edit('name = "bad input"', 'name = "bad\u2028input"'), "U+2028 LINE SEPARATOR"),
        r'\[scenario\] name = "bad\\u2028input": expected a single line of text without control, line-separator',
    ),
    CliCase(
        "cli-run-source-name-with-next-line",
        _run(_scen_edit('name = "hump"', 'name = "hu\u0085mp"'), "U+0085"),
        r'name = "hu\\x85mp": expected a single line .* \(U\+0085 control character at character 3\)',
    ),
    CliCase(
        "cli-run-name-with-right-to-left-override",
        _run(_scen_edit('name = "bad input"', 'name = "bad\u202etupni"'), "U+202E RIGHT-TO-LEFT OVERRIDE"),
        r"direction-changing characters \(U\+202E RIGHT-TO-LEFT OVERRIDE at character 4\)",
    ),
    # class 15: work size is estimated before the work and refused beyond the stated limit
    CliCase(
        "cli-run-segments-of-one-metre",
        _run(_scen_edit("[output]", "[coast]\nsegment_km = 0.001\n\n[output]"), "segment_length_m=1 m"),
        r"segment_length_m=1 m cuts \d+ km of coastline into about 1\.\d+e\+05 segments, above the limit of "
        r"1e\+05; use segments of at least",
        code=1,
    ),
    # class 5: the memory estimate holds within 25 % of the measured peak (benchmarks/bench_memory.py:
    # 0.38 GB + 76 B per cell); a 10000 x 10000 grid peaks near 8 GB, above the one default limit of
    # 4 GB (the estimate before was 2.4 GB against a limit of 8 GB, and the grid was read)
    CliCase(
        "cli-inspect-grid-above-default-memory-limit",
        lambda t: (["inspect", str(_sparse_tif(t, 10_000)), "--values", "depth"], "huge.tif"),
        r"loading a 10000 x 10000 grid needs about 8.0 GB, above the limit of 4.0 GB",
        code=1,
    ),
    # class 3: every command that reads a run verifies it against its manifest (sha256, FIPS 180-4)
    CliCase(
        "cli-compare-edited-segments",
        lambda t: (["compare", str(_edited("segments.csv", "1.20", "99.0")(t)), str(_recorded_run(t, "S")),
                    "--out", str(t / "cmp")], "changed: segments.csv"),
        r"/R: run folder does not match its manifest: changed: segments.csv \(sha256 differs",
    ),
    CliCase(
        "cli-check-edited-scenario",
        lambda t: (["-q", "check", str(_edited("scenario.toml", "stop_depth_m = 20", "stop_depth_m = 50")(t))],
                   "changed: scenario.toml"),
        r"run folder does not match its manifest: changed: scenario.toml",
    ),
    CliCase(
        "cli-check-deleted-file",
        lambda t: (["-q", "check", str(_without(_recorded_run(t), "segments.csv"))], "missing: segments.csv"),
        r"does not match its manifest: missing: segments.csv",
    ),
    CliCase(
        "cli-rerun-edited-ray-count",
        lambda t: (["-q", "run", str(_edited_manifest_parameter("rays", "count", 50)(t)), "--out", str(t / "out")],
                   "rays.count: recorded 200, manifest 50"),
        r"cannot reproduce the run: parameters differ from the recorded run: rays.count: recorded 200, manifest 50",
    ),
    CliCase(
        "cli-rerun-edited-grid-path",
        lambda t: (["-q", "run", str(_edited_manifest_parameter("bathymetry", "path", str(_good_tif(t, "other.tif")))(t)),
                    "--out", str(t / "out")], "bathymetry.path: recorded"),
        r"parameters differ from the recorded run: bathymetry.path: recorded \".*shelf.tif\", manifest \".*other.tif\"",
    ),
    # class 1: --overwrite replaces only an earlier output of the same kind, never the inputs
    CliCase(
        "cli-run-overwrite-folder-holding-the-scenario",
        _run_into(lambda t: t, "scenario_file", "--overwrite"),
        r"holds the input scenario_file .*scenario.toml; writing there would destroy it",
    ),
    CliCase(
        "cli-run-overwrite-folder-of-user-files",
        _run_into(_empty_run_folder, "not_a_run", "--overwrite"),
        r"--overwrite replaces only an earlier run output folder \(with its manifest.json\); this folder holds "
        r"files that are not tsunamifocus output",
    ),
    CliCase(
        "cli-run-out-inside-the-grid-folder",
        lambda t: (["-q", "run", str(_scenario(t)), "--out", str(t / "shelf.tif" / "x")], "shelf.tif"),
        r"lies inside the input bathymetry",
    ),
    CliCase(
        "cli-compare-overwrite-one-of-its-runs",
        lambda t: (["compare", str(_fake_run(t, "A")), str(_fake_run(t, "B")), "--out", str(t / "A"),
                    "--overwrite"], "run folder"),
        r"/A: --out holds the input run folder",
    ),
    CliCase(
        "cli-compare-overwrite-a-run-folder",
        lambda t: (["compare", str(_fake_run(t, "A")), str(_fake_run(t, "B")), "--out", str(_fake_run(t, "C")),
                    "--overwrite"], "earlier run output"),
        r"replaces only an earlier comparison output folder \(with its comparison.json\)",
    ),
    CliCase(
        "cli-check-overwrite-a-run-folder",
        lambda t: (["-q", "check", str(_fake_run(t, "A")), "--out", str(_fake_run(t, "B")), "--overwrite"],
                   "earlier run output"),
        r"replaces only an earlier wave-check output folder",
    ),
    # class 11: an output that cannot be created is refused before any computation
    CliCase(
        "cli-run-out-under-a-file",
        _run_into(lambda t: _put(t / "afile", "x") / "sub", "afile"),
        r"--out cannot be created: .*afile is not a folder",
    ),
    CliCase(
        "cli-run-out-in-read-only-place",  # /sys refuses mkdir even to root (Linux sysfs)
        _run_into(lambda t: pathlib.Path("/sys/tsunamifocus-out"), "/sys"),
        r"--out cannot be created: /sys is not writable",
    ),
    # class 18: an --out that is a symbolic link is refused, nothing replaced, no link left behind
    CliCase(
        "cli-run-out-is-a-symlink",
        _run_into(_symlink_to_folder, "linked_out", "--overwrite"),
        r"is a symbolic link \(to .*real_results\); give the real folder",
    ),
]
CLI_CASES += RELIABILITY_CLI_CASES


@pytest.mark.parametrize("case", CLI_CASES, ids=[c.id for c in CLI_CASES])
def test_cli_bad_input(tmp_path, capsys, case: CliCase):
    argv, names = case.build(tmp_path)
    capsys.readouterr()
    code = main(argv)
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == case.code, err
    assert len(lines) == 1, err  # exactly one line, no log noise
    assert len(lines[0]) <= MESSAGE_LINE_CHARS + len("error: "), len(lines[0])  # and a short one (values cut)
    assert lines[0].startswith("error: ") and "unexpected" not in lines[0], lines[0]
    assert "Traceback" not in err
    assert re.search(case.pattern, lines[0]), f"{case.pattern!r} not in {lines[0]!r}"
    assert names in lines[0], f"message does not name {names!r}: {lines[0]!r}"
    assert not (tmp_path / "out").exists()  # nothing written on refusal


def test_case_count():
    # issue 8 "done when": at least 40 cases across the CLI and the API
    assert len(API_CASES) + len(CLI_CASES) >= 40
    assert len({c.id for c in API_CASES + CLI_CASES}) == len(API_CASES) + len(CLI_CASES)


# ------------------------------------------------------------------------------------- accepted inputs
# The same entry points must ACCEPT these awkward-but-valid inputs and give the right numbers.


def test_coastline_in_another_crs_is_reprojected(tmp_path):
    """A WGS84 GeoJSON coastline read for a UTM grid comes back in UTM, matching pyproj."""
    from tsunamifocus.io.coastline import read_coastline

    ll = _coast_line_ll()
    p = _geojson(tmp_path / "coast.geojson", [{"type": "LineString", "coordinates": ll}])
    lines, _ = read_coastline(p, UTM)
    got = np.asarray(lines[0].coords)
    # reference: pyproj directly (EPSG:4326 -> EPSG:32633, lon/lat order)
    ref = np.column_stack(Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(*np.array(ll).T))
    np.testing.assert_allclose(got, ref, atol=1e-6)
    assert abs(got[0, 0] - 538_000.0) < 1e-3  # back where _coast_line_ll put it


def test_fault_across_antimeridian_on_global_grid_works():
    """On a global (periodic) grid a trace from 179.5 E to 179.5 W is one fault straddling the seam."""
    from tsunamifocus.grid import grid_info
    from tsunamifocus.source.rayfan import make_ray_fan
    from tsunamifocus.source.uplift import uplift_on_grid

    lon = np.arange(0.0, 360.0, 0.5)
    lat = np.arange(-40.0, 20.01, 0.5)
    d = _lonlat_grid(lon, lat, np.full((lat.size, lon.size), 4000.0))
    assert grid_info(d).periodic_x
    eta = uplift_on_grid(_fault(((179.5, -11.0), (-179.5, -9.0)), name="dateline"), d)
    v = eta.values
    west = v[:, (lon > 178.0) & (lon < 180.0)]
    east = v[:, (lon > 180.0) & (lon < 182.0)]
    # a thrust uplifts the sea floor on both sides of the seam (same fault, a few cells each way)
    assert west.max() > 0.1 and east.max() > 0.1
    assert abs(west.max() - east.max()) < 0.5 * max(west.max(), east.max())
    fan = make_ray_fan(eta, d, 400)
    x0 = np.asarray(fan.x0) % 360.0
    assert ((x0 > 178.0) & (x0 < 180.0)).any() and ((x0 > 180.0) & (x0 < 182.0)).any()
    assert np.isclose(np.sum(fan.weights), fan.energy_J if hasattr(fan, "energy_J") else np.sum(fan.weights))


def test_antimeridian_handled_on_regional_grid_in_0_360():
    """A regional grid in 0..360 longitudes accepts a trace written with -180..180 longitudes."""
    from tsunamifocus.source.uplift import uplift_on_grid

    lon = np.arange(170.0, 190.01, 0.25)
    lat = np.arange(-20.0, 0.01, 0.25)
    d = _lonlat_grid(lon, lat, np.full((lat.size, lon.size), 4000.0))
    eta = uplift_on_grid(_fault(((179.5, -11.0), (-179.5, -9.0)), name="dateline"), d)
    # uplift peaks near the trace, i.e. around lon 180 in the grid's own convention
    j, i = np.unravel_index(np.argmax(eta.values), eta.shape)
    assert 178.5 < lon[i] < 181.5 and -13.0 < lat[j] < -7.0


def test_values_given_explicitly_agree_with_metadata(tmp_path):
    """values='elevation' on a positive-up file is accepted and flips the sign (CF 1.8 section 4.3)."""
    from tsunamifocus.io.bathymetry import load_bathymetry

    p = _good_nc(tmp_path)
    d = load_bathymetry(p, values="elevation")
    raw = xr.open_dataset(p)["z"].values
    np.testing.assert_array_equal(d.values, -raw)
    assert math.isclose(float(d.max()), 4000.0)


def test_netcdf_across_antimeridian_in_signed_longitudes_is_unwrapped(tmp_path):
    """170..180, -175..-170 (a -180..180 file cut across the date line) loads as 170..190 E."""
    from tsunamifocus.io.bathymetry import load_bathymetry
    from tsunamifocus.grid import grid_info

    lon = np.array([170.0, 175.0, 180.0, -175.0, -170.0])
    lat = np.arange(-2.0, 2.01, 1.0)
    z = -1000.0 - (lon[None, :] % 360.0) - 0.01 * lat[:, None]  # encodes its own position
    xr.Dataset({"z": (("lat", "lon"), z, {"positive": "up"})}, coords={"lat": lat, "lon": lon}).to_netcdf(
        tmp_path / "dateline.nc"
    )
    d = load_bathymetry(tmp_path / "dateline.nc")
    np.testing.assert_array_equal(d.lon.values, [170.0, 175.0, 180.0, 185.0, 190.0])
    np.testing.assert_array_equal(d.values, 1000.0 + d.lon.values[None, :] + 0.01 * d.lat.values[:, None])
    assert not grid_info(d).periodic_x


def test_unreadable_grid_is_a_data_file_error(tmp_path, capsys, monkeypatch):
    """A grid the process may not read (EACCES) is a data-file error, exit 2, naming the file.

    Root reads any file whatever its mode, so the refusal of the operating system is imitated at
    the one place the loader opens the file (POSIX errno EACCES, "Permission denied")."""
    import builtins

    from tsunamifocus.io import bathymetry as B

    p = _good_tif(tmp_path)

    def no_access(path, *a, **k):
        if pathlib.Path(path) == p:
            raise PermissionError(13, "Permission denied", str(path))
        return builtins.open(path, *a, **k)

    monkeypatch.setattr(B, "open", no_access, raising=False)
    assert main(["inspect", str(p)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == [f"error: {p}: cannot read the grid file (Permission denied); expected a readable file"]
