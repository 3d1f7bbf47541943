"""Scenario files: one TOML file describing a whole screening run, validated with clear errors.

A scenario names the bathymetry, one or more earthquake sources, the ray settings, the
coastline, points of interest, the output folder and (optionally) an uncertainty ensemble.
The full schema (every key, type, unit, default and range) is documented in
``docs/scenario.md``; the tables below (``_SPEC``) are its single machine-readable source.

Rules
-----
* Parsed with the standard library (:mod:`tomllib`); the file must be UTF-8 (a leading BOM is
  accepted).
* Unknown sections and keys are errors naming the key and its section and suggesting the
  closest valid name (:mod:`difflib`).
* Every value is type- and range-checked; the message gives the unit and, for files, the line.
* Relative paths resolve against the folder of the scenario file.
* :meth:`Scenario.to_dict` gives every parameter after defaults (for the run manifest) and
  :func:`scenario_from_dict` rebuilds the same :class:`Scenario` from it.

Example
-------
>>> sc = parse_scenario("sample_scenarios/demo.toml")          # doctest: +SKIP
>>> sc.rays.count, sc.sources[0].segments[0].dip_deg           # doctest: +SKIP
(20000, 12.0)
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import math
import os
import re
import tomllib
import unicodedata
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..cautions import caution_lines
from ..constants import DEFAULTS, MAX_RAYS, MAX_ROTATIONS, MIN_RAYS, ROTATIONS_PAST_PREDICTABILITY, STOP_DEPTH_M
from ..errors import MESSAGE_VALUE_CHARS, DataFileError, InputError, ScenarioError, cut
from .runfolder import safe_name
from .subfaults import read_subfault_table
from .textfile import read_utf8_text

__all__ = ['Scenario', 'BathymetryConfig', 'FaultSegmentConfig', 'SourceConfig', 'RaysConfig', 'FocusingConfig', 'CoastConfig', 'PointOfInterest', 'OutputConfig', 'EnsembleConfig', 'parse_scenario', 'scenario_from_dict', 'check_ray_count', 'scenario_schema', 'scenario_table_markdown']

#: Sane moment-magnitude range accepted without ``force = true`` (issue "Sources"); with
#: ``force`` the wider physical range below is accepted.
MAGNITUDE_RANGE = (6.5, 9.6)
MAGNITUDE_RANGE_FORCED = (4.0, 10.0)


# ---------------------------------------------------------------------------------------------
# Result dataclasses
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class BathymetryConfig:
    """``[bathymetry]``: the grid to load.

    Attributes
    ----------
    path : pathlib.Path
        Absolute path of the grid file (GeoTIFF, NetCDF or ESRI ASCII grid).
    variable : str or None
        NetCDF variable name (None: the only 2-D variable).
    values : {"auto", "elevation", "depth"}
        Sign convention of the file's values.
    crop : (xmin, ymin, xmax, ymax) or None
        Crop box in the grid's own CRS units (degrees or metres).
    crop_margin_km : float
        Margin added around ``crop`` [km].
    resample_km : float or None
        Coarser target spacing [km] (area average), None to keep the native spacing.
    smooth_km : float or None
        Optional low-pass pre-smoothing length [km].
    max_memory_gb : float
        Memory limit for loading and tracing [GB].
    """

    path: Path
    variable: str | None = None
    values: str = DEFAULTS["bathymetry"]["values"]  # type: ignore[assignment]
    crop: tuple[float, float, float, float] | None = None
    crop_margin_km: float = DEFAULTS["bathymetry"]["crop_margin_km"]  # type: ignore[assignment]
    resample_km: float | None = None
    smooth_km: float | None = None
    max_memory_gb: float = DEFAULTS["bathymetry"]["max_memory_gb"]  # type: ignore[assignment]


@dataclass(frozen=True)
class FaultSegmentConfig:
    """One rectangular fault segment (``[[source.segment]]``).

    Attributes
    ----------
    trace : ((lon, lat), (lon, lat))
        End points of the top edge [degrees]; strike runs from the first to the second point and
        the fault dips to the right of it.
    top_depth_km : float
        Depth of the top edge below the sea floor [km].
    dip_deg : float
        Dip angle [degrees], in (0, 90].
    rake_deg : float
        Rake [degrees], 90 = pure thrust.
    width_km : float or None
        Down-dip width [km]; None: from the magnitude scaling relation.
    slip_m : float or None
        Uniform slip [m] (exactly one of ``slip_m`` / ``magnitude`` unless the source gives a
        total magnitude).
    magnitude : float or None
        Moment magnitude Mw of this segment.
    rigidity_pa : float
        Crustal rigidity [Pa].
    """

    trace: tuple[tuple[float, float], tuple[float, float]]
    top_depth_km: float
    dip_deg: float
    rake_deg: float = DEFAULTS["source.segment"]["rake_deg"]  # type: ignore[assignment]
    width_km: float | None = None
    slip_m: float | None = None
    magnitude: float | None = None
    rigidity_pa: float = DEFAULTS["source.segment"]["rigidity_pa"]  # type: ignore[assignment]


@dataclass(frozen=True)
class SourceConfig:
    """One ``[[source]]``: a fault rupture (one or more segments) or a point source.

    Attributes
    ----------
    name : str
        Unique source name.
    kind : {"fault", "point", "subfaults", "surface"}
        Source type: a fault of rectangular segments, a point hump, a subfault table (CSV of
        subfaults with variable slip) or an initial sea-surface raster (GeoTIFF/NetCDF).
    force : bool
        Accept magnitudes outside 6.5-9.6 (and let the source module accept geometries far from
        the scaling relation).
    segments : tuple of FaultSegmentConfig
        Fault segments (kind "fault").
    magnitude : float or None
        Total Mw of a multi-segment rupture (kind "fault"): segments then give no magnitude; those
        without ``slip_m`` share the moment left as one uniform slip.
    lon, lat : float or None
        Centre of a point source [degrees].
    radius_km : float or None
        Radius of a point source's initial hump [km].
    amplitude_m : float or None
        Peak initial sea-surface displacement of a point source [m].
    path : pathlib.Path or None
        Subfault table (kind "subfaults") or sea-surface raster (kind "surface"), absolute.
    depth_at : {"top", "centroid"} or None
        Kind "subfaults": whether the table's lon, lat, depth_km give the middle of each
        subfault's top edge or its centroid.
    variable : str or None
        Kind "surface": the NetCDF variable (None: the only 2-D variable).
    """

    name: str
    kind: str = DEFAULTS["source"]["kind"]  # type: ignore[assignment]
    force: bool = DEFAULTS["source"]["force"]  # type: ignore[assignment]
    segments: tuple[FaultSegmentConfig, ...] = ()
    magnitude: float | None = None
    lon: float | None = None
    lat: float | None = None
    radius_km: float | None = None  # point sources only (filled from DEFAULTS by the parser)
    amplitude_m: float | None = None  # point sources only (filled from DEFAULTS by the parser)
    path: Path | None = None  # subfault tables and sea-surface rasters
    depth_at: str | None = None  # subfault tables only
    variable: str | None = None  # sea-surface rasters only


@dataclass(frozen=True)
class RaysConfig:
    """``[rays]``: ray-tracing settings (count, stop isobath [m], time limit [h], step [s], seed).

    ``count`` None means "auto": the run decides (see :mod:`tsunamifocus.studies.settings`) and
    records the number it used in its manifest and output scenario. ``rotations`` None means
    "auto": one fan, or :data:`tsunamifocus.constants.ROTATIONS_PAST_PREDICTABILITY`
    rotated fans averaged when the first fan's rays are past their predictability.
    """

    count: int | None = None
    stop_depth_m: float = DEFAULTS["rays"]["stop_depth_m"]  # type: ignore[assignment]
    max_time_h: float = DEFAULTS["rays"]["max_time_h"]  # type: ignore[assignment]
    step_s: float | None = None
    seed: int = DEFAULTS["rays"]["seed"]  # type: ignore[assignment]
    rotations: int | None = None


@dataclass(frozen=True)
class FocusingConfig:
    """``[focusing]``: reference-bathymetry low-pass length [km] and optional wave period [s]."""

    reference_smooth_km: float | None = None
    period_s: float | None = None


@dataclass(frozen=True)
class CoastConfig:
    """``[coast]``: where the coastline comes from and how it is segmented.

    Attributes
    ----------
    source : str or pathlib.Path
        ``"grid"`` (the isobath contour of the bathymetry) or the absolute path of a GeoJSON /
        GeoPackage line or polygon file (TOML key ``from``).
    layer : str or None
        Layer name in a multi-layer file.
    name_field : str or None
        Attribute giving segment names.
    isobath_m : float
        Depth of the coastal contour [m]; defaults to ``rays.stop_depth_m``.
    segment_km : float or None
        Segment length along the coast [km]; None: chosen from the grid spacing by the run.
    min_rays : int
        Fewest contributing rays for a segment to count as reliable.
    region : (lon_min, lat_min, lon_max, lat_max) or None
        Coast of interest [degrees]: segments, rankings and summaries are restricted to it while
        rays still travel the whole grid. ``lon_min > lon_max`` (after bringing both into one
        360-degree turn) is a box across the antimeridian; -180..180 and 0..360 numbers both work.
    region_file : pathlib.Path or None
        Polygon file (GeoJSON / GeoPackage) further restricting the coast of interest.
    max_distance_m : float or None
        Largest distance [m] from a ray's end to its segment; None: chosen by the arrivals step.
    point_max_distance_km : float
        Search radius [km] of a point of interest: its first arrival (and lensing-map value) is read
        at the nearest sea cell deeper than the stop isobath within it, its segment values at the
        nearest segment within it; farther away the value is left out with a warning.
    """

    source: str | Path = DEFAULTS["coast"]["from"]  # type: ignore[assignment]
    layer: str | None = None
    name_field: str | None = None
    isobath_m: float = STOP_DEPTH_M
    segment_km: float | None = None
    min_rays: int = DEFAULTS["coast"]["min_rays"]  # type: ignore[assignment]
    region: tuple[float, float, float, float] | None = None
    region_file: Path | None = None
    max_distance_m: float | None = None
    point_max_distance_km: float = DEFAULTS["coast"]["point_max_distance_km"]  # type: ignore[assignment]


@dataclass(frozen=True)
class PointOfInterest:
    """``[[point]]``: a named place (harbour entrance, gauge) at lon/lat [degrees]."""

    name: str
    lon: float
    lat: float


@dataclass(frozen=True)
class OutputConfig:
    """``[output]``: output folder (absolute), number of hotspots listed, figures/report switches, the
    interval [min] of the isochrones between the hourly ones."""

    folder: Path
    top_k: int = DEFAULTS["output"]["top_k"]  # type: ignore[assignment]
    figures: bool = DEFAULTS["output"]["figures"]  # type: ignore[assignment]
    report: bool = DEFAULTS["output"]["report"]  # type: ignore[assignment]
    isochrone_step_min: float = DEFAULTS["output"]["isochrone_step_min"]  # type: ignore[assignment]


@dataclass(frozen=True)
class EnsembleConfig:
    """``[ensemble]``: uncertainty ensemble (``members = 0`` switches it off).

    Source perturbations are half-widths of uniform ranges centred on the nominal value
    (``strike_deg = 5`` draws the strike from nominal +/- 5 degrees).

    Attributes
    ----------
    members : int
        Number of members (0 = no ensemble).
    seed : int
        Root seed; member ``i`` uses ``numpy.random.SeedSequence(seed).spawn``-style child ``i``.
    bathy_rms : float
        Relative rms of the smooth random depth error (fraction, 0.03 = 3 %).
    bathy_corr_km : float
        Correlation length of the depth error [km].
    strike_deg, dip_deg : float
        Half-ranges of strike and dip perturbations [degrees].
    along_km, across_km : float
        Half-ranges of the source shift along / across strike [km].
    magnitude : float
        Half-range of the magnitude perturbation [Mw units].
    launch_jitter_deg : float
        Half-range of the rotation of the ray fan [degrees].
    scheduler : str
        ``"local"`` (in-process Dask scheduler on this machine) or the address of a running
        dask.distributed scheduler (e.g. ``"tcp://10.0.0.5:8786"``).
    """

    members: int = DEFAULTS["ensemble"]["members"]  # type: ignore[assignment]
    seed: int = DEFAULTS["ensemble"]["seed"]  # type: ignore[assignment]
    bathy_rms: float = DEFAULTS["ensemble"]["bathy_rms"]  # type: ignore[assignment]
    bathy_corr_km: float = DEFAULTS["ensemble"]["bathy_corr_km"]  # type: ignore[assignment]
    strike_deg: float = DEFAULTS["ensemble"]["strike_deg"]  # type: ignore[assignment]
    dip_deg: float = DEFAULTS["ensemble"]["dip_deg"]  # type: ignore[assignment]
    along_km: float = DEFAULTS["ensemble"]["along_km"]  # type: ignore[assignment]
    across_km: float = DEFAULTS["ensemble"]["across_km"]  # type: ignore[assignment]
    magnitude: float = DEFAULTS["ensemble"]["magnitude"]  # type: ignore[assignment]
    launch_jitter_deg: float = DEFAULTS["ensemble"]["launch_jitter_deg"]  # type: ignore[assignment]
    scheduler: str = DEFAULTS["ensemble"]["scheduler"]  # type: ignore[assignment]


@dataclass(frozen=True)
class Scenario:
    """A validated scenario with every default filled in.

    ``file`` (the scenario file it came from, if any) is not a parameter: it is excluded from
    comparisons and from :meth:`to_dict`.
    """

    name: str
    description: str
    bathymetry: BathymetryConfig
    sources: tuple[SourceConfig, ...]
    rays: RaysConfig
    focusing: FocusingConfig
    coast: CoastConfig
    points: tuple[PointOfInterest, ...]
    output: OutputConfig
    ensemble: EnsembleConfig
    file: Path | None = field(default=None, compare=False)

    def to_dict(self) -> dict[str, Any]:
        """Return every parameter (after defaults) as plain JSON-compatible data.

        Paths are absolute strings, tuples become lists, unset optional values are ``None``.
        The layout is that of the scenario file (sections and keys), in canonical form: fault
        sources always list their segments under ``segment``.
        """
        b = self.bathymetry
        out: dict[str, Any] = {
            "scenario": {"name": self.name, "description": self.description},
            "bathymetry": {
                "path": str(b.path),
                "variable": b.variable,
                "values": b.values,
                "crop": None if b.crop is None else list(b.crop),
                "crop_margin_km": b.crop_margin_km,
                "resample_km": b.resample_km,
                "smooth_km": b.smooth_km,
                "max_memory_gb": b.max_memory_gb,
            },
            "source": [_source_to_dict(s) for s in self.sources],
            "rays": dataclasses.asdict(self.rays),
            "focusing": dataclasses.asdict(self.focusing),
            "coast": {
                "from": str(self.coast.source),
                "layer": self.coast.layer,
                "name_field": self.coast.name_field,
                "isobath_m": self.coast.isobath_m,
                "segment_km": self.coast.segment_km,
                "min_rays": self.coast.min_rays,
                "region": None if self.coast.region is None else list(self.coast.region),
                "region_file": None if self.coast.region_file is None else str(self.coast.region_file),
                "max_distance_m": self.coast.max_distance_m,
                "point_max_distance_km": self.coast.point_max_distance_km,
            },
            "point": [{"name": p.name, "lon": p.lon, "lat": p.lat} for p in self.points],
            "output": {
                "folder": str(self.output.folder),
                "top_k": self.output.top_k,
                "figures": self.output.figures,
                "report": self.output.report,
                "isochrone_step_min": self.output.isochrone_step_min,
            },
            "ensemble": dataclasses.asdict(self.ensemble),
        }
        return out

    def to_toml(self) -> str:
        """Return the scenario (after defaults) as TOML text that :func:`parse_scenario` reads back.

        The text starts with the caution as comment lines; unset optional values are left out.
        """
        head = ["# Effective tsunamifocus scenario (every parameter after defaults)."]
        head += ["# " + line if line else "#" for line in caution_lines(width=96)]
        return "\n".join(head) + "\n\n" + _dump_toml(self.to_dict())

    @property
    def seeds(self) -> dict[str, int]:
        """Random seeds used by a run of this scenario (for the manifest)."""
        return {"rays": self.rays.seed, "ensemble": self.ensemble.seed}

    @property
    def input_files(self) -> dict[str, Path]:
        """Input data files (role -> absolute path): the bathymetry and, if any, the coastline file."""
        files = {"bathymetry": self.bathymetry.path}
        for s in self.sources:
            if s.path is not None:
                files[f"source {s.name}"] = s.path
        if isinstance(self.coast.source, Path):
            files["coastline"] = self.coast.source
        if self.coast.region_file is not None:
            files["coast_region"] = self.coast.region_file
        return files


def _source_to_dict(s: SourceConfig) -> dict[str, Any]:
    d: dict[str, Any] = {"name": s.name, "kind": s.kind, "force": s.force}
    if s.kind == "fault":
        d["magnitude"] = s.magnitude
        d["segment"] = []
        for g in s.segments:
            gd = dataclasses.asdict(g)
            gd["trace"] = [list(p) for p in g.trace]
            d["segment"].append(gd)
    elif s.kind == "subfaults":
        d.update(path=str(s.path), depth_at=s.depth_at)
    elif s.kind == "surface":
        d.update(path=str(s.path), variable=s.variable)
    else:
        d.update(lon=s.lon, lat=s.lat, radius_km=s.radius_km, amplitude_m=s.amplitude_m)
    return d


# ---------------------------------------------------------------------------------------------
# Schema
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Key:
    """One key of the schema."""

    name: str
    kind: str  # float int str bool path choice box trace scheduler coastfrom
    doc: str
    unit: str = ""
    default: Any = None
    required: bool = False
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False
    choices: tuple[str, ...] = ()
    default_doc: str | None = None


def _f(name, doc, unit, default=None, lo=None, hi=None, lo_open=False, hi_open=False, **kw) -> _Key:
    return _Key(name, "float", doc, unit, default, lo=lo, hi=hi, lo_open=lo_open, hi_open=hi_open, **kw)


def _i(name, doc, unit="", default=None, lo=None, hi=None, **kw) -> _Key:
    return _Key(name, "int", doc, unit, default, lo=lo, hi=hi, **kw)


_LON = dict(lo=-180.0, hi=360.0)
_LAT = dict(lo=-90.0, hi=90.0)
_SEED_MAX = 2**63 - 1

_SEGMENT_KEYS: tuple[_Key, ...] = (
    _Key("trace", "trace", "top-edge end points [[lon, lat], [lon, lat]]; fault dips to the right",
         "degrees", required=True),
    _f("top_depth_km", "depth of the top edge below the sea floor", "km", required=True, lo=0.0, hi=100.0),
    _f("dip_deg", "dip angle", "degrees", required=True, lo=0.0, hi=90.0, lo_open=True),
    _f("rake_deg", "rake (90 = pure thrust)", "degrees", lo=-180.0, hi=180.0),
    _f("width_km", "down-dip width (unset: from the magnitude scaling relation)", "km",
       lo=0.0, hi=1000.0, lo_open=True, default_doc="from scaling relation"),
    _f("slip_m", "uniform slip; give slip_m or magnitude", "m", lo=0.0, hi=100.0, lo_open=True,
       default_doc="unset"),
    _f("magnitude", "moment magnitude of this segment; give slip_m or magnitude", "Mw",
       lo=MAGNITUDE_RANGE[0], hi=MAGNITUDE_RANGE[1], default_doc="unset"),
    _f("rigidity_pa", "crustal rigidity", "Pa", lo=1.0e9, hi=2.0e11),
)

_SOURCE_KEYS: tuple[_Key, ...] = (
    _Key("name", "str", "unique source name", required=True),
    _Key("kind", "choice", "source type: fault segments, a point hump, a subfault table (CSV), an initial "
         "sea-surface raster", choices=("fault", "point", "subfaults", "surface")),
    _Key("force", "bool", "accept magnitudes outside 6.5-9.6 (4.0-10.0 then)"),
    _f("magnitude", "fault: total Mw of the rupture; segments without slip_m share the moment left "
       "as one uniform slip", "Mw", lo=MAGNITUDE_RANGE[0], hi=MAGNITUDE_RANGE[1], default_doc="unset"),
    _f("lon", "point: centre longitude", "degrees", required=True, **_LON),
    _f("lat", "point: centre latitude", "degrees", required=True, **_LAT),
    _f("radius_km", "point: radius of the initial hump", "km", lo=0.0, hi=2000.0, lo_open=True),
    _f("amplitude_m", "point: peak initial sea-surface displacement (negative = trough), not 0", "m",
       lo=-100.0, hi=100.0),
    _Key("path", "path", "subfaults: the subfault table (CSV); surface: the sea-surface raster (GeoTIFF or "
         "NetCDF, any CRS, metres positive up); relative to the scenario file", required=True),
    _Key("depth_at", "choice", "subfaults: lon, lat and depth_km of each row give the middle of the top edge "
         "or the centroid of the subfault", required=True, choices=("top", "centroid")),
    _Key("variable", "str", "surface: NetCDF variable", default_doc="the only 2-D variable"),
)
_POINT_SOURCE_ONLY = ("lon", "lat", "radius_km", "amplitude_m")
_TABLE_SOURCE_ONLY = ("path", "depth_at", "variable")
#: Keys of the kinds read from a file (besides name, kind, force).
_FILE_SOURCE_KEYS = {"subfaults": ("path", "depth_at"), "surface": ("path", "variable")}

_SPEC: dict[str, tuple[_Key, ...]] = {
    "scenario": (
        _Key("name", "str", "scenario name", default_doc="file name without .toml"),
        _Key("description", "str", "free text"),
    ),
    "bathymetry": (
        _Key("path", "path", "grid file (GeoTIFF, NetCDF, ESRI ASCII); relative to the scenario file",
             required=True),
        _Key("variable", "str", "NetCDF variable name", default_doc="the only 2-D variable"),
        _Key("values", "choice", "sign convention of the values",
             choices=("auto", "elevation", "depth")),
        _Key("crop", "box", "crop box [xmin, ymin, xmax, ymax] in the grid CRS units "
             "([120, 0, -110, 65] = 120..250 E across the antimeridian)",
             "grid CRS units", default_doc="no crop"),
        _f("crop_margin_km", "margin around the crop box", "km", lo=0.0, hi=5000.0),
        _f("resample_km", "coarser target spacing (area average)", "km", lo=0.0, hi=500.0, lo_open=True,
           default_doc="native spacing"),
        _f("smooth_km", "low-pass pre-smoothing length", "km", lo=0.0, hi=1000.0, lo_open=True,
           default_doc="no smoothing"),
        _f("max_memory_gb", "memory limit for loading and tracing", "GB", lo=0.0, hi=4096.0,
           lo_open=True),
    ),
    "source": _SOURCE_KEYS,
    "rays": (
        _i("count", "number of rays per source", "rays", lo=MIN_RAYS, hi=MAX_RAYS,
           default_doc="auto (the run summary says what was chosen and why)"),
        _f("stop_depth_m", "stop isobath: rays end where the depth falls below it", "m",
           lo=0.0, hi=2000.0, lo_open=True),
        _f("max_time_h", "travel-time limit", "h", lo=0.0, hi=72.0, lo_open=True),
        _f("step_s", "integration time step", "s", lo=0.0, hi=3600.0, lo_open=True,
           default_doc="chosen from the grid spacing"),
        _i("seed", "random seed of the ray fan", "", lo=0, hi=_SEED_MAX),
        _i("rotations", "rotated copies of the ray fan traced and averaged", "", lo=1, hi=MAX_ROTATIONS,
           default_doc=f"auto: 1, or {ROTATIONS_PAST_PREDICTABILITY} when the rays are past their "
                       "predictability (across an ocean)"),
    ),
    "focusing": (
        _f("reference_smooth_km", "low-pass length of the reference bathymetry (lensing factor)", "km",
           lo=0.0, hi=5000.0, lo_open=True, default_doc="the deep-water wavelength at the dominant period"),
        _f("period_s", "dominant wave period (sets the caustic regularisation)", "s", lo=0.0, hi=36000.0,
           lo_open=True, default_doc="from the source width"),
    ),
    "coast": (
        _Key("from", "coastfrom", '"grid" (isobath contour of the bathymetry) or a GeoJSON/GeoPackage '
             "file, relative to the scenario file"),
        _Key("layer", "str", "layer name in a multi-layer file", default_doc="first layer"),
        _Key("name_field", "str", "attribute giving segment names", default_doc="no names"),
        _f("isobath_m", "depth of the coastal contour", "m", lo=0.0, hi=2000.0, lo_open=True,
           default_doc="rays.stop_depth_m"),
        _f("segment_km", "segment length along the coast", "km", lo=0.0, hi=1000.0, lo_open=True,
           default_doc="2 grid cells, at least 10 km"),
        _i("min_rays", "fewest contributing rays for a reliable segment", "rays", lo=1, hi=1_000_000),
        _Key("region", "region", "coast of interest [lon_min, lat_min, lon_max, lat_max]; lon_min > lon_max "
             "crosses the antimeridian", "degrees", default_doc="the whole grid"),
        _Key("region_file", "path", "polygon file (GeoJSON/GeoPackage) restricting the coast of interest; "
             "relative to the scenario file", default_doc="none"),
        _f("max_distance_m", "largest distance from a ray's end to its coastline segment", "m", lo=0.0,
           hi=1.0e6, lo_open=True, default_doc="3 grid cells + 1.5 x the coastline's offset from the stop isobath"),
        _f("point_max_distance_km", "search radius of a point of interest: its first arrival is read at the "
           "nearest sea cell deeper than the stop isobath, its segment values at the nearest segment, within "
           "this distance (farther: no value and a warning)", "km", lo=0.0, hi=20000.0, lo_open=True),
    ),
    "point": (
        _Key("name", "str", "unique point name", required=True),
        _f("lon", "longitude", "degrees", required=True, **_LON),
        _f("lat", "latitude", "degrees", required=True, **_LAT),
    ),
    "output": (
        _Key("folder", "path", "output folder; relative to the scenario file", default_doc="<name>_results"),
        _i("top_k", "number of hotspots listed", "segments", lo=1, hi=10000),
        _Key("figures", "bool", "write PNG figures"),
        _Key("report", "bool", "write the HTML/PDF appendix"),
        _f("isochrone_step_min", "interval of the travel-time isochrones between the hourly ones (60: hourly "
           "only)", "min", lo=1.0, hi=1440.0),
    ),
    "ensemble": (
        _i("members", "number of ensemble members (0 = off)", "members", lo=0, hi=1_000_000),
        _i("seed", "root seed of the ensemble", "", lo=0, hi=_SEED_MAX),
        _f("bathy_rms", "relative rms of smooth random depth errors", "fraction of depth",
           lo=0.0, hi=0.5),
        _f("bathy_corr_km", "correlation length of the depth errors", "km", lo=0.0, hi=5000.0,
           lo_open=True),
        _f("strike_deg", "strike half-range", "degrees", lo=0.0, hi=90.0),
        _f("dip_deg", "dip half-range", "degrees", lo=0.0, hi=45.0),
        _f("along_km", "half-range of the shift along strike", "km", lo=0.0, hi=1000.0),
        _f("across_km", "half-range of the shift across strike", "km", lo=0.0, hi=500.0),
        _f("magnitude", "magnitude half-range", "Mw", lo=0.0, hi=1.0),
        _f("launch_jitter_deg", "half-range of the ray-fan rotation", "degrees", lo=0.0, hi=10.0),
        _Key("scheduler", "scheduler", '"local" or a dask.distributed scheduler address'),
    ),
}
_ARRAY_SECTIONS = ("source", "point")
_SUBSECTION = "segment"  # [[source.segment]]


def _with_defaults(section: str, keys: tuple[_Key, ...]) -> tuple[_Key, ...]:
    """The keys of ``section`` with their defaults from :data:`tsunamifocus.constants.DEFAULTS`."""
    table = DEFAULTS.get(section, {})
    return tuple(dataclasses.replace(k, default=table[k.name]) if k.name in table else k for k in keys)


_SEGMENT_KEYS = _with_defaults("source.segment", _SEGMENT_KEYS)
_SOURCE_KEYS = _with_defaults("source", _SOURCE_KEYS)
_SPEC = {sec: (_SOURCE_KEYS if sec == "source" else _with_defaults(sec, keys)) for sec, keys in _SPEC.items()}


def scenario_schema() -> dict[str, list[dict[str, Any]]]:
    """Return the schema as data: section -> list of keys with type, unit, default, range, doc.

    The section ``source.segment`` holds the keys of ``[[source.segment]]``.
    """
    out: dict[str, list[dict[str, Any]]] = {}
    sections = dict(_SPEC)
    sections["source.segment"] = _SEGMENT_KEYS
    for sec, keys in sections.items():
        out[sec] = [
            {
                "key": k.name,
                "type": k.kind,
                "unit": k.unit,
                "required": k.required,
                "default": k.default_doc if k.default_doc is not None else k.default,
                "range": _range_text(k) if k.kind in ("float", "int") else None,
                "choices": list(k.choices) or None,
                "doc": k.doc,
            }
            for k in keys
        ]
    return out


_DOC_TYPES = {"float": "number", "int": "integer", "str": "string", "path": "path", "choice": "string",
              "box": "array of 4 numbers", "trace": "array of 2 [lon, lat]", "bool": "boolean",
              "coastfrom": "string or path", "scheduler": "string", "region": "array of 4 numbers"}


def _doc_default(k: _Key) -> str:
    if k.required:
        return "**required**"
    if k.default_doc is not None:
        return k.default_doc.replace("<", "&lt;").replace(">", "&gt;")
    v = k.default
    if isinstance(v, bool):
        return f"`{'true' if v else 'false'}`"
    if isinstance(v, str):
        return f"`{json.dumps(v, ensure_ascii=False)}`"
    if isinstance(v, int):
        return f"`{v}`"
    if isinstance(v, float):
        return f"`{v:g}`"
    return ""


def _doc_allowed(k: _Key) -> str:
    if k.choices:
        return " / ".join(f"`{json.dumps(c)}`" for c in k.choices)
    if k.kind not in ("float", "int"):
        return ""
    if k.hi == _SEED_MAX:
        return f"{'>' if k.lo_open else '>='} {_num_txt(k.lo)} and <= 2^63 - 1"
    return _range_text(k)


def scenario_table_markdown(section: str) -> str:
    """The Markdown table of one section's keys as docs/scenario.md shows it (generated, not edited).

    Parameters
    ----------
    section : str
        A section of :func:`scenario_schema` (``"rays"``, ``"source.segment"`` ...).
    """
    keys = _SEGMENT_KEYS if section == "source.segment" else _SPEC[section]
    rows = ["| key | type | unit | default | allowed | meaning |", "|---|---|---|---|---|---|"]
    for k in keys:
        rows.append(f"| `{k.name}` | {_DOC_TYPES[k.kind]} | {k.unit} | {_doc_default(k)} | {_doc_allowed(k)} | {k.doc} |")
    return "\n".join(rows)


# ---------------------------------------------------------------------------------------------
# Locating keys in the file (for line numbers in messages)
# ---------------------------------------------------------------------------------------------

_HDR_ARR = re.compile(r"^\s*\[\[\s*([^\]]+?)\s*\]\]")
_HDR_TAB = re.compile(r"^\s*\[\s*([^\]]+?)\s*\]")
_KEYLINE = re.compile(r"^\s*([A-Za-z0-9_\-]+|\"[^\"]*\"|'[^']*')\s*=")


class _Where:
    """Best-effort map from (section, key) to the line of the file where it is written."""

    def __init__(self, origin: str, text: str | None = None) -> None:
        self.origin = origin
        self.lines: dict[tuple, int] = {}
        if text is None:
            return
        counts: dict[tuple, int] = {}
        sect: tuple = ()
        for n, line in enumerate(text.splitlines(), start=1):
            m = _HDR_ARR.match(line)
            if m:
                parts = [p.strip().strip("\"'") for p in m.group(1).split(".")]
                if len(parts) == 1:
                    i = counts.get((parts[0],), 0)
                    counts[(parts[0],)] = i + 1
                    sect = (parts[0], i)
                elif len(parts) == 2 and len(sect) >= 2 and sect[0] == parts[0]:
                    parent = sect[:2]
                    i = counts.get(parent + (parts[1],), 0)
                    counts[parent + (parts[1],)] = i + 1
                    sect = parent + (parts[1], i)
                else:
                    sect = tuple(parts)
                self.lines[(sect, None)] = n
                continue
            m = _HDR_TAB.match(line)
            if m and not line.lstrip().startswith("[["):
                sect = tuple(p.strip().strip("\"'") for p in m.group(1).split("."))
                self.lines[(sect, None)] = n
                continue
            m = _KEYLINE.match(line)
            if m:
                self.lines.setdefault((sect, m.group(1).strip("\"'")), n)

    def prefix(self, sect: tuple, key: str | None = None) -> str:
        n = self.lines.get((sect, key)) or self.lines.get((sect, None))
        return f"{self.origin}: line {n}: " if n else f"{self.origin}: "


def _label(sect: tuple, names: Mapping[tuple, str] | None = None) -> str:
    """Human label of a section: ``[rays]``, ``[[source]] #2 'north'``, ``[[source.segment]] #1 ...``."""
    if len(sect) == 1:
        return f"[{sect[0]}]"
    base = f"[[{sect[0]}]] #{sect[1] + 1}"
    if names and sect[:2] in names:
        base += f" {names[sect[:2]]!r}"
    if len(sect) == 4:
        base += f" [[{sect[0]}.{sect[2]}]] #{sect[3] + 1}"
    return base


