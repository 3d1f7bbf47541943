"""Independent check of the ray screening by the linear long-wave (shallow-water) equations.

The solver integrates the linear shallow-water equations without friction or advection

.. math::

    \\partial_t \\eta + \\nabla \\cdot \\mathbf{q} = 0, \\qquad
    \\partial_t \\mathbf{q} = -g\\, h\\, \\nabla \\eta ,

for the surface elevation ``eta`` [m] and the volume flux per unit width ``q = h u`` [m2 s-1]
(equivalent to ``u_t = -g grad(eta)`` because ``h`` does not depend on time). The grid is an
Arakawa C grid: ``eta`` at the cell centres (the depth-grid nodes), ``q_x`` on the faces between
columns, ``q_y`` on the faces between rows. Time stepping is forward-backward (flux first, from the
old surface; then surface from the new flux), which is equivalent to the staggered leapfrog scheme
and is stable for ``c_max dt sqrt(1/dx^2 + 1/dy^2) <= 1`` (Mesinger and Arakawa 1976, GARP
Publication Series 17). The time step uses the Courant number ``cfl`` (default 0.8).

On lon/lat grids the equations are written on a sphere of radius ``EARTH_RADIUS_M`` (the grid's
``GridInfo.radius_m``) in flux form
(finite volumes): face lengths ``R dlat`` and ``R cos(lat) dlon``, exact spherical cell areas, and
gradients ``1/(R cos lat) d/dlon`` and ``1/R d/dlat``; longitude wraps on grids with
``lon_periodic = 1``. Because the surface update is a flux divergence, the water volume is conserved
to round-off; volume that leaves through radiating faces is booked, and ``stats["mass_error"]`` is
the budget residual.

Boundaries: open edges use a first-order radiation (Sommerfeld) condition for the normal component,
``q_n = sqrt(g h) eta`` of the adjacent wet cell (exact for a long wave leaving at normal
incidence, partly reflecting at oblique incidence); ``"reflect"`` closes the edge (``q_n = 0``).
Cells with depth ``<= stop_depth_m`` (and NaN depth) are dry. The coast between a wet and a dry cell
is a reflecting wall (``coast="reflect"``) or the same radiation condition (``coast="absorb"``, the
wave leaves towards the shore without reflection — the stop isobath acts as a sink).

Screening estimates only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).
"""

from __future__ import annotations

import math
import time
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numba
import numpy as np
import xarray as xr

from ..cautions import caution_summary, caution_text
from ..constants import DEFAULTS, GRAVITY, STOP_DEPTH_M, WORK_LIMITS
from ..errors import InputError, ResolutionWarning, ResourceLimitError, check_work
from ..grid import GridInfo
from ..io.interrupts import KernelStopped, interruptible, stop_requested
from ..io.progress import progress_bar
from . import _wavekernel as _k
from ..io._numbacache import warn_cache_fallback

__all__ = ['WaveResult', 'simulate_linear_long_wave', 'wave_time_step', 'WAVE_CAUTION', 'WAVE_LIMITS']

#: Cautions line carried by the figure of this module: the first paragraph of CAUTIONS.md plus the
#: limits of the wave check. Grids carry the full text in ``attrs["cautions"]``.
#: What the wave check leaves out.
WAVE_LIMITS = "Wave check: linear long-wave equations, no friction, no nonlinearity, no inundation."
WAVE_CAUTION = caution_summary() + " " + WAVE_LIMITS

_EDGES = ("west", "east", "south", "north")
# bytes per cell: eta, qx, qy, coef_x, coef_y, max, max_time, arrival, sum eta^2 dt (float64) + wet masks
# (uint8, bool)
_BYTES_PER_CELL = 9 * 8 + 2
# below this many cells the serial kernels are used (thread start-up dominates on tiny grids)
_SERIAL_BELOW_CELLS = 20_000


