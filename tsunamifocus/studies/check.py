"""The wave check: the linear long-wave solver against the ray screening of a finished run."""

from __future__ import annotations

import math
import sys
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import shapely
import xarray as xr

from ..cautions import caution_text
import warnings

from ..coast.waves import _coastal_cells, segment_max_amplitude
from ..constants import DEFAULTS, GRAVITY, STOP_DEPTH_M, WORK_LIMITS
from ..errors import CoastError, InputError, ResolutionWarning
from ..focusing.agreement import compare_rankings
from ..focusing.ranking import ranked_mask
from ..grid import MAX_REFINE_FACTOR, GridInfo, refine_grid
from ..propagation.nest import (NEST_MAX_SHARE, NestBox, _fine_cut, nest_box, nests_within_step, ocean_factor,
                                simulate_nested)
from ..propagation.wave import (WAVE_CAUTION, WaveResult, _check_depth, _dt_from, _memory_needed, _metric, _polar_dry,
                                _wet_mask, simulate_linear_long_wave)

__all__ = ['AMPLITUDE_RATIO_FACTOR', 'AUTO_REFINE', 'MIN_CELLS_PER_WAVELENGTH', 'FAINT_WAVE_FRACTION',
           'LENSING_MAP_FLOOR', 'NEST_DEFAULT', 'NEST_MARGIN_KM', 'WaveCheck', 'compared_words', 'nest_ocean_words', 'nested_instead_of', 'check_refine', 'choose_refine', 'compare_with_waves',
           'default_check_duration_s', 'faint_wave_segments', 'wave_resolution']

#: Fewest grid cells per dominant wavelength at the stop isobath the check wants for its coastal
#: maxima: ``refine="auto"`` (the default) solves the wave on a grid fine enough for it
#: (:func:`choose_refine`), and a check with fewer warns. A second-order scheme needs about ten
#: cells per wavelength (common practice, no source); measured (docs/wave_check.md): on the
#: trans-Pacific Japan Trench interface case at 0.1 degree (5.1 cells) the wave's amplitude
#: ranking agreed with the same sea floor solved at 0.025 degree at Spearman 0.959 and only 4 of
#: its top ten, at 0.05 degree (8.2 cells) at 0.991 and 7 of ten; on a plane slope the maximum at
#: the stop isobath was 33 % / 15 % / 5 % below Green's law at about 5 / 9 / 17 cells
#: (tests/studies/test_check.py). Below 4 cells the check's lensing ranking changed a good deal
#: with the spacing (Spearman 0.70 on the old real-grid case at 3.4 cells). Ten since 2026-12-04
#: (8 before, to keep that case at a 2x box): there, on the 118 segments the rays rank, the
#: default 2x box (8.8 cells) ranked the wave's amplitudes against the box refined 8x (one-way
#: nested in the ocean 4x) at 0.940 and 4 of its top ten, the 4x box (about 17.6 cells) at 0.969; the
#: rays agreed with the 2x / 4x / 8x checks at 0.795 / 0.836 / 0.828 (seed 0) and 0.809 / 0.845
#: / 0.844 (seed 1): the 2x check understated the agreement. The demo (10.5 cells at 2x) keeps 2x.
MIN_CELLS_PER_WAVELENGTH: float = 10.0

#: The run summary tells a reader to take amplitudes from the wave check when the median of the
#: wave's maxima over the rays' indicative amplitudes is more than this factor from 1 either way
#: (measured: demo 0.92, the trans-Pacific interface case 0.52, Aleutians to Hawaii 0.49;
#: docs/wave_check.md).
AMPLITUDE_RATIO_FACTOR: float = 1.5

#: Sea kept around the segments in the refined box of a nested check [km]
#: (:func:`compare_with_waves` ``nest``).
NEST_MARGIN_KM: float = 400.0

#: Whether the check refines only a box around the coast (one-way nesting) by default. On the
#: trans-Pacific interface case the nested check ranks the coast as the whole grid refined alike
#: does (amplitude / lensing Spearman 0.993 / 0.954 at 2x, 0.988 / 0.935 at 4x with the ocean
#: itself refined 2x) - closer than the whole grid at 2x and at 4x are to each other (0.971 /
#: 0.840) - in an eighth to a sixth of the time (docs/wave_check.md). Grids where the box would
#: hold more than half the cells (the demo) are refined whole as before.
NEST_DEFAULT: bool = True

#: ``refine`` value that lets the check choose its own grid (:func:`choose_refine`); the default.
AUTO_REFINE: str = "auto"

#: A ranked segment whose wave maximum is below this fraction of the ranked segments' median is
#: one the wave barely reached on the check's grid. On the real-grid benchmark case at 0.1 degree,
#: 17 of the 25 segments in a strait and the sound behind it fall below it, and no segment of the
#: open coast falls below 0.21 of the median (docs/wave_check.md, "Limits").
FAINT_WAVE_FRACTION: float = 0.01


#: Cells whose wave over the reference ocean is below this fraction of its 99th percentile (in
#: amplitude, ``sqrt`` of the time-integrated squared elevation) get no value on the wave's lensing
#: map (:meth:`WaveCheck.lensing_map`): the ratio of two near-zero waves is noise (common practice,
#: no source).
LENSING_MAP_FLOOR: float = 0.01


