"""Finite-fault slip models: a rupture made of many small rectangles, each with its own slip.

A validated subfault table (:func:`tsunamifocus.io.subfaults.read_subfault_table`) becomes a
:class:`SubfaultRupture`: one :class:`~tsunamifocus.source.faults.FaultSegment` per subfault
with slip, laid out on the WGS84 ellipsoid (pyproj ``Geod``) from the row's reference point.
The sea surface is the sum of the subfaults' Okada (1985) uplifts (:func:`uplift_on_grid`
adds the segments of any rupture), the moment is ``sum(mu_i A_i D_i)`` and Mw follows from it
(Hanks & Kanamori 1979). The ray fan is built from that summed surface like any other.

Geometry of a row (the subfault dips to the right of its strike):

* ``depth_at = "top"``: ``(lon, lat)`` is the middle of the top edge, ``depth_km`` its depth;
* ``depth_at = "centroid"``: ``(lon, lat, depth_km)`` is the centre of the rectangle; the top
  edge lies ``W/2 cos(dip)`` up-dip (towards ``strike - 90``) and ``W/2 sin(dip)`` shallower.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from pyproj import Geod, Transformer
from pyproj.crs import ProjectedCRS
from pyproj.crs.coordinate_operation import AzimuthalEquidistantConversion

from ..constants import RIGIDITY_PA
from ..errors import SourceError
from .faults import FaultSegment, Rupture

__all__ = ["SubfaultRupture", "rupture_from_subfaults", "subfault_top_edges"]

_GEOD = Geod(ellps="WGS84")


def subfault_top_edges(table: pd.DataFrame) -> np.ndarray:
    """Top-edge end points of every subfault, shape ``(n, 2, 2)``: ``[[lon1, lat1], [lon2, lat2]]``.

    Parameters
    ----------
    table : pandas.DataFrame
        A validated subfault table (``attrs["depth_at"]`` says where the reference points sit).

    Returns
    -------
    numpy.ndarray
        Degrees; the strike runs from the first to the second point.
    """
    depth_at = table.attrs.get("depth_at", "top")
    lon = table["lon"].to_numpy(float)
    lat = table["lat"].to_numpy(float)
    strike = table["strike_deg"].to_numpy(float)
    if depth_at == "centroid":
        up = 0.5 * table["width_km"].to_numpy(float) * 1e3 * np.cos(np.radians(table["dip_deg"].to_numpy(float)))
        lon, lat, _ = _GEOD.fwd(lon, lat, strike - 90.0, up)
    half = 0.5 * table["length_km"].to_numpy(float) * 1e3
    lo1, la1, _ = _GEOD.fwd(lon, lat, strike + 180.0, half)
    lo2, la2, _ = _GEOD.fwd(lon, lat, strike, half)
    return np.stack([np.column_stack([lo1, la1]), np.column_stack([lo2, la2])], axis=1)


@dataclass
class SubfaultRupture(Rupture):
    """A rupture tabulated as subfaults with variable slip (a finite-fault slip model).

    Same as :class:`~tsunamifocus.source.faults.Rupture` (segments = the subfaults with slip),
    except that :attr:`length_km` is the along-strike extent of the whole model and
    :attr:`width_km` its total area over that length, so that the magnitude-scaling check and
    the source summary describe the rupture rather than one subfault.

    Parameters
    ----------
    n_subfaults : int
        Rows of the table, including those with zero slip.
    area_km2 : float
        Total area of all rows [km^2] (zero-slip rows included).
    origin : str
        The table's file name (for messages and summaries).
    depth_at : str
        ``"top"`` or ``"centroid"``.
    """

    n_subfaults: int = 0
    area_km2: float = float("nan")
    origin: str = ""
    depth_at: str = "top"

    def _frame(self) -> tuple[Transformer, float]:
        """Local metric frame (azimuthal equidistant at the moment centroid) and the mean strike [deg]."""
        mids = np.array([[(a[0] + b[0]) / 2, (a[1] + b[1]) / 2] for a, b in (s.trace for s in self.segments)])
        m0 = np.array([s.moment_nm(d) for s, d in zip(self.segments, self.slips_m)])
        lon0 = math.degrees(float(np.angle(np.sum(m0 * np.exp(1j * np.radians(mids[:, 0]))))))
        lat0 = float(np.sum(m0 * mids[:, 1]) / m0.sum())
        crs = ProjectedCRS(conversion=AzimuthalEquidistantConversion(latitude_natural_origin=lat0,
                                                                      longitude_natural_origin=lon0),
                           geodetic_crs="EPSG:4326")
        vec = np.sum(m0 * np.exp(1j * np.radians([s.strike_deg for s in self.segments])))
        return Transformer.from_crs("EPSG:4326", crs, always_xy=True), math.degrees(float(np.angle(vec)))

    @property
    def length_km(self) -> float:
        """Along-strike extent of the subfaults with slip [km] (along their moment-weighted mean strike)."""
        tr, strike = self._frame()
        pts = []
        for s in self.segments:
            (x1, y1), (x2, y2) = s.trace
            e, n = tr.transform([x1, x2], [y1, y2])
            pts.extend(zip(e, n))
        pts_a = np.asarray(pts)
        u = np.array([math.sin(math.radians(strike)), math.cos(math.radians(strike))])
        along = pts_a @ u
        return float(along.max() - along.min()) / 1e3

    @property
    def width_km(self) -> float:
        """Area of the subfaults with slip over :attr:`length_km` [km]."""
        return float(sum(s.area_m2 for s in self.segments) / 1e6 / self.length_km)

    @property
    def horizontal_width_km(self) -> float:
        """Map-view area of the subfaults with slip over :attr:`length_km` [km]."""
        a = sum(s.area_m2 * math.cos(math.radians(s.dip_deg)) for s in self.segments) / 1e6
        return float(a / self.length_km)


def rupture_from_subfaults(table: pd.DataFrame, *, name: str = "subfaults", rigidity_pa: float = RIGIDITY_PA,
                           poisson: float = 0.25, force: bool = False) -> SubfaultRupture:
    """Build the rupture of a validated subfault table.

    Parameters
    ----------
    table : pandas.DataFrame
        From :func:`tsunamifocus.io.subfaults.read_subfault_table`.
    name : str
        Source name.
    rigidity_pa : float
        Rigidity for rows without their own ``rigidity_pa`` [Pa].
    poisson : float
        Poisson's ratio of the half-space.
    force : bool
        Accept a total magnitude outside the sane range.

    Returns
    -------
    SubfaultRupture
        Segments are the subfaults with slip > 0, in table order.

    Raises
    ------
    SourceError
        A subfault the fault model refuses (message with the table line), or a total
        magnitude outside the sane range without ``force``.
    """
    origin = str(table.attrs.get("path", "subfault table"))
    edges = subfault_top_edges(table)
    segs = []
    for k, row in enumerate(table.itertuples(index=False)):
        if row.slip_m <= 0:
            continue
        mu = float(row.rigidity_pa) if np.isfinite(row.rigidity_pa) else float(rigidity_pa)
        try:
            segs.append(FaultSegment(
                trace=(tuple(edges[k, 0]), tuple(edges[k, 1])), top_depth_km=float(row.top_depth_km),
                dip_deg=float(row.dip_deg), width_km=float(row.width_km), rake_deg=float(row.rake_deg),
                slip_m=float(row.slip_m), rigidity_pa=mu, name=f"{name} line {row.line}", force=force))
        except SourceError as exc:
            raise SourceError(f"{origin}:{row.line}: {exc}") from None
    area = float(np.sum(table["length_km"].to_numpy(float) * table["width_km"].to_numpy(float)))
    try:
        return SubfaultRupture(segs, name=name, poisson=poisson, force=force, n_subfaults=len(table),
                               area_km2=area, origin=origin, depth_at=str(table.attrs.get("depth_at", "top")))
    except SourceError as exc:
        raise SourceError(f"{origin}: {exc}") from None
