"""Deterministic energy per coastline segment from ray tubes.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Each ray of an ordered fan from a launch point stands for the tube between its neighbours: it
left the source over ``dtheta`` radians of azimuth, and dynamic ray tracing gives the tube's
width where it ends, ``W = |q| dtheta`` with ``q`` the paraxial spreading per radian of launch
angle (point-source initial conditions ``q = 0, p = 1 / c``; Cerveny 2001, *Seismic Ray
Theory*, ch. 4). Where the tube meets the coast at incidence ``theta`` it covers a length
``W / cos(theta)`` of coastline, so its energy is spread over that footprint, centred on the
ray's end point, as a Gaussian of the same peak (``std = footprint / sqrt(2 pi)``). Summing the
footprints over all rays gives the energy crossing the stop isobath per metre of coast without
counting hits: the result changes smoothly with the fan and needs far fewer rays.

Caustics (``q -> 0``) are regularised by a footprint no narrower than ``min_width_factor`` local
wavelengths ``c_end T`` (a wave cannot concentrate energy on a strip narrower than about a
wavelength). A segment that no tube footprint covers is a ray shadow: it gets the estimate the
same rays give with footprints of the first-Fresnel-zone width ``sqrt(lambda L) / 2`` (the scale
over which diffraction fills a shadow) and is flagged ``shadow``.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr
from scipy import sparse
import shapely
from pyproj import Geod
from scipy.spatial import cKDTree

from ..grid import GridInfo
from ..ocean.smooth import _to_xyz as to_xyz

__all__ = ["TubeDeposit", "tube_deposit", "tube_steps", "nearest_segment", "TUBE_MIN_WIDTH"]

#: Smallest tube footprint along the coast, in local wavelengths ``c_end T`` (caustic regularisation).
TUBE_MIN_WIDTH: float = 1.0

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
    """

    matrix: sparse.csr_matrix
    energy_J: np.ndarray
    n_rays: np.ndarray
    shadow: np.ndarray
    shadow_energy_J: np.ndarray
    assigned: np.ndarray


def _samples(segments: pd.DataFrame, spacing_m: float, info: GridInfo) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Points along every segment (metric 2-D or 3-D), their segment index and length share [m].

    Segments whose ``reachable`` column is False (water the wave cannot reach: no first arrival
    from the eikonal solver) get no samples, so no tube deposits energy on them.
    """
    pts, sid, ds = [np.zeros((0, 3 if info.geographic else 2))], [np.zeros(0, np.int64)], [np.zeros(0)]
    reach = segments["reachable"].to_numpy(bool) if "reachable" in segments else np.ones(len(segments), bool)
    for k, (g, length) in enumerate(zip(segments["geometry"], segments["length_m"].to_numpy(float))):
        if not reach[k]:
            continue
        n = max(4, int(math.ceil(length / spacing_m)))
        f = (np.arange(n) + 0.5) / n
        xy = np.array([g.interpolate(t, normalized=True).coords[0] for t in f])
        pts.append(to_xyz(info, xy[:, 0], xy[:, 1]))
        sid.append(np.full(n, k))
        ds.append(np.full(n, length / n))
    return np.concatenate(pts), np.concatenate(sid), np.concatenate(ds)


def _pairs(tree: cKDTree, xyz: np.ndarray, radius: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """All (ray, sample) pairs closer than each ray's ``radius``, as two flat index arrays."""
    if xyz.shape[0] == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    lists = tree.query_ball_point(xyz, radius)
    lens = np.fromiter((len(x) for x in lists), dtype=np.int64, count=len(lists))
    flat = np.fromiter(itertools.chain.from_iterable(lists), dtype=np.int64, count=int(lens.sum()))
    return np.repeat(np.arange(len(lists), dtype=np.int64), lens), flat