def faint_wave_segments(wave_amp: Any, ranked: Any, fraction: float = FAINT_WAVE_FRACTION) -> np.ndarray:
    """Ranked segments whose wave maximum is below ``fraction`` of the ranked segments' median (bool).

    Such segments (inner waters behind a passage a few cells wide, sheltered water) are kept in
    the check's comparison; the summary names how many there are, so that a reader looks at them
    along the coast (``ray_vs_wave_profile.png``) before reading the agreement figures.
    """
    w = np.asarray(wave_amp, dtype=float)
    r = np.asarray(ranked, dtype=bool) & np.isfinite(w)
    if not r.any():
        return np.zeros(w.size, dtype=bool)
    med = float(np.median(w[r]))
    return r & (w < fraction * med)


def wave_resolution(depth: xr.DataArray, period_s: float, *, stop_depth_m: float = STOP_DEPTH_M,
                    gravity: float = GRAVITY) -> dict[str, float]:
    """How many cells of ``depth`` a wave of ``period_s`` has per wavelength at the stop isobath.

    The stop-isobath band is the set of wet cells with a dry 4-neighbour (where the check samples
    its maxima); its median depth ``h`` gives the wavelength ``sqrt(g h) T``, divided by the
    larger cell side [m] (on lon/lat grids at the mid latitude).

    Parameters
    ----------
    depth : xarray.DataArray
        Depth grid [m] the wave is solved on.
    period_s : float
        Wave period [s] (the source's dominant period).
    stop_depth_m, gravity
        As in :func:`compare_with_waves`.

    Returns
    -------
    dict
        ``period_s``, ``band_depth_m`` (median depth of the band), ``wavelength_m``, ``cell_m`` and
        ``cells_per_wavelength`` (NaN when the grid has no coast).
    """
    if not (math.isfinite(period_s) and period_s > 0):
        raise InputError(f"period_s = {period_s!r}: expected a wave period in seconds (> 0)")
    info = _check_depth(depth)
    wet = _wet_mask(np.asarray(depth.values, float), stop_depth_m)
    band = _coastal_cells(wet, info.periodic_x)
    h = float(np.median(np.asarray(depth.values, float)[band])) if band.any() else float("nan")
    lam = math.sqrt(gravity * h) * period_s if math.isfinite(h) else float("nan")
    cell = float(max(info.spacing_m()))
    return {"period_s": float(period_s), "band_depth_m": h, "wavelength_m": lam, "cell_m": cell,
            "cells_per_wavelength": lam / cell}


def check_refine(refine: Any, label: str = "refine") -> None:
    """Raise :class:`InputError` unless ``refine`` is :data:`AUTO_REFINE` or an integer factor from 1
    to :data:`~tsunamifocus.grid.MAX_REFINE_FACTOR` (``label`` names it in the message)."""
    if isinstance(refine, str) and refine == AUTO_REFINE:
        return
    if isinstance(refine, bool) or not isinstance(refine, (int, np.integer)) or not 1 <= refine <= MAX_REFINE_FACTOR:
        raise InputError(f"{label} {refine!r}: expected {AUTO_REFINE!r} or an integer from 1 to {MAX_REFINE_FACTOR}")


