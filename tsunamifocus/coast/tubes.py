"""Deterministic energy per coastline segment from ray tubes.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Each ray of an ordered fan from a launch point stands for the tube between its neighbours: it
left the source over ``dtheta`` radians of azimuth, and dynamic ray tracing gives the tube's
width where it ends, ``W = |q| dtheta`` with ``q`` the paraxial spreading per radian of launch
angle (point-source initial conditions ``q = 0, p = 1 / c``; Cerveny 2001, *Seismic Ray
Theory*, ch. 4). Where the tube meets the coast at incidence ``theta`` it covers a length
``W / cos(theta)`` of coastline, so its energy is spread over that footprint, centred on the
ray's end point, as a Gaussian of the same peak (``std = footprint / sqrt(2 pi)``) in arc length
along the coastline line the ray reached (a footprint never jumps across land to an island, the
far side of a strait or a lake; on an island it wraps around the ring, but on either side it
stops at the first segment that turns its back to the ray). Summing the
footprints over all rays gives the energy crossing the stop isobath per metre of coast without
counting hits: the result changes smoothly with the fan and needs far fewer rays.

Caustics (``q -> 0``) are regularised by a footprint no narrower than ``min_width_factor`` local
wavelengths ``c_end T`` (default ``TUBE_MIN_WIDTH`` = 2: a wave converging at the modest angles
of sea-floor lenses cannot concentrate its energy on a strip narrower than a wavelength or two).
A segment that no tube footprint covers is a ray shadow: it gets the estimate the same rays give
with footprints of the first-Fresnel-zone width ``sqrt(lambda L) / 2`` (the scale over which
diffraction fills a shadow) and is flagged ``shadow``. No footprint is wider than that
Fresnel width either (as a Gaussian of std ``sqrt(lambda L) / 2``): on trans-ocean paths across
many lenses the linearised spreading ``|q|`` of some rays grows exponentially, to tubes wider
than the ocean, which would otherwise spread their energy evenly over a whole coastline line,
into straits and bays no ray reaches.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr
from scipy import sparse
import shapely
from pyproj import Geod
from scipy.spatial import cKDTree
from scipy.special import ndtr

from ..errors import InputError
from ..grid import GridInfo
from ..ocean.smooth import _to_xyz as to_xyz

__all__ = ["CoastGeometry", "TubeDeposit", "tube_deposit", "tube_steps", "nearest_segment", "fresnel_sigma",
           "TUBE_MIN_WIDTH", "BACK_FACING_COS"]

#: Smallest tube footprint along the coast, in local wavelengths ``c_end T`` (caustic regularisation).
#: A focus cannot be narrower than the diffraction limit ``lambda / (2 sin alpha)`` of waves
#: converging within +-alpha (the resolution limit of a focusing aperture; Born & Wolf,
#: *Principles of Optics*, cited from memory). Two wavelengths - a Gaussian of half-maximum width
#: 1.9 lambda - is that limit for alpha of about 14 degrees, the turning a sea-floor lens gives
#: a long wave. Chosen among 0.5-3 on the demo's shipped relief and three other realizations of
#: it against the converged wave (amplitude top ten 6-8 of 10 at 1, 8-10 at 2) and checked on
#: three trans-Pacific cases (unchanged within 0.01) and a weak fourth, where no width holds
#: (0.005-0.024 lower; docs/focusing.md).
TUBE_MIN_WIDTH: float = 2.0

#: A coastline segment whose seaward normal makes a cosine below this with the direction a ray
#: comes from turns its back to the ray (more than 120 degrees): the ray's footprint stops there
#: (common practice, no source: the far side of a headland or an island is not in the tube's
#: cross-section; 120 rather than 90 degrees so that the side walls of coves and bays, which
#: the coarse segments turn across the wave, do not cut a footprint short).
BACK_FACING_COS: float = -0.5

#: Termination code of rays that reached the stop isobath.
_REASON_COAST = 1


@dataclass
class TubeDeposit:
    """Energy deposited on segments by the ray tubes of one trace.

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix
        ``(n_rays, n_segments)`` energy [J] each ray gives each segment (rows of coast rays sum
        to the ray's weight; other rows are empty).
    energy_J : numpy.ndarray
        Energy per segment [J] (column sums of ``matrix``).
    n_rays : numpy.ndarray
        Rays whose footprint overlaps each segment.
    shadow : numpy.ndarray
        bool: no unregularised tube footprint covers the segment.
    shadow_energy_J : numpy.ndarray
        Fresnel-width estimate [J] for shadow segments (0 elsewhere; not part of the budget).
    assigned : numpy.ndarray
        bool per ray: its energy went to segments.
    peak_per_m : numpy.ndarray
        Energy per metre of coast [J m-1] at the most exposed point of each segment: the sum of
        the footprints' Gaussian profiles along the segment, at its samples, maximised over them
        (0 where no footprint reaches).
    capped_energy_J : numpy.ndarray
        The part of ``energy_J`` [J] from tubes whose linearised width reached the Fresnel cap
        (rays past their predictability: where such a ray ends is a draw within its Fresnel
        zone, the main source of the scatter between ray seeds on trans-ocean paths).
    """

    matrix: sparse.csr_matrix
    energy_J: np.ndarray
    n_rays: np.ndarray
    shadow: np.ndarray
    shadow_energy_J: np.ndarray
    assigned: np.ndarray
    peak_per_m: np.ndarray
    capped_energy_J: np.ndarray


def _samples(segments: pd.DataFrame, spacing_m: float, info: GridInfo) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Points along every segment (metric 2-D or 3-D), their segment index and length share [m].

    Segments whose ``reachable`` column is False (water the wave cannot reach: no first arrival
    from the eikonal solver) get no samples, so no tube deposits energy on them.
    """
    reach = segments["reachable"].to_numpy(bool) if "reachable" in segments else np.ones(len(segments), bool)
    length = segments["length_m"].to_numpy(float)
    k = np.flatnonzero(reach)
    n = np.maximum(4, np.ceil(length[k] / spacing_m).astype(np.int64))
    sid = np.repeat(k, n)
    first = np.repeat(np.cumsum(n) - n, n)
    f = (np.arange(sid.size) - first + 0.5) / np.repeat(n, n)
    geoms = np.asarray(list(segments["geometry"]), dtype=object)
    xy = shapely.get_coordinates(shapely.line_interpolate_point(geoms[sid], f, normalized=True))
    pts = to_xyz(info, xy[:, 0], xy[:, 1]) if sid.size else np.zeros((0, 3 if info.geographic else 2))
    return pts, sid.astype(np.int64), np.repeat(length[k] / n, n)


@dataclass
class _Arcs:
    """The segments as intervals ``[a, b]`` of arc length along their coastline lines [m].

    Segments come in line order, then along each line (:func:`segment_coastline`): a segment
    continues the previous one's line when it starts where that one ends. A line whose last
    segment ends where its first starts is a ring (an island), where arc length wraps.
    """

    line: np.ndarray
    a: np.ndarray
    b: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    perimeter: np.ndarray
    ring: np.ndarray

    @classmethod
    def build(cls, segments: pd.DataFrame) -> _Arcs:
        geoms = np.asarray(list(segments["geometry"]), dtype=object)
        length = segments["length_m"].to_numpy(float)
        n = len(geoms)
        # first and last vertex of every segment (x, y)
        xy, owner = shapely.get_coordinates(geoms, return_index=True)
        count = np.bincount(owner, minlength=n)
        if np.any(count == 0):
            raise InputError(f"segments table: {int(np.sum(count == 0))} segments have an empty geometry")
        end = np.cumsum(count)
        first = xy[end - count].reshape(n, 2)
        last = xy[end - 1].reshape(n, 2)
        cont = np.all(np.abs(first[1:] - last[:-1]) <= 1e-9 * (1.0 + np.abs(first[1:])), axis=1)
        line = np.concatenate([[0], np.cumsum(~cont)]).astype(np.int64)
        start = np.flatnonzero(np.concatenate([[True], ~cont]))
        stop = np.concatenate([start[1:], [n]])
        cs = np.cumsum(length)
        base = cs[start] - length[start]
        a = cs - length - base[line]
        b = a + length
        perimeter = np.add.reduceat(length, start) if n else np.zeros(0)
        ring = np.all(np.abs(first[start] - last[stop - 1]) <= 1e-9 * (1.0 + np.abs(first[start])), axis=1) & \
            (stop - start >= 3)
        return cls(line, a, b, start, stop, perimeter, ring)


def _along(pts: np.ndarray, sid: np.ndarray, line: np.ndarray, xyz: np.ndarray, i0: np.ndarray,
           ds: np.ndarray) -> np.ndarray:
    """Signed offset [m] along the coast of each ray end from its nearest sample (within a sample)."""
    if i0.size == 0:
        return np.zeros(0)
    n = pts.shape[0]
    prev = np.maximum(i0 - 1, 0)
    nxt = np.minimum(i0 + 1, n - 1)
    same_p = line[sid[prev]] == line[sid[i0]]
    same_n = line[sid[nxt]] == line[sid[i0]]
    p0 = np.where(same_p[:, None], pts[prev], pts[i0])
    p1 = np.where(same_n[:, None], pts[nxt], pts[i0])
    t = p1 - p0
    norm = np.linalg.norm(t, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        off = np.einsum("ij,ij->i", xyz - pts[i0], t) / norm
    return np.clip(np.nan_to_num(off), -ds[i0], ds[i0])


def _ranges(lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Flat (owner, index) pairs of the integer ranges ``[lo_i, hi_i)``."""
    cnt = np.maximum(hi - lo, 0)
    owner = np.repeat(np.arange(lo.size, dtype=np.int64), cnt)
    first = np.repeat(lo, cnt)
    offs = np.arange(int(cnt.sum()), dtype=np.int64) - np.repeat(np.cumsum(cnt) - cnt, cnt)
    return owner, first + offs


def _normal_share(za: np.ndarray, zb: np.ndarray) -> np.ndarray:
    """Standard normal probability of ``[za, zb]``, accurate for narrow intervals and in the tails.

    The difference of normal CDFs is taken on the side of the mean where it does not cancel
    (upper tail through ``ndtr(-z)``); intervals narrower than 1e-3 std use the midpoint rule
    ``(zb - za) phi(z_mid)`` (relative error below 1e-7), so a footprint much wider than the
    coast (a tube spread over an ocean) still spreads its energy instead of rounding to zero.
    """
    upper = za > 0.0
    out = ndtr(np.where(upper, -za, zb)) - ndtr(np.where(upper, -zb, za))
    narrow = np.flatnonzero(zb - za < 1e-3)
    if narrow.size:
        zm = 0.5 * (za[narrow] + zb[narrow])
        out[narrow] = (zb[narrow] - za[narrow]) * np.exp(-0.5 * zm * zm) / math.sqrt(2.0 * math.pi)
    return out


def fresnel_sigma(wavelength_m: np.ndarray | float, path_m: np.ndarray | float) -> np.ndarray:
    """Std [m] of the first-Fresnel-zone footprint, ``sqrt(lambda L) / 2``, of a path ``L`` long.

    The width over which diffraction fills a ray shadow; also the widest footprint a ray tube is
    given (:func:`tube_deposit`).
    """
    return 0.5 * np.sqrt(np.asarray(wavelength_m, float) * np.maximum(np.asarray(path_m, float), 0.0))


def _arc_rows(arcs: _Arcs, line_r: np.ndarray, s0: np.ndarray, width: np.ndarray, reach: np.ndarray,
              nseg: int, box: bool = False, facing: tuple[np.ndarray, np.ndarray] | None = None,
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per ray, the share of its footprint on each segment of its own coastline line (COO triplets).

    The footprint is a Gaussian of std ``width`` (``box``: a box of half-width ``width``) in arc
    length, centred at the ray's arc position ``s0`` on the line it reached; on a ring it wraps. A
    footprint never crosses land to another line (an island, the far side of a strait, a lake).
    With ``facing = (ray_azimuth_deg, normal_azimuth_deg)`` (each ray's direction of travel at
    its end, each segment's seaward normal) it also stops, on either side, at the first segment
    that turns its back to the ray (:data:`BACK_FACING_COS`): a tube's cross-section meets the
    coast in front of it, not the far side of a headland or of an island reached along the
    coastline around its end. Shares on segments outside ``reach`` are dropped and each ray's
    shares renormalised to 1 (``box``: unnormalised coverage flags).
    """
    rows, cols, vals, offs, owns = [], [], [], [], []
    half = width if box else 4.0 * width
    rs = np.arange(line_r.size)
    ring_r = arcs.ring[line_r]
    per_r = arcs.perimeter[line_r]
    whole = ring_r & (half >= 0.5 * per_r)
    if whole.any():  # the footprint covers the whole ring: uniform along it
        rw = rs[whole]
        i0w = arcs.start[line_r[rw]]
        o, k = _ranges(i0w, arcs.stop[line_r[rw]])
        rows.append(rw[o])
        cols.append(k)
        vals.append(np.ones(o.size) if box else (arcs.b - arcs.a)[k] / per_r[rw][o])
        if facing is not None:
            half_per = 0.5 * per_r[rw][o]
            mid = 0.5 * (arcs.a + arcs.b)[k] - s0[rw][o]
            offs.append(np.mod(mid + half_per, 2.0 * half_per) - half_per)
            owns.append((arcs.a[k] <= s0[rw][o]) & (s0[rw][o] <= arcs.b[k]))
    # all lines on one sorted axis, one after the other; each footprint's range of segments is
    # then clipped to its own line's, so it never runs onto another line
    gap = float(np.max(arcs.perimeter, initial=0.0)) + 1.0
    off = np.arange(arcs.start.size, dtype=float) * gap
    seg_line = np.repeat(np.arange(arcs.start.size), arcs.stop - arcs.start)
    ga, gb = arcs.a + off[seg_line], arcs.b + off[seg_line]
    part = rs[~whole]
    for shift in (-1.0, 0.0, 1.0):
        sel = part if shift == 0.0 else part[ring_r[part]]
        if sel.size == 0:
            continue
        c = s0[sel] + shift * per_r[sel] + off[line_r[sel]]
        lo = np.maximum(np.searchsorted(gb, c - half[sel], side="right"), arcs.start[line_r[sel]])
        hi = np.minimum(np.searchsorted(ga, c + half[sel], side="left"), arcs.stop[line_r[sel]])
        o, k = _ranges(lo, hi)
        if o.size == 0:
            continue
        rows.append(sel[o])
        cols.append(k)
        if facing is not None:
            offs.append(0.5 * (ga[k] + gb[k]) - c[o])
            owns.append((ga[k] <= c[o]) & (c[o] <= gb[k]))
        if box:
            vals.append(np.ones(o.size))
        else:
            vals.append(_normal_share((ga[k] - c[o]) / width[sel][o], (gb[k] - c[o]) / width[sel][o]))
    if not rows:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0)
    r, c, v = np.concatenate(rows), np.concatenate(cols), np.concatenate(vals)
    keep = reach[c] & (v > 0)
    if facing is not None:
        keep &= _in_front(r, c, np.concatenate(offs), np.concatenate(owns), int(line_r.size), *facing)
    r, c, v = r[keep], c[keep], v[keep]
    if box:
        return r, c, v
    m = sparse.coo_matrix((v, (r, c)), shape=(int(line_r.size), nseg)).tocsr()
    m.sum_duplicates()
    m = m.tocoo()
    tot = np.bincount(m.row, weights=m.data, minlength=int(line_r.size))
    ok = tot[m.row] > 0
    return m.row[ok].astype(np.int64), m.col[ok].astype(np.int64), m.data[ok] / tot[m.row[ok]]


def _in_front(r: np.ndarray, c: np.ndarray, off: np.ndarray, own: np.ndarray, nray: int,
              ray_az: np.ndarray, normal_az: np.ndarray) -> np.ndarray:
    """Which footprint entries lie before the first back-facing segment on their side of the ray.

    ``off``: signed arc offset of each entry's segment from the ray's end point; ``own``: the
    segment holding the end point (never a block). A segment turns its back to a ray travelling
    toward azimuth ``ray_az`` when the cosine between its seaward normal and the direction the
    ray comes from is below :data:`BACK_FACING_COS`.
    """
    cosf = np.cos(np.radians(normal_az[c] - ray_az[r] - 180.0))
    block = (cosf < BACK_FACING_COS) & ~own
    left = np.full(nray, -np.inf)
    right = np.full(nray, np.inf)
    bl = block & (off < 0.0)
    br = block & (off > 0.0)
    np.maximum.at(left, r[bl], off[bl])
    np.minimum.at(right, r[br], off[br])
    return (off > left[r]) & (off < right[r])


@dataclass
class _SegmentIndex:
    """Segments in a locally isotropic frame with their search tree (see :func:`nearest_segment`)."""

    geoms: np.ndarray
    kx: float
    tree: shapely.STRtree

    @classmethod
    def build(cls, segments: pd.DataFrame, info: GridInfo) -> _SegmentIndex:
        geoms = np.asarray(list(segments["geometry"]), dtype=object)
        kx = 1.0
        if info.geographic:
            # nearest in a locally isotropic frame (longitude scaled by cos of the mid latitude)
            kx = math.cos(math.radians(float(np.median(segments["y_mid"]))))
            geoms = shapely.transform(geoms, lambda c: np.column_stack([c[:, 0] * kx, c[:, 1]]))
        return cls(geoms, kx, shapely.STRtree(geoms))


def nearest_segment(segments: pd.DataFrame, info: GridInfo, x: np.ndarray, y: np.ndarray,
                    max_distance_m: float, index: _SegmentIndex | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Nearest segment of points: index (-1 beyond ``max_distance_m``) and distance [m].

    On lon/lat grids the nearest segment is found in a frame with longitude scaled by the cosine
    of the median segment latitude, and the distance is then measured geodesically. ``index``
    is the segments' search structure when already built (:class:`CoastGeometry`).
    """
    if x.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    ix = index if index is not None else _SegmentIndex.build(segments, info)
    kx = ix.kx
    pts = shapely.points(np.column_stack([x * kx, y]))
    (ip, ig), _d = ix.tree.query_nearest(pts, return_distance=True, all_matches=False)
    idx = np.full(x.size, -1, dtype=np.int64)
    idx[ip] = ig
    # true distance to the chosen segment [m]
    near = shapely.shortest_line(pts[ip], ix.geoms[ig])
    c = shapely.get_coordinates(near).reshape(-1, 2, 2)
    if info.geographic:
        g = Geod(a=info.radius_m, b=info.radius_m)
        _, _, dd = g.inv(c[:, 0, 0] / kx, c[:, 0, 1], c[:, 1, 0] / kx, c[:, 1, 1])
        dist_sel = np.abs(np.asarray(dd, dtype=float))
    else:
        dist_sel = np.hypot(c[:, 0, 0] - c[:, 1, 0], c[:, 0, 1] - c[:, 1, 1])
    dist = np.full(x.size, np.inf)
    dist[ip] = dist_sel
    idx[dist > max_distance_m] = -1
    return idx, dist


@dataclass
class CoastGeometry:
    """What tube deposits need of one segments table on one grid, built once for many traces.

    Attributes
    ----------
    info : GridInfo
        The grid.
    spacing_m : float
        Sample spacing along the segments [m] (half the smallest cell side).
    pts, sid, ds, s_smp : numpy.ndarray
        Samples along the reachable segments (metric 2-D/3-D), their segment, length share [m]
        and arc position along their coastline line [m].
    arcs : _Arcs
        The segments as arc-length intervals of their lines.
    reach : numpy.ndarray
        bool per segment: reachable water.
    tree : scipy.spatial.cKDTree or None
        Search tree of the samples.
    index : _SegmentIndex
        Search structure of the segments (:func:`nearest_segment`).
    """

    info: GridInfo
    spacing_m: float
    pts: np.ndarray
    sid: np.ndarray
    ds: np.ndarray
    s_smp: np.ndarray
    arcs: _Arcs
    reach: np.ndarray
    tree: cKDTree | None
    index: _SegmentIndex

    @classmethod
    def build(cls, segments: pd.DataFrame, depth: xr.DataArray) -> CoastGeometry:
        """Prepare ``segments`` on the grid of ``depth``."""
        info = GridInfo.from_dataarray(depth)
        spacing = 0.5 * min(info.spacing_m())
        pts, sid, ds = _samples(segments, spacing, info)
        nseg = len(segments)
        reach = segments["reachable"].to_numpy(bool) if "reachable" in segments else np.ones(nseg, bool)
        arcs = _Arcs.build(segments)
        first = np.searchsorted(sid, sid, side="left")  # arc position of every sample along its line
        s_smp = arcs.a[sid] + (np.arange(sid.size) - first + 0.5) * ds
        tree = cKDTree(pts) if sid.size else None
        return cls(info, spacing, pts, sid, ds, s_smp, arcs, reach, tree, _SegmentIndex.build(segments, info))


def tube_deposit(
    segments: pd.DataFrame,
    end: xr.Dataset,
    depth: xr.DataArray,
    *,
    steps: np.ndarray,
    period_s: float,
    max_distance_m: float,
    min_width_factor: float = TUBE_MIN_WIDTH,
    max_incidence_deg: float = 80.0,
    coast: CoastGeometry | None = None,
) -> TubeDeposit:
    """Spread each coast ray's energy over its tube footprint on the coastline segments.

    Parameters
    ----------
    segments : pandas.DataFrame
        Coastline segments (``geometry``, ``length_m``, ``normal_azimuth_deg``).
    end : xarray.Dataset
        ``RayResult.end`` of a fan traced with point-source initial conditions.
    depth : xarray.DataArray
        The grid the rays were traced on (geometry only).
    steps : numpy.ndarray
        Ray-parameter step of every ray's tube (:func:`tube_steps`): launch-angle spacing [rad]
        for point-source fans, launch spacing [m] for line sources.
    period_s : float
        Wave period of the band [s] (regularisation wavelength ``c_end T``).
    max_distance_m : float
        Rays ending farther than this from every segment stay unassigned [m].
    min_width_factor : float
        Smallest footprint in local wavelengths (caustic regularisation).
    max_incidence_deg : float
        Incidence cap [deg] (grazing tubes: ray theory fails).
    coast : CoastGeometry, optional
        ``segments`` prepared on this grid once for many traces (default: built here).

    Returns
    -------
    TubeDeposit
    """
    if not (math.isfinite(min_width_factor) and min_width_factor >= 0.0):
        raise InputError(f"min_width_factor must be a finite number of wavelengths >= 0, got {min_width_factor!r}")
    geo = coast if coast is not None else CoastGeometry.build(segments, depth)
    if geo.reach.size != len(segments):
        raise InputError(f"coast geometry prepared for {geo.reach.size} segments, the table has {len(segments)}: "
                         "build it from this segments table (CoastGeometry.build)")
    info, spacing, pts, sid, ds, s_smp, arcs, reach, tree = (geo.info, geo.spacing_m, geo.pts, geo.sid, geo.ds,
                                                             geo.s_smp, geo.arcs, geo.reach, geo.tree)
    nseg = len(segments)
    nray = int(end.sizes["ray"])
    hit = np.flatnonzero(np.asarray(end["reason"].values) == _REASON_COAST)
    xyz = to_xyz(info, np.asarray(end["x"].values, float)[hit], np.asarray(end["y"].values, float)[hit])
    if hit.size and tree is not None:
        # the nearest sample of a reachable segment (samples lie half a cell apart along them)
        d_smp, i0 = tree.query(xyz, workers=-1)
        if info.geographic:
            d_smp = 2.0 * info.radius_m * np.arcsin(np.clip(d_smp / (2.0 * info.radius_m), 0.0, 1.0))
        near = d_smp <= max_distance_m
        # the samples stand for the segment lines to within a sample spacing: near the limit
        # the distance to the segment line itself decides
        edge = np.flatnonzero(np.abs(d_smp - max_distance_m) <= 2.0 * spacing)
        if edge.size:
            seg_idx, _ = nearest_segment(segments, info, np.asarray(end["x"].values, float)[hit[edge]],
                                         np.asarray(end["y"].values, float)[hit[edge]], max_distance_m, geo.index)
            near[edge] = seg_idx >= 0
    else:
        i0, near = np.zeros(0, np.int64), np.zeros(hit.size, bool)
    hit, i0, xyz = hit[near], i0[near], xyz[near]
    w = np.asarray(end["weight"].values, float)[hit]
    q = np.abs(np.asarray(end["q"].values, float)[hit])
    az = np.asarray(end["azimuth_deg"].values, float)[hit]
    c_end = np.asarray(end["c_end"].values, float)[hit]
    normal = segments["normal_azimuth_deg"].to_numpy(float)  # seaward, per segment
    landward = (normal[sid[i0]] + 180.0) % 360.0
    inc = np.abs((az - landward + 180.0) % 360.0 - 180.0)
    cos_inc = np.cos(np.radians(np.minimum(inc, max_incidence_deg)))
    foot = q * np.asarray(steps, float)[hit] / cos_inc
    lam = c_end * period_s
    path = np.asarray(end["path_length_m"].values, float)[hit]
    sig_fres = fresnel_sigma(lam, path)
    # a footprint wider than the first Fresnel zone is not trusted: on long paths across many
    # lenses the linearised spreading grows exponentially (to tubes wider than the ocean) and no
    # longer says where the energy goes; such a tube's energy stays within the Fresnel width
    # (the shadow estimate's) of its end point instead of spreading over the whole coastline line
    capped = foot >= math.sqrt(2.0 * math.pi) * sig_fres
    foot = np.minimum(foot, math.sqrt(2.0 * math.pi) * sig_fres)
    sigma = np.maximum(foot, min_width_factor * lam) / math.sqrt(2.0 * math.pi)
    line_r = arcs.line[sid[i0]]
    s0 = s_smp[i0] + _along(pts, sid, arcs.line, xyz, i0, ds)
    per = arcs.perimeter[line_r]
    s0 = np.where(arcs.ring[line_r], np.mod(s0, np.maximum(per, 1e-9)), np.clip(s0, 0.0, per))
    r, c, v = _arc_rows(arcs, line_r, s0, sigma, reach, nseg, facing=(az, normal))
    mat = sparse.csr_matrix((w[r] * v, (hit[r], c)), shape=(nray, nseg))
    peak = _peak_per_m(geo, r, c, w[r] * v, s0, sigma, line_r, nseg)
    energy = np.asarray(mat.sum(axis=0)).ravel()
    capped_e = np.bincount(c, weights=(w[r] * v) * capped[r], minlength=nseg).astype(float)
    n_rays = np.bincount(c, minlength=nseg)
    # coverage by the unregularised box footprints
    covered = np.zeros(nseg, dtype=bool)
    half = np.maximum(0.5 * foot, 0.5 * spacing)
    _, cb, _ = _arc_rows(arcs, line_r, s0, half, reach, nseg, box=True, facing=(az, normal))
    covered[cb] = True
    shadow = ~covered & reach
    shadow_e = np.zeros(nseg)
    # a footprint stays on its coastline line: only rays on a line with a shadow segment can reach one
    on = np.flatnonzero(np.isin(line_r, arcs.line[shadow])) if shadow.any() else np.zeros(0, np.int64)
    if on.size:
        sig_f = np.maximum(sig_fres[on], sigma[on])
        r2_, c2_, v2_ = _arc_rows(arcs, line_r[on], s0[on], sig_f, reach, nseg, facing=(az[on], normal))
        est = np.bincount(c2_, weights=w[on][r2_] * v2_, minlength=nseg)
        shadow_e = np.where(shadow, est, 0.0)
    assigned = np.zeros(nray, dtype=bool)
    assigned[hit[r]] = True
    return TubeDeposit(matrix=mat, energy_J=energy, n_rays=n_rays, shadow=shadow,
                       shadow_energy_J=shadow_e, assigned=assigned, peak_per_m=peak, capped_energy_J=capped_e)


def _peak_per_m(geo: CoastGeometry, r: np.ndarray, c: np.ndarray, e: np.ndarray, s0: np.ndarray,
                sigma: np.ndarray, line_r: np.ndarray, nseg: int) -> np.ndarray:
    """Energy per metre [J m-1] at each segment's most exposed sample.

    Each footprint entry (ray ``r`` giving energy ``e`` to segment ``c``) is spread over the
    segment's samples in proportion to the ray's Gaussian profile ``exp(-(s - s0)^2 / 2 sigma^2)``
    (arc distance wrapped on rings), normalised so that the segment receives exactly ``e``; the
    entries are summed per sample and the largest sample value of each segment returned. A
    footprint much wider than the segment gives its mean, ``e / length``.
    """
    out = np.zeros(nseg)
    if e.size == 0 or geo.sid.size == 0:
        return out
    sid = geo.sid
    first = np.searchsorted(sid, np.arange(nseg), side="left")
    count = np.bincount(sid, minlength=nseg)
    o, k = _ranges(first[c], first[c] + count[c])
    if o.size == 0:
        return out
    d = geo.s_smp[k] - s0[r[o]]
    lr = line_r[r[o]]
    per = geo.arcs.perimeter[lr]
    ring = geo.arcs.ring[lr]
    d = np.where(ring, np.mod(d + 0.5 * per, np.maximum(per, 1e-9)) - 0.5 * per, d)
    g = np.exp(-0.5 * (d / sigma[r[o]]) ** 2)
    norm = np.bincount(o, weights=g * geo.ds[k], minlength=e.size)
    flat = norm[o] <= 0.0  # beyond the profile's numerical reach: spread evenly over the segment
    length = np.bincount(o, weights=geo.ds[k], minlength=e.size)
    dens = np.where(flat, e[o] / np.maximum(length[o], 1e-300),
                    e[o] * g / np.where(flat, 1.0, norm[o]))
    per_sample = np.bincount(k, weights=dens, minlength=sid.size)
    np.maximum.at(out, sid, per_sample)
    return out


def tube_steps(end: xr.Dataset, info: GridInfo) -> np.ndarray:
    """Ray-parameter step of each ray's tube: launch-angle spacing [rad] or launch spacing [m].

    Rays launched from one point with ``q0 = 0`` (point-source initial conditions) form a fan:
    the step is the median spacing of the sorted launch azimuths at that point (a lone ray:
    ``2 pi / n``). Rays with ``q0 != 0`` start on a line (``q`` is then metres of tube per metre
    of launch line): the step is the distance to the nearest other launch point.
    """
    n = int(end.sizes["ray"])
    steps = np.full(n, 2.0 * math.pi / max(n, 1))
    q0 = np.asarray(end["q0"].values, float) if "q0" in end else np.zeros(n)
    lx = np.asarray(end["launch_x"].values, float)
    ly = np.asarray(end["launch_y"].values, float)
    line = np.flatnonzero(q0 != 0.0)
    if line.size >= 2:
        xyz = to_xyz(info, lx[line], ly[line])
        d, _ = cKDTree(xyz).query(xyz, k=2)
        steps[line] = d[:, 1]
    point = np.flatnonzero(q0 == 0.0)
    if point.size:
        keys = np.round(np.column_stack([lx[point], ly[point]]), 9)
        _, group = np.unique(keys, axis=0, return_inverse=True)
        group = np.asarray(group).ravel()
        az = np.radians(np.asarray(end["launch_azimuth_deg"].values, float)[point])
        for g in np.unique(group):
            members = np.flatnonzero(group == g)
            if members.size >= 3:
                a = np.sort(az[members])
                diffs = np.diff(np.concatenate([a, a[:1] + 2 * math.pi]))
                steps[point[members]] = float(np.median(diffs))
    return steps