@dataclass
class WaveResult:
    """Result of :func:`simulate_linear_long_wave`.

    Attributes
    ----------
    max_amplitude : xarray.DataArray
        Maximum crest elevation ``max_t eta`` [m] over the run (including t = 0) on the depth grid;
        NaN on dry cells. This is the maximum elevation, not the maximum of ``|eta|``.
    max_time_s : xarray.DataArray
        Time [s] at which ``max_amplitude`` was reached; NaN on dry cells.
    arrival_time_s : xarray.DataArray
        First time [s] at which ``|eta|`` exceeded ``stats["arrival_threshold_m"]``; NaN where never.
    eta : xarray.DataArray
        Surface elevation [m] at the end of the run (0 on dry cells).
    snapshots : xarray.DataArray or None
        ``eta`` [m] (float32) at the recorded times, dims ``("time", ydim, xdim)``, when
        ``record_every_s`` was given.
    eta_sq_integral : xarray.DataArray or None
        ``sum eta^2 dt`` [m2 s] over the run (the time integral of the squared elevation, from the
        first step on); NaN on dry cells. Where the wave is progressive its energy flux per metre of
        crest is ``rho g c eta^2``, so at a given cell this integral is the energy that passed in
        proportion (``rho g c`` times it): the wave counterpart of the rays' energy.
    stats : dict
        ``steps``, ``dt_s``, ``duration_s``, ``cfl`` (requested), ``courant_max`` (achieved),
        ``elapsed_s``, ``cell_updates_per_s`` (grid cells x steps / wall time), ``threads``,
        ``n_cells``, ``n_wet``, ``volume0_m3``, ``volume_end_m3``, ``outflow_m3``, ``mass_error_m3``,
        ``mass_error`` (residual / integral of |eta0| dA), ``arrival_threshold_m``, ``stop_depth_m``,
        ``coast``, ``boundary``, ``gravity``, ``memory_bytes``.
    """

    max_amplitude: xr.DataArray
    max_time_s: xr.DataArray
    arrival_time_s: xr.DataArray
    eta: xr.DataArray
    snapshots: xr.DataArray | None
    stats: dict[str, Any] = field(default_factory=dict)
    eta_sq_integral: xr.DataArray | None = None


# --------------------------------------------------------------------------------------------------
# set-up helpers
# --------------------------------------------------------------------------------------------------


def _parse_boundary(boundary: str | Mapping[str, str] | Sequence[str]) -> dict[str, str]:
    ok = ("absorb", "reflect")
    if isinstance(boundary, str):
        if boundary not in ok:
            raise InputError(f"boundary={boundary!r}: expected 'absorb' or 'reflect' (or a per-edge mapping)")
        return dict.fromkeys(_EDGES, boundary)
    if isinstance(boundary, Mapping):
        unknown = set(boundary) - set(_EDGES)
        if unknown:
            raise InputError(f"boundary has unknown edge(s) {sorted(unknown)}; expected keys among {_EDGES}")
        out = dict.fromkeys(_EDGES, "absorb")
        out.update(boundary)
    else:
        vals = list(boundary)
        if len(vals) != 4:
            raise InputError(f"boundary sequence must give 4 values (west, east, south, north), got {vals!r}")
        out = dict(zip(_EDGES, vals, strict=True))
    for e, v in out.items():
        if v not in ok:
            raise InputError(f"boundary[{e!r}]={v!r}: expected 'absorb' or 'reflect'")
    return out


@dataclass
class _Metric:
    """Lengths [m] of the C grid: per row (centres) and per y-face row."""

    dxm: np.ndarray  # (ny,) distance between x-neighbours' centres
    dym: float  # distance between y-neighbours' centres
    lx: float  # length of an x-face
    ly: np.ndarray  # (ny + 1,) length of the y-face between rows j-1 and j
    area: np.ndarray  # (ny,) cell area


def _metric(info: GridInfo) -> _Metric:
    ny = info.ny
    if not info.geographic:
        return _Metric(
            dxm=np.full(ny, info.dx),
            dym=info.dy,
            lx=info.dy,
            ly=np.full(ny + 1, info.dx),
            area=np.full(ny, info.dx * info.dy),
        )
    r = info.radius_m
    dlon = math.radians(info.dx)
    dlat = math.radians(info.dy)
    lat = np.radians(info.y)
    lat_f = np.radians(info.y0 - 0.5 * info.dy + info.dy * np.arange(ny + 1))
    cos_c = np.cos(np.clip(lat, -np.pi / 2, np.pi / 2))
    cos_f = np.clip(np.cos(np.clip(lat_f, -np.pi / 2, np.pi / 2)), 0.0, None)
    area = info.cell_area_m2()[:, 0]
    return _Metric(dxm=r * dlon * cos_c, dym=r * dlat, lx=r * dlat, ly=r * dlon * cos_f, area=area)


def _wet_mask(depth: np.ndarray, stop_depth_m: float) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return np.isfinite(depth) & (depth > stop_depth_m)


def _check_depth(depth: xr.DataArray) -> GridInfo:
    if not isinstance(depth, xr.DataArray):
        raise InputError(f"depth must be an xarray.DataArray on the grid convention, got {type(depth).__name__}")
    return GridInfo.from_dataarray(depth)


