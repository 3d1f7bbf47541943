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

import math
import warnings
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from scipy import integrate, ndimage, sparse
from scipy.spatial import cKDTree

from .constants import GRAVITY, MIN_DEPTH_M, RHO_SEAWATER
from .errors import CoastError, HealthCheckError, InputError, ResolutionWarning
from .grid import GridInfo

__all__ = [
    "REASON_COAST",
    "fresnel_sigma_m",
    "smooth_field",
    "regularised_energy",
    "reference_depth",
    "flat_depth",
    "ratio_map",
    "point_source_energy_width",
    "fluctuation_statistics",
    "riccati_caustic_constant",
    "riccati_caustic_quantile",
    "predicted_focusing_distance",
    "distance_to_launch_m",
    "scintillation_index",
    "scintillation_profile",
    "branch_diagnostics",
    "segment_arrivals",
    "rank_segments",
    "energy_budget",
    "FocusingResult",
    "analyse_focusing",
]

#: Ray end-reason code of "reached the stop isobath" (contract of tsunamifocus.rays).
REASON_COAST = 1

_REASON_NAMES = {1: "coast", 2: "left_grid", 3: "land_or_nodata", 4: "time_limit", 5: "polar_limit"}


def _cautions() -> str:
    try:
        from .cautions import caution_summary

        return caution_summary()
    except Exception:  # pragma: no cover - only if the cautions module is missing
        return (
            "SCREENING ESTIMATES ONLY. Not a tsunami warning, forecast or inundation map; follow "
            "official tsunami warning centres and local emergency management (see CAUTIONS.md)."
        )


# --------------------------------------------------------------------------------------
# geometry helpers
# --------------------------------------------------------------------------------------
def _sea(depth: xr.DataArray) -> np.ndarray:
    v = np.asarray(depth.values, dtype=float)
    return np.isfinite(v) & (v > 0)


