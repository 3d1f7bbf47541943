"""tsunamifocus: screening of coastal tsunami-energy focusing by bathymetric refraction.

Screening estimates only: not a tsunami warning, forecast or inundation map, and not for
evacuation decisions. Defer to official tsunami warning centres, local emergency management,
local codes and licensed practitioners (see CAUTIONS.md).

The public API works on xarray objects, one function per stage::

    import tsunamifocus as tf
    depth = tf.load_bathymetry("grid.nc", values="elevation")        # depth [m], positive down
    rupture = tf.Rupture([tf.FaultSegment(trace=((142.0, 36.0), (143.0, 39.5)),
                                          top_depth_km=5, dip_deg=12, width_km=150)], magnitude=8.8)
    eta = tf.uplift_on_grid(rupture, depth)                            # Okada (1985) sea surface [m]
    fan = tf.make_ray_fan(eta, depth, 20000)                           # energy-weighted rays
    rays = tf.trace_rays(depth, fan.x0, fan.y0, fan.azimuth_deg, weights=fan.weights)
    result = tf.run_scenario("scenario.toml")                          # the whole pipeline
"""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import *  # noqa: F401,F403
from .errors import __all__ as _errors_all
from .grid import GridInfo, attach_crs, get_crs, grid_info, make_grid
from .randomfield import gaussian_random_field
from .bathymetry import (
    crop_bathymetry,
    estimate_grid_memory,
    load_bathymetry,
    reference_bathymetry,
    resample_bathymetry,
    smooth_bathymetry,
)
from .speed import group_speed, phase_speed, wave_speed
from .demo import make_demo_bathymetry, write_demo_data
from .gridsummary import summarize_grid
from .okada import okada85
from .source import (
    FaultSegment,
    PointSource,
    RayFan,
    Rupture,
    SourceSummary,
    magnitude_from_moment,
    make_ray_fan,
    moment_from_magnitude,
    potential_energy,
    summarize_source,
    uplift_on_grid,
)
from .rays import RayResult, trace_rays
from .coast import coastline_from_grid, read_coastline, segment_coastline
from .focusing import FocusingResult, analyse_focusing, energy_budget, rank_segments, segment_arrivals
from .scenario import Scenario, parse_scenario
from .pipeline import RunResult, arrival_times, run_scenario
from .ensemble import EnsembleResult, run_ensemble
from .perturb import perturb_bathymetry
from .compare import compare_runs, read_run
from .wave import simulate_linear_long_wave, wave_check
from .export import write_cog, write_netcdf, write_segments
from .outputs import OutputFolder, show_versions
from .cautions import caution_text

__all__ = [
    "__version__",
    # grids and bathymetry
    "GridInfo", "attach_crs", "get_crs", "grid_info", "make_grid", "gaussian_random_field",
    "load_bathymetry", "crop_bathymetry", "resample_bathymetry", "smooth_bathymetry",
    "reference_bathymetry", "estimate_grid_memory", "summarize_grid",
    "make_demo_bathymetry", "write_demo_data",
    # speed
    "wave_speed", "phase_speed", "group_speed",
    # sources
    "okada85", "FaultSegment", "Rupture", "PointSource", "RayFan", "SourceSummary",
    "moment_from_magnitude", "magnitude_from_moment", "uplift_on_grid", "potential_energy",
    "make_ray_fan", "summarize_source",
    # rays and focusing
    "trace_rays", "RayResult", "coastline_from_grid", "read_coastline", "segment_coastline",
    "analyse_focusing", "FocusingResult", "segment_arrivals", "rank_segments", "energy_budget",
    # pipeline, ensembles, comparison, wave check
    "Scenario", "parse_scenario", "run_scenario", "RunResult", "arrival_times",
    "run_ensemble", "EnsembleResult", "perturb_bathymetry", "compare_runs", "read_run",
    "simulate_linear_long_wave", "wave_check",
    # outputs
    "write_cog", "write_netcdf", "write_segments", "OutputFolder", "show_versions", "caution_text",
    *_errors_all,
]
