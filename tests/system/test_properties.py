"""Property-based tests (hypothesis) of the parts whose inputs vary most in practice.

Bounded for CI: every test uses ``settings(max_examples=..., deadline=None)`` and small grids;
the file runs in well under 90 s on 2 shared cores (numba kernels are cached).

Properties and their outside references:
* scenario parser: any value of any TOML type in any key either parses or raises a one-line
  ScenarioError naming the key -- never another exception (project rule on bad input; TOML v1.0.0
  value types: string, integer, float incl. nan/inf, boolean, array, table);
* grid loader: for every valid registration and orientation (north-up / south-up GeoTIFF,
  ascending / descending NetCDF latitude, 0..360 / -180..180 longitudes, duplicated seam column)
  the loaded values sit at the coordinates they encode (GDAL data model: the geotransform maps
  pixel corners; CF conventions 1.8 section 4: coordinate variables give the data positions);
* ray engine: energy is never created (the weights are carried unchanged, and the energy map
  integrates to sum(weight x path length), its definition in the shared data contract); travel
  time never decreases along a ray (time is the integral of ds / c with c > 0); results do not
  depend on the order rays are given (each ray is an independent ODE solution);
* segment builder: segments partition the line (lengths add up to the line length, the union is
  the line, neighbours touch only at a point -- the definition of a partition of a curve).
"""

from __future__ import annotations

import math
import tempfile

import numpy as np
import pytest
import rasterio
import shapely
import xarray as xr
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from rasterio.transform import Affine
from shapely.geometry import LineString

from tsunamifocus.errors import ScenarioError
from tsunamifocus.grid import GridInfo, make_grid

FAST = settings(
    max_examples=40,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
)


def _code(x, y):
    """A value that encodes its own position: positive (sea), unique per cell, exact in float32."""
    return 1000.0 + 2.0 * np.round(np.asarray(x) * 8) / 8 + np.round(np.asarray(y) * 8) / 8 / 64.0


# ---------------------------------------------------------------------------------------------- scenario
_BASE = {
    "bathymetry": {"path": "grid.nc", "values": "elevation"},
    "source": [{"name": "s", "kind": "point", "lon": 10.0, "lat": 5.0}],
    "rays": {"count": 1000, "stop_depth_m": 20.0},
    "coast": {"segment_km": 10.0},
    "output": {"top_k": 5},
    "ensemble": {"members": 0},
}
_SECTION_KEYS = {
    "bathymetry": [
        "path",
        "variable",
        "values",
        "crop",
        "crop_margin_km",
        "resample_km",
        "smooth_km",
        "max_memory_gb",
        "resolution",
    ],
    "rays": ["count", "stop_depth_m", "max_time_h", "step_s", "seed", "rays"],
    "focusing": ["reference_smooth_km", "period_s", "period"],
    "coast": ["from", "layer", "name_field", "isobath_m", "segment_km", "min_rays", "segments"],
    "output": ["folder", "top_k", "figures", "report", "format"],
    "ensemble": ["members", "seed", "bathy_rms", "bathy_corr_km", "strike_deg", "scheduler", "member"],
    "source": ["name", "kind", "lon", "lat", "radius_km", "amplitude_m", "dip_deg", "magnitude", "force"],
}
toml_scalars = st.one_of(
    st.integers(-(2**63), 2**63 - 1),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.text(max_size=12),
)
toml_values = st.one_of(
    toml_scalars,
    st.lists(toml_scalars, max_size=4),
    st.dictionaries(st.text(max_size=5), toml_scalars, max_size=2),
)


