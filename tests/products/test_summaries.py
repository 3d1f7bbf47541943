"""Run-summary lines about the wave check (products/summaries.py)."""

from __future__ import annotations

from tsunamifocus.products.summaries import WEAK_AGREEMENT, _check_lines


def _ag(rho_amp, rho_lens, top_amp=5, top_lens=5):
    a = {"spearman": rho_amp, "k": 10, "topk_common": top_amp, "n": 143}
    a["lensing"] = {"spearman": rho_lens, "k": 10, "topk_common": top_lens, "n": 143}
    return a


def test_a_weak_lensing_ranking_is_said_and_the_amplitude_ranking_recommended():
    # A Spearman rank correlation below 0.5 is weak agreement (common practice, no source); the
    # real-grid benchmark case measured amplitude 0.92 and lensing 0.01 against the wave.
    assert WEAK_AGREEMENT == 0.5
    lines = "\n".join(_check_lines(_ag(0.92, 0.01, top_lens=3)))
    assert "lensing ranking against the wave's energy:   Spearman 0.01, top-10 overlap 3/10 - weak" in lines
    assert "amplitude ranking against the wave's maxima: Spearman 0.92, top-10 overlap 5/10\n" in lines + "\n"
    assert "rank this coast with the amplitude ranking" in lines
    # a weak lensing ranking points to the wave's own lensing map, which the check writes
    assert "where the wave itself focuses: wave_lensing.tif and figures/wave_lensing_map.png" in lines
    # both rankings holding: no warning words
    ok = "\n".join(_check_lines(_ag(0.93, 0.76)))
    assert "weak" not in ok and "rank this coast" not in ok and "wave_lensing_map" not in ok
    # both weak: both said, no recommendation of a ranking that failed too
    both = "\n".join(_check_lines(_ag(0.3, 0.1)))
    assert both.count("weak") == 2 and "rank this coast" not in both and "wave_lensing_map" in both


def test_a_ranking_whose_top_k_the_wave_does_not_share_is_weak_at_the_top():
    # The hotspots a reader acts on are the top k: a ranking that holds as a whole but shares fewer
    # than half of its top ten with the wave's is called weak (common practice, no source). The
    # real-grid benchmark case measured, against the check at 0.1 degree, amplitude Spearman 0.90
    # with 3/10 and lensing 0.53 with 2/10.
    real = "\n".join(_check_lines(_ag(0.90, 0.53, top_amp=3, top_lens=2)))
    assert real.count("weak: fewer than half of its top 10 are among the wave's") == 2
    assert "rank this coast" not in real  # the amplitude top ten failed too
    half = "\n".join(_check_lines(_ag(0.90, 0.53, top_amp=5, top_lens=5)))
    assert "weak" not in half  # exactly half is not fewer than half
    amp_only = "\n".join(_check_lines(_ag(0.93, 0.71, top_amp=8, top_lens=4)))
    assert amp_only.count("weak") == 1 and "rank this coast with the amplitude ranking" in amp_only


def test_an_unconverged_check_is_said_with_its_remedy():
    # the check's own resolution at the stop isobath (docs/wave_check.md: 3.4 cells per dominant
    # wavelength on the real-grid benchmark case, whose wave lensing ranking then moved to Spearman
    # 0.70 when the same sea floor was solved at half the spacing)
    from tsunamifocus.studies.check import MIN_CELLS_PER_WAVELENGTH

    coarse = _ag(0.90, 0.32)
    coarse["resolution"] = {"cells_per_wavelength": 3.4, "period_s": 1567.5}
    lines = "\n".join(_check_lines(coarse))
    assert "3.4 cells per 1568 s wavelength" in lines and "--refine auto, the default" in lines
    # held back by the memory limit: the summary names the limit, not a remedy that would hit it again
    coarse.update(refine=1, refine_choice={"refine": 1, "wanted": 3, "limited_by": "memory"})
    lines = "\n".join(_check_lines(coarse))
    assert "the memory limit held it to 1 times finer" in lines and "--refine auto" not in lines
    fine = _ag(0.95, 0.52)
    fine["resolution"] = {"cells_per_wavelength": MIN_CELLS_PER_WAVELENGTH + 1.4, "period_s": 1567.5}
    assert "refine" not in "\n".join(_check_lines(fine))
    fine["refine"] = 2
    assert (f"onto a grid 2 times finer ({MIN_CELLS_PER_WAVELENGTH + 1.4:.1f} cells per dominant wavelength"
            in "\n".join(_check_lines(fine)))
    assert "refine" not in "\n".join(_check_lines(_ag(0.95, 0.52)))  # a check without the figure says nothing
    # a nested check names the grid the ocean was solved on, and why its box is finer than asked
    nested = dict(fine, refine=4, nest={"margin_km": 400.0, "share": 0.06, "ocean_refine": 2},
                  refine_choice={"refine": 4, "wanted": 3, "limited_by": None, "nested_instead_of": 3})
    lines = "\n".join(_check_lines(nested))
    assert ("onto a grid 4 times finer in a box around the coast, one-way nested in the run's grid 2 times finer "
            "(4 rather than 3: a box that fine costs less than the whole grid)") in lines
    nested.update(refine=2, nest=dict(nested["nest"], ocean_refine=1), refine_choice={"refine": 2, "wanted": 2})
    lines = "\n".join(_check_lines(nested))
    assert "one-way nested in the run's grid (" in lines and "rather than" not in lines