# ---------------------------------------------------------------------------------------------
# Value checks
# ---------------------------------------------------------------------------------------------


def _range_text(k: _Key) -> str:
    parts = []
    if k.lo is not None:
        parts.append(f"{'>' if k.lo_open else '>='} {_num_txt(k.lo)}")
    if k.hi is not None:
        parts.append(f"{'<' if k.hi_open else '<='} {_num_txt(k.hi)}")
    unit = f" {k.unit}" if k.unit else ""
    return (" and ".join(parts) + unit) if parts else "any value"


def _num_txt(v: float) -> str:
    if isinstance(v, int):
        return str(v)
    if float(v).is_integer() and abs(v) < 1e15:
        return f"{int(v):d}"
    return f"{v:g}"


def _show(v: Any) -> str:
    if isinstance(v, str):  # quoted and cut (a 10 MB value must not become a 10 MB message); characters
        # that would break or reorder the message line are shown escaped (\u202e)
        def q(t: str) -> str:
            return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii")
                           for c in json.dumps(t, ensure_ascii=False))

        h = MESSAGE_VALUE_CHARS // 2
        if len(v) > MESSAGE_VALUE_CHARS:
            return f"{q(v[:h])[:-1]}...{q(v[-h:])[1:]} ({len(v)} characters)"
        return q(v)
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, dict):
        return "a table"
    return cut(repr(v))