@dataclass
class _Samples:
    """Points along the segments, ``spacing`` apart, and clusters of them for wide footprints.

    Level ``l`` groups the samples into cubes of side ``spacing * 4**l`` (3-D on the sphere):
    each cluster is its length-weighted centroid, its length and its make-up by segment (the
    sparse matrix ``comp``, cluster x segment, in metres). A footprint of std ``sigma`` is
    summed on the level whose cubes are at most ``sigma / 2`` wide, so the work per ray stays
    bounded however wide the tube has spread.
    """

    spacing: float
    levels: list[tuple[cKDTree, np.ndarray, np.ndarray, sparse.csr_matrix]]
    sid: np.ndarray

    @classmethod
    def build(cls, segments: pd.DataFrame, spacing: float, info: GridInfo) -> _Samples:
        pts, sid, ds = _samples(segments, spacing, info)
        nseg = len(segments)
        fine = sparse.csr_matrix((ds, (np.arange(sid.size), sid)), shape=(sid.size, nseg))
        levels = [(cKDTree(pts), pts, ds, fine)]
        side = spacing
        span = float(np.max(np.ptp(pts, axis=0))) if pts.shape[0] else 0.0
        while levels[-1][1].shape[0] > 1:
            side *= 4.0
            if side > span:  # last level: one cluster
                cl = np.zeros(sid.size, dtype=np.int64)
            else:
                key = np.floor((pts - pts.min(axis=0)) / side).astype(np.int64)
                m = int(key.max()) + 1
                flat = key[:, 0] * m * m + key[:, 1] * m + (key[:, 2] if key.shape[1] == 3 else 0)
                _, cl = np.unique(flat, return_inverse=True)
                cl = np.asarray(cl).ravel()
            n = int(cl.max()) + 1
            w = np.bincount(cl, weights=ds, minlength=n)
            cen = np.column_stack([np.bincount(cl, weights=ds * pts[:, j], minlength=n) for j in range(pts.shape[1])])
            cen /= w[:, None]
            comp = sparse.csr_matrix((ds, (cl, sid)), shape=(n, nseg))
            levels.append((cKDTree(cen), cen, w, comp))
        return cls(float(spacing), levels, sid)

    def level_of(self, sigma: np.ndarray) -> np.ndarray:
        """Level index for footprints of std ``sigma`` (cubes at most ``sigma / 2`` wide)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            lv = np.floor(np.log(np.maximum(sigma, 1e-9) / (2.0 * self.spacing)) / math.log(4.0))
        return np.clip(np.nan_to_num(lv, nan=0.0), 0, len(self.levels) - 1).astype(np.int64)


def _gauss_rows(smp: _Samples, xyz: np.ndarray, off: np.ndarray, sigma: np.ndarray,
                nseg: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per ray, the normalised Gaussian weights of the segments within 4 sigma (COO triplets).

    Distances along the coast are taken as ``sqrt(r^2 - off^2)``, ``off`` being the ray end's
    distance to the nearest coast sample (a coastline inshore of the stop isobath); wide
    footprints are summed on clusters of samples (:class:`_Samples`).
    """
    nray = xyz.shape[0]
    acc = sparse.csr_matrix((nray, nseg))
    lv = smp.level_of(sigma)
    for level in np.unique(lv):
        rsel = np.flatnonzero(lv == level)
        tree, pts, w, comp = smp.levels[int(level)]
        ray, k = _pairs(tree, xyz[rsel], np.sqrt(off[rsel] ** 2 + (4.0 * sigma[rsel]) ** 2))
        if ray.size == 0:
            continue
        ray = rsel[ray]
        r2 = np.maximum(np.sum((pts[k] - xyz[ray]) ** 2, axis=1) - off[ray] ** 2, 0.0)
        g = np.exp(-0.5 * r2 / sigma[ray] ** 2)  # comp rows carry the metres of each segment
        gm = sparse.csr_matrix((g, (ray, k)), shape=(nray, pts.shape[0]))
        acc = acc + gm @ comp
    acc = acc.tocoo()
    tot = np.bincount(acc.row, weights=acc.data, minlength=nray)
    keep = (acc.data > 0) & (tot[acc.row] > 0)
    r, c = acc.row[keep].astype(np.int64), acc.col[keep].astype(np.int64)
    return r, c, acc.data[keep] / tot[r]


