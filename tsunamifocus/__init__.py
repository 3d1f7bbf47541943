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

The package is layered in the order of the data flow (see DEVELOPERS.md): io, ocean, source,
propagation, coast, focusing, studies, products, cli; a layer imports only earlier ones.
"""

from __future__ import annotations

from .constants import __version__
from .errors import *  # noqa: F401,F403
from .errors import __all__ as _errors_all
from .grid import GridInfo, attach_crs, crop_bathymetry, get_crs, grid_info, make_grid, resample_bathymetry
from .cautions import caution_text
from .io.bathymetry import estimate_grid_memory, load_bathymetry
from .io.coastline import read_coastline
from .io.scenario import Scenario, parse_scenario
from .io.gis import write_cog, write_netcdf, write_segments
from .io.runfolder import OutputFolder
from .io.manifest import show_versions
from .io.runs import read_run
from .ocean.randomfield import gaussian_random_field
from .ocean.smooth import smooth_bathymetry
from .ocean.reference import reference_bathymetry
from .ocean.speed import group_speed, phase_speed, wave_speed
from .ocean.demo import make_demo_bathymetry
from .ocean.perturb import perturb_bathymetry
from .source.okada import okada85
from .source.faults import FaultSegment, PointSource, Rupture, magnitude_from_moment, moment_from_magnitude
from .source.uplift import uplift_on_grid
from .source.energy import potential_energy
from .source.rayfan import RayFan, make_ray_fan
from .source.summary import SourceSummary, summarize_source
from .source.subfaults import SubfaultRupture, rupture_from_subfaults
from .source.surface import SurfaceSource, initial_surface
from .io.subfaults import read_subfault_table
from .io.surface import read_sea_surface
from .propagation.rays import RayResult, trace_rays
from .propagation.wave import simulate_linear_long_wave
from .propagation.traveltime import TravelTimes, first_arrival_times, isochrone_lines
from .coast.coastline import coastline_from_grid
from .coast.segments import segment_coastline
from .focusing.analysis import FocusingResult, analyse_focusing
from .focusing.arrivals import segment_arrivals
from .focusing.ranking import rank_segments
from .focusing.budget import energy_budget
from .studies.inspect import summarize_grid
from .studies.run import RunResult, arrival_times
from .studies.ensemble import EnsembleResult, run_ensemble
from .studies.compare import compare_runs
from .products.check import wave_check
from .products.runfolder import run_scenario
from .products.demo import write_demo_data
from .products.sourceset import run_source_set

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
    "make_ray_fan", "summarize_source", "read_subfault_table", "rupture_from_subfaults", "SubfaultRupture",
    "read_sea_surface", "SurfaceSource", "initial_surface",
    # rays and focusing
    "trace_rays", "RayResult", "coastline_from_grid", "read_coastline", "segment_coastline",
    "analyse_focusing", "FocusingResult", "segment_arrivals", "rank_segments", "energy_budget",
    # pipeline, ensembles, comparison, wave check
    "Scenario", "parse_scenario", "run_scenario", "run_source_set", "RunResult", "arrival_times",
    "first_arrival_times", "TravelTimes", "isochrone_lines",
    "run_ensemble", "EnsembleResult", "perturb_bathymetry", "compare_runs", "read_run",
    "simulate_linear_long_wave", "wave_check",
    # outputs
    "write_cog", "write_netcdf", "write_segments", "OutputFolder", "show_versions", "caution_text",
    *_errors_all,
]