class _Ctx:
    def __init__(self, where: _Where, base_dir: Path, check_files: bool = False) -> None:
        self.where = where
        self.base_dir = base_dir
        self.names: dict[tuple, str] = {}
        #: Read source files (subfault tables) while parsing: scenario files yes, manifests no.
        self.check_files = check_files

    def fail(self, sect: tuple, key: str | None, msg: str) -> ScenarioError:
        lab = _label(sect, self.names)
        head = f"{lab} {key}" if key else lab
        return ScenarioError(f"{self.where.prefix(sect, key)}{head}: {msg}")

    def bad(self, sect: tuple, k: _Key, v: Any, expected: str) -> ScenarioError:
        lab = _label(sect, self.names)
        where = self.where.prefix(sect, k.name)
        return ScenarioError(f"{where}{lab} {k.name} = {_show(v)}: expected {expected}")


def _check_number(ctx: _Ctx, sect: tuple, k: _Key, v: Any, lo=None, hi=None) -> float | int:
    lo = k.lo if lo is None else lo
    hi = k.hi if hi is None else hi
    kk = dataclasses.replace(k, lo=lo, hi=hi)
    what = f"{'an integer' if k.kind == 'int' else 'a number'} {_range_text(kk)} ({k.doc})"
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise ctx.bad(sect, k, v, what)
    v0 = v
    if k.kind == "int":
        if isinstance(v, float):
            if not (math.isfinite(v) and v.is_integer()):
                raise ctx.bad(sect, k, v, what)
            v = int(v)
    else:
        v = float(v)
        if not math.isfinite(v):
            raise ctx.bad(sect, k, v, what)
    if lo is not None and (v < lo or (k.lo_open and v == lo)):
        raise ctx.bad(sect, k, v0, what)
    if hi is not None and (v > hi or (k.hi_open and v == hi)):
        raise ctx.bad(sect, k, v0, what)
    return v


