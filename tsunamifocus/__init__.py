"""tsunamifocus: screening of coastal tsunami-energy focusing by bathymetric refraction.

Screening estimates only: not a tsunami warning, forecast or inundation map. See CAUTIONS.md.
"""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import *  # noqa: F401,F403
from .errors import __all__ as _errors_all
from .grid import GridInfo, attach_crs, get_crs, grid_info, make_grid
from .randomfield import gaussian_random_field

__all__ = [
    "__version__",
    "GridInfo",
    "attach_crs",
    "get_crs",
    "grid_info",
    "make_grid",
    "gaussian_random_field",
    *_errors_all,
]
