"""Grid conventions shared by every stage: CRS attachment, geometry and spacing.

The package works on 2-D :class:`xarray.DataArray` grids laid out as follows
(the "tsunamifocus grid convention"):

* dims ``("y", "x")`` on a projected CRS (metres) or ``("lat", "lon")`` on a
  geographic CRS (degrees);
* both coordinates strictly ascending and regularly spaced; coordinate values are
  the positions the data values refer to (cell centres for pixel-is-area grids,
  nodes for pixel-is-point grids — never shifted by half a cell);
* the CRS stored CF-style: a scalar coordinate ``spatial_ref`` whose attributes hold
  ``crs_wkt`` (WKT2) and ``spatial_ref``; the variable's ``grid_mapping`` attribute
  names it;
* on a global geographic grid the duplicated seam column is dropped and the
  attribute ``lon_periodic = 1`` marks that longitude wraps around.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import xarray as xr
from pyproj import CRS

from .constants import EARTH_RADIUS_M
from .errors import CRSError, InputError

__all__ = ['GridInfo', 'MAX_REFINE_FACTOR', 'attach_crs', 'get_crs', 'make_grid', 'grid_info', 'crop_bathymetry', 'refine_grid',
           'resample_bathymetry']

_REL_TOL = 1e-6


def attach_crs(da: xr.DataArray, crs: CRS | str | int) -> xr.DataArray:
    """Return ``da`` with ``crs`` attached as a CF ``spatial_ref`` grid-mapping coordinate.

    Parameters
    ----------
    da : xarray.DataArray
        Any DataArray.
    crs : pyproj.CRS, str or int
        Anything :meth:`pyproj.CRS.from_user_input` accepts (e.g. ``"EPSG:4326"``).

    Returns
    -------
    xarray.DataArray
        A copy carrying a scalar ``spatial_ref`` coordinate and ``grid_mapping`` attribute.
    """
    crs = CRS.from_user_input(crs)
    wkt = crs.to_wkt()
    attrs = dict(crs.to_cf())
    attrs["crs_wkt"] = wkt
    attrs["spatial_ref"] = wkt
    out = da.assign_coords(spatial_ref=xr.DataArray(np.int32(0), attrs=attrs))
    out.attrs["grid_mapping"] = "spatial_ref"
    return out


def get_crs(obj: xr.DataArray | xr.Dataset) -> CRS:
    """Return the CRS attached to a grid by :func:`attach_crs`.

    Raises
    ------
    CRSError
        If the object carries no ``spatial_ref`` coordinate with ``crs_wkt``.
    """
    name = obj.attrs.get("grid_mapping", "spatial_ref")
    if name not in obj.coords:
        name = obj.encoding.get("grid_mapping", "spatial_ref")
    if name in obj.coords and "crs_wkt" in obj.coords[name].attrs:
        return CRS.from_wkt(obj.coords[name].attrs["crs_wkt"])
    if name in obj.coords and "spatial_ref" in obj.coords[name].attrs:
        return CRS.from_wkt(obj.coords[name].attrs["spatial_ref"])
    raise CRSError("grid has no CRS: expected a 'spatial_ref' coordinate with a 'crs_wkt' attribute")


def make_grid(
    values: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    crs: CRS | str | int,
    *,
    name: str = "depth",
    attrs: dict | None = None,
    lon_periodic: bool | None = None,
) -> xr.DataArray:
    """Build a grid DataArray following the tsunamifocus grid convention.

    Parameters
    ----------
    values : numpy.ndarray
        2-D array of shape ``(len(y), len(x))``.
    x, y : numpy.ndarray
        Strictly ascending, regularly spaced coordinates (metres or degrees).
    crs : pyproj.CRS, str or int
        Coordinate reference system of ``x`` and ``y``.
    name : str
        Variable name.
    attrs : dict, optional
        Extra attributes.
    lon_periodic : bool, optional
        Mark a geographic grid as wrapping in longitude. Decided from the extent when None.

    Returns
    -------
    xarray.DataArray
    """
    crs = CRS.from_user_input(crs)
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    geographic = crs.is_geographic
    xd, yd = ("lon", "lat") if geographic else ("x", "y")
    da = xr.DataArray(np.asarray(values), dims=(yd, xd), coords={yd: y, xd: x}, name=name)
    if attrs:
        da.attrs.update(attrs)
    if geographic:
        da[xd].attrs.update(units="degrees_east", standard_name="longitude", long_name="longitude")
        da[yd].attrs.update(units="degrees_north", standard_name="latitude", long_name="latitude")
        if lon_periodic is None:
            lon_periodic = len(x) > 1 and abs((x[1] - x[0]) * len(x) - 360.0) < 1e-6 * 360.0
        da.attrs["lon_periodic"] = int(bool(lon_periodic))
    else:
        da[xd].attrs.update(units="m", standard_name="projection_x_coordinate", long_name="easting")
        da[yd].attrs.update(units="m", standard_name="projection_y_coordinate", long_name="northing")
    return attach_crs(da, crs)


@dataclass(frozen=True)
class GridInfo:
    """Geometry of a regular grid following the tsunamifocus grid convention.

    Attributes
    ----------
    geographic : bool
        True for lon/lat degrees on a sphere, False for a projected plane in metres.
    x0, y0 : float
        Coordinate of the first column / row (degrees or metres).
    dx, dy : float
        Positive spacing (degrees or metres).
    nx, ny : int
        Number of columns and rows.
    periodic_x : bool
        True when longitude wraps (a global grid with ``nx * dx == 360``).
    crs_wkt : str
        WKT2 of the CRS.
    radius_m : float
        Sphere radius used for geographic grids [m].
    """

    geographic: bool
    x0: float
    y0: float
    dx: float
    dy: float
    nx: int
    ny: int
    periodic_x: bool
    crs_wkt: str
    radius_m: float = EARTH_RADIUS_M

    @classmethod
    def from_dataarray(cls, da: xr.DataArray) -> GridInfo:
        """Read the geometry of a grid DataArray, checking the convention.

        Raises
        ------
        InputError
            If the grid is not 2-D, not ascending or not regularly spaced.
        CRSError
            If no CRS is attached.
        """
        if da.ndim != 2:
            raise InputError(f"grid '{da.name}' must be 2-D, got dims {da.dims}")
        crs = get_crs(da)
        yd, xd = da.dims
        expected = ("lat", "lon") if crs.is_geographic else ("y", "x")
        if (yd, xd) != expected:
            raise InputError(f"grid '{da.name}' has dims {da.dims}; expected {expected} for its CRS")
        x = np.asarray(da[xd].values, dtype=float)
        y = np.asarray(da[yd].values, dtype=float)
        for name, c in ((xd, x), (yd, y)):
            if c.size < 2:
                raise InputError(f"grid '{da.name}': coordinate '{name}' needs at least 2 values")
            bad = np.flatnonzero(~np.isfinite(c))
            if bad.size:  # NaN compares false, so the ordering checks below would let it through
                raise InputError(f"grid '{da.name}': coordinate '{name}' holds {bad.size} non-finite value(s) "
                                 f"(first {c[bad[0]]} at index {bad[0]}); expected finite coordinates")
            d = np.diff(c)
            if np.any(d <= 0):
                raise InputError(f"grid '{da.name}': coordinate '{name}' must be strictly ascending")
            if np.max(np.abs(d - d.mean())) > _REL_TOL * abs(d.mean()) + 1e-9:
                raise InputError(f"grid '{da.name}': coordinate '{name}' is not regularly spaced")
        dx = float((x[-1] - x[0]) / (x.size - 1))
        dy = float((y[-1] - y[0]) / (y.size - 1))
        periodic = bool(da.attrs.get("lon_periodic", 0)) and crs.is_geographic
        return cls(
            geographic=crs.is_geographic,
            x0=float(x[0]),
            y0=float(y[0]),
            dx=dx,
            dy=dy,
            nx=int(x.size),
            ny=int(y.size),
            periodic_x=periodic,
            crs_wkt=crs.to_wkt(),
        )

    @cached_property
    def crs(self) -> CRS:
        """The grid's :class:`pyproj.CRS`."""
        return CRS.from_wkt(self.crs_wkt)

    @property
    def dims(self) -> tuple[str, str]:
        """Dimension names ``(ydim, xdim)``."""
        return ("lat", "lon") if self.geographic else ("y", "x")

    @property
    def x(self) -> np.ndarray:
        """Column coordinates."""
        return self.x0 + self.dx * np.arange(self.nx)

    @property
    def y(self) -> np.ndarray:
        """Row coordinates."""
        return self.y0 + self.dy * np.arange(self.ny)

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """Outer edges ``(xmin, ymin, xmax, ymax)`` of the cells (half a cell beyond the centres)."""
        return (
            self.x0 - 0.5 * self.dx,
            self.y0 - 0.5 * self.dy,
            self.x0 + (self.nx - 0.5) * self.dx,
            self.y0 + (self.ny - 0.5) * self.dy,
        )

    def spacing_m(self) -> tuple[float, float]:
        """Cell size in metres ``(dx_m, dy_m)``; on lon/lat, dx at the grid's mid latitude."""
        if not self.geographic:
            return self.dx, self.dy
        lat_mid = self.y0 + 0.5 * (self.ny - 1) * self.dy
        k = math.pi / 180.0 * self.radius_m
        return self.dx * k * math.cos(math.radians(lat_mid)), self.dy * k

    def min_spacing_m(self) -> float:
        """Smallest cell side in metres anywhere on the grid (polar rows excluded below 1 m)."""
        if not self.geographic:
            return min(self.dx, self.dy)
        k = math.pi / 180.0 * self.radius_m
        coslat = np.cos(np.radians(np.clip(self.y, -89.999, 89.999)))
        return float(min(self.dy * k, max(self.dx * k * coslat.min(), 1.0)))

    def cell_area_m2(self) -> np.ndarray:
        """Cell areas in m^2 as an array of shape ``(ny, 1)`` (geographic) or ``(1, 1)``."""
        if not self.geographic:
            return np.full((1, 1), self.dx * self.dy)
        r = self.radius_m
        lat = np.radians(self.y)
        half = math.radians(self.dy) / 2.0
        band = np.sin(np.clip(lat + half, -np.pi / 2, np.pi / 2)) - np.sin(
            np.clip(lat - half, -np.pi / 2, np.pi / 2)
        )
        return (r * r * math.radians(self.dx) * band)[:, None]

    def index_of(self, x: np.ndarray | float, y: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        """Fractional (column, row) index of points; longitudes wrapped onto the grid if periodic."""
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        if self.geographic:
            x = self.wrap_lon(x)
        return (x - self.x0) / self.dx, (y - self.y0) / self.dy

    def wrap_lon(self, lon: np.ndarray | float) -> np.ndarray:
        """Bring longitudes into the grid's longitude range ``[x0 - dx/2, x0 - dx/2 + 360)``."""
        lon = np.asarray(lon, dtype=float)
        if not self.geographic:
            return lon
        lo = self.x0 - 0.5 * self.dx
        wrapped = lo + np.mod(lon - lo, 360.0)
        if self.periodic_x:
            return wrapped
        # non-global grid: wrap only if that brings the point inside the grid
        hi = self.bounds[2]
        return np.where((wrapped <= hi) | (lon > hi) | (lon < lo), np.where(wrapped <= hi, wrapped, lon), lon)

    def contains(self, x: np.ndarray | float, y: np.ndarray | float) -> np.ndarray:
        """True where points lie inside the grid's outer cell edges."""
        fi, fj = self.index_of(x, y)
        inside_y = (fj >= -0.5) & (fj <= self.ny - 0.5)
        if self.periodic_x:
            return inside_y
        return inside_y & (fi >= -0.5) & (fi <= self.nx - 0.5)


def grid_info(da: xr.DataArray) -> GridInfo:
    """Shorthand for :meth:`GridInfo.from_dataarray`."""
    return GridInfo.from_dataarray(da)


# --------------------------------------------------------------------------------------
# crop, resample, smooth (pure functions on DataArrays)
# --------------------------------------------------------------------------------------
def check_bbox(
    bbox: tuple[float, float, float, float], geographic: bool
) -> tuple[float, float, float, float]:
    """Validate a box ``(xmin, ymin, xmax, ymax)``; return it with ascending x.

    On geographic grids a box written in -180..180 numbers across the antimeridian, i.e.
    ``0 <= xmin <= 180`` and ``-180 <= xmax < 0`` (``(120, 0, -110, 65)``), means
    ``xmin .. xmax + 360`` (120..250 E). Any other ``xmin >= xmax`` or ``ymin >= ymax`` is
    refused with a one-line message.
    """
    xmin, ymin, xmax, ymax = (float(b) for b in bbox)
    shown = "(" + ", ".join(f"{b:g}" for b in (xmin, ymin, xmax, ymax)) + ")"
    if not ymax > ymin:
        raise InputError(f"bbox {shown}: expected ymin < ymax")
    crossing = 0.0 <= xmin <= 180.0 and -180.0 <= xmax < 0.0
    if not xmax > xmin:
        if crossing and geographic:
            return xmin, ymin, xmax + 360.0, ymax
        if crossing:
            raise InputError(
                f"bbox {shown}: xmin > xmax; a box across the antimeridian ({xmin:g} .. {xmax + 360.0:g} E) "
                "needs a lon/lat grid, and this grid is projected: give xmin < xmax in its units"
            )
        raise InputError(
            f"bbox {shown}: expected xmin < xmax and ymin < ymax (a box across the antimeridian is "
            f"written xmin 0..180, xmax -180..0, e.g. (120, 0, -110, 65) for 120..250 E)"
        )
    return xmin, ymin, xmax, ymax


def crop_bathymetry(
    depth: xr.DataArray, bbox: tuple[float, float, float, float], *, margin_km: float = 0.0
) -> xr.DataArray:
    """Crop a grid to ``bbox`` plus a margin.

    Parameters
    ----------
    depth : xarray.DataArray
        Grid in the tsunamifocus convention.
    bbox : (xmin, ymin, xmax, ymax)
        Box in the grid CRS units; on geographic grids longitudes may be given in either
        -180..180 or 0..360, and a box across the grid's seam is handled on global grids.
        A box across the antimeridian may also be written with ``xmin > xmax`` in -180..180
        numbers: ``(120, 0, -110, 65)`` means 120..250 E (see :func:`check_bbox`).
    margin_km : float
        Margin around the box [km] (converted to degrees at the box's poleward edge).

    Returns
    -------
    xarray.DataArray
        The cropped grid (never empty).
    """
    info = GridInfo.from_dataarray(depth)
    xmin, ymin, xmax, ymax = check_bbox(bbox, info.geographic)
    if margin_km < 0:
        raise InputError(f"margin_km={margin_km}: expected >= 0 km")
    yd, xd = info.dims
    if info.geographic:
        km_per_deg = math.pi / 180 * EARTH_RADIUS_M / 1000
        mlat = margin_km / km_per_deg
        lat_edge = min(89.0, max(abs(ymin), abs(ymax)) + mlat)
        mlon = margin_km / (km_per_deg * math.cos(math.radians(lat_edge)))
        ymin, ymax, xmin, xmax = ymin - mlat, ymax + mlat, xmin - mlon, xmax + mlon
        if info.periodic_x and xmax - xmin >= 360:
            out = depth.sel({yd: slice(ymin, ymax)})
        elif info.periodic_x:
            # roll the global grid so the box is contiguous
            lo = info.x0 - 0.5 * info.dx
            start = lo + np.mod(xmin - lo, 360.0)
            shift = int(np.floor((start - info.x0) / info.dx))
            rolled = depth.roll({xd: -shift}, roll_coords=True)
            lon = rolled[xd].values.copy()
            lon[lon < lon[0]] += 360.0
            rolled = rolled.assign_coords({xd: lon})
            xmin2 = start
            xmax2 = start + (xmax - xmin)
            out = rolled.sel({yd: slice(ymin, ymax), xd: slice(xmin2, xmax2)})
            # express longitudes in -180..180 when that keeps them monotonic and the box asked for it
            lonv = out[xd].values
            if bbox[0] < 0 and lonv.max() > 180:
                out = out.assign_coords({xd: lonv - 360.0})
            out.attrs["lon_periodic"] = 0
        else:
            xs = info.wrap_lon(np.array([xmin, xmax]))
            out = depth.sel({yd: slice(ymin, ymax), xd: slice(float(xs[0]), float(xs[1]))})
    else:
        m = margin_km * 1000.0
        out = depth.sel({yd: slice(ymin - m, ymax + m), xd: slice(xmin - m, xmax + m)})
    if out.sizes[xd] < 2 or out.sizes[yd] < 2:
        raise InputError(f"bbox {bbox} (margin {margin_km} km) does not overlap the grid {info.bounds}")
    out.attrs = {**depth.attrs, **{k: v for k, v in out.attrs.items() if k == "lon_periodic"}}
    if info.geographic and out.sizes[xd] < info.nx:
        out.attrs["lon_periodic"] = 0
    return out


def resample_bathymetry(depth: xr.DataArray, spacing_km: float, *, min_valid: float = 0.5) -> xr.DataArray:
    """Downsample by area-averaging integer blocks of cells.

    The block factor is ``round(spacing_km / dy_km)`` (the north-south spacing in km on
    lon/lat grids), applied to both axes. A block needs at least ``min_valid`` of its cells
    finite to get a value (the mean of those); otherwise it is NaN. Trailing rows/columns
    that do not fill a block are dropped.

    Parameters
    ----------
    depth : xarray.DataArray
        Grid in the tsunamifocus convention.
    spacing_km : float
        Target spacing [km]; must be at least the current spacing.
    min_valid : float
        Fraction of finite cells a block needs.

    Returns
    -------
    xarray.DataArray
    """
    info = GridInfo.from_dataarray(depth)
    dxm, dym = info.spacing_m()
    if not spacing_km > 0:
        raise InputError(f"resample spacing {spacing_km} km: expected > 0")
    f = int(round(spacing_km * 1000.0 / dym))
    if f < 1:
        raise InputError(
            f"resample spacing {spacing_km} km is finer than the grid ({dym / 1000:.3f} km); "
            "only downsampling is supported"
        )
    if f == 1:
        return depth
    ny, nx = (info.ny // f) * f, (info.nx // f) * f
    if ny < f * 2 or nx < f * 2:
        raise InputError(f"resample spacing {spacing_km} km leaves fewer than 2 x 2 cells")
    v = depth.values[:ny, :nx].reshape(ny // f, f, nx // f, f)
    valid = np.isfinite(v)
    cnt = valid.sum(axis=(1, 3))
    s = np.where(valid, v, 0.0).sum(axis=(1, 3))
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cnt >= min_valid * f * f, s / np.maximum(cnt, 1), np.nan)
    x = info.x[:nx].reshape(-1, f).mean(axis=1)
    y = info.y[:ny].reshape(-1, f).mean(axis=1)
    periodic = info.periodic_x and nx == info.nx
    out = make_grid(mean, x, y, info.crs, name=depth.name or "depth", attrs=dict(depth.attrs), lon_periodic=periodic)
    out.attrs["lon_periodic"] = int(periodic) if info.geographic else out.attrs.get("lon_periodic", 0)
    if not info.geographic:
        out.attrs.pop("lon_periodic", None)
    return out


#: Largest refinement factor of :func:`refine_grid` (each factor multiplies the cells by its square).
MAX_REFINE_FACTOR = 8


def _linear_weights(n: int, factor: int, periodic: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Left index, right index and right weight of each fine cell along one axis of ``n`` cells."""
    # fine cell k of coarse cell i sits at fractional coarse index i + (k + 0.5) / factor - 0.5
    pos = (np.arange(n)[:, None] + (np.arange(factor) + 0.5)[None, :] / factor - 0.5).ravel()
    i0 = np.floor(pos).astype(np.int64)
    t = pos - i0
    if periodic:
        return np.mod(i0, n), np.mod(i0 + 1, n), t
    # beyond the first and last centres: the edge value (no extrapolation past the data)
    lo = i0 < 0
    hi = i0 >= n - 1
    i0 = np.clip(i0, 0, n - 1)
    i1 = np.clip(i0 + 1, 0, n - 1)
    t = np.where(lo | hi, 0.0, t)
    return i0, i1, t


def refine_grid(da: xr.DataArray, factor: int) -> xr.DataArray:
    """Bilinear interpolation onto a grid ``factor`` times finer along both axes.

    Each cell is cut into ``factor x factor`` cells whose centres subdivide it evenly; values
    are bilinear between the four surrounding coarse centres (the edge value within half a
    coarse cell of the outer edges; across the seam of a longitude-periodic grid, which stays
    periodic). A linear field is reproduced exactly. NaN spreads to every fine cell whose
    interpolation touches it. Used to resolve a wave on the same sea floor with more cells per
    wavelength (the wave check's ``refine``), not to add detail: no feature finer than the
    input appears.

    Parameters
    ----------
    da : xarray.DataArray
        Grid in the tsunamifocus convention.
    factor : int
        Refinement factor, 1 (the grid itself) to :data:`MAX_REFINE_FACTOR`.

    Returns
    -------
    xarray.DataArray
        The finer grid, with the attributes and CRS of ``da``.

    Raises
    ------
    InputError
        If ``factor`` is not an integer in range.
    """
    if isinstance(factor, bool) or not isinstance(factor, (int, np.integer)) or not 1 <= factor <= MAX_REFINE_FACTOR:
        raise InputError(f"refine factor {factor!r}: expected an integer from 1 to {MAX_REFINE_FACTOR}")
    if factor == 1:
        return da
    info = GridInfo.from_dataarray(da)
    v = np.asarray(da.values, dtype=float)
    i0, i1, t = _linear_weights(info.nx, factor, info.periodic_x)
    v = v[:, i0] * (1.0 - t) + v[:, i1] * t
    j0, j1, s = _linear_weights(info.ny, factor, False)
    v = v[j0, :] * (1.0 - s)[:, None] + v[j1, :] * s[:, None]
    off = (np.arange(factor) + 0.5) / factor - 0.5
    x = (info.x[:, None] + off[None, :] * info.dx).ravel()
    y = (info.y[:, None] + off[None, :] * info.dy).ravel()
    out = make_grid(v, x, y, info.crs, name=da.name or "depth", attrs=dict(da.attrs),
                    lon_periodic=info.periodic_x if info.geographic else None)
    if not info.geographic:
        out.attrs.pop("lon_periodic", None)
    return out