def _check_str(ctx: _Ctx, sect: tuple, k: _Key, v: Any, *, allow_newlines: bool = False) -> str:
    if not isinstance(v, str):
        raise ctx.bad(sect, k, v, f"a text string ({k.doc})")
    if k.name != "description":
        if not v.strip():
            raise ctx.bad(sect, k, v, f"a non-empty text string ({k.doc})")
        if len(v) > 200:
            raise ctx.bad(sect, k, v, "at most 200 characters")
    elif len(v) > 20000:
        raise ctx.bad(sect, k, v, "at most 20000 characters")
    bad = _hidden_char(v, allow_newlines=k.name == "description")
    if bad is not None:
        i, c = bad
        raise ctx.bad(sect, k, v, f"{'text' if k.name == 'description' else 'a single line of text'} without "
                      f"control, line-separator or direction-changing characters (U+{ord(c):04X} "
                      f"{unicodedata.name(c, 'control character')} at character {i + 1})")
    return v


#: Unicode general categories refused in names: controls (Cc), format characters such as the
#: bidirectional overrides and zero-width marks (Cf), line and paragraph separators (Zl, Zp),
#: surrogates (Cs), private use (Co) and unassigned code points (Cn) (Unicode Standard, chapter 4.5).
_HIDDEN_CATEGORIES = {"Cc", "Cf", "Zl", "Zp", "Cs", "Co", "Cn"}


