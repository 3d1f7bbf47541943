"""Long-wave ray engine: kinematic + dynamic rays with streaming energy / first-arrival maps.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Rays of the linear long-wave equation travel with ``c = sqrt(g h)``. :func:`trace_rays` integrates,
for every ray, position, direction, travel time, arc length and the paraxial pair ``(q, p)`` of
dynamic ray tracing (Cerveny 2001) with a fixed-step classical RK4 over the C2 cubic B-spline of
``c`` (:class:`tsunamifocus.speed.SpeedField`). The geometry follows the grid CRS: a plane in metres
for projected grids, the sphere of radius ``EARTH_RADIUS_M`` for lon/lat grids (periodic in
longitude for global grids). While tracing, each chunk of rays streams into its own energy and
first-arrival grids, reduced in a fixed order at the end (deterministic, O(grid + rays) memory).
Equations, accuracy and limits: docs/rays.md.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numba
import numpy as np
import xarray as xr

from ..cautions import caution_summary
from ..constants import EARTH_RADIUS_M, GRAVITY, MIN_DEPTH_M, STOP_DEPTH_M
from ..errors import RayError
from ..io.interrupts import PIECE_SECONDS, KernelStopped, interruptible, stop_requested
from . import _raykernel as _k
from ..io._numbacache import warn_cache_fallback
from .speedfield import SpeedField

__all__ = ['RayResult', 'trace_rays', 'default_step_s', 'REASON_CODES', 'REASON_MEANINGS']

#: Termination reasons (int8 codes of ``RayResult.end.reason``).
REASON_CODES = {"coast": 1, "left_grid": 2, "land_or_nodata": 3, "time_limit": 4, "polar_limit": 5}
REASON_MEANINGS = {v: k for k, v in REASON_CODES.items()}

#: Largest allowed step, in cell crossings at the fastest speed of the grid.
_MAX_CELLS_PER_STEP = 20.0
#: Largest allowed number of steps per ray.
_MAX_STEPS = 50_000_000


@dataclass
class RayResult:
    """Result of :func:`trace_rays`.

    Attributes
    ----------
    end : xarray.Dataset
        One row per ray (dim ``ray``): end state ``x, y`` (grid CRS), ``time_s``, ``azimuth_deg``
        (clockwise from north), launch values, ``q`` [m per rad for a point source], ``p``,
        ``caustics``, ``reason`` (int8, CF flag attributes), ``weight`` [J], ``depth_end`` [m],
        ``c_end`` [m s-1], ``path_length_m``, ``first_caustic_m`` (NaN if none), ``n_steps``.
    energy : xarray.DataArray or None
        Sum over rays of weight x path length in cell / cell area [J m-1] on the depth grid.
    first_arrival_s : xarray.DataArray or None
        Earliest ray time at each cell's node [s], NaN where no ray passed.
    paths : xarray.Dataset or None
        Decimated paths of a subset of rays (dims ``path``, ``point``), else None.
    stats : dict
        ``n_rays, n_steps, reasons (dict name -> count), elapsed_s, threads, step_s, geometry``.
    """

    end: xr.Dataset
    energy: xr.DataArray | None
    first_arrival_s: xr.DataArray | None
    paths: xr.Dataset | None
    stats: dict = field(default_factory=dict)


def default_step_s(field: SpeedField, cells_per_step: float = 1.0) -> float:
    """Return the default RK4 time step [s].

    It is the time to cross ``cells_per_step`` of the smallest cell side (on the sphere:
    ``R dlat`` and ``R dlon cos 60deg``, whichever is smaller) at the grid's largest speed.
    """
    i = field.info
    if i.geographic:
        k = math.pi / 180.0 * field.radius_m
        side = min(i.dy * k, i.dx * k * 0.5)
    else:
        side = min(i.dx, i.dy)
    return cells_per_step * side / field.c_max


def _as1d(name: str, a, n: int | None = None) -> np.ndarray:
    arr = np.atleast_1d(np.asarray(a, dtype=float)).ravel()
    if n is not None and arr.size == 1 and n > 1:
        arr = np.full(n, arr[0])
    if n is not None and arr.size != n:
        raise RayError(f"{name} has {arr.size} values, expected {n} (one per ray) or a scalar")
    return arr


def trace_rays(
    depth: xr.DataArray | SpeedField,
    x0,
    y0,
    azimuth_deg,
    *,
    weights=None,
    stop_depth_m: float = STOP_DEPTH_M,
    max_time_s: float = 86400.0,
    step_s: float | None = None,
    cells_per_step: float = 1.0,
    max_step_s: float | None = None,
    gravity: float = GRAVITY,
    min_depth: float = MIN_DEPTH_M,
    threads: int | None = None,
    accumulate: bool = True,
    keep_paths: int = 0,
    path_points: int = 500,
    q0=None,
    p0=None,
    polar_lat_deg: float = 89.0,
    radius_m: float = EARTH_RADIUS_M,
) -> RayResult:
    """Trace long-wave rays over a depth grid.

    Parameters
    ----------
    depth : xarray.DataArray or SpeedField
        Depth [m] positive down (grid convention), or a prebuilt :class:`SpeedField` (reuse it
        when tracing many fans over one grid).
    x0, y0 : array_like
        Launch points in the grid CRS (metres, or lon/lat degrees on geographic grids).
    azimuth_deg : array_like
        Launch direction [degrees clockwise from north].
    weights : array_like, optional
        Energy per ray [J]; default 1 J each. Must be finite and >= 0.
    stop_depth_m : float
        Coastal stop isobath [m] (> 0): a ray ends when the bilinear depth falls to it (reason 1);
        the end state is interpolated onto the isobath within the last step.
    max_time_s : float
        Time limit [s] (reason 4).
    step_s : float, optional
        RK4 time step [s]. Default :func:`default_step_s` (``cells_per_step`` smallest-cell
        crossings at the fastest speed of the grid).
    cells_per_step : float
        Default time step in cell crossings at the fastest speed (1 for raw grids; media smoothed
        over many cells can take more, see :data:`tsunamifocus.focusing.analysis.SMOOTHED_CELLS_PER_STEP`).
    max_step_s : float, optional
        Local time steps (not with ``step_s``): each ray steps ``cells_per_step`` crossings of
        the cell where it is (on the sphere ``R dlat`` and ``R dlon max(cos lat, 0.5)``, whichever
        is smaller) at its local speed, at most ``max_step_s`` [s] and never less than the default
        step. Meant for media smoothed over a known length (the wavelength-smoothed oceans of
        :func:`tsunamifocus.focusing.analysis.analyse_focusing`, where ``max_step_s`` is the time
        a wave takes to cross one smoothing width). Default: every ray takes the default step.
    gravity, min_depth : float
        Long-wave speed ``c = sqrt(g max(h, min_depth))`` [m s-2], [m].
    threads : int, optional
        Threads (= accumulation chunks) to use; default all numba threads. Results are
        bit-identical run to run for a given value.
    accumulate : bool
        Build the energy and first-arrival grids.
    keep_paths : int
        Keep decimated paths of this many rays (evenly spaced in launch order).
    path_points : int
        Maximum points per kept path.
    q0, p0 : array_like, optional
        Initial paraxial values. Default a point source: ``q0 = 0``, ``p0 = 1 / c(launch)``
        (then ``q`` is the spreading per radian of launch angle [m rad-1]). For a plane/line
        source use ``q0 = 1, p0 = 0``.
    polar_lat_deg : float
        On lon/lat grids rays stop beyond this latitude (reason 5, ``polar_limit``).
    radius_m : float
        Sphere radius [m] for lon/lat grids.

    Returns
    -------
    RayResult

    Raises
    ------
    RayError
        Launch on land/no data or outside the grid, launch depth not deeper than ``stop_depth_m``,
        no rays, NaN/negative weights, bad step or time limit.
    """
    t_start = time.perf_counter()
    if isinstance(depth, SpeedField):
        fld = depth
    else:
        fld = SpeedField(depth, gravity=gravity, min_depth=min_depth, radius_m=radius_m)
    info = fld.info
    x0, y0, az, w = _check_rays(x0, y0, azimuth_deg, weights)
    n = x0.size
    dt, threads, hcap = _check_settings(fld, stop_depth_m, max_time_s, step_s, keep_paths, path_points, threads,
                                        cells_per_step, max_step_s)
    _check_launch(fld, x0, y0, stop_depth_m, polar_lat_deg)
    q0a, p0a = _initial_paraxial(fld, x0, y0, q0, p0)
    run = _run_kernel(fld, x0, y0, az, w, q0a, p0a, dt=dt, max_time_s=max_time_s, stop_depth_m=stop_depth_m,
                      polar_lat_deg=polar_lat_deg, threads=threads, accumulate=accumulate,
                      keep_paths=int(keep_paths), path_points=int(path_points),
                      local=(float(cells_per_step), hcap, float(fld.gravity)))
    out, outi = run["out"], run["outi"]
    end = _end_dataset(info, out, outi, x0, y0, az, w, dt, stop_depth_m, q0a)
    energy = first = None
    if accumulate:
        energy, first = _grids(fld, run["E"], run["T"])
    paths = _paths_dataset(info, run) if run["npaths"] else None
    reason = outi[:, 0].astype(np.int8)
    stats = {
        "n_rays": int(n), "n_steps": int(outi[:, 2].sum()),
        "reasons": {name: int(np.sum(reason == code)) for name, code in REASON_CODES.items()},
        "elapsed_s": time.perf_counter() - t_start, "threads": threads, "step_s": dt,
        "max_step_s": hcap if hcap > 0 else None,
        "geometry": "sphere" if info.geographic else "plane",
    }
    return RayResult(end=end, energy=energy, first_arrival_s=first, paths=paths, stats=stats)


def _initial_paraxial(fld: SpeedField, x0, y0, q0, p0) -> tuple[np.ndarray, np.ndarray]:
    """Initial q and p: given, or a point source (q = 0, p = 1 / c at the launch point)."""
    n = x0.size
    c0 = np.maximum(fld.evaluate(x0, y0)["c"], fld.c_min)
    q0a = np.zeros(n) if q0 is None else _as1d("q0", q0, n)
    p0a = 1.0 / c0 if p0 is None else _as1d("p0", p0, n)
    if not (np.all(np.isfinite(q0a)) and np.all(np.isfinite(p0a))):
        raise RayError("q0/p0 must be finite")
    return q0a, p0a


def _check_rays(x0, y0, azimuth_deg, weights) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Launch points, azimuths and weights as finite 1-D arrays of one length."""
    x0 = _as1d("x0", x0)
    n = x0.size
    if n == 0:
        raise RayError("no rays to trace: x0 is empty (expected at least one launch point)")
    y0 = _as1d("y0", y0, n)
    az = _as1d("azimuth_deg", azimuth_deg, n)
    for name, a in (("x0", x0), ("y0", y0), ("azimuth_deg", az)):
        bad = np.flatnonzero(~np.isfinite(a))
        if bad.size:
            raise RayError(f"{name}[{bad[0]}] = {a[bad[0]]} is not finite")
    if weights is None:
        w = np.ones(n)
    else:
        w = _as1d("weights", weights, n)
        bad = np.flatnonzero(~np.isfinite(w) | (w < 0))
        if bad.size:
            raise RayError(f"weights[{bad[0]}] = {w[bad[0]]} J: expected a finite energy >= 0")
    return x0, y0, az, w