def choose_refine(
    depth: xr.DataArray,
    period_s: float | None,
    *,
    duration_s: float,
    stop_depth_m: float = STOP_DEPTH_M,
    gravity: float = GRAVITY,
    cfl: float = 0.8,
    polar_cutoff_deg: float | None = 80.0,
    max_memory_bytes: float | None = DEFAULTS["bathymetry"]["max_memory_gb"] * 1e9,
    max_cell_updates: float | None = WORK_LIMITS["wave_cell_updates"],
    nest_share: float | None = None,
) -> dict[str, Any]:
    """The coarsest refinement that gives the check :data:`MIN_CELLS_PER_WAVELENGTH` at the stop isobath.

    The wave check samples its maxima at the stop isobath, where the wave is shortest. This picks
    the smallest factor ``N`` (1 to :data:`~tsunamifocus.grid.MAX_REFINE_FACTOR`) for which
    :func:`wave_resolution` of ``refine_grid(depth, N)`` reaches the minimum, then lowers it while
    the solver's working arrays (``N^2`` times the cells) or its work (``N^3`` times the wet-cell
    updates: ``N`` times the time steps) would exceed the limits the solver enforces.

    With ``nest_share`` (the check refines only a box around the coast, holding that share of the
    run's cells: :func:`compare_with_waves` ``nest``) the limits and the cost are those of the
    nested solve - the ocean refined :func:`~tsunamifocus.propagation.nest.ocean_factor` ``(N)``
    times, the box ``N`` times, each run held to the limits on its own - and a factor that cannot
    be nested (3, 5, 7: :func:`~tsunamifocus.propagation.nest.nests_within_step`) is replaced by
    the next one up when that nested solve costs less than refining the whole grid: a finer coast
    for less work (on the trans-Pacific interface case a 4x box in the ocean refined 2x ranked the
    coast as the whole grid refined 4x does, at 0.988 / 0.935, docs/wave_check.md).

    Parameters
    ----------
    depth : xarray.DataArray
        The run's depth grid [m].
    period_s : float or None
        The source's dominant period [s]; None (unknown): the run's own grid (``refine`` 1).
    duration_s : float
        Simulated time [s] (for the work estimate).
    stop_depth_m, gravity, cfl, polar_cutoff_deg, max_memory_bytes, max_cell_updates
        As in :func:`~tsunamifocus.propagation.wave.simulate_linear_long_wave`.
    nest_share : float, optional
        Share (0-1] of the run's cells in the box a nested check refines; None: the whole grid
        is refined.

    Returns
    -------
    dict
        ``refine`` (the factor to use), ``wanted`` (the factor the resolution asks for; None when
        the period is unknown or the grid has no coast), ``limited_by`` (None, ``"memory"``,
        ``"work"`` or ``"largest factor"``: why ``refine`` is below ``wanted`` or the minimum is not
        reached), ``min_cells_per_wavelength`` and ``nested_instead_of`` (the factor a nestable
        one replaced, else None).
    """
    out: dict[str, Any] = {"refine": 1, "wanted": None, "limited_by": None,
                           "min_cells_per_wavelength": MIN_CELLS_PER_WAVELENGTH, "nested_instead_of": None}
    if nest_share is not None and not (isinstance(nest_share, (int, float)) and 0.0 < nest_share <= 1.0):
        raise InputError(f"nest_share = {nest_share!r}: expected the box's share of the grid's cells, 0 < share <= 1")
    if period_s is None:
        return out
    cpw1 = wave_resolution(depth, period_s, stop_depth_m=stop_depth_m, gravity=gravity)["cells_per_wavelength"]
    if not math.isfinite(cpw1):
        return out
    info = _check_depth(depth)
    d = np.asarray(depth.values, float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResolutionWarning)  # the solver itself says so
        wet = _polar_dry(info, _wet_mask(d, stop_depth_m), polar_cutoff_deg)
    n_wet = int(wet.sum())
    steps1 = duration_s / _dt_from(d, wet, _metric(info), cfl, gravity, depth.name)

    def nested(n: int) -> bool:
        return nest_share is not None and n > 1 and nests_within_step(n)

    def runs(n: int) -> list[tuple[float, float, int]]:
        """(cells, wet cells, refinement) of each solver run a factor ``n`` takes."""
        if not nested(n):
            return [(float(info.ny * info.nx), float(n_wet), n)]
        m, box = ocean_factor(n), float(nest_share) * info.ny * info.nx
        return [(float(info.ny * info.nx), float(n_wet), m), (box, min(box, float(n_wet)), n)]

    def cost(n: int) -> float:
        """Wet-cell updates relative to the run's grid."""
        return sum(w * r ** 3 for _, w, r in runs(n)) / max(n_wet, 1)

    def over(n: int) -> str | None:
        for cells, w, r in runs(n):
            if max_memory_bytes is not None and _memory_needed(int(round(cells)), r * r, duration_s, None,
                                                               None) > max_memory_bytes:
                return "memory"
            if max_cell_updates is not None and w * r * r * math.ceil(steps1 * r) > max_cell_updates:
                return "work"
        return None

    n = max(1, min(MAX_REFINE_FACTOR, math.ceil(MIN_CELLS_PER_WAVELENGTH / cpw1)))
    while True:
        limit = over(n) if n > 1 else None
        if limit is not None:
            out["wanted"], out["limited_by"] = n, limit
            n -= 1
            while n > 1 and over(n) is not None:
                n -= 1
            break
        # the stop-isobath band of a finer grid lies in shallower water: measure it on the finer grid
        cpw = cpw1 if n == 1 else wave_resolution(refine_grid(depth, n), period_s, stop_depth_m=stop_depth_m,
                                                  gravity=gravity)["cells_per_wavelength"]
        if cpw >= MIN_CELLS_PER_WAVELENGTH:
            out["wanted"] = n
            break
        if n >= MAX_REFINE_FACTOR:
            out["wanted"], out["limited_by"] = n, "largest factor"
            break
        n += 1
    want = out["wanted"]
    if (nest_share is not None and want is not None and 1 < want < MAX_REFINE_FACTOR and not nested(want)
            and nested(want + 1) and over(want + 1) is None and (n < want or cost(want + 1) < cost(want))):
        out["nested_instead_of"], out["limited_by"] = want, None
        n = want + 1
    out["refine"] = n
    return out


# --------------------------------------------------------------------------------------------------
# one-call check for the pipeline
# --------------------------------------------------------------------------------------------------