def _hidden_char(v: str, *, allow_newlines: bool) -> tuple[int, str] | None:
    """First character of ``v`` that is invisible or changes the layout of a line (position, char), or None."""
    ok = "\n\t" if allow_newlines else ""
    for i, c in enumerate(v):
        if c not in ok and (unicodedata.category(c) in _HIDDEN_CATEGORIES or c == "\x7f"):
            return i, c
    return None


def _check_path(ctx: _Ctx, sect: tuple, k: _Key, v: Any) -> Path:
    if isinstance(v, Path):
        v = str(v)
    if not isinstance(v, str) or not v.strip():
        raise ctx.bad(sect, k, v, f"a file path as a text string ({k.doc})")
    if "\x00" in v:
        raise ctx.bad(sect, k, v, "a file path without NUL characters")
    p = Path(os.path.expanduser(v))
    if not p.is_absolute():
        p = ctx.base_dir / p
    return Path(os.path.normpath(p))


def _check_value(ctx: _Ctx, sect: tuple, k: _Key, v: Any) -> Any:
    kind = k.kind
    if kind in ("float", "int"):
        return _check_number(ctx, sect, k, v)
    if kind == "str":
        return _check_str(ctx, sect, k, v)
    if kind == "bool":
        if not isinstance(v, bool):
            raise ctx.bad(sect, k, v, f"true or false ({k.doc})")
        return v
    if kind == "path":
        return _check_path(ctx, sect, k, v)
    if kind == "choice":
        if not isinstance(v, str) or v not in k.choices:
            opts = " or ".join(json.dumps(c) for c in k.choices)
            hint = ""
            if isinstance(v, str):
                m = difflib.get_close_matches(v.lower(), k.choices, n=1, cutoff=0.5)
                if m:
                    hint = f"; did you mean {json.dumps(m[0])}?"
            raise ctx.bad(sect, k, v, f"one of {opts} ({k.doc}){hint}")
        return v
    if kind == "coastfrom":
        if isinstance(v, str) and v == "grid":
            return "grid"
        return _check_path(ctx, sect, k, v)
    if kind == "scheduler":
        if not isinstance(v, str) or not v.strip():
            raise ctx.bad(sect, k, v, f"a text string ({k.doc})")
        v = v.strip()
        if v == "local" or re.fullmatch(r"(tcp|tls|inproc|ucx|ws|wss)://\S+", v) or re.fullmatch(
            r"[A-Za-z0-9_.\-\[\]:]+:\d{1,5}", v
        ):
            return v
        raise ctx.bad(sect, k, v, '"local" or a scheduler address such as "tcp://10.0.0.5:8786"')
    if kind == "box":
        what = ("4 numbers [xmin, ymin, xmax, ymax] in the grid CRS units with xmin < xmax and ymin < ymax "
                "(on a lon/lat grid a box across the antimeridian is xmin 0..180, xmax -180..0, "
                "e.g. [120, 0, -110, 65] for 120..250 E)")
        if not isinstance(v, (list, tuple)) or len(v) != 4:
            raise ctx.bad(sect, k, v, what)
        if any(isinstance(a, bool) or not isinstance(a, (int, float)) or not math.isfinite(a) for a in v):
            raise ctx.bad(sect, k, v, what)
        box = tuple(float(a) for a in v)
        # xmin 0..180 with xmax -180..0 is a lon/lat box across the antimeridian
        # ([120, 0, -110, 65] = 120..250 E); the loader checks it against the grid's CRS
        across = 0.0 <= box[0] <= 180.0 and -180.0 <= box[2] < 0.0
        if not ((box[0] < box[2] or across) and box[1] < box[3]):
            raise ctx.bad(sect, k, v, what)
        return box
    if kind == "region":
        what = ("4 numbers [lon_min, lat_min, lon_max, lat_max] in degrees (lon -180..360, lat -90..90, "
                "lat_min < lat_max; lon_min > lon_max for a box across the antimeridian)")
        if not isinstance(v, (list, tuple)) or len(v) != 4:
            raise ctx.bad(sect, k, v, what)
        if any(isinstance(a, bool) or not isinstance(a, (int, float)) or not math.isfinite(a) for a in v):
            raise ctx.bad(sect, k, v, what)
        box = tuple(float(a) for a in v)
        if not (-180.0 <= box[0] <= 360.0 and -180.0 <= box[2] <= 360.0):
            raise ctx.bad(sect, k, v, what)
        if not (-90.0 <= box[1] < box[3] <= 90.0):
            raise ctx.bad(sect, k, v, what)
        if (box[2] - box[0]) % 360.0 == 0.0 and box[2] - box[0] != 360.0:
            raise ctx.bad(sect, k, v, what + " (zero width in longitude)")
        return box
    if kind == "trace":
        what = "two points [[lon, lat], [lon, lat]] in degrees (lon -180..360, lat -90..90), not equal"
        if not isinstance(v, (list, tuple)) or len(v) != 2:
            raise ctx.bad(sect, k, v, what)
        pts = []
        for p in v:
            if not isinstance(p, (list, tuple)) or len(p) != 2:
                raise ctx.bad(sect, k, v, what)
            if any(isinstance(a, bool) or not isinstance(a, (int, float)) or not math.isfinite(a) for a in p):
                raise ctx.bad(sect, k, v, what)
            lon, lat = float(p[0]), float(p[1])
            if not (-180.0 <= lon <= 360.0 and -90.0 <= lat <= 90.0):
                swapped = abs(lon) <= 90.0 and abs(lat) <= 360.0
                hint = "; are lon and lat swapped? (lon first)" if swapped else ""
                raise ctx.bad(sect, k, v, what + hint)
            pts.append((lon, lat))
        if pts[0] == pts[1]:
            raise ctx.bad(sect, k, v, what + " (zero-length trace)")
        return (pts[0], pts[1])
    raise AssertionError(kind)  # pragma: no cover


