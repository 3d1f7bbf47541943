"""Tests of tsunamifocus.ocean.randomfield against the analytic Gaussian covariance.

The generator's stated covariance is C(r) = rms^2 exp(-r^2 / (2 L^2)) (module docstring); a
Gaussian power spectrum S(k) ~ exp(-k^2 L^2 / 2) has exactly that covariance (the Fourier
transform of a Gaussian is a Gaussian; e.g. Rasmussen & Williams 2006, Gaussian Processes for
Machine Learning, eq. 4.9 and section 4.2.1 on the squared-exponential covariance). Sample
statistics are compared with scipy.stats.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tsunamifocus.errors import InputError
from tsunamifocus.ocean.randomfield import gaussian_random_field


def _lag_correlation(fields, lag, axis):
    num = den = 0.0
    for f in fields:
        a = np.moveaxis(f, axis, 0)
        num += float(np.mean(a[:-lag] * a[lag:])) if lag else float(np.mean(a * a))
        den += float(np.mean(a * a))
    return num / den


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (1.0, 2.0)])
def test_correlation_follows_the_gaussian_covariance(spacing):
    """Empirical correlation at lags 0.5 L .. 2 L within 0.04 of exp(-r^2 / (2 L^2)), along x and y."""
    L = 8.0
    dx, dy = spacing
    fields = [gaussian_random_field((400, 400), spacing, L, rms=1.0, seed=s) for s in range(4)]
    for axis, d in ((1, dx), (0, dy)):
        for lag in sorted({int(round(m * L / d)) for m in (0.5, 1.0, 1.5, 2.0)}):
            r = lag * d
            expected = np.exp(-(r**2) / (2 * L**2))
            assert _lag_correlation(fields, lag, axis) == pytest.approx(expected, abs=0.04), (axis, lag)


def test_variance_mean_and_gaussian_marginal():
    """Sample std is rms, the mean zero, and the values normal (skewness and excess kurtosis near 0)."""
    f = gaussian_random_field((300, 300), 1000.0, 3000.0, rms=0.05, seed=3)
    assert f.std() == pytest.approx(0.05, rel=1e-12)
    assert abs(f.mean()) < 1e-15
    assert abs(stats.skew(f.ravel())) < 0.1
    assert abs(stats.kurtosis(f.ravel())) < 0.2


def test_same_seed_same_field_and_bad_input():
    """Seeded: the same seed gives the same field, another seed another one; bad sizes are refused."""
    a = gaussian_random_field((50, 60), 1.0, 4.0, seed=7)
    assert np.array_equal(a, gaussian_random_field((50, 60), 1.0, 4.0, seed=7))
    assert not np.array_equal(a, gaussian_random_field((50, 60), 1.0, 4.0, seed=8))
    with pytest.raises(InputError, match="correlation length"):
        gaussian_random_field((5, 5), 1.0, 0.0)
    with pytest.raises(InputError, match="spacing"):
        gaussian_random_field((5, 5), -1.0, 1.0)


def test_red_noise_spectrum_falls_with_the_stated_slope():
    # Between the two scales the radially averaged power spectrum of the field falls as k^-slope
    # (the synthesis filter sqrt(S(k)) with S ~ (k^2 + k0^2)^(-slope/2), spectral synthesis of
    # random fields); fitted on wavelengths 40-150 km for slope 3, within 10 %.
    from tsunamifocus.ocean.randomfield import red_noise_field

    n, dx = 512, 2000.0
    powers = []
    for seed in range(4):
        f = red_noise_field((n, n), dx, slope=3.0, largest_m=600e3, smallest_m=8e3, rms=1.0, seed=seed)
        assert f.std() == pytest.approx(1.0) and abs(f.mean()) < 1e-12
        powers.append(np.abs(np.fft.fft2(f * np.hanning(n)[:, None] * np.hanning(n)[None, :])) ** 2)
    P = np.mean(powers, axis=0)
    k = np.hypot(*np.meshgrid(np.fft.fftfreq(n, d=dx), np.fft.fftfreq(n, d=dx)))
    band = (k > 1 / 150e3) & (k < 1 / 40e3)
    bins = np.logspace(np.log10(1 / 150e3), np.log10(1 / 40e3), 9)
    idx = np.digitize(k[band], bins)
    kk = np.array([k[band][idx == i].mean() for i in range(1, len(bins))])
    pp = np.array([P[band][idx == i].mean() for i in range(1, len(bins))])
    slope = np.polyfit(np.log(kk), np.log(pp), 1)[0]
    assert slope == pytest.approx(-3.0, rel=0.10)
    # deterministic for a seed
    a = red_noise_field((32, 32), dx, seed=5)
    np.testing.assert_array_equal(a, red_noise_field((32, 32), dx, seed=5))