@dataclass
class WaveCheck:
    """Result of :func:`compare_with_waves` (and of :func:`tsunamifocus.products.check.wave_check`).

    Attributes
    ----------
    wave : WaveResult
        The wave-solver run.
    table : pandas.DataFrame
        One row per segment: ``segment_id``, ``name`` (if present), ``ray_value`` (the compared ray
        column, [m] for ``amp_stop_m``), ``wave_amp_stop_m`` [m], ``wave_first_arrival_s`` [s] (earliest
        threshold exceedance on the segment's stop-isobath cells), ``rank_ray``, ``rank_wave`` (1 =
        largest, <NA> where the value is missing), ``ratio_wave_to_ray``; with a lensing reference
        also ``wave_amp_reference_m`` [m], ``ray_lensing``, ``wave_lensing`` (the ratio of the wave
        energies, ``sum eta^2 dt``, over the two oceans), ``wave_peak_lensing`` (the squared ratio of
        the maxima), ``rank_ray_lensing`` and ``rank_wave_lensing``.
    agreement : dict
        :func:`compare_rankings` of the two columns plus ``ray_column``, ``refine`` (and with
        ``refine="auto"`` ``refine_choice``), ``resolution`` (when the period is known),
        ``n_faint_wave``, ``amplitude_ratio`` (median and 5 / 95 % of ``ratio_wave_to_ray`` over
        the ranked segments: how the rays' indicative amplitudes compare in size with the wave's
        maxima), ``lensing`` (against the wave's energy ratio ``wave_lensing``) and
        ``lensing_peak`` (against ``wave_peak_lensing``, for comparison).
    figure : pathlib.Path or None
        The scatter figure, when ``figure_path`` was given.
    wave_reference : WaveResult or None
        The wave-solver run over the lensing reference, when one was given.
    figure_lensing, figure_profile, figure_lensing_map : pathlib.Path or None
        The lensing scatter, the profile along the coast and the wave's lensing map
        (:meth:`lensing_map`), when written.
    depth : xarray.DataArray or None
        The sea floor the wave was solved on (the run's grid refined ``agreement["refine"]``
        times; with nesting, the coast box only: ``agreement["nest"]``); None when not kept.
    """

    wave: WaveResult
    table: Any
    agreement: dict[str, Any]
    figure: Path | None = None
    wave_reference: WaveResult | None = None
    figure_lensing: Path | None = None
    figure_profile: Path | None = None
    figure_lensing_map: Path | None = None
    depth: xr.DataArray | None = None

    def lensing_map(self) -> xr.DataArray | None:
        """The wave's lensing factor over the whole grid, like the segments' ``wave_lensing``.

        ``sum eta^2 dt`` over the real sea floor / over the reference per wet cell of the wave's
        grid (the run's grid refined ``agreement["refine"]`` times): the ratio of the wave energies
        that passed (:attr:`WaveResult.eta_sq_integral`); NaN on dry cells and where the
        reference's wave is below :data:`LENSING_MAP_FLOOR` of its 99th percentile in amplitude
        (water the wave barely reaches, where the ratio is noise). None without a reference run.
        """
        if self.wave_reference is None:
            return None
        real = np.asarray(self.wave.eta_sq_integral.values, dtype=float)
        ref = np.asarray(self.wave_reference.eta_sq_integral.values, dtype=float)
        pos = ref[np.isfinite(ref) & (ref > 0)]
        floor = LENSING_MAP_FLOOR ** 2 * float(np.percentile(pos, 99.0)) if pos.size else np.inf
        ok = np.isfinite(real) & np.isfinite(ref) & (ref >= floor) & (real > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            lens = np.where(ok, real / np.where(ok, ref, 1.0), np.nan)
        out = self.wave.max_amplitude.copy(data=lens)
        out.name = "wave_lensing"
        out.attrs = {"units": "1", "long_name": "wave lensing factor: ratio of the linear long-wave energies "
                     "(time integral of the squared elevation) over the real and over the reference sea floor"}
        return out

    def summary(self) -> str:
        """A few printable lines: agreement figures, run statistics and the cautions line."""
        a = self.agreement
        st = self.wave.stats
        lines = [
            f"wave check on {compared_words(a)}; {a.get('ray_column', 'ray')} against the linear long-wave "
            "maximum at the stop isobath, unsmoothed sea floor:",
            f"  amplitude ranking: Spearman {a['spearman']:.2f}, Kendall tau {a['kendall']:.2f}, "
            f"top-{a['k']} overlap {a['topk_common']}/{a['k']}",
        ]
        if a.get("amplitude_ratio"):
            lines.append(f"  {_ratio_words(a['amplitude_ratio'])}")
        lens = a.get("lensing")
        if lens and not np.isfinite(lens.get("spearman", np.nan)):
            lines.append(f"  lensing ranking: not measurable (the wave reached {lens.get('n', 0)} ranked segments over "
                         "both oceans in the simulated time)")
        elif lens:
            lines.append(f"  lensing ranking (wave energy over the real / over the reference sea floor): Spearman "
                         f"{lens['spearman']:.2f}, Kendall tau {lens['kendall']:.2f}, top-{lens['k']} overlap "
                         f"{lens['topk_common']}/{lens['k']}")
        peak = a.get("lensing_peak")
        if peak and lens and np.isfinite(lens.get("spearman", np.nan)) and np.isfinite(peak.get("spearman", np.nan)):
            lines.append(f"  (against the squared ratio of the wave maxima instead: Spearman {peak['spearman']:.2f}, "
                         f"top-{peak['k']} overlap {peak['topk_common']}/{peak['k']})")
        if a.get("n_faint_wave"):
            lines.append(f"  {a['n_faint_wave']} of them got almost no wave (below {100 * FAINT_WAVE_FRACTION:g} % of the "
                         "median): water the wave barely reaches on this grid (a narrow passage, sheltered water); "
                         "see them along the coast in ray_vs_wave_profile.png (docs/wave_check.md, Limits)")
        res = a.get("resolution")
        grid = _grid_words(a.get("refine", 1), a.get("nest"))
        if res:
            lines.append(f"  wave solved on {grid}: {res['cells_per_wavelength']:.1f} cells per {res['period_s']:.0f} s "
                         f"wavelength at the stop isobath"
                         + (f" (below {MIN_CELLS_PER_WAVELENGTH:g}: coastal maxima not converged)"
                            if res["cells_per_wavelength"] < MIN_CELLS_PER_WAVELENGTH else ""))
        elif a.get("refine", 1) > 1:
            lines.append(f"  wave solved on {grid}")
        lines += [
            f"  {st['steps']} steps of {st['dt_s']:.2f} s ({st['duration_s'] / 3600:.2f} h), "
            f"{st['elapsed_s']:.1f} s wall, volume budget residual {st['mass_error']:.1e}",
            "  " + WAVE_CAUTION,
        ]
        return "\n".join(lines)


def _ratio_words(r: Mapping[str, float]) -> str:
    """The wave's maxima against the rays' indicative amplitudes, in words."""
    return (f"wave maximum / ray amplitude: median {r['median']:.2f} (5-95 % of the segments "
            f"{r['p5']:.2f}-{r['p95']:.2f})")


def compared_words(agreement: Mapping[str, Any]) -> str:
    """How many segments each ranking was compared on, in words: "118 ranked segments", or, when the
    lensing ranking ranks fewer (the reference ocean's rays reach some sparsely), "64 segments
    ranked by amplitude (47 by lensing factor)"."""
    n = int(agreement.get("n", 0))
    lens = agreement.get("lensing") or {}
    m = lens.get("n")
    if m is None or int(m) == n:
        return f"{n} ranked segments"
    return f"{n} segments ranked by amplitude ({int(m)} by lensing factor)"


def nest_ocean_words(nest: Mapping[str, Any]) -> str:
    """The grid the ocean around a nested box was solved on, in words (``agreement["nest"]``)."""
    m = int(nest.get("ocean_refine", 1))
    return "the run's grid" if m == 1 else f"the run's grid {m} times finer"


def nested_instead_of(agreement: Mapping[str, Any]) -> int | None:
    """The factor a nested check's finer box replaced (``refine_choice["nested_instead_of"]``), else None."""
    if not agreement.get("nest"):
        return None
    return (agreement.get("refine_choice") or {}).get("nested_instead_of")


def _grid_words(refine: int, nest: Mapping[str, Any] | None = None) -> str:
    if refine > 1 and nest:
        return (f"{nest_ocean_words(nest)}, with a box around the segments ({nest['margin_km']:g} km of sea around them, "
                f"{100 * nest['share']:.0f} % of the grid) {refine} times finer, one-way nested")
    return f"a grid {refine} times finer than the run's" if refine > 1 else "the run's grid"


def default_check_duration_s(depth: xr.DataArray, segments: Any = None, *, stop_depth_m: float = STOP_DEPTH_M,
                             gravity: float = GRAVITY) -> float:
    """Simulated time [s] used by :func:`wave_check` when none is given.

    ``1.2 * max(first_arrival_s) + 3600 s`` over the segments when the table has finite ray first
    arrivals (the maximum usually follows the first crest within the first hour of direct arrivals);
    otherwise 1.5 times the grid diagonal divided by the long-wave speed of the median wet depth.
    """
    if segments is not None and hasattr(segments, "columns") and "first_arrival_s" in segments.columns:
        t = np.asarray(segments["first_arrival_s"], dtype=float)
        if np.isfinite(t).any():
            return float(1.2 * np.nanmax(t) + 3600.0)
    info = _check_depth(depth)
    d = np.asarray(depth.values, float)
    wet = _wet_mask(d, stop_depth_m)
    if not wet.any():
        raise InputError(f"depth grid '{depth.name}': no wet cell deeper than the stop depth")
    if info.geographic:
        geod_r = info.radius_m
        w = math.radians(info.dx * info.nx) * geod_r * math.cos(math.radians(float(np.clip(np.mean(info.y), -80, 80))))
        h = math.radians(info.dy * info.ny) * geod_r
    else:
        w, h = info.dx * info.nx, info.dy * info.ny
    c = math.sqrt(gravity * float(np.median(d[wet])))
    return float(1.5 * math.hypot(w, h) / c)


def compare_with_waves(
    depth: xr.DataArray,
    eta0: xr.DataArray,
    segments: Any,
    *,
    ray_column: str = "amp_stop_m",
    reference_depth: xr.DataArray | None = None,
    lensing_column: str = "lensing_factor",
    duration_s: float | None = None,
    stop_depth_m: float = STOP_DEPTH_M,
    coast: str = "absorb",
    boundary: str | Mapping[str, str] | Sequence[str] = "absorb",
    k: int = 10,
    search_radius_cells: float = 2.0,
    statistic: str = "max",
    cfl: float = 0.8,
    gravity: float = GRAVITY,
    threads: int | None = None,
    progress: bool | Callable[[int, int], None] | None = None,
    refine: int | str = AUTO_REFINE,
    period_s: float | None = None,
    nest: bool = NEST_DEFAULT,
    **simulate_kwargs: Any,
) -> WaveCheck:
    """Run the wave solver for a source and compare its per-segment maxima with the ray ranking.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth grid [m] of the run.
    eta0 : xarray.DataArray
        Initial sea surface [m] of the source on ``depth`` (e.g. ``uplift_on_grid``).
    segments : pandas.DataFrame
        Coastline segments table after arrivals (needs ``segment_id``, ``geometry`` and ``ray_column``).
    ray_column : str
        Ray-based amplitude to compare (default ``amp_stop_m``, the ray amplitude at the stop isobath [m]).
    reference_depth : xarray.DataArray, optional
        The run's lensing reference ocean (unsmoothed by wavelength, like ``depth``): the wave is then
        solved over it too, and the wave lensing factor per segment - the ratio of the wave
        energies that passed the segment's stop-isobath cells over the two oceans,
        ``sum eta^2 dt`` (:attr:`WaveResult.eta_sq_integral`; at a given cell the energy flux of a
        progressive long wave is ``rho g c eta^2``, the same ``c`` in both oceans) - is compared
        with ``lensing_column`` (an energy ratio too: the rays' energy over the two oceans). The
        squared ratio of the wave maxima, ``(A_real / A_reference)^2``, is kept beside it
        (``wave_peak_lensing``): it equals the energy ratio only where the two oceans give the
        wave the same shape in time, not where one splits it into arrivals spread in time.
    lensing_column : str
        Ray lensing factor column.
    duration_s : float, optional
        Simulated time [s]; default :func:`default_check_duration_s`.
    stop_depth_m : float
        Stop isobath [m], the same as the ray run.
    coast : {"absorb", "reflect"}
        Default "absorb": the ray amplitude at the stop isobath is an incident amplitude, so the coast
        should not add its reflection (a wall would roughly double the elevation at the wall).
    boundary, cfl, gravity, threads, progress, **simulate_kwargs
        Passed to :func:`simulate_linear_long_wave`.
    k : int
        Top-k size of the overlap.
    search_radius_cells, statistic
        Passed to :func:`segment_max_amplitude` (the radius in cells of ``depth``).
    refine : int or "auto"
        Solve the wave on ``depth``, ``eta0`` and ``reference_depth`` interpolated onto a grid this
        many times finer (:func:`tsunamifocus.grid.refine_grid`: the same sea floor, more cells per
        wavelength; cost about ``refine**3`` times); 1: the run's own grid. ``"auto"`` (default,
        :data:`AUTO_REFINE`): the coarsest factor that gives :data:`MIN_CELLS_PER_WAVELENGTH` cells
        per dominant wavelength at the stop isobath within the solver's memory and work limits
        (:func:`choose_refine`; 1 when ``period_s`` is not given). The choice is kept in
        ``agreement["refine_choice"]``.
    period_s : float, optional
        The source's dominant period [s]: the check then reports :func:`wave_resolution` of the
        grid it solved on (``agreement["resolution"]``) and warns (:class:`ResolutionWarning`) when
        it has fewer than :data:`MIN_CELLS_PER_WAVELENGTH` cells per wavelength at the stop isobath.
    nest : bool
        With ``refine`` above 1, refine only a box around the segments (:data:`NEST_MARGIN_KM`
        of sea around them) and solve the rest of the ocean on the run's grid - refined itself,
        :func:`~tsunamifocus.propagation.nest.ocean_factor` times, for a box refined 4x or more -,
        one-way nested (:func:`tsunamifocus.propagation.nest.simulate_nested`): the coast resolved
        as finely at a fraction of the cost. The whole grid is refined when the box would hold more than
        :data:`~tsunamifocus.propagation.nest.NEST_MAX_SHARE` of its cells, or when no ocean grid
        leaves the box at most :data:`~tsunamifocus.propagation.nest.NEST_MAX_STEP` times finer
        (``refine`` 3, 5, 7). What was done is in
        ``agreement["nest"]`` (None: the whole grid was refined).

    Returns
    -------
    WaveCheck
        Agreement on the segments the run ranks (``reliable``, when the table has it): Spearman,
        Kendall, top-k overlap of the amplitude ranking, and under ``agreement["lensing"]`` of the
        lensing ranking.

    Raises
    ------
    CoastError
        If the segments table lacks ``ray_column`` or the geometry columns.
    """
    if not hasattr(segments, "columns") or ray_column not in segments.columns:
        raise CoastError(f"segments table has no column {ray_column!r} to compare with the wave solver")
    if reference_depth is not None and lensing_column not in segments.columns:
        raise CoastError(f"segments table has no column {lensing_column!r} to compare with the wave lensing")
    if duration_s is None:
        duration_s = default_check_duration_s(depth, segments, stop_depth_m=stop_depth_m, gravity=gravity)
    choice = None
    # the same box for every factor; none is needed on the run's own grid
    coast_box = _coast_box(depth, segments) if nest and (refine == AUTO_REFINE or refine != 1) else None
    if isinstance(refine, str) and refine == AUTO_REFINE:
        limits = {key: simulate_kwargs[key] for key in ("max_memory_bytes", "max_cell_updates", "polar_cutoff_deg")
                  if key in simulate_kwargs}
        choice = choose_refine(depth, period_s, duration_s=duration_s, stop_depth_m=stop_depth_m, gravity=gravity,
                               cfl=cfl, nest_share=None if coast_box is None else coast_box.share_of(depth.shape),
                               **limits)
        refine = choice["refine"]
    else:
        check_refine(refine)
    box = _box_for(coast_box, int(refine))
    nest_info = None if box is None else {"box": [box.j0, box.j1, box.i0, box.i1], "margin_km": NEST_MARGIN_KM,
                                          "share": box.share_of(depth.shape), "ocean_refine": ocean_factor(refine)}
    if box is None:
        depth_w, eta_w = refine_grid(depth, refine), refine_grid(eta0, refine)
    else:
        depth_w, eta_w = _fine_cut(depth, box, refine, *depth.shape), None
    resolution = None
    if period_s is not None:
        resolution = {**wave_resolution(depth_w, period_s, stop_depth_m=stop_depth_m, gravity=gravity),
                      "refine": int(refine)}
        cpw = resolution["cells_per_wavelength"]
        if cpw < MIN_CELLS_PER_WAVELENGTH:
            if choice is not None and choice["limited_by"] in ("memory", "work"):
                how = (f"the {choice['limited_by']} limit allowed a grid {refine} times finer, not "
                       f"{choice['wanted']}; raise it ([bathymetry] max_memory_gb, check --force) or crop the grid")
            elif choice is not None and choice["limited_by"]:
                how = f"even the finest grid the check makes ({MAX_REFINE_FACTOR} times finer) has too few"
            else:
                nxt = min(MAX_REFINE_FACTOR, max(int(refine) + 1, math.ceil(refine * MIN_CELLS_PER_WAVELENGTH / cpw)))
                how = (f"solve the wave on a finer grid (check --refine {nxt} or {AUTO_REFINE}: about "
                       f"{(nxt / refine) ** 3:.0f} times the cost)")
            warnings.warn(
                f"wave check: {cpw:.1f} cells per {period_s:.0f} s wavelength at the stop isobath (cells of "
                f"{resolution['cell_m'] / 1e3:.1f} km, band depth {resolution['band_depth_m']:.0f} m), fewer than "
                f"{MIN_CELLS_PER_WAVELENGTH:g}: the coastal wave maxima are not converged in grid spacing; {how}",
                ResolutionWarning, stacklevel=2)
    if progress is True and (refine > 1 or choice is not None):
        cost = refine ** 3 if nest_info is None else nest_info["ocean_refine"] ** 3 + nest_info["share"] * refine ** 3
        print(f"  wave solved on {_grid_words(refine, nest_info)}"
              + (f": {resolution['cells_per_wavelength']:.1f} cells per {period_s:.0f} s wavelength at the stop "
                 "isobath" if resolution is not None else "")
              + (f" (about {cost:.3g} times the cost of the run's grid)" if refine > 1 else ""),
              file=sys.stderr)
    opts = dict(duration_s=duration_s, stop_depth_m=stop_depth_m, coast=coast, boundary=boundary, cfl=cfl,
                gravity=gravity, threads=threads, progress=progress, **simulate_kwargs)
    labelled = progress is True and reference_depth is not None

    def _solve(sea: xr.DataArray, sea_w: xr.DataArray, label: str) -> tuple[WaveResult, xr.DataArray]:
        prog = label if labelled else progress
        if box is None:
            return simulate_linear_long_wave(sea_w, eta_w, **{**opts, "progress": prog}), sea_w
        nw = simulate_nested(sea, eta0, box, int(refine), ocean_refine=nest_info["ocean_refine"],
                             **{**opts, "progress": prog})
        return nw.fine, nw.depth

    res, depth_w = _solve(depth, depth_w, "wave, real ocean")
    sample = dict(search_radius_cells=search_radius_cells * refine, statistic=statistic)
    wave = segment_max_amplitude(res, segments, depth_w, stop_depth_m, **sample)
    table = pd.DataFrame({"segment_id": wave.index.values})
    if "name" in segments.columns:
        table["name"] = np.asarray(segments["name"])
    # the amplitude ranking's segments (real run) and the lensing ranking's (both runs)
    ranked = ranked_mask(segments, "amplitude")
    ranked_lens = ranked_mask(segments, "lensing")
    table["ranked"] = ranked
    table["ranked_lensing"] = ranked_lens
    _paired_columns(table, "ray_value", np.asarray(segments[ray_column], dtype=float), "wave_amp_stop_m",
                    wave.values, ranked, ("rank_ray", "rank_wave"))
    arr = segment_max_amplitude(res, segments, depth_w, stop_depth_m, search_radius_cells=search_radius_cells * refine,
                                statistic="min", field="arrival_time_s")
    table["wave_first_arrival_s"] = arr.values
    with np.errstate(divide="ignore", invalid="ignore"):
        table["ratio_wave_to_ray"] = table["wave_amp_stop_m"] / table["ray_value"]
    agree = compare_rankings(table["ray_value"].where(ranked), table["wave_amp_stop_m"].where(ranked), k=k)
    agree["ray_column"] = ray_column
    ratio = table["ratio_wave_to_ray"].where(ranked).to_numpy(float)
    ratio = ratio[np.isfinite(ratio) & (ratio > 0)]
    if ratio.size:
        agree["amplitude_ratio"] = {"median": float(np.median(ratio)), "p5": float(np.percentile(ratio, 5)),
                                    "p95": float(np.percentile(ratio, 95))}
    agree["n_faint_wave"] = int(faint_wave_segments(table["wave_amp_stop_m"], ranked).sum())
    agree["refine"] = int(refine)
    agree["nest"] = nest_info
    if choice is not None:
        agree["refine_choice"] = choice
    if resolution is not None:
        agree["resolution"] = resolution
    res_ref = None
    if reference_depth is not None:
        ref_w = refine_grid(reference_depth, refine) if box is None else None
        res_ref, ref_w = _solve(reference_depth, ref_w, "wave, reference ocean")
        wave_ref = segment_max_amplitude(res_ref, segments, ref_w, stop_depth_m, **sample)
        sq = segment_max_amplitude(res, segments, depth_w, stop_depth_m, field="eta_sq_integral", **sample)
        sq_ref = segment_max_amplitude(res_ref, segments, ref_w, stop_depth_m, field="eta_sq_integral", **sample)
        with np.errstate(divide="ignore", invalid="ignore"):
            wave_lensing = sq.values / sq_ref.values
            peak_lensing = (wave.values / wave_ref.values) ** 2
        table["wave_amp_reference_m"] = wave_ref.values
        ray_lensing = np.asarray(segments[lensing_column], dtype=float)
        _paired_columns(table, "ray_lensing", ray_lensing, "wave_lensing", wave_lensing, ranked_lens,
                        ("rank_ray_lensing", "rank_wave_lensing"))
        table["wave_peak_lensing"] = np.where(np.isfinite(peak_lensing), peak_lensing, np.nan)
        for key, col, measure in (("lensing", "wave_lensing", "energy"), ("lensing_peak", "wave_peak_lensing", "peak")):
            agree[key] = {**_rankings_or_none(table["ray_lensing"].where(ranked_lens), table[col].where(ranked_lens), k),
                          "ray_column": lensing_column, "wave_measure": measure}
    table.attrs.update(ray_column=ray_column, cautions=caution_text())
    return WaveCheck(res, table, agree, wave_reference=res_ref, depth=depth_w)


def _coast_box(depth: xr.DataArray, segments: Any) -> NestBox | None:
    """The box a nested check refines (:data:`NEST_MARGIN_KM` around the segments), or None when the
    grid is better refined whole (the box would hold more than :data:`NEST_MAX_SHARE` of it, is too
    small or reaches the seam of a longitude-periodic grid). It does not depend on the factor."""
    if len(segments) == 0:
        return None
    b = shapely.bounds(np.asarray(list(segments["geometry"]), dtype=object))
    x = np.concatenate([b[:, 0], b[:, 2]])
    y = np.concatenate([b[:, 1], b[:, 3]])
    box = nest_box(depth, x, y, NEST_MARGIN_KM * 1e3)
    if box.share_of(depth.shape) > NEST_MAX_SHARE or min(box.shape) < 4 or box.reaches_seam(GridInfo.from_dataarray(depth)):
        return None
    return box


def _box_for(box: NestBox | None, refine: int) -> NestBox | None:
    """``box`` when a check refined ``refine`` times nests in it, else None: refine the whole grid."""
    return box if refine > 1 and nests_within_step(refine) else None


def _nest_box(depth: xr.DataArray, segments: Any, refine: int) -> NestBox | None:
    """The coast box to refine ``refine`` times (:func:`_coast_box`), or None: refine it all."""
    return _box_for(_coast_box(depth, segments), refine)


def _rankings_or_none(ray: pd.Series, wave: pd.Series, k: int) -> dict[str, Any]:
    """:func:`compare_rankings`, or NaN figures when fewer than 3 segments have both values (the wave
    reached almost none of them in the simulated time: no ratio of its energies there)."""
    n = int((np.isfinite(ray.to_numpy(float)) & np.isfinite(wave.to_numpy(float))).sum())
    if n >= 3:
        return compare_rankings(ray, wave, k=k)
    return {"spearman": np.nan, "spearman_p": np.nan, "kendall": np.nan, "kendall_p": np.nan, "topk_overlap": None,
            "topk_common": None, "k": min(int(k), max(n, 1)), "n": n}


def _paired_columns(table: pd.DataFrame, ray_name: str, ray: np.ndarray, wave_name: str, wave: np.ndarray,
                    ranked: np.ndarray, rank_names: tuple[str, str]) -> None:
    """Add a ray and a wave column and their ranks (1 = largest) among the ranked segments."""
    table[ray_name] = ray
    table[wave_name] = np.where(np.isfinite(wave), wave, np.nan)
    for col, src in zip(rank_names, (ray, table[wave_name].to_numpy(float))):
        ok = np.isfinite(src) & ranked
        rank = np.zeros(src.size, dtype=np.int64)
        order = np.argsort(-np.where(ok, src, -np.inf), kind="stable")
        rank[order[: int(ok.sum())]] = np.arange(1, int(ok.sum()) + 1)
        table[col] = pd.array(rank, dtype="Int64")
        table.loc[~ok, col] = pd.NA
