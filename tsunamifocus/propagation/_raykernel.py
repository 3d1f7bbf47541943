"""numba kernels of the ray engine (private; see :mod:`tsunamifocus.rays` and docs/rays.md).

Conventions inside the kernels
------------------------------
* Ray coordinates ``(X, Y)`` are easting/northing in metres on a plane, or longitude/latitude
  in **radians** on the sphere (longitude unwrapped: it is continuous along the ray).
* Grid index coordinates ``u = (X - X0) / DX`` and ``v = (Y - Y0) / DY`` (node ``i`` at ``u = i``).
* The speed ``c`` is a cubic B-spline (C2) whose coefficients ``coef`` are padded by ``PAD``
  cells on every side; ``depth`` holds the raw depths padded the same way (NaN = no data).
* The direction of travel is the unit vector ``(se, sn)`` = (sin, cos) of the azimuth
  (clockwise from north) in the local east/north frame.
* Ray state: ``X, Y, se, sn, q, p, s`` (s = arc length [m]); the parameter is time [s].
"""

from __future__ import annotations

import math

import numpy as np
from llvmlite import ir
from numba import njit, prange, types
from numba.core import cgutils
from numba.extending import intrinsic

from ..io._numbacache import ensure_cache_folder

ensure_cache_folder()  # before the cached kernels below are defined

__all__ = []

__all__: list[str] = []

PAD = 3
SIXTH = 1.0 / 6.0
# LLVM may fuse multiply-adds and use reciprocals; no NaN/inf assumptions (NaN depth and inf
# times are tested), so results stay deterministic for a given build.
_FM = {"contract", "arcp"}

# columns of the per-ray float output
O_X, O_Y, O_SE, O_SN, O_Q, O_P, O_S, O_T, O_FC, O_DEPTH, O_C = range(11)
N_OUT = 11

REASON_COAST = 1
REASON_LEFT = 2
REASON_NODATA = 3
REASON_TIME = 4
REASON_POLAR = 5