def _polar_dry(info: GridInfo, wet: np.ndarray, polar_cutoff_deg: float | None) -> np.ndarray:
    if not info.geographic or polar_cutoff_deg is None:
        return wet
    polar = np.abs(info.y) > polar_cutoff_deg
    n = int(wet[polar].sum())
    if n:
        warnings.warn(
            f"{n} wet cells poleward of +-{polar_cutoff_deg} deg latitude are treated as land "
            "(polar_cutoff_deg) to keep the time step usable",
            ResolutionWarning,
            stacklevel=3,
        )
        wet = wet.copy()
        wet[polar, :] = False
    return wet


def wave_time_step(
    depth: xr.DataArray,
    *,
    stop_depth_m: float = STOP_DEPTH_M,
    cfl: float = 0.8,
    gravity: float = GRAVITY,
    polar_cutoff_deg: float | None = 80.0,
) -> float:
    """Return the stable time step [s] of the linear long-wave solver on ``depth``.

    ``dt = cfl / max_wet( sqrt(g h) * sqrt(1/dx^2 + 1/dy^2) )`` with the local cell sides in metres
    (on lon/lat grids ``dx = R cos(lat) dlon``), the stability limit of forward-backward / staggered
    leapfrog time stepping on the C grid being ``cfl = 1`` (Mesinger and Arakawa 1976).

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down.
    stop_depth_m : float
        Cells with depth [m] at or below this value are dry.
    cfl : float
        Courant number in (0, 1].
    gravity : float
        Gravitational acceleration [m s-2].
    polar_cutoff_deg : float or None
        On lon/lat grids, rows poleward of this latitude [deg] are dry.

    Returns
    -------
    float
        Time step [s].
    """
    _check_scalars(cfl=cfl, stop_depth_m=stop_depth_m, gravity=gravity)
    info = _check_depth(depth)
    d = np.asarray(depth.values, dtype=float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResolutionWarning)
        wet = _polar_dry(info, _wet_mask(d, stop_depth_m), polar_cutoff_deg)
    return _dt_from(d, wet, _metric(info), cfl, gravity, depth.name)


def _dt_from(d: np.ndarray, wet: np.ndarray, m: _Metric, cfl: float, gravity: float, name: Any) -> float:
    if not wet.any():
        raise InputError(f"depth grid '{name}': no wet cell deeper than the stop depth; nothing to simulate")
    hrow = np.where(wet, d, 0.0).max(axis=1)
    with np.errstate(divide="ignore"):
        rate = np.sqrt(gravity * hrow) * np.sqrt(1.0 / m.dxm**2 + 1.0 / m.dym**2)
    rate = np.where(hrow > 0, rate, 0.0)
    return float(cfl / rate.max())


def _check_scalars(*, cfl: float, stop_depth_m: float, gravity: float) -> None:
    if not (isinstance(cfl, (int, float)) and math.isfinite(cfl) and 0.0 < cfl <= 1.0):
        raise InputError(
            f"cfl={cfl!r}: the Courant number must be in (0, 1] for forward-backward time stepping "
            "(stability limit 1; 0.8 recommended)"
        )
    if not (math.isfinite(stop_depth_m) and stop_depth_m >= 0.0):
        raise InputError(f"stop_depth_m={stop_depth_m!r} m: expected a finite depth >= 0 m")
    if not (math.isfinite(gravity) and gravity > 0.0):
        raise InputError(f"gravity={gravity!r} m s-2: expected a positive value")


@dataclass
class _Faces:
    """Dense interior coefficients and the sparse list of radiating faces."""

    ax: np.ndarray  # (ny, nx + 1) g h_face dt / dx on interior faces, 0 elsewhere
    ay: np.ndarray  # (ny + 1, nx)
    rx: tuple[np.ndarray, ...]  # rows, faces, source columns, signed speed [m s-1], length * dt [m s]
    ry: tuple[np.ndarray, ...]  # face rows, columns, source rows, signed speed, length * dt