@FAST
@given(section=st.sampled_from(sorted(_SECTION_KEYS)), data=st.data(), value=toml_values)
def test_scenario_any_value_parses_or_names_the_key(section, data, value):
    from tsunamifocus.io.scenario import scenario_from_dict

    key = data.draw(st.sampled_from(_SECTION_KEYS[section]))
    d = {k: (list(v) if isinstance(v, list) else dict(v)) for k, v in _BASE.items()}
    d["source"] = [dict(d["source"][0])]
    if section == "source":
        d["source"][0][key] = value
    else:
        d[section] = {**d.get(section, {}), key: value}
    with tempfile.TemporaryDirectory() as tmp:
        try:
            sc = scenario_from_dict(d, tmp, origin="fuzz.toml")
        except ScenarioError as exc:
            msg = str(exc)
            assert "\n" not in msg and msg.startswith("fuzz.toml")
            assert key in msg or section in msg, msg
            return
    # accepted: the value must have been a legal one and survive unchanged in the effective scenario
    out = sc.to_dict()
    got = out["source"][0] if section == "source" else out[section]
    if isinstance(value, (int, float)) and not isinstance(value, bool) and key in got:
        assert math.isfinite(float(value))
        assert got[key] == pytest.approx(value)


# ---------------------------------------------------------------------------------------------- grids
@FAST
@given(
    ny=st.integers(3, 9),
    nx=st.integers(3, 9),
    dx=st.sampled_from([250.0, 1000.0, 2500.0]),
    north_up=st.booleans(),
    point=st.booleans(),
    x0=st.integers(-50, 50),
    y0=st.integers(-50, 50),
)
def test_geotiff_any_orientation_round_trips(tmp_path_factory, ny, nx, dx, north_up, point, x0, y0):
    from tsunamifocus.io.bathymetry import load_bathymetry

    # cell-centre coordinates the file is meant to hold (projected metres)
    xc = 500_000.0 + x0 * dx + dx * np.arange(nx)
    yc = 4_000_000.0 + y0 * dx + dx * np.arange(ny)  # ascending
    vals = _code(xc[None, :] / dx, yc[:, None] / dx)
    if north_up:  # rows run north to south, geotransform e < 0
        t = Affine(dx, 0.0, xc[0] - dx / 2, 0.0, -dx, yc[-1] + dx / 2)
        arr = vals[::-1]
    else:  # south-up: rows run south to north, e > 0
        t = Affine(dx, 0.0, xc[0] - dx / 2, 0.0, dx, yc[0] - dx / 2)
        arr = vals
    p = tmp_path_factory.mktemp("tif") / "g.tif"
    with rasterio.open(
        p, "w", driver="GTiff", width=nx, height=ny, count=1, dtype="float32", crs="EPSG:32633", transform=t
    ) as dst:
        dst.write(arr.astype("float32"), 1)
        if point:  # pixel-is-point files: GDAL shifts the transform to corners on read (GDAL RFC 33)
            dst.update_tags(AREA_OR_POINT="Point")
    d = load_bathymetry(p, values="depth")
    info = GridInfo.from_dataarray(d)
    assert (info.ny, info.nx) == (ny, nx) and info.dx == pytest.approx(dx) and info.dy == pytest.approx(dx)
    np.testing.assert_allclose(d.x.values, xc, rtol=0, atol=1e-6 * dx)
    np.testing.assert_allclose(d.y.values, yc, rtol=0, atol=1e-6 * dx)
    # every value is found at the coordinates it encodes
    expect = _code(d.x.values[None, :] / dx, d.y.values[:, None] / dx).astype("float32")
    np.testing.assert_array_equal(d.values.astype("float32"), expect)


