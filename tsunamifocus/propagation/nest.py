"""One-way nesting of the linear long-wave solver: a finer grid only where the coast needs it.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

A trans-ocean wave is resolved by the run's grid in deep water (hundreds of kilometres per
wavelength) but not near the coast, where the wavelength shrinks with ``sqrt(h)`` to a few cells.
Refining the whole ocean to resolve the coast costs ``refine**3`` times the work; refining a box
around the coast of interest costs that factor on the box alone. The solve runs in two passes:

1. the whole grid at its own spacing, recording the surface on the cells around the box's edges
   at every step;
2. the box, cut from the sea floor refined ``refine`` times (:func:`tsunamifocus.grid.refine_grid`:
   the same cells a whole refined grid would have), from the source's refined initial surface.
   On a ring one coarse cell wide along every box side inside the grid, the surface is imposed
   at every step from the first pass, bilinear in space between the coarse cells (wet ones only)
   and linear in time; box sides on the grid's own edges keep its boundary condition.

A box refined 4 or more times is better nested in an ocean refined too (``ocean_refine``,
:func:`ocean_factor`): across a whole ocean the incoming wave at the run's spacing is not the one
a 4x grid computes, likely through its numerical dispersion (docs/wave_check.md).

Information flows one way, from the coarse grid into the box (one-way nesting; for example
Kowalik and Murty 1993, *Numerical Modeling of Ocean Dynamics*, on nested grids for long
waves): what the box sends back out reaches the coarse grid only through the coarse solution's
own coast. That is what the wave check needs: the incoming wave is resolved where it is long,
the coastal maxima where it is short. The water volume in the box is not conserved (the ring is
a source): the box run's ``stats`` carry the whole grid's volume budget and the box's own
residual under ``stats["nested"]["box_mass_error"]``; ``elapsed_s`` is both passes' wall time.
Arrival times in the box use the whole run's threshold.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ..errors import InputError
from ..grid import GridInfo, refine_grid
from .wave import WaveResult, _check_depth, _parse_boundary, _wet_mask, simulate_linear_long_wave

__all__ = ["NestBox", "NestedWave", "nest_box", "nests_within_step", "ocean_factor", "simulate_nested", "NEST_MAX_SHARE",
           "NEST_MAX_STEP"]

#: A box holding more than this share of the grid's cells is not worth nesting: the whole grid is
#: refined instead (the coarse pass and the ring then cost more than they save).
NEST_MAX_SHARE: float = 0.5

#: The box is at most this many times finer than the ocean it is nested in (:func:`ocean_factor`):
#: a box refined 4x is nested in the whole ocean refined 2x. On a trans-Pacific case (Japan
#: Trench interface to the North American coast, 0.1 degree) a 4x box in the ocean at the run's
#: spacing departed from the whole grid refined 4x (amplitude ranking 0.942, lensing 0.760; likely
#: because the incoming wave crosses 8000 km at the coarse spacing, with its numerical dispersion),
#: a 4x box in the ocean refined 2x did not (0.988 / 0.935) - docs/wave_check.md.
NEST_MAX_STEP: int = 2

# surface elevations below this [m] are set to 0 in the recorded ring values (see simulate_nested)
_NEGLIGIBLE_M = 1e-12


@dataclass(frozen=True)
class NestBox:
    """A box of the run's grid, as index ranges ``[j0, j1) x [i0, i1)`` (rows, columns)."""

    j0: int
    j1: int
    i0: int
    i1: int

    @property
    def shape(self) -> tuple[int, int]:
        return self.j1 - self.j0, self.i1 - self.i0

    def share_of(self, shape: tuple[int, int]) -> float:
        """The box's share of the cells of a grid of ``shape``."""
        return self.shape[0] * self.shape[1] / float(shape[0] * shape[1])

    def reaches_seam(self, info: GridInfo) -> bool:
        """Whether the box touches the seam of a longitude-periodic grid (it cannot wrap across it)."""
        return bool(info.periodic_x) and (self.i0 == 0 or self.i1 == info.nx)


@dataclass
class NestedWave:
    """Result of :func:`simulate_nested`.

    Attributes
    ----------
    coarse : WaveResult
        The whole grid at its own spacing (or refined ``ocean_refine`` times).
    fine : WaveResult
        The box at ``refine`` times finer spacing; NaN on the forced ring.
    depth : xarray.DataArray
        The box's refined sea floor (the grid of ``fine``).
    box : NestBox
        The box in the run's grid.
    refine : int
        The refinement factor of the box.
    """

    coarse: WaveResult
    fine: WaveResult
    depth: xr.DataArray
    box: NestBox
    refine: int