def _face_arrays(
    d: np.ndarray,
    wet: np.ndarray,
    m: _Metric,
    dt: float,
    gravity: float,
    coast: str,
    bnd: dict[str, str],
    periodic: bool,
) -> _Faces:
    """Interior coefficients and radiating faces (see :mod:`tsunamifocus._wavekernel`)."""
    ny, nx = d.shape
    h = np.where(wet, d, 0.0)
    c = np.sqrt(gravity * h)
    absorb_coast = coast == "absorb"
    jj = np.arange(ny)[:, None] * np.ones((1, nx), dtype=np.int64)
    ii = np.ones((ny, 1), dtype=np.int64) * np.arange(nx)[None, :]
    rx: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []  # (row, face, src col, signed c)
    ry: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []  # (face row, col, src row, signed c)

    ax = np.full((ny, nx + 1), 0.0)
    # interior faces 1..nx-1 (west cell i-1, east cell i)
    wl, wr = wet[:, :-1], wet[:, 1:]
    ax[:, 1:nx] = np.where(wl & wr, gravity * 0.5 * (h[:, :-1] + h[:, 1:]) * dt / m.dxm[:, None], 0.0)
    if absorb_coast:
        sel = wl & ~wr  # outflow towards +x from the west cell
        rx.append((jj[:, :-1][sel], ii[:, 1:][sel], ii[:, :-1][sel], c[:, :-1][sel]))
        sel = wr & ~wl  # towards -x from the east cell
        rx.append((jj[:, 1:][sel], ii[:, 1:][sel], ii[:, 1:][sel], -c[:, 1:][sel]))
    col0 = np.arange(ny)
    if periodic:
        wl0, wr0 = wet[:, -1], wet[:, 0]
        b0 = wl0 & wr0
        ax[b0, 0] = gravity * 0.5 * (h[b0, -1] + h[b0, 0]) * dt / m.dxm[b0]
        if absorb_coast:
            sel = wl0 & ~wr0
            rx.append((col0[sel], np.zeros(int(sel.sum()), np.int64), np.full(int(sel.sum()), nx - 1), c[sel, -1]))
            sel = wr0 & ~wl0
            rx.append((col0[sel], np.zeros(int(sel.sum()), np.int64), np.zeros(int(sel.sum()), np.int64), -c[sel, 0]))
    else:
        if bnd["west"] == "absorb":
            sel = wet[:, 0]
            n = int(sel.sum())
            rx.append((col0[sel], np.zeros(n, np.int64), np.zeros(n, np.int64), -c[sel, 0]))
        if bnd["east"] == "absorb":
            sel = wet[:, -1]
            n = int(sel.sum())
            rx.append((col0[sel], np.full(n, nx), np.full(n, nx - 1), c[sel, -1]))

    ay = np.full((ny + 1, nx), 0.0)
    ws, wn = wet[:-1, :], wet[1:, :]
    ay[1:ny] = np.where(ws & wn, gravity * 0.5 * (h[:-1] + h[1:]) * dt / m.dym, 0.0)
    open_y = m.ly[1:ny, None] > 0.0
    if absorb_coast:
        sel = ws & ~wn & open_y  # towards +y from the south cell (row j-1), face j
        ry.append((jj[1:][sel], ii[1:][sel], jj[:-1][sel], c[:-1][sel]))
        sel = wn & ~ws & open_y  # towards -y from the north cell (row j)
        ry.append((jj[1:][sel], ii[1:][sel], jj[1:][sel], -c[1:][sel]))
    row = np.arange(nx)
    if bnd["south"] == "absorb" and m.ly[0] > 0.0:
        sel = wet[0]
        n = int(sel.sum())
        ry.append((np.zeros(n, np.int64), row[sel], np.zeros(n, np.int64), -c[0, sel]))
    if bnd["north"] == "absorb" and m.ly[ny] > 0.0:
        sel = wet[-1]
        n = int(sel.sum())
        ry.append((np.full(n, ny), row[sel], np.full(n, ny - 1), c[-1, sel]))

    def _cat(parts: list, length: Callable[[np.ndarray], np.ndarray]) -> tuple[np.ndarray, ...]:
        if not parts:
            e = np.zeros(0, np.int64)
            return e, e, e, np.zeros(0), np.zeros(0)
        a, b, src, cc = (np.concatenate([p[k] for p in parts]) for k in range(4))
        order = np.lexsort((b, a))  # fixed order: by row, then face/column
        a, b, src, cc = a[order].astype(np.int64), b[order].astype(np.int64), src[order].astype(np.int64), cc[order]
        return a, b, src, np.ascontiguousarray(cc, dtype=float), length(a)

    rxt = _cat(rx, lambda a: np.full(a.size, m.lx * dt))
    ryt = _cat(ry, lambda a: m.ly[a] * dt)
    return _Faces(ax, ay, rxt, ryt)


def _as_grid(template: xr.DataArray, values: np.ndarray, name: str, attrs: dict[str, Any]) -> xr.DataArray:
    out = template.copy(data=values)
    out.name = name
    keep = {k: v for k, v in template.attrs.items() if k in ("grid_mapping", "lon_periodic")}
    out.attrs = {**keep, **attrs, "cautions": caution_text()}
    return out


# --------------------------------------------------------------------------------------------------
# solver
# --------------------------------------------------------------------------------------------------


