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
    """The wave lensing factor is the ratio of the wave energies (sum eta^2 dt) over the two oceans:
    identical oceans give exactly 1 (identity), a shoal in front of part of a straight coast raises it
    there and only there (a long-wave lens focuses behind it; Lamb 1932, section 170: c = sqrt(g h) is
    slower over the shoal), and the lens moves energy along the coast without making any (energy
    conservation of the linear long-wave equations, Lamb 1932, the article on the energy of long
    waves; article from memory): the coast's total stays that of the flat ocean."""
    from shapely.geometry import LineString

    from tsunamifocus.coast.segments import segment_coastline
    from tsunamifocus.coast.waves import segment_max_amplitude
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
    # the energy ratio of the two runs' time integrals of eta^2, the squared ratio of the maxima beside it
    sq = segment_max_amplitude(chk.wave, seg, real, field="eta_sq_integral")
    sq_ref = segment_max_amplitude(chk.wave_reference, seg, ref, field="eta_sq_integral")
    np.testing.assert_allclose(wl, sq.to_numpy() / sq_ref.to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(chk.table["wave_peak_lensing"],
                               (chk.table["wave_amp_stop_m"] / chk.table["wave_amp_reference_m"]) ** 2, rtol=1e-12)
    assert chk.agreement["lensing"]["wave_measure"] == "energy"
    assert chk.agreement["lensing_peak"]["wave_measure"] == "peak"
    # energy conservation: summed along the coast (equal segments), the lens's gain and loss cancel to
    # within what the shoal reflects back to sea
    assert float(np.sum(sq)) / float(np.sum(sq_ref)) == pytest.approx(1.0, abs=0.05)
    assert set(chk.agreement["lensing"]) >= {"spearman", "kendall", "topk_common", "k", "n"}
    assert chk.agreement["lensing"]["n"] == len(seg)
    # an open coast under a plane wave: no segment the wave barely reaches
    assert chk.agreement["n_faint_wave"] == 0
    # the same factor over the whole ocean (WaveCheck.lensing_map): exactly 1 for identical oceans;
    # behind the shoal the lens's focus (> 1), beside it the water it drew energy from (< 1), and
    # undisturbed water on the far sides of the basin (Lamb 1932, section 170, as above)
    one = same.lensing_map()
    assert np.isfinite(one.values).sum() > 0.9 * (flat > 20).sum()
    np.testing.assert_allclose(one.values[np.isfinite(one.values)], 1.0, rtol=1e-12)
    lm = chk.lensing_map()
    assert lm.name == "wave_lensing" and lm.shape == real.shape
    at = lambda xk, yk: float(lm.sel(x=xk * 1e3, y=yk * 1e3, method="nearest"))
    assert at(260, 200) > 1.5 and at(260, 110) < 0.9 and abs(at(260, 20) - 1.0) < 0.15
    # the segment values are this map's ratio taken over each segment's cells (maxima first)
    assert lm.values[np.isfinite(lm.values)].max() >= wl.max() * 0.999
    assert np.isnan(lm.values[flat <= 20]).all()


def test_check_compares_each_ranking_on_its_own_segments():
    """The amplitude ranking's segments need the real run's rays only (``amp_reliable``), the
    lensing ranking's the reference run's too (``reliable``): the check compares each ranking on
    its own segments (definitions of the columns, docs/focusing.md)."""
    from shapely.geometry import LineString

    from tsunamifocus.coast.segments import segment_coastline
    from tsunamifocus.studies.check import compare_with_waves

    dx = 4000.0
    x = np.arange(0.0, 200e3 + 1, dx)
    y = np.arange(0.0, 240e3 + 1, dx)
    X, _ = np.meshgrid(x, y)
    ocean = make_grid(np.where(X < 180e3, 3000.0, -5.0), x, y, "EPSG:32633")
    eta = make_grid(np.exp(-((X - 30e3) ** 2) / (2 * 10e3**2)), x, y, "EPSG:32633")
    seg = segment_coastline([LineString([(178e3, 20e3), (178e3, 220e3)])], 20e3, ocean)
    n = len(seg)
    seg["amp_stop_m"] = 1.0 + np.arange(n)
    seg["lensing_factor"] = 1.0 + np.arange(n)
    seg["amp_reliable"] = True
    seg["reliable"] = np.arange(n) < n // 2  # the reference run covers the southern half only
    chk = compare_with_waves(ocean, eta, seg, reference_depth=ocean, duration_s=1200.0, k=3, threads=1,
                             refine=1)
    t = chk.table
    assert t["ranked"].all() and t["ranked_lensing"].tolist() == seg["reliable"].tolist()
    assert chk.agreement["n"] == n and chk.agreement["lensing"]["n"] == n // 2
    assert t.loc[~seg["reliable"].to_numpy(), "rank_ray_lensing"].isna().all()
    assert t["rank_ray"].notna().all()
    # the appendix's check section names both counts
    from tsunamifocus.products.check import check_section

    m = check_section(chk, {})["metrics"]
    assert m["segments compared by amplitude (ranked by it)"] == n
    assert m["segments compared by lensing factor (ranked by it)"] == n // 2


def test_faint_wave_segments_are_those_far_below_the_median():
    # below 1 % of the ranked segments' median (FAINT_WAVE_FRACTION; set from the real-grid case's
    # strait, docs/wave_check.md): unranked and missing values never count
    from tsunamifocus.studies.check import FAINT_WAVE_FRACTION, faint_wave_segments

    assert FAINT_WAVE_FRACTION == 0.01
    w = np.array([1.0, 0.8, 1.2, 0.005, np.nan, 0.002])
    ranked = np.array([True, True, True, True, True, False])
    assert faint_wave_segments(w, ranked).tolist() == [False, False, False, True, False, False]
    assert not faint_wave_segments(w, np.zeros(6, bool)).any()
    assert faint_wave_segments(w, ranked, fraction=0.9).tolist() == [False, True, False, True, False, False]


def _plane_slope():
    """A 4000 m ocean shoaling linearly to 8 m over 500 km (1:125) on 4 km cells, a Gaussian hump
    far offshore, three segments along the 20 m isobath, side walls reflecting (a plane wave)."""
    import shapely

    dx, ny = 4000.0, 6
    x = np.arange(0.0, 700e3, dx) + dx / 2
    h = np.interp(x, [0, 150e3, 650e3, 700e3], [4000.0, 4000.0, 8.0, -20.0])
    depth = make_grid(np.tile(h, (ny, 1)), x, np.arange(ny) * dx + dx / 2, "EPSG:3857")
    eta0 = depth.copy(data=np.tile(np.exp(-((x - 80e3) ** 2) / (2 * 20e3**2)), (ny, 1)))
    xs = float(np.interp(20.0, h[::-1], x[::-1]))
    seg = pd.DataFrame({"segment_id": ["S1", "S2", "S3"], "amp_stop_m": [1.0, 2.0, 3.0],
                        "geometry": [shapely.LineString([(xs, i * ny * dx / 3), (xs, (i + 1) * ny * dx / 3)])
                                     for i in range(3)]})
    walls = {"west": "absorb", "east": "absorb", "south": "reflect", "north": "reflect"}
    return depth, eta0, seg, walls


def test_refined_check_converges_to_greens_law_at_the_stop_isobath():
    """Green (1838): a long wave shoaling normally up a gentle slope keeps its energy flux, so its
    amplitude grows as h**(-1/4); the incident half of a hump released at rest has amplitude 0.5
    (d'Alembert). On 4 km cells the wave near the 20 m isobath has few cells per wavelength and the
    check's maximum there falls well short of Green's law; solved on the same sea floor interpolated
    onto finer grids (``refine``) it converges to it, and the reported resolution grows with it."""
    import warnings

    from tsunamifocus.errors import InputError, ResolutionWarning
    from tsunamifocus.studies.check import MIN_CELLS_PER_WAVELENGTH, compare_with_waves

    depth, eta0, seg, walls = _plane_slope()
    err, cpw = {}, {}
    for r in (1, 4):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ResolutionWarning)  # the warning is tested below
            chk = compare_with_waves(depth, eta0, seg, duration_s=12000.0, refine=r, period_s=1000.0, k=1,
                                     boundary=walls, threads=1)
        res = chk.agreement["resolution"]
        assert chk.agreement["refine"] == r and res["refine"] == r
        assert chk.wave.max_amplitude.shape == (depth.shape[0] * r, depth.shape[1] * r)
        green = 0.5 * (4000.0 / res["band_depth_m"]) ** 0.25
        amp = chk.table["wave_amp_stop_m"].to_numpy()
        assert np.ptp(amp) < 1e-6 * amp.max()  # a plane wave: the three segments alike
        err[r], cpw[r] = abs(amp[0] / green - 1.0), res["cells_per_wavelength"]
    assert err[1] > 0.2 and err[4] < 0.06  # measured: 33 % (4.9 cells per wavelength) and 5 % (16.6)
    assert cpw[4] > 3 * cpw[1]
    # fewer cells per wavelength than the minimum on a grid the caller chose: a ResolutionWarning
    # naming the remedy (4.9 cells: refine 3 gives 12.7; 2 would give 8.9, fewer than 10)
    with pytest.warns(ResolutionWarning, match="--refine 3 or auto"):
        compare_with_waves(depth, eta0, seg, duration_s=600.0, refine=1, period_s=1000.0, k=1, boundary=walls,
                           threads=1)
    with pytest.raises(InputError, match="refine 0: expected 'auto'"):
        compare_with_waves(depth, eta0, seg, duration_s=600.0, refine=0, k=1)