@FAST
@given(
    ny=st.integers(3, 10),
    dlon=st.sampled_from([0.5, 1.0, 2.0]),
    lat_desc=st.booleans(),
    lon_kind=st.sampled_from(["0..360", "-180..180", "regional", "global-seam", "global"]),
    lon_start=st.integers(0, 20),
    lat_start=st.integers(-40, 30),
)
def test_netcdf_any_orientation_round_trips(
    tmp_path_factory, ny, dlon, lat_desc, lon_kind, lon_start, lat_start
):
    from tsunamifocus.io.bathymetry import load_bathymetry

    if lon_kind in ("global", "global-seam"):
        lon = np.arange(0.0, 360.0 + (dlon if lon_kind == "global-seam" else 0.0) - 1e-9, dlon)
        if lon_kind == "global-seam":
            lon = np.append(np.arange(0.0, 360.0 - 1e-9, dlon), 360.0)
    elif lon_kind == "0..360":
        lon = 170.0 + lon_start + dlon * np.arange(8)  # may run past 180 in 0..360 numbers
    elif lon_kind == "-180..180":
        lon = -175.0 + lon_start + dlon * np.arange(8)
    else:
        lon = 10.0 + lon_start + dlon * np.arange(8)
    lat = lat_start + dlon * np.arange(ny)
    assume(lat[-1] <= 90.0)
    z = _code(lon[None, :] % 360.0, lat[:, None])
    if lon_kind == "global-seam":
        z[:, -1] = z[:, 0]  # the seam column repeats the first meridian
    file_lat = lat[::-1] if lat_desc else lat
    file_z = z[::-1] if lat_desc else z
    p = tmp_path_factory.mktemp("nc") / "g.nc"
    xr.Dataset(
        {"depth": (("lat", "lon"), file_z, {"positive": "down", "units": "m"})},
        coords={
            "lat": ("lat", file_lat, {"units": "degrees_north"}),
            "lon": ("lon", lon, {"units": "degrees_east"}),
        },
    ).to_netcdf(p)
    d = load_bathymetry(p)
    info = GridInfo.from_dataarray(d)
    assert np.all(np.diff(d.lat.values) > 0)  # grid convention: ascending
    assert info.periodic_x == (lon_kind in ("global", "global-seam"))
    kept = lon[:-1] if lon_kind == "global-seam" else lon  # duplicated seam column dropped
    np.testing.assert_allclose(d.lon.values, kept, atol=1e-9)
    np.testing.assert_allclose(d.lat.values, lat, atol=1e-9)
    expect = _code(d.lon.values[None, :] % 360.0, d.lat.values[:, None])
    np.testing.assert_array_equal(d.values, expect)


# ---------------------------------------------------------------------------------------------- rays
@pytest.fixture(scope="module")
def rough_sea():
    """120 x 160 km of 3-4.5 km deep sea with smooth random relief, land strip in the east."""
    from tsunamifocus.ocean.randomfield import gaussian_random_field

    ny, nx, dx = 60, 80, 2000.0
    h = 3800.0 + gaussian_random_field((ny, nx), dx, 15_000.0, rms=300.0, seed=3)
    h[:, -8:] = np.linspace(200.0, -100.0, 8)[None, :]
    x = 400_000.0 + dx * np.arange(nx)
    y = 4_400_000.0 + dx * np.arange(ny)
    return make_grid(h, x, y, "EPSG:32633")


