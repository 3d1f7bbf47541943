"""Random-medium theory: fluctuation statistics, caustic distances, scintillation."""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
import pandas as pd
import xarray as xr
from scipy import fft as sfft
from scipy import integrate

from ..errors import InputError
from ..grid import GridInfo
from ..ocean.smooth import smooth_bathymetry

__all__ = ['fluctuation_statistics', 'riccati_caustic_constant', 'riccati_caustic_quantile', 'predicted_focusing_distance', 'scintillation_index', 'scintillation_profile']


# --------------------------------------------------------------------------------------
# random focusing: statistics of the bathymetry and Kaplan's scaling
# --------------------------------------------------------------------------------------
#: The correlation length is first sought among lags of up to this many cells (little zero padding,
#: a transform about a third of the size), and among all lags up to half the grid only if the
#: autocorrelation has not fallen to exp(-1/2) by then.
_FIRST_LAG_CELLS: int = 64


def _corr_length_from_acf(f: np.ndarray, m: np.ndarray, dx: float, dy: float) -> float:
    """Length where the masked, radially averaged autocorrelation falls to exp(-1/2) [m].

    The autocorrelation comes from zero-padded FFTs; lags within a radius ``r`` need only
    ``r`` cells of padding (no wrap-around up to that lag), so a short radius is tried first.
    """
    ny, nx = f.shape
    rmax = 0.5 * min(nx * dx, ny * dy)
    r_first = _FIRST_LAG_CELLS * min(dx, dy)
    if r_first < rmax:
        ell = _acf_crossing(f, m, dx, dy, r_first, found_only=True)
        if ell is not None:
            return ell
    return _acf_crossing(f, m, dx, dy, rmax)


def _acf_crossing(f: np.ndarray, m: np.ndarray, dx: float, dy: float, rmax: float,
                  found_only: bool = False) -> float | None:
    """:func:`_corr_length_from_acf` over the lags within ``rmax`` [m] (``found_only``: None if no crossing)."""
    ny, nx = f.shape
    # zero padding to at least twice the size (no wrap-around), at lengths the FFT does fast
    pyf, pxf = sfft.next_fast_len(2 * ny, real=True), sfft.next_fast_len(2 * nx, real=True)
    py, px = pyf, pxf
    if found_only:
        # lags up to rmax (plus the one-cell margin of the selection below) free of wrap-around
        py = min(sfft.next_fast_len(ny + int(math.ceil(rmax / dy)) + 2, real=True), pyf)
        px = min(sfft.next_fast_len(nx + int(math.ceil(rmax / dx)) + 2, real=True), pxf)
    F = sfft.rfft2(np.where(m, f, 0.0), s=(py, px), workers=-1)
    M = sfft.rfft2(m.astype(float), s=(py, px), workers=-1)
    num = sfft.irfft2(F * np.conj(F), s=(py, px), workers=-1)
    den = sfft.irfft2(M * np.conj(M), s=(py, px), workers=-1)
    # the lags [cells] as the full padding's frequencies give them (a lag on a bin edge then
    # falls into the same bin whatever the padding)
    ky = (np.fft.fftfreq(pyf) * pyf)[np.round(np.fft.fftfreq(py) * py).astype(np.int64) % pyf]
    kx = (np.fft.fftfreq(pxf) * pxf)[np.round(np.fft.fftfreq(px) * px).astype(np.int64) % pxf]
    # only lags within rmax enter the profile
    jy, jx = np.flatnonzero(np.abs(ky * dy) <= rmax + dy), np.flatnonzero(np.abs(kx * dx) <= rmax + dx)
    thr = 0.5 * den.max() * 0.05
    num, den = num[np.ix_(jy, jx)], den[np.ix_(jy, jx)]
    with np.errstate(invalid="ignore", divide="ignore"):
        acf = np.where(den > thr, num / den, np.nan)
    R = np.hypot(ky[jy][:, None] * dy, kx[jx][None, :] * dx)
    c0 = acf[0, 0]
    if not (np.isfinite(c0) and c0 > 0):
        return float("nan")
    step = min(dx, dy)
    edges = np.arange(0.0, rmax + step, step)
    idx = np.floor(R.ravel() / step).astype(np.int64)  # uniform bins: the bin of each lag directly
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
        return None if found_only else float("nan")
    k = below[0]
    r0, r1, p0, p1 = r_mid[k - 1], r_mid[k], prof[k - 1], prof[k]
    return float(r0 + (p0 - target) / (p0 - p1) * (r1 - r0)) if p0 != p1 else float(r1)


def fluctuation_statistics(
    depth: xr.DataArray, reference_smooth_km: float, *, min_depth_m: float | None = None,
    lowpass: xr.DataArray | None = None,
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
    reference_smooth_km : float
        Low-pass scale [km] (``[focusing] reference_smooth_km``); should be several times the
        correlation length.
    min_depth_m : float, optional
        Exclude nodes shallower than this (in the low-pass) [m].
    lowpass : xarray.DataArray, optional
        ``smooth_bathymetry(depth, reference_smooth_km)`` when the caller has it already.

    Returns
    -------
    dict
        ``eps_depth, eps_speed, corr_length_m, lowpass_km`` (= ``reference_smooth_km``), ``n_nodes``.
    """
    info = GridInfo.from_dataarray(depth)
    h = np.asarray(depth.values, dtype=float)
    if lowpass is None:
        lowpass = smooth_bathymetry(depth, reference_smooth_km)
    lp = np.asarray(lowpass.values, dtype=float)
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
        "lowpass_km": float(reference_smooth_km),
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
