"""Smooth Gaussian-correlated random fields (the ingredient of branched flow).

One generator serves the demo region, the benchmarks, the validation tests and the
ensemble's bathymetry perturbations, so a "5 % rms, 20 km correlation length" means the
same thing everywhere.

Convention: the field has zero mean, standard deviation ``rms`` and covariance
``C(r) = rms**2 * exp(-r**2 / (2 * corr_length**2))`` (a Gaussian correlation function;
``corr_length`` is its standard-deviation length). It is synthesised spectrally: white
noise filtered in Fourier space by ``sqrt(S(k))`` with ``S(k) ~ exp(-k**2 corr_length**2 / 2)``,
on a grid padded by three correlation lengths so the field is not periodic across the
edges, then rescaled to the exact sample rms.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ['gaussian_random_field', 'red_noise_field']


def gaussian_random_field(
    shape: tuple[int, int],
    spacing_m: tuple[float, float] | float,
    corr_length_m: float,
    rms: float = 1.0,
    seed: int | np.random.SeedSequence | None = 0,
) -> np.ndarray:
    """Return a zero-mean, Gaussian-correlated random field.

    Parameters
    ----------
    shape : (int, int)
        ``(ny, nx)`` of the output.
    spacing_m : float or (float, float)
        Grid spacing ``(dx, dy)`` in metres (one value for square cells).
    corr_length_m : float
        Correlation length [m] (see module docstring for the definition).
    rms : float
        Standard deviation of the output (same units as the caller wants).
    seed : int, numpy.random.SeedSequence or None
        Seed of :func:`numpy.random.default_rng`; the same seed gives the same field.

    Returns
    -------
    numpy.ndarray
        Array of ``shape``, float64, sample mean 0 and sample std ``rms``.

    Examples
    --------
    >>> f = gaussian_random_field((64, 64), 1000.0, 5000.0, rms=0.05, seed=1)
    >>> round(float(f.std()), 6), abs(float(f.mean())) < 1e-12
    (0.05, True)
    """
    ny, nx = (int(shape[0]), int(shape[1]))
    if ny < 1 or nx < 1:
        raise InputError(f"random field shape must be positive, got {shape}")
    if np.isscalar(spacing_m):
        dx = dy = float(spacing_m)  # type: ignore[arg-type]
    else:
        dx, dy = (float(spacing_m[0]), float(spacing_m[1]))  # type: ignore[index]
    if not (dx > 0 and dy > 0):
        raise InputError(f"random field spacing must be > 0 m, got {spacing_m}")
    if not corr_length_m > 0:
        raise InputError(f"correlation length must be > 0 m, got {corr_length_m}")
    if not rms >= 0:
        raise InputError(f"rms must be >= 0, got {rms}")
    padx = int(np.ceil(3 * corr_length_m / dx))
    pady = int(np.ceil(3 * corr_length_m / dy))
    px, py = nx + 2 * padx, ny + 2 * pady
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal((py, px))
    kx = 2 * np.pi * np.fft.rfftfreq(px, d=dx)
    ky = 2 * np.pi * np.fft.fftfreq(py, d=dy)
    k2 = ky[:, None] ** 2 + kx[None, :] ** 2
    filt = np.exp(-k2 * corr_length_m**2 / 4.0)
    field = np.fft.irfft2(np.fft.rfft2(noise) * filt, s=(py, px))
    field = field[pady : pady + ny, padx : padx + nx]
    field = field - field.mean()
    std = field.std()
    if std == 0 or rms == 0:
        return np.zeros((ny, nx))
    return field * (rms / std)


def red_noise_field(
    shape: tuple[int, int],
    spacing_m: float,
    *,
    slope: float = 3.0,
    largest_m: float = 500e3,
    smallest_m: float = 10e3,
    rms: float = 1.0,
    seed: int | np.random.SeedSequence | None = 0,
) -> np.ndarray:
    """Return a zero-mean random field with a red power spectrum (power growing with scale).

    Spectral synthesis: white noise filtered by ``sqrt(S(k))`` with
    ``S(k) = (k^2 + k0^2)^(-slope / 2) exp(-(k smallest / 2 pi)^2)``, ``k0 = 2 pi / largest``:
    between the two scales the isotropic power spectrum falls as ``k^-slope`` (``slope = 3``
    is typical of sea-floor relief at tens to hundreds of km, common practice, no source), so
    long features dominate, unlike a field with one correlation length. Padded by a quarter of
    the largest scale so it is not periodic across the edges, then rescaled to the exact sample rms.

    Parameters
    ----------
    shape : (int, int)
        ``(ny, nx)``.
    spacing_m : float
        Grid spacing [m] (square cells).
    slope : float
        Spectral exponent (> 0).
    largest_m, smallest_m : float
        Scales [m] where the power law levels off and where it is cut (0 < smallest < largest).
    rms : float
        Standard deviation of the output.
    seed : int, numpy.random.SeedSequence or None
        Seed of :func:`numpy.random.default_rng`.

    Returns
    -------
    numpy.ndarray
        Array of ``shape``, sample mean 0 and sample std ``rms``.
    """
    ny, nx = (int(shape[0]), int(shape[1]))
    if ny < 1 or nx < 1:
        raise InputError(f"random field shape must be positive, got {shape}")
    if not spacing_m > 0:
        raise InputError(f"random field spacing must be > 0 m, got {spacing_m}")
    if not (0 < smallest_m < largest_m):
        raise InputError(f"red-noise scales: expected 0 < smallest_m ({smallest_m}) < largest_m ({largest_m})")
    if not slope > 0:
        raise InputError(f"spectral slope must be > 0, got {slope}")
    if not rms >= 0:
        raise InputError(f"rms must be >= 0, got {rms}")
    pad = int(np.ceil(0.25 * largest_m / spacing_m))
    py, px = ny + 2 * pad, nx + 2 * pad
    noise = np.random.default_rng(seed).standard_normal((py, px))
    kx = 2 * np.pi * np.fft.rfftfreq(px, d=spacing_m)
    ky = 2 * np.pi * np.fft.fftfreq(py, d=spacing_m)
    k2 = ky[:, None] ** 2 + kx[None, :] ** 2
    k0 = 2 * np.pi / largest_m
    amp = (k2 + k0**2) ** (-slope / 4.0) * np.exp(-0.5 * k2 * (smallest_m / (2 * np.pi)) ** 2)
    field = np.fft.irfft2(np.fft.rfft2(noise) * amp, s=(py, px))[pad : pad + ny, pad : pad + nx]
    field = field - field.mean()
    std = field.std()
    if std == 0 or rms == 0:
        return np.zeros((ny, nx))
    return field * (rms / std)