def test_the_size_of_the_rays_amplitudes_against_the_wave_is_said():
    # the rays' indicative amplitudes are an energy estimate (one sinusoidal wavelength per band);
    # the wave's maxima are the like-for-like size. Measured: demo median ratio 0.92 (0.87 at the grid's own 3 km); the
    # trans-Pacific interface case about 0.5 (docs/wave_check.md).
    from tsunamifocus.studies.check import AMPLITUDE_RATIO_FACTOR

    ag = _ag(0.93, 0.71)
    ag["amplitude_ratio"] = {"median": 0.87, "p5": 0.52, "p95": 1.31}
    lines = "\n".join(_check_lines(ag))
    assert "the wave's maxima are a median 0.87 times the rays' indicative amplitudes (5-95 % of the segments " \
           "0.52-1.31)" in lines and "read amplitudes from the wave check" not in lines
    ag["amplitude_ratio"] = {"median": 0.99 / AMPLITUDE_RATIO_FACTOR, "p5": 0.3, "p95": 0.9}
    assert "read amplitudes from the wave check" in "\n".join(_check_lines(ag))
    ag["amplitude_ratio"] = {"median": 1.01 * AMPLITUDE_RATIO_FACTOR, "p5": 1.2, "p95": 2.0}
    assert "read amplitudes from the wave check" in "\n".join(_check_lines(ag))


def test_step_text_says_when_rays_took_local_steps():
    # the run summary must not report one integration step when every ray chose its own (local
    # steps between the grid's default step and the cap; common practice, no source)
    from tsunamifocus.products.summaries import step_text

    assert step_text({"step_s": 68.06, "max_step_s": 391.9}) == "68-392 s (each ray's own cell and speed)"
    assert step_text({"step_s": 5.0, "max_step_s": None}) == "5.00 s"
    assert step_text({"step_s": 5.0}) == "5.00 s"


def test_amplitude_ranking_listed_in_full_when_it_is_the_one_the_wave_held():
    # When the check holds the amplitude ranking and finds the lensing ranking weak (below 0.5:
    # common practice, no source), the summary lists the amplitude top five with intervals.
    import re

    import numpy as np
    import pandas as pd

    from tsunamifocus.products.summaries import amplitude_lines

    n = 8
    amp = np.linspace(3.0, 1.0, n)
    seg = pd.DataFrame({"segment_id": [f"S{i:04d}" for i in range(n)], "amp_1m_m": amp,
                        "amp_lo": 0.8 * amp, "amp_hi": 1.2 * amp, "lensing_factor": np.linspace(1, 2, n),
                        "first_arrival_s": np.full(n, 3600.0), "lat_mid": -30.0, "lon_mid": -120.0,
                        "rank_amplitude": pd.array(list(range(1, n)) + [None], dtype="Int64")})
    full = amplitude_lines(seg, _ag(0.90, 0.32))
    assert len(full) == 6 and "the ranking the wave check held" in full[0]
    assert "S0000" in full[1] and "3.00 m [2.40-3.60]" in full[1] and "first arrival 60 min" in full[1]
    for ag in (None, _ag(0.93, 0.76), _ag(0.3, 0.1)):
        short = amplitude_lines(seg, ag)
        assert len(short) == 1 and len(re.findall(r"S\d{4} [\d.]+ m", short[0])) == 3 and "interval" not in short[0]
    assert amplitude_lines(seg.drop(columns=["rank_amplitude"])) == []


def test_segments_the_wave_barely_reached_are_counted_in_the_summary():
    ag = _ag(0.90, 0.32)
    assert "almost no wave" not in "\n".join(_check_lines(ag))
    ag["n_faint_wave"] = 17
    lines = "\n".join(_check_lines(ag))
    assert "17 of the segments got almost no wave in the check (below 1 % of the median" in lines
    assert "ray_vs_wave_profile.png" in lines


