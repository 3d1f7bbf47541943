"""Earthquake sources: fault segments, sea-floor uplift, magnitude scaling and the ray fan.

Conventions (see ``docs/sources.md``)
-------------------------------------
* **Trace** — the top edge of each rectangular segment, given by two end points
  ``((x1, y1), (x2, y2))`` in ``trace_crs`` (lon/lat degrees by default). The strike is the
  azimuth from the first to the second point (clockwise from north) and, by the right-hand
  rule, the fault **dips to the right** of the strike direction.
* **Rake** — Aki & Richards convention: 0 = left-lateral, 90 = reverse (thrust), 180 =
  right-lateral, -90 = normal. ``strike_slip = slip cos(rake)``, ``dip_slip = slip sin(rake)``,
  which are Okada's (1985) ``U1``, ``U2``.
* **Depths and widths** in km (user side), slip in m, displacements in m, ``eta`` positive up.
* **Moment** ``M0 = mu A D`` [N m], magnitude by Hanks & Kanamori (1979)
  ``Mw = (2/3) (log10 M0 - 9.1)``. Default rigidity :data:`~tsunamifocus.constants.RIGIDITY_PA`
  (40 GPa: within the 30-40 GPa usual for shallow subduction interfaces; the upper value is
  chosen because interface ruptures of great earthquakes extend to 30-50 km depth where the
  hanging-wall rock is stiffer).
* **Scaling** of length and width with magnitude: Strasser et al. (2010, Seismol. Res. Lett.
  81, 941-950), subduction *interface* events, ``log10 L = -2.477 + 0.585 Mw``,
  ``log10 W = -0.882 + 0.351 Mw`` (L, W in km). A :class:`~tsunamifocus.errors.ScalingWarning`
  is issued when a user geometry is more than a factor 2 from these.
* **Ray fan** — directional energy from the far-field angular spectrum of the initial sea
  surface in linear long-wave theory: a plane-wave component of wavevector ``k`` travels
  along ``k`` (half of it) and ``-k`` (the other half); since ``|F(k)| = |F(-k)|`` for real
  ``eta``, the energy radiated into azimuth ``theta`` is proportional to
  ``P(theta) = integral_0^kmax |F(k sin theta, k cos theta)|^2 k dk`` (``F`` the 2-D Fourier
  transform of ``eta``; Parseval makes ``integral P dtheta`` proportional to ``integral eta^2 dA``).
  A rectangle gives the familiar ``sinc^2`` directivity with its maximum perpendicular to
  the long side.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr
from pyproj import CRS, Geod, Transformer
from pyproj.crs import ProjectedCRS
from pyproj.crs.coordinate_operation import AzimuthalEquidistantConversion

from .constants import GRAVITY, RHO_SEAWATER, RIGIDITY_PA
from .errors import ScalingWarning, SourceError
from .grid import GridInfo, make_grid
from .okada import _okada85

__all__ = [
    "MW_RANGE",
    "FaultSegment",
    "Rupture",
    "PointSource",
    "RayFan",
    "SourceSummary",
    "moment_from_magnitude",
    "magnitude_from_moment",
    "strasser2010_interface",
    "uplift_on_grid",
    "potential_energy",
    "kajiura_filter",
    "directional_spectrum",
    "make_ray_fan",
    "summarize_source",
]

#: Sane magnitude range; outside it a source needs ``force=True``.
MW_RANGE: tuple[float, float] = (6.5, 9.6)

_SCALING_FACTOR = 2.0
_CONSISTENCY_MW = 0.05

try:  # the shared caution text (kept optional so this module never fails to import)
    from .cautions import caution_summary as _caution_summary
except Exception:  # pragma: no cover - fallback only if the cautions module is absent

    def _caution_summary() -> str:
        return (
            "SCREENING ESTIMATES ONLY. tsunamifocus output is not a tsunami warning, forecast or "
            "inundation map; follow official tsunami warning centres and local emergency management."
        )


# --------------------------------------------------------------------------- moment & scaling


def moment_from_magnitude(mw: float | np.ndarray) -> float | np.ndarray:
    """Seismic moment from moment magnitude (Hanks & Kanamori 1979).

    ``M0 = 10 ** (1.5 Mw + 9.1)`` [N m], the inverse of ``Mw = (2/3)(log10 M0 - 9.1)``.

    Parameters
    ----------
    mw : float or array_like
        Moment magnitude.

    Returns
    -------
    float or numpy.ndarray
        Seismic moment [N m].
    """
    if np.ndim(mw):
        return 10.0 ** (1.5 * np.asarray(mw, dtype=float) + 9.1)
    return 10.0 ** (1.5 * float(mw) + 9.1)


def magnitude_from_moment(m0: float | np.ndarray) -> float | np.ndarray:
    """Moment magnitude ``Mw = (2/3)(log10 M0 - 9.1)`` (Hanks & Kanamori 1979), ``M0`` in N m.

    Raises
    ------
    SourceError
        If ``m0`` is not positive.
    """
    m = np.asarray(m0, dtype=float)
    if np.any(~(m > 0)):
        raise SourceError(f"seismic moment must be > 0 N m, got {m0}")
    out = (2.0 / 3.0) * (np.log10(m) - 9.1)
    return out if np.ndim(m0) else float(out)


def strasser2010_interface(mw: float) -> tuple[float, float]:
    """Rupture length and width [km] of a subduction-interface event of magnitude ``mw``.

    Strasser, Arango & Bommer (2010), Seismol. Res. Lett. 81(6), 941-950, interface events:
    ``log10 L = -2.477 + 0.585 Mw`` and ``log10 W = -0.882 + 0.351 Mw`` (coefficients from
    memory; they give L = 614 km, W = 189 km for Mw 9.0).

    Returns
    -------
    (float, float)
        ``(length_km, width_km)``.
    """
    mw = float(mw)
    return 10.0 ** (-2.477 + 0.585 * mw), 10.0 ** (-0.882 + 0.351 * mw)


def _as_float(obj: Any, name: str, what: str, optional: bool = False) -> None:
    """Coerce attribute ``name`` of ``obj`` to float in place, or raise a one-line SourceError."""
    v = getattr(obj, name)
    if v is None and optional:
        return
    try:
        f = float(v)
    except (TypeError, ValueError):
        raise SourceError(f"{what}: {name} must be a number, got {v!r}") from None
    setattr(obj, name, f)


def _check_magnitude(mw: float, force: bool, what: str) -> None:
    lo, hi = MW_RANGE
    if not np.isfinite(mw):
        raise SourceError(f"{what}: magnitude must be finite, got {mw}")
    if not force and not (lo <= mw <= hi):
        raise SourceError(
            f"{what}: magnitude Mw {mw:.2f} is outside the sane range {lo}-{hi}; pass force=True to use it"
        )


def _scaling_check(mw: float, length_km: float, width_km: float, what: str) -> None:
    ls, ws = strasser2010_interface(mw)
    msgs = []
    for name, val, ref in (("length", length_km, ls), ("width", width_km, ws)):
        if val > _SCALING_FACTOR * ref or val < ref / _SCALING_FACTOR:
            msgs.append(f"{name} {val:.1f} km vs {ref:.1f} km")
    if msgs:
        warnings.warn(
            f"{what}: geometry far (> x{_SCALING_FACTOR:g}) from Strasser et al. (2010) interface scaling "
            f"for Mw {mw:.2f}: " + "; ".join(msgs),
            ScalingWarning,
            stacklevel=3,
        )


# --------------------------------------------------------------------------- source objects


@dataclass
class FaultSegment:
    """One planar rectangular fault segment with uniform slip.

    Parameters
    ----------
    trace : ((float, float), (float, float))
        Top-edge end points ``((x1, y1), (x2, y2))`` in ``trace_crs`` (lon, lat degrees by
        default). Strike = azimuth from point 1 to point 2; the fault dips to the right.
    top_depth_km : float
        Depth of the top edge below the sea floor / surface [km], >= 0.
    dip_deg : float
        Dip [degrees], in (0, 90].
    width_km : float, optional
        Down-dip width [km], > 0. From Strasser et al. (2010) when None and a magnitude is given.
    rake_deg : float
        Rake [degrees] (90 = pure thrust).
    slip_m : float, optional
        Uniform slip [m], > 0. From the magnitude when None.
    magnitude : float, optional
        Moment magnitude of this segment alone; sets the slip when ``slip_m`` is None.
    trace_crs : str
        CRS of the trace coordinates (anything pyproj accepts).
    rigidity_pa : float
        Shear modulus for moment <-> slip [Pa].
    name : str
        Label.
    force : bool
        Accept a magnitude outside :data:`MW_RANGE`.
    """

    trace: tuple[tuple[float, float], tuple[float, float]]
    top_depth_km: float
    dip_deg: float
    width_km: float | None = None
    rake_deg: float = 90.0
    slip_m: float | None = None
    magnitude: float | None = None
    trace_crs: str = "EPSG:4326"
    rigidity_pa: float = RIGIDITY_PA
    name: str = ""
    force: bool = False

    def __post_init__(self) -> None:
        what = f"fault segment {self.name!r}" if self.name else "fault segment"
        for nm in ("top_depth_km", "dip_deg", "rake_deg", "rigidity_pa"):
            _as_float(self, nm, what)
        for nm in ("width_km", "slip_m", "magnitude"):
            _as_float(self, nm, what, optional=True)
        try:
            (x1, y1), (x2, y2) = self.trace
            x1, y1, x2, y2 = (float(v) for v in (x1, y1, x2, y2))
        except (TypeError, ValueError) as exc:
            raise SourceError(f"{what}: trace must be ((x1, y1), (x2, y2)), got {self.trace!r}") from exc
        if not all(np.isfinite(v) for v in (x1, y1, x2, y2)):
            raise SourceError(f"{what}: trace has non-finite coordinates {self.trace!r}")
        self.trace = ((x1, y1), (x2, y2))
        try:
            crs = CRS.from_user_input(self.trace_crs)
        except Exception as exc:
            raise SourceError(f"{what}: trace_crs {self.trace_crs!r} is not a valid CRS") from exc
        self._crs = crs
        if crs.is_geographic and not (abs(y1) <= 90 and abs(y2) <= 90):
            raise SourceError(f"{what}: trace latitude outside [-90, 90]: {self.trace!r}")
        if not (np.isfinite(self.dip_deg) and 0.0 < float(self.dip_deg) <= 90.0):
            raise SourceError(f"{what}: dip_deg must be in (0, 90], got {self.dip_deg}")
        if not (np.isfinite(self.top_depth_km) and float(self.top_depth_km) >= 0.0):
            raise SourceError(f"{what}: top_depth_km must be >= 0 km, got {self.top_depth_km}")
        if not np.isfinite(self.rake_deg):
            raise SourceError(f"{what}: rake_deg must be finite, got {self.rake_deg}")
        if not (self.rigidity_pa > 0):
            raise SourceError(f"{what}: rigidity_pa must be > 0 Pa, got {self.rigidity_pa}")
        length = self.length_km
        if not length > 1e-6:
            raise SourceError(f"{what}: trace has zero length (end points {self.trace!r})")
        if self.width_km is not None and not (np.isfinite(self.width_km) and self.width_km > 0):
            raise SourceError(f"{what}: width_km must be > 0 km, got {self.width_km}")
        if self.slip_m is not None and not (np.isfinite(self.slip_m) and self.slip_m > 0):
            raise SourceError(f"{what}: slip_m must be > 0 m, got {self.slip_m}")
        if self.magnitude is not None:
            _check_magnitude(float(self.magnitude), self.force, what)
            if self.width_km is None:
                self.width_km = strasser2010_interface(self.magnitude)[1]
            else:
                _scaling_check(float(self.magnitude), length, float(self.width_km), what)
            m0 = float(moment_from_magnitude(self.magnitude))
            slip_from_mw = m0 / (self.rigidity_pa * length * 1e3 * self.width_km * 1e3)
            if self.slip_m is None:
                self.slip_m = slip_from_mw
            elif abs(magnitude_from_moment(self.rigidity_pa * self.area_m2 * self.slip_m) - self.magnitude) > (
                _CONSISTENCY_MW
            ):
                raise SourceError(
                    f"{what}: slip_m={self.slip_m} m and magnitude={self.magnitude} disagree "
                    f"(the magnitude implies {slip_from_mw:.2f} m); give one of them"
                )
        if self.slip_m is not None and self.width_km is None:
            raise SourceError(f"{what}: width_km is required when no magnitude is given")

    # -- geometry -------------------------------------------------------------------------
    @property
    def length_km(self) -> float:
        """Along-strike length of the trace [km] (geodesic on WGS84 for lon/lat traces)."""
        (x1, y1), (x2, y2) = self.trace
        if self._crs.is_geographic:
            _, _, dist = Geod(ellps="WGS84").inv(x1, y1, x2, y2)
            return float(dist) / 1e3
        return float(math.hypot(x2 - x1, y2 - y1)) / 1e3

    @property
    def strike_deg(self) -> float:
        """Strike [degrees clockwise from north, 0-360) at the first trace point."""
        (x1, y1), (x2, y2) = self.trace
        if self._crs.is_geographic:
            az, _, _ = Geod(ellps="WGS84").inv(x1, y1, x2, y2)
            return float(az) % 360.0
        return math.degrees(math.atan2(x2 - x1, y2 - y1)) % 360.0

    @property
    def area_m2(self) -> float:
        """Fault area [m^2] (needs a width)."""
        if self.width_km is None:
            raise SourceError("fault segment has no width yet (give width_km or a magnitude)")
        return self.length_km * 1e3 * float(self.width_km) * 1e3

    @property
    def bottom_depth_km(self) -> float:
        """Depth of the lower edge [km]."""
        return float(self.top_depth_km) + float(self.width_km or 0.0) * math.sin(math.radians(self.dip_deg))

    def moment_nm(self, slip_m: float | None = None) -> float:
        """Seismic moment ``mu A D`` [N m] for ``slip_m`` (default: the segment's slip)."""
        s = self.slip_m if slip_m is None else slip_m
        if s is None:
            raise SourceError(f"fault segment {self.name!r} has no slip (give slip_m or a magnitude)")
        return self.rigidity_pa * self.area_m2 * float(s)

    @classmethod
    def from_magnitude(
        cls,
        x: float,
        y: float,
        strike_deg: float,
        magnitude: float,
        *,
        top_depth_km: float,
        dip_deg: float,
        rake_deg: float = 90.0,
        length_km: float | None = None,
        width_km: float | None = None,
        trace_crs: str = "EPSG:4326",
        rigidity_pa: float = RIGIDITY_PA,
        name: str = "",
        force: bool = False,
    ) -> FaultSegment:
        """Build a segment centred (top edge mid point) at ``(x, y)`` from its magnitude.

        Length and width default to Strasser et al. (2010) interface scaling; the trace is
        laid out along ``strike_deg`` (geodesic for lon/lat).
        """
        _check_magnitude(float(magnitude), force, f"fault segment {name!r}")
        ls, ws = strasser2010_interface(magnitude)
        length = float(ls if length_km is None else length_km)
        if not length > 0:
            raise SourceError(f"fault segment {name!r}: length_km must be > 0 km, got {length_km}")
        crs = CRS.from_user_input(trace_crs)
        half = 0.5 * length * 1e3
        if crs.is_geographic:
            g = Geod(ellps="WGS84")
            x2, y2, _ = g.fwd(x, y, strike_deg, half)
            x1, y1, _ = g.fwd(x, y, strike_deg + 180.0, half)
        else:
            s = math.radians(strike_deg)
            dx, dy = half * math.sin(s), half * math.cos(s)
            x1, y1, x2, y2 = x - dx, y - dy, x + dx, y + dy
        return cls(
            trace=((x1, y1), (x2, y2)),
            top_depth_km=top_depth_km,
            dip_deg=dip_deg,
            width_km=ws if width_km is None else width_km,
            rake_deg=rake_deg,
            magnitude=magnitude,
            trace_crs=trace_crs,
            rigidity_pa=rigidity_pa,
            name=name,
            force=force,
        )


@dataclass
class Rupture:
    """Several fault segments rupturing together, each with its own uniform slip.

    Parameters
    ----------
    segments : list of FaultSegment
        The segments (at least one). A segment given without width receives the Strasser
        et al. (2010) width of the total magnitude (its ``width_km`` is set in place).
    magnitude : float, optional
        Total moment magnitude. Segments without slip share the moment left after the
        segments with a slip, as one uniform slip over their total area (``slips_m``).
    poisson : float
        Poisson's ratio of the half-space for Okada (0.25 = Okada's ``lambda = mu``).
    name : str
        Label.
    force : bool
        Accept a total magnitude outside :data:`MW_RANGE`.
    """

    segments: list[FaultSegment]
    magnitude: float | None = None
    poisson: float = 0.25
    name: str = "rupture"
    force: bool = False
    slips_m: list[float] = field(init=False, default_factory=list)

    def __post_init__(self) -> None:
        if isinstance(self.segments, FaultSegment):
            self.segments = [self.segments]
        try:
            self.segments = list(self.segments)
        except TypeError:
            raise SourceError(f"rupture {self.name!r}: segments must be a list of FaultSegment") from None
        _as_float(self, "magnitude", f"rupture {self.name!r}", optional=True)
        _as_float(self, "poisson", f"rupture {self.name!r}")
        if not self.segments or not all(isinstance(s, FaultSegment) for s in self.segments):
            raise SourceError(f"rupture {self.name!r}: segments must be a non-empty list of FaultSegment")
        if not (-0.5 < self.poisson < 0.5):
            raise SourceError(f"rupture {self.name!r}: poisson must be in (-0.5, 0.5), got {self.poisson}")
        for i, s in enumerate(self.segments):
            if s.width_km is None:
                if self.magnitude is None:
                    raise SourceError(
                        f"rupture {self.name!r}: segment {i} ({s.name!r}) has no width_km and no magnitude"
                    )
                s.width_km = strasser2010_interface(self.magnitude)[1]
        known = [s.slip_m for s in self.segments]
        m_known = sum(s.moment_nm() for s in self.segments if s.slip_m is not None)
        unknown = [i for i, v in enumerate(known) if v is None]
        if self.magnitude is not None:
            _check_magnitude(float(self.magnitude), self.force, f"rupture {self.name!r}")
            m0 = float(moment_from_magnitude(self.magnitude))
            if unknown:
                rest = m0 - m_known
                if rest <= 0:
                    raise SourceError(
                        f"rupture {self.name!r}: segments with a given slip already exceed the moment of "
                        f"Mw {self.magnitude}"
                    )
                mu_a = sum(self.segments[i].rigidity_pa * self.segments[i].area_m2 for i in unknown)
                for i in unknown:
                    known[i] = rest / mu_a
            elif abs(magnitude_from_moment(m_known) - self.magnitude) > _CONSISTENCY_MW:
                raise SourceError(
                    f"rupture {self.name!r}: segment slips give Mw {magnitude_from_moment(m_known):.2f} "
                    f"but magnitude={self.magnitude}; give one of them"
                )
        elif unknown:
            raise SourceError(
                f"rupture {self.name!r}: segment(s) {unknown} have neither slip_m nor magnitude and the "
                "rupture has no magnitude"
            )
        self.slips_m = [float(v) for v in known]  # type: ignore[arg-type]
        mw = self.mw
        _check_magnitude(mw, self.force or any(s.force for s in self.segments), f"rupture {self.name!r}")
        if len(self.segments) > 1 or self.segments[0].magnitude is None:
            _scaling_check(mw, self.length_km, self.width_km, f"rupture {self.name!r}")

    @property
    def moment_nm(self) -> float:
        """Total seismic moment [N m]."""
        return float(sum(s.moment_nm(d) for s, d in zip(self.segments, self.slips_m)))

    @property
    def mw(self) -> float:
        """Moment magnitude (Hanks & Kanamori 1979)."""
        return float(magnitude_from_moment(self.moment_nm))

    @property
    def length_km(self) -> float:
        """Total along-strike length (sum of segment lengths) [km]."""
        return float(sum(s.length_km for s in self.segments))

    @property
    def width_km(self) -> float:
        """Length-weighted mean down-dip width [km]."""
        return float(sum(s.length_km * s.width_km for s in self.segments) / self.length_km)

    @property
    def mean_slip_m(self) -> float:
        """Area-weighted mean slip [m]."""
        a = np.array([s.area_m2 for s in self.segments])
        return float(np.sum(a * np.array(self.slips_m)) / a.sum())


@dataclass
class PointSource:
    """An initial sea-surface hump for quick checks (no fault mechanics).

    ``eta = amplitude cos^2(pi r / (2 R))`` for ``r < R`` and 0 beyond (a raised-cosine hump of
    radius ``R``).

    Parameters
    ----------
    x, y : float
        Centre, lon/lat degrees by default or coordinates of ``crs``.
    radius_km : float
        Hump radius R [km], > 0.
    amplitude_m : float
        Peak sea-surface displacement [m], non-zero (negative = a trough).
    crs : str
        CRS of ``x, y``.
    name : str
        Label.
    """

    x: float
    y: float
    radius_km: float
    amplitude_m: float = 1.0
    crs: str = "EPSG:4326"
    name: str = "point source"

    def __post_init__(self) -> None:
        for nm in ("x", "y", "radius_km", "amplitude_m"):
            _as_float(self, nm, f"point source {self.name!r}")
        if not (np.isfinite(self.x) and np.isfinite(self.y)):
            raise SourceError(f"point source {self.name!r}: centre must be finite, got ({self.x}, {self.y})")
        if not (np.isfinite(self.radius_km) and self.radius_km > 0):
            raise SourceError(f"point source {self.name!r}: radius_km must be > 0 km, got {self.radius_km}")
        if not (np.isfinite(self.amplitude_m) and self.amplitude_m != 0):
            raise SourceError(f"point source {self.name!r}: amplitude_m must be non-zero, got {self.amplitude_m}")
        try:
            CRS.from_user_input(self.crs)
        except Exception as exc:
            raise SourceError(f"point source {self.name!r}: crs {self.crs!r} is not a valid CRS") from exc


# --------------------------------------------------------------------------- grid helpers


def _sea_mask(depth: np.ndarray) -> np.ndarray:
    return np.isfinite(depth) & (depth > 0)


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
        for iseg, (seg, slip) in enumerate(zip(src.segments, src.slips_m)):
            what = f"rupture {src.name!r} segment {iseg} ({seg.name!r})"
            geo = _segment_geometry(seg, gi)
            _check_inside(gi, geo["gx"], geo["gy"], what)
            # trace over land only? (41 points along the trace, nearest cell)
            t = np.linspace(0.0, 1.0, 41)
            if gi.geographic:
                pts = Geod(ellps="WGS84").npts(geo["gx"][0], geo["gy"][0], geo["gx"][1], geo["gy"][1], 39)
                sx = np.r_[geo["gx"][0], [p[0] for p in pts], geo["gx"][1]]
                sy = np.r_[geo["gy"][0], [p[1] for p in pts], geo["gy"][1]]
            else:
                sx = geo["gx"][0] + t * (geo["gx"][1] - geo["gx"][0])
                sy = geo["gy"][0] + t * (geo["gy"][1] - geo["gy"][0])
            dv = _nearest_values(gi, dep, sx, sy)
            if not np.any(_sea_mask(dv)):
                raise SourceError(
                    f"{what}: the whole fault trace {seg.trace} lies on land or no-data cells of the depth grid"
                )
            radius = _window_radius_m(seg) if window_km is None else float(window_km) * 1e3
            rows, cols = _window_slices(gi, geo["mid"][0], geo["mid"][1], radius)
            if cols.size == 0 or rows.stop <= rows.start:
                continue
            X, Y = np.meshgrid(gi.x[cols], gi.y[rows])
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
                ue_, un_, uz_ = _okada_segment(seg, slip, e1, n1, e2, n2, E[idx], N[idx], src.poisson,
                                               horizontal)
                uz[idx] = uz_ * tp
                if horizontal:
                    uE[idx] = ue_ * tp  # type: ignore[index]
                    uN[idx] = un_ * tp  # type: ignore[index]
            sub = np.ix_(np.arange(rows.start, rows.stop), cols)
            eta[sub] += uz.reshape(X.shape)
            if horizontal:
                ue_all[sub] += uE.reshape(X.shape)  # type: ignore[index,union-attr]
                un_all[sub] += uN.reshape(X.shape)  # type: ignore[index,union-attr]
        if horizontal:
            eta += _tanioka_satake(gi, dep, ue_all, un_all)  # type: ignore[arg-type]
        attrs_src = {
            "strike_deg": _mean_strike(src, gi),
            "source_kind": "rupture",
            "source_name": src.name,
            "Mw": round(src.mw, 3),
            "M0_Nm": src.moment_nm,
        }
    if kajiura:
        eta = kajiura_filter(eta, dep, gi)
    out = make_grid(eta, gi.x, gi.y, gi.crs, name="eta",
                    attrs={"units": "m", "long_name": "initial sea-surface displacement (positive up)",
                           "kajiura_filter": int(bool(kajiura)), "tanioka_satake": int(bool(horizontal)),
                           "cautions": _caution_summary(), **attrs_src},
                    lon_periodic=gi.periodic_x if gi.geographic else None)
    return out


def _mean_strike(src: Rupture, gi: GridInfo) -> float:
    """Moment-weighted circular mean strike of the segments in the grid frame [degrees]."""
    vec = 0j
    for seg, slip in zip(src.segments, src.slips_m):
        geo = _segment_geometry(seg, gi)
        a = math.atan2(geo["e"][1] - geo["e"][0], geo["n"][1] - geo["n"][0])
        vec += seg.moment_nm(slip) * np.exp(1j * a)
    return float(math.degrees(np.angle(vec)) % 360.0)


def _point_uplift(src: PointSource, gi: GridInfo, dep: np.ndarray, eta: np.ndarray) -> None:
    crs = CRS.from_user_input(src.crs)
    gx, gy = _to_grid_xy(crs, gi, np.array([src.x]), np.array([src.y]))
    if gi.geographic:
        gx = gi.wrap_lon(gx)
    _check_inside(gi, gx, gy, f"point source {src.name!r}")
    if not np.any(_sea_mask(_nearest_values(gi, dep, gx, gy))):
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
    sea = _sea_mask(depth)
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


def _sig_window(gi: GridInfo, sig: np.ndarray, margin: float = 0.5, extra: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Row and column index arrays of the box around ``sig`` plus ``margin`` x its size + ``extra`` cells.

    Columns are contiguous across the seam of periodic grids (index arrays wrap).
    """
    jj, ii = np.nonzero(sig)
    j0, j1 = jj.min(), jj.max()
    mj = int(math.ceil(margin * (j1 - j0 + 1))) + 2 + extra
    rows = np.arange(max(j0 - mj, 0), min(j1 + mj, gi.ny - 1) + 1)
    if gi.periodic_x:
        # centre the columns on the circular mean position
        colsig = np.unique(ii)
        ang = 2 * np.pi * colsig / gi.nx
        c = int(np.rint(np.angle(np.mean(np.exp(1j * ang))) / (2 * np.pi) * gi.nx)) % gi.nx
        rel = ((colsig - c + gi.nx // 2) % gi.nx) - gi.nx // 2
        i0, i1 = rel.min(), rel.max()
        mi = int(math.ceil(margin * (i1 - i0 + 1))) + 2 + extra
        lo, hi = i0 - mi, i1 + mi
        if hi - lo + 1 >= gi.nx:
            cols = np.arange(gi.nx)
        else:
            cols = (c + np.arange(lo, hi + 1)) % gi.nx
    else:
        i0, i1 = ii.min(), ii.max()
        mi = int(math.ceil(margin * (i1 - i0 + 1))) + 2 + extra
        cols = np.arange(max(i0 - mi, 0), min(i1 + mi, gi.nx - 1) + 1)
    return rows, cols


# --------------------------------------------------------------------------- energy


def potential_energy(eta: xr.DataArray, depth: xr.DataArray, *, rho: float = RHO_SEAWATER,
                     gravity: float = GRAVITY) -> float:
    """Initial potential energy ``E = 1/2 rho g integral(eta^2 dA)`` over the sea [J].

    Only sea cells (finite depth > 0) count; cell areas from
    :meth:`~tsunamifocus.grid.GridInfo.cell_area_m2`.

    Parameters
    ----------
    eta : xarray.DataArray
        Sea-surface displacement [m].
    depth : xarray.DataArray
        Depth [m] on the same grid.
    rho : float
        Sea-water density [kg m-3].
    gravity : float
        [m s-2].

    Returns
    -------
    float
        Energy [J].
    """
    gi = GridInfo.from_dataarray(depth)
    e = np.asarray(eta.values, dtype=float)
    if e.shape != (gi.ny, gi.nx):
        raise SourceError(f"eta shape {e.shape} does not match the depth grid {(gi.ny, gi.nx)}")
    sea = _sea_mask(np.asarray(depth.values, dtype=float))
    if np.any(sea & ~np.isfinite(e)):
        raise SourceError(f"eta '{eta.name}' has NaN/inf values over {int(np.sum(sea & ~np.isfinite(e)))} sea cells")
    area = np.broadcast_to(gi.cell_area_m2(), e.shape)
    return float(0.5 * rho * gravity * np.sum(np.where(sea, e * e * area, 0.0)))


# --------------------------------------------------------------------------- directivity & ray fan


def directional_spectrum(
    block: np.ndarray, dx_m: float, dy_m: float, azimuth_deg: np.ndarray, *, pad: int = 4, n_k: int = 400,
    max_cells: int = 384,
) -> np.ndarray:
    """Far-field directional energy ``P(theta) = integral |F(k sin t, k cos t)|^2 k dk``.

    ``F`` is the 2-D Fourier transform of the sea-surface block (rows northward, columns
    eastward, spacing ``dx_m`` x ``dy_m``), computed by FFT with ``pad``-fold zero padding and
    interpolated bilinearly onto polar samples ``k = 0 .. min(pi/dx, pi/dy)`` (``n_k`` steps).
    Blocks larger than ``max_cells`` on a side are block-averaged first (the far-field pattern
    is a low-wavenumber property).

    Parameters
    ----------
    block : numpy.ndarray
        ``eta`` [m] on a regular metric grid (land set to 0 by the caller).
    dx_m, dy_m : float
        Spacing [m].
    azimuth_deg : numpy.ndarray
        Directions [degrees clockwise from north].

    Returns
    -------
    numpy.ndarray
        ``P`` at each azimuth [m^6 per radian, arbitrary overall scale for the caller].
    """
    from scipy.interpolate import RegularGridInterpolator

    b = np.nan_to_num(np.asarray(block, dtype=float))
    fy = max(1, int(math.ceil(b.shape[0] / max_cells)))
    fx = max(1, int(math.ceil(b.shape[1] / max_cells)))
    if fy > 1 or fx > 1:
        ny, nx = (b.shape[0] // fy + (b.shape[0] % fy > 0)) * fy, (b.shape[1] // fx + (b.shape[1] % fx > 0)) * fx
        bb = np.zeros((ny, nx))
        bb[: b.shape[0], : b.shape[1]] = b
        b = bb.reshape(ny // fy, fy, nx // fx, fx).mean(axis=(1, 3))
        dx_m, dy_m = dx_m * fx, dy_m * fy
    ny, nx = b.shape
    py, px = pad * ny, pad * nx
    F = np.fft.fftshift(np.fft.fft2(b, s=(py, px))) * dx_m * dy_m
    P2 = np.abs(F) ** 2
    kx = np.fft.fftshift(2 * np.pi * np.fft.fftfreq(px, d=dx_m))
    ky = np.fft.fftshift(2 * np.pi * np.fft.fftfreq(py, d=dy_m))
    interp = RegularGridInterpolator((ky, kx), P2, method="linear", bounds_error=False, fill_value=0.0)
    kmax = min(np.pi / dx_m, np.pi / dy_m)
    k = np.linspace(0.0, kmax, n_k + 1)
    az = np.radians(np.asarray(azimuth_deg, dtype=float))
    KX = k[None, :] * np.sin(az)[:, None]
    KY = k[None, :] * np.cos(az)[:, None]
    vals = interp(np.stack([KY.ravel(), KX.ravel()], axis=1)).reshape(KX.shape)
    return np.trapezoid(vals * k[None, :], k, axis=1)


@dataclass
class RayFan:
    """Energy-weighted rays leaving a source, ready for the ray engine.

    Attributes
    ----------
    x0, y0 : numpy.ndarray
        Launch points in the grid CRS (lon/lat degrees or metres).
    azimuth_deg : numpy.ndarray
        Launch direction [degrees clockwise from (grid) north].
    weights : numpy.ndarray
        Energy per ray [J]; sums to ``energy_J``.
    side : numpy.ndarray
        int8: +1 for rays heading to the right of the strike (the dip side), -1 to the left.
    energy_J : float
        Initial potential energy ``E`` of the source [J].
    strike_deg : float
        Strike used to define the sides [degrees].
    crs_wkt : str
        CRS of the launch points.
    pattern_azimuth_deg, pattern : numpy.ndarray
        The directional energy distribution: fraction of E in each 0.1-degree bin centred at
        ``pattern_azimuth_deg``.
    seed : int
        Seed of the launch-point sampling.
    method : str
        Basis of the directional weights.
    """

    x0: np.ndarray
    y0: np.ndarray
    azimuth_deg: np.ndarray
    weights: np.ndarray
    side: np.ndarray
    energy_J: float
    strike_deg: float
    crs_wkt: str
    pattern_azimuth_deg: np.ndarray
    pattern: np.ndarray
    seed: int | None = 0
    method: str = "far-field angular spectrum of the initial sea surface (linear long-wave theory)"

    def __len__(self) -> int:
        return int(self.x0.size)

    @property
    def n_rays(self) -> int:
        """Number of rays."""
        return int(self.x0.size)

    def by_side(self) -> dict[str, dict[str, float]]:
        """Ray count and energy [J] on each side of the strike."""
        out = {}
        for name, s in (("right_of_strike", 1), ("left_of_strike", -1)):
            m = self.side == s
            out[name] = {"n_rays": int(m.sum()), "energy_J": float(self.weights[m].sum())}
        return out

    def to_dataset(self) -> xr.Dataset:
        """The fan as an :class:`xarray.Dataset` on dim ``ray``."""
        ds = xr.Dataset(
            {
                "x0": ("ray", self.x0),
                "y0": ("ray", self.y0),
                "azimuth_deg": ("ray", self.azimuth_deg, {"units": "degree", "long_name": "clockwise from north"}),
                "weight": ("ray", self.weights, {"units": "J"}),
                "side": ("ray", self.side, {"flag_values": [-1, 1],
                                            "flag_meanings": "left_of_strike right_of_strike"}),
            },
            attrs={"energy_J": self.energy_J, "strike_deg": self.strike_deg, "crs_wkt": self.crs_wkt,
                   "method": self.method, "cautions": _caution_summary()},
        )
        return ds


def _principal_strike(E: np.ndarray, N: np.ndarray, w: np.ndarray) -> float:
    """Azimuth [deg] of the long axis of a weighted point cloud (0-180)."""
    ws = w.sum()
    me, mn = np.sum(w * E) / ws, np.sum(w * N) / ws
    cee = np.sum(w * (E - me) ** 2) / ws
    cnn = np.sum(w * (N - mn) ** 2) / ws
    cen = np.sum(w * (E - me) * (N - mn)) / ws
    vals, vecs = np.linalg.eigh(np.array([[cee, cen], [cen, cnn]]))
    ve, vn = vecs[:, int(np.argmax(vals))]
    return math.degrees(math.atan2(ve, vn)) % 180.0


def make_ray_fan(
    eta: xr.DataArray,
    depth: xr.DataArray,
    n_rays: int = 360,
    *,
    seed: int | None = 0,
    threshold: float = 0.1,
    strike_deg: float | None = None,
    azimuth_offset_deg: float = 0.0,
) -> RayFan:
    """Energy-weighted ray fan from an initial sea surface.

    Directions: ``n_rays`` azimuths evenly spaced (``360 / n_rays`` apart, starting at
    ``azimuth_offset_deg + 180 / n_rays``); ray ``i`` carries ``E x`` the fraction of the
    far-field directional energy ``P(theta)`` (:func:`directional_spectrum`, evaluated every
    0.1 degree and integrated over the ray's bin) falling in its bin — so the weights sum to
    ``E`` and an elongated source beams most energy perpendicular to its long axis. The
    azimuths are clockwise from north on lon/lat grids and from grid north (the ``y`` axis) on
    projected grids.

    Launch points: sampled (``numpy.random.default_rng(seed)``, with ``eta^2 x cell area`` as
    probability) among sea cells with ``|eta| >= threshold x max|eta|``; a ray heading to the
    right of the strike starts on the right half of that region, and vice versa, when that half
    has sea cells (else anywhere in the region). Points are jittered uniformly within the cell.

    Parameters
    ----------
    eta : xarray.DataArray
        Initial sea surface [m] (from :func:`uplift_on_grid`).
    depth : xarray.DataArray
        Depth grid [m].
    n_rays : int
        Number of rays (>= 8).
    seed : int, optional
        Seed for the launch-point sampling.
    threshold : float
        Fraction of the peak |eta| bounding the launch area (0 < threshold < 1).
    strike_deg : float, optional
        Strike for the sides; default: ``eta.attrs["strike_deg"]`` (set by
        :func:`uplift_on_grid` for ruptures), else the long axis of the ``eta^2`` distribution
        (oriented 0-180 degrees).
    azimuth_offset_deg : float
        Rotation of the azimuth set [degrees].

    Returns
    -------
    RayFan

    Raises
    ------
    SourceError
        No sea cells under the source, bad counts or thresholds.
    """
    if not (isinstance(n_rays, (int, np.integer)) and n_rays >= 8):
        raise SourceError(f"n_rays must be an integer >= 8, got {n_rays!r}")
    if not (0.0 < threshold < 1.0):
        raise SourceError(f"threshold must be in (0, 1), got {threshold}")
    gi = GridInfo.from_dataarray(depth)
    e = np.asarray(eta.values, dtype=float)
    if e.shape != (gi.ny, gi.nx):
        raise SourceError(f"eta shape {e.shape} does not match the depth grid {(gi.ny, gi.nx)}")
    dep = np.asarray(depth.values, dtype=float)
    sea = _sea_mask(dep)
    es = np.where(sea, np.nan_to_num(e), 0.0)
    amax = float(np.max(np.abs(es)))
    if amax == 0.0:
        raise SourceError("the source has no sea-surface displacement over sea cells of the grid")
    energy = potential_energy(eta, depth)
    sig = sea & (np.abs(es) >= threshold * amax)
    rows, cols = _sig_window(gi, np.abs(es) >= 1e-3 * amax, margin=0.25)
    block = es[np.ix_(rows, cols)]
    lat_mid = float(gi.y[rows].mean()) if gi.geographic else 0.0
    dx_m, dy_m = _metric_spacing(gi, lat_mid)

    # directional pattern on a fine azimuth set, then integrated over each ray's bin
    n_fine = 3600
    dfine = 360.0 / n_fine
    fine_az = dfine * (np.arange(n_fine) + 0.5)
    Pf = np.maximum(directional_spectrum(block, dx_m, dy_m, fine_az), 0.0)
    if not Pf.sum() > 0:
        raise SourceError("directional spectrum of the source is empty (source smaller than a grid cell?)")
    pattern = Pf / Pf.sum()
    cum = np.concatenate([[0.0], np.cumsum(pattern)])  # at fine bin edges 0, dfine, ..., 360

    def cdf(a: np.ndarray) -> np.ndarray:
        turns = np.floor(a / 360.0)
        return turns + np.interp(a - 360.0 * turns, dfine * np.arange(n_fine + 1), cum)

    width = 360.0 / n_rays
    edges = azimuth_offset_deg + width * np.arange(n_rays + 1)
    centres = (edges[:-1] + 0.5 * width) % 360.0
    c = cdf(edges)
    frac = np.diff(c)
    frac = np.maximum(frac, 0.0)
    weights = energy * (frac / frac.sum())

    # launch area in local metric coordinates
    jj, ii = np.nonzero(sig)
    xs, ys = gi.x[ii], gi.y[jj]
    if gi.geographic:
        k = math.pi / 180.0 * gi.radius_m
        lat0 = float(np.mean(ys))
        dl = np.angle(np.mean(np.exp(1j * np.radians(xs))))
        lon0 = math.degrees(dl)
        Ex = (((xs - lon0 + 180.0) % 360.0) - 180.0) * k * math.cos(math.radians(lat0))
        Ny = (ys - lat0) * k
    else:
        Ex, Ny = xs, ys
    area = np.broadcast_to(gi.cell_area_m2(), e.shape)[jj, ii]
    w = es[jj, ii] ** 2 * area
    if strike_deg is None and "strike_deg" in eta.attrs:
        strike_deg = float(eta.attrs["strike_deg"])
    if strike_deg is None:
        strike = _principal_strike(Ex, Ny, w)
    else:
        strike = float(strike_deg) % 360.0
    s = math.radians(strike)
    me, mn = np.sum(w * Ex) / w.sum(), np.sum(w * Ny) / w.sum()
    # signed distance to the right of the strike line through the energy centroid
    right = (Ex - me) * math.cos(s) - (Ny - mn) * math.sin(s)
    ray_side = np.where(np.sin(np.radians(centres - strike)) >= 0.0, 1, -1).astype(np.int8)

    rng = np.random.default_rng(seed)
    x0 = np.empty(n_rays)
    y0 = np.empty(n_rays)
    for sval, msk in ((1, right >= 0.0), (-1, right < 0.0)):
        idx_rays = np.nonzero(ray_side == sval)[0]
        if idx_rays.size == 0:
            continue
        cand = np.nonzero(msk)[0] if np.any(msk) else np.arange(w.size)
        p = w[cand] / w[cand].sum()
        pick = cand[rng.choice(cand.size, size=idx_rays.size, p=p)]
        jit = rng.uniform(-0.5, 0.5, size=(2, idx_rays.size))
        x0[idx_rays] = xs[pick] + jit[0] * gi.dx
        y0[idx_rays] = ys[pick] + jit[1] * gi.dy
    if gi.geographic:
        x0 = gi.wrap_lon(x0)
    return RayFan(
        x0=x0,
        y0=y0,
        azimuth_deg=centres,
        weights=weights,
        side=ray_side,
        energy_J=energy,
        strike_deg=strike,
        crs_wkt=gi.crs_wkt,
        pattern_azimuth_deg=fine_az,
        pattern=pattern,
        seed=seed,
    )


# --------------------------------------------------------------------------- summary


@dataclass
class SourceSummary:
    """Key figures of a source on a grid.

    Attributes
    ----------
    name, kind : str
        Label and ``"rupture"`` / ``"point"``.
    segments : list of dict
        Per segment: trace, strike_deg, dip_deg, rake_deg, top_depth_km, width_km, length_km, slip_m.
    mw, m0_nm, rigidity_pa, mean_slip_m : float
        Magnitude, moment [N m], rigidity [Pa], mean slip [m] (NaN for a point source).
    max_uplift_m, max_subsidence_m : float
        Largest positive and most negative ``eta`` over sea cells [m].
    energy_J : float
        Initial potential energy [J].
    source_width_km : float
        Across-strike width setting the initial wavelength [km].
    mean_depth_m : float
        Mean depth over the source area [m].
    wavelength_km, period_s : float
        Dominant initial wavelength ``~ 2 x width`` [km] and period ``wavelength / sqrt(g h)`` [s].
    rays : dict
        Ray count and energy by side (empty without a fan).
    """

    name: str
    kind: str
    segments: list[dict[str, Any]]
    mw: float
    m0_nm: float
    rigidity_pa: float
    mean_slip_m: float
    max_uplift_m: float
    max_subsidence_m: float
    energy_J: float
    source_width_km: float
    mean_depth_m: float
    wavelength_km: float
    period_s: float
    rays: dict[str, dict[str, float]]

    def to_dict(self) -> dict[str, Any]:
        """Plain-Python dict (strict-JSON serialisable: NaN becomes None) with the cautions text."""
        def clean(v: Any) -> Any:
            if isinstance(v, float) and not math.isfinite(v):
                return None
            if isinstance(v, dict):
                return {k: clean(x) for k, x in v.items()}
            if isinstance(v, (list, tuple)):
                return [clean(x) for x in v]
            return v

        d = {k: clean(getattr(self, k)) for k in self.__dataclass_fields__}
        d["cautions"] = _caution_summary()
        return d

    def __str__(self) -> str:
        lines = [f"Source '{self.name}' ({self.kind})"]
        if self.kind == "rupture":
            lines.append(f"  Mw {self.mw:.2f}   M0 {self.m0_nm:.3e} N m   rigidity {self.rigidity_pa / 1e9:.0f} GPa   "
                         f"mean slip {self.mean_slip_m:.2f} m")
            for i, s in enumerate(self.segments):
                lines.append(
                    f"  segment {i} {s['name']!r}: strike {s['strike_deg']:.1f} deg, dip {s['dip_deg']:.1f} deg, "
                    f"rake {s['rake_deg']:.0f} deg, L {s['length_km']:.1f} km, W {s['width_km']:.1f} km, "
                    f"top {s['top_depth_km']:.1f} km, slip {s['slip_m']:.2f} m"
                )
        else:
            s = self.segments[0]
            lines.append(f"  hump radius {s['radius_km']:.1f} km, amplitude {s['amplitude_m']:.2f} m")
        lines += [
            f"  max uplift {self.max_uplift_m:.2f} m, max subsidence {self.max_subsidence_m:.2f} m",
            f"  initial potential energy E = {self.energy_J:.3e} J",
            f"  source width {self.source_width_km:.0f} km, mean depth {self.mean_depth_m:.0f} m -> "
            f"wavelength ~{self.wavelength_km:.0f} km, period ~{self.period_s / 60:.1f} min",
        ]
        for side, v in self.rays.items():
            lines.append(f"  rays {side.replace('_', ' ')}: {v['n_rays']} carrying {v['energy_J']:.3e} J")
        lines.append("  " + _caution_summary())
        return "\n".join(lines)


def summarize_source(
    source: Rupture | FaultSegment | PointSource,
    eta: xr.DataArray,
    depth: xr.DataArray,
    fan: RayFan | None = None,
    *,
    threshold: float = 0.1,
) -> SourceSummary:
    """Summarise a source, its initial sea surface on the grid and (optionally) its ray fan.

    The width setting the wavelength is, for a rupture, the length-weighted horizontal
    projection of the fault width ``W cos(dip)``, but at least the lower-edge depth (a buried
    steep fault deforms the surface over a width of the order of its depth); for a point
    source, the hump diameter. Dominant wavelength ``~ 2 x width`` and period
    ``wavelength / sqrt(g h)`` with ``h`` the mean depth of the sea cells where
    ``|eta| >= threshold max|eta|`` (rule of thumb, common practice, no source).
    """
    src = _as_rupture(source)
    GridInfo.from_dataarray(depth)  # checks the grid convention (raises on a bad grid)
    e = np.asarray(eta.values, dtype=float)
    dep = np.asarray(depth.values, dtype=float)
    sea = _sea_mask(dep)
    es = np.where(sea, e, 0.0)
    amax = float(np.max(np.abs(es))) if es.size else 0.0
    sig = sea & (np.abs(es) >= threshold * amax) if amax > 0 else sea & False
    h = float(np.mean(dep[sig])) if np.any(sig) else float("nan")
    energy = potential_energy(eta, depth)
    if isinstance(src, PointSource):
        segs = [{"name": src.name, "x": src.x, "y": src.y, "crs": str(src.crs), "radius_km": src.radius_km,
                 "amplitude_m": src.amplitude_m}]
        width = 2.0 * src.radius_km
        mw = m0 = mean_slip = float("nan")
        mu = float("nan")
        kind = "point"
    else:
        segs = []
        wsum = 0.0
        for s, d in zip(src.segments, src.slips_m):
            segs.append({"name": s.name, "trace": [list(p) for p in s.trace], "trace_crs": str(s.trace_crs),
                         "strike_deg": s.strike_deg, "dip_deg": float(s.dip_deg), "rake_deg": float(s.rake_deg),
                         "top_depth_km": float(s.top_depth_km), "width_km": float(s.width_km),
                         "length_km": s.length_km, "slip_m": float(d)})
            wh = max(float(s.width_km) * math.cos(math.radians(s.dip_deg)), s.bottom_depth_km)
            wsum += s.length_km * wh
        width = wsum / src.length_km
        mw, m0, mean_slip = src.mw, src.moment_nm, src.mean_slip_m
        mu = float(np.mean([s.rigidity_pa for s in src.segments]))
        kind = "rupture"
    lam = 2.0 * width
    period = lam * 1e3 / math.sqrt(GRAVITY * h) if h > 0 else float("nan")
    return SourceSummary(
        name=src.name,
        kind=kind,
        segments=segs,
        mw=mw,
        m0_nm=m0,
        rigidity_pa=mu,
        mean_slip_m=mean_slip,
        max_uplift_m=float(max(np.max(es), 0.0)),
        max_subsidence_m=float(min(np.min(es), 0.0)),
        energy_J=energy,
        source_width_km=width,
        mean_depth_m=h,
        wavelength_km=lam,
        period_s=period,
        rays=fan.by_side() if fan is not None else {},
    )