def _unknown(ctx: _Ctx, sect: tuple, key: str, valid: list[str]) -> ScenarioError:
    m = difflib.get_close_matches(key, valid, n=1, cutoff=0.6)
    hint = f"did you mean {m[0]!r}?" if m else "valid keys: " + ", ".join(valid)
    lab = _label(sect, ctx.names)
    return ScenarioError(f"{ctx.where.prefix(sect, key)}{lab}: unknown key {key!r}; {hint}")


def _table(ctx: _Ctx, sect: tuple, raw: Any, keys: tuple[_Key, ...], *, skip: tuple[str, ...] = (),
           ignore_required: tuple[str, ...] = ()) -> dict[str, Any]:
    """Validate one table against its keys; return name -> value (absent keys -> their default)."""
    if not isinstance(raw, Mapping):
        raise ctx.fail(sect, None, f"expected a table of keys, got {_show(raw)}")
    valid = [k.name for k in keys]
    for key in raw:
        if key not in valid and key not in skip:
            raise _unknown(ctx, sect, key, valid)
    out: dict[str, Any] = {}
    for k in keys:
        v = raw.get(k.name)
        if v is None:
            if k.required and k.name not in ignore_required:
                raise ctx.fail(sect, None, f"missing key {k.name!r} ({k.doc}"
                               f"{', ' + k.unit if k.unit else ''})")
            out[k.name] = k.default
        else:
            try:
                out[k.name] = _check_value(ctx, sect, k, v)
            except ScenarioError as exc:
                lon = raw.get("lon")
                if (k.name == "lat" and isinstance(lon, (int, float)) and not isinstance(lon, bool)
                        and abs(lon) <= 90 and isinstance(v, (int, float)) and abs(v) <= 360):
                    raise ScenarioError(f"{exc}; are lon and lat swapped? (lon = {_show(lon)})") from None
                raise
    return out


def _keys(section: str) -> tuple[_Key, ...]:
    return _SPEC[section]


def _key(section_keys: tuple[_Key, ...], name: str) -> _Key:
    return next(k for k in section_keys if k.name == name)


# ---------------------------------------------------------------------------------------------
# Building the Scenario
# ---------------------------------------------------------------------------------------------


def _as_list(ctx: _Ctx, name: str, raw: Any) -> list:
    if raw is None:
        return []
    if isinstance(raw, Mapping):
        raise ctx.fail((name,), None, f"must be an array of tables: write [[{name}]] (double brackets)")
    if not isinstance(raw, (list, tuple)):
        raise ctx.fail((name,), None, f"must be an array of tables [[{name}]], got {_show(raw)}")
    return list(raw)


def _check_magnitude(ctx: _Ctx, sect: tuple, k: _Key, v: Any, force: bool) -> float:
    lo, hi = MAGNITUDE_RANGE_FORCED if force else MAGNITUDE_RANGE
    try:
        return float(_check_number(ctx, sect, k, v, lo=lo, hi=hi))
    except ScenarioError as exc:
        if force or isinstance(v, bool) or not isinstance(v, (int, float)):
            raise
        lo2, hi2 = MAGNITUDE_RANGE_FORCED
        if math.isfinite(v) and lo2 <= v <= hi2:
            raise ScenarioError(
                f"{exc}; set force = true in this [[source]] to accept {lo2:.1f}-{hi2:.1f}"
            ) from None
        raise


def _build_segment(ctx: _Ctx, sect: tuple, raw: Mapping, force: bool, total_mag: bool) -> FaultSegmentConfig:
    if not isinstance(raw, Mapping):
        raise ctx.fail(sect, None, f"expected a table of keys, got {_show(raw)}")
    v = _table(ctx, sect, {k: x for k, x in raw.items() if k != "magnitude"}, _SEGMENT_KEYS,
               skip=("magnitude",))
    if raw.get("magnitude") is not None:
        mkey = _key(_SEGMENT_KEYS, "magnitude")
        v["magnitude"] = _check_magnitude(ctx, sect, mkey, raw["magnitude"], force)
    if total_mag:
        if v["magnitude"] is not None:
            raise ctx.fail(sect, None, "the source gives a total magnitude; remove magnitude from its "
                           "segments (segments may keep a slip_m; the others share the remaining moment)")
    elif (v["slip_m"] is None) == (v["magnitude"] is None):
        raise ctx.fail(sect, None, "give exactly one of slip_m (m) or magnitude (Mw) for each fault segment")
    if v["width_km"] is None and v["magnitude"] is None and not total_mag:
        raise ctx.fail(sect, None, "missing key 'width_km' (down-dip width, km): needed when slip_m is given")
    return FaultSegmentConfig(**v)