@intrinsic
def _prefetch(typingctx, arr, flat):
    """Hint the CPU to fetch element ``arr.flat[flat]`` into cache (llvm.prefetch; never faults)."""
    sig = types.void(arr, types.intp)

    def codegen(context, builder, signature, args):
        ary = context.make_array(signature.args[0])(context, builder, args[0])
        ptr = builder.gep(ary.data, [args[1]])
        i32 = ir.IntType(32)
        fnty = ir.FunctionType(ir.VoidType(), [ptr.type, i32, i32, i32])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.prefetch.p0")
        builder.call(fn, [ptr, i32(0), i32(3), i32(1)])
        return context.get_dummy_value()

    return sig, codegen


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _prefetch_cell(A, u, v, nx, ny, periodic):
    """Prefetch the accumulation cell whose node is nearest to index point (u, v)."""
    if periodic:
        u = u - nx * math.floor(u / nx)
    i = min(max(int(math.floor(u + 0.5)), 0), nx - 1)
    j = min(max(int(math.floor(v + 0.5)), 0), ny - 1)
    _prefetch(A, 2 * (j * nx + i))


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _prefetch_stencil(coef, u, v, nx, ny, periodic):
    """Prefetch the 4 x 4 spline coefficient stencil used at index point (u, v)."""
    if periodic:
        u = u - nx * math.floor(u / nx)
    u = min(max(u, -1.0), float(nx))
    v = min(max(v, -1.0), float(ny))
    nc = coef.shape[1]
    base = (int(math.floor(v)) - 1 + PAD) * nc + (int(math.floor(u)) - 1 + PAD)
    for r in range(4):
        _prefetch(coef, base + r * nc)
        _prefetch(coef, base + r * nc + 3)


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _row(coef, j, i, a0, a1, a2, a3, d0, d1, d2, d3, e0, e1, e2, e3):
    # unsigned indices: no negative-index wraparound test (indices are >= 0 by construction)
    ju = np.uint64(j)
    iu = np.uint64(i)
    k0 = coef[ju, iu]
    k1 = coef[ju, iu + np.uint64(1)]
    k2 = coef[ju, iu + np.uint64(2)]
    k3 = coef[ju, iu + np.uint64(3)]
    return (a0 * k0 + a1 * k1 + a2 * k2 + a3 * k3,
            d0 * k0 + d1 * k1 + d2 * k2 + d3 * k3,
            e0 * k0 + e1 * k1 + e2 * k2 + e3 * k3)


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _bspline_eval(coef, u, v, nx, ny, periodic):
    """Cubic B-spline value and index-space derivatives (c, cu, cv, cuu, cuv, cvv)."""
    if periodic:
        u = u - nx * math.floor(u / nx)
    else:
        if u < -1.0:
            u = -1.0
        elif u > nx:
            u = float(nx)
    if v < -1.0:
        v = -1.0
    elif v > ny:
        v = float(ny)
    fi = math.floor(u)
    fj = math.floor(v)
    f = u - fi
    g = v - fj
    i = int(fi) - 1 + PAD
    j = int(fj) - 1 + PAD
    # basis weights, first and second derivatives (uniform cubic B-spline)
    f2 = f * f
    f3 = f2 * f
    omf = 1.0 - f
    a0 = omf * omf * omf * SIXTH
    a1 = (3.0 * f3 - 6.0 * f2 + 4.0) * SIXTH
    a2 = (-3.0 * f3 + 3.0 * f2 + 3.0 * f + 1.0) * SIXTH
    a3 = f3 * SIXTH
    d0 = -0.5 * omf * omf
    d1 = 1.5 * f2 - 2.0 * f
    d2 = -1.5 * f2 + f + 0.5
    d3 = 0.5 * f2
    e0 = omf
    e1 = 3.0 * f - 2.0
    e2 = 1.0 - 3.0 * f
    e3 = f
    g2 = g * g
    g3 = g2 * g
    omg = 1.0 - g
    b0 = omg * omg * omg * SIXTH
    b1 = (3.0 * g3 - 6.0 * g2 + 4.0) * SIXTH
    b2 = (-3.0 * g3 + 3.0 * g2 + 3.0 * g + 1.0) * SIXTH
    b3 = g3 * SIXTH
    db0 = -0.5 * omg * omg
    db1 = 1.5 * g2 - 2.0 * g
    db2 = -1.5 * g2 + g + 0.5
    db3 = 0.5 * g2
    eb0 = omg
    eb1 = 3.0 * g - 2.0
    eb2 = 1.0 - 3.0 * g
    eb3 = g
    r0 = _row(coef, j, i, a0, a1, a2, a3, d0, d1, d2, d3, e0, e1, e2, e3)
    r1 = _row(coef, j + 1, i, a0, a1, a2, a3, d0, d1, d2, d3, e0, e1, e2, e3)
    r2 = _row(coef, j + 2, i, a0, a1, a2, a3, d0, d1, d2, d3, e0, e1, e2, e3)
    r3 = _row(coef, j + 3, i, a0, a1, a2, a3, d0, d1, d2, d3, e0, e1, e2, e3)
    c = b0 * r0[0] + b1 * r1[0] + b2 * r2[0] + b3 * r3[0]
    cu = b0 * r0[1] + b1 * r1[1] + b2 * r2[1] + b3 * r3[1]
    cuu = b0 * r0[2] + b1 * r1[2] + b2 * r2[2] + b3 * r3[2]
    cv = db0 * r0[0] + db1 * r1[0] + db2 * r2[0] + db3 * r3[0]
    cuv = db0 * r0[1] + db1 * r1[1] + db2 * r2[1] + db3 * r3[1]
    cvv = eb0 * r0[0] + eb1 * r1[0] + eb2 * r2[0] + eb3 * r3[0]
    return c, cu, cv, cuu, cuv, cvv


