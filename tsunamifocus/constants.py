"""Physical constants, the package version and the one table of scenario defaults (SI units)."""

from __future__ import annotations

__all__ = [
    "__version__", "GRAVITY", "EARTH_RADIUS_M", "RHO_SEAWATER", "RIGIDITY_PA", "MIN_DEPTH_M", "DEFAULTS",
    "STOP_DEPTH_M", "SOURCE_SET_DEFAULTS"]

#: Version of the package (also in pyproject.toml).
__version__ = "0.1.0"

#: Gravitational acceleration [m s-2]. Standard textbook value used for long-wave speed
#: c = sqrt(g h); configurable wherever it is used.
GRAVITY: float = 9.81

#: Radius of the spherical Earth model [m]: the IUGG mean radius R1 = 6,371,008.8 m
#: (Moritz 2000, Geodetic Reference System 1980). Used for lon/lat grids and great circles.
EARTH_RADIUS_M: float = 6371008.8

#: Density of sea water [kg m-3] for wave energy (common practice, no source).
RHO_SEAWATER: float = 1025.0

#: Default crustal rigidity [Pa] for moment <-> slip. 40 GPa is common for shallow subduction
#: interfaces (values of 30-40 GPa are usual; 40 GPa corresponds to typical lower crust / upper
#: mantle wedge rock at interface depths of 10-40 km).
RIGIDITY_PA: float = 4.0e10

#: Default minimum depth [m] used to clamp the long-wave speed in very shallow water.
MIN_DEPTH_M: float = 1.0

#: The one table of defaults of a scenario: section -> key -> default value (SI-style units in the
#: key names). The scenario schema and its dataclasses (:mod:`tsunamifocus.io.scenario`), the
#: command-line help and the tables of docs/scenario.md (generated from the schema) all read it;
#: keys that have no fixed default (required keys, or defaults derived from other values) are absent.
DEFAULTS: dict[str, dict[str, object]] = {
    "scenario": {"description": ""},
    "bathymetry": {"values": "auto", "crop_margin_km": 0.0, "max_memory_gb": 4.0},
    "source": {"kind": "fault", "force": False, "radius_km": 50.0, "amplitude_m": 1.0},
    "source.segment": {"rake_deg": 90.0, "rigidity_pa": RIGIDITY_PA},
    "rays": {"stop_depth_m": 20.0, "max_time_h": 24.0, "seed": 0},
    "coast": {"from": "grid", "min_rays": 10, "point_max_distance_km": 25.0},
    "output": {"top_k": 10, "figures": True, "report": True, "isochrone_step_min": 30.0},
    "ensemble": {
        "members": 0, "seed": 0, "bathy_rms": 0.0, "bathy_corr_km": 20.0, "strike_deg": 0.0, "dip_deg": 0.0,
        "along_km": 0.0, "across_km": 0.0, "magnitude": 0.0, "launch_jitter_deg": 0.0, "scheduler": "local",
    },
}

#: Defaults of source-set files (:mod:`tsunamifocus.io.sourceset`): the relative weight of a member, and
#: of a ``[[sweep]]``'s ruptures (their rake is that of ``[[source.segment]]``).
SOURCE_SET_DEFAULTS: dict[str, object] = {"weight": 1.0}

#: Ray count per source: the one range, checked once where the count is given (scenario key
#: ``[rays] count``, ``--rays``): a fan needs at least 8 rays (one per launch block and half fan).
MIN_RAYS: int = 8
MAX_RAYS: int = 100_000_000
#: Rotated copies of a ray fan (``[rays] rotations``): the one range.
MAX_ROTATIONS: int = 16
#: Fan rotations a run traces when its rays are past their predictability (``[rays] rotations``
#: auto; measured in docs/focusing.md and tsunamifocus.focusing.ranking).
ROTATIONS_PAST_PREDICTABILITY: int = 4

#: Work-size limits, checked before the work starts (errors.check_work), like the memory limit:
#: coastline segments of one segmentation, and cell updates (wet cells x time steps) of one run of the
#: linear long-wave solver (``check --force`` lifts the latter).
WORK_LIMITS: dict[str, float] = {"segments": 100_000, "wave_cell_updates": 2e11}

#: Default stop isobath [m]: rays end, and the wave check's coast lies, where the depth falls below it.
STOP_DEPTH_M: float = float(DEFAULTS["rays"]["stop_depth_m"])  # type: ignore[arg-type]
