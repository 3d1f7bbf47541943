"""Arrivals of rays at coastline segments: energy, amplitude, first arrival per segment."""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from scipy import sparse
from scipy.spatial import cKDTree

from ..cautions import caution_summary
from ..coast.coastline import coastline_from_grid
from ..coast.tubes import TUBE_MIN_WIDTH, CoastGeometry, TubeDeposit, nearest_segment, tube_deposit, tube_steps
from ..constants import GRAVITY, RHO_SEAWATER
from ..errors import CoastError, InputError, ResolutionWarning
from ..grid import GridInfo
from ..ocean.smooth import _to_xyz
from ..propagation.rays import REASON_CODES, REASON_MEANINGS
from .ranking import _add_ranks, _pct

#: Ray end-reason code of "reached the stop isobath".
REASON_COAST = REASON_CODES["coast"]

__all__ = ["REASON_COAST", "BAND_NAMES", "BandTrace", "segment_arrivals"]

#: Names of the three octave bands (``T0 / 2``, ``T0``, ``2 T0``) in column names.
BAND_NAMES = ("short", "dominant", "long")


# --------------------------------------------------------------------------------------
# arrivals on coastline segments
# --------------------------------------------------------------------------------------
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
    # the contour in short pieces: the same nearest distances (the least over the same edges),
    # without measuring every point against whole lines thousands of vertices long
    geoms = _pieces(geoms, 32)
    pts = shapely.points(np.column_stack([segments["x_mid"].to_numpy(float) * kx, segments["y_mid"].to_numpy(float)]))
    tree = shapely.STRtree(geoms)
    _, dist = tree.query_nearest(pts, return_distance=True, all_matches=False)
    offset = float(np.median(dist)) * k if len(dist) else 0.0
    return base + 1.5 * offset