def _check_settings(fld: SpeedField, stop_depth_m, max_time_s, step_s, keep_paths, path_points,
                    threads, cells_per_step: float = 1.0, max_step_s=None) -> tuple[float, int, float]:
    """Validate the scalar settings; return the time step [s], the thread count and the local-step
    cap [s] (0: every ray takes the time step)."""
    if not (np.isfinite(stop_depth_m) and stop_depth_m > 0):
        raise RayError(f"stop_depth_m = {stop_depth_m!r} m: expected a positive depth (e.g. 10-50 m)")
    if not (np.isfinite(max_time_s) and max_time_s > 0):
        raise RayError(f"max_time_s = {max_time_s!r}: expected a positive time in seconds")
    if step_s is None:
        if not (np.isfinite(cells_per_step) and 0 < cells_per_step <= _MAX_CELLS_PER_STEP):
            raise RayError(f"cells_per_step = {cells_per_step!r}: expected 0 < cells_per_step <= {_MAX_CELLS_PER_STEP:g}")
        dt = default_step_s(fld, cells_per_step)
    elif max_step_s is not None:
        raise RayError(f"step_s = {step_s!r} and max_step_s = {max_step_s!r}: give a fixed step or local steps, "
                       "not both")
    else:
        dt = float(step_s)
        max_dt = _MAX_CELLS_PER_STEP * default_step_s(fld)
        if not (np.isfinite(dt) and 0 < dt <= max_dt):
            raise RayError(
                f"step_s = {step_s!r} s: expected 0 < step_s <= {max_dt:.4g} s "
                f"({_MAX_CELLS_PER_STEP:g} cell crossings at the fastest speed)"
            )
    if max_time_s / dt > _MAX_STEPS:
        raise RayError(
            f"step_s = {dt:.4g} s with max_time_s = {max_time_s:g} s needs more than "
            f"{_MAX_STEPS} steps per ray"
        )
    keep_paths = int(keep_paths)
    if keep_paths < 0:
        raise RayError(f"keep_paths = {keep_paths}: expected a count >= 0")
    if int(path_points) < 2:
        raise RayError(f"path_points = {path_points}: expected at least 2")
    nthreads_avail = numba.config.NUMBA_NUM_THREADS
    if threads is None:
        threads = numba.get_num_threads()
    threads = int(threads)
    if not 1 <= threads <= nthreads_avail:
        raise RayError(f"threads = {threads}: expected 1..{nthreads_avail}")
    hcap = 0.0
    if max_step_s is not None:
        hcap = float(max_step_s)
        if not (np.isfinite(hcap) and hcap > 0):
            raise RayError(f"max_step_s = {max_step_s!r}: expected a positive time in seconds")
        hcap = max(hcap, dt)
    return dt, threads, hcap