def test_check_chooses_a_grid_fine_enough_for_the_coast_by_default():
    """The default ``refine="auto"`` solves the wave on the coarsest grid with at least
    MIN_CELLS_PER_WAVELENGTH cells per dominant wavelength at the stop isobath (about ten for a
    second-order scheme: common practice, no source), which brings the maximum there closer to
    Green's law (1838: amplitude ~ h**(-1/4) up a gentle slope; half of a hump released at rest
    goes each way, d'Alembert) than the run's own grid; a memory limit that forbids the finer grid
    holds it back, and the check then says which limit did."""
    import warnings

    from tsunamifocus.errors import ResolutionWarning
    from tsunamifocus.propagation.wave import _BYTES_PER_CELL
    from tsunamifocus.studies.check import MIN_CELLS_PER_WAVELENGTH, choose_refine, compare_with_waves

    depth, eta0, seg, walls = _plane_slope()
    amp = {}
    for refine in (1, "auto"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ResolutionWarning)
            chk = compare_with_waves(depth, eta0, seg, duration_s=12000.0, refine=refine, period_s=1000.0, k=1,
                                     boundary=walls, threads=1)
        res = chk.agreement["resolution"]
        amp[refine] = float(chk.table["wave_amp_stop_m"].iloc[0]) / (0.5 * (4000.0 / res["band_depth_m"]) ** 0.25)
    choice = chk.agreement["refine_choice"]
    assert choice["refine"] == choice["wanted"] == chk.agreement["refine"] == 3 and choice["limited_by"] is None
    assert res["cells_per_wavelength"] >= MIN_CELLS_PER_WAVELENGTH
    assert abs(amp["auto"] - 1) < 0.2 < abs(amp[1] - 1)  # measured: 8 % (3x, 12.7 cells) and 33 % below Green's law
    # a longer period needs no refinement; without a period the run's grid is kept
    assert choose_refine(depth, 3000.0, duration_s=12000.0)["refine"] == 1
    assert choose_refine(depth, None, duration_s=12000.0) == {"refine": 1, "wanted": None, "limited_by": None,
                                                               "min_cells_per_wavelength": MIN_CELLS_PER_WAVELENGTH,
                                                               "nested_instead_of": None}
    # memory for the run's grid only: the check stays there and says why
    cells = depth.size
    with pytest.warns(ResolutionWarning, match="memory limit allowed a grid 1 times finer, not 3"):
        chk = compare_with_waves(depth, eta0, seg, duration_s=600.0, period_s=1000.0, k=1, boundary=walls,
                                 threads=1, max_memory_bytes=_BYTES_PER_CELL * cells * 2)
    assert chk.agreement["refine_choice"]["limited_by"] == "memory" and chk.agreement["refine"] == 1