@njit(cache=True, error_model="numpy", fastmath=_FM)
def eval_points(coef, u, v, nx, ny, periodic):
    """Vectorised :func:`_bspline_eval` over point arrays; returns an (n, 6) array."""
    n = u.shape[0]
    out = np.empty((n, 6))
    for k in range(n):
        r = _bspline_eval(coef, u[k], v[k], nx, ny, periodic)
        for m in range(6):
            out[k, m] = r[m]
    return out


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _bilinear_depth(depth, u, v, nx, periodic):
    """Bilinear raw depth at index position (u, v); NaN if a corner node has no data."""
    if periodic:
        u = u - nx * math.floor(u / nx)
    fi = math.floor(u)
    fj = math.floor(v)
    f = u - fi
    g = v - fj
    i = int(fi) + PAD
    j = int(fj) + PAD
    h00 = depth[j, i]
    h01 = depth[j, i + 1]
    h10 = depth[j + 1, i]
    h11 = depth[j + 1, i + 1]
    return (1.0 - g) * ((1.0 - f) * h00 + f * h01) + g * ((1.0 - f) * h10 + f * h11)


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _sincos_near(Y, Yr, cr, sr):
    """Return (cos Y, sin Y) from cos/sin of a nearby latitude Yr.

    Taylor series of the difference: exact to round-off for |Y - Yr| < 0.02 rad; the library
    functions are used beyond.
    """
    d = Y - Yr
    if abs(d) > 0.02:
        return math.cos(Y), math.sin(Y)
    d2 = d * d
    cd = 1.0 - d2 * (0.5 - d2 * (1.0 / 24.0 - d2 * (1.0 / 720.0)))
    sd = d * (1.0 - d2 * (1.0 / 6.0 - d2 * (1.0 / 120.0 - d2 * (1.0 / 5040.0))))
    return cr * cd - sr * sd, sr * cd + cr * sd


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _rhs(X, Y, se, sn, q, p, coef, X0, Y0, DX, DY, nx, ny, periodic, sph, R, cmin, Yr, cr, sr):
    """Right-hand side of the kinematic + dynamic ray equations (time as parameter).

    ``Yr, cr, sr``: a reference latitude near Y with its cosine and sine (sphere only).
    """
    u = (X - X0) / DX
    v = (Y - Y0) / DY
    c, cu, cv, cuu, cuv, cvv = _bspline_eval(coef, u, v, nx, ny, periodic)
    if c < cmin:
        c = cmin
    if sph:
        cphi, sphi = _sincos_near(Y, Yr, cr, sr)
        tphi = sphi / cphi
        ca = cu / DX  # dc/dlambda
        cb = cv / DY  # dc/dphi
        rc = R * cphi
        ce = ca / rc
        cn = cb / R
        hnn = (cvv / (DY * DY)) / (R * R)
        hee = (cuu / (DX * DX) - sphi * cphi * cb) / (rc * rc)
        hen = (cuv / (DX * DY) + tphi * ca) / (R * rc)
        dX = c * se / rc
        dY = c * sn / R
        geo = c * se * tphi / R
        kgauss = 1.0 / (R * R)
    else:
        ce = cu / DX
        cn = cv / DY
        hee = cuu / (DX * DX)
        hen = cuv / (DX * DY)
        hnn = cvv / (DY * DY)
        dX = c * se
        dY = c * sn
        geo = 0.0
        kgauss = 0.0
    om = geo - (ce * sn - cn * se)
    cnn = sn * sn * hee - 2.0 * sn * se * hen + se * se * hnn
    dq = c * c * p
    dp = -(cnn / c + kgauss) * q
    return dX, dY, sn * om, -se * om, dq, dp, c


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _rk4(X, Y, se, sn, q, p, h, coef, X0, Y0, DX, DY, nx, ny, periodic, sph, R, cmin):
    """One classical RK4 step of length h [s]; returns the new state and the arc length increment."""
    if sph:
        cr = math.cos(Y)
        sr = math.sin(Y)
    else:
        cr = 1.0
        sr = 0.0
    k1 = _rhs(X, Y, se, sn, q, p, coef, X0, Y0, DX, DY, nx, ny, periodic, sph, R, cmin, Y, cr, sr)
    hh = 0.5 * h
    k2 = _rhs(X + hh * k1[0], Y + hh * k1[1], se + hh * k1[2], sn + hh * k1[3], q + hh * k1[4],
              p + hh * k1[5], coef, X0, Y0, DX, DY, nx, ny, periodic, sph, R, cmin, Y, cr, sr)
    k3 = _rhs(X + hh * k2[0], Y + hh * k2[1], se + hh * k2[2], sn + hh * k2[3], q + hh * k2[4],
              p + hh * k2[5], coef, X0, Y0, DX, DY, nx, ny, periodic, sph, R, cmin, Y, cr, sr)
    k4 = _rhs(X + h * k3[0], Y + h * k3[1], se + h * k3[2], sn + h * k3[3], q + h * k3[4],
              p + h * k3[5], coef, X0, Y0, DX, DY, nx, ny, periodic, sph, R, cmin, Y, cr, sr)
    w = h * SIXTH
    Xn = X + w * (k1[0] + 2.0 * k2[0] + 2.0 * k3[0] + k4[0])
    Yn = Y + w * (k1[1] + 2.0 * k2[1] + 2.0 * k3[1] + k4[1])
    sen = se + w * (k1[2] + 2.0 * k2[2] + 2.0 * k3[2] + k4[2])
    snn = sn + w * (k1[3] + 2.0 * k2[3] + 2.0 * k3[3] + k4[3])
    qn = q + w * (k1[4] + 2.0 * k2[4] + 2.0 * k3[4] + k4[4])
    pn = p + w * (k1[5] + 2.0 * k2[5] + 2.0 * k3[5] + k4[5])
    ds = w * (k1[6] + 2.0 * k2[6] + 2.0 * k3[6] + k4[6])
    nrm = math.sqrt(sen * sen + snn * snn)
    return Xn, Yn, sen / nrm, snn / nrm, qn, pn, ds


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _deposit(A, i, j, e, tau, t0, h, nx, ny, periodic, tcap):
    """Add energy ``e`` to cell (i, j) and min-reduce its node time ``t0 + tau h``.

    ``tau`` (fraction of the step) is clamped to [-1, 2], the time to [0, tcap].
    """
    if periodic:
        if i < 0:
            i += nx
        elif i >= nx:
            i -= nx
    if i < 0 or i >= nx or j < 0 or j >= ny:
        return
    A[j, i, 0] += e
    tt = t0 + min(max(tau, -1.0), 2.0) * h
    tt = min(max(tt, 0.0), tcap)
    if tt < A[j, i, 1]:
        A[j, i, 1] = tt