def simulate_linear_long_wave(
    depth: xr.DataArray,
    eta0: xr.DataArray,
    *,
    duration_s: float,
    stop_depth_m: float = STOP_DEPTH_M,
    coast: str = "reflect",
    boundary: str | Mapping[str, str] | Sequence[str] = "absorb",
    cfl: float = 0.8,
    gravity: float = GRAVITY,
    record_every_s: float | None = None,
    arrival_threshold_m: float | None = None,
    polar_cutoff_deg: float | None = 80.0,
    threads: int | None = None,
    progress: bool | str | Callable[[int, int], None] | None = None,
    max_memory_bytes: float | None = DEFAULTS["bathymetry"]["max_memory_gb"] * 1e9,
    max_cell_updates: float | None = WORK_LIMITS["wave_cell_updates"],
    step_hook: Callable[[np.ndarray, float], None] | None = None,
) -> WaveResult:
    """Integrate the linear long-wave equations from an initial surface at rest.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m], positive down, on the tsunamifocus grid convention (projected metres or lon/lat
        degrees). NaN and depth ``<= stop_depth_m`` are dry (land).
    eta0 : xarray.DataArray
        Initial surface elevation [m] on the same grid (e.g. the sea-floor uplift of the source);
        values on dry cells are ignored. The initial velocity is zero.
    duration_s : float
        Simulated time [s].
    stop_depth_m : float
        Stop isobath [m]: cells with depth at or below it are dry.
    coast : {"reflect", "absorb"}
        Wet/dry faces: reflecting wall, or first-order radiation (no reflection at normal incidence).
    boundary : {"absorb", "reflect"} or mapping or 4-sequence
        Open grid edges: first-order radiation condition ``q_n = sqrt(g h) eta`` ("absorb") or wall
        ("reflect"); one value for all edges, or per edge (keys ``west, east, south, north``).
        Ignored for west/east on longitude-periodic grids.
    cfl : float
        Courant number ``c_max dt sqrt(1/dx^2 + 1/dy^2)`` in (0, 1]; the solver uses this safety factor
        times the stability limit. Values above 1 are refused (unstable).
    gravity : float
        Gravitational acceleration [m s-2].
    record_every_s : float, optional
        Keep a float32 snapshot of ``eta`` every this many seconds (memory: 4 bytes per cell each).
    arrival_threshold_m : float, optional
        Elevation threshold [m] of ``|eta|`` for the arrival time; default ``1e-3 * max|eta0|``.
    polar_cutoff_deg : float or None
        On lon/lat grids, rows poleward of this latitude [deg] are treated as land (a warning says how
        many wet cells that removes); None keeps them (very small time step near the poles).
    threads : int, optional
        numba threads (default: numba's current setting; capped at ``NUMBA_NUM_THREADS``, the value
        used is in ``stats["threads"]``). Results do not depend on it. On machines whose cores are
        shared with other jobs ``threads=1`` is often faster (the step is memory-bound).
    progress : bool, str or callable, optional
        True for a progress bar labelled "wave solver", a str for one with that label, or a
        function ``f(step, n_steps)`` called about 100 times.
    max_cell_updates : float or None
        Refuse, before any step, runs of more wet-cell updates (wet cells x time steps) than this
        (ResourceLimitError; ``constants.WORK_LIMITS``); None: no limit.
    max_memory_bytes : int or None
        Refuse runs whose working arrays would exceed this size [bytes] (ResourceLimitError); default
        the one memory limit, ``[bathymetry] max_memory_gb`` of ``constants.DEFAULTS``.
    step_hook : callable, optional
        ``f(eta, t_new)`` called after every step with the surface (2-D, modifiable in place: the
        next step starts from it) and the time reached [s]; used by one-way nesting
        (:mod:`tsunamifocus.propagation.nest`) to read or impose the surface on a ring of cells.
        Running maxima, their times and arrivals are taken before the hook.

    Returns
    -------
    WaveResult

    Raises
    ------
    InputError
        Bad parameter, grid mismatch, NaN initial surface over wet cells, or no wet cells.
    ResourceLimitError
        The working arrays would exceed ``max_memory_bytes``.
    """
    info, bnd = _check_inputs(depth, eta0, coast=coast, boundary=boundary, duration_s=duration_s,
                              record_every_s=record_every_s, polar_cutoff_deg=polar_cutoff_deg, cfl=cfl,
                              stop_depth_m=stop_depth_m, gravity=gravity)
    ny, nx = info.ny, info.nx
    mem = _memory_needed(ny, nx, duration_s, record_every_s, max_memory_bytes)
    d = np.asarray(depth.values, dtype=float)
    wet = _polar_dry(info, _wet_mask(d, stop_depth_m), polar_cutoff_deg)
    e0 = np.asarray(eta0.values, dtype=float)
    bad = wet & ~np.isfinite(e0)
    if bad.any():
        raise InputError(f"eta0 has {int(bad.sum())} NaN/inf values over wet cells; expected finite elevations [m]")
    eta = np.where(wet, e0, 0.0)
    m = _metric(info)
    dt = _dt_from(d, wet, m, cfl, gravity, depth.name)
    n_steps = max(1, int(math.ceil(duration_s / dt - 1e-9)))
    n_wet = int(wet.sum())
    check_work(float(n_wet) * n_steps, max_cell_updates,
               f"wave solver for {duration_s / 3600:.3g} h: {n_steps:.3g} time steps of {dt:.3g} s over {n_wet} wet "
               f"cells = {float(n_wet) * n_steps:.3g} cell updates",
               "simulate a shorter time, coarsen the grid, or force it (max_cell_updates=None, check --force)")
    dt = float(duration_s) / n_steps
    hrow = np.where(wet, d, 0.0).max(axis=1)
    courant = float((np.sqrt(gravity * hrow) * np.sqrt(1.0 / m.dxm**2 + 1.0 / m.dym**2)).max() * dt)

    faces = _face_arrays(d, wet, m, dt, gravity, coast, bnd, info.periodic_x)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv_a = np.where(m.area > 0, 1.0 / m.area, 0.0)
    bx = dt * m.lx * inv_a
    byn = dt * m.ly[1:] * inv_a
    bys = dt * m.ly[:-1] * inv_a

    thr = _arrival_threshold(eta, arrival_threshold_m)
    qx = np.full((ny, nx + 1), 0.0)
    qy = np.full((ny + 1, nx), 0.0)
    max_eta = np.where(wet, eta, -np.inf)
    # np.full, not np.zeros: calloc-backed pages that are only conditionally written make masked vector
    # stores very slow (microcode assists on the shared zero page)
    max_time = np.full((ny, nx), 0.0)
    arrival = np.where(wet & (np.abs(eta) > thr), 0.0, np.nan)
    sq_int = np.full((ny, nx), 0.0)
    wet_u8 = wet.astype(np.uint8)
    area2d = m.area[:, None]
    vol0 = float(np.sum(eta * area2d))
    abs0 = float(np.sum(np.abs(eta) * area2d))

    loop = _time_loop(eta, qx, qy, faces, wet_u8, bx, byn, bys, thr, max_eta, max_time, arrival, sq_int,
                      n_steps=n_steps, dt=dt, periodic=bool(info.periodic_x), threads=threads,
                      record_every_s=record_every_s, progress=progress, step_hook=step_hook)
    stats = _run_stats(loop, n_steps=n_steps, dt=dt, duration_s=duration_s, cfl=cfl, courant=courant,
                       ny=ny, nx=nx, wet=wet, vol0=vol0, vol1=float(np.sum(eta * area2d)), abs0=abs0, thr=thr,
                       stop_depth_m=stop_depth_m, coast=coast, bnd=bnd, gravity=gravity,
                       polar_cutoff_deg=polar_cutoff_deg, mem=mem)
    return _wave_result(depth, wet, eta, max_eta, max_time, arrival, loop["snaps"], loop["snap_t"], thr, stats,
                        sq_int)


