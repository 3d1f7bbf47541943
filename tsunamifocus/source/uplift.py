"""Sea-floor uplift on a grid from ruptures and point sources (Okada 1985), Kajiura filter."""

from __future__ import annotations

import math
import warnings
from typing import Any

import numpy as np
import xarray as xr
from pyproj import CRS, Geod, Transformer
from pyproj.crs import ProjectedCRS
from pyproj.crs.coordinate_operation import AzimuthalEquidistantConversion

from ..cautions import caution_summary
from ..errors import SourceError, SourceWarning
from ..grid import GridInfo, make_grid
from ..ocean.smooth import sea_mask
from .energy import _sig_window
from .faults import FaultSegment, PointSource, Rupture
from .okada import _okada85

__all__ = ['uplift_on_grid', 'kajiura_filter']


# --------------------------------------------------------------------------- grid helpers



def _to_grid_xy(crs_from: CRS, gi: GridInfo, xs: np.ndarray, ys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    if crs_from == gi.crs:
        return np.asarray(xs, float), np.asarray(ys, float)
    t = Transformer.from_crs(crs_from, gi.crs, always_xy=True)
    gx, gy = t.transform(np.asarray(xs, float), np.asarray(ys, float))
    return np.asarray(gx, float), np.asarray(gy, float)


def _local_crs(gi: GridInfo, lon0: float, lat0: float) -> ProjectedCRS:
    """Azimuthal equidistant projection centred at (lon0, lat0) on the grid's own datum."""
    return ProjectedCRS(
        conversion=AzimuthalEquidistantConversion(latitude_natural_origin=lat0, longitude_natural_origin=lon0),
        geodetic_crs=gi.crs.geodetic_crs,
    )


def _metric_spacing(gi: GridInfo, lat: float) -> tuple[float, float]:
    if not gi.geographic:
        return gi.dx, gi.dy
    k = math.pi / 180.0 * gi.radius_m
    return gi.dx * k * math.cos(math.radians(lat)), gi.dy * k


def _check_inside(gi: GridInfo, gx: np.ndarray, gy: np.ndarray, what: str) -> None:
    inside = gi.contains(gx, gy)
    if not np.all(inside):
        raise SourceError(
            f"{what}: point(s) {[(round(float(a), 4), round(float(b), 4)) for a, b in zip(gx[~inside], gy[~inside])]} "
            f"lie outside the grid (bounds {tuple(round(v, 4) for v in gi.bounds)})"
        )


def _nearest_values(gi: GridInfo, arr: np.ndarray, gx: np.ndarray, gy: np.ndarray) -> np.ndarray:
    fi, fj = gi.index_of(gx, gy)
    i = np.clip(np.rint(fi).astype(int), 0, gi.nx - 1)
    if gi.periodic_x:
        i = np.mod(np.rint(fi).astype(int), gi.nx)
    j = np.clip(np.rint(fj).astype(int), 0, gi.ny - 1)
    return arr[j, i]


def _segment_geometry(seg: FaultSegment, gi: GridInfo) -> dict[str, Any]:
    """End points in grid CRS and, for geographic grids, the local metric frame of a segment."""
    (x1, y1), (x2, y2) = seg.trace
    gx, gy = _to_grid_xy(seg._crs, gi, np.array([x1, x2]), np.array([y1, y2]))
    if gi.geographic:
        gx = gi.wrap_lon(gx)
        # midpoint along the geodesic
        g = Geod(ellps="WGS84")
        lonm, latm = g.npts(gx[0], gy[0], gx[1], gy[1], 1)[0]
        local = _local_crs(gi, lonm, latm)
        tr = Transformer.from_crs(gi.crs, local, always_xy=True)
        ex, ny_ = tr.transform(gx, gy)
        return {"gx": gx, "gy": gy, "mid": (lonm, latm), "transformer": tr, "e": np.asarray(ex), "n": np.asarray(ny_)}
    return {"gx": gx, "gy": gy, "mid": (0.5 * (gx[0] + gx[1]), 0.5 * (gy[0] + gy[1])), "transformer": None,
            "e": gx, "n": gy}


def _okada_segment(
    seg: FaultSegment, slip: float, e1: float, n1: float, e2: float, n2: float, E: np.ndarray, N: np.ndarray,
    poisson: float, horizontal: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(uE, uN, uZ) [m] of one segment at metric points (E, N), trace (e1,n1)->(e2,n2) [m].

    With ``horizontal=False`` only uZ is computed (uE, uN are zeros).
    """
    L = math.hypot(e2 - e1, n2 - n1)
    phi = math.atan2(e2 - e1, n2 - n1)  # strike, clockwise from north
    sphi, cphi = math.sin(phi), math.cos(phi)
    dip = float(seg.dip_deg)
    W = float(seg.width_km) * 1e3
    cd, sd = math.cos(math.radians(dip)), math.sin(math.radians(dip))
    d_bot = float(seg.top_depth_km) * 1e3 + W * sd
    re, rn = E - e1, N - n1
    xo = re * sphi + rn * cphi
    yo = -re * cphi + rn * sphi + W * cd
    rake = math.radians(seg.rake_deg)
    u1, u2 = slip * math.cos(rake), slip * math.sin(rake)
    ux, uy, uz = _okada85(xo, yo, d_bot, dip, L, W, u1, u2, 0.0, poisson=poisson, horizontal=horizontal)
    uE = ux * sphi - uy * cphi
    uN = ux * cphi + uy * sphi
    return uE, uN, uz


def _window_radius_m(seg: FaultSegment) -> float:
    """Radius around a segment mid point beyond which its uplift is neglected [m].

    ``L/2 + W + 10 x`` lower-edge depth. Okada's surface field falls off like ``R^-2`` far from
    the source; at this radius it is below ~1 % of the peak for interface thrusts of Mw 7-9
    (0.5 % for Mw 9, dip 12 degrees; measured), and ``uplift_on_grid`` tapers it to zero over
    the outer quarter of the radius.
    """
    return (0.5 * seg.length_km + float(seg.width_km) + 10.0 * seg.bottom_depth_km) * 1e3


def _window_slices(gi: GridInfo, cx: float, cy: float, radius_m: float) -> tuple[slice, np.ndarray]:
    """Row slice and column index array of the grid window within radius_m of (cx, cy)."""
    if gi.geographic:
        k = math.pi / 180.0 * gi.radius_m
        dlat = radius_m / k
        lat_lo, lat_hi = cy - dlat, cy + dlat
        far = max(abs(lat_lo), abs(lat_hi))
        dlon = 180.0 if far >= 89.9 else min(radius_m / (k * math.cos(math.radians(far))), 180.0)
        dl = ((gi.x - cx + 180.0) % 360.0) - 180.0
        cols = np.nonzero(np.abs(dl) <= dlon + gi.dx)[0]
        cols = cols[np.argsort(dl[cols], kind="stable")]
        ylo, yhi = lat_lo, lat_hi
    else:
        cols = np.nonzero(np.abs(gi.x - cx) <= radius_m + gi.dx)[0]
        ylo, yhi = cy - radius_m, cy + radius_m
    j0 = int(np.clip(np.floor((ylo - gi.y0) / gi.dy), 0, gi.ny - 1))
    j1 = int(np.clip(np.ceil((yhi - gi.y0) / gi.dy) + 1, 1, gi.ny))
    return slice(j0, j1), cols


def _as_rupture(source: Any) -> Rupture | PointSource:
    if isinstance(source, FaultSegment):
        return Rupture([source], name=source.name or "rupture")
    if isinstance(source, (Rupture, PointSource)):
        return source
    raise SourceError(f"source must be a FaultSegment, Rupture or PointSource, got {type(source).__name__}")


# --------------------------------------------------------------------------- uplift


def uplift_on_grid(
    source: Rupture | FaultSegment | PointSource,
    depth: xr.DataArray,
    *,
    kajiura: bool = False,
    horizontal: bool = False,
    window_km: float | None = None,
    chunk: int = 400_000,
) -> xr.DataArray:
    """Initial sea-surface displacement ``eta`` of a source on the bathymetry grid.

    Each segment is evaluated with :func:`~tsunamifocus.okada.okada85` in a local metric
    frame: for lon/lat grids an azimuthal equidistant projection (pyproj, on the grid's datum)
    centred on the segment's trace mid point; for projected grids directly in the grid CRS
    (trace end points converted with ``pyproj.Transformer(always_xy=True)``). The sea surface
    is taken equal to the vertical sea-floor displacement (long-wave, instantaneous rupture)
    unless ``kajiura`` is set.

    Parameters
    ----------
    source : Rupture, FaultSegment or PointSource
        The source.
    depth : xarray.DataArray
        Depth grid [m], positive down, tsunamifocus grid convention.
    kajiura : bool
        Smooth the sea-floor uplift by the Kajiura (1963) filter ``1 / cosh(k h)`` with ``h``
        the mean depth of the source area (see :func:`kajiura_filter`).
    horizontal : bool
        Add the Tanioka & Satake (1996) contribution of horizontal displacement on sloping
        bathymetry, ``u_E dh/dE + u_N dh/dN`` (``h`` depth positive down) — implemented.
    window_km : float, optional
        Radius around each segment's trace mid point beyond which its deformation is neglected
        [km]; default ``L/2 + W + 10 x lower-edge depth``. The field is tapered to zero
        (``cos^2``) over the outer quarter of the radius.
    chunk : int
        Points per vectorised Okada evaluation (memory bound).

    Returns
    -------
    xarray.DataArray
        ``eta`` [m, positive up] on the grid of ``depth`` (also over land, where it is the
        ground displacement); attrs record the options.

    Raises
    ------
    SourceError
        Source outside the grid, or a fault trace lying on land over its whole length.
    """
    src = _as_rupture(source)
    gi = GridInfo.from_dataarray(depth)
    dep = np.asarray(depth.values, dtype=float)
    eta = np.zeros((gi.ny, gi.nx))
    if isinstance(src, PointSource):
        _point_uplift(src, gi, dep, eta)
        attrs_src = {"source_kind": "point", "source_name": src.name}
    else:
        ue_all = np.zeros_like(eta) if horizontal else None
        un_all = np.zeros_like(eta) if horizontal else None
        geos = []  # each segment's frame, also for the mean strike
        notes = []  # suspicious geometry, said once here and kept on the result
        for iseg, (seg, slip) in enumerate(zip(src.segments, src.slips_m)):
            what = f"rupture {src.name!r} segment {iseg} ({seg.name!r})"
            geo = _segment_geometry(seg, gi)
            geos.append(geo)
            _check_inside(gi, geo["gx"], geo["gy"], what)
            _check_trace_at_sea(seg, geo, gi, dep, what)
            note = _check_dip_side(seg, geo, gi, dep, what)
            if note:
                notes.append(note)
            radius = _window_radius_m(seg) if window_km is None else float(window_km) * 1e3
            rows, cols = _window_slices(gi, geo["mid"][0], geo["mid"][1], radius)
            if cols.size == 0 or rows.stop <= rows.start:
                continue
            X, Y = np.meshgrid(gi.x[cols], gi.y[rows])
            uz, uE, uN = _segment_window(seg, slip, geo, X, Y, radius, src.poisson, horizontal, chunk)
            sub = np.ix_(np.arange(rows.start, rows.stop), cols)
            eta[sub] += uz.reshape(X.shape)
            if horizontal:
                ue_all[sub] += uE.reshape(X.shape)  # type: ignore[index,union-attr]
                un_all[sub] += uN.reshape(X.shape)  # type: ignore[index,union-attr]
        if horizontal:
            eta += _tanioka_satake(gi, dep, ue_all, un_all)  # type: ignore[arg-type]
        attrs_src = {
            "strike_deg": _mean_strike(src, gi, geos),
            "source_kind": "rupture",
            "source_name": src.name,
            "Mw": round(src.mw, 3),
            "M0_Nm": src.moment_nm,
        }
        if notes:
            attrs_src["source_notes"] = " | ".join(notes)
    if kajiura:
        eta = kajiura_filter(eta, dep, gi)
    out = make_grid(eta, gi.x, gi.y, gi.crs, name="eta",
                    attrs={"units": "m", "long_name": "initial sea-surface displacement (positive up)",
                           "kajiura_filter": int(bool(kajiura)), "tanioka_satake": int(bool(horizontal)),
                           "cautions": caution_summary(), **attrs_src},
                    lon_periodic=gi.periodic_x if gi.geographic else None)
    return out

def _check_trace_at_sea(seg: FaultSegment, geo: dict, gi: GridInfo, dep: np.ndarray, what: str) -> None:
    """Refuse a fault whose whole trace lies on land or no data (41 points along it, nearest cell)."""
    t = np.linspace(0.0, 1.0, 41)
    if gi.geographic:
        pts = Geod(ellps="WGS84").npts(geo["gx"][0], geo["gy"][0], geo["gx"][1], geo["gy"][1], 39)
        sx = np.r_[geo["gx"][0], [p[0] for p in pts], geo["gx"][1]]
        sy = np.r_[geo["gy"][0], [p[1] for p in pts], geo["gy"][1]]
    else:
        sx = geo["gx"][0] + t * (geo["gx"][1] - geo["gx"][0])
        sy = geo["gy"][0] + t * (geo["gy"][1] - geo["gy"][0])
    dv = _nearest_values(gi, dep, sx, sy)
    if not np.any(sea_mask(dv)):
        raise SourceError(
            f"{what}: the whole fault trace {seg.trace} lies on land or no-data cells of the depth grid"
        )


#: A thrust whose dip side lies deeper than the other side of its trace by more than this [m] on
#: average is reported: a subduction interface dips under the over-riding plate, whose sea floor
#: (fore-arc, shelf, land) is shallower than the incoming plate's (common practice, no source).
DIP_SIDE_MARGIN_M = 500.0


def _check_dip_side(seg: FaultSegment, geo: dict, gi: GridInfo, dep: np.ndarray, what: str) -> str | None:
    """Warn when a shallow-dipping thrust dips toward the deeper side of its trace (and return the message).

    The trace's point order sets the dip direction (to the right of point 1 -> point 2); the
    reverse order is an easy slip that mirrors the uplift. Depths are compared over the fault's
    surface projection and over its mirror image across the trace (land counted as 0 m).
    """
    if not (45.0 <= float(seg.rake_deg) % 360.0 <= 135.0) or float(seg.dip_deg) > 60.0:
        return None
    e1, e2 = (float(v) for v in geo["e"])
    n1, n2 = (float(v) for v in geo["n"])
    L = math.hypot(e2 - e1, n2 - n1)
    if L <= 0:
        return None
    ue, un = (e2 - e1) / L, (n2 - n1) / L  # along strike
    re, rn = un, -ue  # to the right of the strike: the dip side
    wh = max(float(seg.width_km) * 1e3 * math.cos(math.radians(float(seg.dip_deg))), 20e3)
    t = np.array([0.1, 0.3, 0.5, 0.7, 0.9])
    d = wh * np.array([0.25, 0.5, 0.75, 1.0])
    T, D = np.meshgrid(t, d)
    side = []
    for sign in (+1.0, -1.0):
        E = e1 + T.ravel() * (e2 - e1) + sign * D.ravel() * re
        N = n1 + T.ravel() * (n2 - n1) + sign * D.ravel() * rn
        tr = geo["transformer"]  # None on a projected grid: the frame is the grid's
        gx, gy = (np.asarray(v, float) for v in (tr.transform(E, N, direction="INVERSE") if tr is not None else (E, N)))
        if tr is not None:
            gx = gi.wrap_lon(gx)
        ok = gi.contains(gx, gy)
        v = _nearest_values(gi, dep, gx[ok], gy[ok]) if ok.any() else np.zeros(0)
        v = v[np.isfinite(v)]
        side.append(float(np.mean(np.maximum(v, 0.0))) if v.size else float("nan"))
    dip_side, other = side
    if not (np.isfinite(dip_side) and np.isfinite(other) and dip_side > other + DIP_SIDE_MARGIN_M):
        return None
    msg = (f"{what}: the thrust dips toward deeper water (mean depth {dip_side:.0f} m over its down-dip "
           f"side, {other:.0f} m across the trace): a subduction interface dips under the over-riding "
           f"plate, toward the coast. The fault dips to the right of its trace {seg.trace[0]} -> "
           f"{seg.trace[1]}; give the two points in the other order if that is not intended")
    warnings.warn(msg, SourceWarning, stacklevel=3)
    return msg


def _segment_window(seg: FaultSegment, slip: float, geo: dict, X: np.ndarray, Y: np.ndarray, radius: float,
                    poisson: float, horizontal: bool, chunk: int) -> tuple[np.ndarray, Any, Any]:
    """Okada displacements of one segment on the window nodes (X, Y), tapered to zero at ``radius``."""
    if geo["transformer"] is not None:
        E, N = geo["transformer"].transform(X.ravel(), Y.ravel())
        E, N = np.asarray(E), np.asarray(N)
    else:
        E, N = X.ravel(), Y.ravel()
    # evaluate inside the circle of the window radius, with a cos^2 taper over its
    # outer quarter so the neglected far field leaves no step in eta
    if geo["transformer"] is not None:
        r = np.hypot(E, N)  # local frame centred on the trace mid point
    else:
        r = np.hypot(E - geo["mid"][0], N - geo["mid"][1])
    inside = np.nonzero(r < radius)[0]
    taper = np.clip((radius - r[inside]) / (0.25 * radius), 0.0, 1.0)
    taper = np.sin(0.5 * np.pi * taper) ** 2
    uz = np.zeros(E.size)
    uE = np.zeros(E.size) if horizontal else None
    uN = np.zeros(E.size) if horizontal else None
    e1, e2 = float(geo["e"][0]), float(geo["e"][1])
    n1, n2 = float(geo["n"][0]), float(geo["n"][1])
    for a in range(0, inside.size, chunk):
        idx = inside[a : a + chunk]
        tp = taper[a : a + chunk]
        ue_, un_, uz_ = _okada_segment(seg, slip, e1, n1, e2, n2, E[idx], N[idx], poisson,
                                       horizontal)
        uz[idx] = uz_ * tp
        if horizontal:
            uE[idx] = ue_ * tp  # type: ignore[index]
            uN[idx] = un_ * tp  # type: ignore[index]
    return uz, uE, uN


def _mean_strike(src: Rupture, gi: GridInfo, geos: list[dict[str, Any]] | None = None) -> float:
    """Moment-weighted circular mean strike of the segments in the grid frame [degrees].

    ``geos``: the segments' :func:`_segment_geometry` when already built (one per segment, in order).
    """
    vec = 0j
    for i, (seg, slip) in enumerate(zip(src.segments, src.slips_m)):
        geo = geos[i] if geos is not None else _segment_geometry(seg, gi)
        a = math.atan2(geo["e"][1] - geo["e"][0], geo["n"][1] - geo["n"][0])
        vec += seg.moment_nm(slip) * np.exp(1j * a)
    return float(math.degrees(np.angle(vec)) % 360.0)


def _point_uplift(src: PointSource, gi: GridInfo, dep: np.ndarray, eta: np.ndarray) -> None:
    crs = CRS.from_user_input(src.crs)
    gx, gy = _to_grid_xy(crs, gi, np.array([src.x]), np.array([src.y]))
    if gi.geographic:
        gx = gi.wrap_lon(gx)
    _check_inside(gi, gx, gy, f"point source {src.name!r}")
    if not np.any(sea_mask(_nearest_values(gi, dep, gx, gy))):
        raise SourceError(f"point source {src.name!r}: centre ({src.x}, {src.y}) lies on land or no-data")
    R = src.radius_km * 1e3
    rows, cols = _window_slices(gi, float(gx[0]), float(gy[0]), 1.05 * R)
    X, Y = np.meshgrid(gi.x[cols], gi.y[rows])
    if gi.geographic:
        tr = Transformer.from_crs(gi.crs, _local_crs(gi, float(gx[0]), float(gy[0])), always_xy=True)
        E, N = tr.transform(X, Y)
        r = np.hypot(E, N)
    else:
        r = np.hypot(X - gx[0], Y - gy[0])
    h = np.where(r < R, src.amplitude_m * np.cos(0.5 * np.pi * np.minimum(r / R, 1.0)) ** 2, 0.0)
    eta[np.ix_(np.arange(rows.start, rows.stop), cols)] += h


def _tanioka_satake(gi: GridInfo, dep: np.ndarray, uE: np.ndarray, uN: np.ndarray) -> np.ndarray:
    """Tanioka & Satake (1996): vertical sea-floor motion from horizontal motion on a slope."""
    h = np.where(np.isfinite(dep), np.maximum(dep, 0.0), 0.0)
    dy_m = _metric_spacing(gi, 0.0)[1]
    if gi.geographic:
        k = math.pi / 180.0 * gi.radius_m
        dx_m = gi.dx * k * np.cos(np.radians(gi.y))[:, None]
    else:
        dx_m = gi.dx
    dhdy = np.gradient(h, axis=0) / dy_m
    dhdx = np.gradient(h, axis=1) / dx_m
    return uE * dhdx + uN * dhdy


def kajiura_filter(eta: np.ndarray, depth: np.ndarray, gi: GridInfo, *, threshold: float = 0.1) -> np.ndarray:
    """Sea-surface response to a sea-floor uplift by the Kajiura (1963) filter ``1/cosh(k h)``.

    The uplift is Fourier transformed on a local metric grid (the window holding
    ``|eta| >= threshold max|eta|`` plus a margin, zero padded to twice its size; for lon/lat
    grids the spacing is taken at the window's mid latitude), multiplied by
    ``1 / cosh(|k| h)`` with ``h`` the **mean depth of the source area** (sea cells with
    ``|eta| >= threshold max|eta|``) and transformed back. Only the uplift of sea cells enters
    and only sea cells are changed (land keeps its ground displacement).

    Parameters
    ----------
    eta : numpy.ndarray
        Sea-floor uplift [m] on the grid.
    depth : numpy.ndarray
        Depth [m] on the same grid.
    gi : GridInfo
        Grid geometry.
    threshold : float
        Fraction of the peak defining the source area.

    Returns
    -------
    numpy.ndarray
        Filtered sea-surface displacement [m] on sea cells; land cells and cells outside the
        window unchanged.
    """
    amax = float(np.max(np.abs(eta)))
    if amax == 0:
        return eta.copy()
    sig = np.abs(eta) >= threshold * amax
    sea = sea_mask(depth)
    h = float(np.mean(depth[sig & sea])) if np.any(sig & sea) else 0.0
    if h <= 0:
        return eta.copy()
    lat_mid = float(np.mean(gi.y[np.nonzero(sig)[0]])) if gi.geographic else 0.0
    dx_m, dy_m = _metric_spacing(gi, lat_mid)
    # the filter's kernel decays like exp(-pi r / (2 h)): a margin of 6 h keeps > 99.99 %
    margin_cells = int(math.ceil(6.0 * h / min(dx_m, dy_m)))
    rows, cols = _sig_window(gi, np.abs(eta) >= 1e-3 * amax, margin=0.25, extra=margin_cells)
    sub = np.ix_(rows, cols)
    sea_b = sea[sub]
    block = np.where(sea_b, eta[sub], 0.0)  # the water column is over the sea only
    ny, nx = block.shape
    py, px = 2 * ny, 2 * nx
    F = np.fft.rfft2(block, s=(py, px))
    kx = 2 * np.pi * np.fft.rfftfreq(px, d=dx_m)
    ky = 2 * np.pi * np.fft.fftfreq(py, d=dy_m)
    k = np.hypot(ky[:, None], kx[None, :])
    filt = 1.0 / np.cosh(np.minimum(k * h, 700.0))
    out_block = np.fft.irfft2(F * filt, s=(py, px))[:ny, :nx]
    out = eta.copy()
    out[sub] = np.where(sea_b, out_block, eta[sub])
    return out