@njit(cache=True, inline="always", error_model="numpy", fastmath=_FM)
def _accumulate(A, u0, v0, u1, v1, t0, h, wds, mx, my, nx, ny, periodic, tcap):
    """Walk the straight index-space chord (u0,v0)->(u1,v1) cell by cell (Amanatides-Woo).

    Each cell gets ``wds`` times the fraction of the chord inside it (energy) and the time at the
    foot of the perpendicular from its node onto the chord line (first arrival, min-reduced),
    extrapolated at most one step beyond the chord and capped to [0, tcap]. The foot position
    (fraction of the step) is linear in the node indices: ``tau = (i - u0) ti + (j - v0) tj``.
    """
    if periodic:
        shift = nx * math.floor(u0 / nx)
        u0 -= shift
        u1 -= shift
    du = u1 - u0
    dv = v1 - v0
    a0 = u0 + 0.5
    b0 = v0 + 0.5
    fa = math.floor(a0)
    fb = math.floor(b0)
    i = int(fa)
    j = int(fb)
    iend = int(math.floor(a0 + du))
    jend = int(math.floor(b0 + dv))
    ncell = abs(iend - i) + abs(jend - j) + 1
    mx2 = mx * mx
    my2 = my * my
    den = du * du * mx2 + dv * dv * my2
    iden = 1.0 / den if den > 0.0 else 0.0
    ti = du * mx2 * iden
    tj = dv * my2 * iden
    tb = -(u0 * ti + v0 * tj)
    if ncell == 1:  # the whole chord lies in one cell
        _deposit(A, i, j, wds, tb + i * ti + j * tj, t0, h, nx, ny, periodic, tcap)
        return
    inf = np.inf
    if du > 0.0:
        si = 1
        tdi = 1.0 / du
        tmi = (fa + 1.0 - a0) * tdi
    elif du < 0.0:
        si = -1
        tdi = -1.0 / du
        tmi = (a0 - fa) * tdi
    else:
        si = 0
        tdi = inf
        tmi = inf
    if dv > 0.0:
        sj = 1
        tdj = 1.0 / dv
        tmj = (fb + 1.0 - b0) * tdj
    elif dv < 0.0:
        sj = -1
        tdj = -1.0 / dv
        tmj = (b0 - fb) * tdj
    else:
        sj = 0
        tdj = inf
        tmj = inf
    tin = 0.0
    for _k in range(ncell):
        tout = min(tmi, tmj, 1.0)
        _deposit(A, i, j, wds * (tout - tin), tb + i * ti + j * tj, t0, h, nx, ny, periodic, tcap)
        if tout >= 1.0:
            break
        if tmi < tmj:
            i += si
            tmi += tdi
        else:
            j += sj
            tmj += tdj
        tin = tout


