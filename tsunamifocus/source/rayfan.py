"""The energy-weighted ray fan launched from a source."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..cautions import caution_summary
from ..constants import GRAVITY, MAX_ROTATIONS, MIN_RAYS, RHO_SEAWATER
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
        Energy per ray [J]; sums to ``energy_J - energy_shallow_J``.
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
        Seed of the rotation of the azimuth set.
    dtheta_deg : float
        Azimuth spacing of the half fan leaving each launch point [degrees] (ray-tube width); with
        ``rotations`` > 1, the spacing within one rotation of the fan.
    rotations : int
        Copies of the fan, each rotated by ``dtheta_deg / rotations`` from the previous one and
        carrying ``1 / rotations`` of the energy (see :func:`make_ray_fan`).
    energy_shallow_J : float
        Uplift energy on sea cells at or shallower than the stop isobath [J], not launched.
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
    dtheta_deg: float = float("nan")
    energy_shallow_J: float = 0.0
    rotations: int = 1
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


#: The directional pattern is evaluated on this many azimuths (every 0.1 degree).
_N_FINE = 3600
_FINE_STEP = 360.0 / _N_FINE


def _local_metric(gi: GridInfo, xs: np.ndarray, ys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """East/north coordinates [m] of points near each other (local equirectangular on lon/lat)."""
    if not gi.geographic:
        return np.asarray(xs, float), np.asarray(ys, float)
    k = math.pi / 180.0 * gi.radius_m
    lat0 = float(np.mean(ys))
    lon0 = math.degrees(float(np.angle(np.mean(np.exp(1j * np.radians(xs))))))
    return (((xs - lon0 + 180.0) % 360.0) - 180.0) * k * math.cos(math.radians(lat0)), (ys - lat0) * k


def _equal_energy_blocks(cells: np.ndarray, along: np.ndarray, w: np.ndarray,
                         blocks: int) -> list[tuple[np.ndarray, float]]:
    """Cut ``cells`` along strike into up to ``blocks`` pieces of equal energy: (cells, share)."""
    order = cells[np.argsort(along[cells], kind="stable")]
    cw = np.cumsum(w[order])
    k = np.minimum((cw / cw[-1] * blocks - 1e-12).astype(int), blocks - 1)
    total = w[cells].sum()
    return [(order[k == b], float(w[order[k == b]].sum() / total)) for b in range(blocks) if np.any(k == b)]


def _fine_pattern(gi: GridInfo, es: np.ndarray, amax: float) -> tuple[np.ndarray, np.ndarray]:
    """The far-field directional energy pattern every 0.1 degree (fractions summing to 1)."""
    rows, cols = _sig_window(gi, np.abs(es) >= 1e-3 * amax, margin=0.25)
    block = es[np.ix_(rows, cols)]
    lat_mid = float(gi.y[rows].mean()) if gi.geographic else 0.0
    dx_m, dy_m = _metric_spacing(gi, lat_mid)
    fine_az = _FINE_STEP * (np.arange(_N_FINE) + 0.5)
    pf = np.maximum(directional_spectrum(block, dx_m, dy_m, fine_az), 0.0)
    if not pf.sum() > 0:
        raise SourceError("directional spectrum of the source is empty (source smaller than a grid cell?)")
    return fine_az, pf / pf.sum()


def _azimuth_bins(pattern: np.ndarray, n_rays: int, blocks: int, seed: int | None,
                  offset_deg: float) -> tuple[float, np.ndarray, np.ndarray]:
    """Spacing [deg], centres [deg] and energy fractions of the fan's evenly spaced azimuth bins."""
    cum = np.concatenate([[0.0], np.cumsum(pattern)])  # at fine bin edges 0, 0.1, ..., 360

    def cdf(a: np.ndarray) -> np.ndarray:
        turns = np.floor(a / 360.0)
        return turns + np.interp(a - 360.0 * turns, _FINE_STEP * np.arange(_N_FINE + 1), cum)

    n_az = max(8, int(round(n_rays / blocks)))
    width = 360.0 / n_az
    rng = np.random.default_rng(seed) if seed is not None else None
    offset = offset_deg + (float(rng.uniform(0.0, width)) if rng is not None else 0.0)
    edges = offset + width * np.arange(n_az + 1)
    frac = np.maximum(np.diff(cdf(edges)), 0.0)
    return width, (edges[:-1] + 0.5 * width) % 360.0, frac / frac.sum()


