"""Settings a run decides itself when the scenario leaves them out, and why.

A scenario may leave ``[rays] count`` and ``[coast] segment_km`` unset ("auto"). The run then
chooses them here, once, before any ray is traced; the numbers actually used go into the
effective scenario that the manifest, the output ``scenario.toml`` and the appendix record, so a
rerun from the manifest does exactly the same thing. Each choice carries a short reason that the
run summary prints.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import pandas as pd
import xarray as xr

from ..grid import GridInfo

__all__ = ["Choice", "DEFAULT_RAY_COUNT", "MIN_SEGMENT_KM", "SEGMENT_CELLS", "choose_segment_km",
           "choose_ray_count", "with_choices"]

#: Ray count used when the scenario gives none (until the count is derived from the problem).
DEFAULT_RAY_COUNT = 10000
#: Shortest default segment [km] and the default segment length in grid cells.
MIN_SEGMENT_KM = 10.0
SEGMENT_CELLS = 2.0


@dataclass(frozen=True)
class Choice:
    """One setting of a run: its value, where it came from and why.

    Attributes
    ----------
    value : Any
        The value used.
    origin : {"scenario", "override", "default"}
        Given in the scenario, given on the command line / API (``--rays``), or chosen by the run.
    why : str
        Short reason, printed in the run summary (empty for values taken from the scenario).
    """

    value: Any
    origin: str
    why: str = ""

    def describe(self, unit: str = "") -> str:
        """E.g. ``"20000 rays (default)"`` or ``"22 km (default: 2 grid cells of 11.1 km)"``."""
        v = f"{self.value:g}" if isinstance(self.value, float) else str(self.value)
        label = {"scenario": "from the scenario", "override": "command-line override",
                 "default": "default"}.get(self.origin, self.origin)
        return f"{v}{' ' + unit if unit else ''} ({label}{': ' + self.why if self.why else ''})"

    def to_dict(self) -> dict:
        return {"value": self.value, "origin": self.origin, "why": self.why}


def choose_segment_km(depth: xr.DataArray) -> Choice:
    """Default segment length: two cells of the grid's coarser spacing, at least 10 km.

    A segment shorter than about two grid cells cannot be told apart from its neighbours by the
    bathymetry (common practice, no source), so the default never goes below that; on fine
    grids the 10 km floor keeps segment counts and ray needs moderate.
    """
    info = GridInfo.from_dataarray(depth)
    cell_km = max(info.spacing_m()) / 1000.0
    km = max(MIN_SEGMENT_KM, SEGMENT_CELLS * cell_km)
    km = math.ceil(km * 10.0) / 10.0  # one decimal, never below two cells
    if km > MIN_SEGMENT_KM:
        why = f"{SEGMENT_CELLS:g} grid cells of {cell_km:.1f} km"
    else:
        why = f"at least {MIN_SEGMENT_KM:g} km ({SEGMENT_CELLS:g} grid cells are {SEGMENT_CELLS * cell_km:.1f} km)"
    return Choice(km, "default", why)


def choose_ray_count(scenario: Any, depth: xr.DataArray, segments: pd.DataFrame | None = None) -> Choice:
    """Ray count per source when the scenario gives none.

    The one place where the automatic ray count is decided. It receives everything a
    problem-dependent choice needs (the scenario with its sources, the grid, and the segments
    of the coast of interest) and returns the count with its reason; for now it is the fixed
    :data:`DEFAULT_RAY_COUNT`.
    """
    return Choice(DEFAULT_RAY_COUNT, "default", "")


def with_choices(scenario: Any, choices: dict[str, Choice]) -> Any:
    """The scenario with the chosen ``segment_km`` and ray count written in (the effective scenario)."""
    sc = scenario
    if "segment_km" in choices:
        sc = dataclasses.replace(sc, coast=dataclasses.replace(sc.coast, segment_km=float(choices["segment_km"].value)))
    if "rays" in choices:
        sc = dataclasses.replace(sc, rays=dataclasses.replace(sc.rays, count=int(choices["rays"].value)))
    return sc
