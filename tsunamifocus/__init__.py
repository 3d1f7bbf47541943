"""tsunamifocus: screening of coastal tsunami-energy focusing by bathymetric refraction.

Screening estimates only: not a tsunami warning, forecast or inundation map. See CAUTIONS.md.
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
    resample_bathymetry,
    smooth_bathymetry,
)
from .demo import make_demo_bathymetry, write_demo_data
from .gridsummary import summarize_grid

__all__ = [
    "__version__",
    "GridInfo",
    "attach_crs",
    "get_crs",
    "grid_info",
    "make_grid",
    "gaussian_random_field",
    "load_bathymetry",
    "crop_bathymetry",
    "resample_bathymetry",
    "smooth_bathymetry",
    "estimate_grid_memory",
    "summarize_grid",
    "make_demo_bathymetry",
    "write_demo_data",
    *_errors_all,
]