launches = st.lists(
    st.tuples(st.floats(0.1, 0.8), st.floats(0.1, 0.9), st.floats(0.0, 360.0), st.floats(0.01, 10.0)),
    min_size=2,
    max_size=40,
)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rays=launches, seed=st.integers(0, 2**32 - 1))
def test_ray_invariants(rough_sea, rays, seed):
    from tsunamifocus.propagation.rays import trace_rays

    info = GridInfo.from_dataarray(rough_sea)
    b = info.bounds
    fx, fy, az, w = (np.array(c, dtype=float) for c in zip(*rays, strict=True))
    x0 = b[0] + fx * (b[2] - b[0])
    y0 = b[1] + fy * (b[3] - b[1])
    kw = dict(weights=w, stop_depth_m=50.0, max_time_s=4 * 3600.0, keep_paths=len(w), threads=1)
    res = trace_rays(rough_sea, x0, y0, az, **kw)
    end = res.end
    # energy never created: each ray keeps its weight; the budget over end reasons closes
    np.testing.assert_array_equal(end["weight"].values, w)
    by_reason = sum(
        float(end["weight"].values[end["reason"].values == c].sum()) for c in np.unique(end["reason"])
    )
    assert by_reason == pytest.approx(w.sum(), rel=1e-12)
    # the energy map integrates to sum(weight x path length) (its definition); never more
    area = info.cell_area_m2()
    deposited = float(np.sum(np.nan_to_num(res.energy.values) * area))
    carried = float(np.sum(w * end["path_length_m"].values))
    assert deposited <= carried * (1 + 1e-9)
    assert deposited == pytest.approx(carried, rel=1e-9)  # measured: equal to round-off (~1e-16)
    # travel time never decreases along a ray, and starts at 0
    t = res.paths["time_s"].values
    for k in range(t.shape[0]):
        tk = t[k][np.isfinite(t[k])]
        assert tk[0] == 0.0 and np.all(np.diff(tk) >= 0.0)
        assert tk[-1] <= end["time_s"].values[int(res.paths["ray"].values[k])] + 1e-9
    assert np.all(end["time_s"].values >= 0) and np.all(end["path_length_m"].values >= 0)
    # order independence: a permutation of the inputs permutes the end states exactly
    perm = np.random.default_rng(seed).permutation(len(w))
    res2 = trace_rays(rough_sea, x0[perm], y0[perm], az[perm], **{**kw, "weights": w[perm], "keep_paths": 0})
    for v in ("x", "y", "time_s", "azimuth_deg", "q", "p", "caustics", "reason", "path_length_m", "weight"):
        np.testing.assert_array_equal(res2.end[v].values, end[v].values[perm], err_msg=v)
    np.testing.assert_allclose(res2.energy.values, res.energy.values, rtol=1e-12, atol=0)
    np.testing.assert_array_equal(res2.first_arrival_s.values, res.first_arrival_s.values)


# ---------------------------------------------------------------------------------------------- coast
@st.composite
def polylines(draw):
    n = draw(st.integers(2, 25))
    steps = draw(
        st.lists(st.tuples(st.floats(500.0, 9000.0), st.floats(-1.2, 1.2)), min_size=n - 1, max_size=n - 1)
    )
    x, y, heading = 440_000.0, 4_420_000.0, 0.0
    pts = [(x, y)]
    for length, turn in steps:
        heading += turn
        x += length * math.sin(heading)
        y += length * math.cos(heading)
        pts.append((x, y))
    return LineString(pts)


@FAST
@given(line=polylines(), frac=st.floats(0.02, 1.0))
def test_segments_partition_the_coastline(rough_sea, line, frac):
    from tsunamifocus.coast.coastline import line_length_m
    from tsunamifocus.coast.segments import segment_coastline

    info = GridInfo.from_dataarray(rough_sea)
    L = line_length_m(line, info)
    assume(L > 0)
    seg_len = max(2000.0, frac * L)
    assume(seg_len <= L)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        seg = segment_coastline([line], seg_len, rough_sea)
    # n = max(1, round(L / seg_len)) equal pieces (coast.py docstring); at an exact half either is fine
    assert abs(len(seg) - L / seg_len) <= 0.5 + 1e-9 and len(seg) >= 1
    np.testing.assert_allclose(seg["length_m"], L / len(seg), rtol=1e-9)
    assert seg["length_m"].sum() == pytest.approx(L, rel=1e-9)
    geoms = list(seg["geometry"])
    assert sum(g.length for g in geoms) == pytest.approx(line.length, rel=1e-9)  # plane: length = length
    # covered: points all along the line lie on some segment; and the segments lie on the line
    # (sampled distances, robust also for self-crossing random walks where tiny buffers fail)
    union = shapely.MultiLineString(geoms)
    on_line = shapely.line_interpolate_point(line, np.linspace(0.0, 1.0, 401), normalized=True)
    assert float(np.max(shapely.distance(on_line, union))) < 1e-6
    for g in geoms:
        pts = shapely.line_interpolate_point(g, np.linspace(0.0, 1.0, 21), normalized=True)
        assert float(np.max(shapely.distance(pts, line))) < 1e-6
    for a, b in zip(geoms[:-1], geoms[1:], strict=True):
        assert a.intersection(b).length < 1e-9 * L  # neighbours meet in a point, no overlap
        assert a.coords[-1] == pytest.approx(b.coords[0])
    assert seg["segment_id"].is_unique