def _run_stats(loop: dict, *, n_steps, dt, duration_s, cfl, courant, ny, nx, wet, vol0, vol1, abs0, thr, stop_depth_m,
               coast, bnd, gravity, polar_cutoff_deg, mem) -> dict[str, Any]:
    """The run's statistics, with the volume budget (start + outflow = end, residual relative to |eta0|)."""
    outflow, elapsed, use_threads = loop["outflow"], loop["elapsed"], loop["threads"]
    resid = vol1 + outflow - vol0
    stats: dict[str, Any] = {
        "steps": n_steps,
        "dt_s": dt,
        "duration_s": float(duration_s),
        "cfl": float(cfl),
        "courant_max": courant,
        "elapsed_s": elapsed,
        "cell_updates_per_s": ny * nx * n_steps / elapsed if elapsed > 0 else math.inf,
        "threads": use_threads,
        "n_cells": ny * nx,
        "n_wet": int(wet.sum()),
        "volume0_m3": vol0,
        "volume_end_m3": vol1,
        "outflow_m3": outflow,
        "mass_error_m3": resid,
        "mass_error": resid / abs0 if abs0 > 0 else 0.0,
        "arrival_threshold_m": thr,
        "stop_depth_m": float(stop_depth_m),
        "coast": coast,
        "boundary": bnd,
        "gravity": float(gravity),
        "polar_cutoff_deg": polar_cutoff_deg,
        "memory_bytes": mem,
    }
    return stats