def _pieces(lines: np.ndarray, n: int) -> np.ndarray:
    """The lines cut into pieces of at most ``n`` edges (consecutive pieces share a vertex)."""
    import shapely

    xy, which = shapely.get_coordinates(lines, return_index=True)
    if xy.shape[0] == 0:
        return lines
    count = np.bincount(which, minlength=len(lines))
    start = np.cumsum(count) - count
    edges = np.maximum(count - 1, 0)
    npiece = -(-edges // n)
    owner = np.repeat(np.arange(len(lines)), npiece)
    first = np.repeat(start, npiece) + n * (np.arange(owner.size) - np.repeat(np.cumsum(npiece) - npiece, npiece))
    last = np.minimum(first + n, np.repeat(start + count - 1, npiece))  # inclusive
    size = last - first + 1
    take = np.repeat(first, size) + np.arange(int(size.sum())) - np.repeat(np.cumsum(size) - size, size)
    return shapely.linestrings(xy[take], indices=np.repeat(np.arange(owner.size), size))


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


@dataclass
class BandTrace:
    """The rays of one period band: over the real-ocean medium and over the reference medium.

    Attributes
    ----------
    period_s : float
        Band period [s].
    weight : float
        Share of the source energy in the band (weights of all bands sum to 1).
    real : RayResult
        Trace over the (wavelength-smoothed) real bathymetry.
    reference : RayResult or None
        The same fan over the (wavelength-smoothed) reference bathymetry.
    """

    period_s: float
    weight: float
    real: Any
    reference: Any | None = None


def _as_bands(result: Any, ref_result: Any | None, period_s: float,
              bands: Sequence[BandTrace] | None) -> list[BandTrace]:
    if bands is None:
        return [BandTrace(float(period_s), 1.0, result, ref_result)]
    bands = list(bands)
    total = sum(float(b.weight) for b in bands)
    if not bands or not (np.isfinite(total) and total > 0):
        raise InputError("bands: expected at least one BandTrace with a positive weight")
    return [BandTrace(float(b.period_s), float(b.weight) / total, b.real, b.reference) for b in bands]


def _boot_energy(matrices: Sequence[tuple[float, sparse.csr_matrix]], nseg: int, n_boot: int,
                 rng: np.random.Generator) -> np.ndarray:
    """Poisson-bootstrap replicates over rays of ``sum_b w_b (matrix_b^T counts)`` [J], (n_boot, nseg).

    The same ray multiplicities serve every matrix (the bands share the fan's rays).
    """
    if n_boot <= 0 or not matrices:
        return np.zeros((0, nseg))
    n_rays = matrices[0][1].shape[0]
    chunk = max(1, int(2e6 // max(n_rays, 1)))
    # only rays that gave energy enter the products (the same sums, in the same order)
    rows = np.flatnonzero(np.logical_or.reduce([np.diff(m.tocsr().indptr) > 0 for _, m in matrices]))
    subs = [(wb, m.tocsr()[rows]) for wb, m in matrices]
    out = []
    for b0 in range(0, n_boot, chunk):
        counts = rng.poisson(1.0, size=(min(n_boot, b0 + chunk) - b0, n_rays))  # every ray drawn: one stream
        cr = np.ascontiguousarray(counts[:, rows].T, dtype=float)
        acc = np.zeros((counts.shape[0], nseg))
        for wb, m in subs:
            acc += wb * np.asarray((m.T @ cr).T)
        out.append(acc)
    return np.concatenate(out)


def _deposits(bands: list[BandTrace], which: str, segments: pd.DataFrame, depth: xr.DataArray,
              geo: CoastGeometry, max_distance_m: float, min_width_factor: float,
              max_incidence_deg: float, rotations: int, steps_cache: list) -> list[TubeDeposit] | None:
    runs = [getattr(b, which) for b in bands]
    if any(r is None for r in runs):
        return None
    # K interleaved rotations of a fan: each tube spans its own rotation's launch step, K times the
    # spacing of the pooled azimuths (so the deposits are the mean of the K fans' deposits)
    return [tube_deposit(segments, r.end, depth, steps=rotations * _fan_steps(r.end, geo, steps_cache),
                         period_s=b.period_s,
                         max_distance_m=max_distance_m, min_width_factor=min_width_factor,
                         max_incidence_deg=max_incidence_deg, coast=geo) for b, r in zip(bands, runs)]


_LAUNCH_VARS = ("launch_x", "launch_y", "launch_azimuth_deg", "q0")


def _fan_steps(end: xr.Dataset, geo: CoastGeometry, cache: list) -> np.ndarray:
    """:func:`tube_steps` of a trace, computed once for every trace of the same fan (``cache``)."""
    launch = [np.asarray(end[v].values) if v in end else None for v in _LAUNCH_VARS]
    for key, steps in cache:
        if all((a is None and b is None) or (a is not None and b is not None and np.array_equal(a, b))
               for a, b in zip(key, launch)):
            return steps
    steps = tube_steps(end, geo.info)
    cache.append((launch, steps))
    return steps


def _combined(bands: list[BandTrace], deps: list[TubeDeposit], length: np.ndarray) -> dict[str, np.ndarray]:
    """Spectrum-weighted energy per metre [J m-1], shadow flags and per-band values."""
    w = np.array([b.weight for b in bands])
    dom = int(np.argmax(w))
    per_band = np.array([np.where(d.shadow, np.maximum(d.energy_J, d.shadow_energy_J), d.energy_J) / length
                         for d in deps])
    # at the segment's most exposed point (a shadow's estimate is a mean: its value stays)
    peak_band = np.array([np.where(d.shadow, pb, np.maximum(d.peak_per_m, pb)) for pb, d in zip(per_band, deps)])
    return {
        "peak_band": peak_band,
        "peak_per_m": w @ peak_band,
        "energy_J": np.sum([wb * d.energy_J for wb, d in zip(w, deps)], axis=0),
        "capped_J": np.sum([wb * d.capped_energy_J for wb, d in zip(w, deps)], axis=0),
        "per_m": w @ per_band,
        "per_band": per_band,
        "shadow": deps[dom].shadow,
        "n_tubes": deps[dom].n_rays,
    }


def _amplitudes(bands: list[BandTrace], per_band: np.ndarray, cos_inc: np.ndarray, h_stop: np.ndarray,
                rho: float, gravity: float) -> tuple[np.ndarray, np.ndarray]:
    """Per-band and spectrum-combined indicative amplitude at the stop isobath [m].

    Each band carries its energy as one sinusoidal wavelength ``c_stop T_b``:
    ``a_b = sqrt(2 E_w,b / (rho g c_stop T_b))``, ``E_w = energy_per_m / cos(incidence)``; the
    bands add in energy, ``a = sqrt(sum_b w_b a_b^2)``.
    """
    c_stop = np.sqrt(gravity * h_stop)
    with np.errstate(invalid="ignore", divide="ignore"):
        a_b = np.array([np.sqrt(2.0 * (e / cos_inc) / (rho * gravity * c_stop * b.period_s))
                        for b, e in zip(bands, per_band)])
    w = np.array([b.weight for b in bands])
    return a_b, np.sqrt(w @ a_b**2)


def _band_columns(out: pd.DataFrame, bands: list[BandTrace], real_b: np.ndarray, ref_b: np.ndarray | None,
                  a_b: np.ndarray) -> None:
    """Per-band lensing factor and amplitude columns (``_short``, ``_dominant``, ``_long``)."""
    if len(bands) == 3:
        names: tuple[str, ...] = BAND_NAMES
    elif len(bands) == 1:
        names = ("dominant",)
    else:
        names = tuple(f"band{i + 1}" for i in range(len(bands)))
    for i, name in enumerate(names):
        with np.errstate(invalid="ignore", divide="ignore"):
            lf = real_b[i] / ref_b[i] if ref_b is not None else np.full(len(out), np.nan)
        out[f"lensing_{name}"] = np.where(np.isfinite(lf), lf, np.nan)
        out[f"amp_stop_{name}_m"] = a_b[i]


def _interval(boot: np.ndarray, q: float, nodata: np.ndarray) -> np.ndarray:
    v = _pct(np.where(np.isinf(boot), 1e300, boot), q)
    return np.where(nodata, np.nan, np.where(v >= 1e299, np.inf, v))


def _fresnel_width(out: pd.DataFrame, end: xr.Dataset, info: GridInfo, c_stop: np.ndarray,
                   period_s: float) -> np.ndarray:
    """First-Fresnel-zone radius ``sqrt(c_stop T L) / 2`` at each segment [m]."""
    lp = np.unique(np.round(_to_xyz(info, end["launch_x"].values, end["launch_y"].values), 3), axis=0)
    dseg, _ = cKDTree(lp).query(_to_xyz(info, out["x_mid"].to_numpy(float), out["y_mid"].to_numpy(float)))
    if info.geographic:
        dseg = 2 * info.radius_m * np.arcsin(np.clip(dseg / (2 * info.radius_m), 0, 1))
    return 0.5 * np.sqrt(c_stop * period_s * dseg)


def _descriptive(segments: pd.DataFrame, end: xr.Dataset, info: GridInfo, max_distance_m: float,
                 stop: float, geo: CoastGeometry) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """Nearest-segment assignment of the dominant band's coast rays: times, directions, depths."""
    reason = np.asarray(end["reason"].values)
    coast = reason == REASON_COAST
    if not coast.any():
        counts = {REASON_MEANINGS.get(int(c), str(c)): int((reason == c).sum()) for c in np.unique(reason)}
        raise CoastError(
            f"no ray reached the stop isobath ({stop:g} m); ray ends: {counts}. Lower stop_depth_m, "
            f"raise max_time_s, widen the grid or aim the source at the coast - no ranking can be made"
        )
    idx = np.full(int(end.sizes["ray"]), -1, dtype=np.int64)
    ci = np.flatnonzero(coast)
    idx[ci], _ = nearest_segment(segments, info, np.asarray(end["x"].values, float)[ci],
                         np.asarray(end["y"].values, float)[ci], max_distance_m, geo.index)
    if not (idx >= 0).any():
        raise CoastError(
            f"{ci.size} rays reached the stop isobath but none within max_distance_m="
            f"{max_distance_m:.0f} m of a coastline segment: raise max_distance_m or use a "
            f"coastline nearer the stop isobath (e.g. coastline_from_grid(depth, {stop:g}))"
        )
    agg = _per_segment(end, idx, len(segments))
    out = segments.copy()
    out["n_hits"] = agg["n"].astype(np.int64)
    out["first_arrival_s"] = agg["t"]
    out["caustics_mean"] = agg["caustics_mean"]
    out["arrival_azimuth_deg"] = agg["az"]
    # a segment no ray ends at is taken as hit head-on
    landward = (out["normal_azimuth_deg"].to_numpy(float) + 180.0) % 360.0
    hit = np.isfinite(agg["az"])
    out["incidence_deg"] = np.where(hit, np.minimum(_angle_diff(np.where(hit, agg["az"], 0.0), landward), 90.0), 0.0)
    h = np.where(np.isfinite(agg["h"]), agg["h"], stop)
    return out, h, idx


def segment_arrivals(
    segments: pd.DataFrame,
    result: Any,
    depth: xr.DataArray,
    *,
    period_s: float,
    ref_result: Any | None = None,
    bands: Sequence[BandTrace] | None = None,
    max_distance_m: float | None = None,
    min_rays: int = 10,
    n_boot: int = 200,
    seed: int = 0,
    rho: float = RHO_SEAWATER,
    gravity: float = GRAVITY,
    max_incidence_deg: float = 80.0,
    min_width_factor: float = TUBE_MIN_WIDTH,
    coast_area: Any = None,
    rotations: int = 1,
) -> pd.DataFrame:
    """Energy, arrival time, direction, lensing factor and indicative amplitude per segment.

    Energies come from ray tubes (:func:`tsunamifocus.coast.tubes.tube_deposit`): every ray that
    ended on the stop isobath within ``max_distance_m`` of a segment spreads its weight over its
    tube's footprint on the coast, so each segment's energy is a deterministic sum over the fan,
    not a count of hits. With ``bands`` (one :class:`BandTrace` per period band of the source),
    energies are combined with the bands' energy shares.

    Columns added to the segments table:

    * ``n_rays`` - ray tubes contributing (dominant band); ``n_hits`` - rays ending nearest to
      the segment; ``energy_J`` [J] deposited (the budget's share); ``energy_per_m`` [J m-1] -
      energy crossing the stop isobath per metre of coast (for a ray shadow, the
      Fresnel-width estimate); ``peak_energy_per_m`` [J m-1] - the same at the segment's most
      exposed point (the footprints' Gaussian profiles summed along the segment and maximised,
      :attr:`TubeDeposit.peak_per_m`; the wave check takes its maxima over the segment's cells
      alike); ``shadow`` - no tube footprint covers the segment (dominant band; value estimated,
      not ranked);
    * ``capped_share`` - the share of ``energy_J`` that came in tubes whose linearised width
      reached the first Fresnel zone (rays past their predictability, spectrum-weighted; the
      main source of seed-to-seed scatter on trans-ocean paths, docs/focusing.md);
    * ``first_arrival_s``, ``caustics_mean``, ``arrival_azimuth_deg``, ``incidence_deg`` - from
      the rays ending nearest to the segment (dominant band; head-on where none ends);
    * ``ref_n_rays``, ``ref_energy_per_m``, ``ref_peak_energy_per_m``, ``lensing_factor =
      peak_energy_per_m / ref_peak_energy_per_m`` (at the most exposed point, like the amplitude);
      ``lensing_<band>`` and ``amp_stop_<band>_m`` per band (``short``, ``dominant``, ``long``);
    * ``amp_stop_m`` - indicative amplitude at the stop isobath at the segment's most exposed
      point, each band's energy carried by one sinusoidal wavelength ``c_stop T_b`` (``a_b =
      sqrt(2 E_w / (rho g c_stop T_b))``, ``E_w = peak energy per metre / cos(incidence)``,
      incidence capped at ``max_incidence_deg``), bands added in energy; ``amp_1m_m`` - Green's
      law (Green 1838) to 1 m depth, indicative only;
    * ``lensing_lo/hi``, ``amp_lo/hi`` - 5-95 % Poisson bootstrap over rays (each ray drawn
      Poisson(1) times, one draw shared by all bands of a run), seeded: the sampling
      uncertainty that remains with tube energies;
    * ``fresnel_sigma_m``, ``c_stop_m_s``, ``h_stop_m``; ``reliable`` - covered by tubes in
      both runs and at least ``min_rays`` contributing tubes in each (the lensing ranking's
      segments); ``amp_reliable`` - the same in the real run alone (the amplitude ranking's
      segments: the amplitude does not depend on the reference ocean); ``rank_lensing``,
      ``rank_amplitude``.

    Parameters
    ----------
    segments : pandas.DataFrame
        From :func:`tsunamifocus.coast.segments.segment_coastline`.
    result : RayResult
        Run over the real bathymetry (ignored when ``bands`` is given).
    depth : xarray.DataArray
        The depth grid of the run (for geometry).
    period_s : float
        Dominant period of the source [s].
    ref_result : RayResult, optional
        The same source over the reference bathymetry (ignored when ``bands`` is given).
    bands : sequence of BandTrace, optional
        Traces per period band with their energy shares.
    max_distance_m : float, optional
        Largest ray-end to segment distance [m]; default 3 grid cells plus 1.5 times the
        median distance from the segment centres to the grid's stop-isobath contour.
    min_rays : int
        Contributing ray tubes needed for ``reliable``.
    n_boot, seed : int
        Bootstrap replicates and seed.
    rho, gravity : float
        Sea-water density [kg m-3], gravity [m s-2].
    max_incidence_deg : float
        Incidence cap [deg].
    min_width_factor : float
        Smallest tube footprint in local wavelengths (caustic regularisation).
    coast_area : callable, optional
        ``coast_area(x, y) -> bool array`` (grid CRS): where the coast of interest lies. The two
        coverage warnings (coast energy left unassigned; reference run moved off the segments)
        compare only the energy of rays ending there, so a coastline file or region covering
        part of a large grid does not count the energy reaching every other coast as missing.
        Default: the whole grid.
    rotations : int
        Rotated copies of the fan in the traces (:func:`tsunamifocus.source.rayfan.make_ray_fan`):
        each tube is ``rotations`` pooled launch steps wide, and ``reliable`` needs ``min_rays``
        tubes per rotation.

    Returns
    -------
    pandas.DataFrame
        The segments table with the arrival columns; ``attrs`` carry the cautions, the
        assignment figures and the method notes.

    Raises
    ------
    CoastError
        If no ray reached the stop isobath, or none was within ``max_distance_m`` of a segment.
    """
    if segments is None or len(segments) == 0:
        raise CoastError("segment_arrivals: the segments table is empty (build it with segment_coastline)")
    if not (np.isfinite(period_s) and period_s > 0):
        raise InputError(f"period_s={period_s}: expected the source's dominant period in seconds (> 0)")
    bl = _as_bands(result, ref_result, period_s, bands)
    dom = int(np.argmax([b.weight for b in bl]))
    info = GridInfo.from_dataarray(depth)
    end = bl[dom].real.end
    stop = float(end.attrs.get("stop_depth_m", np.nan))
    if max_distance_m is None:
        max_distance_m = _default_max_distance(segments, depth, info, stop)
    geo = CoastGeometry.build(segments, depth)  # once for all bands and both oceans
    out, h_stop, idx = _descriptive(segments, end, info, max_distance_m, stop, geo)
    length = segments["length_m"].to_numpy(float)
    rotations = int(rotations)
    if rotations < 1:
        raise InputError(f"rotations={rotations!r}: expected a count of fan rotations >= 1")
    # one fan: its steps once
    args = (segments, depth, geo, max_distance_m, min_width_factor, max_incidence_deg, rotations, [])
    real_d = _deposits(bl, "real", *args)
    ref_d = _deposits(bl, "reference", *args)
    rng = np.random.default_rng(seed)
    real, ref = _energy_columns(out, bl, real_d, ref_d, length, n_boot, rng)
    _amplitude_columns(out, bl, real, ref, h_stop, n_boot, max_incidence_deg, rho, gravity)
    out["fresnel_sigma_m"] = _fresnel_width(out, end, info, out["c_stop_m_s"].to_numpy(float), bl[dom].period_s)
    # the amplitude needs the real run's tubes only; the lensing factor the reference run's too
    # at least min_rays tubes per fan rotation (rotated copies of one tube are not more paths)
    amp_rel = ~real["shadow"] & (real["n_tubes"] >= int(min_rays) * rotations)
    rel = amp_rel.copy()
    if ref is not None:
        rel &= ~ref["shadow"] & (ref["n_tubes"] >= int(min_rays) * rotations)
    if "reachable" in out:  # water the wave cannot reach is neither a shadow nor ranked
        reach = out["reachable"].to_numpy(bool)
        rel &= reach
        amp_rel &= reach
        for c in ("shadow", "ref_shadow"):
            if c in out:
                out[c] = out[c].to_numpy(bool) & reach
    out["reliable"] = rel
    out["amp_reliable"] = amp_rel
    out = _add_ranks(out, ref is not None)
    _arrival_attrs(out, bl, real_d, ref_d, idx, end, max_distance_m, min_rays, n_boot, seed, period_s, coast_area,
                   min_width_factor)
    out.attrs["rotations"] = rotations
    _arrival_warnings(out, max_distance_m, min_rays, ref is not None, coast_area is not None)
    return out


def _energy_columns(out: pd.DataFrame, bl: list[BandTrace], real_d: list[TubeDeposit],
                    ref_d: list[TubeDeposit] | None, length: np.ndarray, n_boot: int,
                    rng: np.random.Generator) -> tuple[dict, dict | None]:
    """Energy, lensing factor and their bootstrap columns; returns the combined real/reference values."""
    real = _combined(bl, real_d, length)
    out["n_rays"] = real["n_tubes"].astype(np.int64)
    out["energy_J"] = real["energy_J"]
    with np.errstate(invalid="ignore", divide="ignore"):
        out["capped_share"] = np.where(real["energy_J"] > 0, real["capped_J"] / real["energy_J"], np.nan)
    out["energy_per_m"] = real["per_m"]
    out["peak_energy_per_m"] = real["peak_per_m"]
    out["shadow"] = real["shadow"]
    real["boot"] = _boot_energy([(b.weight, d.matrix) for b, d in zip(bl, real_d)], len(out), n_boot, rng) / length
    if ref_d is None:
        out["ref_n_rays"] = pd.array([pd.NA] * len(out), dtype="Int64")
        for c in ("ref_energy_per_m", "ref_peak_energy_per_m", "lensing_factor", "lensing_lo", "lensing_hi"):
            out[c] = np.nan
        return real, None
    ref = _combined(bl, ref_d, length)
    out["ref_n_rays"] = ref["n_tubes"].astype(np.int64)
    out["ref_energy_per_m"] = ref["per_m"]
    out["ref_peak_energy_per_m"] = ref["peak_per_m"]
    out["ref_shadow"] = ref["shadow"]
    rboot = _boot_energy([(b.weight, d.matrix) for b, d in zip(bl, ref_d)], len(out), n_boot, rng) / length
    boot = real["boot"]
    with np.errstate(invalid="ignore", divide="ignore"):
        pr, pf = real["peak_per_m"], ref["peak_per_m"]
        lf = np.where(pf > 0, pr / np.where(pf > 0, pf, 1.0), np.nan)
        # the bootstrap replicates are segment totals: their spread is carried over as a ratio to
        # the totals' own lensing factor
        lf_tot = np.where(ref["per_m"] > 0, real["per_m"] / np.where(ref["per_m"] > 0, ref["per_m"], 1.0), np.nan)
        to_peak = np.where(np.isfinite(lf) & (lf_tot > 0), lf / np.where(lf_tot > 0, lf_tot, 1.0), 1.0)
        lb = np.where(rboot > 0, boot / np.where(rboot > 0, rboot, 1.0), np.inf) * to_peak
        lb = np.where((boot == 0) & (rboot == 0), np.nan, lb)
    nodata = ~np.isfinite(lf)
    out["lensing_factor"] = lf
    out["lensing_lo"] = _interval(lb, 5, nodata) if n_boot else np.nan
    out["lensing_hi"] = _interval(lb, 95, nodata) if n_boot else np.nan
    return real, ref


def _amplitude_columns(out: pd.DataFrame, bl: list[BandTrace], real: dict, ref: dict | None, h_stop: np.ndarray,
                       n_boot: int, max_incidence_deg: float, rho: float, gravity: float) -> None:
    """Indicative amplitudes (combined and per band) and their bootstrap interval."""
    cos_inc = np.cos(np.radians(np.minimum(out["incidence_deg"].to_numpy(float), max_incidence_deg)))
    a_b, a_stop = _amplitudes(bl, real["peak_band"], cos_inc, h_stop, rho, gravity)
    _band_columns(out, bl, real["peak_band"], ref["peak_band"] if ref is not None else None, a_b)
    green = h_stop**0.25
    has = real["per_m"] > 0
    out["amp_stop_m"] = np.where(has, a_stop, np.nan)
    out["amp_1m_m"] = np.where(has, a_stop * green, np.nan)
    if n_boot:
        # the amplitude scales as sqrt(energy): replicate energies map through that factor
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = np.where(has, a_stop / np.sqrt(np.where(has, real["per_m"], 1.0)), np.nan)
        a_boot = np.sqrt(np.maximum(real["boot"], 0.0)) * scale * green
        out["amp_lo"] = np.where(has, _pct(a_boot, 5), np.nan)
        out["amp_hi"] = np.where(has, _pct(a_boot, 95), np.nan)
    else:
        out["amp_lo"] = out["amp_hi"] = np.nan
    out["c_stop_m_s"] = np.sqrt(gravity * h_stop)
    out["h_stop_m"] = h_stop


def _bookkeeping(bands: list[BandTrace], deps: list[TubeDeposit], which: str,
                 coast_area: Any = None) -> tuple[float, float]:
    """Spectrum-weighted energy [J] that reached the stop isobath (inside ``coast_area`` when given),
    and the part no segment took."""
    coast = unassigned = 0.0
    for b, d in zip(bands, deps):
        end = getattr(b, which).end
        w = np.asarray(end["weight"].values, float)
        at_coast = np.asarray(end["reason"].values) == REASON_COAST
        if coast_area is not None and at_coast.any():
            k = np.flatnonzero(at_coast)
            at_coast[k] = np.asarray(coast_area(np.asarray(end["x"].values, float)[k],
                                                np.asarray(end["y"].values, float)[k]), dtype=bool)
        coast += b.weight * float(w[at_coast].sum())
        unassigned += b.weight * float(w[at_coast & ~d.assigned].sum())
    return coast, unassigned


def _arrival_attrs(out: pd.DataFrame, bands: list[BandTrace], real_d: list[TubeDeposit],
                   ref_d: list[TubeDeposit] | None, idx: np.ndarray, end: xr.Dataset, max_distance_m: float,
                   min_rays: int, n_boot: int, seed: int, period_s: float, coast_area: Any = None,
                   min_width_factor: float = TUBE_MIN_WIDTH) -> None:
    e_coast, e_unassigned = _bookkeeping(bands, real_d, "real")
    a_coast, a_unassigned = _bookkeeping(bands, real_d, "real", coast_area) if coast_area is not None \
        else (e_coast, e_unassigned)
    out.attrs.update({
        "cautions": caution_summary(),
        "n_rays_total": int(end.sizes["ray"]),
        "n_rays_coast": int(np.sum(np.asarray(end["reason"].values) == REASON_COAST)),
        "n_rays_assigned": int((idx >= 0).sum()),
        "energy_coast_J": e_coast,
        "energy_assigned_J": float(out["energy_J"].sum()),
        "energy_coast_unassigned_J": e_unassigned,
        "energy_area_coast_J": a_coast,
        "energy_area_unassigned_J": a_unassigned,
        "max_distance_m": float(max_distance_m),
        "min_rays": int(min_rays),
        "n_boot": int(n_boot),
        "seed": int(seed),
        "period_s": float(period_s),
        "band_periods_s": [b.period_s for b in bands],
        "band_weights": [b.weight for b in bands],
        "energy_method": "ray tubes: each coast ray's weight spread over |q| dgamma / cos(incidence) of coast "
                         f"(Gaussian, at least {min_width_factor:g} local wavelengths wide); bands combined by their "
                         "energy shares",
        "amplitude_method": "a_b = sqrt(2 E_w / (rho g c_stop T_b)), E_w = peak_energy_per_m / cos(incidence) "
                            "(the segment's most exposed point; lensing_factor likewise), "
                            "a = sqrt(sum_b w_b a_b^2); a_1m = a_stop (h_stop / 1 m)^(1/4) (Green's law) - "
                            "indicative",
        "interval_method": f"5-95 % Poisson bootstrap over rays, {n_boot} replicates, seed {seed}",
    })
    if ref_d is not None:
        r_coast, r_unassigned = _bookkeeping(bands, ref_d, "reference")
        out.attrs["ref_energy_coast_J"] = r_coast
        out.attrs["ref_energy_coast_unassigned_J"] = r_unassigned
        ra_coast, ra_unassigned = _bookkeeping(bands, ref_d, "reference", coast_area) if coast_area is not None \
            else (r_coast, r_unassigned)
        out.attrs["ref_energy_area_coast_J"] = ra_coast
        out.attrs["ref_energy_area_unassigned_J"] = ra_unassigned


def _arrival_warnings(out: pd.DataFrame, max_distance_m: float, min_rays: int, have_ref: bool,
                      has_area: bool = False) -> None:
    """Warn when much of the energy reaching the coast of interest is left off the segments.

    Only rays that ended on the stop isobath inside the coast of interest count. The reference
    run is blamed only when it leaves clearly more energy off the segments than the real run
    (otherwise the coastline itself is off the stop isobath, which the second warning says).
    """
    a = out.attrs
    where = "the stop isobath on the coast of interest" if has_area else "the stop isobath"
    real_frac = a["energy_area_unassigned_J"] / a["energy_area_coast_J"] if a["energy_area_coast_J"] > 0 else 0.0
    if have_ref and a["ref_energy_area_coast_J"] > 0:
        ref_frac = a["ref_energy_area_unassigned_J"] / a["ref_energy_area_coast_J"]
        # only the reference's own loss means it moved the stop isobath
        if ref_frac > 0.25 and ref_frac > real_frac + 0.15:
            warnings.warn(
                f"{100 * ref_frac:.0f} % of the reference run's coastal energy ends farther than max_distance_m="
                f"{max_distance_m:.0f} m from the segments, against {100 * real_frac:.0f} % of the real run's (the "
                "reference moved the stop isobath): lensing factors near the coast are biased high; raise "
                "max_distance_m or use a larger stop depth",
                ResolutionWarning,
                stacklevel=3,
            )
    if real_frac > 0.5:
        warnings.warn(
            f"{100 * real_frac:.0f} % of the energy reaching {where} lies farther than max_distance_m="
            f"{max_distance_m:.0f} m from every segment: raise max_distance_m ([coast] max_distance_m) if the "
            "coastline lies inshore of the stop isobath" + ("" if has_area else ", or segment the whole coast"),
            ResolutionWarning,
            stacklevel=3,
        )
    if not out["reliable"].any():
        warnings.warn(
            f"no coastline segment is covered by >= {min_rays} ray tubes" + (" in both runs" if have_ref else "")
            + f" ({int((out['n_rays'] > 0).sum())} segments reached): rankings are unreliable; "
            "trace more rays or use longer segments",
            ResolutionWarning,
            stacklevel=3,
        )
