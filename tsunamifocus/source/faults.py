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
from pyproj import CRS, Geod

from ..constants import RIGIDITY_PA
from ..errors import ScalingWarning, SourceError

__all__ = ['source_from_config', 'MW_RANGE', 'FaultSegment', 'Rupture', 'PointSource', 'moment_from_magnitude', 'magnitude_from_moment', 'strasser2010_interface']

#: Sane magnitude range; outside it a source needs ``force=True``.
MW_RANGE: tuple[float, float] = (6.5, 9.6)

_SCALING_FACTOR = 2.0
_CONSISTENCY_MW = 0.05


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


def source_from_config(cfg) -> Rupture | PointSource:
    """Build the source object of a parsed ``[[source]]`` table.

    Parameters
    ----------
    cfg : tsunamifocus.io.scenario.SourceConfig
        One parsed source of a scenario.

    Returns
    -------
    Rupture or PointSource
        A :class:`Rupture` of the configured segments, or a :class:`PointSource` (lon/lat, EPSG:4326).
    """
    if cfg.kind == "point":
        return PointSource(x=cfg.lon, y=cfg.lat, radius_km=cfg.radius_km,
                           amplitude_m=cfg.amplitude_m, name=cfg.name)
    segs = [
        FaultSegment(trace=g.trace, top_depth_km=g.top_depth_km, dip_deg=g.dip_deg,
                     width_km=g.width_km, rake_deg=g.rake_deg, slip_m=g.slip_m,
                     magnitude=g.magnitude, rigidity_pa=g.rigidity_pa,
                     name=f"{cfg.name} #{i + 1}", force=cfg.force)
        for i, g in enumerate(cfg.segments)
    ]
    return Rupture(segments=segs, magnitude=cfg.magnitude, name=cfg.name, force=cfg.force)