def test_auto_refine_nests_a_finer_box_when_it_costs_less_than_the_whole_grid():
    # A factor of 3 cannot be nested (its box would sit in the run's own ocean); with a coast box
    # holding a tenth of the cells, a box 4x finer in an ocean 2x finer costs 2^3 + 0.1 * 4^3 = 14.4
    # run-grid updates per cell against 3^3 = 27 for the whole grid 3x (cells x time steps: the CFL
    # step shrinks with the cell, common practice, no source), so the check takes it; with a box of
    # nearly half the grid (8 + 0.45 * 64 = 36.8 > 27) it refines the whole grid 3x as before.
    from tsunamifocus.errors import InputError
    from tsunamifocus.studies.check import choose_refine

    depth, _, _, _ = _plane_slope()
    whole = choose_refine(depth, 800.0, duration_s=12000.0)
    assert whole["refine"] == whole["wanted"] == 3 and whole["nested_instead_of"] is None
    small = choose_refine(depth, 800.0, duration_s=12000.0, nest_share=0.1)
    assert small["refine"] == 4 and small["wanted"] == 3 and small["nested_instead_of"] == 3
    assert choose_refine(depth, 800.0, duration_s=12000.0, nest_share=0.45)["refine"] == 3
    with pytest.raises(InputError, match="nest_share = 1.5: expected the box's share"):
        choose_refine(depth, 800.0, duration_s=12000.0, nest_share=1.5)
    # the work limit forbids the whole grid 3x (27 units) but each nested run fits (8 and 6.4 units):
    # the nested 4x is taken and nothing is said to be limited
    n_wet, steps1 = _run_grid_work(depth)
    limit = 15.0 * n_wet * steps1
    held = choose_refine(depth, 800.0, duration_s=12000.0, max_cell_updates=limit)
    assert held["refine"] == 2 and held["limited_by"] == "work"
    freed = choose_refine(depth, 800.0, duration_s=12000.0, max_cell_updates=limit, nest_share=0.1)
    assert freed["refine"] == 4 and freed["limited_by"] is None and freed["nested_instead_of"] == 3


