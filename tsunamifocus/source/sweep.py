"""Ruptures swept along a trench: one rectangle per magnitude every ``spacing_km`` along a line.

For each magnitude ``Mw`` the rupture length ``L`` and width ``W`` follow the interface scaling
relation of :func:`~tsunamifocus.source.faults.strasser2010_interface`. Rupture centres lie on
the trench line (geodesic distances on WGS84, pyproj ``Geod``) at ``L/2, L/2 + s, L/2 + 2s, ...``
from its start while the rupture stays within the line's length (``s = spacing_km``); a
rupture longer than the line gets one centre at its middle. Each rupture is one straight
segment of length ``L`` centred on its point, along the local azimuth of the line (the fault
dips to the right of the line's direction), with the dip of the piece of line holding its
centre. The slip follows from the magnitude (``M0 = mu L W D``).
"""

from __future__ import annotations

import numpy as np
from pyproj import Geod

from ..errors import SourceError
from ..io.scenario import FaultSegmentConfig, SourceConfig
from ..io.sourceset import SetMember, SweepConfig
from .faults import strasser2010_interface

__all__ = ["sweep_sources", "line_positions"]

_GEOD = Geod(ellps="WGS84")


def line_positions(trace: tuple[tuple[float, float], ...], distances_km: np.ndarray) -> list[tuple[float, float, float, int]]:
    """Points at geodesic distances along a line: ``(lon, lat, azimuth_deg, piece)`` each.

    Parameters
    ----------
    trace : sequence of (lon, lat)
        The line [degrees].
    distances_km : array_like
        Distances from the first point along the line [km], within its length.
    """
    lons = [p[0] for p in trace]
    lats = [p[1] for p in trace]
    az, _, dist = _GEOD.inv(lons[:-1], lats[:-1], lons[1:], lats[1:])
    az, dist = np.atleast_1d(az), np.atleast_1d(dist) / 1e3
    edges = np.concatenate([[0.0], np.cumsum(dist)])
    out = []
    for s in np.asarray(distances_km, dtype=float):
        k = int(np.clip(np.searchsorted(edges, s, side="right") - 1, 0, len(dist) - 1))
        lon, lat, back = _GEOD.fwd(lons[k], lats[k], az[k], (s - edges[k]) * 1e3)
        out.append((float(lon), float(lat), float((back + 180.0) % 360.0), k))
    return out


def sweep_sources(sweep: SweepConfig) -> list[SetMember]:
    """The ruptures of one ``[[sweep]]``, as set members (weight = sweep weight x magnitude weight).

    Returns
    -------
    list of SetMember
        Fault sources named ``"<sweep> Mw<m> @<distance> km"``, ordered by magnitude, then
        distance along the line.

    Raises
    ------
    SourceError
        A line of zero length.
    """
    lons = [p[0] for p in sweep.trace]
    lats = [p[1] for p in sweep.trace]
    total = float(np.sum(_GEOD.inv(lons[:-1], lats[:-1], lons[1:], lats[1:])[2])) / 1e3
    if not total > 0:
        raise SourceError(f"sweep {sweep.name!r}: the trench line has zero length")
    members = []
    for mw, mw_weight in zip(sweep.magnitudes, sweep.magnitude_weights):
        length, width = strasser2010_interface(mw)
        if length >= total:
            centres = np.array([0.5 * total])
        else:
            n = int(np.floor((total - length) / sweep.spacing_km + 1e-9)) + 1
            centres = 0.5 * length + sweep.spacing_km * np.arange(n)
        for s, (lon, lat, az, piece) in zip(centres, line_positions(sweep.trace, centres)):
            a = _GEOD.fwd(lon, lat, az + 180.0, 0.5 * length * 1e3)
            b = _GEOD.fwd(lon, lat, az, 0.5 * length * 1e3)
            dip = sweep.dip_deg[piece] if len(sweep.dip_deg) > 1 else sweep.dip_deg[0]
            seg = FaultSegmentConfig(trace=((float(a[0]), float(a[1])), (float(b[0]), float(b[1]))),
                                     top_depth_km=sweep.top_depth_km, dip_deg=float(dip), rake_deg=sweep.rake_deg,
                                     width_km=float(width), magnitude=float(mw))
            name = f"{sweep.name} Mw{mw:.2f} @{s:.0f} km"
            members.append(SetMember(SourceConfig(name=name, kind="fault", segments=(seg,)),
                                     float(sweep.weight * mw_weight), f"sweep {sweep.name!r}"))
    return members