def _check_launch(fld: SpeedField, x0: np.ndarray, y0: np.ndarray, stop_depth_m: float, polar_lat_deg: float) -> None:
    """Refuse launches outside the grid, beyond the polar limit, on no data, on land or inside the stop isobath."""
    info = fld.info
    inside = np.asarray(info.contains(x0, y0))
    bad = np.flatnonzero(~inside)
    if bad.size:
        raise RayError(
            f"ray {bad[0]} launched outside the grid at ({x0[bad[0]]:.6g}, {y0[bad[0]]:.6g}) "
            f"(grid bounds {tuple(round(b, 6) for b in info.bounds)})"
        )
    if info.geographic:
        lat_ok = np.abs(y0) < polar_lat_deg
        bad = np.flatnonzero(~lat_ok)
        if bad.size:
            raise RayError(
                f"ray {bad[0]} launched at latitude {y0[bad[0]]} beyond polar_lat_deg={polar_lat_deg}"
            )
    d0 = fld.bilinear_depth(x0, y0)
    bad = np.flatnonzero(~np.isfinite(d0))
    if bad.size:
        raise RayError(
            f"ray {bad[0]} launched on a no-data (NaN) cell at ({x0[bad[0]]:.6g}, {y0[bad[0]]:.6g})"
        )
    bad = np.flatnonzero(d0 <= 0)
    if bad.size:
        raise RayError(
            f"ray {bad[0]} launched on land at ({x0[bad[0]]:.6g}, {y0[bad[0]]:.6g}): depth {d0[bad[0]]:.4g} m"
        )
    bad = np.flatnonzero(d0 <= stop_depth_m)
    if bad.size:
        raise RayError(
            f"stop_depth_m = {stop_depth_m} m is not shallower than the launch depth {d0[bad[0]]:.4g} m "
            f"of ray {bad[0]}: expected launch depth > stop_depth_m"
        )


