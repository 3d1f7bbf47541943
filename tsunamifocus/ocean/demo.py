"""The invented demo region: the Meridane coast.

Everything here is made up and generated deterministically by code: an ocean basin west of
an invented coastline with a trench, an abyssal plain at 4-5 km, a seamount chain (the
Orrin Seamounts), a ridge (Tallis Rise), a continental slope and shelf cut by a submarine
canyon (Vell Canyon), bays and headlands, and smooth Gaussian-correlated random depth
fluctuations of a few percent with a correlation length of tens of km - the ingredient of
branched flow. No real place is depicted.

The grid sits on a local transverse Mercator projection centred on an arbitrary point of
open ocean (so that coordinates are valid on Earth); the names are fictional.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr
from pyproj import CRS, Transformer

from ..errors import InputError
from ..grid import make_grid
from .randomfield import gaussian_random_field

__all__ = ['DemoRegion', 'DEMO_CRS', 'DEMO_PLACES', 'make_demo_bathymetry', 'demo_to_lonlat']

#: Local transverse Mercator of the demo region (metres), centred in open ocean.
def _demo_crs() -> str:
    d = CRS.from_proj4("+proj=tmerc +lat_0=-32 +lon_0=-128 +k=1 +x_0=0 +y_0=0 +ellps=WGS84 +units=m +no_defs")
    j = d.to_json_dict()
    j["name"] = "Meridane local transverse Mercator (invented demo region)"
    return CRS.from_json_dict(j).to_wkt()


DEMO_CRS = _demo_crs()

#: Invented harbours and gauges of the Meridane coast: name -> (x_km, y_km) in DEMO_CRS.
DEMO_PLACES: dict[str, tuple[float, float]] = {
    "Port Aldwyn harbour entrance": (648.0, 130.0),
    "Saltmere gauge": (640.0, 300.0),
    "Corran Head": (625.0, 420.0),
    "Fenwick Bay marina": (668.0, 510.0),
}


@dataclass(frozen=True)
class DemoRegion:
    """Parameters of the invented Meridane coast (lengths in km, depths in m)."""

    width_km: float = 760.0
    height_km: float = 640.0
    spacing_km: float = 2.0
    abyssal_depth_m: float = 4600.0
    trench_x_km: float = 110.0
    trench_depth_m: float = 6800.0
    slope_start_km: float = 470.0
    shelf_break_km: float = 565.0
    shelf_depth_m: float = 160.0
    coast_x_km: float = 650.0
    fluct_rms: float = 0.04
    fluct_corr_km: float = 22.0
    seed: int = 20261201


def _coast_position(y_km: np.ndarray, r: DemoRegion) -> np.ndarray:
    """x of the shoreline [km] as a function of y: headlands and bays."""
    y = y_km
    c = r.coast_x_km + 14.0 * np.sin(2 * np.pi * y / 210.0) + 6.0 * np.sin(2 * np.pi * y / 67.0 + 1.0)
    c += 26.0 * np.exp(-(((y - 510.0) / 38.0) ** 2))  # Fenwick Bay
    c -= 22.0 * np.exp(-(((y - 420.0) / 22.0) ** 2))  # Corran Head
    c += 10.0 * np.exp(-(((y - 130.0) / 18.0) ** 2))  # Port Aldwyn inlet
    return c


def make_demo_bathymetry(region: DemoRegion | None = None) -> xr.DataArray:
    """Generate the Meridane demo bathymetry as a depth grid (projected, metres).

    Parameters
    ----------
    region : DemoRegion, optional
        Parameters; the defaults give a 380 x 320 grid of 2 km cells.

    Returns
    -------
    xarray.DataArray
        Depth [m], positive down, land negative (elevation above sea level as negative
        depth), on ``DEMO_CRS``. Deterministic for a given ``region.seed``.
    """
    r = region or DemoRegion()
    if r.spacing_km <= 0 or r.width_km <= 10 * r.spacing_km or r.height_km <= 10 * r.spacing_km:
        raise InputError(f"demo region {r}: spacing must be > 0 and the region at least 10 cells wide")
    x_km = np.arange(r.spacing_km / 2, r.width_km, r.spacing_km)
    y_km = np.arange(r.spacing_km / 2, r.height_km, r.spacing_km)
    X, Y = np.meshgrid(x_km, y_km)
    coast = _coast_position(y_km, r)[:, None]
    # distance seaward of the shoreline, shifted so shelf/slope follow the coast shape (softened)
    soft = r.coast_x_km + 0.6 * (coast - r.coast_x_km)
    xs = X - (soft - r.coast_x_km)

    # abyssal plain with a gentle trend and the trench
    depth = r.abyssal_depth_m - 0.4 * (X - 300.0)
    depth += (r.trench_depth_m - r.abyssal_depth_m) * np.exp(-(((X - r.trench_x_km - 0.03 * Y) / 28.0) ** 2))
    # continental slope (tanh) to the shelf
    mid = 0.5 * (r.slope_start_km + r.shelf_break_km)
    half = 0.5 * (r.shelf_break_km - r.slope_start_km)
    slope = 0.5 * (1 - np.tanh((xs - mid) / (0.5 * half)))
    depth = r.shelf_depth_m + (depth - r.shelf_depth_m) * slope
    # shelf: linear to the shoreline
    on_shelf = xs > r.shelf_break_km - 20
    shelf_prof = r.shelf_depth_m * np.clip((coast - X) / (coast - r.shelf_break_km + 20), -1.5, 1.0)
    blend = np.clip((xs - (r.shelf_break_km - 20)) / 25.0, 0, 1)
    depth = np.where(on_shelf, (1 - blend) * depth + blend * shelf_prof, depth)
    # land: rises east of the shoreline
    land = X > coast
    depth = np.where(land, -(X - coast) * 12.0 - 2.0, depth)

    # seamount chain (Orrin Seamounts): Gaussian peaks along a line
    for k, (cx, cy, hgt, rad) in enumerate(
        [(250, 120, 2600, 16), (285, 190, 3100, 18), (318, 262, 2200, 14), (352, 330, 3300, 20), (380, 405, 1800, 12)]
    ):
        depth -= hgt * np.exp(-((X - cx) ** 2 + (Y - cy) ** 2) / (2 * rad**2)) * (X < r.slope_start_km)
    # ridge (Tallis Rise): elongated rise oblique to the coast
    u = (X - 200) * np.cos(0.5) + (Y - 520) * np.sin(0.5)
    v = -(X - 200) * np.sin(0.5) + (Y - 520) * np.cos(0.5)
    depth -= 1400 * np.exp(-(v / 30.0) ** 2) * np.exp(-(u / 170.0) ** 2)
    # submarine canyon (Vell Canyon) cutting the shelf and slope near y = 250 km
    canyon = np.exp(-(((Y - 250.0 - 0.15 * (X - 560)) / 4.5) ** 2)) * (X > 500) * (X < coast - 8)
    depth += canyon * np.clip(0.5 * depth, 0, 900)

    # smooth random fluctuations of a few percent, tapered to zero on the upper shelf
    fl = gaussian_random_field(X.shape, r.spacing_km * 1000.0, r.fluct_corr_km * 1000.0, r.fluct_rms, seed=r.seed)
    taper = np.clip((depth - 100.0) / 900.0, 0.0, 1.0)
    depth = np.where(land, depth, depth * (1.0 + fl * taper))
    # keep the sea side strictly wet down to a few metres near the shore
    depth = np.where(~land & (depth < 2.0), 2.0, depth)
    da = make_grid(
        depth.astype("float64"),
        x_km * 1000.0,
        y_km * 1000.0,
        DEMO_CRS,
        name="depth",
        attrs={
            "units": "m",
            "long_name": "depth below mean sea level",
            "standard_name": "sea_floor_depth_below_sea_level",
            "positive": "down",
            "title": "Meridane coast (invented demo region)",
        },
    )
    return da


def demo_to_lonlat(x_m: np.ndarray | float, y_m: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
    """Convert demo-region coordinates [m] to lon/lat [degrees]."""
    t = Transformer.from_crs(CRS.from_wkt(DEMO_CRS), "EPSG:4326", always_xy=True)
    return t.transform(x_m, y_m)
