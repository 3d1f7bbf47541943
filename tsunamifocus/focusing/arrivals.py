"""Arrivals of rays at coastline segments: energy, amplitude, first arrival per segment."""

from __future__ import annotations

import math
import warnings
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from scipy import sparse
from scipy.spatial import cKDTree

from ..cautions import caution_summary
from ..coast.coastline import coastline_from_grid
from ..constants import GRAVITY, RHO_SEAWATER
from ..errors import CoastError, InputError, ResolutionWarning
from ..grid import GridInfo
from ..ocean.smooth import _to_xyz
from ..propagation.rays import REASON_CODES, REASON_MEANINGS
from .ranking import _add_ranks, _pct

#: Ray end-reason code of "reached the stop isobath".
REASON_COAST = REASON_CODES["coast"]

__all__ = ["REASON_COAST", 'segment_arrivals']


# --------------------------------------------------------------------------------------
# arrivals on coastline segments
# --------------------------------------------------------------------------------------
def _assign(segments: pd.DataFrame, info: GridInfo, x: np.ndarray, y: np.ndarray,
            max_distance_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Nearest segment (index, or -1 beyond max_distance_m) and distance [m] of points."""
    import shapely
    from pyproj import Geod

    geoms = np.asarray(list(segments["geometry"]), dtype=object)
    if x.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    if info.geographic:
        # nearest in a locally isotropic frame (longitude scaled by cos of the mid latitude)
        lat0 = math.radians(float(np.median(segments["y_mid"])))
        kx = math.cos(lat0)
        geoms_s = shapely.transform(geoms, lambda c: np.column_stack([c[:, 0] * kx, c[:, 1]]))
        pts = shapely.points(np.column_stack([x * kx, y]))
    else:
        geoms_s = geoms
        pts = shapely.points(np.column_stack([x, y]))
    tree = shapely.STRtree(geoms_s)
    (ip, ig), _d = tree.query_nearest(pts, return_distance=True, all_matches=False)
    idx = np.full(x.size, -1, dtype=np.int64)
    idx[ip] = ig
    # true distance to the chosen segment [m]
    near = shapely.shortest_line(pts[ip], geoms_s[ig])
    c = shapely.get_coordinates(near).reshape(-1, 2, 2)
    if info.geographic:
        g = Geod(a=info.radius_m, b=info.radius_m)
        _, _, dd = g.inv(c[:, 0, 0] / kx, c[:, 0, 1], c[:, 1, 0] / kx, c[:, 1, 1])
        dist_sel = np.abs(np.asarray(dd, dtype=float))
    else:
        dist_sel = np.hypot(c[:, 0, 0] - c[:, 1, 0], c[:, 0, 1] - c[:, 1, 1])
    dist = np.full(x.size, np.inf)
    dist[ip] = dist_sel
    idx[dist > max_distance_m] = -1
    return idx, dist


def _default_max_distance(segments: pd.DataFrame, depth: xr.DataArray, info: GridInfo, stop_depth_m: float) -> float:
    """3 cells + 1.5 x median offset [m] of the segment centres from the stop-isobath contour."""
    import shapely


    base = 3.0 * max(info.spacing_m())
    if not (np.isfinite(stop_depth_m) and stop_depth_m > 0):
        return base
    try:
        lines = coastline_from_grid(depth, stop_depth_m, min_length_m=0.0)
    except CoastError:
        return base
    kx = math.cos(math.radians(float(np.median(segments["y_mid"])))) if info.geographic else 1.0
    k = math.pi / 180.0 * info.radius_m if info.geographic else 1.0
    geoms = np.asarray(lines, dtype=object)
    if info.geographic:
        geoms = shapely.transform(geoms, lambda c: np.column_stack([c[:, 0] * kx, c[:, 1]]))
    pts = shapely.points(np.column_stack([segments["x_mid"].to_numpy(float) * kx, segments["y_mid"].to_numpy(float)]))
    tree = shapely.STRtree(geoms)
    _, dist = tree.query_nearest(pts, return_distance=True, all_matches=False)
    offset = float(np.median(dist)) * k if len(dist) else 0.0
    return base + 1.5 * offset


def _angle_diff(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Absolute difference of azimuths in [0, 180] degrees."""
    return np.abs((np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0)


def _per_segment(end: xr.Dataset, idx: np.ndarray, nseg: int) -> dict[str, np.ndarray]:
    sel = idx >= 0
    k = idx[sel]
    w = np.asarray(end["weight"].values, dtype=float)[sel]
    n = np.bincount(k, minlength=nseg)
    e = np.bincount(k, weights=w, minlength=nseg)
    t = np.full(nseg, np.inf)
    np.minimum.at(t, k, np.asarray(end["time_s"].values, dtype=float)[sel])
    caus = np.bincount(k, weights=np.asarray(end["caustics"].values, dtype=float)[sel], minlength=nseg)
    az = np.radians(np.asarray(end["azimuth_deg"].values, dtype=float)[sel])
    sx = np.bincount(k, weights=w * np.sin(az), minlength=nseg)
    sy = np.bincount(k, weights=w * np.cos(az), minlength=nseg)
    cw = np.bincount(k, weights=w * np.asarray(end["c_end"].values, dtype=float)[sel], minlength=nseg)
    hw = np.bincount(k, weights=w * np.asarray(end["depth_end"].values, dtype=float)[sel], minlength=nseg)
    with np.errstate(invalid="ignore", divide="ignore"):
        return {
            "n": n,
            "e": e,
            "t": np.where(np.isfinite(t), t, np.nan),
            "caustics_mean": np.where(n > 0, caus / np.maximum(n, 1), np.nan),
            "az": np.where(n > 0, np.degrees(np.arctan2(sx, sy)) % 360.0, np.nan),
            "c": np.where(e > 0, cw / e, np.nan),
            "h": np.where(e > 0, hw / e, np.nan),
        }


def _boot_energy(end: xr.Dataset, idx: np.ndarray, nseg: int, n_boot: int, rng: np.random.Generator) -> np.ndarray:
    """Poisson-bootstrap replicates of per-segment energy [J], shape (n_boot, nseg)."""
    sel = np.flatnonzero(idx >= 0)
    if sel.size == 0:
        return np.zeros((n_boot, nseg))
    w = np.asarray(end["weight"].values, dtype=float)[sel]
    S = sparse.csr_matrix((w, (np.arange(sel.size), idx[sel])), shape=(sel.size, nseg))
    out = np.empty((n_boot, nseg))
    chunk = max(1, int(2e6 // max(sel.size, 1)))
    for b0 in range(0, n_boot, chunk):
        b1 = min(n_boot, b0 + chunk)
        counts = rng.poisson(1.0, size=(b1 - b0, sel.size)).astype(float)
        out[b0:b1] = np.asarray(S.T @ counts.T).T
    return out


def segment_arrivals(
    segments: pd.DataFrame,
    result: Any,
    depth: xr.DataArray,
    *,
    period_s: float,
    ref_result: Any | None = None,
    max_distance_m: float | None = None,
    min_rays: int = 10,
    n_boot: int = 200,
    seed: int = 0,
    rho: float = RHO_SEAWATER,
    gravity: float = GRAVITY,
    max_incidence_deg: float = 80.0,
    coast_area: Any = None,
) -> pd.DataFrame:
    """Energy, arrival time, direction, lensing factor and indicative amplitude per segment.

    Each ray that ended on the stop isobath (reason ``coast``) gives its whole weight [J] to
    the nearest segment (shapely STRtree) if that lies within ``max_distance_m``; rays farther
    away are "unassigned" (see :func:`energy_budget`).

    Per segment (columns added to the segments table):

    * ``n_rays``; ``energy_J`` [J]; ``energy_per_m = energy_J / length_m`` [J m-1] - the energy
      crossing the stop isobath per metre of coast (incidence angle included: rays arriving
      obliquely are spread over more coast);
    * ``first_arrival_s`` [s] earliest ray; ``caustics_mean`` mean caustic count of its rays;
    * ``arrival_azimuth_deg`` - energy-weighted circular mean of the rays' travel directions
      at arrival [deg clockwise from north]; ``incidence_deg`` - its angle to the landward
      normal (0 = head-on);
    * ``ref_n_rays``, ``ref_energy_per_m``, ``lensing_factor = energy_per_m / ref_energy_per_m``
      (same segments, run over the reference bathymetry);
    * ``amp_stop_m`` - indicative amplitude at the stop isobath from the energy flux: energy per
      unit crest width ``E_w = energy_per_m / cos(incidence)`` (incidence capped at
      ``max_incidence_deg``) carried by one sinusoidal wavelength ``c_stop T`` of amplitude
      ``a`` with mean energy density ``rho g a**2 / 2`` (linear long waves), so
      ``a = sqrt(2 E_w / (rho g c_stop T))``; ``h_stop`` is the energy-weighted mean end depth
      of the rays (the stop isobath) and ``c_stop = sqrt(g h_stop)``;
    * ``fresnel_sigma_m`` [m] - first-Fresnel-zone radius ``sqrt(c_stop T L) / 2`` at the
      segment (``L`` = distance from the nearest launch point): segment values are ray counts,
      not regularised; a hotspot narrower than this along the coast is a ray-theory artefact;
    * ``amp_1m_m`` - Green's law (Green 1838) extrapolation to 1 m depth,
      ``a_1m = a_stop (h_stop / 1 m)**(1/4)``: indicative only (no breaking, run-up, friction);
    * ``lensing_lo/hi``, ``amp_lo/hi`` - 5-95 % bootstrap interval over rays: ``n_boot``
      Poisson-bootstrap replicates (each ray drawn Poisson(1) times, the standard large-sample
      approximation of resampling rays with replacement), seeded and deterministic; the real
      and reference runs are resampled independently. ``amp_lo/hi`` refer to ``amp_1m_m``;
    * ``reliable`` - at least ``min_rays`` rays in this run (and in the reference run): with
      fewer, the relative sampling error ``~ 1 / sqrt(n)`` exceeds ~30 % (default 10 rays;
      common practice, no source); ``rank_lensing``, ``rank_amplitude`` - 1 = highest among
      reliable segments, missing (NA) for unreliable ones.

    Parameters
    ----------
    segments : pandas.DataFrame
        From :func:`tsunamifocus.coast.segment_coastline`.
    result : RayResult
        Run over the real bathymetry.
    depth : xarray.DataArray
        The depth grid of the run (for geometry).
    period_s : float
        Dominant period of the source [s] (pulse length ``c_stop T``).
    ref_result : RayResult, optional
        The same source over the reference bathymetry (for the lensing factor).
    max_distance_m : float, optional
        Largest ray-end to segment distance [m]. Default: 3 grid cells plus 1.5 times the
        median distance from the segment centres to the grid's stop-isobath contour. For
        segments cut from that contour this is 3 cells (rays end on it to within a cell); for a
        shoreline file inshore of the stop isobath it grows with the shelf offset. A warning
        says when more than half of the coast energy stays unassigned.
    min_rays : int
        Rays needed for ``reliable``.
    n_boot : int
        Bootstrap replicates.
    seed : int
        Bootstrap seed.
    rho, gravity : float
        Sea-water density [kg m-3], gravity [m s-2].
    max_incidence_deg : float
        Incidence cap [deg] for the crest-width conversion (grazing rays: ray theory fails).
    coast_area : callable, optional
        ``coast_area(x, y) -> bool array`` (grid CRS): where the coast of interest lies. The two
        coverage warnings (coast energy left unassigned; reference run moved off the segments)
        compare only the energy of rays ending there, so a coastline file or region covering
        part of a large grid does not count the energy reaching every other coast as missing.
        Default: the whole grid.

    Returns
    -------
    pandas.DataFrame
        The segments table with the arrival columns; ``attrs`` carry the cautions, the
        assignment counts and the method notes.

    Raises
    ------
    CoastError
        If no ray reached the stop isobath, or none was within ``max_distance_m`` of a segment
        (says what to change).
    """
    if segments is None or len(segments) == 0:
        raise CoastError("segment_arrivals: the segments table is empty (build it with segment_coastline)")
    if not (np.isfinite(period_s) and period_s > 0):
        raise InputError(f"period_s={period_s}: expected the source's dominant period in seconds (> 0)")
    info = GridInfo.from_dataarray(depth)
    end = result.end
    if max_distance_m is None:
        max_distance_m = _default_max_distance(segments, depth, info, float(end.attrs.get("stop_depth_m", np.nan)))
    idx, coast = _assign_coast_rays(segments, info, end, max_distance_m)
    nseg = len(segments)
    agg = _per_segment(end, idx, nseg)
    length = segments["length_m"].to_numpy(float)
    out = segments.copy()
    out["n_rays"] = agg["n"].astype(np.int64)
    out["energy_J"] = agg["e"]
    out["energy_per_m"] = agg["e"] / length
    out["first_arrival_s"] = agg["t"]
    out["caustics_mean"] = agg["caustics_mean"]
    out["arrival_azimuth_deg"] = agg["az"]
    landward = (out["normal_azimuth_deg"].to_numpy(float) + 180.0) % 360.0
    inc = np.minimum(_angle_diff(agg["az"], landward), 90.0)
    out["incidence_deg"] = inc
    rng = np.random.default_rng(seed)
    boot = _boot_energy(end, idx, nseg, n_boot, rng) / length
    ref_energy, ridx = None, None
    if ref_result is not None:
        *ref_energy, ridx = _lensing_columns(out, segments, info, ref_result.end, agg, boot, n_boot, rng,
                                             max_distance_m)
    else:
        out["ref_n_rays"] = pd.array([pd.NA] * nseg, dtype="Int64")
        out["ref_energy_per_m"] = np.nan
        out["lensing_factor"] = np.nan
        out["lensing_lo"] = np.nan
        out["lensing_hi"] = np.nan
    c_stop = _amplitude_columns(out, agg, inc, boot, n_boot, period_s, rho, gravity, max_incidence_deg)
    out["fresnel_sigma_m"] = _fresnel_sigma_at_segments(out, info, end, c_stop, period_s)
    rel = agg["n"] >= int(min_rays)
    if ref_result is not None:
        rel &= out["ref_n_rays"].to_numpy(np.int64) >= int(min_rays)
    out["reliable"] = rel
    out = _add_ranks(out, ref_result is not None)
    out.attrs.update(
        {
            "cautions": caution_summary(),
            "n_rays_total": int(idx.size),
            "n_rays_coast": int(coast.sum()),
            "n_rays_assigned": int((idx >= 0).sum()),
            "energy_assigned_J": float(agg["e"].sum()),
            "energy_coast_unassigned_J": float(np.asarray(end["weight"].values, float)[coast & (idx < 0)].sum()),
            "max_distance_m": float(max_distance_m),
            "min_rays": int(min_rays),
            "n_boot": int(n_boot),
            "seed": int(seed),
            "period_s": float(period_s),
            "amplitude_method": "a_stop = sqrt(2 E_w / (rho g c_stop T)), E_w = energy_per_m / cos(incidence); "
            "a_1m = a_stop (h_stop / 1 m)^(1/4) (Green's law) - indicative",
            "interval_method": f"5-95 % Poisson bootstrap over rays, {n_boot} replicates, seed {seed}",
        }
    )
    if ref_energy is not None:
        out.attrs["ref_energy_coast_J"], out.attrs["ref_energy_coast_unassigned_J"] = ref_energy
    _warn_on_coverage(out, end, coast, idx, agg, ref_result, ridx, coast_area, min_rays, max_distance_m)
    return out


def _assign_coast_rays(segments: pd.DataFrame, info: GridInfo, end: xr.Dataset,
                       max_distance_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Segment index of every ray that ended on the stop isobath within reach (-1 otherwise), and that mask."""
    reason = np.asarray(end["reason"].values)
    coast = reason == REASON_COAST
    stop_depth_m = float(end.attrs.get("stop_depth_m", np.nan))
    if not coast.any():
        counts = {REASON_MEANINGS.get(int(c), str(c)): int((reason == c).sum()) for c in np.unique(reason)}
        raise CoastError(
            f"no ray reached the stop isobath ({stop_depth_m:g} m); ray ends: {counts}. Lower stop_depth_m, "
            f"raise max_time_s, widen the grid or aim the source at the coast - no ranking can be made"
        )
    x = np.asarray(end["x"].values, dtype=float)
    y = np.asarray(end["y"].values, dtype=float)
    idx = np.full(x.size, -1, dtype=np.int64)
    ci = np.flatnonzero(coast)
    idx_c, _ = _assign(segments, info, x[ci], y[ci], max_distance_m)
    idx[ci] = idx_c
    if not (idx >= 0).any():
        raise CoastError(
            f"{ci.size} rays reached the stop isobath but none within max_distance_m="
            f"{max_distance_m:.0f} m of a coastline segment: raise max_distance_m or use a "
            f"coastline nearer the stop isobath (e.g. coastline_from_grid(depth, {stop_depth_m:g}))"
        )
    return idx, coast


def _lensing_columns(out: pd.DataFrame, segments: pd.DataFrame, info: GridInfo, rend: xr.Dataset, agg: dict,
                     boot: np.ndarray, n_boot: int, rng: np.random.Generator,
                     max_distance_m: float) -> tuple[float, float, np.ndarray]:
    """Reference-run columns and the lensing factor with its bootstrap interval (in place).

    Returns the reference run's energy reaching the stop isobath and the part of it left unassigned [J],
    and the segment index of each of its rays (-1: none).
    """
    nseg = len(segments)
    length = segments["length_m"].to_numpy(float)
    rreason = np.asarray(rend["reason"].values)
    ridx = np.full(rend.sizes["ray"], -1, dtype=np.int64)
    rci = np.flatnonzero(rreason == REASON_COAST)
    if rci.size:
        ridx[rci], _ = _assign(segments, info, np.asarray(rend["x"].values, float)[rci],
                               np.asarray(rend["y"].values, float)[rci], max_distance_m)
    ragg = _per_segment(rend, ridx, nseg)
    rw = np.asarray(rend["weight"].values, float)
    ref_coast_e = float(rw[rci].sum())
    ref_unassigned = float(rw[rci][ridx[rci] < 0].sum())
    out["ref_n_rays"] = ragg["n"].astype(np.int64)
    out["ref_energy_per_m"] = ragg["e"] / length
    rboot = _boot_energy(rend, ridx, nseg, n_boot, rng) / length
    with np.errstate(invalid="ignore", divide="ignore"):
        lf = np.where(ragg["e"] > 0, agg["e"] / np.where(ragg["e"] > 0, ragg["e"], 1.0), np.nan)
        lf = np.where((agg["n"] == 0) & (ragg["n"] == 0), np.nan, lf)
        lb = np.where(rboot > 0, boot / np.where(rboot > 0, rboot, 1.0), np.inf)
        lb = np.where((boot == 0) & (rboot == 0), np.nan, lb)
    out["lensing_factor"] = lf
    lo = _pct(np.where(np.isinf(lb), 1e300, lb), 5) if n_boot else np.full(nseg, np.nan)
    hi = _pct(np.where(np.isinf(lb), 1e300, lb), 95) if n_boot else np.full(nseg, np.nan)
    lo = np.where(lo >= 1e299, np.inf, lo)
    hi = np.where(hi >= 1e299, np.inf, hi)
    nodata = (agg["n"] == 0) & (ragg["n"] == 0)
    out["lensing_lo"] = np.where(nodata, np.nan, lo)
    out["lensing_hi"] = np.where(nodata, np.nan, hi)
    return ref_coast_e, ref_unassigned, ridx


def _amplitude_columns(out: pd.DataFrame, agg: dict, inc: np.ndarray, boot: np.ndarray, n_boot: int,
                       period_s: float, rho: float, gravity: float, max_incidence_deg: float) -> np.ndarray:
    """Indicative amplitudes at the stop isobath and at 1 m depth with intervals (in place); returns c_stop."""
    cos_inc = np.cos(np.radians(np.minimum(inc, max_incidence_deg)))
    with np.errstate(invalid="ignore", divide="ignore"):
        ew = out["energy_per_m"].to_numpy(float) / cos_inc
        c_stop = np.sqrt(gravity * agg["h"])
        a_stop = np.sqrt(2.0 * ew / (rho * gravity * c_stop * period_s))
        green = (agg["h"] / 1.0) ** 0.25
        a1 = a_stop * green
        a_boot = np.sqrt(2.0 * (boot / cos_inc) / (rho * gravity * c_stop * period_s)) * green
    out["amp_stop_m"] = np.where(agg["n"] > 0, a_stop, np.nan)
    out["amp_1m_m"] = np.where(agg["n"] > 0, a1, np.nan)
    if n_boot:
        out["amp_lo"] = np.where(agg["n"] > 0, _pct(a_boot, 5), np.nan)
        out["amp_hi"] = np.where(agg["n"] > 0, _pct(a_boot, 95), np.nan)
    else:
        out["amp_lo"] = out["amp_hi"] = np.nan
    out["c_stop_m_s"] = c_stop
    out["h_stop_m"] = agg["h"]
    return c_stop


def _fresnel_sigma_at_segments(out: pd.DataFrame, info: GridInfo, end: xr.Dataset, c_stop: np.ndarray,
                               period_s: float) -> np.ndarray:
    """Regularisation width at each segment: first Fresnel zone radius sqrt(lambda L) / 2, with the
    wavelength at the stop isobath and L the distance from the nearest launch point."""
    lp = np.unique(np.round(_to_xyz(info, end["launch_x"].values, end["launch_y"].values), 3), axis=0)
    dseg, _ = cKDTree(lp).query(_to_xyz(info, out["x_mid"].to_numpy(float), out["y_mid"].to_numpy(float)))
    if info.geographic:
        dseg = 2 * info.radius_m * np.arcsin(np.clip(dseg / (2 * info.radius_m), 0, 1))
    return 0.5 * np.sqrt(c_stop * period_s * dseg)


def _warn_on_coverage(out: pd.DataFrame, end: xr.Dataset, coast: np.ndarray, idx: np.ndarray, agg: dict,
                      ref_result: Any, ridx: np.ndarray | None, coast_area: Any, min_rays: int,
                      max_distance_m: float) -> None:
    """Warn (at the caller of segment_arrivals) when much energy is unassigned or no segment is reliable.

    Only rays that ended on the stop isobath inside ``coast_area`` count for the two coverage
    warnings. The reference-run warning blames the low-pass only when the reference run leaves
    clearly more energy off the segments than the real run (otherwise the coastline itself is off
    the stop isobath, which the other warning says).
    """
    w = np.asarray(end["weight"].values, float)

    def in_area(e: xr.Dataset, sel: np.ndarray) -> np.ndarray:
        if coast_area is None:
            return sel
        m = np.zeros(sel.shape, dtype=bool)
        k = np.flatnonzero(sel)
        if k.size:
            xk = np.asarray(e["x"].values, float)[k]
            yk = np.asarray(e["y"].values, float)[k]
            m[k] = np.asarray(coast_area(xk, yk), dtype=bool)
        return m

    sel = in_area(end, coast)
    e_coast = float(w[sel].sum())
    e_off = float(w[sel & (idx < 0)].sum())
    frac = e_off / e_coast if e_coast > 0 else 0.0
    out.attrs["energy_area_coast_J"] = e_coast
    out.attrs["energy_area_unassigned_J"] = e_off
    where = "the stop isobath" if coast_area is None else "the stop isobath on the coast of interest"
    if ref_result is not None and ridx is not None:
        rend = ref_result.end
        rw = np.asarray(rend["weight"].values, float)
        rsel = in_area(rend, np.asarray(rend["reason"].values) == REASON_COAST)
        r_coast = float(rw[rsel].sum())
        r_frac = float(rw[rsel & (ridx < 0)].sum()) / r_coast if r_coast > 0 else 0.0
        if r_frac > 0.25 and r_frac > frac + 0.10:
            warnings.warn(
                f"{100 * r_frac:.0f} % of the reference run's energy reaching {where} ends farther than "
                f"max_distance_m={max_distance_m:.0f} m from the segments ({100 * frac:.0f} % in the real run): "
                "the low-pass moved the stop isobath, so lensing factors near the coast are biased high; raise "
                "max_distance_m or use a larger stop depth",
                ResolutionWarning,
                stacklevel=3,
            )
    if e_coast > 0 and frac > 0.5:
        warnings.warn(
            f"{100 * frac:.0f} % of the energy reaching {where} lies farther than max_distance_m="
            f"{max_distance_m:.0f} m from every segment: raise max_distance_m ([coast] max_distance_m) if the "
            "coastline lies inshore of the stop isobath"
            + (", or segment the whole coast" if coast_area is None else ""),
            ResolutionWarning,
            stacklevel=3,
        )
    if not out["reliable"].to_numpy(bool).any():
        warnings.warn(
            f"no coastline segment has >= {min_rays} contributing rays"
            + (" in both runs" if ref_result is not None else "")
            + f" ({out.attrs['n_rays_assigned']} rays on {int((agg['n'] > 0).sum())} segments): rankings are "
            "unreliable; trace more rays or use longer segments",
            ResolutionWarning,
            stacklevel=3,
        )