@njit(cache=True, error_model="numpy", fastmath=_FM)
def _trace_one(k, X, Y, se, sn, q, p, w, coef, depth, X0, Y0, DX, DY, nx, ny, periodic, sph, R,
               cmin, dt, tmax, stop_depth_m, polar, A, accumulate, out, outi, path_slot, paths,
               path_n, path_every, cps, hcap, grav):
    """Trace ray k to its end; write its end state into out[k], outi[k].

    Time step: ``dt`` when ``hcap <= 0``; otherwise the time to cross ``cps`` local cell sides
    (on the sphere ``R dlat`` and ``R dlon max(cos lat, 0.5)``, whichever is smaller) at the local
    speed ``sqrt(grav d)``, capped at ``hcap`` and never below ``dt``.
    """
    s = 0.0
    t = 0.0
    fc = np.nan
    ncaus = 0
    qsign = 0.0
    if q > 0.0:
        qsign = 1.0
    elif q < 0.0:
        qsign = -1.0
    u = (X - X0) / DX
    v = (Y - Y0) / DY
    d = _bilinear_depth(depth, u, v, nx, periodic)
    reason = REASON_TIME
    nstep = 0
    slot = path_slot[k]
    npath = 0
    maxpts = paths.shape[1] if slot >= 0 else 0
    if slot >= 0:
        paths[slot, 0, 0] = X
        paths[slot, 0, 1] = Y
        paths[slot, 0, 2] = 0.0
        npath = 1
    mx = DX
    my = DY
    maxstep = int(math.ceil(tmax / dt - 1e-9)) + 1
    dup = 0.0
    dvp = 0.0
    sy = abs(R * DY) if sph else abs(DY)
    for _it in range(maxstep):
        h = dt
        if hcap > 0.0:
            cl = math.sqrt(grav * d) if d > 0.0 else cmin
            if cl < cmin:
                cl = cmin
            side = abs(R * DX) * max(math.cos(Y), 0.5) if sph else abs(DX)
            if sy < side:
                side = sy
            h = cps * side / cl
            if h > hcap:
                h = hcap
            if h < dt:
                h = dt
        if t + h > tmax:
            h = tmax - t
        if h <= 1e-9 * dt:
            reason = REASON_TIME
            break
        # cache hints (no effect on results): where this step and the next will most likely
        # evaluate the spline and deposit, extrapolated from the last step's displacement
        _prefetch_stencil(coef, u + dup, v + dvp, nx, ny, periodic)
        _prefetch_stencil(coef, u + 2.0 * dup, v + 2.0 * dvp, nx, ny, periodic)
        if accumulate:
            for m in range(1, 5):
                _prefetch_cell(A, u + 0.5 * m * dup, v + 0.5 * m * dvp, nx, ny, periodic)
        Xn, Yn, sen, snn, qn, pn, ds = _rk4(X, Y, se, sn, q, p, h, coef, X0, Y0, DX, DY, nx, ny,
                                            periodic, sph, R, cmin)
        nstep += 1
        un = (Xn - X0) / DX
        vn = (Yn - Y0) / DY
        if sph and abs(Yn) > polar:
            reason = REASON_POLAR
            break
        if vn < -0.5 or vn > ny - 0.5:
            reason = REASON_LEFT
            break
        if (not periodic) and (un < -0.5 or un > nx - 0.5):
            reason = REASON_LEFT
            break
        dn = _bilinear_depth(depth, un, vn, nx, periodic)
        if math.isnan(dn):
            reason = REASON_NODATA
            break
        frac = 1.0
        if dn <= stop_depth_m:
            # end on the stop isobath: linear interpolation of the state within the step
            frac = (d - stop_depth_m) / (d - dn)
            if frac < 0.0:
                frac = 0.0
            elif frac > 1.0:
                frac = 1.0
            Xn = X + frac * (Xn - X)
            Yn = Y + frac * (Yn - Y)
            sen = se + frac * (sen - se)
            snn = sn + frac * (snn - sn)
            nrm = math.sqrt(sen * sen + snn * snn)
            sen /= nrm
            snn /= nrm
            qn = q + frac * (qn - q)
            pn = p + frac * (pn - p)
            ds = frac * ds
            h = frac * h
            un = (Xn - X0) / DX
            vn = (Yn - Y0) / DY
            dn = stop_depth_m
            reason = REASON_COAST
        # caustic: sign change of q
        if qsign == 0.0:
            if qn > 0.0:
                qsign = 1.0
            elif qn < 0.0:
                qsign = -1.0
        elif qn * qsign < 0.0:
            if ncaus == 0:
                fc = s + ds * q / (q - qn)
            ncaus += 1
            qsign = -qsign
        if accumulate:
            if sph:
                ym = 0.5 * (Y + Yn)
                mx = R * DX * math.cos(ym)
                my = R * DY
            _accumulate(A, u, v, un, vn, t, h, w * ds, mx, my, nx, ny, periodic, tmax)
        X = Xn
        Y = Yn
        se = sen
        sn = snn
        q = qn
        p = pn
        s += ds
        t += h
        dup = un - u
        dvp = vn - v
        u = un
        v = vn
        d = dn
        if slot >= 0 and npath < maxpts - 1 and (nstep % path_every == 0):
            paths[slot, npath, 0] = X
            paths[slot, npath, 1] = Y
            paths[slot, npath, 2] = t
            npath += 1
        if reason == REASON_COAST:
            break
    if slot >= 0:
        if paths[slot, npath - 1, 2] != t:
            paths[slot, npath, 0] = X
            paths[slot, npath, 1] = Y
            paths[slot, npath, 2] = t
            npath += 1
        path_n[slot] = npath
    c = _bspline_eval(coef, u, v, nx, ny, periodic)[0]
    if c < cmin:
        c = cmin
    out[k, O_X] = X
    out[k, O_Y] = Y
    out[k, O_SE] = se
    out[k, O_SN] = sn
    out[k, O_Q] = q
    out[k, O_P] = p
    out[k, O_S] = s
    out[k, O_T] = t
    out[k, O_FC] = fc
    out[k, O_DEPTH] = d
    out[k, O_C] = c
    outi[k, 0] = reason
    outi[k, 1] = ncaus
    outi[k, 2] = nstep