def _build_source(ctx: _Ctx, i: int, raw: Any) -> SourceConfig:
    sect = ("source", i)
    if not isinstance(raw, Mapping):
        raise ctx.fail(sect, None, f"expected a table of keys, got {_show(raw)}")
    if isinstance(raw.get("name"), str):
        ctx.names[sect] = raw["name"]
    kind = raw.get("kind", "fault")
    head = _table(ctx, sect, {k: raw[k] for k in ("name", "kind", "force") if k in raw},
                  tuple(k for k in _SOURCE_KEYS if k.name in ("name", "kind", "force")))
    kind, force = head["kind"], head["force"]
    seg_names = [k.name for k in _SEGMENT_KEYS]
    if kind == "point":
        for key in raw:
            if key in seg_names or key == _SUBSECTION:
                raise ctx.fail(sect, None, f"key {key!r} belongs to a fault source; this source has "
                               'kind = "point" (keys: name, kind, force, lon, lat, radius_km, amplitude_m)')
        for key in raw:
            if key in _TABLE_SOURCE_ONLY:
                raise ctx.fail(sect, None, f"key {key!r} belongs to a subfaults or surface source; this source "
                               'has kind = "point"')
        keys = tuple(k for k in _SOURCE_KEYS if k.name != "magnitude" and k.name not in _TABLE_SOURCE_ONLY)
        v = _table(ctx, sect, raw, keys)
        if v["amplitude_m"] == 0.0:
            raise ctx.bad(sect, _key(_SOURCE_KEYS, "amplitude_m"), raw["amplitude_m"],
                          "a non-zero number >= -100 and <= 100 m (peak initial sea-surface displacement)")
        return SourceConfig(**v)
    if kind in _FILE_SOURCE_KEYS:
        return _build_file_source(ctx, sect, raw, kind, head)
    # fault
    for key in raw:
        if key in _TABLE_SOURCE_ONLY:
            raise ctx.fail(sect, None, f"key {key!r} belongs to a subfaults or surface source; this source has "
                           f'kind = "fault" (set kind = "subfaults" or "surface", or remove {key!r})')
        if key in _POINT_SOURCE_ONLY:
            raise ctx.fail(sect, None, f"key {key!r} belongs to a point source; this source has "
                           f'kind = "fault" (add kind = "point" or remove {key!r})')
    valid = ["name", "kind", "force", "magnitude", _SUBSECTION, *seg_names]
    for key in raw:
        if key not in valid:
            raise _unknown(ctx, sect, key, valid)
    mkey = _key(_SOURCE_KEYS, "magnitude")
    segs_raw = raw.get(_SUBSECTION)
    segments: list[FaultSegmentConfig] = []
    total = None
    if segs_raw is not None:
        direct = [k for k in raw if k in seg_names and k != "magnitude" and raw[k] is not None]
        if direct:
            raise ctx.fail(sect, None, f"segment keys ({', '.join(direct)}) given both directly and in "
                           "[[source.segment]]; put them in the segments")
        if isinstance(segs_raw, Mapping) or not isinstance(segs_raw, (list, tuple)):
            raise ctx.fail(sect, None, "'segment' must be an array of tables: write [[source.segment]]")
        if not segs_raw:
            raise ctx.fail(sect, None, "a fault source needs at least one segment")
        if raw.get("magnitude") is not None:
            total = _check_magnitude(ctx, sect, mkey, raw["magnitude"], force)
        for j, sraw in enumerate(segs_raw):
            segments.append(_build_segment(ctx, sect + (_SUBSECTION, j), sraw, force, total is not None))
        if total is not None and all(g.slip_m is not None for g in segments):
            raise ctx.fail(sect, "magnitude", "every segment has a slip_m, so the total magnitude would be "
                           "unused; remove it or remove slip_m from the segments that should share it")
    else:
        if not any(k in raw for k in seg_names):
            raise ctx.fail(sect, None, "a fault source needs a trace, top_depth_km, dip_deg and slip_m or "
                           "magnitude (directly or in [[source.segment]]); for a point source set "
                           'kind = "point"')
        seg = {k: raw[k] for k in seg_names if k in raw}
        segments.append(_build_segment(ctx, sect, seg, force, False))
    return SourceConfig(name=head["name"], kind="fault", force=force, segments=tuple(segments),
                        magnitude=total)


def _build_file_source(ctx: _Ctx, sect: tuple, raw: Mapping, kind: str, head: dict) -> SourceConfig:
    """A ``[[source]]`` read from a file: a subfault table or a sea-surface raster."""
    own = _FILE_SOURCE_KEYS[kind]
    allowed = ("name", "kind", "force", *own)
    for key in raw:
        if key not in allowed:
            if key in _POINT_SOURCE_ONLY or key in _TABLE_SOURCE_ONLY or key in [k.name for k in _SEGMENT_KEYS] \
                    or key in ("magnitude", _SUBSECTION):
                raise ctx.fail(sect, None, f"key {key!r} does not apply to kind = {json.dumps(kind)} (keys: "
                               f"{', '.join(allowed)})")
            raise _unknown(ctx, sect, key, list(allowed))
    v = _table(ctx, sect, {k: raw[k] for k in own if k in raw},
               tuple(k for k in _SOURCE_KEYS if k.name in own))
    cfg = SourceConfig(name=head["name"], kind=kind, force=head["force"], path=v["path"],
                       depth_at=v.get("depth_at"), variable=v.get("variable"))
    if ctx.check_files:
        _check_source_file(ctx, sect, cfg)
    return cfg


def _check_source_file(ctx: _Ctx, sect: tuple, cfg: SourceConfig) -> None:
    """Read a subfault table now (a bad row is an error before any computation); check a raster exists."""
    assert cfg.path is not None
    if cfg.kind == "subfaults":
        try:
            read_subfault_table(cfg.path, depth_at=str(cfg.depth_at))
        except (InputError, DataFileError) as exc:
            raise ctx.fail(sect, "path", str(exc)) from None
    elif not cfg.path.is_file():
        what = "is a folder" if cfg.path.is_dir() else "not found"
        raise ctx.fail(sect, "path", f"{cfg.path}: {what}; expected a sea-surface raster (GeoTIFF or NetCDF)")