def _run_kernel(fld: SpeedField, x0, y0, az, w, q0a, p0a, *, dt, max_time_s, stop_depth_m, polar_lat_deg, threads,
                accumulate, keep_paths, path_points, local=(1.0, 0.0, GRAVITY)) -> dict:
    """Lay out the kernel's buffers, run it on ``threads`` threads and reduce the accumulation grids."""
    warn_cache_fallback()
    info = fld.info
    n = x0.size
    X0, Y0, DX, DY = fld.kernel_geometry
    if info.geographic:
        xw = np.asarray(info.wrap_lon(x0), float)
        Xs = np.radians(xw)
        Ys = np.radians(y0)
    else:
        Xs, Ys = x0.copy(), y0.copy()
    azr = np.radians(az)
    se0, sn0 = np.sin(azr), np.cos(azr)

    ny, nx = info.ny, info.nx
    nchunk = threads
    shape = (nchunk, ny, nx, 2) if accumulate else (nchunk, 1, 1, 2)
    Ach = np.empty(shape)
    Ach[..., 0] = 0.0
    Ach[..., 1] = np.inf
    npaths = min(keep_paths, n)
    path_slot = np.full(n, -1, dtype=np.int64)
    if npaths:
        ids = np.unique(np.linspace(0, n - 1, npaths).round().astype(np.int64))
        npaths = ids.size
        path_slot[ids] = np.arange(npaths)
    else:
        ids = np.zeros(0, dtype=np.int64)
    paths_buf = np.zeros((max(npaths, 1), path_points, 3))
    path_n = np.zeros(max(npaths, 1), dtype=np.int64)
    max_steps = int(math.ceil(max_time_s / dt))
    path_every = max(1, int(math.ceil(max_steps / (path_points - 2)))) if npaths else 1

    polar = math.radians(polar_lat_deg)
    old = numba.get_num_threads()
    numba.set_num_threads(threads)
    try:
        # in pieces of whole rounds over the threads: ray k stays on accumulation chunk k % nchunk in
        # the same order, so the result is bit-identical to one call, and a signal is answered
        # between pieces (io.interrupts)
        piece = _piece_rays(n, nchunk, max_steps)
        outs, outis = [], []
        with interruptible() as stopped:
            for a in range(0, n, piece):
                b = min(n, a + piece)
                o, oi = _k.trace_all(
                    Xs[a:b], Ys[a:b], se0[a:b], sn0[a:b], q0a[a:b], p0a[a:b], w[a:b], fld.coef, fld.depth_padded,
                    X0, Y0, DX, DY, nx, ny, bool(info.periodic_x), bool(info.geographic), float(fld.radius_m),
                    float(fld.c_min), float(dt), float(max_time_s), float(stop_depth_m), polar, Ach,
                    bool(accumulate), path_slot[a:b], paths_buf, path_n, path_every,
                    float(local[0]), float(local[1]), float(local[2]),
                )
                outs.append(o)
                outis.append(oi)
                if stopped():
                    break
        if stop_requested() and sum(len(o) for o in outs) < n:  # a worker thread: no signal of its own
            raise KernelStopped("ray tracing stopped: the process is being interrupted")
        out, outi = (np.concatenate(outs), np.concatenate(outis)) if len(outs) > 1 else (outs[0], outis[0])
        if accumulate:
            area = np.ascontiguousarray(np.broadcast_to(info.cell_area_m2()[:, 0], (ny,)), dtype=float)
            E, T = _k.reduce_chunks(Ach, area)
        del Ach
    finally:
        numba.set_num_threads(old)
    run = {"out": out, "outi": outi, "npaths": npaths, "ids": ids, "paths_buf": paths_buf, "path_n": path_n,
           "path_every": path_every}
    if accumulate:
        run.update(E=E, T=T)
    return run


