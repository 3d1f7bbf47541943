"""Physical constants and defaults used throughout tsunamifocus (SI units)."""

from __future__ import annotations

__all__ = [
    "__version__", "GRAVITY", "EARTH_RADIUS_M", "RHO_SEAWATER", "RIGIDITY_PA", "MIN_DEPTH_M"]

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
