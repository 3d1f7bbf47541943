"""Focusing maps, branch diagnostics, coastal arrivals and hotspot rankings.

Screening estimates only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Everything here post-processes ray runs of :func:`tsunamifocus.rays.trace_rays`:

* **Regularised energy map** - the ray engine's energy per unit wavefront width [J m-1]
  smoothed by a Gaussian whose standard deviation is a quarter of the local wavelength,
  ``sigma = 0.25 lambda`` with ``lambda = c(x) T`` the long-wave wavelength of the lensing
  reference at the source's dominant period ``T`` (:func:`~tsunamifocus.focusing.energy.wavelength_sigma_m`,
  the same fraction as the oceans' wavelength smoothing). Ray-density detail finer than a
  wavelength is not physical, and the kernel keeps the ray-theory singularities at caustics
  finite. Held against the wave's own lensing map, maps so regularised agree with it better
  than maps smoothed over the first Fresnel zone half-way along the path, ``sqrt(lambda L) / 2``
  (Born & Wolf, Principles of Optics, ch. 8), which grows to hundreds of km on trans-ocean
  paths and blurs away the beams the wave has (Spearman over deep water 0.74 against 0.52 on
  the demo, 0.65 against 0.50 on a trans-Pacific case; docs/focusing.md).
* **Lensing factor** - the regularised energy map over the real bathymetry divided by that of
  the same source traced over a reference bathymetry with the same mean depth but without the
  variations shorter than a user-set low-pass scale. It isolates the focusing caused by those
  variations from plain spreading and from the large-scale shoaling/refraction.
* **Focusing factor** - the same ratio against a traced run over a constant-depth ocean (the
  mean sea depth everywhere, no land): focusing relative to undisturbed geometric spreading.
  A trace (rather than a closed formula) is used so extended sources and any azimuthal energy
  pattern are handled exactly; for an isotropic point source it reproduces the analytic
  ``E / (2 pi r)`` (:func:`point_source_energy_width`), which the tests check.
* **Branch diagnostics** - caustics versus distance, distance to the first caustic, the
  scintillation index, and the expected distance to strong random focusing
  (:func:`predicted_focusing_distance`, Kaplan 2002; Degueldre et al. 2016).
* **Arrivals, amplitudes, rankings** - :func:`segment_arrivals`, :func:`rank_segments`.
* **Energy bookkeeping** - :func:`energy_budget`.

Units: SI throughout (m, s, J); azimuths in degrees clockwise from (grid) north.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from scipy.spatial import cKDTree

from ..cautions import caution_summary
from ..coast.coastline import coastline_from_grid
from ..coast.segments import segment_coastline
from ..coast.tubes import TUBE_MIN_WIDTH
from ..constants import GRAVITY, STOP_DEPTH_M
from ..errors import InputError
from ..grid import GridInfo
from ..ocean.reference import flat_depth, reference_depth
from ..ocean.smooth import _sea, _to_xyz, smooth_bathymetry
from ..ocean.wavelength import WAVELENGTH_FRACTION, wavelength_smoothed_depths
from ..propagation.rays import trace_rays
from .arrivals import REASON_COAST, BandTrace, segment_arrivals
from .branches import branch_diagnostics
from .budget import energy_budget
from .energy import distance_to_launch_m, ratio_map, regularised_energies, wavelength_sigma_m
from .randommedium import fluctuation_statistics
from .ranking import rank_segments

__all__ = ['FLAT_RAY_STRIDE', 'MAX_STEP_WIDTHS', 'REASON_COAST', 'SMOOTHED_CELLS_PER_STEP', 'FocusingResult', 'ReferenceOcean', 'analyse_focusing',
           'default_reference_smooth_km', 'reference_ocean']

#: Default RK4 step of the focusing traces, in cell crossings at the fastest speed. The media are
#: wavelength-smoothed: in deep water, where the speed is highest, the smoothing std (a quarter
#: of a wavelength: about 40 km for a 13-minute band over 4 km of water) spans several cells of a
#: 0.1-degree grid, so three cells per step keep the fourth-order integration accurate; near the
#: coast the same time step covers a fraction of a cell. On the real-grid benchmark case, 1 and 3 cells per step gave
#: amplitude rankings agreeing with the wave equally well (Spearman 0.90 and 0.89) at a third of
#: the tracing time (docs/focusing.md).
SMOOTHED_CELLS_PER_STEP: float = 3.0

#: Longest RK4 step of the focusing traces, in smoothing widths of the band's medium: each ray
#: steps :data:`SMOOTHED_CELLS_PER_STEP` crossings of its own cell at its own speed
#: (:func:`tsunamifocus.propagation.rays.trace_rays` ``max_step_s``), at most the time a wave of
#: the band takes to cross this many Gaussian widths ``fraction x c T`` of the wavelength
#: smoothing - ``max_step_s = MAX_STEP_WIDTHS x fraction x T``, whatever the depth.
MAX_STEP_WIDTHS: float = 1.0

#: The constant-depth trace (the focusing factor's denominator) takes every this-many-th ray of
#: fans of at least 1000 times as many rays, its weights scaled to the fan's energy.
FLAT_RAY_STRIDE: int = 4




# --------------------------------------------------------------------------------------
# one-call analysis
# --------------------------------------------------------------------------------------
@dataclass
class FocusingResult:
    """Everything :func:`analyse_focusing` computes for one source.

    Attributes
    ----------
    energy : xarray.DataArray
        Regularised energy per unit wavefront width over the real bathymetry [J m-1].
    energy_raw : xarray.DataArray
        Unregularised ray energy map [J m-1].
    lensing_factor, focusing_factor : xarray.DataArray
        Ratios [-] to the reference-bathymetry and constant-depth runs.
    travel_time_min : xarray.DataArray
        First-arrival time [min]: the earliest ray here; a run (studies.run) replaces it with the eikonal layer.
    kernel_sigma_m : xarray.DataArray
        Regularisation width [m].
    reference_depth : xarray.DataArray
        Same-mean low-passed bathymetry [m].
    segments : pandas.DataFrame
        Segment table with arrivals and ranks.
    ranking : pandas.DataFrame
        :func:`rank_segments` by lensing factor.
    diagnostics : dict
        :func:`branch_diagnostics`.
    budget : dict
        :func:`energy_budget`.
    runs : dict
        The RayResults ``real``, ``reference`` (dominant band), ``flat``, and ``bands`` (all
        :class:`~tsunamifocus.focusing.arrivals.BandTrace`).
    cautions : str
        Caution text.
    ray_depth : xarray.DataArray
        The real bathymetry as the dominant band's wave sees it (what its rays were traced on) [m].
    ray_reference_depth : xarray.DataArray
        The lensing reference as the dominant band's wave sees it (what its reference rays were
        traced on) [m].
    reference_smooth_km : float
        Low-pass scale of the reference [km].
    bands : list of (float, float)
        ``(period_s, weight)`` of the bands.
    """

    energy: xr.DataArray
    energy_raw: xr.DataArray
    lensing_factor: xr.DataArray
    focusing_factor: xr.DataArray
    travel_time_min: xr.DataArray
    kernel_sigma_m: xr.DataArray
    reference_depth: xr.DataArray
    segments: pd.DataFrame
    ranking: pd.DataFrame
    diagnostics: dict
    budget: dict
    runs: dict = field(default_factory=dict)
    cautions: str = ""
    ray_depth: xr.DataArray | None = None
    ray_reference_depth: xr.DataArray | None = None
    reference_smooth_km: float = float("nan")
    bands: list = field(default_factory=list)


def _fan_arrays(fan: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, float | None]:
    if all(hasattr(fan, a) for a in ("x0", "y0", "azimuth_deg", "weights")):
        return (np.asarray(fan.x0, float), np.asarray(fan.y0, float), np.asarray(fan.azimuth_deg, float),
                np.asarray(fan.weights, float), getattr(fan, "energy_J", None))
    if isinstance(fan, (tuple, list)) and len(fan) == 4:
        x0, y0, az, w = (np.asarray(a, float) for a in fan)
        return x0, y0, az, w, None
    raise InputError("fan: expected a RayFan or a tuple (x0, y0, azimuth_deg, weights)")


def default_reference_smooth_km(depth: xr.DataArray, period_s: float, *, gravity: float = GRAVITY) -> float:
    """Default low-pass scale of the lensing reference: the deep-water wavelength ``c T`` [km].

    ``c = sqrt(g h)`` at the mean depth of the sea cells deeper than 1000 m (all sea cells if
    none are). The reference then lacks every offshore feature of the wavelength's size and
    larger - the features the wave itself refracts on - while the shelf and coast stay as they
    are (:func:`tsunamifocus.ocean.reference.reference_depth`).
    """
    if not (np.isfinite(period_s) and period_s > 0):
        raise InputError(f"period_s={period_s}: expected the source's dominant period in seconds (> 0)")
    h = np.asarray(depth.values, dtype=float)
    sea = np.isfinite(h) & (h > 0)
    if not sea.any():
        raise InputError(f"depth grid '{depth.name}' has no sea cell")
    deep = sea & (h > 1000.0)
    h_deep = float(np.mean(h[deep] if deep.any() else h[sea]))
    return math.sqrt(gravity * h_deep) * period_s / 1000.0


@dataclass(frozen=True)
class ReferenceOcean:
    """The lensing reference, prepared once and shared by every source traced on one grid.

    Attributes
    ----------
    smooth_km : float
        Low-pass scale [km] (Gaussian std).
    lowpass : xarray.DataArray
        The sea floor low-passed at ``smooth_km`` (also used for the fluctuation statistics) [m].
    depth : xarray.DataArray
        The reference: offshore low-pass with the shelf and coast kept
        (:func:`tsunamifocus.ocean.reference.reference_depth`) [m].
    """

    smooth_km: float
    lowpass: xr.DataArray
    depth: xr.DataArray


def reference_ocean(depth: xr.DataArray, smooth_km: float) -> ReferenceOcean:
    """Build the lensing reference of ``depth`` at ``smooth_km`` (see :class:`ReferenceOcean`)."""
    lowpass = smooth_bathymetry(depth, smooth_km)
    return ReferenceOcean(float(smooth_km), lowpass, reference_depth(depth, smooth_km, lowpass=lowpass))


def _band_kwargs(kw: dict, period_s: float, fraction: float) -> dict:
    """Trace settings of one band: local steps up to :data:`MAX_STEP_WIDTHS` smoothing widths."""
    if kw.get("step_s") is not None:
        return kw
    return {**kw, "max_step_s": MAX_STEP_WIDTHS * fraction * float(period_s)}


def _trace_band(medium: xr.DataArray, ref_medium: xr.DataArray, fan_arrays: tuple, period_s: float,
                weight: float, kw: dict) -> BandTrace:
    """Both oceans of one band, each as a wave of that period sees it, traced with the same fan."""
    x0, y0, az, w = fan_arrays
    real = trace_rays(medium, x0, y0, az, weights=w, **kw)
    reference = trace_rays(ref_medium, x0, y0, az, weights=w, **kw)
    return BandTrace(float(period_s), float(weight), real, reference)


def _weighted_map(maps: list[xr.DataArray], weights: list[float], name: str) -> xr.DataArray:
    out = maps[0].copy(data=sum(wb * np.asarray(m.values, float) for m, wb in zip(maps, weights)))
    out.name = name
    return out


def analyse_focusing(
    depth: xr.DataArray,
    fan: Any,
    *,
    period_s: float,
    reference_smooth_km: float | None = None,
    stop_depth_m: float = STOP_DEPTH_M,
    bands: Sequence[tuple[float, float]] | None = None,
    wavelength_fraction: float = WAVELENGTH_FRACTION,
    min_width_factor: float = TUBE_MIN_WIDTH,
    segments: pd.DataFrame | None = None,
    segment_length_m: float | None = None,
    trace_kwargs: dict | None = None,
    max_distance_m: float | None = None,
    min_rays: int = 10,
    n_boot: int = 200,
    seed: int = 0,
    top_k: int = 20,
    coast_area: Any = None,
    reference: ReferenceOcean | None = None,
) -> FocusingResult:
    """Trace a source, band by band, over the real and reference oceans as the wave sees them.

    For every period band ``(T_b, w_b)`` (default: the one band ``(period_s, 1)``; the pipeline
    passes :func:`tsunamifocus.source.energy.period_bands`), the real bathymetry and the
    reference (:func:`tsunamifocus.ocean.reference.reference_depth` at ``reference_smooth_km``) are
    each wavelength-smoothed for ``T_b``
    (:func:`tsunamifocus.ocean.wavelength.wavelength_smoothed_depth`) and traced with the same
    fan; a constant-depth ocean is traced once. Segment energies come from ray tubes and are
    combined over the bands with the weights ``w_b`` (:func:`segment_arrivals`); the maps are
    the share-weighted sums of the bands' energy maps, regularised over a quarter of the local wavelength.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    fan : RayFan or (x0, y0, azimuth_deg, weights)
        Rays of the source (weights in J).
    period_s : float
        Dominant period of the source [s] (regularisation wavelength of the maps).
    reference_smooth_km : float, optional
        Low-pass scale of the reference bathymetry [km] (Gaussian std); default
        :func:`default_reference_smooth_km` (the deep-water wavelength at ``period_s``).
    stop_depth_m : float
        Stop isobath [m].
    bands : sequence of (float, float), optional
        ``(period_s, weight)`` of each band.
    wavelength_fraction : float
        Gaussian std of the wavelength smoothing in local wavelengths.
    min_width_factor : float
        Smallest tube footprint along the coast in local wavelengths (caustic regularisation;
        :data:`tsunamifocus.coast.tubes.TUBE_MIN_WIDTH`).
    segments : pandas.DataFrame, optional
        Coastline segments; default: the ``stop_depth_m`` contour of the grid cut into
        ``segment_length_m`` pieces.
    segment_length_m : float, optional
        Default 10 grid cells.
    trace_kwargs : dict, optional
        Extra arguments of :func:`tsunamifocus.propagation.rays.trace_rays` (e.g. ``max_time_s``).
    max_distance_m, min_rays, n_boot, seed : see :func:`segment_arrivals`.
    top_k : int
        Length of the ranking.
    coast_area : callable, optional
        See :func:`segment_arrivals`.
    reference : ReferenceOcean, optional
        A reference prepared beforehand (:func:`reference_ocean`, e.g. once for a set of sources);
        its scale is the one used (``reference_smooth_km`` must then be None or equal to it).

    Returns
    -------
    FocusingResult
    """
    info = GridInfo.from_dataarray(depth)
    x0, y0, az, w, e_src = _fan_arrays(fan)
    kw = dict(trace_kwargs or {})
    kw.setdefault("stop_depth_m", stop_depth_m)
    if kw.get("step_s") is None:
        kw.pop("step_s", None)
        kw.setdefault("cells_per_step", SMOOTHED_CELLS_PER_STEP)
    if reference is not None:
        if reference_smooth_km is not None and not math.isclose(reference_smooth_km, reference.smooth_km):
            raise InputError(f"reference_smooth_km = {reference_smooth_km:g} km differs from the prepared "
                             f"reference ({reference.smooth_km:g} km): give one of them")
        if reference.depth.shape != depth.shape:
            raise InputError(f"the prepared reference ocean has shape {reference.depth.shape}, the grid {depth.shape}")
    else:
        if reference_smooth_km is None:
            reference_smooth_km = default_reference_smooth_km(depth, period_s)
        reference = reference_ocean(depth, reference_smooth_km)  # one low-pass: reference and statistics
    reference_smooth_km, lowpass, ref = reference.smooth_km, reference.lowpass, reference.depth
    band_list = [(float(t), float(wb)) for t, wb in (bands or [(period_s, 1.0)])]
    # both oceans averaged with the same kernels: the local wavelength of the reference's speed
    media, ref_media = wavelength_smoothed_depths([depth, ref], [t for t, _ in band_list],
                                                  fraction=wavelength_fraction, stop_depth_m=stop_depth_m,
                                                  wavelength_depth=ref)
    runs = [_trace_band(m, rm, (x0, y0, az, w), t, wb, _band_kwargs(kw, t, wavelength_fraction))
            for (t, wb), m, rm in zip(band_list, media, ref_media)]
    dom = int(np.argmax([b.weight for b in runs]))
    # the constant-depth ocean only sets the focusing-factor map's denominator, a smooth field
    # regularised over a quarter of the local wavelength: a quarter of the fan, weighted up, draws it
    sub = np.arange(0, x0.size, FLAT_RAY_STRIDE if x0.size >= 1000 * FLAT_RAY_STRIDE else 1)
    wf = w[sub] * (w.sum() / max(w[sub].sum(), 1e-300))
    flatr = trace_rays(flat_depth(depth), x0[sub], y0[sub], az[sub], weights=wf,
                       **_band_kwargs(kw, band_list[dom][0], wavelength_fraction))
    if segments is None:
        if segment_length_m is None:
            segment_length_m = 10.0 * max(info.spacing_m())
        segments = segment_coastline(coastline_from_grid(depth, stop_depth_m), segment_length_m, depth)

    def grids() -> tuple[dict, xr.DataArray, dict]:
        dist = distance_to_launch_m(depth, x0, y0)
        maps = _focusing_maps(depth, ref, runs, flatr, period_s, reference_smooth_km, wavelength_fraction)
        return maps, dist, fluctuation_statistics(depth, reference_smooth_km, lowpass=lowpass)

    # the maps with the fluctuation statistics (numba Gaussian passes, numpy, scipy) and the segment
    # tables (numpy, scipy, shapely) are independent: the maps are made in a second thread meanwhile
    with ThreadPoolExecutor(max_workers=1) as pool:
        later = pool.submit(grids)
        table = segment_arrivals(segments, None, depth, period_s=period_s, bands=runs,
                                 max_distance_m=max_distance_m, min_rays=min_rays, n_boot=n_boot, seed=seed,
                                 coast_area=coast_area, min_width_factor=min_width_factor,
                                 rotations=int(getattr(fan, "rotations", 1)))
        maps, dist, fluct = later.result()
    ranking = rank_segments(table, top_k=top_k, by="lensing_factor")
    d_coast = _segment_distance(table, info, x0, y0)
    diag = branch_diagnostics(runs[dom].real, depth, reference_smooth_km=reference_smooth_km,
                              coast_distance_m=d_coast, fluctuations=fluct, launch_distance_m=dist)
    budget = energy_budget([(b.real, b.weight) for b in runs], table, source_energy_J=e_src,
                           shallow_J=float(getattr(fan, "energy_shallow_J", 0.0)))
    return FocusingResult(
        energy=maps["energy"], energy_raw=maps["energy_raw"], lensing_factor=maps["lensing"],
        focusing_factor=maps["focusing"], travel_time_min=maps["travel_time"], kernel_sigma_m=maps["sigma"],
        reference_depth=ref, segments=table, ranking=ranking, diagnostics=diag, budget=budget,
        runs={"real": runs[dom].real, "reference": runs[dom].reference, "flat": flatr, "bands": runs},
        cautions=caution_summary(), ray_depth=media[dom], ray_reference_depth=ref_media[dom],
        reference_smooth_km=float(reference_smooth_km),
        bands=band_list,
    )


def _focusing_maps(depth: xr.DataArray, ref: xr.DataArray, runs: list[BandTrace], flatr: Any, period_s: float,
                   reference_smooth_km: float, fraction: float) -> dict[str, xr.DataArray]:
    """Energy, lensing and focusing rasters (band-weighted, regularised over ``fraction`` of the local
    wavelength of the reference ocean at the dominant period) and travel time."""
    wts = [b.weight for b in runs]
    raw = _weighted_map([b.real.energy for b in runs], wts, "energy")
    raw_ref = _weighted_map([b.reference.energy for b in runs], wts, "energy")
    sigma = wavelength_sigma_m(ref, period_s, fraction)
    sea = _sea(depth)
    e_real, e_ref, e_flat = regularised_energies([raw, raw_ref, flatr.energy], sigma, sea)
    lens = ratio_map(e_real, e_ref, "lensing_factor",
                     f"energy over real / over same-mean reference bathymetry (low-pass {reference_smooth_km:g} km)")
    foc = ratio_map(e_real, e_flat, "focusing_factor", "energy over real bathymetry / over constant-depth ocean")
    first = runs[int(np.argmax(wts))].real.first_arrival_s
    tt = first / 60.0
    tt.name = "travel_time_min"
    tt.attrs = {"units": "min", "long_name": "first ray arrival time", "caution": caution_summary()}
    return {"energy": e_real, "energy_raw": raw, "lensing": lens, "focusing": foc, "travel_time": tt, "sigma": sigma}


def _segment_distance(table: pd.DataFrame, info: GridInfo, x0: np.ndarray, y0: np.ndarray) -> float:
    """Energy-weighted median distance [m] from the source to the segments that received rays."""
    hit = table["energy_J"].to_numpy(float) > 0
    if not hit.any():
        return float("nan")
    tree = cKDTree(np.unique(np.round(_to_xyz(info, x0, y0), 3), axis=0))
    d, _ = tree.query(_to_xyz(info, table["x_mid"].to_numpy(float)[hit], table["y_mid"].to_numpy(float)[hit]))
    if info.geographic:
        d = 2 * info.radius_m * np.arcsin(np.clip(d / (2 * info.radius_m), 0, 1))
    e = table["energy_J"].to_numpy(float)[hit]
    o = np.argsort(d)
    cw = np.cumsum(e[o])
    return float(d[o][np.searchsorted(cw, 0.5 * cw[-1])])
