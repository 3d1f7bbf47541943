"""Focusing maps, branch diagnostics, coastal arrivals and hotspot rankings.

Screening estimates only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Everything here post-processes ray runs of :func:`tsunamifocus.rays.trace_rays`:

* **Regularised energy map** - the ray engine's energy per unit wavefront width [J m-1]
  smoothed by a Gaussian whose standard deviation is the first-Fresnel-zone radius half-way
  along the path, ``sigma = sqrt(lambda L) / 2`` with ``lambda = c(x) T`` the local long-wave
  wavelength for the source's dominant period ``T`` and ``L`` the distance from the nearest
  launch point. Rays closer together than a Fresnel zone cannot be resolved by the wave
  (diffraction), so ray-density detail finer than this is not physical; the kernel also
  keeps the ray-theory singularities at caustics finite. Basis: the first Fresnel zone radius
  ``r1 = sqrt(lambda d1 d2 / (d1 + d2))`` (Born & Wolf, Principles of Optics, ch. 8), which is
  largest, ``sqrt(lambda L) / 2``, half-way along a path of length ``L``.
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

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from scipy.spatial import cKDTree

from ..cautions import caution_summary
from ..coast.coastline import coastline_from_grid
from ..coast.segments import segment_coastline
from ..constants import REFERENCE_SMOOTH_KM, STOP_DEPTH_M
from ..errors import InputError
from ..grid import GridInfo
from ..ocean.reference import flat_depth, reference_depth
from ..ocean.smooth import _sea, _to_xyz, smooth_bathymetry
from ..propagation.rays import trace_rays
from .arrivals import REASON_COAST, segment_arrivals
from .branches import branch_diagnostics
from .budget import energy_budget
from .energy import distance_to_launch_m, fresnel_sigma_m, ratio_map, regularised_energy
from .randommedium import fluctuation_statistics
from .ranking import rank_segments

__all__ = ['REASON_COAST', 'FocusingResult', 'analyse_focusing']




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
        First ray arrival [min].
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
        The RayResults ``real``, ``reference``, ``flat``.
    cautions : str
        Caution text.
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


def _fan_arrays(fan: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, float | None]:
    if all(hasattr(fan, a) for a in ("x0", "y0", "azimuth_deg", "weights")):
        return (np.asarray(fan.x0, float), np.asarray(fan.y0, float), np.asarray(fan.azimuth_deg, float),
                np.asarray(fan.weights, float), getattr(fan, "energy_J", None))
    if isinstance(fan, (tuple, list)) and len(fan) == 4:
        x0, y0, az, w = (np.asarray(a, float) for a in fan)
        return x0, y0, az, w, None
    raise InputError("fan: expected a RayFan or a tuple (x0, y0, azimuth_deg, weights)")


def analyse_focusing(
    depth: xr.DataArray,
    fan: Any,
    *,
    period_s: float,
    reference_smooth_km: float = REFERENCE_SMOOTH_KM,
    stop_depth_m: float = STOP_DEPTH_M,
    segments: pd.DataFrame | None = None,
    segment_length_m: float | None = None,
    trace_kwargs: dict | None = None,
    max_distance_m: float | None = None,
    min_rays: int = 10,
    n_boot: int = 200,
    seed: int = 0,
    top_k: int = 20,
    coast_area: Any = None,
) -> FocusingResult:
    """Trace a source over the real, reference and constant-depth bathymetries and analyse it.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    fan : RayFan or (x0, y0, azimuth_deg, weights)
        Rays of the source (weights in J).
    period_s : float
        Dominant period of the source [s] (regularisation wavelength, pulse length).
    reference_smooth_km : float
        Low-pass scale of the reference bathymetry [km] (Gaussian std).
    stop_depth_m : float
        Stop isobath [m].
    segments : pandas.DataFrame, optional
        Coastline segments; default: the ``stop_depth_m`` contour of the grid cut into
        ``segment_length_m`` pieces.
    segment_length_m : float, optional
        Default 10 grid cells.
    trace_kwargs : dict, optional
        Extra arguments of :func:`tsunamifocus.rays.trace_rays` (e.g. ``q0``, ``p0``, ``max_time_s``).
    max_distance_m, min_rays, n_boot, seed : see :func:`segment_arrivals`.
    top_k : int
        Length of the ranking.
    coast_area : callable, optional
        See :func:`segment_arrivals`.

    Returns
    -------
    FocusingResult
    """
    info = GridInfo.from_dataarray(depth)
    x0, y0, az, w, e_src = _fan_arrays(fan)
    kw = dict(trace_kwargs or {})
    kw.setdefault("stop_depth_m", stop_depth_m)
    # one low-pass serves the reference ocean and the fluctuation statistics
    lowpass = smooth_bathymetry(depth, reference_smooth_km)
    ref = reference_depth(depth, reference_smooth_km, lowpass=lowpass)
    flat = flat_depth(depth)
    real = trace_rays(depth, x0, y0, az, weights=w, **kw)
    refr = trace_rays(ref, x0, y0, az, weights=w, **kw)
    flatr = trace_rays(flat, x0, y0, az, weights=w, **kw)
    dist = distance_to_launch_m(depth, x0, y0)
    sigma = fresnel_sigma_m(depth, period_s, dist)
    sea = _sea(depth)
    e_real = regularised_energy(real.energy, sigma, sea)
    e_ref = regularised_energy(refr.energy, sigma, sea)
    e_flat = regularised_energy(flatr.energy, sigma, sea)
    lens = ratio_map(e_real, e_ref, "lensing_factor",
                     f"energy over real / over same-mean reference bathymetry (low-pass {reference_smooth_km:g} km)")
    foc = ratio_map(e_real, e_flat, "focusing_factor", "energy over real bathymetry / over constant-depth ocean")
    tt = real.first_arrival_s / 60.0
    tt.name = "travel_time_min"
    tt.attrs = {"units": "min", "long_name": "first ray arrival time", "caution": caution_summary()}
    if segments is None:
        if segment_length_m is None:
            segment_length_m = 10.0 * max(info.spacing_m())
        segments = segment_coastline(coastline_from_grid(depth, stop_depth_m), segment_length_m, depth)
    table = segment_arrivals(segments, real, depth, period_s=period_s, ref_result=refr,
                             max_distance_m=max_distance_m, min_rays=min_rays, n_boot=n_boot, seed=seed,
                             coast_area=coast_area)
    ranking = rank_segments(table, top_k=top_k, by="lensing_factor")
    d_coast = _segment_distance(table, info, x0, y0)
    fluct = fluctuation_statistics(depth, reference_smooth_km, lowpass=lowpass)
    diag = branch_diagnostics(real, depth, reference_smooth_km=reference_smooth_km, coast_distance_m=d_coast,
                              fluctuations=fluct)
    budget = energy_budget(real, table, source_energy_J=e_src)
    return FocusingResult(
        energy=e_real, energy_raw=real.energy, lensing_factor=lens, focusing_factor=foc,
        travel_time_min=tt, kernel_sigma_m=sigma, reference_depth=ref, segments=table,
        ranking=ranking, diagnostics=diag, budget=budget,
        runs={"real": real, "reference": refr, "flat": flatr}, cautions=caution_summary(),
    )


def _segment_distance(table: pd.DataFrame, info: GridInfo, x0: np.ndarray, y0: np.ndarray) -> float:
    """Energy-weighted median distance [m] from the source to the segments that received rays."""
    hit = table["n_rays"].to_numpy() > 0
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