#: Ray-steps one thread does in about :data:`~tsunamifocus.io.interrupts.PIECE_SECONDS` (measured
#: 3 to 6 million ray-steps per second per thread, docs/rays.md; the lower figure).
_STEPS_PER_PIECE_PER_THREAD = int(3e6 * PIECE_SECONDS)


def _piece_rays(n: int, nchunk: int, max_steps: int) -> int:
    """Rays per kernel call: whole rounds over the ``nchunk`` threads, at most a quarter second or so."""
    rounds = max(1, _STEPS_PER_PIECE_PER_THREAD // max(1, max_steps))
    return max(nchunk, min(n, rounds * nchunk) // nchunk * nchunk) if n > nchunk else max(n, 1)


def _units(info) -> tuple[str, str]:
    return ("degrees_east", "degrees_north") if info.geographic else ("m", "m")


def _end_dataset(info, out, outi, x0, y0, az, w, dt, stop_depth_m, q0a) -> xr.Dataset:
    """The per-ray end states as a Dataset (grid CRS coordinates, SI units)."""
    n = x0.size
    if info.geographic:
        xe = np.asarray(info.wrap_lon(np.degrees(out[:, _k.O_X])), float)
        ye = np.degrees(out[:, _k.O_Y])
    else:
        xe, ye = out[:, _k.O_X], out[:, _k.O_Y]
    aze = np.mod(np.degrees(np.arctan2(out[:, _k.O_SE], out[:, _k.O_SN])), 360.0)
    reason = outi[:, 0].astype(np.int8)
    codes = np.array(sorted(REASON_MEANINGS), dtype=np.int8)
    xu, yu = _units(info)
    ray = np.arange(n)
    return xr.Dataset(
        {
            "x": ("ray", xe, {"units": xu, "long_name": "end x (grid CRS)"}),
            "y": ("ray", ye, {"units": yu, "long_name": "end y (grid CRS)"}),
            "time_s": ("ray", out[:, _k.O_T], {"units": "s"}),
            "azimuth_deg": (
                "ray",
                aze,
                {"units": "degree", "long_name": "end direction, clockwise from north"},
            ),
            "launch_x": ("ray", x0, {"units": xu}),
            "launch_y": ("ray", y0, {"units": yu}),
            "launch_azimuth_deg": ("ray", np.mod(az, 360.0), {"units": "degree"}),
            "q0": ("ray", q0a, {"long_name": "initial paraxial q (0: point source; else line source)"}),
            "q": ("ray", out[:, _k.O_Q], {"long_name": "paraxial spreading q (dq/dt = c^2 p)"}),
            "p": ("ray", out[:, _k.O_P], {"long_name": "paraxial slowness perturbation p"}),
            "caustics": ("ray", outi[:, 1].astype(np.int32), {"long_name": "sign changes of q"}),
            "reason": (
                "ray",
                reason,
                {
                    "flag_values": codes,
                    "flag_meanings": " ".join(REASON_MEANINGS[int(c)] for c in codes),
                },
            ),
            "weight": ("ray", w, {"units": "J"}),
            "depth_end": ("ray", out[:, _k.O_DEPTH], {"units": "m"}),
            "c_end": ("ray", out[:, _k.O_C], {"units": "m s-1"}),
            "path_length_m": ("ray", out[:, _k.O_S], {"units": "m"}),
            "first_caustic_m": ("ray", out[:, _k.O_FC], {"units": "m"}),
            "n_steps": ("ray", outi[:, 2]),
        },
        coords={"ray": ray},
        attrs={"caution": caution_summary(), "step_s": dt, "stop_depth_m": float(stop_depth_m)},
    )


def _grids(fld: SpeedField, E: np.ndarray, T: np.ndarray) -> tuple[xr.DataArray, xr.DataArray]:
    """Energy per unit wavefront width and first-arrival time as grids like the depth."""
    info = fld.info
    yd, xd = info.dims
    coords = {yd: fld.depth[yd].values, xd: fld.depth[xd].values}
    energy = xr.DataArray(
        E,
        dims=(yd, xd),
        coords=coords,
        name="energy",
        attrs={
            "units": "J m-1",
            "long_name": "ray energy density (energy per unit wavefront width)",
            "caution": caution_summary(),
        },
    )
    first = xr.DataArray(
        T,
        dims=(yd, xd),
        coords=coords,
        name="first_arrival_s",
        attrs={"units": "s", "long_name": "first ray arrival time", "caution": caution_summary()},
    )
    if "spatial_ref" in fld.depth.coords:
        sr = fld.depth.coords["spatial_ref"]
        energy = energy.assign_coords(spatial_ref=sr)
        first = first.assign_coords(spatial_ref=sr)
        energy.attrs["grid_mapping"] = first.attrs["grid_mapping"] = "spatial_ref"
    if info.geographic:
        energy.attrs["lon_periodic"] = first.attrs["lon_periodic"] = int(info.periodic_x)
    return energy, first


def _paths_dataset(info, run: dict) -> xr.Dataset:
    """The kept, decimated ray paths (NaN after each path's last point)."""
    npaths, path_n, paths_buf, ids, path_every = (run["npaths"], run["path_n"], run["paths_buf"], run["ids"],
                                                   run["path_every"])
    xu, yu = _units(info)
    npt = int(path_n[:npaths].max())
    buf = paths_buf[:npaths, :npt].copy()
    mask = np.arange(npt)[None, :] >= path_n[:npaths, None]
    buf[mask] = np.nan
    px, py = buf[:, :, 0], buf[:, :, 1]
    if info.geographic:
        px = np.degrees(px)  # unwrapped longitude, continuous along the path
        py = np.degrees(py)
    return xr.Dataset(
        {
            "x": (
                ("path", "point"),
                px,
                {"units": xu, "note": "longitude unwrapped along the path" if info.geographic else ""},
            ),
            "y": (("path", "point"), py, {"units": yu}),
            "time_s": (("path", "point"), buf[:, :, 2], {"units": "s"}),
            "ray": ("path", ids),
            "n_points": ("path", path_n[:npaths].copy()),
        },
        attrs={"decimation_steps": path_every, "caution": caution_summary()},
    )