def _run_grid_work(depth, duration_s=12000.0):
    """Wet cells and time steps of the solver on the run's grid for ``duration_s`` (its CFL step)."""
    from tsunamifocus.grid import GridInfo
    from tsunamifocus.propagation.wave import _dt_from, _metric, _wet_mask

    d = np.asarray(depth.values, float)
    wet = _wet_mask(d, 20.0)
    return float(wet.sum()), duration_s / _dt_from(d, wet, _metric(GridInfo.from_dataarray(depth)), 0.8, GRAVITY,
                                                   depth.name)


def test_check_progress_names_each_ocean_and_the_grid(capsys):
    # A check over two oceans shows two solver bars; a reader must tell them apart, and see the
    # grid chosen before the long part starts (common practice, no source).
    from tsunamifocus.studies.check import compare_with_waves

    depth, eta0, seg, walls = _plane_slope()
    seg["lensing_factor"] = [1.0, 2.0, 3.0]
    chk = compare_with_waves(depth, eta0, seg, reference_depth=depth, duration_s=600.0, period_s=1000.0, k=1,
                             boundary=walls, threads=1, progress=True)
    err = capsys.readouterr().err
    # in 600 s the wave has not reached the coast (the slope's 20 m isobath lies hundreds of km from
    # the source): no energy there in either ocean, so no ratio - said, not an error
    assert chk.agreement["lensing"]["n"] == 0 and np.isnan(chk.agreement["lensing"]["spearman"])
    assert "lensing ranking: not measurable (the wave reached 0 ranked segments" in chk.summary()
    assert "wave solved on a grid 3 times finer than the run's: " in err and "about 27 times the cost" in err
    assert "wave, real ocean: done" in err and "wave, reference ocean: done" in err
    assert err.index("wave solved on") < err.index("wave, real ocean") < err.index("wave, reference ocean")