def nest_box(depth: xr.DataArray, x: np.ndarray, y: np.ndarray, margin_m: float) -> NestBox:
    """The smallest box of ``depth``'s cells holding the points ``(x, y)`` and ``margin_m`` around them.

    On lon/lat grids the margin in longitude is taken at the points' most poleward latitude
    (the widest it needs to be). The box is clipped to the grid.
    """
    info = _check_depth(depth)
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        raise InputError("nest box: no finite point to put the box around")
    if not (math.isfinite(margin_m) and margin_m >= 0):
        raise InputError(f"nest box margin {margin_m!r}: expected a distance >= 0 [m]")
    x, y = x[ok], y[ok]
    if info.geographic:
        my = margin_m / (info.radius_m * math.pi / 180.0)
        lat = min(89.0, float(np.max(np.abs(y))) + my)
        mx = my / max(math.cos(math.radians(lat)), 1e-3)
    else:
        mx = my = margin_m
    xs, ys = np.asarray(info.x, float), np.asarray(info.y, float)

    def _span(v: np.ndarray, lo: float, hi: float) -> tuple[int, int]:
        step = v[1] - v[0] if v.size > 1 else 1.0
        a = (lo - v[0]) / step
        b = (hi - v[0]) / step
        a, b = min(a, b), max(a, b)
        return max(0, int(math.floor(a))), min(v.size, int(math.ceil(b)) + 1)

    i0, i1 = _span(xs, float(x.min()) - mx, float(x.max()) + mx)
    j0, j1 = _span(ys, float(y.min()) - my, float(y.max()) + my)
    return NestBox(j0, j1, i0, i1)