def _block_half_fans(gi: GridInfo, es: np.ndarray, launch_ok: np.ndarray, strike_deg: float | None,
                     centres: np.ndarray, frac: np.ndarray, blocks: int, launched: float) -> tuple[list, float]:
    """One ordered half fan per equal-energy block on each side of the strike line; and the strike used."""
    jj, ii = np.nonzero(launch_ok)
    Ex, Ny = _local_metric(gi, gi.x[ii], gi.y[jj])
    w = es[jj, ii] ** 2 * np.broadcast_to(gi.cell_area_m2(), es.shape)[jj, ii]
    strike = _principal_strike(Ex, Ny, w) if strike_deg is None else float(strike_deg) % 360.0
    s = math.radians(strike)
    me, mn = np.sum(w * Ex) / w.sum(), np.sum(w * Ny) / w.sum()
    # signed distance to the right of the strike line through the energy centroid, and along it
    right = (Ex - me) * math.cos(s) - (Ny - mn) * math.sin(s)
    along = (Ex - me) * math.sin(s) + (Ny - mn) * math.cos(s)
    az_side = np.where(np.sin(np.radians(centres - strike)) >= 0.0, 1, -1).astype(np.int8)
    parts = []
    for sval, msk in ((1, right >= 0.0), (-1, right < 0.0)):
        az_idx = np.flatnonzero(az_side == sval)
        cells = np.flatnonzero(msk) if np.any(msk) else np.arange(w.size)
        if az_idx.size == 0:
            continue
        for block, share in _equal_energy_blocks(cells, along, w, blocks):
            bx, by = np.sum(w[block] * Ex[block]) / w[block].sum(), np.sum(w[block] * Ny[block]) / w[block].sum()
            pick = block[np.argmin((Ex[block] - bx) ** 2 + (Ny[block] - by) ** 2)]
            parts.append((np.full(az_idx.size, gi.x[ii[pick]]), np.full(az_idx.size, gi.y[jj[pick]]),
                          centres[az_idx], launched * frac[az_idx] * share, np.full(az_idx.size, sval, np.int8)))
    return parts, strike