def _check_inputs(depth: xr.DataArray, eta0: Any, *, coast, boundary, duration_s, record_every_s, polar_cutoff_deg,
                  cfl, stop_depth_m, gravity) -> tuple[GridInfo, dict]:
    """Validate the solver's inputs; return the grid and the parsed open boundaries."""
    _check_scalars(cfl=cfl, stop_depth_m=stop_depth_m, gravity=gravity)
    if coast not in ("reflect", "absorb"):
        raise InputError(f"coast={coast!r}: expected 'reflect' or 'absorb'")
    if not (isinstance(duration_s, (int, float)) and math.isfinite(duration_s) and duration_s > 0):
        raise InputError(f"duration_s={duration_s!r}: expected a positive number of seconds")
    if record_every_s is not None and not (math.isfinite(record_every_s) and record_every_s > 0):
        raise InputError(f"record_every_s={record_every_s!r}: expected a positive number of seconds or None")
    if polar_cutoff_deg is not None and not (0.0 < polar_cutoff_deg <= 90.0):
        raise InputError(f"polar_cutoff_deg={polar_cutoff_deg!r}: expected a latitude in (0, 90] or None")
    bnd = _parse_boundary(boundary)
    info = _check_depth(depth)
    if not isinstance(eta0, xr.DataArray):
        raise InputError(f"eta0 must be an xarray.DataArray on the depth grid, got {type(eta0).__name__}")
    if eta0.dims != depth.dims or eta0.shape != depth.shape:
        raise InputError(
            f"eta0 has dims {eta0.dims} shape {eta0.shape}; expected the depth grid's {depth.dims} {depth.shape}"
        )
    for dim in depth.dims:
        a, b = np.asarray(depth[dim].values, float), np.asarray(eta0[dim].values, float)
        step = abs(a[1] - a[0])
        if np.max(np.abs(a - b)) > 1e-6 * step:
            raise InputError(f"eta0 coordinate '{dim}' does not match the depth grid (max offset {np.max(np.abs(a - b))})")
    return info, bnd


