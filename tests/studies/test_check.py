"""Tests of tsunamifocus.studies.check (the comparison of the ray screening with the wave solver).

Outside references: long-wave speed c = sqrt(g h) (Lamb 1932, Hydrodynamics, section 170) for
the default simulated duration; scipy.stats for the rank agreement reported by the check.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from tsunamifocus.constants import GRAVITY
from tsunamifocus.focusing.agreement import compare_rankings, topk_mask
from tsunamifocus.grid import make_grid
from tsunamifocus.studies.check import default_check_duration_s


def test_default_duration_is_one_and_a_half_crossings_of_the_grid_diagonal():
    """On constant depth: 1.5 x grid diagonal / sqrt(g h)."""
    dx = 1000.0
    depth = make_grid(np.full((60, 80), 2500.0), dx * np.arange(80), dx * np.arange(60), "EPSG:32633")
    t = default_check_duration_s(depth)
    diag = math.hypot(79 * dx, 59 * dx)
    expected = 1.5 * diag / math.sqrt(GRAVITY * 2500.0)
    assert t == pytest.approx(expected, rel=0.03)  # the grid extent may count whole cells


def test_rank_agreement_matches_scipy_and_top_k_sets():
    """The agreement figures equal scipy's spearmanr / kendalltau; top-k overlap counts shared members."""
    rng = np.random.default_rng(5)
    ray = pd.Series(rng.lognormal(0, 0.6, 30), index=[f"S{i:04d}" for i in range(30)])
    wave = ray * rng.lognormal(0, 0.3, 30)
    wave.iloc[3] = np.nan
    ag = compare_rankings(ray, wave, k=5)
    ok = np.isfinite(wave.to_numpy())
    assert ag["n"] == 29
    assert ag["spearman"] == pytest.approx(stats.spearmanr(ray[ok], wave[ok]).statistic)
    assert ag["kendall"] == pytest.approx(stats.kendalltau(ray[ok], wave[ok]).statistic)
    a, b = ray[ok].to_numpy(), wave[ok].to_numpy()
    top_a = set(np.argsort(-a)[:5].tolist())
    top_b = set(np.argsort(-b)[:5].tolist())
    assert ag["topk_common"] == len(top_a & top_b)


def test_topk_mask_ties_and_nan():
    """Ties go to the earlier item, NaN never enters the top set (same rule as pandas rank(method='first'))."""
    v = np.array([3.0, np.nan, 5.0, 3.0, 1.0])
    np.testing.assert_array_equal(topk_mask(v, 2), [True, False, True, False, False])
    r = pd.Series(v).rank(ascending=False, method="first", na_option="bottom").to_numpy()
    for k in range(1, 6):
        np.testing.assert_array_equal(topk_mask(v, k), (r <= k) & np.isfinite(v))


def test_lensing_check_compares_energy_ratios_of_the_two_wave_runs():
    """The wave lensing factor is (A_real / A_reference)^2: identical oceans give exactly 1 (identity), and
    a shoal in front of part of a straight coast raises it there and only there (a long-wave lens focuses
    behind it; Lamb 1932, section 170: c = sqrt(g h) is slower over the shoal)."""
    from shapely.geometry import LineString

    from tsunamifocus.coast.segments import segment_coastline
    from tsunamifocus.studies.check import compare_with_waves

    dx = 2000.0
    x = np.arange(0.0, 300e3 + 1, dx)
    y = np.arange(0.0, 400e3 + 1, dx)
    X, Y = np.meshgrid(x, y)
    flat = np.where(X < 280e3, 3000.0, -5.0)
    shoal = flat - np.where(X < 280e3, 2000.0 * np.exp(-((X - 150e3) ** 2 + (Y - 200e3) ** 2) / (2 * 25e3**2)), 0.0)
    ref = make_grid(flat, x, y, "EPSG:32633")
    real = make_grid(shoal, x, y, "EPSG:32633")
    # a plane wave launched as a 20 km wide ridge of water along the western edge
    eta = make_grid(np.exp(-((X - 30e3) ** 2) / (2 * 10e3**2)), x, y, "EPSG:32633")
    seg = segment_coastline([LineString([(279e3, 40e3), (279e3, 360e3)])], 20e3, real)
    seg["amp_stop_m"] = 1.0 + np.arange(len(seg))  # arbitrary ray values: only the wave side is checked
    seg["lensing_factor"] = 1.0 + np.arange(len(seg))
    same = compare_with_waves(ref, eta, seg, reference_depth=ref, duration_s=1800.0, k=3, threads=1)
    np.testing.assert_allclose(same.table["wave_lensing"], 1.0, rtol=1e-12)
    chk = compare_with_waves(real, eta, seg, reference_depth=ref, duration_s=1800.0, k=3, threads=1)
    wl = chk.table["wave_lensing"].to_numpy()
    middle = np.abs(seg["y_mid"].to_numpy() - 200e3) < 30e3
    far = np.abs(seg["y_mid"].to_numpy() - 200e3) > 120e3
    assert wl[middle].min() > 1.3 and np.all(np.abs(wl[far] - 1.0) < 0.15)
    assert set(chk.agreement["lensing"]) >= {"spearman", "kendall", "topk_common", "k", "n"}
    assert chk.agreement["lensing"]["n"] == len(seg)