def ocean_factor(refine: int) -> int:
    """Refinement of the ocean around a box refined ``refine`` times: the largest divisor of
    ``refine`` that leaves the box at most :data:`NEST_MAX_STEP` times finer (and at least 2).

    2 -> 1, 3 -> 1, 4 -> 2, 6 -> 3, 8 -> 4.
    """
    refine = int(refine)
    divisors = [d for d in range(1, refine // 2 + 1) if refine % d == 0]  # each leaves the box >= 2x finer
    return max([d for d in divisors if refine // d <= NEST_MAX_STEP] or divisors or [1])


def nests_within_step(refine: int) -> bool:
    """Whether a box refined ``refine`` times has an ocean grid (:func:`ocean_factor`) it is at most
    :data:`NEST_MAX_STEP` times finer than: False for 3, 5, 7, whose box would sit in the run's own
    ocean. On the trans-Pacific interface case a 3x box in the ocean at 0.1 degree agreed with the
    whole grid refined 4x at 0.952 / 0.737 (amplitude / lensing Spearman), the whole grid refined
    3x at 0.984 / 0.899 (docs/wave_check.md): such factors are better refined whole.
    """
    return int(refine) // ocean_factor(refine) <= NEST_MAX_STEP


def _fine_cut(da: xr.DataArray, box: NestBox, refine: int, ny: int, nx: int) -> xr.DataArray:
    """The box's cells of ``refine_grid(da, refine)``, computed on the box and a one-cell pad only."""
    pj0, pj1 = max(box.j0 - 1, 0), min(box.j1 + 1, ny)
    pi0, pi1 = max(box.i0 - 1, 0), min(box.i1 + 1, nx)
    sub = da.isel({da.dims[0]: slice(pj0, pj1), da.dims[1]: slice(pi0, pi1)})
    if "lon_periodic" in sub.attrs:
        sub = sub.copy()
        sub.attrs["lon_periodic"] = 0
    fine = refine_grid(sub, refine)
    cj, ci = (box.j0 - pj0) * refine, (box.i0 - pi0) * refine
    return fine.isel({fine.dims[0]: slice(cj, cj + box.shape[0] * refine),
                      fine.dims[1]: slice(ci, ci + box.shape[1] * refine)})


def _ring(box: NestBox, refine: int, ny: int, nx: int) -> tuple[np.ndarray, dict[str, bool]]:
    """Mask of the box's fine cells forced from the coarse grid, and which box sides are inside the grid."""
    inside = {"south": box.j0 > 0, "north": box.j1 < ny, "west": box.i0 > 0, "east": box.i1 < nx}
    fy, fx = box.shape[0] * refine, box.shape[1] * refine
    ring = np.zeros((fy, fx), bool)
    w = refine
    if inside["south"]:
        ring[:w, :] = True
    if inside["north"]:
        ring[-w:, :] = True
    if inside["west"]:
        ring[:, :w] = True
    if inside["east"]:
        ring[:, -w:] = True
    return ring, inside


def _ring_weights(box: NestBox, refine: int, ring: np.ndarray, coarse_wet: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Fine ring cells (flat indices), the coarse cells they read (flat), and per ring cell the
    four positions among those coarse cells and their bilinear weights (``(n, 4)`` each).

    Fine cell ``jf`` of the box sits at coarse fractional row ``j0 + (jf + 0.5) / refine - 0.5``;
    its value is bilinear between the four surrounding coarse centres, over the wet ones only
    (weights renormalised; no wet neighbour: 0).
    """
    ny, nx = coarse_wet.shape
    jf, if_ = np.nonzero(ring)
    cy = box.j0 + (jf + 0.5) / refine - 0.5
    cx = box.i0 + (if_ + 0.5) / refine - 0.5
    ja = np.floor(cy).astype(np.int64)
    ia = np.floor(cx).astype(np.int64)
    ty, tx = cy - ja, cx - ia
    cols, vals = [], []
    for dj, di, w in ((0, 0, (1 - ty) * (1 - tx)), (0, 1, (1 - ty) * tx), (1, 0, ty * (1 - tx)), (1, 1, ty * tx)):
        jj = np.clip(ja + dj, 0, ny - 1)
        ii = np.clip(ia + di, 0, nx - 1)
        cols.append(jj * nx + ii)
        vals.append(w * coarse_wet[jj, ii])
    c = np.stack(cols, axis=1)
    w = np.stack(vals, axis=1)
    tot = w.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(tot > 0, w / np.where(tot > 0, tot, 1.0), 0.0)
    used, c_local = np.unique(c.ravel(), return_inverse=True)
    fine_flat = jf * ring.shape[1] + if_
    return fine_flat, used, c_local.reshape(c.shape), w


def simulate_nested(
    depth: xr.DataArray,
    eta0: xr.DataArray,
    box: NestBox,
    refine: int,
    *,
    duration_s: float,
    stop_depth_m: float,
    progress: bool | str | Callable[[int, int], None] | None = None,
    ocean_refine: int | None = None,
    **simulate_kwargs: Any,
) -> NestedWave:
    """Solve the linear long-wave equations on ``depth``, and again ``refine`` times finer inside ``box``.

    Parameters
    ----------
    depth, eta0 : xarray.DataArray
        The run's sea floor [m] and the source's initial surface [m] on it.
    box : NestBox
        Where to refine (:func:`nest_box`); it must not wrap across a periodic grid's seam.
    refine : int
        Refinement factor of the box (2 or more).
    duration_s, stop_depth_m
        As for :func:`simulate_linear_long_wave` (both passes).
    progress : bool, str or callable, optional
        As for :func:`simulate_linear_long_wave`; with a label, the passes are labelled
        "<label>, whole grid" and "<label>, coast box".
    ocean_refine : int, optional
        Solve the whole ocean on ``depth`` refined this many times (a divisor of ``refine``, at
        most half of it) instead of on ``depth`` itself; the box is still cut from ``depth``
        refined ``refine`` times. Default :func:`ocean_factor` of ``refine`` (1 for factors 2
        and 3).
    **simulate_kwargs
        Passed to both passes (``coast``, ``boundary``, ``cfl``, ``gravity``, ``threads``, limits);
        the box's sides inside the grid are closed and forced, whatever ``boundary`` says.

    Returns
    -------
    NestedWave

    Raises
    ------
    InputError
        Bad box or factor.
    """
    info = _check_depth(depth)
    ny, nx = info.ny, info.nx
    if isinstance(refine, bool) or not isinstance(refine, (int, np.integer)) or refine < 2:
        raise InputError(f"nested wave: refine {refine!r}: expected an integer of 2 or more")
    if not (0 <= box.j0 < box.j1 <= ny and 0 <= box.i0 < box.i1 <= nx):
        raise InputError(f"nested wave: box {box} does not lie within the {ny} x {nx} grid")
    if min(box.shape) < 4:
        raise InputError(f"nested wave: box {box} is {box.shape[0]} x {box.shape[1]} cells; expected at least 4 x 4")
    if box.reaches_seam(info):
        raise InputError(f"nested wave: box {box} reaches the seam of a longitude-periodic grid; "
                         "refine the whole grid instead")
    refine = int(refine)
    if ocean_refine is None:
        ocean_refine = ocean_factor(refine)
    m = int(ocean_refine)
    if isinstance(ocean_refine, bool) or m < 1 or refine % m or refine // m < 2:
        raise InputError(f"nested wave: ocean_refine {ocean_refine!r}: expected a divisor of refine {refine} "
                         "that leaves the box at least 2 times finer")
    ocean, eta_o = (depth, eta0) if m == 1 else (refine_grid(depth, m), refine_grid(eta0, m))
    box_o = NestBox(box.j0 * m, box.j1 * m, box.i0 * m, box.i1 * m)  # the box on the ocean's grid
    step = refine // m
    ring, inside = _ring(box_o, step, ny * m, nx * m)
    d = np.asarray(ocean.values, float)
    coarse_wet = _wet_mask(d, stop_depth_m)
    fine_flat, used, pick, weights = _ring_weights(box_o, step, ring, coarse_wet)
    e0 = np.where(coarse_wet, np.nan_to_num(np.asarray(eta_o.values, float)), 0.0).ravel()
    record = [e0[used].astype(np.float32)]

    def _record(eta: np.ndarray, t_new: float) -> None:
        record.append(eta.ravel()[used].astype(np.float32))

    def _label(part: str) -> Any:
        if isinstance(progress, str):
            return f"{progress}, {part}"
        return progress

    coarse = simulate_linear_long_wave(ocean, eta_o, duration_s=duration_s, stop_depth_m=stop_depth_m,
                                       progress=_label("whole grid"), step_hook=_record, **simulate_kwargs)
    dt_c = float(coarse.stats["dt_s"])
    rec = np.stack(record)  # (steps + 1, used)
    # the scheme's precursors ahead of the front decay through the subnormal range, whose arithmetic
    # is many times slower; nothing below a picometre matters to the check
    rec[np.abs(rec) < _NEGLIGIBLE_M] = 0.0
    depth_f = _fine_cut(depth, box, refine, ny, nx)
    eta_f = _fine_cut(eta0, box, refine, ny, nx)
    # the grid's own boundary on box sides along its edges; closed (and forced) inside
    edges = {side: "reflect" if inside[side] else kind
             for side, kind in _parse_boundary(simulate_kwargs.pop("boundary", "absorb")).items()}
    n_rec = rec.shape[0] - 1

    def _force(eta: np.ndarray, t_new: float) -> None:
        s = min(max(t_new / dt_c, 0.0), float(n_rec))
        k = min(int(s), n_rec - 1) if n_rec > 0 else 0
        f = s - k
        vals = rec[k] * (1.0 - f) + rec[min(k + 1, n_rec)] * f
        eta.ravel()[fine_flat] = np.einsum("ij,ij->i", vals[pick], weights)

    kw = dict(simulate_kwargs)
    # arrivals against the whole run's threshold (the box need not hold the source)
    if math.isfinite(coarse.stats["arrival_threshold_m"]):  # inf: a source without any surface
        kw["arrival_threshold_m"] = coarse.stats["arrival_threshold_m"]
    fine = simulate_linear_long_wave(depth_f, eta_f, duration_s=duration_s, stop_depth_m=stop_depth_m,
                                     boundary=edges, progress=_label("coast box"), step_hook=_force, **kw)
    for name in ("max_amplitude", "max_time_s", "arrival_time_s", "eta_sq_integral"):
        da = getattr(fine, name)
        da.values[ring] = np.nan
    st = fine.stats
    # the box's volume is not conserved (the ring is a source): the budget is the whole grid's
    st["nested"] = {"refine": refine, "ocean_refine": m, "box": [box.j0, box.j1, box.i0, box.i1],
                    "forced_sides": [s for s, v in inside.items() if v], "coarse_dt_s": dt_c,
                    "coarse_elapsed_s": coarse.stats["elapsed_s"], "box_elapsed_s": st["elapsed_s"],
                    "box_mass_error": st["mass_error"]}
    for key in ("volume0_m3", "volume_end_m3", "outflow_m3", "mass_error_m3", "mass_error"):
        st[key] = coarse.stats[key]
    st["elapsed_s"] = coarse.stats["elapsed_s"] + st["nested"]["box_elapsed_s"]
    return NestedWave(coarse=coarse, fine=fine, depth=depth_f, box=box, refine=refine)