def nearest_segment(segments: pd.DataFrame, info: GridInfo, x: np.ndarray, y: np.ndarray,
            max_distance_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Nearest segment of points: index (-1 beyond ``max_distance_m``) and distance [m].

    On lon/lat grids the nearest segment is found in a frame with longitude scaled by the cosine
    of the median segment latitude, and the distance is then measured geodesically.
    """
    geoms = np.asarray(list(segments["geometry"]), dtype=object)
    if x.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    if info.geographic:
        # nearest in a locally isotropic frame (longitude scaled by cos of the mid latitude)
        lat0 = math.radians(float(np.median(segments["y_mid"])))
        kx = math.cos(lat0)
        geoms_s = shapely.transform(geoms, lambda c: np.column_stack([c[:, 0] * kx, c[:, 1]]))
        pts = shapely.points(np.column_stack([x * kx, y]))
    else:
        geoms_s = geoms
        pts = shapely.points(np.column_stack([x, y]))
    tree = shapely.STRtree(geoms_s)
    (ip, ig), _d = tree.query_nearest(pts, return_distance=True, all_matches=False)
    idx = np.full(x.size, -1, dtype=np.int64)
    idx[ip] = ig
    # true distance to the chosen segment [m]
    near = shapely.shortest_line(pts[ip], geoms_s[ig])
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

    Returns
    -------
    TubeDeposit
    """
    info = GridInfo.from_dataarray(depth)
    nseg = len(segments)
    nray = int(end.sizes["ray"])
    hit = np.flatnonzero(np.asarray(end["reason"].values) == _REASON_COAST)
    spacing = 0.5 * min(info.spacing_m())
    smp = _Samples.build(segments, spacing, info)
    tree, sid = smp.levels[0][0], smp.sid
    xyz = to_xyz(info, np.asarray(end["x"].values, float)[hit], np.asarray(end["y"].values, float)[hit])
    dist0, i0 = tree.query(xyz) if hit.size else (np.zeros(0), np.zeros(0, np.int64))
    seg_idx, _ = nearest_segment(segments, info, np.asarray(end["x"].values, float)[hit],
                                 np.asarray(end["y"].values, float)[hit], max_distance_m)
    near = seg_idx >= 0
    hit, xyz, i0, off = hit[near], xyz[near], i0[near], dist0[near]
    w = np.asarray(end["weight"].values, float)[hit]
    q = np.abs(np.asarray(end["q"].values, float)[hit])
    az = np.asarray(end["azimuth_deg"].values, float)[hit]
    c_end = np.asarray(end["c_end"].values, float)[hit]
    landward = (segments["normal_azimuth_deg"].to_numpy(float)[sid[i0]] + 180.0) % 360.0
    inc = np.abs((az - landward + 180.0) % 360.0 - 180.0)
    cos_inc = np.cos(np.radians(np.minimum(inc, max_incidence_deg)))
    foot = q * np.asarray(steps, float)[hit] / cos_inc
    lam = c_end * period_s
    sigma = np.maximum(foot, min_width_factor * lam) / math.sqrt(2.0 * math.pi)
    r, c, v = _gauss_rows(smp, xyz, off, sigma, nseg)
    mat = sparse.csr_matrix((w[r] * v, (hit[r], c)), shape=(nray, nseg))
    energy = np.asarray(mat.sum(axis=0)).ravel()
    n_rays = np.bincount(c, minlength=nseg)
    # coverage by the unregularised box footprints
    covered = np.zeros(nseg, dtype=bool)
    half = np.maximum(0.5 * foot, 0.5 * spacing)
    lv = smp.level_of(half / 2.0)
    for level in np.unique(lv):
        sel = np.flatnonzero(lv == level)
        tree_l, _, _, comp = smp.levels[int(level)]
        _, k = _pairs(tree_l, xyz[sel], np.sqrt(off[sel] ** 2 + half[sel] ** 2) * (1 + 1e-9))
        covered[np.unique(comp[np.unique(k)].indices)] = True
    shadow = ~covered
    shadow_e = np.zeros(nseg)
    if shadow.any() and hit.size:
        path = np.asarray(end["path_length_m"].values, float)[hit]
        sig_f = np.maximum(0.5 * np.sqrt(lam * np.maximum(path, 0.0)), sigma)
        r2_, c2_, v2_ = _gauss_rows(smp, xyz, off, sig_f, nseg)
        est = np.bincount(c2_, weights=w[r2_] * v2_, minlength=nseg)
        shadow_e = np.where(shadow, est, 0.0)
    assigned = np.zeros(nray, dtype=bool)
    assigned[np.unique(hit[r])] = True
    return TubeDeposit(matrix=mat, energy_J=energy, n_rays=n_rays, shadow=shadow,
                       shadow_energy_J=shadow_e, assigned=assigned)


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
