"""What a source is, in numbers (magnitude, moment, slip, uplift, energy, wavelength)."""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from ..cautions import caution_summary
from ..constants import GRAVITY
from ..errors import SourceWarning
from ..grid import GridInfo
from ..ocean.smooth import sea_mask
from .energy import LAND_SHARE_WARNING, land_share, potential_energy
from .faults import FaultSegment, PointSource, Rupture
from .rayfan import RayFan
from .subfaults import SubfaultRupture
from .surface import SurfaceSource, surface_width_km
from .uplift import _as_rupture

__all__ = ['SourceSummary', 'summarize_source']


# --------------------------------------------------------------------------- summary


@dataclass
class SourceSummary:
    """Key figures of a source on a grid.

    Attributes
    ----------
    name, kind : str
        Label and ``"rupture"`` / ``"subfaults"`` / ``"surface"`` / ``"point"``.
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
    land_share : float
        Share of the displacement (``integral eta^2 dA``) on land or no data, left out of the
        tsunami (:func:`~.energy.land_share`).
    geometry_notes : list of str
        Suspicious geometry found while building the initial surface (a thrust dipping toward
        deeper water); :attr:`notes` adds the land-share note.
    details : dict
        Kind-specific figures: for a subfault model its table, row count, slip and depth
        ranges (``segments`` is then empty); for a sea-surface raster its file and resampling.
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
    details: dict[str, Any] = field(default_factory=dict)
    land_share: float = 0.0
    geometry_notes: list[str] = field(default_factory=list)

    @property
    def notes(self) -> list[str]:
        """Every warning about this source, as sentences (geometry, then the land share)."""
        return list(self.geometry_notes) + ([self.land_note] if self.land_note else [])

    @property
    def land_note(self) -> str | None:
        """One sentence when a large share of the displacement is on land (else None)."""
        if not (math.isfinite(self.land_share) and self.land_share > LAND_SHARE_WARNING):
            return None
        return (f"{100 * self.land_share:.0f} % of the displacement (by integral of eta^2 dA) lies on land or "
                "no-data cells and makes no tsunami here: the energy, the dominant period and the ray fan come "
                "from the sea part only. Check the fault trace: a subduction interface's trace is its trench "
                "axis, seaward of the coast")

    @property
    def headline(self) -> str:
        """``"Mw 8.60, E = 4.5e+14 J"`` (no magnitude for point and sea-surface sources)."""
        mw = f"Mw {self.mw:.2f}, " if math.isfinite(self.mw) else ""
        return f"{mw}E = {self.energy_J:.3g} J"

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
        d["cautions"] = caution_summary()
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
        elif self.kind == "subfaults":
            d = self.details
            lines.append(f"  Mw {self.mw:.2f}   M0 {self.m0_nm:.3e} N m   mean slip {self.mean_slip_m:.2f} m   "
                         f"{d['n_subfaults']} subfaults ({d['n_slipping']} with slip) from {d['table']}")
            lines.append(f"  slip {d['slip_min_m']:.2f}-{d['slip_max_m']:.2f} m, top depths "
                         f"{d['top_depth_min_km']:.1f}-{d['top_depth_max_km']:.1f} km, along-strike extent "
                         f"{d['length_km']:.0f} km")
        elif self.kind == "surface":
            d = self.details
            lines.append(f"  initial sea surface read from {d['file']} (block factor {d['block_factor']}, "
                         f"{100 * d['inside_fraction']:.1f} % inside the grid)")
        else:
            s = self.segments[0]
            lines.append(f"  hump radius {s['radius_km']:.1f} km, amplitude {s['amplitude_m']:.2f} m")
        lines += [
            f"  max uplift {self.max_uplift_m:.2f} m, max subsidence {self.max_subsidence_m:.2f} m",
            f"  initial potential energy E = {self.energy_J:.3e} J"
            + (f" ({100 * self.land_share:.1f} % of the displacement on land, left out)"
               if math.isfinite(self.land_share) and self.land_share >= 0.001 else ""),
            f"  source width {self.source_width_km:.0f} km, mean depth {self.mean_depth_m:.0f} m -> "
            f"wavelength ~{self.wavelength_km:.0f} km, period ~{self.period_s / 60:.1f} min",
        ]
        for side, v in self.rays.items():
            lines.append(f"  rays {side.replace('_', ' ')}: {v['n_rays']} carrying {v['energy_J']:.3e} J")
        lines.append("  " + caution_summary())
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
    steep fault deforms the surface over a width of the order of its depth); for a subfault
    model, the map-view area of its slipping subfaults over their along-strike extent, but at
    least their deepest lower edge; for a sea-surface raster, half the median wavelength of its
    energy spectrum (:func:`~.surface.surface_width_km`); for a point
    source, the hump diameter. Dominant wavelength ``~ 2 x width`` and period
    ``wavelength / sqrt(g h)`` with ``h`` the mean depth of the sea cells where
    ``|eta| >= threshold max|eta|`` (rule of thumb, common practice, no source).

    Warns (:class:`~tsunamifocus.errors.SourceWarning`) when more than ``LAND_SHARE_WARNING`` of
    the displacement lies on land or no data (:attr:`SourceSummary.land_note`).
    """
    src = source if isinstance(source, SurfaceSource) else _as_rupture(source)
    GridInfo.from_dataarray(depth)  # checks the grid convention (raises on a bad grid)
    e = np.asarray(eta.values, dtype=float)
    dep = np.asarray(depth.values, dtype=float)
    sea = sea_mask(dep)
    es = np.where(sea, e, 0.0)
    amax = float(np.max(np.abs(es))) if es.size else 0.0
    sig = sea & (np.abs(es) >= threshold * amax) if amax > 0 else sea & False
    h = float(np.mean(dep[sig])) if np.any(sig) else float("nan")
    energy = potential_energy(eta, depth)
    details: dict[str, Any] = {}
    if isinstance(src, SurfaceSource):
        segs = []
        width = surface_width_km(eta, depth)
        mw = m0 = mean_slip = mu = float("nan")
        kind = "surface"
        details = {"file": src.origin, "block_factor": int(eta.attrs.get("block_factor", 1)),
                   "inside_fraction": float(eta.attrs.get("inside_fraction", float("nan")))}
    elif isinstance(src, SubfaultRupture):
        segs = []
        slips = np.asarray(src.slips_m)
        tops = np.array([float(s.top_depth_km) for s in src.segments])
        length = src.length_km
        # horizontal width of the slipping area, at least its deepest lower edge (as for one rectangle)
        width = max(src.horizontal_width_km, max(s.bottom_depth_km for s in src.segments))
        mw, m0, mean_slip = src.mw, src.moment_nm, src.mean_slip_m
        mu = float(np.mean([s.rigidity_pa for s in src.segments]))
        kind = "subfaults"
        details = {"table": src.origin, "depth_at": src.depth_at, "n_subfaults": src.n_subfaults,
                   "n_slipping": len(src.segments), "slip_min_m": float(slips.min()),
                   "slip_max_m": float(slips.max()), "top_depth_min_km": float(tops.min()),
                   "top_depth_max_km": float(tops.max()), "length_km": length, "width_km": src.width_km}
    elif isinstance(src, PointSource):
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
    share = land_share(eta, depth)
    out = SourceSummary(
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
        details=details,
        land_share=share,
        geometry_notes=[n for n in str(eta.attrs.get("source_notes", "")).split(" | ") if n],
    )
    if out.land_note:
        warnings.warn(f"source {src.name!r}: {out.land_note}", SourceWarning, stacklevel=2)
    return out
