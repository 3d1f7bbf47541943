"""Tests of the wavelength smoothing of the sea floor (tsunamifocus.ocean.wavelength)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tsunamifocus.constants import GRAVITY
from tsunamifocus.errors import InputError
from tsunamifocus.grid import make_grid
from tsunamifocus.ocean.wavelength import wavelength_smoothed_depth

CRS = "EPSG:32631"


def grid(values, dx=2000.0):
    ny, nx = values.shape
    return make_grid(values, np.arange(nx) * dx, np.arange(ny) * dx, CRS)


def test_constant_ocean_is_unchanged():
    # the normalised (masked) Gaussian average of a constant is that constant (definition)
    d = grid(np.full((60, 80), 4000.0))
    out = wavelength_smoothed_depth(d, 900.0)
    np.testing.assert_allclose(out.values, 4000.0, rtol=1e-12)


def test_short_speed_ripple_is_damped_by_the_gaussian_transfer_function():
    # A Gaussian of std sigma multiplies a sinusoid of wavelength l by exp(-2 pi^2 sigma^2 / l^2)
    # (Fourier transform of a Gaussian). A 1 % speed ripple of l = 100 km on 4000 m depth, period
    # 600 s: lambda = sqrt(g 4000) 600 = 119 km, sigma = 0.25 lambda = 29.7 km -> factor 0.175.
    dx = 2000.0
    x = np.arange(400) * dx
    l = 100e3
    c0 = math.sqrt(GRAVITY * 4000.0)
    c = c0 * (1.0 + 0.01 * np.sin(2 * np.pi * x / l))
    d = grid(np.tile(c**2 / GRAVITY, (40, 1)), dx)
    out = wavelength_smoothed_depth(d, 600.0, fraction=0.25)
    cs = np.sqrt(GRAVITY * out.values[20, 100:300])
    amp = (cs.max() - cs.min()) / 2 / c0
    sigma = 0.25 * c0 * 600.0
    expected = 0.01 * math.exp(-2 * math.pi**2 * sigma**2 / l**2)
    assert amp == pytest.approx(expected, rel=0.05)
    # a ripple much longer than the wavelength survives almost unchanged (factor > 0.95)
    c_long = c0 * (1.0 + 0.01 * np.sin(2 * np.pi * x / 700e3))
    out_long = wavelength_smoothed_depth(grid(np.tile(c_long**2 / GRAVITY, (40, 1)), dx), 600.0)
    i = int(np.argmax(c_long[100:300])) + 100
    assert (math.sqrt(GRAVITY * out_long.values[20, i]) / c0 - 1.0) > 0.95 * (c_long[i] / c0 - 1.0)


def test_coast_and_stop_isobath_stay_and_shallow_water_is_smoothed_less():
    # Deep basin (4000 m) shoaling linearly to a coast; land east. Cells at or above the stop
    # depth keep their depth; sea cells deeper than it never become shallower than it; the
    # smoothing width follows the local wavelength (common practice, no source).
    nx = 200
    h = np.concatenate([np.full(120, 4000.0), np.linspace(4000.0, 5.0, 60), -np.linspace(1, 50, 20)])
    rng = np.random.default_rng(0)
    vals = np.tile(h, (50, 1)) * (1.0 + 0.02 * rng.standard_normal((50, nx)) * (h > 500))
    d = grid(vals)
    out = wavelength_smoothed_depth(d, 900.0, stop_depth_m=20.0).values
    keep = vals <= 20.0
    np.testing.assert_array_equal(out[keep], vals[keep])
    assert np.all(out[vals > 20.0] >= 20.0)
    # white noise of 2 % in deep water (one 2 km cell) is averaged away by the ~45 km wide kernel:
    # its rms across the rows falls below 0.3 % (it shrinks roughly as cell / (sqrt(4 pi) sigma))
    deep = out[:, 10:60]
    assert float(np.max(deep.std(axis=0) / deep.mean(axis=0))) < 0.003
    # ... while the slope's linear profile is kept to within 3 % halfway up it
    assert out[25, 150] == pytest.approx(vals[25, 150], rel=0.03)


def test_bad_parameters_are_refused():
    d = grid(np.full((20, 20), 1000.0))
    with pytest.raises(InputError, match="period_s"):
        wavelength_smoothed_depth(d, 0.0)
    with pytest.raises(InputError, match="fraction"):
        wavelength_smoothed_depth(d, 600.0, fraction=3.0)