def make_ray_fan(
    eta: xr.DataArray,
    depth: xr.DataArray,
    n_rays: int = 360,
    *,
    seed: int | None = 0,
    threshold: float = 0.1,
    strike_deg: float | None = None,
    azimuth_offset_deg: float = 0.0,
    stop_depth_m: float = 20.0,
    blocks: int = 8,
    rotations: int = 1,
) -> RayFan:
    """Energy-weighted ray fan from an initial sea surface.

    Directions: ``M = n_rays / blocks`` azimuths evenly spaced ``360 / M`` degrees apart (the
    set rotated by ``azimuth_offset_deg`` and, when ``seed`` is given, by a seeded fraction of
    one spacing). The energy ``E`` of each azimuth bin is the fraction of the far-field
    directional energy ``P(theta)`` (:func:`directional_spectrum`, evaluated every 0.1 degree
    and integrated over the bin) falling in it — so an elongated source beams most energy
    perpendicular to its long axis. Azimuths are clockwise from north on lon/lat grids and from
    grid north (the ``y`` axis) on projected grids.

    Launch points: deterministic. The launch area (sea cells deeper than twice ``stop_depth_m``
    with ``|eta| >= threshold x max|eta|``) is split by the strike line through its energy
    centroid; each side is cut along strike into ``blocks`` pieces of equal ``eta^2`` energy,
    and each piece launches, from its cell nearest to its energy centroid, one ray per azimuth
    heading to its side, carrying the bin's energy times the piece's share of that side. Every
    launch point thus emits an ordered half fan, whose neighbouring rays bound ray tubes of
    ``dtheta_deg`` (what :func:`tsunamifocus.coast.tubes.tube_deposit` needs). Uplift energy on
    sea cells at or shallower than the stop isobath is already at the coast: it is not
    launched and is booked as ``energy_shallow_J`` (weights sum to ``E - energy_shallow_J``).

    With ``rotations = K > 1`` the fan holds K copies of that fan, copy ``j`` rotated by
    ``j dtheta / K`` (stratified rotations: together they sample the launch angle K times more
    finely), each carrying ``1 / K`` of the energy. Traced together, their tube deposits with
    each tube ``dtheta`` wide (:func:`tsunamifocus.focusing.analysis.analyse_focusing`) are the
    mean of K single fans' deposits: past the rays' predictability, where one fan's deposits
    depend on its rotation, the mean does much less (docs/focusing.md).

    Parameters
    ----------
    eta : xarray.DataArray
        Initial sea surface [m] (from :func:`uplift_on_grid`).
    depth : xarray.DataArray
        Depth grid [m].
    n_rays : int
        Number of rays, about (>= 8); the fan has ``blocks x round(n_rays / blocks)`` rays.
    seed : int, optional
        Seed of the rotation of the azimuth set by a fraction of one spacing (None: no rotation).
    threshold : float
        Fraction of the peak |eta| bounding the launch area (0 < threshold < 1).
    strike_deg : float, optional
        Strike for the sides; default: ``eta.attrs["strike_deg"]`` (set by
        :func:`uplift_on_grid` for ruptures), else the long axis of the ``eta^2`` distribution
        (oriented 0-180 degrees).
    azimuth_offset_deg : float
        Rotation of the azimuth set [degrees].
    stop_depth_m : float
        Stop isobath [m] of the run: launch points lie deeper than twice this depth.
    blocks : int
        Launch points on each side of the strike (>= 1).
    rotations : int
        Rotated copies of the fan (1-16; the fan then has ``rotations`` times the rays).

    Returns
    -------
    RayFan

    Raises
    ------
    SourceError
        No sea cells under the source, bad counts or thresholds.
    """
    if not (isinstance(n_rays, (int, np.integer)) and n_rays >= MIN_RAYS):
        raise SourceError(f"n_rays={n_rays!r}: expected an integer >= {MIN_RAYS} ([rays] count, --rays)")
    if not (0.0 < threshold < 1.0):
        raise SourceError(f"threshold must be in (0, 1), got {threshold}")
    if not (isinstance(blocks, (int, np.integer)) and blocks >= 1):
        raise SourceError(f"blocks must be an integer >= 1, got {blocks!r}")
    if not (np.isfinite(stop_depth_m) and stop_depth_m > 0):
        raise SourceError(f"stop_depth_m = {stop_depth_m!r}: expected a positive depth in metres")
    if not (isinstance(rotations, (int, np.integer)) and 1 <= rotations <= MAX_ROTATIONS):
        raise SourceError(f"rotations={rotations!r}: expected an integer from 1 to {MAX_ROTATIONS} ([rays] rotations)")
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
    fine_az, pattern = _fine_pattern(gi, es, amax)
    rotations = int(rotations)
    width, centres, frac = _azimuth_bins(pattern, n_rays, blocks, seed, azimuth_offset_deg)
    bins = [(centres, frac)] + [_azimuth_bins(pattern, n_rays, blocks, seed, azimuth_offset_deg + j * width / rotations)[1:]
                                for j in range(1, rotations)]
    shallow = sea & (dep <= stop_depth_m)
    energy_shallow = float(RHO_SEAWATER * GRAVITY * 0.5 * np.sum(
        (es**2 * np.broadcast_to(gi.cell_area_m2(), e.shape))[shallow]))
    launch_ok = sig & (dep > 2.0 * stop_depth_m)
    if not launch_ok.any():
        raise SourceError(
            f"no sea cell deeper than {2 * stop_depth_m:g} m (twice the stop isobath) lies under the source: "
            "the rupture is on land or in the shallows; move it offshore or lower stop_depth_m")
    if strike_deg is None and "strike_deg" in eta.attrs:
        strike_deg = float(eta.attrs["strike_deg"])
    parts: list = []
    strike = strike_deg
    for c_j, f_j in bins:
        p_j, strike = _block_half_fans(gi, es, launch_ok, strike_deg, c_j, f_j, blocks,
                                       (energy - energy_shallow) / rotations)
        parts += p_j
    x0, y0, az, weights, ray_side = (np.concatenate(p) for p in zip(*parts))
    if gi.geographic:
        x0 = gi.wrap_lon(x0)
    return RayFan(
        x0=x0,
        y0=y0,
        azimuth_deg=az,
        weights=weights,
        side=ray_side,
        energy_J=energy,
        dtheta_deg=width,
        energy_shallow_J=energy_shallow,
        strike_deg=strike,
        crs_wkt=gi.crs_wkt,
        pattern_azimuth_deg=fine_az,
        pattern=pattern,
        seed=seed,
        rotations=rotations,
    )
