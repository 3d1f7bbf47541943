"""numba kernel of the first-arrival (eikonal) solver (private; see :mod:`tsunamifocus.traveltime`).

Second-order fast marching (Sethian 1999, *Level Set Methods and Fast Marching Methods*, ch. 8)
for ``|grad T| = s`` (``s = 1 / c``, slowness [s m-1]) on a regular grid with a per-row spacing
in x (``hx[j]``: ``R cos(lat_j) dlon`` on the sphere) and one spacing in y.

Conventions inside the kernel
-----------------------------
* Cells are flat indices ``k = j * nx + i``; ``state`` is 0 (far), 1 (trial, in the heap),
  2 (accepted) or 3 (barrier: land, no data, shallower than the stop isobath).
* ``periodic``: column ``nx - 1`` neighbours column 0 (a global longitude grid).
* ``pole_s`` / ``pole_n``: the first / last row lies within a cell of a pole; its neighbour across
  the pole is the cell half a turn away in the same row, at distance ``hpole_s`` / ``hpole_n``
  (first-order across the pole).
* The trial set is an indexed binary min-heap of cell indices keyed by ``T`` (decrease-key through
  ``pos``), so memory stays O(cells).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__: list[str] = []

FAR, TRIAL, KNOWN, BARRIER = 0, 1, 2, 3


@njit(cache=True, inline="always")
def _sift_up(heap, pos, T, h):  # pragma: no cover - compiled
    k = heap[h]
    tk = T[k]
    while h > 0:
        p = (h - 1) >> 1
        kp = heap[p]
        if T[kp] <= tk:
            break
        heap[h] = kp
        pos[kp] = h
        h = p
    heap[h] = k
    pos[k] = h


@njit(cache=True, inline="always")
def _sift_down(heap, pos, T, h, n):  # pragma: no cover - compiled
    k = heap[h]
    tk = T[k]
    while True:
        c = 2 * h + 1
        if c >= n:
            break
        if c + 1 < n and T[heap[c + 1]] < T[heap[c]]:
            c += 1
        kc = heap[c]
        if T[kc] >= tk:
            break
        heap[h] = kc
        pos[kc] = h
        h = c
    heap[h] = k
    pos[k] = h


@njit(cache=True, inline="always")
def _solve(a1, b1, a2, b2, s):  # pragma: no cover - compiled
    """Upwind root of a1 (T - b1)^2 + a2 (T - b2)^2 = s^2 (a = 0: direction unused); inf if none."""
    if a1 == 0.0 and a2 == 0.0:
        return np.inf
    if a2 == 0.0:
        return b1 + s / math.sqrt(a1)
    if a1 == 0.0:
        return b2 + s / math.sqrt(a2)
    # one direction alone when it arrives before the other direction's neighbour is passed
    if b1 <= b2:
        t = b1 + s / math.sqrt(a1)
        if t <= b2:
            return t
    else:
        t = b2 + s / math.sqrt(a2)
        if t <= b1:
            return t
    a = a1 + a2
    b = a1 * b1 + a2 * b2
    c = a1 * b1 * b1 + a2 * b2 * b2 - s * s
    disc = b * b - a * c
    if disc < 0.0:
        return np.inf
    return (b + math.sqrt(disc)) / a


@njit(cache=True)
def _update(k, T, state, slow, hx, hy, nx, ny, periodic, pole_s, pole_n, hpole_s, hpole_n):  # pragma: no cover
    """New tentative time of cell ``k`` from its accepted neighbours (second order where possible)."""
    j = k // nx
    i = k - j * nx
    s = slow[k]
    # ---- x direction
    a1 = 0.0
    b1 = 0.0
    a1f = 0.0
    b1f = 0.0
    h = hx[j]
    best = np.inf
    for d in (-1, 1):
        i1 = i + d
        if periodic:
            i1 %= nx
        elif i1 < 0 or i1 >= nx:
            continue
        k1 = j * nx + i1
        if state[k1] != KNOWN:
            continue
        t1 = T[k1]
        if t1 >= best:
            continue
        best = t1
        a1f = 1.0 / (h * h)
        b1f = t1
        a1 = a1f
        b1 = t1
        i2 = i1 + d
        ok2 = True
        if periodic:
            i2 %= nx
        elif i2 < 0 or i2 >= nx:
            ok2 = False
        if ok2:
            k2 = j * nx + i2
            if state[k2] == KNOWN and T[k2] <= t1:
                a1 = 2.25 / (h * h)
                b1 = (4.0 * t1 - T[k2]) / 3.0
    # ---- y direction
    a2 = 0.0
    b2 = 0.0
    a2f = 0.0
    b2f = 0.0
    best = np.inf
    for d in (-1, 1):
        j1 = j + d
        if j1 < 0 or j1 >= ny:
            # across a pole: the cell half a turn away in the same row
            if (j1 < 0 and pole_s) or (j1 >= ny and pole_n):
                k1 = j * nx + (i + nx // 2) % nx
                if state[k1] == KNOWN and T[k1] < best:
                    hp = hpole_s if j1 < 0 else hpole_n
                    best = T[k1]
                    a2 = a2f = 1.0 / (hp * hp)
                    b2 = b2f = T[k1]
            continue
        k1 = j1 * nx + i
        if state[k1] != KNOWN:
            continue
        t1 = T[k1]
        if t1 >= best:
            continue
        best = t1
        a2f = 1.0 / (hy * hy)
        b2f = t1
        a2 = a2f
        b2 = t1
        j2 = j1 + d
        if 0 <= j2 < ny:
            k2 = j2 * nx + i
            if state[k2] == KNOWN and T[k2] <= t1:
                a2 = 2.25 / (hy * hy)
                b2 = (4.0 * t1 - T[k2]) / 3.0
    t = _solve(a1, b1, a2, b2, s)
    if not (t < np.inf):
        t = _solve(a1f, b1f, a2f, b2f, s)
    # causality: never earlier than an upwind neighbour (guards the second-order stencil)
    lo = max(b1f if a1f > 0.0 else -np.inf, b2f if a2f > 0.0 else -np.inf)
    if t < lo:
        t = _solve(a1f, b1f, a2f, b2f, s)
    return t


@njit(cache=True, nogil=True)
def fast_march(T, state, slow, hx, hy, nx, ny, periodic, pole_s, pole_n, hpole_s, hpole_n, t_max):  # pragma: no cover
    """March the front out of the accepted cells until every reachable cell is accepted.

    ``T`` holds the times of the accepted cells (state 2) and is overwritten elsewhere; cells
    whose time would exceed ``t_max`` stay far (``T = inf``). Returns the number of accepted cells.
    """
    n = nx * ny
    heap = np.empty(n, dtype=np.int64)
    pos = np.full(n, -1, dtype=np.int64)
    nh = 0
    nbr = np.empty(5, dtype=np.int64)
    # seed: the far neighbours of the accepted cells
    for k in range(n):
        if state[k] != KNOWN:
            continue
        j = k // nx
        i = k - j * nx
        m = _neighbours(i, j, nx, ny, periodic, pole_s, pole_n, nbr)
        for q in range(m):
            kn = nbr[q]
            if state[kn] == FAR or state[kn] == TRIAL:
                t = _update(kn, T, state, slow, hx, hy, nx, ny, periodic, pole_s, pole_n, hpole_s, hpole_n)
                if state[kn] == FAR:
                    T[kn] = t
                    state[kn] = TRIAL
                    heap[nh] = kn
                    pos[kn] = nh
                    nh += 1
                    _sift_up(heap, pos, T, nh - 1)
                elif t < T[kn]:
                    T[kn] = t
                    _sift_up(heap, pos, T, pos[kn])
    accepted = 0
    while nh > 0:
        k = heap[0]
        if T[k] > t_max:
            break
        nh -= 1
        if nh > 0:
            heap[0] = heap[nh]
            pos[heap[0]] = 0
            _sift_down(heap, pos, T, 0, nh)
        pos[k] = -1
        state[k] = KNOWN
        accepted += 1
        j = k // nx
        i = k - j * nx
        m = _neighbours(i, j, nx, ny, periodic, pole_s, pole_n, nbr)
        for q in range(m):
            kn = nbr[q]
            st = state[kn]
            if st == KNOWN or st == BARRIER:
                continue
            t = _update(kn, T, state, slow, hx, hy, nx, ny, periodic, pole_s, pole_n, hpole_s, hpole_n)
            if st == FAR:
                T[kn] = t
                state[kn] = TRIAL
                heap[nh] = kn
                pos[kn] = nh
                nh += 1
                _sift_up(heap, pos, T, nh - 1)
            elif t < T[kn]:
                T[kn] = t
                _sift_up(heap, pos, T, pos[kn])
    # cells left in the heap (beyond t_max) are not reached
    for q in range(nh):
        T[heap[q]] = np.inf
        state[heap[q]] = FAR
    return accepted


@njit(cache=True, inline="always")
def _neighbours(i, j, nx, ny, periodic, pole_s, pole_n, out):  # pragma: no cover - compiled
    m = 0
    for d in (-1, 1):
        i1 = i + d
        if periodic:
            i1 %= nx
        elif i1 < 0 or i1 >= nx:
            continue
        out[m] = j * nx + i1
        m += 1
    for d in (-1, 1):
        j1 = j + d
        if 0 <= j1 < ny:
            out[m] = j1 * nx + i
            m += 1
        elif (j1 < 0 and pole_s) or (j1 >= ny and pole_n):
            out[m] = j * nx + (i + nx // 2) % nx
            m += 1
    return m
