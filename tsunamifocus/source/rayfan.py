"""The energy-weighted ray fan launched from a source."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..cautions import caution_summary
from ..errors import SourceError
from ..grid import GridInfo
from ..ocean.smooth import sea_mask
from .energy import _sig_window, directional_spectrum, potential_energy
from .uplift import _metric_spacing

__all__ = ['RayFan', 'make_ray_fan']


@dataclass
class RayFan:
    """Energy-weighted rays leaving a source, ready for the ray engine.

    Attributes
    ----------
    x0, y0 : numpy.ndarray
        Launch points in the grid CRS (lon/lat degrees or metres).
    azimuth_deg : numpy.ndarray
        Launch direction [degrees clockwise from (grid) north].
    weights : numpy.ndarray
        Energy per ray [J]; sums to ``energy_J``.
    side : numpy.ndarray
        int8: +1 for rays heading to the right of the strike (the dip side), -1 to the left.
    energy_J : float
        Initial potential energy ``E`` of the source [J].
    strike_deg : float
        Strike used to define the sides [degrees].
    crs_wkt : str
        CRS of the launch points.
    pattern_azimuth_deg, pattern : numpy.ndarray
        The directional energy distribution: fraction of E in each 0.1-degree bin centred at
        ``pattern_azimuth_deg``.
    seed : int
        Seed of the launch-point sampling.
    method : str
        Basis of the directional weights.
    """

    x0: np.ndarray
    y0: np.ndarray
    azimuth_deg: np.ndarray
    weights: np.ndarray
    side: np.ndarray
    energy_J: float
    strike_deg: float
    crs_wkt: str
    pattern_azimuth_deg: np.ndarray
    pattern: np.ndarray
    seed: int | None = 0
    method: str = "far-field angular spectrum of the initial sea surface (linear long-wave theory)"

    def __len__(self) -> int:
        return int(self.x0.size)

    @property
    def n_rays(self) -> int:
        """Number of rays."""
        return int(self.x0.size)

    def by_side(self) -> dict[str, dict[str, float]]:
        """Ray count and energy [J] on each side of the strike."""
        out = {}
        for name, s in (("right_of_strike", 1), ("left_of_strike", -1)):
            m = self.side == s
            out[name] = {"n_rays": int(m.sum()), "energy_J": float(self.weights[m].sum())}
        return out

    def to_dataset(self) -> xr.Dataset:
        """The fan as an :class:`xarray.Dataset` on dim ``ray``."""
        ds = xr.Dataset(
            {
                "x0": ("ray", self.x0),
                "y0": ("ray", self.y0),
                "azimuth_deg": ("ray", self.azimuth_deg, {"units": "degree", "long_name": "clockwise from north"}),
                "weight": ("ray", self.weights, {"units": "J"}),
                "side": ("ray", self.side, {"flag_values": [-1, 1],
                                            "flag_meanings": "left_of_strike right_of_strike"}),
            },
            attrs={"energy_J": self.energy_J, "strike_deg": self.strike_deg, "crs_wkt": self.crs_wkt,
                   "method": self.method, "cautions": caution_summary()},
        )
        return ds


def _principal_strike(E: np.ndarray, N: np.ndarray, w: np.ndarray) -> float:
    """Azimuth [deg] of the long axis of a weighted point cloud (0-180)."""
    ws = w.sum()
    me, mn = np.sum(w * E) / ws, np.sum(w * N) / ws
    cee = np.sum(w * (E - me) ** 2) / ws
    cnn = np.sum(w * (N - mn) ** 2) / ws
    cen = np.sum(w * (E - me) * (N - mn)) / ws
    vals, vecs = np.linalg.eigh(np.array([[cee, cen], [cen, cnn]]))
    ve, vn = vecs[:, int(np.argmax(vals))]
    return math.degrees(math.atan2(ve, vn)) % 180.0


def make_ray_fan(
    eta: xr.DataArray,
    depth: xr.DataArray,
    n_rays: int = 360,
    *,
    seed: int | None = 0,
    threshold: float = 0.1,
    strike_deg: float | None = None,
    azimuth_offset_deg: float = 0.0,
) -> RayFan:
    """Energy-weighted ray fan from an initial sea surface.

    Directions: ``n_rays`` azimuths evenly spaced (``360 / n_rays`` apart, starting at
    ``azimuth_offset_deg + 180 / n_rays``); ray ``i`` carries ``E x`` the fraction of the
    far-field directional energy ``P(theta)`` (:func:`directional_spectrum`, evaluated every
    0.1 degree and integrated over the ray's bin) falling in its bin — so the weights sum to
    ``E`` and an elongated source beams most energy perpendicular to its long axis. The
    azimuths are clockwise from north on lon/lat grids and from grid north (the ``y`` axis) on
    projected grids.

    Launch points: sampled (``numpy.random.default_rng(seed)``, with ``eta^2 x cell area`` as
    probability) among sea cells with ``|eta| >= threshold x max|eta|``; a ray heading to the
    right of the strike starts on the right half of that region, and vice versa, when that half
    has sea cells (else anywhere in the region). Points are jittered uniformly within the cell.

    Parameters
    ----------
    eta : xarray.DataArray
        Initial sea surface [m] (from :func:`uplift_on_grid`).
    depth : xarray.DataArray
        Depth grid [m].
    n_rays : int
        Number of rays (>= 8).
    seed : int, optional
        Seed for the launch-point sampling.
    threshold : float
        Fraction of the peak |eta| bounding the launch area (0 < threshold < 1).
    strike_deg : float, optional
        Strike for the sides; default: ``eta.attrs["strike_deg"]`` (set by
        :func:`uplift_on_grid` for ruptures), else the long axis of the ``eta^2`` distribution
        (oriented 0-180 degrees).
    azimuth_offset_deg : float
        Rotation of the azimuth set [degrees].

    Returns
    -------
    RayFan

    Raises
    ------
    SourceError
        No sea cells under the source, bad counts or thresholds.
    """
    if not (isinstance(n_rays, (int, np.integer)) and n_rays >= 8):
        raise SourceError(f"n_rays must be an integer >= 8, got {n_rays!r}")
    if not (0.0 < threshold < 1.0):
        raise SourceError(f"threshold must be in (0, 1), got {threshold}")
    gi = GridInfo.from_dataarray(depth)
    e = np.asarray(eta.values, dtype=float)
    if e.shape != (gi.ny, gi.nx):
        raise SourceError(f"eta shape {e.shape} does not match the depth grid {(gi.ny, gi.nx)}")
    dep = np.asarray(depth.values, dtype=float)
    sea = sea_mask(dep)
    es = np.where(sea, np.nan_to_num(e), 0.0)
    amax = float(np.max(np.abs(es)))
    if amax == 0.0:
        raise SourceError("the source has no sea-surface displacement over sea cells of the grid")
    energy = potential_energy(eta, depth)
    sig = sea & (np.abs(es) >= threshold * amax)
    rows, cols = _sig_window(gi, np.abs(es) >= 1e-3 * amax, margin=0.25)
    block = es[np.ix_(rows, cols)]
    lat_mid = float(gi.y[rows].mean()) if gi.geographic else 0.0
    dx_m, dy_m = _metric_spacing(gi, lat_mid)

    fine_az, pattern, centres, weights = _ray_bins(block, dx_m, dy_m, energy, n_rays, azimuth_offset_deg)
    if strike_deg is None and "strike_deg" in eta.attrs:
        strike_deg = float(eta.attrs["strike_deg"])
    x0, y0, ray_side, strike = _launch_points(gi, sig, es, centres, strike_deg, seed)
    if gi.geographic:
        x0 = gi.wrap_lon(x0)
    return RayFan(
        x0=x0,
        y0=y0,
        azimuth_deg=centres,
        weights=weights,
        side=ray_side,
        energy_J=energy,
        strike_deg=strike,
        crs_wkt=gi.crs_wkt,
        pattern_azimuth_deg=fine_az,
        pattern=pattern,
        seed=seed,
    )

def _ray_bins(block: np.ndarray, dx_m: float, dy_m: float, energy: float, n_rays: int,
              azimuth_offset_deg: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Fine directional pattern of the source and the energy of each ray's azimuth bin.

    Returns the fine azimuths, the normalised pattern on them, the ray azimuths (bin centres) and
    the ray weights [J] (the pattern integrated over each bin, summing to ``energy``).
    """
    # directional pattern on a fine azimuth set, then integrated over each ray's bin
    n_fine = 3600
    dfine = 360.0 / n_fine
    fine_az = dfine * (np.arange(n_fine) + 0.5)
    Pf = np.maximum(directional_spectrum(block, dx_m, dy_m, fine_az), 0.0)
    if not Pf.sum() > 0:
        raise SourceError("directional spectrum of the source is empty (source smaller than a grid cell?)")
    pattern = Pf / Pf.sum()
    cum = np.concatenate([[0.0], np.cumsum(pattern)])  # at fine bin edges 0, dfine, ..., 360

    def cdf(a: np.ndarray) -> np.ndarray:
        turns = np.floor(a / 360.0)
        return turns + np.interp(a - 360.0 * turns, dfine * np.arange(n_fine + 1), cum)

    width = 360.0 / n_rays
    edges = azimuth_offset_deg + width * np.arange(n_rays + 1)
    centres = (edges[:-1] + 0.5 * width) % 360.0
    c = cdf(edges)
    frac = np.diff(c)
    frac = np.maximum(frac, 0.0)
    weights = energy * (frac / frac.sum())
    return fine_az, pattern, centres, weights


def _launch_points(gi: GridInfo, sig: np.ndarray, es: np.ndarray, centres: np.ndarray, strike_deg: float | None,
                   seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Launch points drawn from the significant source cells (weight eta^2 x area), each ray on the side
    of the strike line it travels to; returns x0, y0, the side (+1 right, -1 left) and the strike used."""
    # launch area in local metric coordinates
    jj, ii = np.nonzero(sig)
    xs, ys = gi.x[ii], gi.y[jj]
    if gi.geographic:
        k = math.pi / 180.0 * gi.radius_m
        lat0 = float(np.mean(ys))
        dl = np.angle(np.mean(np.exp(1j * np.radians(xs))))
        lon0 = math.degrees(dl)
        Ex = (((xs - lon0 + 180.0) % 360.0) - 180.0) * k * math.cos(math.radians(lat0))
        Ny = (ys - lat0) * k
    else:
        Ex, Ny = xs, ys
    area = np.broadcast_to(gi.cell_area_m2(), es.shape)[jj, ii]
    w = es[jj, ii] ** 2 * area
    if strike_deg is None:
        strike = _principal_strike(Ex, Ny, w)
    else:
        strike = float(strike_deg) % 360.0
    s = math.radians(strike)
    me, mn = np.sum(w * Ex) / w.sum(), np.sum(w * Ny) / w.sum()
    # signed distance to the right of the strike line through the energy centroid
    right = (Ex - me) * math.cos(s) - (Ny - mn) * math.sin(s)
    ray_side = np.where(np.sin(np.radians(centres - strike)) >= 0.0, 1, -1).astype(np.int8)

    n_rays = centres.size
    rng = np.random.default_rng(seed)
    x0 = np.empty(n_rays)
    y0 = np.empty(n_rays)
    for sval, msk in ((1, right >= 0.0), (-1, right < 0.0)):
        idx_rays = np.nonzero(ray_side == sval)[0]
        if idx_rays.size == 0:
            continue
        cand = np.nonzero(msk)[0] if np.any(msk) else np.arange(w.size)
        p = w[cand] / w[cand].sum()
        pick = cand[rng.choice(cand.size, size=idx_rays.size, p=p)]
        jit = rng.uniform(-0.5, 0.5, size=(2, idx_rays.size))
        x0[idx_rays] = xs[pick] + jit[0] * gi.dx
        y0[idx_rays] = ys[pick] + jit[1] * gi.dy
    return x0, y0, ray_side, strike

