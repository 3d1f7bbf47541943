"""The coast of interest: a lon/lat box (and optionally polygons) that segments are restricted to.

Rays always travel the whole grid; only the segments, the rankings and the summaries are
restricted to the region. Longitudes may be given in -180..180 or 0..360 numbers; a box whose
``lon_min`` is east of ``lon_max`` (after bringing both into one turn) crosses the antimeridian,
e.g. ``(170, -50, -170, -30)`` spans 20 degrees of longitude around 180.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from pyproj import CRS, Transformer

from ..errors import CoastError
from ..grid import GridInfo

__all__ = ["CoastRegion", "lon_in_range", "region_from_config"]


def lon_in_range(lon: np.ndarray | float, lon_min: float, lon_max: float) -> np.ndarray:
    """True where longitudes lie in the eastward arc from ``lon_min`` to ``lon_max`` [degrees].

    Any longitude numbers work (-180..180, 0..360, beyond); ``lon_max - lon_min == 360`` is the
    whole circle, and ``lon_min`` east of ``lon_max`` is an arc across the antimeridian.
    """
    lon = np.asarray(lon, dtype=float)
    width = lon_max - lon_min
    if width >= 360.0 or (width <= -360.0):
        return np.isfinite(lon)
    width = width % 360.0
    return np.mod(lon - lon_min, 360.0) <= width


@dataclass(frozen=True)
class CoastRegion:
    """A coast of interest: a lon/lat box, optionally intersected with polygons (lon/lat).

    Attributes
    ----------
    box : (lon_min, lat_min, lon_max, lat_max) or None
        Degrees; None means every longitude and latitude.
    polygons : shapely geometry or None
        Polygons in lon/lat degrees (WGS84); a point counts as inside if it is inside at its
        longitude or at that longitude +/- 360 degrees.
    """

    box: tuple[float, float, float, float] | None = None
    polygons: object | None = None

    @property
    def is_everything(self) -> bool:
        """True when the region restricts nothing."""
        return self.box is None and self.polygons is None

    def describe(self) -> str:
        """One-line description for summaries, e.g. ``"lon -125..-117, lat 32..49"``."""
        parts = []
        if self.box is not None:
            a, b, c, d = self.box
            parts.append(f"lon {_deg(a)}..{_deg(c)}, lat {_deg(b)}..{_deg(d)}")
        if self.polygons is not None:
            parts.append("inside the region polygons")
        return "; ".join(parts) if parts else "the whole grid"

    def contains_lonlat(self, lon: np.ndarray | float, lat: np.ndarray | float) -> np.ndarray:
        """True where points (degrees) lie in the region (box edges included)."""
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        ok = np.isfinite(lon) & np.isfinite(lat)
        if self.box is not None:
            a, b, c, d = self.box
            ok &= lon_in_range(lon, a, c) & (lat >= b) & (lat <= d)
        if self.polygons is not None and ok.any():
            prep = self.polygons
            shapely.prepare(prep)
            inside = np.zeros(lon.shape, dtype=bool)
            base = ((lon + 180.0) % 360.0) - 180.0
            for shift in (0.0, 360.0, -360.0):
                inside |= shapely.contains_xy(prep, base + shift, lat)
            ok &= inside
        return ok

    def contains_grid_xy(self, info: GridInfo, x: np.ndarray | float, y: np.ndarray | float) -> np.ndarray:
        """True where points in the grid CRS lie in the region."""
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        if self.is_everything:
            return np.isfinite(x) & np.isfinite(y)
        if info.geographic:
            return self.contains_lonlat(x, y)
        tr = Transformer.from_crs(info.crs, CRS.from_epsg(4326), always_xy=True)
        lon, lat = tr.transform(x, y)
        return self.contains_lonlat(lon, lat)


def _deg(v: float) -> str:
    return f"{v:g}"


def region_from_config(box, polygon_file=None) -> CoastRegion:
    """Build a :class:`CoastRegion` from the scenario's ``region`` box and polygon geometry.

    Parameters
    ----------
    box : sequence of 4 floats or None
        ``(lon_min, lat_min, lon_max, lat_max)`` [degrees].
    polygon_file : shapely geometry or None
        Polygons already read (lon/lat degrees), see :func:`tsunamifocus.io.coastline.read_region_polygons`.
    """
    if box is not None:
        a, b, c, d = (float(v) for v in box)
        if not (-90.0 <= b < d <= 90.0) or not all(math.isfinite(v) for v in (a, c)):
            raise CoastError(f"coast region {list(box)}: expected [lon_min, lat_min, lon_max, lat_max] in "
                             "degrees with lat_min < lat_max")
        box = (a, b, c, d)
    return CoastRegion(box=box, polygons=polygon_file)