@njit(cache=True, parallel=True, error_model="numpy", fastmath=_FM)
def trace_all(X0s, Y0s, se0, sn0, q0, p0, wts, coef, depth, X0, Y0, DX, DY, nx, ny, periodic, sph,
              R, cmin, dt, tmax, stop_depth_m, polar, Ach, accumulate, path_slot, paths, path_n,
              path_every, cps, hcap, grav):
    """Trace all rays; chunk m (one per thread) handles rays m, m + nchunk, ... in order.

    ``Ach`` has shape (nchunk, ny, nx, 2) (energy, first-arrival time interleaved, one cache line
    per cell): chunk m accumulates into its own grids, so the result does not depend on thread
    scheduling (deterministic).
    """
    n = X0s.shape[0]
    nchunk = Ach.shape[0]
    out = np.empty((n, N_OUT))
    outi = np.zeros((n, 3), dtype=np.int64)
    for m in prange(nchunk):
        A = Ach[m]
        for k in range(m, n, nchunk):
            _trace_one(k, X0s[k], Y0s[k], se0[k], sn0[k], q0[k], p0[k], wts[k], coef, depth, X0, Y0,
                       DX, DY, nx, ny, periodic, sph, R, cmin, dt, tmax, stop_depth_m, polar, A,
                       accumulate, out, outi, path_slot, paths, path_n, path_every, cps, hcap, grav)
    return out, outi


@njit(cache=True, parallel=True, error_model="numpy", fastmath=_FM)
def reduce_chunks(Ach, area):
    """Sum energy chunks in fixed order (divided by cell area per row) and min-reduce times."""
    nchunk, ny, nx = Ach.shape[0], Ach.shape[1], Ach.shape[2]
    E = np.empty((ny, nx))
    T = np.empty((ny, nx))
    for j in prange(ny):
        a = area[j]
        for i in range(nx):
            e = 0.0
            tt = np.inf
            for m in range(nchunk):
                e += Ach[m, j, i, 0]
                if Ach[m, j, i, 1] < tt:
                    tt = Ach[m, j, i, 1]
            E[j, i] = e / a
            T[j, i] = tt if tt < np.inf else np.nan
    return E, T