def _build(data: Mapping[str, Any], ctx: _Ctx, default_name: str | None) -> Scenario:
    if not isinstance(data, Mapping):
        raise ctx.fail((), None, "expected a table of sections")
    sections = list(_SPEC)
    all_keys: dict[str, str] = {}
    for s_name, ks in _SPEC.items():
        for k in ks:
            all_keys.setdefault(k.name, s_name)
    for key, val in data.items():
        if key in sections:
            continue
        m = difflib.get_close_matches(key, sections, n=1, cutoff=0.6)
        if m:
            hint = f"did you mean [{m[0]}]?"
        elif key in all_keys:
            hint = f"did you mean key {key!r} in section [{all_keys[key]}]?"
        else:
            hint = "valid sections: " + ", ".join(f"[{s}]" for s in sections)
        what = "section" if isinstance(val, (Mapping, list)) else "top-level key"
        origin = ctx.where.origin
        n = ctx.where.lines.get(((key,), None)) or ctx.where.lines.get(((), key)) or ctx.where.lines.get(
            ((key, 0), None))
        raise ScenarioError(f"{origin}: {'line ' + str(n) + ': ' if n else ''}unknown {what} {key!r}; {hint}")
    for name in sections:
        if name not in _ARRAY_SECTIONS and name in data and not isinstance(data[name], Mapping):
            raise ctx.fail((name,), None,
                           f"must be a table [{name}] (single brackets), got {_show(data[name])}")

    sc = _table(ctx, ("scenario",), data.get("scenario", {}), _keys("scenario"))
    name = sc["name"] or (default_name or "scenario")
    if "bathymetry" not in data:
        raise ctx.fail(("bathymetry",), None, "missing section (it needs at least path = \"grid file\")")
    bathy = BathymetryConfig(**_table(ctx, ("bathymetry",), data["bathymetry"], _keys("bathymetry")))

    src_raw = _as_list(ctx, "source", data.get("source"))
    if not src_raw:
        raise ScenarioError(f"{ctx.where.origin}: missing [[source]]: a scenario needs at least one source")
    sources = tuple(_build_source(ctx, i, s) for i, s in enumerate(src_raw))
    seen: dict[str, int] = {}
    for i, s in enumerate(sources):
        if s.name in seen:
            raise ctx.fail(("source", i), "name", f"duplicate source name {s.name!r} (also [[source]] "
                           f"#{seen[s.name] + 1}); names must be unique")
        seen[s.name] = i

    rays = RaysConfig(**_table(ctx, ("rays",), data.get("rays", {}), _keys("rays")))
    focusing = FocusingConfig(**_table(ctx, ("focusing",), data.get("focusing", {}), _keys("focusing")))
    cv = _table(ctx, ("coast",), data.get("coast", {}), _keys("coast"))
    if cv["isobath_m"] is None:
        cv["isobath_m"] = rays.stop_depth_m
    coast = CoastConfig(source=cv.pop("from"), **cv)

    points = []
    pseen: dict[str, int] = {}
    for j, praw in enumerate(_as_list(ctx, "point", data.get("point"))):
        if isinstance(praw, Mapping) and isinstance(praw.get("name"), str):
            ctx.names[("point", j)] = praw["name"]
        p = PointOfInterest(**_table(ctx, ("point", j), praw, _keys("point")))
        if p.name in pseen:
            raise ctx.fail(("point", j), "name", f"duplicate point name {p.name!r} (also [[point]] "
                           f"#{pseen[p.name] + 1}); names must be unique")
        pseen[p.name] = j
        points.append(p)

    ov = _table(ctx, ("output",), data.get("output", {}), _keys("output"))
    if ov["folder"] is None:
        ov["folder"] = Path(os.path.normpath(ctx.base_dir / f"{safe_name(name, 'scenario')}_results"))
    output = OutputConfig(**ov)
    ensemble = EnsembleConfig(**_table(ctx, ("ensemble",), data.get("ensemble", {}), _keys("ensemble")))
    if ensemble.members > 0 and sources[0].kind in _FILE_SOURCE_KEYS:
        moved = [k for k in ("strike_deg", "dip_deg", "along_km", "across_km", "magnitude")
                 if getattr(ensemble, k) != 0.0]
        if moved:
            raise ctx.fail(("ensemble",), moved[0], f"source perturbations ({', '.join(moved)}) do not apply to "
                           f'the first source, which has kind = "{sources[0].kind}"; set them to 0 (the '
                           "ensemble may still vary the bathymetry and the launch directions)")
    return Scenario(
        name=name,
        description=sc["description"],
        bathymetry=bathy,
        sources=sources,
        rays=rays,
        focusing=focusing,
        coast=coast,
        points=tuple(points),
        output=output,
        ensemble=ensemble,
    )


def _strip_none(obj: Any) -> Any:
    """Drop None values from mappings (None means "unset", as an absent TOML key)."""
    if isinstance(obj, Mapping):
        return {k: _strip_none(v) for k, v in obj.items() if v is not None}
    if isinstance(obj, (list, tuple)):
        return [_strip_none(v) for v in obj]
    return obj


def parse_scenario(path: str | os.PathLike) -> Scenario:
    """Read and validate a scenario TOML file.

    Parameters
    ----------
    path : str or path-like
        The scenario file (UTF-8 TOML). Relative paths inside it resolve against its folder.

    Returns
    -------
    Scenario
        Frozen dataclasses with every default filled in.

    Raises
    ------
    ScenarioError
        Missing/unreadable file, bad encoding or TOML syntax (with the line), unknown sections or
        keys (with a suggestion), wrong types or out-of-range values (with the unit).
    """
    p = Path(path)
    text = read_utf8_text(p, "scenario file", ScenarioError, "save the scenario file as UTF-8",
                          "a scenario .toml file")
    try:
        data = tomllib.loads(text)
    except RecursionError:
        raise ScenarioError(f"{p}: line {_deepest_line(text)}: arrays or tables nested too deeply to read; "
                            "expected a scenario as in docs/scenario.md (at most a few levels of nesting)") from None
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
        if m:
            msg = msg[: m.start()].strip()
            raise ScenarioError(f"{p}: line {m.group(1)}, column {m.group(2)}: invalid TOML: {msg}") from None
        raise ScenarioError(f"{p}: invalid TOML: {msg}") from None
    base = p.resolve().parent
    ctx = _Ctx(_Where(str(p), text), base, check_files=True)
    try:
        sc = _build(data, ctx, default_name=p.stem)
    except RecursionError:
        raise ScenarioError(f"{p}: line {_deepest_line(text)}: values nested too deeply; expected a scenario as "
                            "in docs/scenario.md") from None
    return dataclasses.replace(sc, file=p.resolve())


def check_ray_count(n: Any, origin: str = "--rays") -> int:
    """The one check of a ray count given outside a scenario file (``--rays``): the range of ``[rays] count``.

    Raises
    ------
    ScenarioError
        ``n`` is not an integer in ``[MIN_RAYS, MAX_RAYS]``.
    """
    if isinstance(n, bool) or not isinstance(n, int) or not MIN_RAYS <= n <= MAX_RAYS:
        raise ScenarioError(f"{origin} {cut(repr(n))}: expected a number of rays >= {MIN_RAYS} and <= {MAX_RAYS} "
                            "(as [rays] count)")
    return n


def _deepest_line(text: str) -> int:
    """Line of the most deeply nested ``[`` / ``{`` of a TOML text (strings and comments skipped roughly)."""
    depth = best = 0
    line = best_line = 1
    quote = None
    for i, ch in enumerate(text):
        if ch == "\n":
            line += 1
            if quote in ("#",):
                quote = None
        elif quote:
            if (quote in "\"'" and ch == quote and text[i - 1] != "\\"):
                quote = None
        elif ch in "\"'#":
            quote = ch
        elif ch in "[{":
            depth += 1
            if depth > best:
                best, best_line = depth, line
        elif ch in "]}":
            depth -= 1
    return best_line


def scenario_from_dict(d: Mapping[str, Any], base_dir: str | os.PathLike = ".", *,
                       origin: str = "scenario") -> Scenario:
    """Build a :class:`Scenario` from a dict laid out like the file (e.g. ``Scenario.to_dict()``).

    Parameters
    ----------
    d : mapping
        Sections and keys as in the scenario file; ``None`` values mean "unset" (default).
    base_dir : str or path-like
        Folder that relative paths resolve against.
    origin : str
        Name used at the start of error messages (e.g. the manifest path).

    Returns
    -------
    Scenario

    Raises
    ------
    ScenarioError
        As :func:`parse_scenario`.
    """
    ctx = _Ctx(_Where(origin), Path(base_dir).resolve())
    return _build(_strip_none(d), ctx, default_name=None)


# ---------------------------------------------------------------------------------------------
# TOML writer (for the effective scenario saved with the outputs)
# ---------------------------------------------------------------------------------------------


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ValueError("non-finite float in scenario")
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(a) for a in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def _dump_toml(d: Mapping[str, Any]) -> str:
    lines: list[str] = []

    def scalars(table: Mapping[str, Any]) -> None:
        for k, v in table.items():
            if v is None or (isinstance(v, list) and v and isinstance(v[0], Mapping)):
                continue
            lines.append(f"{k} = {_toml_value(v)}")

    for sec, val in d.items():
        if isinstance(val, list):
            for item in val:
                lines.append(f"[[{sec}]]")
                scalars(item)
                for k, sub in item.items():
                    if isinstance(sub, list) and sub and isinstance(sub[0], Mapping):
                        for s in sub:
                            lines.append(f"[[{sec}.{k}]]")
                            scalars(s)
                lines.append("")
        else:
            lines.append(f"[{sec}]")
            scalars(val)
            lines.append("")
    return "\n".join(lines)