def _memory_needed(ny: int, nx: int, duration_s: float, record_every_s: float | None,
                   max_memory_bytes: float | None) -> int:
    """Working-array bytes of a run (snapshots included); refuses above ``max_memory_bytes``."""
    n_snap_bytes = 0
    if record_every_s is not None:
        n_snap_bytes = 4 * ny * nx * (int(duration_s // record_every_s) + 1)
    mem = _BYTES_PER_CELL * ny * nx + n_snap_bytes
    if max_memory_bytes is not None and mem > max_memory_bytes:
        raise ResourceLimitError(
            f"wave solver on a {ny} x {nx} grid needs about {mem / 2**30:.2f} GiB "
            f"(max_memory_bytes={max_memory_bytes / 2**30:.2f} GiB); coarsen the grid or record fewer snapshots"
        )
    return mem


def _arrival_threshold(eta: np.ndarray, arrival_threshold_m: float | None) -> float:
    """Elevation [m] whose first exceedance is the arrival time (default 1e-3 of the initial maximum)."""
    amax = float(np.max(np.abs(eta))) if eta.size else 0.0
    if arrival_threshold_m is None:
        thr = 1e-3 * amax if amax > 0 else math.inf
    else:
        if not (math.isfinite(arrival_threshold_m) and arrival_threshold_m > 0):
            raise InputError(f"arrival_threshold_m={arrival_threshold_m!r}: expected a positive elevation [m]")
        thr = float(arrival_threshold_m)
    return thr


def _time_loop(eta, qx, qy, faces, wet_u8, bx, byn, bys, thr, max_eta, max_time, arrival, sq_int, *, n_steps, dt,
               periodic, threads, record_every_s, progress, step_hook=None) -> dict:
    """Step the fields in place on ``threads`` numba threads; returns outflow, wall time, snapshots."""
    ny, nx = eta.shape
    outflow = 0.0
    snaps: list[np.ndarray] = []
    snap_t: list[float] = []
    next_rec = 0.0
    if record_every_s is not None:
        snaps.append(eta.astype(np.float32))
        snap_t.append(0.0)
        next_rec = record_every_s

    prog_cb, bar = _progress(progress, n_steps)
    every = max(1, n_steps // 100)
    warn_cache_fallback()

    old_threads = numba.get_num_threads()
    use_threads = old_threads if threads is None else int(threads)
    if use_threads < 1:
        raise InputError(f"threads={threads!r}: expected a positive integer")
    use_threads = min(use_threads, numba.config.NUMBA_NUM_THREADS)
    numba.set_num_threads(use_threads)
    if use_threads == 1 or ny * nx < _SERIAL_BELOW_CELLS:
        f_q, f_eta = _k.update_q_serial, _k.update_eta_serial
    else:
        f_q, f_eta = _k.update_q, _k.update_eta
    ax, ay = faces.ax, faces.ay
    rx, ry = faces.rx, faces.ry
    t_start = time.perf_counter()
    done = 0
    try:
        # one compiled call per step: a signal is recorded and answered after the current step
        # (io.interrupts), never raised inside the compiled code
        with interruptible() as stopped:
            for n in range(n_steps):
                t_new = (n + 1) * dt
                f_q(eta, qx, ax, qy, ay, periodic)
                outflow += _k.radiate(eta, qx, qy, periodic, *rx, *ry)
                f_eta(eta, qx, qy, wet_u8, bx, byn, bys, t_new, dt, thr, max_eta, max_time, arrival, sq_int)
                if step_hook is not None:
                    step_hook(eta, t_new)
                done = n + 1
                if record_every_s is not None and t_new >= next_rec - 1e-9 * dt:
                    snaps.append(eta.astype(np.float32))
                    snap_t.append(t_new)
                    next_rec += record_every_s
                if prog_cb is not None and ((n + 1) % every == 0 or n + 1 == n_steps):
                    prog_cb(n + 1, n_steps)
                if stopped():
                    break
        if done < n_steps and stop_requested():  # a worker thread: no signal of its own
            raise KernelStopped("wave solver stopped: the process is being interrupted")
    finally:
        elapsed = time.perf_counter() - t_start
        numba.set_num_threads(old_threads)
        if bar is not None:
            bar.close()
    return {"outflow": outflow, "elapsed": elapsed, "threads": use_threads, "snaps": snaps, "snap_t": snap_t}


def _wave_result(depth: xr.DataArray, wet: np.ndarray, eta: np.ndarray, max_eta: np.ndarray, max_time: np.ndarray,
                 arrival: np.ndarray, snaps: list, snap_t: list, thr: float, stats: dict,
                 sq_int: np.ndarray) -> WaveResult:
    """The solver's fields as grids like the depth (NaN on dry cells), with the run statistics."""
    stop_depth_m, coast = stats["stop_depth_m"], stats["coast"]
    common = {"stop_depth_m": float(stop_depth_m), "coast": coast, "model": "linear long-wave (C grid, forward-backward)"}
    max_amp = _as_grid(
        depth,
        np.where(wet, max_eta, np.nan),
        "max_amplitude",
        {"units": "m", "long_name": "maximum crest elevation (linear long-wave solver)", **common},
    )
    max_t = _as_grid(
        depth, np.where(wet, max_time, np.nan), "max_time_s",
        {"units": "s", "long_name": "time of maximum crest elevation", **common},
    )
    arr = _as_grid(
        depth, arrival, "arrival_time_s",
        {"units": "s", "long_name": f"first time |eta| exceeds {thr:.3g} m", "threshold_m": thr, **common},
    )
    eta_da = _as_grid(depth, eta.copy(), "eta", {"units": "m", "long_name": "surface elevation at end", **common})
    sq_da = _as_grid(depth, np.where(wet, sq_int, np.nan), "eta_sq_integral",
                     {"units": "m2 s", "long_name": "time integral of the squared surface elevation", **common})
    snap_da = None
    if snaps:
        yd, xd = depth.dims
        snap_da = xr.DataArray(
            np.stack(snaps),
            dims=("time", yd, xd),
            coords={"time": np.asarray(snap_t), yd: depth[yd].values, xd: depth[xd].values},
            name="eta",
            attrs={"units": "m", "long_name": "surface elevation snapshots", "cautions": caution_text()},
        )
        snap_da["time"].attrs["units"] = "s"
        if "spatial_ref" in depth.coords:
            snap_da = snap_da.assign_coords(spatial_ref=depth.coords["spatial_ref"])
    return WaveResult(max_amp, max_t, arr, eta_da, snap_da, stats, sq_da)


def _progress(progress: Any, n_steps: int) -> tuple[Callable[[int, int], None] | None, Any]:
    if progress is None or progress is False:
        return None, None
    if progress is True or isinstance(progress, str):  # a bar on a terminal, a few plain lines in a log
        bar = progress_bar(n_steps, "wave solver" if progress is True else progress, unit="step")
        state = {"done": 0}

        def cb(step: int, total: int) -> None:
            bar.update(step - state["done"])
            state["done"] = step

        return cb, bar
    if callable(progress):
        return progress, None
    raise InputError(f"progress={progress!r}: expected None, True/False, a label or a callable f(step, n_steps)")