def _to_xyz(info: GridInfo, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Points as Cartesian coordinates [m] (3-D on the sphere) for nearest-neighbour search."""
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if info.geographic:
        lo, la = np.radians(x), np.radians(y)
        r = info.radius_m
        return np.column_stack([r * np.cos(la) * np.cos(lo), r * np.cos(la) * np.sin(lo), r * np.sin(la)])
    return np.column_stack([x, y])


def distance_to_launch_m(
    grid: xr.DataArray, launch_x: np.ndarray, launch_y: np.ndarray
) -> xr.DataArray:
    """Distance [m] from every grid node to the nearest launch point.

    For a point source this is the epicentral distance; for a plane wave launched along a
    line it is the distance from that line; for an extended source it is the distance from
    the source area. Great-circle distance on lon/lat grids (from the chord), planar otherwise.

    Parameters
    ----------
    grid : xarray.DataArray
        Any grid of the tsunamifocus convention (its nodes are used).
    launch_x, launch_y : numpy.ndarray
        Launch points in the grid CRS.

    Returns
    -------
    xarray.DataArray
        Distance [m] on the grid.
    """
    info = GridInfo.from_dataarray(grid)
    pts = np.unique(np.round(_to_xyz(info, launch_x, launch_y), 3), axis=0)
    tree = cKDTree(pts)
    X, Y = np.meshgrid(info.x, info.y)
    d, _ = tree.query(_to_xyz(info, X, Y))
    if info.geographic:
        d = 2 * info.radius_m * np.arcsin(np.clip(d / (2 * info.radius_m), 0, 1))
    out = grid.copy(data=d.reshape(X.shape))
    out.name = "distance_m"
    out.attrs = {"units": "m", "long_name": "distance to the nearest launch point"}
    return out


# --------------------------------------------------------------------------------------
# smoothing
# --------------------------------------------------------------------------------------
def _gauss_pass(f: np.ndarray, info: GridInfo, sigma_m: float) -> np.ndarray:
    """Separable Gaussian [std sigma_m metres]; on lon/lat the x width follows cos(lat)."""
    if sigma_m <= 0:
        return f.copy()
    dxm, dym = info.spacing_m()
    sy = sigma_m / dym
    out = ndimage.gaussian_filter1d(f, sy, axis=0, mode="constant", truncate=3.0) if sy >= 0.2 else f.copy()
    if info.geographic:
        k = math.pi / 180.0 * info.radius_m
        coslat = np.cos(np.radians(np.clip(info.y, -89.5, 89.5)))
        mode = "wrap" if info.periodic_x else "constant"
        for j in range(info.ny):
            sx = min(sigma_m / (info.dx * k * coslat[j]), 4.0 * info.nx)
            if sx >= 0.2:
                out[j] = ndimage.gaussian_filter1d(out[j], sx, mode=mode, truncate=3.0)
    else:
        sx = sigma_m / dxm
        if sx >= 0.2:
            out = ndimage.gaussian_filter1d(out, sx, axis=1, mode="constant", truncate=3.0)
    return out


def smooth_field(
    field: xr.DataArray,
    sigma_m: float | xr.DataArray | np.ndarray,
    *,
    mask: np.ndarray | xr.DataArray | None = None,
    levels_per_octave: int = 2,
) -> xr.DataArray:
    """Masked (normalised) Gaussian smoothing with a constant or spatially varying width.

    The result at each node is the Gaussian-weighted mean of ``field`` over the nodes where
    ``mask`` is True (normalised convolution), so intensive quantities such as energy per unit
    width keep their level near coasts and grid edges. A spatially varying ``sigma_m`` is
    applied by smoothing at widths spaced ``2**(1/levels_per_octave)`` apart and interpolating
    each node between the two levels bracketing its own width (linear in log width).

    Parameters
    ----------
    field : xarray.DataArray
        Grid to smooth (NaN treated as outside the mask).
    sigma_m : float or array
        Standard deviation of the Gaussian [m]: a number or a grid (NaN -> no smoothing).
    mask : array of bool, optional
        Nodes that take part; default: finite values of ``field``.
    levels_per_octave : int
        Width levels per factor of 2 for a varying ``sigma_m``.

    Returns
    -------
    xarray.DataArray
        Smoothed grid, NaN outside the mask.
    """
    info = GridInfo.from_dataarray(field)
    f = np.asarray(field.values, dtype=float)
    m = np.isfinite(f) if mask is None else (np.asarray(mask, dtype=bool) & np.isfinite(f))
    fm = np.where(m, f, 0.0)
    wm = m.astype(float)
    sig = np.asarray(sigma_m.values if isinstance(sigma_m, xr.DataArray) else sigma_m, dtype=float)

    def level(s: float) -> np.ndarray:
        a = _gauss_pass(fm, info, s)
        b = _gauss_pass(wm, info, s)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(b > 1e-12, a / b, np.nan)

    if sig.ndim == 0:
        if not (np.isfinite(sig) and sig >= 0):
            raise InputError(f"smoothing width {float(sig)} m: expected a finite width >= 0 m")
        out = level(float(sig))
    else:
        if sig.shape != f.shape:
            raise InputError(f"sigma_m grid has shape {sig.shape}, field has {f.shape}")
        ok = np.isfinite(sig) & (sig > 0) & m
        out = np.where(m, f, np.nan)
        if ok.any():
            smin, smax = float(sig[ok].min()), float(sig[ok].max())
            ratio = 2.0 ** (1.0 / max(1, int(levels_per_octave)))
            nlev = max(1, int(math.ceil(math.log(smax / smin) / math.log(ratio))) + 1) if smax > smin else 1
            levels = smin * ratio ** np.arange(nlev)
            maps = [level(float(s)) for s in levels]
            if nlev == 1:
                out = np.where(ok, maps[0], out)
            else:
                t = np.log(np.where(ok, sig, smin) / smin) / math.log(ratio)
                k = np.clip(np.floor(t).astype(int), 0, nlev - 2)
                frac = np.clip(t - k, 0.0, 1.0)
                stack = np.stack(maps)
                jj, ii = np.indices(f.shape)
                lo = stack[k, jj, ii]
                hi = stack[k + 1, jj, ii]
                out = np.where(ok, lo * (1 - frac) + hi * frac, out)
    res = field.copy(data=np.where(m, out, np.nan))
    return res


def fresnel_sigma_m(
    depth: xr.DataArray,
    period_s: float,
    distance_m: xr.DataArray,
    *,
    gravity: float = GRAVITY,
    min_depth: float = MIN_DEPTH_M,
) -> xr.DataArray:
    """Regularisation width: first-Fresnel-zone radius half-way along the path [m].

    ``sigma = sqrt(lambda L) / 2`` with ``lambda = sqrt(g h) T`` (local long-wave wavelength)
    and ``L`` the distance from the source (:func:`distance_to_launch_m`). The first Fresnel
    zone radius ``sqrt(lambda d1 d2 / (d1 + d2))`` (Born & Wolf, Principles of Optics, ch. 8)
    is largest half-way along a path (``d1 = d2 = L / 2``), giving ``sqrt(lambda L) / 2``.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    period_s : float
        Dominant period of the source [s] (e.g. ``SourceSummary.period_s``).
    distance_m : xarray.DataArray
        Propagation distance [m] on the same grid.
    gravity, min_depth : float
        [m s-2], depth clamp [m].

    Returns
    -------
    xarray.DataArray
        ``sigma`` [m], NaN on land.
    """
    if not (np.isfinite(period_s) and period_s > 0):
        raise InputError(f"period_s={period_s}: expected the source's dominant period in seconds (> 0)")
    h = np.asarray(depth.values, dtype=float)
    sea = np.isfinite(h) & (h > 0)
    c = np.sqrt(gravity * np.maximum(np.where(sea, h, min_depth), min_depth))
    lam = c * period_s
    L = np.asarray(distance_m.values, dtype=float)
    sig = np.where(sea, 0.5 * np.sqrt(lam * np.maximum(L, 0.0)), np.nan)
    out = depth.copy(data=sig)
    out.name = "kernel_sigma_m"
    out.attrs = {
        "units": "m",
        "long_name": "Gaussian regularisation std = first Fresnel zone radius sqrt(lambda L)/2",
        "period_s": float(period_s),
    }
    return out


def regularised_energy(
    energy: xr.DataArray,
    sigma_m: xr.DataArray | float,
    mask: np.ndarray | None = None,
) -> xr.DataArray:
    """Energy per unit wavefront width [J m-1] smoothed by the regularisation kernel.

    Parameters
    ----------
    energy : xarray.DataArray
        ``RayResult.energy`` [J m-1].
    sigma_m : xarray.DataArray or float
        Kernel std [m], e.g. :func:`fresnel_sigma_m`.
    mask : array of bool, optional
        Sea nodes (default: all finite nodes).

    Returns
    -------
    xarray.DataArray
        Regularised energy map [J m-1], name ``energy``.
    """
    out = smooth_field(energy, sigma_m, mask=mask)
    out.name = "energy"
    out.attrs = {
        **{k: v for k, v in energy.attrs.items() if k in ("grid_mapping", "lon_periodic")},
        "units": "J m-1",
        "long_name": "ray energy per unit wavefront width, Fresnel-zone regularised",
        "regularisation": "Gaussian, std = sqrt(lambda L)/2 (first Fresnel zone radius at mid-path)",
        "caution": _cautions(),
    }
    return out


def ratio_map(num: xr.DataArray, den: xr.DataArray, name: str, long_name: str) -> xr.DataArray:
    """``num / den`` where ``den > 0`` (NaN elsewhere): lensing or focusing factor [-]."""
    a = np.asarray(num.values, dtype=float)
    b = np.asarray(den.values, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(np.isfinite(a) & np.isfinite(b) & (b > 0), a / b, np.nan)
    out = num.copy(data=r)
    out.name = name
    out.attrs = {
        **{k: v for k, v in num.attrs.items() if k in ("grid_mapping", "lon_periodic")},
        "units": "1",
        "long_name": long_name,
        "caution": _cautions(),
    }
    return out


# --------------------------------------------------------------------------------------
# reference bathymetries
# --------------------------------------------------------------------------------------
def reference_depth(depth: xr.DataArray, length_km: float) -> xr.DataArray:
    """Same-mean reference bathymetry without variations shorter than ``length_km``.

    The sea depths are low-passed with :func:`tsunamifocus.bathymetry.smooth_bathymetry`
    (normalised Gaussian of std ``length_km``, land and coastline unchanged) and rescaled so
    the mean sea depth equals that of ``depth`` exactly.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    length_km : float
        Low-pass scale [km] (Gaussian std), set by the user: variations much shorter than this
        are the ones whose focusing the lensing factor measures.

    Returns
    -------
    xarray.DataArray
        Reference depth [m].
    """
    from .bathymetry import reference_bathymetry

    # offshore variations low-passed; the shelf (< 200 m, blended up to 1000 m) kept, so the
    # coast and stop isobath are the same in both runs (see reference_bathymetry)
    ref = reference_bathymetry(depth, length_km)
    sea = _sea(depth)
    v = np.asarray(depth.values, dtype=float)
    r = np.asarray(ref.values, dtype=float).copy()
    ok = sea & np.isfinite(r) & (r > 0)
    if ok.any():
        scale = v[sea].mean() / r[ok].mean()
        r[ok] *= scale
    out = ref.copy(data=r)
    out.attrs["reference_lowpass_km"] = float(length_km)
    return out


def flat_depth(depth: xr.DataArray) -> xr.DataArray:
    """Constant-depth ocean: the mean sea depth of ``depth`` on every node (no land) [m]."""
    sea = _sea(depth)
    if not sea.any():
        raise InputError(f"depth grid '{depth.name}' has no sea node")
    mean = float(np.asarray(depth.values, dtype=float)[sea].mean())
    out = depth.copy(data=np.full(depth.shape, mean))
    out.attrs["flat_depth_m"] = mean
    return out


def point_source_energy_width(
    energy_J: float, distance_m: np.ndarray | float, radius_m: float | None = None
) -> np.ndarray:
    """Analytic energy per unit wavefront width of an isotropic point source, constant depth.

    Rays of total energy ``E`` spread over a circle: ``E / (2 pi r)`` on a plane,
    ``E / (2 pi R sin(r / R))`` on a sphere of radius ``R`` (circumference of the small circle at
    great-circle distance ``r``). Units: J m-1.
    """
    r = np.asarray(distance_m, dtype=float)
    with np.errstate(divide="ignore"):
        if radius_m is None:
            return energy_J / (2 * np.pi * r)
        return energy_J / (2 * np.pi * radius_m * np.sin(r / radius_m))


# --------------------------------------------------------------------------------------
# random focusing: statistics of the bathymetry and Kaplan's scaling
# --------------------------------------------------------------------------------------
def _corr_length_from_acf(f: np.ndarray, m: np.ndarray, dx: float, dy: float) -> float:
    """Length where the masked, radially averaged autocorrelation falls to exp(-1/2) [m]."""
    ny, nx = f.shape
    py, px = 2 * ny, 2 * nx
    F = np.fft.rfft2(np.where(m, f, 0.0), s=(py, px))
    M = np.fft.rfft2(m.astype(float), s=(py, px))
    num = np.fft.irfft2(F * np.conj(F), s=(py, px))
    den = np.fft.irfft2(M * np.conj(M), s=(py, px))
    with np.errstate(invalid="ignore", divide="ignore"):
        acf = np.where(den > 0.5 * den.max() * 0.05, num / den, np.nan)
    ky = np.fft.fftfreq(py) * py
    kx = np.fft.fftfreq(px) * px
    R = np.hypot(ky[:, None] * dy, kx[None, :] * dx)
    c0 = acf[0, 0]
    if not (np.isfinite(c0) and c0 > 0):
        return float("nan")
    rmax = 0.5 * min(nx * dx, ny * dy)
    step = min(dx, dy)
    edges = np.arange(0.0, rmax + step, step)
    idx = np.digitize(R.ravel(), edges) - 1
    vals = acf.ravel()
    good = np.isfinite(vals) & (idx >= 0) & (idx < edges.size - 1)
    s = np.bincount(idx[good], weights=vals[good], minlength=edges.size - 1)
    n = np.bincount(idx[good], minlength=edges.size - 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        prof = s / n
    r_mid = 0.5 * (edges[:-1] + edges[1:])
    prof[0], r_mid[0] = c0, 0.0
    target = c0 * math.exp(-0.5)
    below = np.flatnonzero(np.isfinite(prof) & (prof <= target))
    if below.size == 0:
        return float("nan")
    k = below[0]
    r0, r1, p0, p1 = r_mid[k - 1], r_mid[k], prof[k - 1], prof[k]
    return float(r0 + (p0 - target) / (p0 - p1) * (r1 - r0)) if p0 != p1 else float(r1)


def fluctuation_statistics(
    depth: xr.DataArray, lowpass_km: float, *, min_depth_m: float | None = None
) -> dict[str, float]:
    """Strength and correlation length of the small depth variations.

    The fluctuation is the depth minus its low-pass (:func:`reference_depth` without the mean
    rescaling, i.e. ``smooth_bathymetry``). Returned strengths:

    * ``eps_depth`` - rms of ``(h - h_lp) / h_lp`` (relative depth fluctuation);
    * ``eps_speed`` - rms of ``sqrt(h / h_lp) - 1``, the relative long-wave speed fluctuation
      ``dc / c``. Since ``c = sqrt(g h)``, to first order ``eps_speed = eps_depth / 2``; it is
      measured directly so it stays right for larger fluctuations.

    ``corr_length_m`` is the lag where the radially averaged autocorrelation of ``h - h_lp``
    falls to ``exp(-1/2)`` of its zero-lag value: for a Gaussian correlation
    ``C(r) = exp(-r**2 / (2 l**2))`` (the convention of :mod:`tsunamifocus.randomfield`) that lag
    is ``l``. On lon/lat grids the metric spacing at the grid's mid latitude is used.

    Only sea nodes with ``h_lp > min_depth_m`` enter (default: 10 % of the median sea depth),
    so shelves and coasts, where the low-pass is not a mean depth, do not dominate.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m].
    lowpass_km : float
        Low-pass scale [km]; should be several times the correlation length.
    min_depth_m : float, optional
        Exclude nodes shallower than this (in the low-pass) [m].

    Returns
    -------
    dict
        ``eps_depth, eps_speed, corr_length_m, lowpass_km, n_nodes``.
    """
    from .bathymetry import smooth_bathymetry

    info = GridInfo.from_dataarray(depth)
    h = np.asarray(depth.values, dtype=float)
    lp = np.asarray(smooth_bathymetry(depth, lowpass_km).values, dtype=float)
    sea = np.isfinite(h) & (h > 0) & np.isfinite(lp) & (lp > 0)
    if not sea.any():
        raise InputError(f"depth grid '{depth.name}' has no sea node for fluctuation statistics")
    if min_depth_m is None:
        min_depth_m = 0.1 * float(np.median(h[sea]))
    m = sea & (lp > min_depth_m)
    if m.sum() < 16:
        raise InputError(f"too few sea nodes deeper than {min_depth_m:.0f} m for fluctuation statistics")
    rel = np.where(m, h / np.where(m, lp, 1.0) - 1.0, 0.0)
    spd = np.where(m, np.sqrt(np.where(m, h / np.where(m, lp, 1.0), 1.0)) - 1.0, 0.0)
    eps_h = float(np.sqrt(np.mean(rel[m] ** 2)))
    eps_c = float(np.sqrt(np.mean(spd[m] ** 2)))
    dxm, dym = info.spacing_m()
    ell = _corr_length_from_acf(np.where(m, h - lp, 0.0), m, dxm, dym)
    return {
        "eps_depth": eps_h,
        "eps_speed": eps_c,
        "corr_length_m": ell,
        "lowpass_km": float(lowpass_km),
        "n_nodes": int(m.sum()),
    }


@lru_cache(maxsize=1)
def riccati_caustic_constant() -> float:
    """Mean first-passage "time" ``tau0`` of ``r' = -r**2 + xi`` from 0 to -infinity (unit noise).

    With white noise ``<xi(s) xi(s')> = delta(s - s')`` the backward equation
    ``T''/2 - r**2 T' = -1`` gives ``T(0) = 2 int_{-inf}^0 dy int_y^inf exp(2/3 (y^3 - z^3)) dz``,
    evaluated here by quadrature (about 4.18). The ray-tube (Jacobi) equation of a plane wave in
    a weakly random medium reduces to this Riccati equation for ``r = q'/q`` (Kulkarny & White
    1982, Phys. Fluids 25, 1770; the basis of Kaplan 2002's ``eps**(-2/3)`` scaling).
    """

    def g(y: float) -> float:
        # inner integral with z = y + t: exponent -(2 y^2 t + 2 y t^2 + 2/3 t^3)
        f = lambda t: math.exp(-(2 * y * y * t + 2 * y * t * t + (2.0 / 3.0) * t**3))  # noqa: E731
        val, _ = integrate.quad(f, 0.0, np.inf, limit=200)
        return 2.0 * val

    ymin = -40.0
    body, _ = integrate.quad(g, ymin, 0.0, limit=400, points=[-5.0, -2.0, -1.0])
    # tail: g(y) = 1/y^2 + O(y^-5) for y -> -inf, so int_{-inf}^{ymin} g = 1/|ymin|
    return float(body + 1.0 / abs(ymin))


@lru_cache(maxsize=4)
def riccati_caustic_quantile(q: float = 0.5, n_paths: int = 20000, dt: float = 1e-3, seed: int = 12345) -> float:
    """Quantile ``q`` of the first-passage "time" of ``r' = -r**2 + xi`` from 0 to -infinity.

    Same unit-noise Riccati equation as :func:`riccati_caustic_constant`; its first-passage
    distribution is broad and skewed (mean ~4.18, median ~3.0), so the median is the more
    typical distance. Computed by a seeded Euler-Maruyama simulation (``n_paths`` paths, step
    ``dt``, absorbed below ``r = -1/sqrt(dt)``, the remaining deterministic time ``1/|r|``
    added); deterministic for a given seed, sampling error ~1 %.
    """
    if not 0 < q < 1:
        raise InputError(f"quantile q={q}: expected 0 < q < 1")
    rng = np.random.default_rng(seed)
    r = np.zeros(n_paths)
    alive = np.arange(n_paths)
    times = np.full(n_paths, np.inf)
    rmin = -1.0 / math.sqrt(dt)
    sq = math.sqrt(dt)
    t = 0.0
    need = int(math.ceil(q * n_paths))
    done = 0
    while done < need and t < 1e3:
        ra = r[alive]
        ra += -ra * ra * dt + sq * rng.standard_normal(ra.size)
        t += dt
        gone = ra < rmin
        if gone.any():
            idx = alive[gone]
            times[idx] = t + 1.0 / np.abs(ra[gone])
            done += idx.size
        r[alive] = ra
        alive = alive[~gone]
    return float(np.sort(times)[need - 1])  # the first `need` finishers are all finite


def predicted_focusing_distance(eps_speed: float, corr_length_m: float, statistic: str = "median") -> float:
    """Expected distance [m] to the first random caustics (strong focusing) of a plane wave.

    Derivation (paraxial rays; Kaplan 2002 PRL 89 184103; Degueldre et al. 2016 Nature Physics
    12, 259): with ``c = c0 (1 + u)`` and ``u`` Gaussian-correlated, rms ``eps_speed``,
    ``<u u'> = eps**2 exp(-r**2 / (2 l**2))``, the Jacobi equation ``q'' = -u_yy q`` gives for
    ``r = q'/q`` the Riccati equation ``r' = -r**2 - u_yy``. Its forcing has the integrated
    correlation ``Gamma = int <u_yy(0) u_yy(x)> dx = 3 sqrt(2 pi) eps**2 / l**3``; rescaling to
    unit noise, the distance to ``q = 0`` (first caustic) is ``tau Gamma**(-1/3)``, i.e.

    ``L = tau (3 sqrt(2 pi))**(-1/3) l eps_speed**(-2/3)``

    where ``tau`` is a statistic of the unit Riccati first-passage time: ``"mean"`` (~4.18,
    :func:`riccati_caustic_constant`, ``L ~= 2.13 l eps**(-2/3)``) or ``"median"`` (~3.0,
    :func:`riccati_caustic_quantile`, ``L ~= 1.54 l eps**(-2/3)``: half the rays have passed a
    caustic). The median is the default: the distribution has a long tail, and the strongest
    focusing (peak scintillation) appears while the bulk of first caustics form. With the
    relative depth fluctuation ``eps_depth ~= 2 eps_speed`` (``c ~ sqrt(h)``) multiply by
    ``2**(2/3)``. Valid for weak fluctuations (a few per cent) and ``L >> l``.
    """
    if not (eps_speed > 0 and corr_length_m > 0):
        return float("nan")
    if statistic == "mean":
        tau = riccati_caustic_constant()
    elif statistic == "median":
        tau = riccati_caustic_quantile(0.5)
    else:
        raise InputError(f"statistic='{statistic}': expected 'mean' or 'median'")
    return float(tau * (3 * math.sqrt(2 * math.pi)) ** (-1 / 3) * corr_length_m * eps_speed ** (-2 / 3))


# --------------------------------------------------------------------------------------
# branch diagnostics
# --------------------------------------------------------------------------------------
def scintillation_index(field: xr.DataArray | np.ndarray, where: np.ndarray | None = None) -> float:
    """Scintillation index ``<I^2> / <I>^2 - 1`` of a map over the selected nodes [-]."""
    v = np.asarray(field.values if isinstance(field, xr.DataArray) else field, dtype=float)
    m = np.isfinite(v) if where is None else (np.asarray(where, bool) & np.isfinite(v))
    if m.sum() < 2:
        return float("nan")
    a = v[m]
    mean = a.mean()
    if mean <= 0:
        return float("nan")
    return float(np.mean(a * a) / (mean * mean) - 1.0)


def scintillation_profile(
    energy: xr.DataArray,
    distance_m: xr.DataArray,
    *,
    bin_m: float,
    where: np.ndarray | None = None,
    min_nodes: int = 20,
) -> pd.DataFrame:
    """Scintillation index of an energy map in distance bands from the source.

    Parameters
    ----------
    energy : xarray.DataArray
        Energy map [J m-1] (raw or regularised).
    distance_m : xarray.DataArray
        Distance from the source [m] (:func:`distance_to_launch_m`).
    bin_m : float
        Band width [m].
    where : array of bool, optional
        Nodes to use (default: nodes with finite energy).
    min_nodes : int
        Bands with fewer nodes are left out.

    Returns
    -------
    pandas.DataFrame
        Columns ``distance_m`` (band centre), ``scintillation``, ``mean_energy``, ``n_nodes``.
    """
    e = np.asarray(energy.values, dtype=float)
    d = np.asarray(distance_m.values, dtype=float)
    m = np.isfinite(e) & np.isfinite(d) if where is None else (np.asarray(where, bool) & np.isfinite(e))
    if not m.any():
        return pd.DataFrame(columns=["distance_m", "scintillation", "mean_energy", "n_nodes"])
    k = np.floor(d[m] / bin_m).astype(int)
    ev = e[m]
    nb = int(k.max()) + 1
    n = np.bincount(k, minlength=nb)
    s1 = np.bincount(k, weights=ev, minlength=nb)
    s2 = np.bincount(k, weights=ev * ev, minlength=nb)
    ok = n >= min_nodes
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = s1 / n
        si = (s2 / n) / (mean * mean) - 1.0
    return pd.DataFrame(
        {
            "distance_m": ((np.arange(nb) + 0.5) * bin_m)[ok],
            "scintillation": si[ok],
            "mean_energy": mean[ok],
            "n_nodes": n[ok],
        }
    )


def branch_diagnostics(
    result: Any,
    depth: xr.DataArray,
    *,
    lowpass_km: float | None = None,
    bin_m: float | None = None,
    coast_distance_m: float | None = None,
    fluctuations: dict | None = None,
) -> dict[str, Any]:
    """Caustics, scintillation and the expected distance to strong focusing of one ray run.

    Parameters
    ----------
    result : RayResult
        Run over ``depth`` (its ``energy`` map is used unregularised: the scintillation of the
        ray density at grid resolution).
    depth : xarray.DataArray
        Depth [m] the run was traced over.
    lowpass_km : float, optional
        Scale separating "small" variations (for :func:`fluctuation_statistics`); without it
        (and without ``fluctuations``) no prediction is made.
    bin_m : float, optional
        Distance bin [m]; default 2 % of the longest ray path, at least one grid cell.
    coast_distance_m : float, optional
        Distance of the coast from the source [m], compared with the predicted distance.
    fluctuations : dict, optional
        Precomputed :func:`fluctuation_statistics`.

    Returns
    -------
    dict
        ``profile`` (DataFrame over distance: ``fraction_past_first_caustic``, ``n_rays_alive``,
        ``scintillation``), ``mean_first_caustic_m`` / ``median_first_caustic_m`` (over rays with
        a caustic), ``fraction_with_caustic``, ``mean_caustics_per_ray``, ``scintillation_index``
        (whole map), ``peak_scintillation_distance_m``, the fluctuation statistics,
        ``predicted_focusing_distance_m``, ``coast_distance_m``, ``coast_beyond_focusing``
        (bool or None) and ``message``.
    """
    info = GridInfo.from_dataarray(depth)
    end = result.end
    fc = np.asarray(end["first_caustic_m"].values, dtype=float)
    plen = np.asarray(end["path_length_m"].values, dtype=float)
    ncau = np.asarray(end["caustics"].values, dtype=float)
    if bin_m is None:
        bin_m = max(0.02 * float(np.nanmax(plen)) if plen.size else 0.0, max(info.spacing_m()))
    edges = np.arange(0.0, float(np.nanmax(plen)) + bin_m, bin_m) if plen.size else np.array([0.0, bin_m])
    alive = np.array([(plen >= d).sum() for d in edges])
    past = np.array([((plen >= d) & np.isfinite(fc) & (fc <= d)).sum() for d in edges])
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(alive > 0, past / np.maximum(alive, 1), np.nan)
    out: dict[str, Any] = {}
    has = np.isfinite(fc)
    out["fraction_with_caustic"] = float(has.mean()) if has.size else float("nan")
    out["mean_first_caustic_m"] = float(fc[has].mean()) if has.any() else float("nan")
    out["median_first_caustic_m"] = float(np.median(fc[has])) if has.any() else float("nan")
    out["mean_caustics_per_ray"] = float(ncau.mean()) if ncau.size else float("nan")
    sea = _sea(depth)
    dist = distance_to_launch_m(depth, end["launch_x"].values, end["launch_y"].values)
    reached = sea & np.isfinite(np.asarray(result.first_arrival_s.values, dtype=float)) \
        if result.first_arrival_s is not None else sea
    prof = scintillation_profile(result.energy, dist, bin_m=bin_m, where=reached) \
        if result.energy is not None else pd.DataFrame(columns=["distance_m", "scintillation"])
    out["scintillation_index"] = scintillation_index(result.energy, reached) if result.energy is not None \
        else float("nan")
    if len(prof):
        k = int(np.nanargmax(prof["scintillation"].to_numpy()))
        out["peak_scintillation_distance_m"] = float(prof["distance_m"].iloc[k])
        out["peak_scintillation"] = float(prof["scintillation"].iloc[k])
    else:
        out["peak_scintillation_distance_m"] = float("nan")
        out["peak_scintillation"] = float("nan")
    centres = edges
    si_interp = np.interp(centres, prof["distance_m"].to_numpy(float), prof["scintillation"].to_numpy(float),
                          left=np.nan, right=np.nan) if len(prof) else np.full(centres.shape, np.nan)
    out["profile"] = pd.DataFrame(
        {
            "distance_m": centres,
            "n_rays_alive": alive,
            "fraction_past_first_caustic": frac,
            "scintillation": si_interp,
        }
    )
    out["scintillation_profile"] = prof
    stats = fluctuations
    if stats is None and lowpass_km is not None:
        stats = fluctuation_statistics(depth, lowpass_km)
    pred = float("nan")
    if stats is not None:
        out.update({k: v for k, v in stats.items()})
        pred = predicted_focusing_distance(stats["eps_speed"], stats["corr_length_m"])
        out["predicted_mean_first_caustic_m"] = predicted_focusing_distance(
            stats["eps_speed"], stats["corr_length_m"], statistic="mean")
    out["predicted_focusing_distance_m"] = pred
    out["coast_distance_m"] = float(coast_distance_m) if coast_distance_m is not None else float("nan")
    if coast_distance_m is not None and np.isfinite(pred):
        beyond = bool(coast_distance_m > pred)
        out["coast_beyond_focusing"] = beyond
        out["message"] = (
            f"coast at ~{coast_distance_m / 1e3:.0f} km from the source lies "
            f"{'beyond' if beyond else 'within'} the expected distance to strong random focusing "
            f"~{pred / 1e3:.0f} km (eps_speed={stats['eps_speed']:.3f}, l={stats['corr_length_m'] / 1e3:.1f} km): "
            + ("focusing by the small depth variations is expected to matter"
               if beyond else "random focusing by the small depth variations is not yet fully developed")
        )
        if stats["eps_speed"] > 0.1:
            out["message"] += (
                "; caution: eps_speed > 0.1 is outside the weak-fluctuation theory (large features such "
                "as trenches or shelf breaks dominate) - read the maps, not the scaling"
            )
    else:
        out["coast_beyond_focusing"] = None
        out["message"] = "no prediction of the random-focusing distance (no low-pass scale or no coast distance)"
    return out


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


def _default_max_distance(segments: pd.DataFrame, depth: xr.DataArray, info: GridInfo, stop: float) -> float:
    """3 cells + 1.5 x median offset [m] of the segment centres from the stop-isobath contour."""
    import shapely

    from .coast import coastline_from_grid

    base = 3.0 * max(info.spacing_m())
    if not (np.isfinite(stop) and stop > 0):
        return base
    try:
        lines = coastline_from_grid(depth, stop, min_length_m=0.0)
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
    reason = np.asarray(end["reason"].values)
    coast = reason == REASON_COAST
    stop = float(end.attrs.get("stop_depth_m", np.nan))
    if not coast.any():
        counts = {_REASON_NAMES.get(int(c), str(c)): int((reason == c).sum()) for c in np.unique(reason)}
        raise CoastError(
            f"no ray reached the stop isobath ({stop:g} m); ray ends: {counts}. Lower stop_depth, "
            f"raise max_time_s, widen the grid or aim the source at the coast - no ranking can be made"
        )
    nseg = len(segments)
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
            f"coastline nearer the stop isobath (e.g. coastline_from_grid(depth, {stop:g}))"
        )
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
    if ref_result is not None:
        rend = ref_result.end
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
    else:
        out["ref_n_rays"] = pd.array([pd.NA] * nseg, dtype="Int64")
        out["ref_energy_per_m"] = np.nan
        out["lensing_factor"] = np.nan
        out["lensing_lo"] = np.nan
        out["lensing_hi"] = np.nan
    # indicative amplitudes -------------------------------------------------------------
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
    # regularisation width at the segment: first Fresnel zone radius sqrt(lambda L)/2 with the
    # wavelength at the stop isobath and L the distance from the nearest launch point
    lp = np.unique(np.round(_to_xyz(info, end["launch_x"].values, end["launch_y"].values), 3), axis=0)
    dseg, _ = cKDTree(lp).query(_to_xyz(info, out["x_mid"].to_numpy(float), out["y_mid"].to_numpy(float)))
    if info.geographic:
        dseg = 2 * info.radius_m * np.arcsin(np.clip(dseg / (2 * info.radius_m), 0, 1))
    out["fresnel_sigma_m"] = 0.5 * np.sqrt(c_stop * period_s * dseg)
    rel = agg["n"] >= int(min_rays)
    if ref_result is not None:
        rel &= out["ref_n_rays"].to_numpy(np.int64) >= int(min_rays)
    out["reliable"] = rel
    out = _add_ranks(out, ref_result is not None)
    n_assigned = int((idx >= 0).sum())
    out.attrs.update(
        {
            "cautions": _cautions(),
            "n_rays_total": int(x.size),
            "n_rays_coast": int(ci.size),
            "n_rays_assigned": n_assigned,
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
    if ref_result is not None:
        out.attrs["ref_energy_coast_J"] = ref_coast_e
        out.attrs["ref_energy_coast_unassigned_J"] = ref_unassigned
        if ref_coast_e > 0 and ref_unassigned > 0.25 * ref_coast_e:
            warnings.warn(
                f"{100 * ref_unassigned / ref_coast_e:.0f} % of the reference run's coastal energy ends farther "
                f"than max_distance_m={max_distance_m:.0f} m from the segments (the low-pass moved the stop "
                "isobath): lensing factors near the coast are biased high; raise max_distance_m or use a "
                "larger stop depth",
                ResolutionWarning,
                stacklevel=2,
            )
    e_coast = float(np.asarray(end["weight"].values, float)[coast].sum())
    if e_coast > 0 and out.attrs["energy_coast_unassigned_J"] > 0.5 * e_coast:
        warnings.warn(
            f"{100 * out.attrs['energy_coast_unassigned_J'] / e_coast:.0f} % of the energy reaching the stop "
            f"isobath lies farther than max_distance_m={max_distance_m:.0f} m from every segment: raise "
            "max_distance_m if the coastline lies inshore of the stop isobath, or segment the whole coast",
            ResolutionWarning,
            stacklevel=2,
        )
    if not rel.any():
        warnings.warn(
            f"no coastline segment has >= {min_rays} contributing rays"
            + (" in both runs" if ref_result is not None else "")
            + f" ({n_assigned} rays on {int((agg['n'] > 0).sum())} segments): rankings are unreliable; "
            "trace more rays or use longer segments",
            ResolutionWarning,
            stacklevel=2,
        )
    return out


def _rank_desc(values: np.ndarray, eligible: np.ndarray) -> pd.arrays.IntegerArray:
    r = np.zeros(len(values), dtype=np.int64)
    ok = eligible & np.isfinite(values)
    order = np.argsort(-values[ok], kind="stable")
    pos = np.flatnonzero(ok)[order]
    r[pos] = np.arange(1, pos.size + 1)
    return pd.arrays.IntegerArray(r, ~ok)


def _add_ranks(table: pd.DataFrame, have_lensing: bool) -> pd.DataFrame:
    rel = table["reliable"].to_numpy(bool)
    if have_lensing:
        table["rank_lensing"] = _rank_desc(table["lensing_factor"].to_numpy(float), rel)
    else:
        table["rank_lensing"] = pd.array([pd.NA] * len(table), dtype="Int64")
    table["rank_amplitude"] = _rank_desc(table["amp_1m_m"].to_numpy(float), rel)
    return table


def _pct(a: np.ndarray, q: float) -> np.ndarray:
    """Column-wise nan-percentile; NaN for all-NaN columns (no warning)."""
    out = np.full(a.shape[1], np.nan)
    ok = np.isfinite(a).any(axis=0) | np.isinf(a).any(axis=0)
    if ok.any():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            out[ok] = np.nanpercentile(a[:, ok], q, axis=0)
    return out


_BY = {
    "lensing_factor": ("lensing_factor", "rank_lensing"),
    "lensing": ("lensing_factor", "rank_lensing"),
    "amp_1m_m": ("amp_1m_m", "rank_amplitude"),
    "amplitude": ("amp_1m_m", "rank_amplitude"),
}


def rank_segments(table: pd.DataFrame, top_k: int = 20, by: str = "lensing_factor") -> pd.DataFrame:
    """Top-``k`` hotspot segments, reliable ones first, unreliable ones flagged after them.

    Parameters
    ----------
    table : pandas.DataFrame
        Output of :func:`segment_arrivals`.
    top_k : int
        Number of reliable segments to list.
    by : {"lensing_factor", "amp_1m_m"} (aliases "lensing", "amplitude")
        Ranking quantity (descending).

    Returns
    -------
    pandas.DataFrame
        The ``top_k`` reliable segments in rank order, followed (``reliable == False``, no rank)
        by the unreliable segments whose value would have placed them among them. ``attrs``
        keep the cautions and method notes.

    Raises
    ------
    CoastError
        If no segment received any ray (nothing to rank), or ``by`` is unknown / unavailable.
    """
    if by not in _BY:
        raise InputError(f"rank_segments: by='{by}' unknown; expected one of {sorted(_BY)}")
    col, rcol = _BY[by]
    if col not in table.columns or "reliable" not in table.columns:
        raise InputError("rank_segments: table lacks arrival columns; build it with segment_arrivals")
    if int(top_k) < 1:
        raise InputError(f"top_k={top_k}: expected >= 1")
    vals = table[col].to_numpy(float)
    if not np.isfinite(vals).any():
        raise CoastError(
            f"rank_segments: no segment has a finite {col} (no rays reached the segments"
            + (" or no reference run was given" if col == "lensing_factor" else "")
            + "); nothing to rank"
        )
    rel = table["reliable"].to_numpy(bool)
    ranked = table[rel & np.isfinite(vals)].sort_values(rcol).head(int(top_k))
    if len(ranked):
        floor = float(ranked[col].min()) if len(ranked) == int(top_k) else -np.inf
    else:
        floor = -np.inf
        warnings.warn(
            f"rank_segments: no reliable segment (>= {table.attrs.get('min_rays', '?')} rays); "
            "listing unreliable segments only, flagged reliable=False",
            ResolutionWarning,
            stacklevel=2,
        )
    unrel = table[(~rel) & np.isfinite(vals) & (vals >= floor)].sort_values(col, ascending=False)
    if len(ranked) == 0:
        unrel = unrel.head(int(top_k))
    out = pd.concat([ranked, unrel])
    out.attrs = dict(table.attrs)
    out.attrs["ranked_by"] = col
    out.attrs["cautions"] = _cautions()
    return out


# --------------------------------------------------------------------------------------
# energy bookkeeping
# --------------------------------------------------------------------------------------
def energy_budget(
    result: Any,
    arrivals: pd.DataFrame | None = None,
    *,
    source_energy_J: float | None = None,
    tol: float = 0.01,
    check: bool = False,
) -> dict[str, float]:
    """Where the source energy went: segments, unassigned coast, grid edge, land/NaN, time limit.

    Parameters
    ----------
    result : RayResult
        The run.
    arrivals : pandas.DataFrame, optional
        :func:`segment_arrivals` table of this run: splits the coast energy into the part on
        segments (sum of ``energy_J``) and the rest.
    source_energy_J : float, optional
        Source energy [J] (``RayFan.energy_J``); default the sum of the ray weights.
    tol : float
        Allowed relative imbalance.
    check : bool
        Raise :class:`HealthCheckError` when the imbalance exceeds ``tol``.

    Returns
    -------
    dict
        Energies [J] ``source_J, segments_J, coast_unassigned_J, left_grid_J, land_or_nodata_J,
        time_limit_J, polar_limit_J, other_J, total_J``, and ``relative_error``, ``ok``.
    """
    end = result.end
    w = np.asarray(end["weight"].values, dtype=float)
    reason = np.asarray(end["reason"].values)
    by = {name: float(w[reason == code].sum()) for code, name in _REASON_NAMES.items()}
    known = np.isin(reason, list(_REASON_NAMES))
    other = float(w[~known].sum())
    src = float(w.sum()) if source_energy_J is None else float(source_energy_J)
    seg = float(arrivals["energy_J"].sum()) if arrivals is not None else by["coast"]
    unassigned = by["coast"] - seg
    if arrivals is not None and "energy_coast_unassigned_J" in arrivals.attrs:
        unassigned = float(arrivals.attrs["energy_coast_unassigned_J"])
    out = {
        "source_J": src,
        "segments_J": seg,
        "coast_unassigned_J": unassigned,
        "left_grid_J": by["left_grid"],
        "land_or_nodata_J": by["land_or_nodata"],
        "time_limit_J": by["time_limit"],
        "polar_limit_J": by["polar_limit"],
        "other_J": other,
    }
    total = seg + out["coast_unassigned_J"] + by["left_grid"] + by["land_or_nodata"] + by["time_limit"] \
        + by["polar_limit"] + other
    out["total_J"] = total
    out["relative_error"] = abs(total - src) / src if src > 0 else float("nan")
    out["ok"] = bool(out["relative_error"] <= tol)
    if check and not out["ok"]:
        raise HealthCheckError(
            f"energy bookkeeping off by {100 * out['relative_error']:.2f} % (> {100 * tol:g} %): "
            f"source {src:.4g} J, accounted {total:.4g} J"
        )
    return out


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
    reference_km: float,
    stop_depth: float = 20.0,
    segments: pd.DataFrame | None = None,
    segment_length_m: float | None = None,
    trace_kwargs: dict | None = None,
    max_distance_m: float | None = None,
    min_rays: int = 10,
    n_boot: int = 200,
    seed: int = 0,
    top_k: int = 20,
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
    reference_km : float
        Low-pass scale of the reference bathymetry [km] (Gaussian std).
    stop_depth : float
        Stop isobath [m].
    segments : pandas.DataFrame, optional
        Coastline segments; default: the ``stop_depth`` contour of the grid cut into
        ``segment_length_m`` pieces.
    segment_length_m : float, optional
        Default 10 grid cells.
    trace_kwargs : dict, optional
        Extra arguments of :func:`tsunamifocus.rays.trace_rays` (e.g. ``q0``, ``p0``, ``max_time_s``).
    max_distance_m, min_rays, n_boot, seed : see :func:`segment_arrivals`.
    top_k : int
        Length of the ranking.

    Returns
    -------
    FocusingResult
    """
    from .coast import coastline_from_grid, segment_coastline
    from .rays import trace_rays

    info = GridInfo.from_dataarray(depth)
    x0, y0, az, w, e_src = _fan_arrays(fan)
    kw = dict(trace_kwargs or {})
    kw.setdefault("stop_depth", stop_depth)
    ref = reference_depth(depth, reference_km)
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
                     f"energy over real / over same-mean reference bathymetry (low-pass {reference_km:g} km)")
    foc = ratio_map(e_real, e_flat, "focusing_factor", "energy over real bathymetry / over constant-depth ocean")
    tt = real.first_arrival_s / 60.0
    tt.name = "travel_time_min"
    tt.attrs = {"units": "min", "long_name": "first ray arrival time", "caution": _cautions()}
    if segments is None:
        if segment_length_m is None:
            segment_length_m = 10.0 * max(info.spacing_m())
        segments = segment_coastline(coastline_from_grid(depth, stop_depth), segment_length_m, depth)
    table = segment_arrivals(segments, real, depth, period_s=period_s, ref_result=refr,
                             max_distance_m=max_distance_m, min_rays=min_rays, n_boot=n_boot, seed=seed)
    ranking = rank_segments(table, top_k=top_k, by="lensing_factor")
    d_coast = _segment_distance(table, info, x0, y0)
    diag = branch_diagnostics(real, depth, lowpass_km=reference_km, coast_distance_m=d_coast)
    budget = energy_budget(real, table, source_energy_J=e_src)
    return FocusingResult(
        energy=e_real, energy_raw=real.energy, lensing_factor=lens, focusing_factor=foc,
        travel_time_min=tt, kernel_sigma_m=sigma, reference_depth=ref, segments=table,
        ranking=ranking, diagnostics=diag, budget=budget,
        runs={"real": real, "reference": refr, "flat": flatr}, cautions=_cautions(),
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
