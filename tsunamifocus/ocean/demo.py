"""The invented demo region: the Meridane coast.

Everything here is made up and generated deterministically by code: an ocean basin west of
an invented coastline with a trench, an abyssal plain at 4-5 km, a plateau (Brannock
Plateau), a ridge aimed at the coast (Tallis Rise), a seamount chain (the Orrin Seamounts), a
fracture zone (Sorrel Fracture Zone), random relief with a red spectrum (power growing with
scale), a continental slope and shelf cut by a submarine canyon (Vell Canyon), bays and
headlands. The offshore features are 90-400 km across with flanks tens of kilometres wide,
and the random relief has no scale below 80 km: at least about half the deep-water wavelength of
the demo's tsunami (about 200 km), the scales at which the wave refracts and focuses and ray
theory still holds. No real place is depicted.

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
from .randomfield import red_noise_field

__all__ = ['DemoFeatures', 'DemoRegion', 'DEMO_CRS', 'DEMO_PLACES', 'make_demo_bathymetry', 'demo_to_lonlat']

#: Local transverse Mercator of the demo region (metres), centred in open ocean.
def _demo_crs() -> str:
    d = CRS.from_proj4("+proj=tmerc +lat_0=-32 +lon_0=-128 +k=1 +x_0=0 +y_0=0 +ellps=WGS84 +units=m +no_defs")
    j = d.to_json_dict()
    j["name"] = "Meridane local transverse Mercator (invented demo region)"
    return CRS.from_json_dict(j).to_wkt()


DEMO_CRS = _demo_crs()

#: Invented harbours and gauges of the Meridane coast: name -> (x_km, y_km) in DEMO_CRS.
DEMO_PLACES: dict[str, tuple[float, float]] = {
    "Port Aldwyn harbour entrance": (848.0, 330.0),
    "Saltmere gauge": (834.0, 520.0),
    "Corran Head": (847.0, 700.0),
    "Fenwick Bay marina": (846.0, 880.0),
}


@dataclass(frozen=True)
class DemoFeatures:
    """Sizes of the demo's named offshore features (km, m); the defaults are the shipped demo.

    ``plateau_radii_km`` the plateau's semi-axes, ``plateau_flank_slope`` the logistic slope of
    its rim in ``(r / R)^2`` (larger is steeper), ``ridge_halfwidth_km`` the ridge's 1/e half-width,
    ``seamount_sigmas_km`` the five seamounts' Gaussian sigmas, ``fracture_step_km`` and
    ``fracture_trough_km`` the fracture zone's tanh step width and trough 1/e half-width.
    """

    plateau_radii_km: tuple[float, float] = (200.0, 150.0)
    plateau_flank_slope: float = 3.0
    plateau_height_m: float = 2600.0
    ridge_halfwidth_km: float = 100.0
    seamount_sigmas_km: tuple[float, ...] = (44.0, 56.0, 64.0, 52.0, 60.0)
    fracture_step_km: float = 80.0
    fracture_trough_km: float = 60.0


@dataclass(frozen=True)
class DemoRegion:
    """Parameters of the invented Meridane coast (lengths in km, depths in m)."""

    width_km: float = 1000.0
    height_km: float = 1200.0
    spacing_km: float = 3.0
    abyssal_depth_m: float = 4600.0
    trench_x_km: float = 150.0
    trench_extra_m: float = 2200.0
    coast_x_km: float = 840.0
    shelf_depth_m: float = 150.0
    relief_rms_m: float = 250.0
    relief_slope: float = 3.0
    relief_smallest_km: float = 80.0
    features: DemoFeatures = DemoFeatures()
    seed: int = 20261202


def _coast_position(y_km: np.ndarray, r: DemoRegion) -> np.ndarray:
    """x of the shoreline [km] as a function of y: bays and headlands; turns east near both ends."""
    y = y_km
    c = r.coast_x_km + 18.0 * np.sin(2 * np.pi * y / 260.0) + 8.0 * np.sin(2 * np.pi * y / 90.0 + 1.0)
    c += 30.0 * np.exp(-(((y - 700.0) / 40.0) ** 2))  # Corran bight
    c -= 28.0 * np.exp(-(((y - 420.0) / 28.0) ** 2))  # Saltmere headland
    north = np.clip((y - (r.height_km - 190.0)) / 190.0, 0.0, None)
    south = np.clip((190.0 - y) / 190.0, 0.0, None)
    return c + 400.0 * (north**1.5 + south**1.5)


def _offshore_features(X: np.ndarray, Y: np.ndarray, f: DemoFeatures | None = None) -> np.ndarray:
    """Height [m] of the named features above the abyssal plain.

    Each feature is at least about half a deep-water wavelength across (the dominant period of the
    demo's source, about 16 min, gives a wavelength of about 200 km over the abyssal plain) and its
    flanks are tens of kilometres wide, so that ray theory holds over it and the rays and the wave
    focus alike (docs/focusing.md, "The demo's sea floor").
    """
    f = f or DemoFeatures()
    h = np.zeros_like(X)
    # Brannock Plateau: ~400 x 300 km, rising 2600 m; the middle half of the rise spreads over
    # 55-75 km of its flanks (the previous design's steep sides: about 20 km)
    u = ((X - 470.0) / f.plateau_radii_km[0]) ** 2 + ((Y - 330.0) / f.plateau_radii_km[1]) ** 2
    h += f.plateau_height_m / (1.0 + np.exp((u - 1.0) * f.plateau_flank_slope))
    # Tallis Rise: a ridge 500 km long, about 200 km wide, 1700 m high, aimed at the coast
    a = np.radians(-12.0)
    uu = (X - 470.0) * np.cos(a) + (Y - 760.0) * np.sin(a)
    vv = -(X - 470.0) * np.sin(a) + (Y - 760.0) * np.cos(a)
    h += 1700.0 * np.exp(-((vv / f.ridge_halfwidth_km) ** 2)) * np.exp(-((uu / 260.0) ** 4))
    # Orrin Seamounts: a chain of five broad seamounts, 90-130 km across (Gaussian sigma 44-64 km)
    for (sx, sy, hgt), rad in zip(((250, 940, 2000), (330, 980, 2600), (420, 1010, 3000), (510, 1040, 2400),
                                   (600, 1060, 2800)), f.seamount_sigmas_km):
        h += hgt * np.exp(-((X - sx) ** 2 + (Y - sy) ** 2) / (2.0 * rad * rad))
    # Sorrel Fracture Zone: an east-west trough (1/e half-width 60 km) with a 500 m step across
    # it (tanh width 80 km)
    inside = (X > 220.0) & (X < 680.0)
    h -= inside * (250.0 * np.tanh((Y - 560.0) / f.fracture_step_km)
                   + 700.0 * np.exp(-(((Y - 560.0) / f.fracture_trough_km) ** 2)))
    return h


def make_demo_bathymetry(region: DemoRegion | None = None) -> xr.DataArray:
    """Generate the Meridane demo bathymetry as a depth grid (projected, metres).

    The focusing comes from features a tsunami sees and ray theory can follow, 90-400 km
    across with wide flanks (a plateau, a ridge aimed at the coast, a seamount chain, a fracture
    zone), and from random relief with a red spectrum
    (:func:`tsunamifocus.ocean.randomfield.red_noise_field`) between 80 and 500 km, not from
    fluctuations shorter than the wavelength. The coast of interest lies far from the grid
    edges: the shoreline runs north-south 800-870 km east of the trench and turns east near the
    northern and southern ends.

    Parameters
    ----------
    region : DemoRegion, optional
        Parameters; the defaults give a 400 x 333 grid of 3 km cells.

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
    off = _coast_position(y_km, r)[:, None] - X  # km seaward of the shoreline
    base = r.abyssal_depth_m - 0.3 * (X - 400.0)
    base += r.trench_extra_m * np.exp(-(((X - r.trench_x_km - 0.02 * (Y - 600.0)) / 30.0) ** 2))
    base -= red_noise_field(X.shape, r.spacing_km * 1e3, slope=r.relief_slope, largest_m=500e3,
                            smallest_m=r.relief_smallest_km * 1e3, rms=r.relief_rms_m, seed=r.seed)
    base = np.maximum(base - _offshore_features(X, Y, r.features), 300.0)
    # continental slope and a 40-70 km wide shelf
    shelf_w = 55.0 + 15.0 * np.sin(2 * np.pi * y_km / 330.0)[:, None]
    slope = 0.5 * (1.0 + np.tanh((off - shelf_w - 45.0) / 18.0))
    shelf = 20.0 + r.shelf_depth_m * np.clip(off / shelf_w, 0.0, 1.0) ** 0.8
    depth = shelf + (base - shelf) * slope
    # Vell Canyon cuts the shelf near y = 600 km
    canyon = np.exp(-(((Y - 600.0 - 0.2 * (X - 780.0)) / 5.0) ** 2)) * (off > 4.0) * (off < 110.0)
    depth += canyon * np.clip(0.6 * depth, 0.0, 800.0)
    land = off < 0.0
    # land rises inland; the sea side stays wet, shoaling to ~2 m at the shoreline
    depth = np.where(land, off * 12.0 - 2.0, np.maximum(depth, 2.0 + 18.0 * np.clip(off / 3.0, 0.0, 1.0)))
    return make_grid(
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


def demo_to_lonlat(x_m: np.ndarray | float, y_m: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
    """Convert demo-region coordinates [m] to lon/lat [degrees]."""
    t = Transformer.from_crs(CRS.from_wkt(DEMO_CRS), "EPSG:4326", always_xy=True)
    return t.transform(x_m, y_m)