def test_a_checked_but_weak_ranking_is_said_under_the_appendix_ranking():
    # A planning-study reader sees the appendix, not the console: when the check found the
    # lensing ranking weak, the note under the ranking table says so, with what held and whether
    # the check itself was converged (common practice, no source). Figures of the real-grid
    # benchmark case at 0.1 degree: amplitude 0.90 with 3/10, lensing 0.53 with 2/10, 3.4 cells.
    from tsunamifocus.products.summaries import checked_ranking_note

    real = _ag(0.90, 0.53, top_amp=3, top_lens=2)
    real["resolution"] = {"cells_per_wavelength": 3.4, "period_s": 1567.5}
    note = checked_ranking_note(real)
    assert "weak: fewer than half of its top 10 are among the wave's" in note
    assert "top-10 overlap 2/10" in note and "amplitude ranking is weak too" in note and "--refine auto" in note
    amp = checked_ranking_note(_ag(0.93, 0.30, top_amp=8, top_lens=3))
    assert "the wave does not confirm this ranking" in amp and "rank this coast by indicative amplitude" in amp
    assert "refine" not in amp
    assert checked_ranking_note(_ag(0.93, 0.71, top_amp=8, top_lens=7)) is None  # the demo: it held
    assert checked_ranking_note(None) is None
    # the rays' amplitudes twice the wave's (the trans-Pacific interface case: median 0.52): the
    # note under the table says to read sizes from the check, with or without a weak ranking
    held = _ag(0.93, 0.71, top_amp=8, top_lens=7)
    held["amplitude_ratio"] = {"median": 0.52, "p5": 0.35, "p95": 0.86}
    note = checked_ranking_note(held)
    assert note.startswith("In size, the wave's maxima are a median 0.52 times the rays' indicative amplitudes")
    assert "read amplitudes from the wave check section" in note
    real["amplitude_ratio"] = held["amplitude_ratio"]
    assert "weak" in checked_ranking_note(real) and "In size, the wave's maxima" in checked_ranking_note(real)
    held["amplitude_ratio"] = {"median": 0.91, "p5": 0.54, "p95": 1.41}  # the demo
    assert checked_ranking_note(held) is None


def test_the_counts_of_each_ranking_are_said_when_they_differ():
    # The amplitude ranking ranks the segments the real ocean's rays cover, the lensing ranking
    # those both oceans' rays cover (definitions, docs/focusing.md); the Cascadia-to-Japan case of
    # bench_trans_ocean.py measured 64 and 47. The summary names both counts, and one when equal.
    from tsunamifocus.studies.check import compared_words

    a = _ag(0.35, -0.18)
    a["n"], a["lensing"]["n"] = 64, 47
    assert compared_words(a) == "64 segments ranked by amplitude (47 by lensing factor)"
    assert "on 64 segments ranked by amplitude (47 by lensing factor):" in "\n".join(_check_lines(a))
    assert compared_words(_ag(0.9, 0.5)) == "143 ranked segments"
    assert compared_words({"n": 12}) == "12 ranked segments"  # a check without a reference run


def test_the_share_of_rays_past_their_predictability_is_said_above_a_quarter():
    # capped_share is the energy-weighted mean of the segments' capped_share over the segments
    # ranked by amplitude (its definition); the summary speaks from CAPPED_SHARE_NOTE = 0.25, a
    # project choice between the demo (0.3 %) and four trans-ocean cases (34-65 %; docs/focusing.md).
    import numpy as np
    import pandas as pd

    from tsunamifocus.products.summaries import CAPPED_SHARE_NOTE, capped_line, capped_share

    seg = pd.DataFrame({"energy_J": [3.0, 1.0, 100.0], "capped_share": [0.5, 0.1, 1.0],
                        "amp_reliable": [True, True, False], "reliable": [True, False, False]})
    assert capped_share(seg) == (3.0 * 0.5 + 1.0 * 0.1) / 4.0  # the unranked segment does not count
    assert CAPPED_SHARE_NOTE == 0.25
    line = capped_line(seg, checked=False)
    assert line.startswith("40 % of the energy reaching the ranked segments") and "'tsunamifocus check RUN'" in line
    checked = capped_line(seg, checked=True)
    assert "the wave check says how far the rankings hold for this ray fan" in checked
    assert "varies between ray seeds too" in checked  # measured: 0.75-0.86 over eight seeds (docs/focusing.md)
    assert capped_line(seg, checked=True, remedy=False).endswith("between ray seeds")
    # with rotated fans averaged (the run's default past the predictability) it says so, and the
    # smaller scatter measured then (docs/focusing.md)
    seg.attrs["rotations"] = 4
    four = capped_line(seg, checked=True)
    assert "the run averaged 4 rotated ray fans" in four and "about 7 %" in four and "these fans" in four
    assert "with four rotated fans" in four
    low = seg.assign(capped_share=[0.2, 0.2, 1.0])
    assert capped_line(low, checked=False) is None
    assert capped_share(seg.drop(columns="capped_share")) is None
    assert capped_share(seg.assign(energy_J=[0.0, np.nan, 1.0])) is None
