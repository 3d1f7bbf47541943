"""The C2 cubic B-spline long-wave speed interpolant with analytic derivatives (ray kernel input)."""

from __future__ import annotations

import math

import numpy as np
import xarray as xr
from scipy import ndimage

from ..constants import EARTH_RADIUS_M, GRAVITY, MIN_DEPTH_M
from ..errors import InputError
from ..grid import GridInfo
from ..ocean.speed import _check_g_hmin
from . import _raykernel as _k

__all__ = ['SpeedField']


class SpeedField:
    """C2 cubic B-spline interpolant of the long-wave speed on a depth grid.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth [m] following the grid convention.
    gravity : float
        [m s-2].
    min_depth : float
        Depth clamp [m]; land nodes (depth <= 0) get the speed of ``min_depth`` so the spline
        stays finite; NaN nodes get the speed of the nearest valid node (rays stop on entering
        a cell with a NaN corner, see :func:`tsunamifocus.rays.trace_rays`).
    radius_m : float
        Sphere radius [m] for lon/lat grids.

    Attributes
    ----------
    info : GridInfo
        Geometry of the grid.
    coef : numpy.ndarray
        Spline coefficients padded by 3 cells on each side.
    depth_padded : numpy.ndarray
        Raw depths (NaN kept) padded the same way (edge / periodic), for bilinear stop tests.
    c_min, c_max : float
        Speed clamp used inside the kernel and the largest node speed [m s-1].
    """

    def __init__(
        self,
        depth: xr.DataArray,
        gravity: float = GRAVITY,
        min_depth: float = MIN_DEPTH_M,
        radius_m: float = EARTH_RADIUS_M,
    ) -> None:
        _check_g_hmin(gravity, min_depth)
        if not isinstance(depth, xr.DataArray):
            raise InputError(f"depth must be an xarray.DataArray, got {type(depth).__name__}")
        info = GridInfo.from_dataarray(depth)
        if info.geographic and info.radius_m != radius_m:
            info = GridInfo(**{**info.__dict__, "radius_m": float(radius_m)})
        self.info = info
        self.gravity = float(gravity)
        self.min_depth = float(min_depth)
        self.radius_m = float(radius_m)
        h = np.asarray(depth.values, dtype=float)
        nan = ~np.isfinite(h)
        if nan.all():
            raise InputError(f"depth grid '{depth.name}' has no finite value")
        if not np.any(h[~nan] > 0):
            raise InputError(f"depth grid '{depth.name}' has no wet node (all depths <= 0 m)")
        c = np.sqrt(gravity * np.maximum(np.where(nan, min_depth, h), min_depth))
        if nan.any():
            idx = ndimage.distance_transform_edt(nan, return_distances=False, return_indices=True)
            c = c[tuple(idx)]
        self.c_nodes = c
        self.c_min = math.sqrt(gravity * min_depth)
        self.c_max = float(c.max())
        xmode = "grid-wrap" if info.periodic_x else "mirror"
        coef = ndimage.spline_filter1d(c, order=3, axis=0, mode="mirror")
        coef = ndimage.spline_filter1d(coef, order=3, axis=1, mode=xmode)
        P = _k.PAD
        coef = np.pad(coef, ((P, P), (0, 0)), mode="reflect")
        coef = np.pad(coef, ((0, 0), (P, P)), mode="wrap" if info.periodic_x else "reflect")
        self.coef = np.ascontiguousarray(coef)
        dp = np.pad(h, ((P, P), (0, 0)), mode="edge")
        dp = np.pad(dp, ((0, 0), (P, P)), mode="wrap" if info.periodic_x else "edge")
        self.depth_padded = np.ascontiguousarray(dp)
        self.depth = depth

    # -- geometry helpers -------------------------------------------------------------------
    @property
    def kernel_geometry(self) -> tuple[float, float, float, float]:
        """``(X0, Y0, DX, DY)`` of the kernel coordinates (metres, or radians on the sphere)."""
        i = self.info
        if i.geographic:
            r = math.pi / 180.0
            return i.x0 * r, i.y0 * r, i.dx * r, i.dy * r
        return i.x0, i.y0, i.dx, i.dy

    def index_of(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Fractional (column, row) index of points given in the grid CRS (lon wrapped if periodic)."""
        return self.info.index_of(x, y)

    def evaluate(self, x, y) -> dict[str, np.ndarray]:
        """Speed and its derivatives at points, exactly as the ray kernel sees them.

        Parameters
        ----------
        x, y : array_like
            Points in the grid CRS (metres, or lon/lat degrees).

        Returns
        -------
        dict of numpy.ndarray
            ``c`` [m s-1] (unclamped spline value); ``c_x``, ``c_y`` [s-1]: derivatives toward east
            and north per metre; ``c_xx``, ``c_xy``, ``c_yy`` [m-1 s-1]: Hessian in metres (on the
            sphere the covariant Hessian in the local east/north orthonormal frame).
        """
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        shape = np.broadcast(x, y).shape
        xb, yb = np.broadcast_arrays(x, y)
        u, v = self.index_of(xb.ravel(), yb.ravel())
        i = self.info
        r = _k.eval_points(
            self.coef,
            np.ascontiguousarray(u, float),
            np.ascontiguousarray(v, float),
            i.nx,
            i.ny,
            i.periodic_x,
        )
        c, cu, cv, cuu, cuv, cvv = (r[:, m] for m in range(6))
        if i.geographic:
            R = self.radius_m
            DX, DY = math.radians(i.dx), math.radians(i.dy)
            phi = np.radians(yb.ravel())
            cp, sp = np.cos(phi), np.sin(phi)
            ca, cb = cu / DX, cv / DY
            rc = R * cp
            out = dict(
                c=c,
                c_x=ca / rc,
                c_y=cb / R,
                c_xx=(cuu / DX**2 - sp * cp * cb) / rc**2,
                c_xy=(cuv / (DX * DY) + sp / cp * ca) / (R * rc),
                c_yy=cvv / DY**2 / R**2,
            )
        else:
            out = dict(
                c=c,
                c_x=cu / i.dx,
                c_y=cv / i.dy,
                c_xx=cuu / i.dx**2,
                c_xy=cuv / (i.dx * i.dy),
                c_yy=cvv / i.dy**2,
            )
        return {k: v.reshape(shape) for k, v in out.items()}

    def derivatives_on_grid(self) -> xr.Dataset:
        """:meth:`evaluate` at every node, as a Dataset on the depth grid (variables c, c_x, ...)."""
        i = self.info
        xx, yy = np.meshgrid(i.x, i.y)
        vals = self.evaluate(xx, yy)
        yd, xd = i.dims
        units = dict(c="m s-1", c_x="s-1", c_y="s-1", c_xx="m-1 s-1", c_xy="m-1 s-1", c_yy="m-1 s-1")
        ds = xr.Dataset(
            {k: ((yd, xd), v, {"units": units[k]}) for k, v in vals.items()},
            coords={yd: self.depth[yd], xd: self.depth[xd]},
        )
        if "spatial_ref" in self.depth.coords:
            ds = ds.assign_coords(spatial_ref=self.depth.coords["spatial_ref"])
        return ds

    def bilinear_depth(self, x, y) -> np.ndarray:
        """Bilinear raw depth [m] at points (NaN if a corner node has no data), as the stop test uses."""
        u, v = self.index_of(np.asarray(x, float), np.asarray(y, float))
        u = np.atleast_1d(u)
        v = np.atleast_1d(v)
        i = self.info
        if i.periodic_x:
            u = np.mod(u, i.nx)
        fi = np.floor(u)
        fj = np.floor(v)
        f, g = u - fi, v - fj
        P = _k.PAD
        ii = np.clip(fi.astype(int) + P, 0, self.depth_padded.shape[1] - 2)
        jj = np.clip(fj.astype(int) + P, 0, self.depth_padded.shape[0] - 2)
        d = self.depth_padded
        return (1 - g) * ((1 - f) * d[jj, ii] + f * d[jj, ii + 1]) + g * (
            (1 - f) * d[jj + 1, ii] + f * d[jj + 1, ii + 1]
        )
